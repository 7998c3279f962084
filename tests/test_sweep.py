"""Sweeps: local processes, a real Dask cluster on loopback, kill-and-resume, failed points."""

import json
import math
import os
import signal
import sqlite3
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import numpy as np
import pytest

import bvpkit
from bvpkit.io.cli import main

ROOT = Path(__file__).resolve().parent.parent


def pellet():
    return bvpkit.Problem(["c'' + (2/r)*c' = phi**2*c"], ["c'(0) = 0", "c'(1) = Bi*(1 - c(1))"], (0, 1),
                          independent="r", constants={"phi": 1.0, "Bi": 10.0},
                          outputs={"effectiveness": "3*c'(1)/phi**2"})


def analytic(phi, bi):
    # analytic: sphere with film resistance, eta = 3 f / (phi^2 (1 + f/Bi)), f = phi coth(phi) - 1
    f = phi / math.tanh(phi) - 1
    return 3 * f / (phi**2 * (1 + f / bi))


GRID = {"phi": np.geomspace(0.2, 50, 12), "Bi": [2.0, 20.0]}


def _values(result):
    return [(r["phi"], r["Bi"], r["effectiveness"], r["success"]) for r in result.table]


def test_serial_sweep_is_in_grid_order_and_matches_the_formula():
    result = bvpkit.sweep(pellet(), GRID, executor="serial", tol=1e-8)
    assert result.success and result.solved == 24 and len(result.table) == 24
    assert [r["phi"] for r in result.table[:12]] == pytest.approx(list(GRID["phi"]))  # the first key is fastest
    for r in result.table:
        assert r["effectiveness"] == pytest.approx(analytic(r["phi"], r["Bi"]), rel=1e-6)
        assert r["method"] and r["error_estimate"] <= 1e-8


def test_local_process_pool_gives_the_same_table():
    serial = bvpkit.sweep(pellet(), GRID, executor="serial", tol=1e-8, chunk=4)
    pooled = bvpkit.sweep(pellet(), GRID, workers=2, tol=1e-8, chunk=4)
    assert _values(pooled) == _values(serial)


@pytest.mark.extra
def test_dask_local_cluster_on_loopback_gives_the_same_table():
    distributed = pytest.importorskip("distributed")
    serial = bvpkit.sweep(pellet(), GRID, executor="serial", tol=1e-8, chunk=4)
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, host="127.0.0.1", dashboard_address=None,
                                  processes=True) as cluster, distributed.Client(cluster) as client:
        result = bvpkit.sweep(pellet(), GRID, executor=client, tol=1e-8, chunk=4)
    assert _values(result) == _values(serial)


SCRIPT = textwrap.dedent(
    """
    import sys, numpy as np, bvpkit
    p = bvpkit.Problem(["c'' + (2/r)*c' = phi**2*c"], ["c'(0) = 0", "c'(1) = Bi*(1 - c(1))"], (0, 1),
                       independent="r", constants={"phi": 1.0, "Bi": 10.0},
                       outputs={"effectiveness": "3*c'(1)/phi**2"})
    grid = {"phi": np.geomspace(0.2, 50, 40), "Bi": [2.0, 20.0, 200.0]}
    bvpkit.sweep(p, grid, store=sys.argv[1], executor="serial", tol=1e-8, chunk=2)
    """
)


def test_a_sweep_killed_mid_run_resumes_to_exactly_the_clean_table(tmp_path):
    store = tmp_path / "run.sqlite"
    script = tmp_path / "sweep_script.py"
    script.write_text(SCRIPT)
    child = subprocess.Popen([sys.executable, str(script), str(store)], env={**os.environ})
    stored = 0
    deadline = time.time() + 120
    while time.time() < deadline and child.poll() is None:
        if store.exists():
            try:
                with sqlite3.connect(store, timeout=5) as db:
                    stored = db.execute("SELECT COUNT(*) FROM points").fetchone()[0]
            except sqlite3.Error:
                stored = 0
            if stored >= 10:
                break
        time.sleep(0.02)
    child.send_signal(signal.SIGKILL)
    child.wait()
    assert 0 < stored < 120, "the sweep was not caught mid-run"
    grid = {"phi": np.geomspace(0.2, 50, 40), "Bi": [2.0, 20.0, 200.0]}
    resumed = bvpkit.sweep(pellet(), grid, store=store, executor="serial", tol=1e-8, chunk=2)
    clean = bvpkit.sweep(pellet(), grid, store=tmp_path / "clean.sqlite", executor="serial", tol=1e-8, chunk=2)
    assert resumed.reused >= stored and resumed.solved == 120 - resumed.reused
    assert resumed.table == clean.table  # nothing lost, nothing duplicated, the same numbers
    with sqlite3.connect(store) as db:
        assert db.execute("SELECT COUNT(*) FROM points").fetchone()[0] == 120


def test_failed_points_are_stored_and_retried_only_when_asked(tmp_path):
    # Bratu has no solution beyond its fold at lam = 3.5138 (analytic)
    bratu = bvpkit.Problem(["y'' + lam*exp(y) = 0"], ["y(0) = 0", "y(1) = 0"], (0, 1), constants={"lam": 1.0})
    grid = {"lam": [1.0, 2.0, 3.0, 4.0]}  # one point past the fold: each failed solve costs seconds
    store = tmp_path / "bratu.sqlite"
    first = bvpkit.sweep(bratu, grid, outputs=["y'(0)"], store=store, executor="serial")
    assert first.failed == 1 and not first.success
    failed = [r for r in first.table if not r["success"]]
    assert all(r["message"] for r in failed) and {r["lam"] for r in failed} == {4.0}
    again = bvpkit.sweep(bratu, grid, outputs=["y'(0)"], store=store, executor="serial")
    assert again.solved == 0 and again.reused == 4
    retried = bvpkit.sweep(bratu, grid, outputs=["y'(0)"], store=store, executor="serial", retry_failed=True)
    assert retried.solved == 1


