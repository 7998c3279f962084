"""Parameter sweeps: many solves over a grid, on any executor, written to a store as they finish.

The grid is the cartesian product of the parameter arrays; the **first** parameter is the
fast axis. Work is cut into chunks of grid lines (fixed slow parameters, a contiguous run
of the fast one) and each chunk is solved in order, every solve started from its
neighbour's solution (continuation), so a chunk, not a point, is the unit of work.

After the first point of a unit, the rest of its points are solved together, as one
vectorised Newton system on a shared mesh (:mod:`bvpkit.families.batched`, where the problem allows),
each with its own line search, convergence test, residual check, error estimate and
stability constant; a point the batch leaves is solved alone, seeded by its neighbour.

Units are small and picklable (the problem's own arguments, its prepared plain facts and
programs (plain data), numbers; never code or compiled functions); a worker rebuilds a problem once,
without SymPy (``prepared.py``), and keeps it. Inside a unit each point starts from its
neighbour's solution with its neighbour's method (no new plan, no survey), and the full plan
runs only when that fails. Execution is on any ``concurrent.futures.Executor`` or a Dask
``distributed.Client`` (through its ``get_executor()``); there is no scheduler here.

The default (no executor given) starts in this process: a pool of one worker per core is
started only when the work left, estimated from the points already solved, exceeds
``POOL_PAYS`` seconds (a worker's start-up, importing NumPy, SciPy and bvpkit, measured 0.4-0.9 s
on a 2-core machine), and this process keeps solving while the workers start. So a small sweep
never pays for workers and never loses against one worker; ``workers=N`` starts N at once
(``workers=1``: this process alone). ``benchmarks/sweeps.py`` measures both, beside what the
machine gives two processes at all.

The store is SQLite (standard library ``sqlite3``, WAL journal). The main process writes one
transaction per finished unit, so a unit is either wholly in the store or not at all: a
sweep killed at any moment and run again with the same store solves exactly what is
missing and ends with the table a clean run gives. Failed points are stored with their
message and re-solved only with ``retry_failed=True``. A file that is not a bvpkit store
(another program's SQLite database, a truncated file, random bytes) is refused by name
before anything is solved: bvpkit's stores carry their own SQLite ``application_id``.

Local workers never outlive the sweep: each one watches its parent (``PR_SET_PDEATHSIG`` on
Linux, and everywhere a thread that checks ``os.getppid()``) and stops when it is gone; on
a Dask cluster a unit stops between two points once its task has been cancelled (its client
went away). Workers are started without importing the caller's ``__main__`` again (a unit
needs nothing from it), so a plain script needs no ``if __name__ == "__main__":`` guard.

Ctrl-C returns what was finished (``SweepResult.interrupted``); the store keeps it too.
"""

from __future__ import annotations

import concurrent.futures as futures
import dataclasses
import hashlib
import itertools
import json
import math
import os
import signal
import sqlite3
import sys
import threading
import time
import types
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from multiprocessing.context import SpawnContext, SpawnProcess
from pathlib import Path
from typing import Any

import numpy as np

from .._output import data_frame, json_ready, optional, output_labels, progress_bar, write_columns
from ..errors import OptionError, closest
from ..language.limits import LARGEST, SMALLEST, in_range
from ..language.problem import Problem
from ..language.units import labelled
from ..programs.compiled import note, signature, signing_key
from ..reduce.prepared import Prepared, prepare
from ..solver import plots
from ..solver.driver import solve
from ..status import Status
from . import batched
from .continuation import trace  # the path follower of the selector's continuation

#: Points of the fast axis per unit of work: long enough for continuation to pay off,
#: short enough to spread a grid over the workers.
CHUNK = 25
#: SQLite ``application_id`` of a bvpkit store (the bytes "bvpk"): tells our stores from
#: other programs' databases.
STORE_ID = int.from_bytes(b"bvpk", "big")
#: Seconds between two checks of a worker's parent (where the kernel does not signal it).
PARENT_CHECK = 0.5


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

        prepared = _WORKER_PROBLEMS[unit.problem_key] = Prepared.from_plain(unit.prepared)
    return prepared


