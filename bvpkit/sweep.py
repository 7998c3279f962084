"""Parameter sweeps: many solves over a grid, on any executor, written to a store as they finish.

The grid is the cartesian product of the parameter arrays; the **first** parameter is the
fast axis. Work is cut into chunks of grid lines (fixed slow parameters, a contiguous run
of the fast one) and each chunk is solved in order, every solve started from its
neighbour's solution (continuation), so a chunk, not a point, is the unit of work.

Units are small and picklable (the problem's own arguments, its prepared plain facts and
programs (plain data), numbers; never code or compiled functions); a worker rebuilds a problem once,
without SymPy (``prepared.py``), and keeps it. Execution is on any
``concurrent.futures.Executor`` (default: a local process pool sized to the cores) or a
Dask ``distributed.Client`` (through its ``get_executor()``); there is no scheduler here.

The store is SQLite (standard library ``sqlite3``, WAL journal). The main process writes one
transaction per finished unit, so a unit is either wholly in the store or not at all: a
sweep killed at any moment and run again with the same store solves exactly what is
missing and ends with the table a clean run gives. Failed points are stored with their
message and re-solved only with ``retry_failed=True``.
"""

from __future__ import annotations

import concurrent.futures as futures
import csv
import dataclasses
import hashlib
import itertools
import json
import math
import os
import sqlite3
import time
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from ._output import json_ready, progress_bar, pyplot
from .errors import OptionError, closest

#: Points of the fast axis per unit of work: long enough for continuation to pay off,
#: short enough to spread a grid over the workers.
CHUNK = 25


@dataclass(frozen=True)
class _Unit:
    """One chunk of one grid line: what a worker needs, as plain data."""

    problem_key: str
    fast: str
    fast_values: tuple[float, ...]
    slow: tuple[tuple[str, float], ...]
    outputs: tuple[str, ...]
    options: tuple[tuple[str, Any], ...]
    prepared: dict  # Prepared.plain(): the worker rebuilds the problem from it, without SymPy


def _key(value: Any) -> str:
    return hashlib.sha256(repr(value).encode()).hexdigest()[:24]


def _grid_key(point: Mapping[str, float]) -> str:
    return json.dumps({k: float(v) for k, v in sorted(point.items())}, sort_keys=True)


_WORKER_PROBLEMS: dict[str, Any] = {}


def _worker_problem(unit: _Unit):  # noqa: ANN202
    prepared = _WORKER_PROBLEMS.get(unit.problem_key)
    if prepared is None:
        from .prepared import Prepared

        prepared = _WORKER_PROBLEMS[unit.problem_key] = Prepared.from_plain(unit.prepared)
    return prepared


def _solve_unit(unit: _Unit) -> list[dict[str, Any]]:
    """Solve one chunk in order, each point seeded by the previous one (runs in a worker)."""
    from .driver import solve

    prepared = _worker_problem(unit)
    options = dict(unit.options)
    rows = []
    previous = None
    for value in unit.fast_values:
        point = {**dict(unit.slow), unit.fast: value}
        started = time.perf_counter()
        try:
            here = prepared.with_constants(**point)
            sol = solve(here, guess=previous, **options)
            if not sol.success and previous is not None:
                sol = solve(here, **options)  # a cold start as a second chance
        except Exception as err:  # noqa: BLE001 - a point that raises is stored as failed
            rows.append(_row(point, {}, False, "bad_input", "", math.nan, f"{type(err).__name__}: {err}", 0,
                             time.perf_counter() - started))
            previous = None
            continue
        values = {}
        if sol.success:
            for text in unit.outputs:
                values[text] = float(sol.evaluate(text))
        d = sol.diagnostics
        rows.append(_row(point, values, sol.success, sol.status.word, sol.method, d.error_estimate, sol.message,
                         d.iterations, time.perf_counter() - started))
        previous = sol if sol.success else None
    return rows


def _row(point, outputs, success, status, method, error, message, iterations, seconds) -> dict[str, Any]:  # noqa: ANN001
    return {"point": point, "outputs": outputs, "success": bool(success), "status": status, "method": method,
            "error_estimate": float(error) if error is not None else math.nan, "message": message,
            "iterations": int(iterations), "seconds": float(seconds)}


class _Store:
    """SQLite store of finished points, keyed by the problem's content and the grid point."""

    def __init__(self, path: str | Path | None):
        self.path = ":memory:" if path is None else str(path)
        self.db = sqlite3.connect(self.path, timeout=60)
        if path is not None:
            self.db.execute("PRAGMA journal_mode=WAL")
        self.db.execute(
            "CREATE TABLE IF NOT EXISTS points (problem TEXT NOT NULL, point TEXT NOT NULL, row TEXT NOT NULL, "
            "success INTEGER NOT NULL, PRIMARY KEY (problem, point))"
        )
        self.db.commit()

    def done(self, problem: str, retry_failed: bool) -> dict[str, dict]:
        query = "SELECT point, row FROM points WHERE problem = ?" + (" AND success = 1" if retry_failed else "")
        return {point: json.loads(row) for point, row in self.db.execute(query, (problem,))}

    def write(self, problem: str, rows: list[dict]) -> None:
        with self.db:  # one transaction per unit
            self.db.executemany(
                "INSERT OR REPLACE INTO points (problem, point, row, success) VALUES (?, ?, ?, ?)",
                [(problem, _grid_key(r["point"]), json.dumps(r, allow_nan=True), int(r["success"])) for r in rows],
            )

    def close(self) -> None:
        self.db.close()


