"""The disk cache of generated code: used when present, safe against corruption and concurrent writers."""

import json
import threading

import pytest

import bvpkit
from bvpkit.io.specfile import read_spec
from bvpkit.programs import codegen


@pytest.fixture()
def cache(tmp_path, monkeypatch):
    from bvpkit.reduce import prepared

    monkeypatch.setenv(codegen.CACHE_VARIABLE, str(tmp_path))
    codegen._MEMORY.clear()
    prepared._PREPARED.clear()  # prepared problems hold their code in memory; start from the disk
    yield tmp_path
    codegen._MEMORY.clear()
    prepared._PREPARED.clear()


def _problem(k=3.0):
    return bvpkit.Problem(["y'' = k*y"], ["y(0) = 1", "y(1) = 0"], (0, 1), constants={"k": k})


def _form(k=3.0):
    from bvpkit.reduce.form import standard_form

    return standard_form(_problem(k))


def test_second_compile_reads_the_disk_instead_of_generating(cache, monkeypatch):
    codegen.compile_system(_form())
    files = list(cache.glob("system-*.json"))
    assert len(files) == 1
    codegen._MEMORY.clear()
    monkeypatch.setattr(codegen, "_system_programs", lambda system: pytest.fail("regenerated despite the cache"))
    compiled = codegen.compile_system(_form())
    sol = bvpkit.solve(_problem())
    assert sol.success and compiled.n == 2