def _abandoned_check():  # noqa: ANN202 - a callable returning bool
    """A check that this unit's result is no longer wanted: its Dask task was cancelled
    (the client went away), or its parent process is gone."""
    parent = _PARENT.get("pid")
    if parent is not None:
        return lambda: os.getppid() != parent
    distributed = sys.modules.get("distributed")
    if distributed is None:
        return lambda: False
    try:
        worker = distributed.get_worker()
        key = worker.get_current_task()
    except (ValueError, AttributeError):  # not inside a Dask task
        return lambda: False

    def cancelled() -> bool:
        task = worker.state.tasks.get(key)
        return task is None or task.state in ("cancelled", "released", "forgotten")

    return cancelled


def _solve_unit(unit: _Unit) -> list[dict[str, Any]]:
    """Solve one chunk in order, each point seeded by the previous one (runs in a worker)."""
    prepared = _worker_problem(unit)
    named = {text: name for name, text in prepared.outputs.items()}
    options = dict(unit.options)
    rows = []
    previous = None
    abandoned = _abandoned_check()
    together: dict[int, Any] = {}  # solutions of the points solved in one Newton system
    batch = _batched().applies(prepared, options) and len(unit.fast_values) > 2
    for position, value in enumerate(unit.fast_values):
        if abandoned():
            break  # nobody waits for this unit any more: stop between two points
        point = {**dict(unit.slow), unit.fast: value}
        started = time.perf_counter()
        if batch and previous is not None and previous.success:
            # the rest of the chunk at once, from this solution; a point it leaves is solved alone below
            batch = False
            rest = [{**dict(unit.slow), unit.fast: v} for v in unit.fast_values[position:]]
            found = _batched().solve_points(prepared, rest, previous, options)
            together = {position + i: sol for i, sol in enumerate(found) if sol is not None}
        try:
            sol = together.get(position)  # its values were checked when the batch took them
            here = None if sol is not None else prepared.with_constants(**point)
            if sol is not None:
                pass
            elif previous is not None and "method" not in options:
                # the neighbour's method, started from its solution: no new plan (and no survey)
                # while it works; the selector's full plan when it does not
                sol = solve(here, guess=previous, method=previous.method, follow=trace, **options)
                if not sol.success:
                    sol = solve(here, guess=previous, follow=trace, **options)
            else:
                sol = solve(here, guess=previous, follow=trace, **options)
            if not sol.success and previous is not None:
                here = prepared.with_constants(**point) if here is None else here
                sol = solve(here, follow=trace, **options)  # a cold start as a second chance
        except Exception as err:  # noqa: BLE001 - a point that raises is stored as failed
            rows.append(_row(point, {}, False, "bad_input", "", math.nan, f"{type(err).__name__}: {err}", 0,
                             time.perf_counter() - started))
            previous = None
            continue
        values = {}
        if sol.success:
            for text in unit.outputs:
                # a named output of the problem is already on the solution
                name = named.get(text)
                values[text] = sol.outputs[name] if name in sol.outputs else float(sol.evaluate(text))
        d = sol.diagnostics
        seconds = d.seconds if position in together else time.perf_counter() - started  # its share of the batch
        rows.append(_row(point, values, sol.success, sol.status.word, sol.method, d.error_estimate, sol.message,
                         d.iterations, seconds))
        previous = sol if sol.success else None
    return rows


def _batched():  # noqa: ANN202 - the module, imported when a unit first needs it

    return batched


def _row(point, outputs, success, status, method, error, message, iterations, seconds) -> dict[str, Any]:  # noqa: ANN001
    return {"point": point, "outputs": outputs, "success": bool(success), "status": status, "method": method,
            "error_estimate": float(error) if error is not None else math.nan, "message": message,
            "iterations": int(iterations), "seconds": float(seconds)}


_ROW_FIELDS = {"point": dict, "outputs": dict, "success": bool, "status": str, "method": str,
               "error_estimate": float, "message": str, "iterations": int, "seconds": float}