class SweepResult:
    """The table of a sweep, in grid order (the first parameter fastest).

    Attributes
    ----------
    table : list of dict
        One row per grid point: the parameters, each output, ``success``, ``status``,
        ``method``, ``error_estimate``, ``message``, ``iterations``.
    parameters : dict of str to ndarray
        The grid's axes as given.
    outputs : list of str
    solved, reused, failed : int
        Points solved in this run, taken from the store, and failed.
    """

    def __init__(self, parameters: dict[str, np.ndarray], outputs: list[str], rows: list[dict], solved: int,
                 reused: int, seconds: float):
        self.parameters = parameters
        self.outputs = outputs
        self.table = rows
        self.solved, self.reused = solved, reused
        self.failed = sum(not r["success"] for r in rows)
        self.seconds = seconds
        self.success = self.failed == 0
        self.message = (f"{len(rows)} points: {solved} solved now, {reused} from the store, "
                        f"{self.failed} failed, in {seconds:.3g} s")

    def column(self, name: str) -> np.ndarray:
        """One column of the table as an array (a parameter, an output or a diagnostic)."""
        return np.array([r.get(name, math.nan) for r in self.table])

    def to_csv(self, path: str | Path) -> None:
        names = [*self.parameters, *self.outputs, "success", "status", "method", "error_estimate", "message"]
        with open(path, "w", newline="") as handle:
            writer = csv.writer(handle)
            writer.writerow(names)
            for r in self.table:
                writer.writerow([r.get(n, "") for n in names])

    def as_dict(self) -> dict[str, Any]:
        return json_ready({"success": self.success, "status": "solved" if self.success else "not_converged",
                           "message": self.message, "parameters": self.parameters, "outputs": self.outputs,
                           "table": self.table})

    def plot(self, path: str | Path, output: str | None = None) -> None:
        """Design chart: one curve per value of the slower parameter (needs the ``plot`` extra)."""
        plt = pyplot()
        output = output or self.outputs[0]
        names = list(self.parameters)
        fast = names[0]
        slow = names[1] if len(names) > 1 else None
        fig, ax = plt.subplots(figsize=(6.4, 4.4), dpi=120)
        groups = sorted({r[slow] for r in self.table}) if slow else [None]
        colours = plt.get_cmap("viridis")(np.linspace(0.1, 0.9, len(groups)))
        for colour, g in zip(colours, groups):
            rows = [r for r in self.table if slow is None or r[slow] == g]
            xs = np.array([r[fast] for r in rows])
            ys = np.array([r.get(output, math.nan) if r["success"] else math.nan for r in rows])
            ax.plot(xs, ys, "-", color=colour, lw=1.6, label=f"{slow} = {g:g}" if slow else None)
        if _geometric(self.parameters[fast]):
            ax.set_xscale("log")
        ax.set_xlabel(fast)
        ax.set_ylabel(output)
        ax.grid(True, alpha=0.3, which="both")
        if slow:
            ax.legend(title=None, loc="best")
        fig.tight_layout()
        fig.savefig(path)
        plt.close(fig)


def _geometric(values: np.ndarray) -> bool:
    v = np.asarray(values, float)
    if v.size < 3 or np.any(v <= 0):
        return False
    ratios = v[1:] / v[:-1]
    return bool(np.allclose(ratios, ratios[0], rtol=1e-6) and not np.isclose(ratios[0], 1.0))


def _axes(prepared, grid: Mapping[str, Sequence[float]]) -> dict[str, np.ndarray]:  # noqa: ANN001
    if not isinstance(grid, Mapping) or not grid:
        raise OptionError("the grid must be a mapping of constant name to values, e.g. {'phi': [0.1, 1, 10]}")
    axes = {}
    for name, values in grid.items():
        if name not in prepared.constants:
            raise OptionError(f"'{name}' is not a constant of the problem{closest(name, prepared.constants)}")
        array = np.asarray(values, dtype=float).ravel()
        if array.size == 0 or not np.all(np.isfinite(array)):
            raise OptionError(f"the values of '{name}' must be finite numbers, at least one")
        axes[name] = array
    size = int(np.prod([a.size for a in axes.values()]))
    if size > 1_000_000:
        raise OptionError(f"the grid has {size} points; the limit is 1,000,000")
    return axes


def _default_executor(workers: int | None) -> futures.Executor:
    import multiprocessing

    count = workers or os.cpu_count() or 1
    # "spawn" is safe with threads in the parent (the progress bar, SQLite) on every platform
    return futures.ProcessPoolExecutor(max_workers=count, mp_context=multiprocessing.get_context("spawn"))