@pytest.mark.parametrize("damage", ["truncate", "garbage", "tamper"])
def test_a_corrupted_cache_file_is_regenerated(cache, damage):
    codegen.compile_system(_form())
    path = next(cache.glob("system-*.json"))
    text = path.read_text()
    if damage == "truncate":
        path.write_text(text[: len(text) // 2])
    elif damage == "garbage":
        path.write_bytes(b"\x00\xff not json")
    else:
        data = json.loads(text)
        data["body"]["programs"][0]["entries"][0][1] = 0  # checksum no longer matches
        path.write_text(json.dumps(data))
    codegen._MEMORY.clear()
    sol = bvpkit.solve(_problem())
    assert sol.success
    assert json.loads(path.read_text())["signature"]  # rewritten whole


def test_concurrent_writers_leave_one_valid_file(cache):
    system = _form()
    programs, pattern = codegen._system_programs(system)
    threads = [threading.Thread(target=codegen.write_cache, args=(system.key(), programs, pattern, codegen._bc_sides(system))) for _ in range(8)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert [p.name for p in cache.iterdir() if p.name.startswith(".")] == []  # no temporary files left
    assert codegen.read_cache(system.key())[0] == programs


def test_cache_can_be_turned_off(tmp_path, monkeypatch):
    monkeypatch.setenv(codegen.CACHE_VARIABLE, "off")
    codegen._MEMORY.clear()
    assert bvpkit.solve(_problem(2.0)).success
    assert not any(tmp_path.iterdir())


# -- keys by exact content: numbers that print alike to 15 digits are different problems ----

def _kink(level):
    return bvpkit.Problem([f"y'' = 1e15*(max({level}, y) - 1)"], ["y(0) = 0", "y(1) = 0"], (0, 1))


@pytest.mark.parametrize("order", [("1.0000000000000049", "1.0"), ("1.0", "1.0000000000000049")])
def test_numbers_equal_to_fifteen_digits_do_not_share_compiled_code(monkeypatch, order):
    import sympy as sp

    from bvpkit.reduce import prepared

    monkeypatch.setenv(codegen.CACHE_VARIABLE, "off")
    codegen._MEMORY.clear()
    prepared._PREPARED.clear()
    found = {}
    for level in order:
        sol = bvpkit.solve(_kink(level))
        found[level] = sol
    # analytic: with level 1.0, y'' = 0 wherever y < 1 and both ends are 0, so y = 0
    assert found["1.0"].success
    assert abs(found["1.0"].evaluate("y", 0.5)) < 1e-12
    # with level 1 + 22*2**-52, y'' is a positive constant below the level: y(1/2) < 0
    # (analytic: y = c x (x - 1)/2 with c = 1e15*(level - 1) > 0, as rounded by the code)
    assert found["1.0000000000000049"].evaluate("y", 0.5) < -0.5
    # the same in SymPy input, where the text shown is the same 15 digits
    x = sp.Symbol("x")
    y = sp.Function("y")(x)
    forms = [bvpkit.Problem([sp.Eq(y.diff(x, 2), sp.Float(1e15) * (sp.Max(sp.Float(c), y) - 1))],
                            ["y(0) = 0", "y(1) = 0"], (0, 1)) for c in (1.0000000000000049, 1.0)]
    assert forms[0].equation_text == forms[1].equation_text
    assert forms[0].key() != forms[1].key()
    assert abs(bvpkit.solve(forms[1]).evaluate("y", 0.5)) < 1e-12  # analytic: y = 0, as above


# -- prepared problems: a second `bvpkit solve` of the same spec without SymPy ------------

SPECS = sorted(p.name for p in (__import__("pathlib").Path(__file__).parents[1] / "specs").glob("*.toml"))
_WARM = """
import sys
from bvpkit.io.cli import main
specs, extra = sys.argv[1].split(","), sys.argv[2:]
codes = []
for spec in specs:
    print("=== " + spec, flush=True)
    codes.append(main(["solve", spec, *extra]))
print("=== codes", *codes)
print("imported sympy:", "sympy" in sys.modules, "pydantic:", "pydantic" in sys.modules)
"""


def _run_all(specs, cache, *extra):
    """``bvpkit solve`` of each spec in turn, in one fresh process (one start-up for them all):
    {spec: (exit code, lines of its summary but the one ending in the seconds taken)}, and the
    line saying whether SymPy and pydantic were imported."""
    import os
    import subprocess
    import sys
    from pathlib import Path

    root = Path(__file__).parents[1]
    env = {**os.environ, codegen.CACHE_VARIABLE: str(cache)}
    paths = ",".join(str(root / "specs" / spec) for spec in specs)
    done = subprocess.run([sys.executable, "-c", _WARM, paths, *extra], capture_output=True, text=True, env=env,
                          cwd=cache, timeout=600)
    assert done.returncode == 0, done.stderr[-2000:]
    *body, codes, imported = done.stdout.splitlines()
    chunks, current = {}, None
    for line in body:
        if line.startswith("=== "):
            current = Path(line[4:]).name
            chunks[current] = []
        elif not line.endswith(" s"):  # the last line of a summary ends with the seconds taken
            chunks[current].append(line)
    return {spec: (int(code), chunks[spec]) for spec, code in zip(specs, codes.split()[2:])}, imported


def _run(spec, cache, *extra):
    results, imported = _run_all([spec], cache, *extra)
    code, lines = results[spec]
    return code, lines, imported


def test_a_second_solve_of_every_spec_imports_no_sympy_and_prints_the_same(tmp_path):
    first, imported1 = _run_all(SPECS, tmp_path)
    assert imported1 == "imported sympy: True pydantic: True"  # the first run prepares the problems
    assert len(list(tmp_path.glob("problem-*.json"))) == len(SPECS)
    second, imported2 = _run_all(SPECS, tmp_path)
    assert imported2 == "imported sympy: False pydantic: False"  # not one of them needed SymPy again
    for spec in SPECS:
        assert second[spec] == first[spec], spec
        assert first[spec][0] == 0 and first[spec][1], spec


def test_a_set_value_makes_a_different_prepared_problem(tmp_path):
    _run("cantilever_shelf.toml", tmp_path)
    code, lines, imported = _run("cantilever_shelf.toml", tmp_path, "--set", "q=3000")
    assert imported.startswith("imported sympy: True")  # a new key: prepared afresh
    assert len(list(tmp_path.glob("problem-*.json"))) == 2
    code, again, imported = _run("cantilever_shelf.toml", tmp_path, "--set", "q=3000")
    assert imported.startswith("imported sympy: False") and again == lines


def test_a_prepared_problem_solves_like_the_original_and_builds_sympy_on_demand(cache):
    from bvpkit.io import kept
    from bvpkit.reduce import prepared

    spec = __import__("pathlib").Path(__file__).parents[1] / "specs" / "cantilever_shelf.toml"
    original = bvpkit.load(spec)
    expected = bvpkit.solve(original)
    text = read_spec(spec)
    key = kept.spec_key(text, {})
    kept.remember(key, bvpkit.prepare(original), text, {})
    codegen._MEMORY.clear()
    prepared._PROBLEMS.clear()
    light = kept.cached(key, text, {})
    assert isinstance(light, bvpkit.Prepared)
    solution = bvpkit.solve(light)
    assert solution.outputs == expected.outputs
    assert not prepared._PROBLEMS  # solved and its outputs evaluated from plain data
    # a question the cache does not cover builds the symbolic problem, and answers alike
    assert solution.evaluate("w''(0.3)") == pytest.approx(expected.evaluate("w''(0.3)"), rel=1e-12)
    assert prepared._PROBLEMS
    # with_constants on the rebuilt problem does not reuse point values of the old constants
    longer = kept.cached(key, text, {}).with_constants(L=1.5)
    assert bvpkit.solve(longer).outputs["tip_deflection_m"] == pytest.approx(
        bvpkit.solve(original.with_constants(L=1.5)).outputs["tip_deflection_m"], rel=1e-10)


@pytest.mark.parametrize("damage", ["truncate", "tamper"])
def test_a_damaged_prepared_problem_is_ignored(cache, damage):
    from bvpkit.io import kept

    spec = __import__("pathlib").Path(__file__).parents[1] / "specs" / "pin_fin.toml"
    text = read_spec(spec)
    key = kept.spec_key(text, {})
    problem = bvpkit.load(spec)
    bvpkit.solve(problem)
    kept.remember(key, bvpkit.prepare(problem), text, {})
    path = next(cache.glob("problem-*.json"))
    text = path.read_text()
    if damage == "truncate":
        path.write_text(text[: len(text) // 3])
    else:
        data = json.loads(text)
        data["body"]["prepared"]["facts"]["title"] = "changed"  # the checksum no longer matches
        path.write_text(json.dumps(data))
    assert kept.cached(key, text, {}) is None


def test_importing_bvpkit_imports_no_sympy():
    import subprocess
    import sys

    code = "import sys, bvpkit; bvpkit.Status; print('sympy' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120).stdout.strip()
    assert out == "False"


def test_the_cache_keeps_only_the_newest_files_of_a_kind(cache, monkeypatch):
    import os
    import time

    from bvpkit.programs import compiled

    monkeypatch.setattr(compiled, "CACHE_KEEP", 3)
    for i in range(5):
        compiled.write_atomically(cache / f"problem-{i}-x.json", "{}")
        os.utime(cache / f"problem-{i}-x.json", (time.time() - 100 + i, time.time() - 100 + i))
    compiled.write_atomically(cache / "system-a-x.json", "{}")
    assert sorted(p.name for p in cache.glob("problem-*.json")) == ["problem-2-x.json", "problem-3-x.json",
                                                                    "problem-4-x.json"]
    assert (cache / "system-a-x.json").exists()  # other kinds are counted apart


def test_public_names_survive_importing_their_modules_first():
    import subprocess
    import sys

    code = ("import bvpkit.families.sweep, bvpkit.families.continuation, bvpkit.solver.driver, bvpkit; "
            "print(callable(bvpkit.sweep), callable(bvpkit.trace), callable(bvpkit.solve))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120).stdout.strip()
    assert out == "True True True"
