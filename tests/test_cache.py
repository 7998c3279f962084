"""The disk cache of generated code: used when present, safe against corruption and concurrent writers."""

import json
import threading

import pytest

import bvpkit
from bvpkit import codegen


@pytest.fixture()
def cache(tmp_path, monkeypatch):
    monkeypatch.setenv(codegen.CACHE_VARIABLE, str(tmp_path))
    codegen._MEMORY.clear()
    yield tmp_path
    codegen._MEMORY.clear()


def _problem(k=3.0):
    return bvpkit.Problem(["y'' = k*y"], ["y(0) = 1", "y(1) = 0"], (0, 1), constants={"k": k})


def test_second_compile_reads_the_disk_instead_of_generating(cache, monkeypatch):
    codegen.compile_system(_problem().system)
    files = list(cache.glob("system-*.json"))
    assert len(files) == 1
    codegen._MEMORY.clear()
    monkeypatch.setattr(codegen, "_system_source", lambda system: pytest.fail("regenerated despite the cache"))
    compiled = codegen.compile_system(_problem().system)
    sol = bvpkit.solve(_problem())
    assert sol.success and compiled.n == 2


@pytest.mark.parametrize("damage", ["truncate", "garbage", "tamper"])
def test_a_corrupted_cache_file_is_regenerated(cache, damage):
    codegen.compile_system(_problem().system)
    path = next(cache.glob("system-*.json"))
    text = path.read_text()
    if damage == "truncate":
        path.write_text(text[: len(text) // 2])
    elif damage == "garbage":
        path.write_bytes(b"\x00\xff not json")
    else:
        data = json.loads(text)
        data["source"] = data["source"].replace("out[1]", "out[0]")  # checksum no longer matches
        path.write_text(json.dumps(data))
    codegen._MEMORY.clear()
    sol = bvpkit.solve(_problem())
    assert sol.success
    assert json.loads(path.read_text())["sha256"]  # rewritten whole


def test_concurrent_writers_leave_one_valid_file(cache):
    system = _problem().system
    source, pattern = codegen._system_source(system)
    threads = [threading.Thread(target=codegen._write_cache, args=(system.key(), source, pattern, codegen._bc_sides(system))) for _ in range(8)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert [p.name for p in cache.iterdir() if p.name.startswith(".")] == []  # no temporary files left
    assert codegen._read_cache(system.key())[0] == source


def test_cache_can_be_turned_off(tmp_path, monkeypatch):
    monkeypatch.setenv(codegen.CACHE_VARIABLE, "off")
    codegen._MEMORY.clear()
    assert bvpkit.solve(_problem(2.0)).success
    assert not any(tmp_path.iterdir())
