"""``python -m benchmarks`` prints its tables and writes a file only when one is named: a run
never rewrites the tracked benchmarks/RESULTS.md unless asked to."""

from __future__ import annotations

from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
benchmarks_main = pytest.importorskip("benchmarks.__main__")
harness = pytest.importorskip("benchmarks.harness")


def _fake_suite(monkeypatch):  # noqa: ANN001, ANN202
    def tiny():  # noqa: ANN202 - a section as the real ones return it: Markdown text
        return "### tiny\n\n| run | time (s) |\n| --- | --- |\n| a | 1.00 |\n"

    monkeypatch.setattr(benchmarks_main, "SUITES", [tiny])


def test_a_run_prints_and_writes_nothing(monkeypatch, capsys, tmp_path):
    _fake_suite(monkeypatch)
    results = ROOT / "benchmarks" / "RESULTS.md"
    before = results.read_bytes() if results.exists() else None
    monkeypatch.chdir(tmp_path)
    benchmarks_main.main([])
    assert "### tiny" in capsys.readouterr().out
    assert (results.read_bytes() if results.exists() else None) == before
    assert list(tmp_path.iterdir()) == []


def test_a_named_file_gets_the_run_at_its_top(monkeypatch, capsys, tmp_path):
    _fake_suite(monkeypatch)
    out = tmp_path / "mine.md"
    benchmarks_main.main(["--out", str(out)])
    benchmarks_main.main(["tiny", "--out", str(out)])
    text = out.read_text()
    assert text.startswith(harness.RESULTS_HEADING + "\n\n## Run of ")
    assert text.count("## Run of ") == 2 and text.count("### tiny") == 2


def test_an_unknown_section_or_folder_is_refused_before_running(monkeypatch, capsys, tmp_path):
    _fake_suite(monkeypatch)
    with pytest.raises(SystemExit):
        benchmarks_main.main(["tinny"])
    assert "unknown section 'tinny'; the sections are: tiny" in capsys.readouterr().err
    with pytest.raises(SystemExit):
        benchmarks_main.main(["--out", str(tmp_path / "no" / "such.md")])
    assert "does not exist" in capsys.readouterr().err
