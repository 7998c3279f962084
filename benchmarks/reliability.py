"""Reliability: no false success from any method, no false failure of an accurate answer.

``python -m benchmarks reliability [--quick] [--out FILE] [--timeout S] [--only NAME ...]``

Every method asked for by name (and ``auto``) runs on

* the probes that once found false successes and false failures: the peak at the centre
  (``(eps + x**2) y'' + 4 x y' + 2 y = 0``, exact ``1/(eps + x**2)``) at eps = 1e-2, 1e-3,
  1e-4 and tol 1e-4, 1e-7, where the slope between the nodes was missed; a heater 0.1 mm
  wide in a rod held at zero at both ends (``y'' = -A exp(-((x - c)/w)**2)``), which every
  method once solved as ``y = 0``; the homogeneous problem ``y'' + pi**2 y = 0``,
  ``y(0) = y(1) = 0``, whose answer is not unique (a success must say so:
  ``nearly_singular``); Blasius on ``(0, inf)`` at tol 1e-10, once refused although right;
* the test set's instances (``benchmarks/testset_instances.py``, exact solutions verified by
  ``testset_check.check_exact`` before use) at tol 1e-4 and 1e-7.

The true error of an answer is the largest ``|v - v_exact| / (1 + |v_exact|)`` of ``y`` and
of its slope ``y'`` over a fine grid (the test set's: uniform points and geometric clusters at
the ends and at every layer) together with the midpoints and quarter points of the answer's
own mesh, so that what lies between the nodes is measured. The exact slope is analytic for
the probes, and otherwise comes from central differences of the exact ``y`` improved by one
Richardson step, at the step where two successive improved values agree best; a point where
that agreement is worse than a hundredth of the tolerance is left out (the count is shown).

A **false success** claims success while the true error is above 10 x tol (the estimate of
a success is within the tolerance, so this also covers an estimate off by 10); on the
homogeneous problem, any plain ``solved``. A **false failure** refuses an answer whose true
error is within the tolerance (measured with ``allow_failed=True``); for Blasius, the wall
shear ``f''(0)`` against Boyd 1999. Each solve runs in a child process, stopped after the
time limit (a timeout is a failure, never a false one).

``--quick``: the probes at tol 1e-4 and the test set's handful (``QUICK``) at 1e-6; the
section ``reliability_probes`` of ``python -m benchmarks`` runs the probes alone.
"""

from __future__ import annotations

import argparse
import datetime
import math
import sys
import time
import traceback
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
from scipy import special

from .harness import Child, machine, prepend
from .testset_check import check_exact
from .testset_instances import BY_NAME, INSTANCES, QUICK

TOLERANCES = (1e-4, 1e-7)
QUICK_TOLERANCE = 1e-6
TIMEOUT = 30.0  # seconds per solve; shooting at tol 1e-7 on the peak takes 15 s on 2 busy cores
MAX_NODES = 100_000
FALSE_FACTOR = 10.0
_UNIFORM, _CLUSTER, _SMALLEST = 20_001, 300, 1e-9
_BETWEEN_CAP = 10_000  # points between the nodes measured per answer (evenly thinned above)
_SLOPE_SHARE = 1e-2  # a numerical exact slope is used where its own error is below this x tol
_UNTIMED = 900.0  # seconds allowed to preparing a problem and measuring an answer (not the solver's time)

# -- the probes -------------------------------------------------------------------------------
_W, _C = 1e-4, 0.3137  # the heater: width and centre (our own rod)
_A = 1 / (_W * math.sqrt(math.pi))  # unit total power
BLASIUS = 0.332057336215196  # f''(0), Boyd 1999, SIAM Review 41(2), Table 1


