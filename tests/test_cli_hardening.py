"""The command line under pressure: Ctrl-C at any moment, closed pipes, output paths swapped
during a solve, bad stores and pictures refused before any work, sweep workers that never
outlive their parent, and sweeps from a plain script (issues 16 and 17)."""

import json
import os
import signal
import sqlite3
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import pytest

import bvpkit
from bvpkit.io.cli import PLOT_INSTALL, main

ROOT = Path(__file__).resolve().parent.parent
SPECS = sorted((ROOT / "specs").glob("*.toml"))
GOOD = """
title = "test"
[problem]
domain = [0, 1]
equations = ["y'' = -y"]
conditions = ["y(0) = 0", "y'(0) = 1"]
"""
NO_SOLUTION = """
title = "no solution beyond the fold"
[problem]
domain = [0, 1]
equations = ["y'' + lam*exp(y) = 0"]
conditions = ["y(0) = 0", "y(1) = 0"]
constants = { lam = 5.0 }
"""


def _command() -> list[str]:
    """The console script as installed beside this Python, else ``python -m bvpkit``."""
    script = Path(sys.executable).parent / "bvpkit"
    return [str(script)] if script.exists() else [sys.executable, "-m", "bvpkit"]


def _env(tmp_path: Path) -> dict[str, str]:
    return {**os.environ, "BVPKIT_CACHE_DIR": str(tmp_path / "cache")}


# -- Ctrl-C ----------------------------------------------------------------------------------
@pytest.mark.parametrize("delay", [0.1, 0.2, 0.5])
def test_ctrl_c_early_in_a_solve_gives_130_and_json(delay, tmp_path):
    # 0.1 s and later: after Python's own start-up (about 0.05 s here), which no program can
    # take over; from there on, during imports, parsing or the solve, the answer is ours
    child = subprocess.Popen([*_command(), "solve", str(ROOT / "specs/plate_boundary_layer.toml"), "--json"],
                             stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=_env(tmp_path))
    time.sleep(delay)
    child.send_signal(signal.SIGINT)
    out, err = child.communicate(timeout=120)
    data = json.loads(out)
    assert "Traceback" not in err and err.count("\n") <= 1, err
    if child.returncode == 0:
        assert data["status"] == "solved"  # it was faster than the interrupt
    else:
        assert child.returncode == 130 and data["status"] == "interrupted" and data["success"] is False


def test_ctrl_c_in_text_mode_is_one_line(tmp_path):
    child = subprocess.Popen([*_command(), "solve", str(ROOT / "specs/plate_boundary_layer.toml")],
                             stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=_env(tmp_path))
    time.sleep(0.3)
    child.send_signal(signal.SIGINT)
    out, err = child.communicate(timeout=120)
    if child.returncode != 0:
        assert child.returncode == 130 and err == "bvpkit: interrupted: stopped by Ctrl-C before anything was finished to keep\n"


def test_an_interrupted_trace_reports_status_interrupted_with_what_it_kept(tmp_path):
    child = subprocess.Popen([*_command(), "trace", str(ROOT / "specs/reacting_slab_ignition.toml"), "--json"],
                             stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=_env(tmp_path))
    time.sleep(3.0)
    child.send_signal(signal.SIGINT)
    out, err = child.communicate(timeout=120)
    data = json.loads(out)
    if child.returncode != 0:
        assert child.returncode == 130 and data["status"] == "interrupted", data["status"]
        assert len(data["parameter"]) == len(data["steps"]) and "Traceback" not in err


def test_an_interrupted_sweep_reports_what_was_finished(tmp_path):
    store = tmp_path / "chart.sqlite"
    child = subprocess.Popen([*_command(), "sweep", str(ROOT / "specs/pellet_design_chart.toml"), "--json",
                              "--workers", "2", "--store", str(store)], stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                             text=True, env=_env(tmp_path), start_new_session=True)
    deadline = time.time() + 120
    while time.time() < deadline and child.poll() is None:
        try:
            with sqlite3.connect(store, timeout=5) as db:
                if db.execute("SELECT COUNT(*) FROM points").fetchone()[0] >= 25:
                    break
        except sqlite3.Error:
            pass
        time.sleep(0.05)
    os.killpg(child.pid, signal.SIGINT)  # as a terminal's Ctrl-C: the whole process group
    out, err = child.communicate(timeout=120)
    data = json.loads(out)
    assert err == "", err  # no worker prints a traceback
    if child.returncode != 0:
        assert child.returncode == 130 and data["status"] == "interrupted" and "interrupted" in data["message"]
        assert 25 <= len(data["table"]) < 300 and all(row["success"] for row in data["table"])