def sweep(
    problem,  # noqa: ANN001 - bvpkit.Problem
    grid: Mapping[str, Sequence[float]],
    *,
    outputs: Sequence[str] | None = None,
    store: str | Path | None = None,
    executor: Any = None,
    workers: int | None = None,
    retry_failed: bool = False,
    tol: float | None = None,
    method: str | None = None,
    chunk: int = CHUNK,
    progress: bool = False,
) -> SweepResult:
    """Solve ``problem`` at every point of a grid of its constants.

    Parameters
    ----------
    problem : Problem
    grid : mapping of str to sequence of float
        Constant name to values; the first is the fast axis (continuation runs along it).
    outputs : sequence of str, optional
        Expressions (or names of the problem's outputs) to record; default the problem's outputs.
    store : path, optional
        SQLite file; a rerun with the same store solves only what is missing.
    executor : concurrent.futures.Executor or distributed.Client, optional
        Where to run (default: a process pool with one worker per core, or ``workers``).
        ``executor="serial"`` runs in this process.
    retry_failed : bool
        Solve again the points stored as failed.
    chunk : int
        Fast-axis points per unit of work.

    Returns
    -------
    SweepResult
    """
    from .prepared import Prepared, prepare
    from .problem import Problem

    if not isinstance(problem, Problem | Prepared):
        raise OptionError(f"sweep() takes a bvpkit.Problem, got {type(problem).__name__}")
    prepared = prepare(problem)
    axes = _axes(prepared, grid)
    labels = {}
    named = prepared.outputs
    for text in outputs if outputs is not None else list(named):
        labels[text] = named.get(text, text)
    if isinstance(chunk, bool) or not isinstance(chunk, int) or chunk < 1:
        raise OptionError(f"chunk must be a whole number of at least 1, got {chunk!r}")
    options = {k: v for k, v in {"tol": tol, "method": method}.items() if v is not None}
    # what workers rebuild the problem from: its preparation, with every output compiled
    # (no SymPy in the workers)
    quantities = {**prepared.quantities, **{text: prepared.quantity(text) for text in labels.values()}}
    plain = dataclasses.replace(prepared, quantities=quantities).plain()
    solver = {k: v for k, v in prepared.settings.items() if k in ("method", "tol", "max_nodes", "verify", "truncation")}
    problem_key = _key((prepared.facts["key"], sorted(prepared.constants.items()), sorted(prepared.facts["own"].items()),
                        sorted(solver.items()), sorted(labels.values()), sorted(options.items()), sorted(axes)))
    names = list(axes)
    fast, slow_names = names[0], names[1:]
    started = time.perf_counter()
    db = _Store(store)
    try:
        done = db.done(problem_key, retry_failed)
        units = []
        for slow_values in itertools.product(*(axes[n] for n in slow_names)):
            slow = tuple(zip(slow_names, map(float, slow_values)))
            todo = [float(v) for v in axes[fast] if _grid_key({**dict(slow), fast: v}) not in done]
            for i in range(0, len(todo), chunk):
                units.append(_Unit(problem_key, fast, tuple(todo[i:i + chunk]), slow, tuple(labels.values()),
                                   tuple(sorted(options.items())), plain))
        solved = _run(units, db, problem_key, executor, workers, progress, done)
        rows = []
        for slow_values in itertools.product(*(axes[n] for n in slow_names)):
            for v in axes[fast]:
                point = {**dict(zip(slow_names, map(float, slow_values))), fast: float(v)}
                stored = done[_grid_key(point)]
                row = {n: point[n] for n in names}
                row.update({label: stored["outputs"].get(text, math.nan) for label, text in labels.items()})
                row.update({k: stored[k] for k in ("success", "status", "method", "error_estimate", "message",
                                                   "iterations")})
                rows.append(row)
    finally:
        db.close()
    total = len(rows)
    return SweepResult(axes, list(labels), rows, solved, total - solved, time.perf_counter() - started)


def _run(units, db, problem_key, executor, workers, progress, done) -> int:  # noqa: ANN001
    """Run the units, writing each to the store as it finishes; return the points solved."""
    bar = progress_bar(progress, sum(len(u.fast_values) for u in units))
    solved = 0
    owned = None
    try:
        if not units:
            return 0
        if executor == "serial":
            results = (_solve_unit(u) for u in units)
        else:
            if executor is None:
                owned = executor = _default_executor(workers)
            elif hasattr(executor, "get_executor"):  # a distributed.Client
                executor = executor.get_executor()
            elif not isinstance(executor, futures.Executor):
                raise OptionError("executor must be a concurrent.futures.Executor, a distributed.Client or 'serial'")
            pending = [executor.submit(_solve_unit, u) for u in units]
            results = (f.result() for f in futures.as_completed(pending))
        for rows in results:
            db.write(problem_key, rows)
            for r in rows:
                done[_grid_key(r["point"])] = r
            solved += len(rows)
            if bar is not None:
                bar.update(len(rows))
    finally:
        if owned is not None:
            owned.shutdown(cancel_futures=True)
        if bar is not None:
            bar.close()
    return solved