MAX_ROW_BYTES = 100_000  # a stored row's JSON text: a message, a point and its outputs (a few hundred bytes)


def _signed_row(problem: str, row: dict, key: bytes | None) -> str:
    """A row's JSON text, with the signature of the row, its problem and its point under the
    cache's key (see :func:`bvpkit.programs.compiled.signing_key`) when there is one."""

    body = dict(row)
    if key is not None:
        body["signature"] = signature([problem, _grid_key(row["point"]), row], key)
    return json.dumps(body, allow_nan=True)


def _valid_row(problem: str, point: str, text: Any, success: Any, outputs: Sequence[str],
               key: bytes | None) -> dict | None:
    """A stored row as this sweep wrote it, or None: not JSON, fields missing or of the wrong
    kind, a point other than the one it is stored under, outputs other than the sweep's, a
    status that is not one of bvpkit's; or, when the cache has a key, a signature that is not
    its own (an edited value, a row copied from another point, problem or machine)."""
    import hmac


    if type(text) is not str or len(text) > MAX_ROW_BYTES:
        return None
    try:
        row = json.loads(text)
    except (ValueError, RecursionError):
        return None
    if type(row) is not dict or set(row) - {"signature"} != set(_ROW_FIELDS):
        return None
    stamp = row.pop("signature", None)
    if key is not None and (type(stamp) is not str or not hmac.compare_digest(
            stamp, signature([problem, point, row], key) or "")):
        return None
    for name, kind in _ROW_FIELDS.items():
        value = row[name]
        if not (type(value) is kind or (kind is float and type(value) is int)):
            return None
    try:
        if _grid_key(row["point"]) != point or row["success"] != bool(success) or row["iterations"] < 0:
            return None
    except (TypeError, ValueError, AttributeError):
        return None
    values = row["outputs"]
    if (not all(type(v) in (int, float) for v in values.values())
            or (row["success"] and set(values) != set(outputs)) or not set(values) <= set(outputs)):
        return None
    status = {s.word: s for s in Status}.get(row["status"])
    if status is None or status.success != row["success"]:
        return None
    return row