def _heater_exact(x: np.ndarray) -> np.ndarray:
    """y'' = -g, g the unit Gaussian at c of width w, y(0) = y(1) = 0: y = x G(1) - G(x) with G the
    double integral of g from 0 (analytic: G(x) = (x - c)/2 erf((x - c)/w) + w/(2 sqrt(pi))
    exp(-((x - c)/w)^2) + x/2 erf(c/w) - (that at 0))."""
    def double(x):  # noqa: ANN001, ANN202
        z = (x - _C) / _W
        return (0.5 * (x - _C) * special.erf(z) + _W / (2 * math.sqrt(math.pi)) * np.exp(-z * z)
                + 0.5 * x * special.erf(_C / _W))

    zero = double(np.zeros(1))[0]
    return x * (double(np.ones(1))[0] - zero) - (double(np.asarray(x, float)) - zero)


def _heater_slope(x: np.ndarray) -> np.ndarray:
    def single(x):  # noqa: ANN001, ANN202
        return 0.5 * special.erf((x - _C) / _W) + 0.5 * special.erf(_C / _W)

    def double(x):  # noqa: ANN001, ANN202
        z = (x - _C) / _W
        return (0.5 * (x - _C) * special.erf(z) + _W / (2 * math.sqrt(math.pi)) * np.exp(-z * z)
                + 0.5 * x * special.erf(_C / _W))

    return (double(np.ones(1))[0] - double(np.zeros(1))[0]) - single(np.asarray(x, float))


@dataclass(frozen=True)
class Case:
    """One problem of the benchmark.

    ``kind``: ``"exact"`` (``exact`` and, if known, ``slope`` of the unknown), ``"singular"``
    (not unique: a success must carry the warning), ``"reference"`` (a published value of
    ``quantity``)."""

    name: str
    equations: tuple[str, ...]
    conditions: tuple[str, ...]
    domain: tuple[Any, Any]
    constants: Mapping[str, float]
    source: str
    kind: str = "exact"
    exact: Callable | None = None
    slope: Callable | None = None
    focus: tuple[float, ...] = ()
    unknown: str = "y"
    independent: str = "x"
    tols: tuple[float, ...] | None = None
    quantity: str = ""
    reference: float = math.nan
    methods: tuple[str, ...] | None = None
    probe: bool = False


def _peak(eps: float) -> Case:
    return Case(f"peak_at_centre-eps{eps:g}", ("(eps + x**2)*y'' + 4*x*y' + 2*y = 0",),
                ("y(-1) = 1/(1 + eps)", "y(1) = 1/(1 + eps)"), (-1.0, 1.0), {"eps": eps},
                "Cash test set, problem 9 (from memory); analytic: y = 1/(eps + x^2), y' = -2x/(eps + x^2)^2",
                exact=lambda x: 1 / (eps + x**2), slope=lambda x: -2 * x / (eps + x**2) ** 2, focus=(0.0,),
                probe=True)


PROBES: list[Case] = [
    *(_peak(eps) for eps in (1e-2, 1e-3, 1e-4)),
    Case("narrow_heater-w1e-4", ("y'' = -A*exp(-((x - c)/w)**2)",), ("y(0) = 0", "y(1) = 0"), (0.0, 1.0),
         {"A": _A, "c": _C, "w": _W}, "analytic: two integrations of the Gaussian (erf); y(c) = 0.215264",
         exact=_heater_exact, slope=_heater_slope, focus=(_C,), tols=(1e-4, 1e-6), probe=True),
    Case("homogeneous_at_eigenvalue", ("y'' + pi**2*y = 0",), ("y(0) = 0", "y(1) = 0"), (0.0, 1.0), {},
         "analytic: every multiple of sin(pi x) solves it", kind="singular", tols=(1e-6,), probe=True),
    Case("blasius", ("f''' + f*f''/2 = 0",), ("f(0) = 0", "f'(0) = 0", "f'(inf) = 1"), (0, "inf"), {},
         "Boyd 1999, SIAM Review 41(2), Table 1: f''(0) = 0.332057336215196", kind="reference", unknown="f",
         independent="eta", tols=(1e-10,), quantity="f''(0)", reference=BLASIUS, probe=True),
]