# -- exit codes through a closed pipe --------------------------------------------------------
def test_the_exit_code_survives_a_reader_that_went_away(tmp_path):
    spec = tmp_path / "fail.toml"
    spec.write_text(NO_SOLUTION)
    alone = subprocess.run([*_command(), "solve", str(spec)], capture_output=True, text=True, env=_env(tmp_path),
                           timeout=120)
    assert alone.returncode not in (0, 2, 70)  # the solve's own failure
    child = subprocess.Popen([*_command(), "solve", str(spec)], stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                             env=_env(tmp_path))
    child.stdout.close()  # as `| true`: the reader is gone before anything is written
    err = child.stderr.read().decode()
    child.stderr.close()
    assert child.wait(timeout=120) == alone.returncode
    assert "Traceback" not in err and "BrokenPipe" not in err


# -- output paths ----------------------------------------------------------------------------
_SPEC_ERRORS = """
import sys
from bvpkit.io.cli import main
runs = [line.split("\t") for line in sys.argv[1].splitlines()]
codes = [main(run) for run in runs[:int(sys.argv[2])]]
print("heavy before parsing:", [m for m in ("sympy", "pydantic", "scipy.sparse") if m in sys.modules])
codes += [main(run) for run in runs[int(sys.argv[2]):]]
print("codes:", *codes)
"""


def test_specs_that_cannot_be_read_or_evaluated_are_one_error_each(tmp_path):
    """A device, a FIFO (no writer: a reader would wait for ever), a 50 MB file: refused as they
    are opened, before anything heavy is imported (under a second, without a clock in the
    test); then constants SymPy cannot evaluate: one error each, exit 2, in check too."""
    fifo = tmp_path / "fifo.toml"
    os.mkfifo(fifo)
    big = tmp_path / "big.toml"
    with open(big, "wb") as handle:
        handle.truncate(50 * 2**20)
    runs = [[command, str(path)] for command in ("solve", "check", "trace", "sweep", "fold-curve")
            for path in ("/dev/zero", big, fifo, tmp_path)]
    unreadable = len(runs)
    for text in ("erfc(1e300)*y", "min(y, acos(2))"):
        spec = tmp_path / f"spec{len(runs)}.toml"
        spec.write_text(GOOD.replace("-y", text))
        runs += [["check", str(spec)], ["solve", str(spec)], ["solve", "--json", str(spec)]]
    done = subprocess.run([sys.executable, "-c", _SPEC_ERRORS, "\n".join("\t".join(r) for r in runs), str(unreadable)],
                          capture_output=True, text=True, env=_env(tmp_path), cwd=tmp_path, timeout=120)
    out = done.stdout.splitlines()
    assert "heavy before parsing: []" in out
    assert out[-1] == "codes: " + " ".join(["2"] * len(runs))
    lines = done.stderr.splitlines()
    assert len(lines) == len(runs) - 2 and all(line.startswith("bvpkit: bad_input: ") for line in lines), lines
    assert sum("not a regular file" in line for line in lines) == 10
    assert sum("limited to 1000000" in line for line in lines) == 5
    assert sum("is a folder" in line for line in lines) == 5
    assert sum("cannot be evaluated" in line for line in lines) == 4
    reports = [json.loads(line) for line in out if line.startswith("{")]
    assert [r["status"] for r in reports] == ["bad_input", "bad_input"]


@pytest.mark.skipif(not os.path.exists("/dev/full"), reason="needs /dev/full")
@pytest.mark.parametrize("argv", [["solve", "--json"], ["solve"], ["check", "--json"]])
def test_a_full_standard_output_is_one_line_and_exit_2(argv, tmp_path):
    spec = tmp_path / "good.toml"
    spec.write_text(GOOD)
    with open("/dev/full", "w") as full:
        done = subprocess.run([*_command(), *argv, str(spec)], stdout=full, stderr=subprocess.PIPE, text=True,
                              env=_env(tmp_path), cwd=tmp_path, timeout=120)
    assert done.returncode == 2
    assert done.stderr == "bvpkit: bad_input: cannot write the standard output: No space left on device\n"