class _Store:
    """SQLite store of finished points, keyed by the problem's content and the grid point."""
    def __init__(self, path: str | Path | None):
        self.path = ":memory:" if path is None else str(path)
        self.db = None
        if path is not None:
            self._check_file(Path(path))
        try:
            self.db = sqlite3.connect(self.path, timeout=60)
            if path is not None:
                self._check_database()
                self.db.execute("PRAGMA journal_mode=WAL")
            self.db.execute(
                "CREATE TABLE IF NOT EXISTS points (problem TEXT NOT NULL, point TEXT NOT NULL, row TEXT NOT NULL, "
                "success INTEGER NOT NULL, PRIMARY KEY (problem, point))"
            )
            self.db.execute(f"PRAGMA application_id = {STORE_ID}")
            self.db.commit()
        except sqlite3.DatabaseError as err:
            self.close()
            raise self._refused(str(err)) from None

    def _refused(self, why: str) -> OptionError:
        return OptionError(f"the store {self.path} is not a bvpkit sweep store ({why}); give another file")

    def _check_file(self, path: Path) -> None:
        if path.is_dir():
            raise OptionError(f"the store {path} is a folder; give a file")
        if not path.exists() or path.stat().st_size == 0:
            return  # a new store
        with open(path, "rb") as handle:
            header = handle.read(16)
        if header != b"SQLite format 3\x00":
            raise self._refused("not an SQLite file")

    def _check_database(self) -> None:
        (found,) = self.db.execute("PRAGMA application_id").fetchone()
        tables = {name for (name,) in self.db.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
        if found == STORE_ID or not tables:
            return
        columns = {row[1] for row in self.db.execute("PRAGMA table_info(points)")}
        if found == 0 and tables == {"points"} and columns == {"problem", "point", "row", "success"}:
            return  # written before stores carried their id
        raise self._refused("a database of another program" if found != STORE_ID else "its tables differ")

    def done(self, problem: str, retry_failed: bool, outputs: Sequence[str]) -> dict[str, dict]:
        """The finished points of ``problem`` whose rows pass :func:`_valid_row`; the others
        are left out (solved again), said in one note."""

        query = "SELECT point, row, success FROM points WHERE problem = ?"
        key = signing_key()
        found, refused = {}, 0
        try:
            for point, text, success in self.db.execute(query, (problem,)):
                row = _valid_row(problem, point, text, success, outputs, key)
                if row is None:
                    refused += 1
                elif row["success"] or not retry_failed:
                    found[point] = row
        except sqlite3.DatabaseError as err:
            raise self._refused(f"unreadable: {err}") from None
        if refused:
            note(f"sweep store {self.path}: {refused} stored point{'s' if refused > 1 else ''} skipped (edited, "
                 "damaged, or stored without this cache's key) and solved again")
        return found

    def write(self, problem: str, rows: list[dict]) -> None:

        key = signing_key(create=True)
        try:
            with self.db:  # one transaction per unit
                self.db.executemany(
                    "INSERT OR REPLACE INTO points (problem, point, row, success) VALUES (?, ?, ?, ?)",
                    [(problem, _grid_key(r["point"]), _signed_row(problem, r, key), int(r["success"])) for r in rows],
                )
        except sqlite3.DatabaseError as err:
            raise OptionError(f"cannot write to the store {self.path}: {err}") from None

    def close(self) -> None:
        if self.db is not None:
            self.db.close()
            self.db = None


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
                 reused: int, seconds: float, missing: int = 0, interrupted: bool = False, stored: bool = False):
        self.parameters = parameters
        self.outputs = outputs
        self.table = rows
        self.solved, self.reused = solved, reused
        self.failed = sum(not r["success"] for r in rows)
        self.seconds = seconds
        self.interrupted = interrupted
        self.success = self.failed == 0 and not interrupted
        self.message = (f"{len(rows)} points: {solved} solved now, {reused} from the store, "
                        f"{self.failed} failed, in {seconds:.3g} s")
        if interrupted:
            self.message = (f"interrupted (Ctrl-C) with {missing} of {len(rows) + missing} points missing; "
                            f"the table holds the {len(rows)} finished ({solved} solved now, {reused} from the "
                            f"store, {self.failed} failed)"
                            + ("; the store keeps them: run again with it to finish" if stored else ""))

    def column(self, name: str) -> np.ndarray:
        """One column of the table as an array (a parameter, an output or a diagnostic)."""
        return np.array([r.get(name, math.nan) for r in self.table])

    _COLUMNS = ("success", "status", "method", "error_estimate", "message")

    def to_pandas(self) -> Any:
        """The table as a pandas DataFrame, one row per grid point in grid order: the
        parameters, each output (NaN where the point failed), ``success``, ``status``,
        ``method``, ``error_estimate``, ``message`` (the ``tables`` extra)."""

        names = [*self.parameters, *self.outputs, *self._COLUMNS]
        return data_frame({n: [r.get(n) for r in self.table] for n in names})

    def to_xarray(self) -> Any:
        """The sweep as an xarray Dataset over its grid (the ``tables`` extra): one dimension
        per parameter (coordinates: the grid's values), variables each output, ``status``,
        ``success`` and ``error_estimate``. A point not in the table (an interrupted sweep)
        is NaN, with the status ``missing``."""

        xarray = optional("xarray", "to_xarray()")
        axes = {name: np.asarray(values, float) for name, values in self.parameters.items()}
        shape = tuple(v.size for v in axes.values())
        where = {name: {float(v): i for i, v in enumerate(values)} for name, values in axes.items()}
        numbers = {name: np.full(shape, np.nan) for name in [*self.outputs, "error_estimate"]}
        status = np.full(shape, "missing", dtype=object)
        success = np.zeros(shape, dtype=bool)
        for row in self.table:
            index = tuple(where[name][float(row[name])] for name in axes)
            for name in numbers:
                value = row.get(name)
                numbers[name][index] = np.nan if value is None else float(value)
            status[index], success[index] = row["status"], bool(row["success"])
        dims = list(axes)
        variables = {name: (dims, values) for name, values in numbers.items()}
        variables["status"] = (dims, status.astype(str))
        variables["success"] = (dims, success)
        return xarray.Dataset(variables, coords={name: values for name, values in axes.items()},
                              attrs={"message": self.message})

    def to_csv(self, path: str | Path, units: Mapping[str, str] | None = None, independent: str | None = None) -> None:
        """The table as CSV, through the one writer of results (``_output.write_columns``);
        headers labelled with ``units`` when given."""
        names = [*self.parameters, *self.outputs, *self._COLUMNS]
        write_columns(path, labelled({n: [r.get(n) for r in self.table] for n in names}, units, independent))

    def as_dict(self) -> dict[str, Any]:
        status = "interrupted" if self.interrupted else "solved" if self.success else "not_converged"
        return json_ready({"success": self.success, "status": status, "message": self.message,
                           "parameters": self.parameters, "outputs": self.outputs, "table": self.table})

    def plot(self, path: str | Path, output: str | None = None, **options: Any) -> Any:
        """Design chart: one curve per value of the slower parameters, every output (or ``output``)
        on its own panel (``plot`` extra; options of :func:`bvpkit.solver.plots.sweep_figure`)."""

        return plots.sweep_figure(self, path, [output] if output else options.pop("outputs", None), **options)