def _from_instance(name: str) -> Case:
    inst = BY_NAME[name]
    return Case(inst.name, tuple(inst.equations), tuple(inst.conditions), tuple(inst.domain), dict(inst.constants),
                inst.source, exact=inst.exact, focus=tuple(inst.focus), unknown=inst.unknown)


CASES: dict[str, Case] = {c.name: c for c in [*PROBES, *(_from_instance(i.name) for i in INSTANCES)]}


# -- measuring --------------------------------------------------------------------------------
def numerical_slope(f: Callable, x: np.ndarray, a: float, b: float) -> tuple[np.ndarray, np.ndarray]:
    """``f'(x)`` and an estimate of its error: central differences (one-sided within a step of an
    end) at steps ``(b - a) 2**-j``, each improved by one Richardson step, taken per point where
    the improved value agrees best with those of the neighbouring steps (never better than the
    round-off of the differences at that step)."""
    x = np.asarray(x, float)
    steps = (b - a) * 2.0 ** -np.arange(3, 41)
    value = f(x)
    first = np.empty((steps.size, x.size))
    for i, h in enumerate(steps):
        inner = (x - h >= a) & (x + h <= b)
        d = np.empty(x.size)
        d[inner] = (f(x[inner] + h) - f(x[inner] - h)) / (2 * h)
        right = ~inner & (x + 2 * h <= b)
        d[right] = (-3 * value[right] + 4 * f(x[right] + h) - f(x[right] + 2 * h)) / (2 * h)
        left = ~inner & ~right
        d[left] = (3 * value[left] - 4 * f(x[left] - h) + f(x[left] - 2 * h)) / (2 * h)
        first[i] = d
    improved = (4 * first[1:] - first[:-1]) / 3
    change = np.abs(np.diff(improved, axis=0))
    agreement = np.maximum(change[1:], change[:-1])
    agreement = np.maximum(agreement, 8 * np.finfo(float).eps * (1 + np.abs(value))[None, :] / steps[2:-1, None])
    agreement = np.where(np.isfinite(agreement), agreement, np.inf)
    best = np.argmin(agreement, axis=0)
    columns = np.arange(x.size)
    return improved[best + 1, columns], agreement[best, columns]


def reference_grid(case: Case) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The fine grid of an exact case (the test set's: uniform points and geometric clusters at the
    ends and layers), the exact slope there and that slope's error estimate."""
    a, b = (float(v) for v in case.domain)
    near = np.geomspace(_SMALLEST * (b - a), 0.3 * (b - a), _CLUSTER)
    parts = [np.linspace(a, b, _UNIFORM), a + near, b - near, *(c + s * near for c in case.focus for s in (-1, 1))]
    grid = np.unique(np.concatenate(parts))
    grid = grid[(grid >= a) & (grid <= b)]
    slope, error = _slopes(case, grid)
    return grid, slope, error


@dataclass
class Run:
    case: str
    tol: float
    method: str
    outcome: str
    success: bool = False
    error_y: float = math.nan
    error_slope: float = math.nan
    estimate: float | None = None
    left_out: int = 0
    seconds: float = math.nan
    used: str = ""
    message: str = ""

    @property
    def error(self) -> float:
        return float(np.nanmax([self.error_y, self.error_slope])) if not (
            math.isnan(self.error_y) and math.isnan(self.error_slope)) else math.nan

    @property
    def false_success(self) -> bool:
        if not self.success:
            return False
        if CASES[self.case].kind == "singular":
            return self.outcome == "solved"
        return not self.error <= FALSE_FACTOR * self.tol

    @property
    def false_failure(self) -> bool:
        return (not self.success and self.outcome not in ("timeout", "crashed")
                and CASES[self.case].kind != "singular" and self.error <= self.tol)


_PREPARED: dict[str, Any] = {}


def _relative(values: np.ndarray, exact: np.ndarray, use: np.ndarray | None = None) -> float:
    values = np.asarray(values, float)
    if values.shape != exact.shape:
        return math.inf
    error = np.abs(values - exact) / (1 + np.abs(exact))
    if use is not None:
        error = error[use]
    if error.size == 0:
        return math.nan
    return float(np.max(error)) if np.isfinite(error).all() else math.inf