def test_sweep_checks_its_arguments():
    with pytest.raises(bvpkit.OptionError, match="not a constant .*did you mean 'phi'"):
        bvpkit.sweep(pellet(), {"ph": [1.0]})
    with pytest.raises(bvpkit.OptionError, match="finite"):
        bvpkit.sweep(pellet(), {"phi": [1.0, float("nan")]})
    with pytest.raises(bvpkit.OptionError, match="executor must be"):
        bvpkit.sweep(pellet(), {"phi": [1.0]}, executor=object())


def test_cli_sweep_from_the_bundled_spec(tmp_path, capsys):
    spec = ROOT / "specs/pellet_design_chart.toml"
    store, table = tmp_path / "chart.sqlite", tmp_path / "chart.csv"
    assert main(["sweep", str(spec), "--store", str(store), "--csv", str(table), "--serial", "--quiet"]) == 0
    out = capsys.readouterr().out
    assert "300 points: 300 solved now" in out
    assert len(table.read_text().splitlines()) == 301
    assert main(["sweep", str(spec), "--store", str(store), "--json", "--serial"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["message"].startswith("300 points: 0 solved now, 300 from the store")
    row = data["table"][0]
    assert row["effectiveness"] == pytest.approx(analytic(row["phi"], row["Bi"]), rel=1e-5)


def test_a_worker_rebuilds_the_problem_without_sympy(tmp_path, monkeypatch):
    # the unit a worker gets, solved in a fresh process: same rows as here, SymPy never imported
    import importlib
    import pickle

    from bvpkit.programs import codegen

    sweep_module = importlib.import_module("bvpkit.families.sweep")  # bvpkit.sweep is the function

    monkeypatch.setenv(codegen.CACHE_VARIABLE, str(tmp_path / "cache"))
    units = []
    real = sweep_module._run

    def keep(units_, *args, **kwargs):  # noqa: ANN001, ANN202
        units.extend(units_)
        return real(units_, *args, **kwargs)

    monkeypatch.setattr(sweep_module, "_run", keep)
    result = bvpkit.sweep(pellet(), {"phi": [0.5, 2.0, 8.0], "Bi": [10.0]}, executor="serial")
    assert result.success and units and units[0].prepared is not None
    (tmp_path / "unit.pickle").write_bytes(pickle.dumps(units[0]))
    script = textwrap.dedent(f"""
        import pickle, sys
        from bvpkit.families.sweep import _solve_unit
        rows = _solve_unit(pickle.loads(open({str(tmp_path / "unit.pickle")!r}, "rb").read()))
        print(repr([round(r["outputs"]["3*c'(1)/phi**2"], 12) for r in rows]), "sympy" in sys.modules)
    """)
    env = {**os.environ, codegen.CACHE_VARIABLE: str(tmp_path / "cache"), "PYTHONPATH": str(ROOT)}
    out = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True, env=env, timeout=300)
    values, imported = out.stdout.rsplit(" ", 1)
    assert imported.strip() == "False", out.stderr
    expected = [round(r["effectiveness"], 12) for r in result.table]
    assert eval(values) == expected  # noqa: S307 - our own repr of a list of floats


def _slab():
    # analytic: c'' = phi**2 c, c(0) = 1, c(1) = 0 gives c'(0) = -phi coth(phi)
    return bvpkit.Problem(["c'' = phi**2*c"], ["c(0) = 1", "c(1) = 0"], (0, 1), constants={"phi": 1.0},
                          outputs={"flux": "c'(0)"})


def test_stored_rows_are_checked_and_a_bad_one_is_solved_again_with_a_note(tmp_path, monkeypatch, caplog):
    """Rows of a store are checked as cache entries are: an edited value, a row of {} or a list,
    a row without status, a row moved to another point: each solved again, with one note."""
    import logging

    monkeypatch.setenv("BVPKIT_CACHE_DIR", str(tmp_path / "cache"))
    store = tmp_path / "slab.sqlite"
    grid = {"phi": [0.5, 1.0, 1.5, 2.0, 2.5, 3.0]}
    first = bvpkit.sweep(_slab(), grid, store=store, executor="serial")
    assert first.solved == 6
    with sqlite3.connect(store) as db:
        rows = dict(db.execute("SELECT point, row FROM points").fetchall())
        points = sorted(rows)
        edited = json.loads(rows[points[0]])
        edited["outputs"]["c'(0)"] = 42.0  # the signature of the row no longer fits
        no_status = {k: v for k, v in json.loads(rows[points[3]]).items() if k != "status"}
        for point, text in [(points[0], json.dumps(edited)), (points[1], "{}"), (points[2], "[1, 2]"),
                            (points[3], json.dumps(no_status)), (points[4], rows[points[5]])]:
            db.execute("UPDATE points SET row = ? WHERE point = ?", (text, point))
    from bvpkit.programs import compiled

    compiled._NOTED.clear()
    with caplog.at_level(logging.WARNING, logger="bvpkit.cache"):
        again = bvpkit.sweep(_slab(), grid, store=store, executor="serial")
    assert again.solved == 5 and again.reused == 1
    notes = [r.getMessage() for r in caplog.records if r.name == "bvpkit.cache"]
    assert len(notes) == 1 and "5 stored points skipped" in notes[0], notes
    for row in again.table:  # analytic, as above
        assert row["success"] and row["flux"] == pytest.approx(-row["phi"] / math.tanh(row["phi"]), rel=1e-6)
    third = bvpkit.sweep(_slab(), grid, store=store, executor="serial")  # the store is whole again
    assert third.solved == 0 and third.reused == 6