def test_a_folder_swapped_for_a_link_during_the_solve_cannot_redirect_a_save_file(tmp_path, monkeypatch, capsys):
    import bvpkit.solver.driver as driver

    work, outside = tmp_path / "work", tmp_path / "outside"
    work.mkdir()
    outside.mkdir()
    (work / "out").mkdir()
    monkeypatch.chdir(work)
    spec = work / "s.toml"
    spec.write_text(GOOD + '[save]\nsolution_csv = "out/y.csv"\nreport_json = "out/y.json"\n')
    real = driver.solve

    def swapping(*args, **kwargs):  # noqa: ANN002, ANN003, ANN202
        (work / "out").rename(work / "was-out")
        (work / "out").symlink_to(outside, target_is_directory=True)
        return real(*args, **kwargs)

    monkeypatch.setattr(driver, "solve", swapping)
    assert main(["solve", str(spec)]) == bvpkit.Status.BAD_INPUT.exit_code
    err = capsys.readouterr().err
    assert err.startswith("bvpkit: bad_input: ") and err.count("\n") == 1 and "symbolic link" in err
    assert list(outside.iterdir()) == []


def test_save_files_are_written_where_the_spec_says(tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "out").mkdir()
    spec = tmp_path / "s.toml"
    spec.write_text(GOOD + '[save]\nsolution_csv = "out/y.csv"\nreport_json = "y.json"\n')
    assert main(["solve", str(spec)]) == 0
    assert (tmp_path / "out/y.csv").read_text().startswith("x,")
    assert json.loads((tmp_path / "y.json").read_text())["status"] == "solved"
    assert main(["solve", str(spec)]) == bvpkit.Status.BAD_INPUT.exit_code  # exists: not replaced
    assert "--overwrite" in capsys.readouterr().err
    assert main(["solve", str(spec), "--overwrite"]) == 0


@pytest.mark.parametrize("argv", [["solve", "{spec}", "--csv", "a\x00b.csv"], ["solve", "{nul}"],
                                  ["sweep", "{spec}", "--store", "s\x00.sqlite", "--grid", "k=1,2"]])