def _prepare(name: str, grid=None, slope=None, slope_error=None) -> dict:  # noqa: ANN001
    import bvpkit

    case = CASES[name]
    problem = bvpkit.Problem(list(case.equations), list(case.conditions), case.domain, constants=dict(case.constants),
                             independent=case.independent)
    _PREPARED[name] = (bvpkit.prepare(problem), grid, slope, slope_error)
    _LAST.clear()
    return {}


def _slopes(case: Case, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    if case.slope is not None:
        return case.slope(x), np.zeros(x.size)
    a, b = (float(v) for v in case.domain)
    return numerical_slope(case.exact, x, a, b)


_LAST: dict[str, Any] = {}


def _solve(name: str, method: str, tol: float, max_nodes: int) -> dict:
    """The timed solve; the answer is kept for :func:`_measure`."""
    import bvpkit

    prepared = _PREPARED[name][0]
    _LAST.clear()
    start = time.perf_counter()
    sol = bvpkit.solve(prepared, method=method, tol=tol, max_nodes=max_nodes)
    seconds = time.perf_counter() - start
    d = sol.diagnostics
    estimate = d.error_estimate if d.error_estimate is not None and math.isfinite(d.error_estimate) else None
    _LAST.update(name=name, tol=tol, solution=sol)
    return {"outcome": sol.status.word, "success": bool(sol.success), "estimate": estimate, "seconds": seconds,
            "used": sol.method, "message": sol.message[:400]}


def _measure(name: str) -> dict:
    """The true errors of the last answer (untimed): ``y`` and ``y'`` on the fine grid and between
    the answer's nodes, or the reference quantity."""
    case = CASES[name]
    _, grid, slope, slope_error = _PREPARED[name]
    sol, tol = _LAST["solution"], _LAST["tol"]
    out: dict[str, Any] = {}
    try:
        if case.kind == "exact":
            mesh = np.asarray(sol.x, float)
            a, b = (float(v) for v in case.domain)
            mesh = np.unique(mesh[(mesh >= a) & (mesh <= b)])
            between = np.concatenate([mesh[:-1] + f * np.diff(mesh) for f in (0.25, 0.5, 0.75)])
            if between.size > _BETWEEN_CAP:
                between = between[np.linspace(0, between.size - 1, _BETWEEN_CAP).astype(int)]
            extra_slope, extra_error = _slopes(case, between)
            points = np.concatenate([grid, between])
            exact_slope = np.concatenate([slope, extra_slope])
            slope_ok = np.concatenate([slope_error, extra_error]) <= _SLOPE_SHARE * tol * (1 + np.abs(exact_slope))
            y = sol.evaluate(case.unknown, at=points, allow_failed=True)
            dy = sol.evaluate(f"{case.unknown}'", at=points, allow_failed=True)
            out["error_y"] = _relative(y, case.exact(points))
            out["error_slope"] = _relative(dy, exact_slope, slope_ok)
            out["left_out"] = int(np.count_nonzero(~slope_ok))
        elif case.kind == "reference":
            value = sol.evaluate(case.quantity, allow_failed=True)
            out["error_y"] = abs(value - case.reference) / (1 + abs(case.reference))
    except Exception as err:  # noqa: BLE001 - an answer that cannot be measured is reported as such
        out["note"] = f"; not measured: {type(err).__name__}: {err}"[:200]
    return out


def _worker(conn) -> None:  # noqa: ANN001
    while True:
        job = conn.recv()
        if job is None:
            return
        try:
            kind, name, *rest = job
            work = {"prepare": _prepare, "solve": _solve, "measure": _measure}[kind]
            conn.send(("ok", work(name, *rest)))
        except BaseException as err:  # noqa: BLE001 - everything goes back to the parent as data
            conn.send(("crashed", f"{type(err).__name__}: {err}"[:300] + "\n" + traceback.format_exc(limit=3)))


def _methods() -> list[str]:
    from bvpkit.methods import REGISTRY

    return ["auto", *REGISTRY]


def run(names: Sequence[str] | None = None, *, quick: bool = False, probes_only: bool = False,
        tols: Sequence[float] | None = None, timeout: float = TIMEOUT, max_nodes: int = MAX_NODES,
        progress: bool = True, level: str = "###") -> tuple[str, list[Run]]:
    """Run the benchmark; returns the report (Markdown) and the runs."""
    if names:
        chosen = [CASES[n] for n in names]
    elif probes_only:
        chosen = list(PROBES)
    elif quick:
        chosen = [*PROBES, *(CASES[n] for n in QUICK)]
    else:
        chosen = list(CASES.values())
    refused = [c.name for c in chosen if c.kind == "exact" and not c.probe and not check_exact(BY_NAME[c.name]).ok]
    chosen = [c for c in chosen if c.name not in refused]
    methods = _methods()
    runs: list[Run] = []
    child = Child(_worker)
    started = time.perf_counter()
    try:
        for n, case in enumerate(chosen, 1):
            if progress:
                print(f"[{n}/{len(chosen)}] {case.name} ({time.perf_counter() - started:.0f} s so far)", file=sys.stderr)
            if tols is not None:
                case_tols = tuple(tols)
            elif quick:
                case_tols = (case.tols or (1e-4,))[:1] if case.probe else (QUICK_TOLERANCE,)
            else:
                case_tols = case.tols or TOLERANCES
            reference = reference_grid(case) if case.kind == "exact" else (None, None, None)
            for tol in case_tols:
                for method in case.methods or methods:
                    failed = child.prepare(case.name, reference, _UNTIMED)
                    if failed:
                        runs.append(Run(case.name, tol, method, "crashed", message=failed))
                        continue
                    kind, reply = child.ask(("solve", case.name, method, tol, max_nodes), timeout)
                    if kind != "ok":
                        runs.append(Run(case.name, tol, method, kind, seconds=timeout if kind == "timeout" else math.nan,
                                        message=str(reply).splitlines()[0] if reply else ""))
                        continue
                    run_ = Run(case.name, tol, method, **reply)
                    kind, measured = child.ask(("measure", case.name), _UNTIMED)
                    if kind == "ok":
                        run_.message += measured.pop("note", "")
                        for key, value in measured.items():
                            setattr(run_, key, value)
                    else:
                        run_.message += f"; not measured: {kind}"
                    runs.append(run_)
    finally:
        child.close()
    return report(chosen, refused, runs, methods, timeout, time.perf_counter() - started, level), runs


# -- the report -------------------------------------------------------------------------------
def _e(value: float | None) -> str:
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return "-"
    return "inf" if math.isinf(value) else f"{value:.1e}"


def _cell(r: Run) -> str:
    if r.false_success:
        head = "**FALSE SUCCESS**"
    elif r.false_failure:
        head = f"**false failure** ({r.outcome})"
    elif r.success:
        head = "ok" if r.outcome == "solved" else r.outcome
    else:
        return r.outcome
    if CASES[r.case].kind == "singular":
        return head
    errors = _e(r.error_y) if math.isnan(r.error_slope) else f"{_e(r.error_y)} / {_e(r.error_slope)}"
    return f"{head} {errors} (est {_e(r.estimate)})"


@dataclass
class _Count:
    runs: int = 0
    successes: int = 0
    false_successes: int = 0
    false_failures: int = 0
    timeouts: int = 0
    names: list[str] = field(default_factory=list)


def report(chosen: list[Case], refused: list[str], runs: list[Run], methods: list[str], timeout: float,
           seconds: float, level: str = "###") -> str:
    import bvpkit

    stamp = datetime.datetime.now().strftime("%Y-%m-%d %H:%M")
    counts = {m: _Count() for m in methods}
    for r in runs:
        c = counts[r.method]
        c.runs += 1
        c.successes += r.success
        c.false_successes += r.false_success
        c.false_failures += r.false_failure
        c.timeouts += r.outcome == "timeout"
    total_false = sum(c.false_successes for c in counts.values())
    lines = [
        f"{level} Reliability, run of {stamp}",
        "",
        f"bvpkit {bvpkit.__version__}; machine: {machine()}; {timeout:g} s per solve (child process); "
        f"total {seconds / 60:.1f} min.",
        "",
        "Cells: outcome, true error of y / of y' (max of |v - v_exact| / (1 + |v_exact|) over a fine grid and the "
        "midpoints and quarter points of the answer's mesh), the solver's estimate. **FALSE SUCCESS**: success "
        f"with a true error above {FALSE_FACTOR:g} x tol (on the homogeneous problem: plain `solved`); "
        "**false failure**: a failure whose answer is within tol.",
        "",
        f"**False successes: {total_false}.**",
        "",
        "| method | runs | successes | false successes | false failures | timeouts |",
        "| --- | --- | --- | --- | --- | --- |",
    ]
    for m in methods:
        c = counts[m]
        lines.append(f"| {m} | {c.runs} | {c.successes} | {c.false_successes} | {c.false_failures} | {c.timeouts} |")
    by_key = {(r.case, r.tol, r.method): r for r in runs}
    tols = sorted({r.tol for r in runs}, reverse=True)
    for tol in tols:
        lines += ["", f"tol = {tol:g}", "", "| problem | " + " | ".join(methods) + " |",
                  "| --- |" + " --- |" * len(methods)]
        for case in chosen:
            cells = [by_key.get((case.name, tol, m)) for m in methods]
            if not any(cells):
                continue
            lines.append(f"| {case.name} | " + " | ".join(_cell(r) if r else "" for r in cells) + " |")
    notable = [r for r in runs if r.false_success or r.false_failure]
    if notable:
        lines += ["", "What the false outcomes said:", ""]
        for r in notable:
            kind = "false success" if r.false_success else "false failure"
            lines.append(f"- {kind}: {r.case}, tol {r.tol:g}, {r.method}: {r.outcome}; {r.message[:300]}")
    left = sum(r.left_out for r in runs)
    if left:
        lines += ["", f"Points left out of the slope's error (the numerical exact slope not good to tol/100 there): "
                      f"{left} in all runs together."]
    if refused:
        lines += ["", f"Refused (exact solution failed its check): {', '.join(refused)}."]
    lines += ["", "Sources: " + "; ".join(f"{c.name}: {c.source}" for c in chosen if c.probe) + "."]
    return "\n".join(lines) + "\n"


def reliability_probes() -> str:
    """The probes alone, every method (a section of ``python -m benchmarks``)."""
    text, _ = run(probes_only=True, progress=False)
    return text


SECTIONS = [reliability_probes]


def main(argv: Sequence[str] = ()) -> None:
    parser = argparse.ArgumentParser(prog="python -m benchmarks reliability", description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="the probes at one tolerance and a handful of the test set")
    parser.add_argument("--probes", action="store_true", help="the probes alone")
    parser.add_argument("--only", nargs="+", metavar="NAME", help="only these problems")
    parser.add_argument("--tol", nargs="+", type=float, help="these tolerances for every problem")
    parser.add_argument("--timeout", type=float, default=TIMEOUT, help=f"seconds per solve (default {TIMEOUT:g})")
    parser.add_argument("--out", metavar="FILE", help="also add the report at the top of FILE")
    args = parser.parse_args(list(argv))
    unknown = [n for n in args.only or [] if n not in CASES]
    if unknown:
        parser.error(f"unknown problem {unknown[0]!r}; the problems are: {', '.join(CASES)}")
    text, runs = run(args.only, quick=args.quick, probes_only=args.probes, tols=args.tol, timeout=args.timeout,
                     level="##")
    print(text)
    if args.out:
        prepend(Path(args.out), text)
        print(f"added to {args.out}", file=sys.stderr)
    if any(r.false_success for r in runs):
        sys.exit(1)