def _axes(prepared, grid: Mapping[str, Sequence[float]]) -> dict[str, np.ndarray]:  # noqa: ANN001
    if not isinstance(grid, Mapping) or not grid:
        raise OptionError("the grid must be a mapping of constant name to values, e.g. {'phi': [0.1, 1, 10]}")
    axes = {}
    for name, values in grid.items():
        if name not in prepared.constants:
            raise OptionError(f"'{name}' is not a constant of the problem{closest(name, prepared.constants)}")
        try:
            array = np.asarray(values, dtype=float).ravel()
        except (TypeError, ValueError, OverflowError):
            if any(isinstance(v, complex) for v in np.ravel(np.asarray(values, dtype=object))):
                raise OptionError(f"the values of '{name}' must be real numbers: a sweep runs over real values (of a "
                                  f"complex constant, its real part; write {name} = {name}_re + 1j*{name}_im with "
                                  "real constants of their own to sweep an imaginary part)") from None
            raise OptionError(f"the values of '{name}' must be numbers") from None
        if array.size == 0 or not np.all(np.isfinite(array)):
            raise OptionError(f"the values of '{name}' must be finite numbers, at least one")
        if not all(in_range(float(v)) for v in array):
            raise OptionError(f"the values of '{name}' must be zero or of magnitude {SMALLEST:g} to {LARGEST:g}")
        axes[name] = array
    size = int(np.prod([a.size for a in axes.values()]))
    if size > 1_000_000:
        raise OptionError(f"the grid has {size} points; the limit is 1,000,000")
    return axes


def axis_values(name: str, start: float, stop: float, count: int, spacing: str = "linear") -> list[float]:
    """``count`` values from ``start`` to ``stop``, evenly (``linear``) or in ratio (``geometric``)."""
    if isinstance(count, bool) or not isinstance(count, int) or not 1 <= count <= 100_000:
        raise OptionError(f"the count of '{name}' must be a whole number from 1 to 100000, got {count!r}")
    for end in (start, stop):
        if not (math.isfinite(end) and in_range(end)):
            raise OptionError(f"the ends of '{name}' must be zero or of magnitude {SMALLEST:g} to {LARGEST:g}")
    if spacing == "linear":
        return np.linspace(start, stop, count).tolist()
    if spacing == "geometric":
        if start <= 0 or stop <= 0:
            raise OptionError(f"'{name}': geometric spacing needs positive ends")
        return np.geomspace(start, stop, count).tolist()
    raise OptionError(f"the spacing of '{name}' must be 'linear' or 'geometric', got '{spacing}'")


# -- local worker processes ---------------------------------------------------------------
_PARENT: dict[str, int] = {}