def test_nul_bytes_in_paths_are_refused_in_one_line(argv, tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    spec, nul = tmp_path / "s.toml", tmp_path / "nul.toml"
    spec.write_text(GOOD.replace("y'' = -y", "y'' = -k*y") + "constants = { k = 1.0 }\n")
    nul.write_text(GOOD + '[save]\nsolution_csv = "a\\u0000b.csv"\n')
    argv = [a.format(spec=spec, nul=nul) for a in argv]
    assert main(argv) == bvpkit.Status.BAD_INPUT.exit_code
    err = capsys.readouterr().err
    assert err.startswith("bvpkit: bad_input: ") and err.count("\n") == 1 and "NUL" in err


@pytest.mark.parametrize("command", ["trace", "sweep"])
def test_unknown_picture_formats_are_refused_before_any_work(command, tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)

    def never(*args, **kwargs):  # noqa: ANN002, ANN003, ANN202
        raise AssertionError("computed before the picture was checked")

    monkeypatch.setattr(bvpkit, command, never)
    monkeypatch.setattr("bvpkit.load", never)
    spec = ROOT / "specs/pellet_design_chart.toml"
    for name, words in (("chart.xyz", "'.xyz' is not a picture format"), ("chart", "no suffix")):
        assert main([command, str(spec), "--plot", name]) == bvpkit.Status.BAD_INPUT.exit_code
        err = capsys.readouterr().err
        assert words in err and "png" in err and err.count("\n") == 1


def test_a_missing_matplotlib_is_named_before_any_work_with_the_readmes_words(tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    monkeypatch.setitem(sys.modules, "matplotlib", None)  # as if not installed
    monkeypatch.setattr("bvpkit.load", lambda *a: pytest.fail("loaded before matplotlib was checked"))
    assert main(["trace", str(SPECS[0]), "--plot", "t.png"]) == bvpkit.Status.BAD_INPUT.exit_code
    assert PLOT_INSTALL in capsys.readouterr().err
    assert PLOT_INSTALL in (ROOT / "README.md").read_text()


# -- sweep stores ----------------------------------------------------------------------------
def _foreign(path: Path) -> None:
    with sqlite3.connect(path) as db:
        db.execute("CREATE TABLE invoices (id INTEGER, amount REAL)")
        db.execute("INSERT INTO invoices VALUES (1, 9.5)")


def _truncated(path: Path) -> None:
    full = path.with_suffix(".full")
    bvpkit.sweep(bvpkit.Problem(["y'' = -k*y"], ["y(0) = 0", "y'(0) = 1"], (0, 1), constants={"k": 1.0}),
                 {"k": [1.0, 2.0]}, outputs=["y(1)"], store=full, executor="serial")
    path.write_bytes(full.read_bytes()[:1000])


@pytest.mark.parametrize("make", [_foreign, _truncated, lambda p: p.write_bytes(os.urandom(5000)),
                                  lambda p: p.write_text("SQLite format 3 but not really")],
                         ids=["foreign", "truncated", "random", "text"])
def test_a_store_that_is_not_ours_is_one_clear_error_naming_the_file(make, tmp_path, capsys):
    store = tmp_path / "store.sqlite"
    make(store)
    before = store.read_bytes()
    spec = tmp_path / "s.toml"
    spec.write_text(GOOD.replace("y'' = -y", "y'' = -k*y") + "constants = { k = 1.0 }\n")
    assert main(["sweep", str(spec), "--grid", "k=1,2", "--store", str(store), "--serial"]) == 2
    err = capsys.readouterr().err
    assert err.startswith("bvpkit: bad_input: the store ") and str(store) in err and err.count("\n") == 1
    assert store.read_bytes() == before  # nothing written into another program's file


def test_a_store_written_before_stores_carried_their_id_still_opens(tmp_path):
    store = tmp_path / "old.sqlite"
    with sqlite3.connect(store) as db:
        db.execute("CREATE TABLE points (problem TEXT NOT NULL, point TEXT NOT NULL, row TEXT NOT NULL, "
                   "success INTEGER NOT NULL, PRIMARY KEY (problem, point))")
    problem = bvpkit.Problem(["y'' = -k*y"], ["y(0) = 0", "y'(0) = 1"], (0, 1), constants={"k": 1.0})
    assert bvpkit.sweep(problem, {"k": [1.0]}, outputs=["y(1)"], store=store, executor="serial").success


# -- grids on the command line ---------------------------------------------------------------
def test_a_grid_on_the_command_line(tmp_path, capsys):
    spec = ROOT / "specs/pellet_effectiveness_curve.toml"
    assert main(["sweep", str(spec), "--grid", "phi=0.5:8:3:geometric", "--serial", "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["parameters"]["phi"] == pytest.approx([0.5, 2.0, 8.0])
    for row in data["table"]:  # analytic: sphere, eta = 3 (phi coth(phi) - 1) / phi^2
        phi = row["phi"]
        assert row["effectiveness"] == pytest.approx(3 * (phi / __import__("math").tanh(phi) - 1) / phi**2, rel=1e-6)
    assert main(["sweep", str(spec), "--grid", "phi=1,2", "--serial", "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["parameters"]["phi"] == [1.0, 2.0]
    for bad in ("phi", "phi=1:2", "phi=a,b", "phi=1:2:0", "phi=-1:2:3:geometric", "phi=1:2:3:cubic", "phi=1e400,2"):
        assert main(["sweep", str(spec), "--grid", bad, "--serial"]) == 2, bad
        assert capsys.readouterr().err.startswith("bvpkit: bad_input: ")


# -- every bundled spec with a natural parameter traces and sweeps ---------------------------
WITH_TRACE = [p for p in SPECS if "\n[trace]" in p.read_text()]
WITH_SWEEP = [p for p in SPECS if "\n[sweep]" in p.read_text()]


def test_bundled_specs_have_trace_and_sweep_sections_where_a_constant_can_vary():
    for path in SPECS:
        if bvpkit.load(path).constants:
            assert path in WITH_TRACE and path in WITH_SWEEP, path.name


@pytest.mark.slow
@pytest.mark.parametrize("path", WITH_TRACE, ids=lambda p: p.stem)
def test_bundled_specs_trace(path, capsys):
    assert main(["trace", str(path), "--max-points", "60", "--tol", "1e-5", "--quiet", "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["success"] and data["status"] == "solved" and len(data["parameter"]) >= 2


@pytest.mark.parametrize("path", [p for p in WITH_SWEEP if "design_chart" not in p.name], ids=lambda p: p.stem)
def test_bundled_specs_sweep(path, capsys):
    assert main(["sweep", str(path), "--serial", "--tol", "1e-5", "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["success"] and all(row["success"] for row in data["table"])


# -- sweep workers ---------------------------------------------------------------------------
def _children(pid: int) -> list[int]:
    found = []
    for entry in Path("/proc").iterdir():
        if entry.name.isdigit():
            try:
                fields = (entry / "stat").read_text().rsplit(")", 1)[1].split()
            except OSError:
                continue
            if int(fields[1]) == pid:
                found.append(int(entry.name))
    return found


def _alive(pid: int) -> bool:
    try:
        state = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0]
    except OSError:
        return False
    return state not in ("Z", "X")


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="reads /proc")
def test_sweep_workers_do_not_outlive_a_killed_parent(tmp_path):
    child = subprocess.Popen([*_command(), "sweep", str(ROOT / "specs/pellet_design_chart.toml"), "--workers", "2",
                              "--quiet"], stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, env=_env(tmp_path))
    workers: list[int] = []
    deadline = time.time() + 60
    while time.time() < deadline and len(workers) < 2 and child.poll() is None:
        workers = [pid for pid in _children(child.pid)
                   if b"spawn_main" in Path(f"/proc/{pid}/cmdline").read_bytes()]
        time.sleep(0.05)
    assert len(workers) == 2, "the workers were not seen"
    time.sleep(1.0)  # into the work
    child.send_signal(signal.SIGKILL)
    child.wait()
    deadline = time.time() + 5  # they must be gone within 5 s: look until then, not the full 5 s
    while time.time() < deadline and any(_alive(pid) for pid in workers):
        time.sleep(0.1)
    assert [pid for pid in workers if _alive(pid)] == []


NO_GUARD = textwrap.dedent(
    """
    import numpy as np, bvpkit
    p = bvpkit.Problem(["c'' + (2/r)*c' = phi**2*c"], ["c'(0) = 0", "c'(1) = Bi*(1 - c(1))"], (0, 1),
                       independent="r", constants={"phi": 1.0, "Bi": 10.0}, outputs={"effectiveness": "3*c'(1)/phi**2"})
    result = bvpkit.sweep(p, {"phi": np.geomspace(0.2, 50, 6), "Bi": [2.0, 20.0]}, workers=2, chunk=2)
    print(result.message)
    """
)


def test_a_sweep_from_a_script_without_a_main_guard(tmp_path):
    script = tmp_path / "chart_script.py"
    script.write_text(NO_GUARD)
    out = subprocess.run([sys.executable, str(script)], capture_output=True, text=True, env=_env(tmp_path),
                         timeout=300, cwd=tmp_path)
    assert out.returncode == 0, out.stderr[-3000:]
    assert out.stdout.count("12 points: 12 solved now") == 1  # the script ran once, not once per worker
    assert out.stderr == ""


DASK_SPEC = """
title = "slow points for a cluster test"
[problem]
independent = "eta"
domain = [0, "inf"]
equations = ["f''' + f*f''/2 = a*(1 - f'**2)"]
conditions = ["f(0) = 0", "f'(0) = 0", "f'(inf) = 1"]
constants = { a = 0.0 }
[solver]
tol = 1e-10
[outputs]
wall_shear = "f''(0)"
[sweep]
outputs = ["wall_shear"]
[sweep.grid]
a = { from = 0.0, to = 0.5, count = 200 }
"""


@pytest.mark.slow
def test_a_killed_dask_client_leaves_no_bvpkit_task_running(tmp_path):
    distributed = pytest.importorskip("distributed")
    spec = tmp_path / "slow.toml"
    spec.write_text(DASK_SPEC)
    with distributed.LocalCluster(n_workers=1, threads_per_worker=2, processes=False, protocol="tcp", host="127.0.0.1",
                                  dashboard_address=None) as cluster:
        worker = next(iter(cluster.workers.values()))
        child = subprocess.Popen([*_command(), "sweep", str(spec), "--scheduler", cluster.scheduler_address,
                                  "--quiet"], stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, env=_env(tmp_path))
        deadline = time.time() + 90
        while time.time() < deadline and worker.state.executing_count < 2:
            time.sleep(0.05)
        assert worker.state.executing_count == 2, "the tasks were not seen running"
        time.sleep(0.5)
        child.send_signal(signal.SIGKILL)
        child.wait()
        deadline = time.time() + 10
        while time.time() < deadline and worker.state.executing_count:
            time.sleep(0.05)
        # each unit is 25 slow points (tens of seconds); stopped between two points instead
        assert worker.state.executing_count == 0
        assert not cluster.scheduler.tasks