def _worker_start(parent: int) -> None:
    """Initializer of each local worker: stop with the parent, leave Ctrl-C to the parent."""
    _PARENT["pid"] = parent
    # Ctrl-C reaches the whole process group; the parent handles it and ends the workers,
    # which would otherwise each print a traceback.
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    if sys.platform.startswith("linux"):
        try:
            import ctypes

            libc = ctypes.CDLL(None, use_errno=True)
            libc.prctl(1, signal.SIGKILL, 0, 0, 0)  # PR_SET_PDEATHSIG: the kernel kills us with our parent
        except (OSError, AttributeError):
            pass  # the watching thread below covers it
    if os.getppid() != parent:  # the parent died before the line above took effect
        os._exit(1)

    def watch() -> None:
        while True:
            time.sleep(PARENT_CHECK)
            if os.getppid() != parent:
                os._exit(1)

    threading.Thread(target=watch, name="bvpkit-parent-watch", daemon=True).start()


class _MainHidden:
    """While a worker starts: the caller's ``__main__`` is hidden from ``multiprocessing``.

    A spawned worker imports the parent's main module again (so that functions defined in
    a script can be unpickled); a script that calls :func:`sweep` at its top level would
    then sweep again in every worker. Units are plain data and bvpkit functions, so the
    workers need nothing from ``__main__``; with it hidden while the process starts,
    ``multiprocessing`` records no main module to import.
    """

    def __enter__(self) -> None:
        self.main = sys.modules.get("__main__")
        sys.modules["__main__"] = types.ModuleType("__main__")

    def __exit__(self, *exc: object) -> None:
        if self.main is not None:
            sys.modules["__main__"] = self.main


class _WorkerProcess(SpawnProcess):
    """A spawned worker that starts without the caller's ``__main__`` (see :class:`_MainHidden`)."""
    def start(self) -> None:
        # SIGINT blocked while the worker is made: the worker inherits the mask and never
        # sees Ctrl-C (the parent handles it), even while it is still importing; in the
        # parent a Ctrl-C that comes meanwhile waits until the line after.
        masked = hasattr(signal, "pthread_sigmask")
        if masked:
            previous = signal.pthread_sigmask(signal.SIG_BLOCK, {signal.SIGINT})
        try:
            with _MainHidden():
                super().start()
        finally:
            if masked:
                signal.pthread_sigmask(signal.SIG_SETMASK, previous)


class _WorkerContext(SpawnContext):
    Process = _WorkerProcess  # type: ignore[assignment]


def _default_executor(workers: int | None) -> futures.Executor:
    count = workers or os.cpu_count() or 1
    # "spawn" is safe with threads in the parent (the progress bar, SQLite) on every platform
    return futures.ProcessPoolExecutor(max_workers=count, mp_context=_WorkerContext(), initializer=_worker_start,
                                       initargs=(os.getpid(),))


def _stop_workers(executor: futures.Executor) -> None:
    """End a local pool's workers now (Ctrl-C): a unit in progress is not waited for."""
    for process in list(getattr(executor, "_processes", {}).values()):
        try:
            process.terminate()
        except (OSError, AttributeError, ValueError):
            pass
    # with its workers gone the pool's own thread ends at once: waiting for it is quick, and
    # not waiting leaves it racing the interpreter's exit (CPython then prints an OSError)
    executor.shutdown(wait=True, cancel_futures=True)


def _starting_worker() -> bool:
    """Whether this process is a worker still importing the parent's main module."""
    multiprocessing = sys.modules.get("multiprocessing")
    if multiprocessing is None:
        return False
    return bool(getattr(multiprocessing.current_process(), "_inheriting", False))


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
    outputs : sequence of str, or mapping of str to str, optional
        Expressions (or names of the problem's outputs) to record; default the problem's
        outputs. A mapping gives each a label (``{"effectiveness": "3*c'(1)/phi**2"}``):
        the label names its column, its variable and its axis.
    store : path, optional
        SQLite file; a rerun with the same store solves only what is missing.
    executor : concurrent.futures.Executor or distributed.Client, optional
        Where to run. Default: this process, joined by a pool of one worker per core once
        the work left pays for starting it (``POOL_PAYS``); ``workers`` given: that many
        workers at once (1: this process alone). ``executor="serial"`` runs in this process.
    retry_failed : bool
        Solve again the points stored as failed.
    chunk : int
        Fast-axis points per unit of work.

    Returns
    -------
    SweepResult
    """

    if _starting_worker():
        # an executor of the caller's that imports __main__ again in its workers
        sys.stderr.write('bvpkit: a worker process re-ran the script that calls bvpkit.sweep; put the '
                         'script\'s work under  if __name__ == "__main__":\n')
        sys.stderr.flush()
        os._exit(1)
    if not isinstance(problem, Problem | Prepared):
        raise OptionError(f"sweep() takes a bvpkit.Problem, got {type(problem).__name__}")
    prepared = prepare(problem)
    axes = _axes(prepared, grid)
    labels = prepared.real_outputs(output_labels(prepared.outputs, outputs))  # complex: real and imaginary parts
    if isinstance(chunk, bool) or not isinstance(chunk, int) or chunk < 1:
        raise OptionError(f"chunk must be a whole number of at least 1, got {chunk!r}")
    options = {k: v for k, v in {"tol": tol, "method": method}.items() if v is not None}
    # what workers rebuild the problem from: its preparation, with every output compiled
    # (no SymPy in the workers)
    quantities = {**prepared.quantities, **{text: prepared.quantity(text) for text in labels.values()}}
    plain = dataclasses.replace(prepared, quantities=quantities).plain()
    solver = {k: v for k, v in prepared.options.as_dict().items() if k in prepared.settings}
    problem_key = _key((prepared.facts["key"], sorted(prepared.constants.items()), sorted(prepared.facts["own"].items()),
                        sorted(solver.items()), sorted(labels.values()), sorted(options.items()), sorted(axes)))
    names = list(axes)
    fast, slow_names = names[0], names[1:]
    started = time.perf_counter()
    db = _Store(store)
    try:
        done = db.done(problem_key, retry_failed, list(labels.values()))
        units = []
        for slow_values in itertools.product(*(axes[n] for n in slow_names)):
            slow = tuple(zip(slow_names, map(float, slow_values)))
            todo = [float(v) for v in axes[fast] if _grid_key({**dict(slow), fast: v}) not in done]
            for i in range(0, len(todo), chunk):
                units.append(_Unit(problem_key, fast, tuple(todo[i:i + chunk]), slow, tuple(labels.values()),
                                   tuple(sorted(options.items())), plain))
        progress_count = [0]
        interrupted = False
        try:
            _run(units, db, problem_key, executor, workers, progress, done, progress_count)
        except KeyboardInterrupt:
            interrupted = True
        solved = progress_count[0]
        rows = []
        missing = 0
        for slow_values in itertools.product(*(axes[n] for n in slow_names)):
            for v in axes[fast]:
                point = {**dict(zip(slow_names, map(float, slow_values))), fast: float(v)}
                stored = done.get(_grid_key(point))
                if stored is None:  # only after Ctrl-C
                    missing += 1
                    continue
                row = {n: point[n] for n in names}
                row.update({label: stored["outputs"].get(text, math.nan) for label, text in labels.items()})
                row.update({k: stored[k] for k in ("success", "status", "method", "error_estimate", "message",
                                                   "iterations")})
                rows.append(row)
    finally:
        db.close()
    total = len(rows)
    return SweepResult(axes, list(labels), rows, solved, total - solved, time.perf_counter() - started,
                       missing=missing, interrupted=interrupted, stored=store is not None)


def _run(units, db, problem_key, executor, workers, progress, done, count) -> None:  # noqa: ANN001
    """Run the units, writing each to the store as it finishes; ``count[0]`` counts the points solved."""
    bar = progress_bar(progress, sum(len(u.fast_values) for u in units))
    owned = None

    def finished(rows: list[dict[str, Any]]) -> None:
        db.write(problem_key, rows)
        for r in rows:
            done[_grid_key(r["point"])] = r
        count[0] += len(rows)
        if bar is not None:
            bar.update(len(rows))

    try:
        if not units:
            return
        if executor == "serial":
            for u in units:
                finished(_solve_unit(u))
            return
        if executor is None:
            owned = _run_local(units, workers, finished)
            return
        if hasattr(executor, "get_executor"):  # a distributed.Client
            executor = executor.get_executor()
        elif not isinstance(executor, futures.Executor):
            raise OptionError("executor must be a concurrent.futures.Executor, a distributed.Client or 'serial'")
        pending = [executor.submit(_solve_unit, u) for u in units]
        for f in futures.as_completed(pending):
            finished(_result(f))
    except BaseException as err:
        owned = getattr(err, "_bvpkit_pool", owned)
        if owned is not None:
            _stop_workers(owned)
            owned = None
        raise
    finally:
        if owned is not None:
            # every unit is in: the workers are idle or still starting; ending them now is
            # quicker than waiting for a starting one to finish its imports
            _stop_workers(owned)
        if bar is not None:
            bar.close()


#: Seconds of remaining work (estimated from the points solved so far) below which a local
#: sweep stays in this process: starting a worker (a new Python importing NumPy, SciPy and
#: bvpkit, then rebuilding the problem) measured 0.4-0.9 s on a 2-core machine, so a
#: smaller sweep is done before workers would help (benchmarks/sweeps.py, "small sweeps").
POOL_PAYS = 1.5


def _run_local(units: list[_Unit], workers: int | None, finished) -> futures.Executor | None:  # noqa: ANN001
    """The local executor. ``workers`` given: a pool of that many processes starts at once
    (one: none, this process solves alone). Default: this process starts on the first unit
    and a pool of one worker per core is started only when the work left, estimated from
    the points solved, is worth its start-up (``POOL_PAYS``). Either way this process keeps
    solving units while the workers start, so their start-up overlaps work; once a worker
    has taken a unit, this process only collects results. Returns the pool (for the caller
    to stop), or None."""
    import collections

    queue = collections.deque(units)
    total = sum(len(u.fast_values) for u in units)
    count = workers or os.cpu_count() or 1
    # a worker count given is honoured at once (one: this process alone); the default waits
    # for the first unit's time to say whether workers pay
    pool = _default_executor(count) if workers is not None and count > 1 else None
    pending: dict[futures.Future, _Unit] = {}
    solved, spent = 0, 0.0
    try:
        while queue or pending:
            for f in [f for f in pending if f.done()]:
                del pending[f]
                finished(_result(f))
            if pool is not None:
                while queue and len(pending) < 2 * count:  # one unit running and one waiting per worker
                    unit = queue.popleft()
                    pending[pool.submit(_solve_unit, unit)] = unit
            working = pool is not None and any(f.running() or f.done() for f in pending)
            if not queue and not working:
                # the workers are still starting: take back a unit they have not begun
                for f in list(pending):
                    if f.cancel():
                        queue.append(pending.pop(f))
                        break
            if queue and not working:
                unit = queue.popleft()
                started = time.perf_counter()
                finished(_solve_unit(unit))
                solved, spent = solved + len(unit.fast_values), spent + time.perf_counter() - started
                left = (total - solved) * spent / max(solved, 1)
                if pool is None and count > 1 and left > POOL_PAYS:
                    pool = _default_executor(count)
                continue
            if pending:
                futures.wait(pending, return_when=futures.FIRST_COMPLETED, timeout=None if working else 0.05)
    except BaseException as err:
        err._bvpkit_pool = pool  # the caller stops the workers
        raise
    return pool


def _result(future: futures.Future) -> list[dict[str, Any]]:
    from concurrent.futures.process import BrokenProcessPool

    try:
        return future.result()
    except BrokenProcessPool:
        raise OptionError("the sweep's worker processes stopped unexpectedly (killed, or out of memory); "
                          "run with executor='serial' (--serial) to see the point that fails") from None
