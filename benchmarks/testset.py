"""Test set: every bvpkit method and SciPy's ``solve_bvp`` on problems with exact solutions.

``python -m benchmarks testset [--quick] [--out FILE] [--only NAME ...] [--tol T ...]``

For each instance of :data:`INSTANCES` (standard linear and nonlinear two-point problems,
mostly singularly perturbed, with exact solutions and their published sources; see
``testset_instances.py``) and each tolerance, the suite runs bvpkit's ``auto``, every method
of ``bvpkit.methods.REGISTRY`` alone, and ``scipy.integrate.solve_bvp`` called by hand
(exact Jacobians from the test set's own reading of the equation, the same starting guess
as bvpkit's default: the lowest-degree polynomial meeting the linear conditions on 41
nodes; ``max_nodes`` equal for all). It reports success, the true error against the exact
solution (max over a fine grid, refined at the ends and at layers, of
``|y - y_exact| / (1 + |y_exact|)``), the error estimate, bvpkit's stability constant and the
wall time of the solve, and flags every *false success*: success claimed while the true
error is above 10 x tol, or above 10 x the solver's own error estimate.

Every exact solution is verified first (``testset_check.check_exact``: residual of the
equation by finite differences and the conditions); an instance that fails is refused and
listed, not run. The check itself is tested on deliberately wrong solutions before use.

Each solve runs in a child process and is stopped after ``timeout`` seconds (10 by
default); the child is then ended and a fresh one started, so no process is left behind.

The full run takes about 7 minutes on 2 shared cores (50 instances x 2 tolerances x 5
solvers; some 20 shooting runs end at the time limit), so it is not part of
``python -m benchmarks`` (all suites); it runs only by name. It prints its tables, and writes
them to a file only when one is named (``--out FILE`` or ``run(out=...)``).
"""

from __future__ import annotations

import argparse
import dataclasses
import datetime
import math
import sys
import time
import traceback
import warnings
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
from scipy.integrate import solve_bvp

from .harness import Child, machine
from .testset_check import (
    EXACT_CONDITION_TOL,
    EXACT_RESIDUAL_TOL,
    ExactCheck,
    check_exact,
    check_points,
    translate,
)
from .testset_instances import BY_NAME, INSTANCES, QUICK, Instance

__all__ = ["INSTANCES", "Instance", "Run", "main", "run"]

TOLERANCES = (1e-4, 1e-7)
QUICK_TOLERANCE = 1e-6
TIMEOUT = 10.0  # seconds of wall time per solve, as the issue asks
PREPARE_TIMEOUT = 120.0  # parsing, code generation and the test set's own reading of one instance
MAX_NODES = 100_000  # the same mesh limit for bvpkit and solve_bvp
FALSE_FACTOR = 10.0  # success is false when the true error exceeds this times tol or the estimate
INITIAL_NODES = 41  # bvpkit's first mesh (bvpkit.reduce.guess.INITIAL_NODES), used for solve_bvp too
SCIPY = "solve_bvp"

# The error grid: uniform points plus geometric clusters down to 1e-9 of the length at both
# ends and at every layer, so that layers as thin as 1e-6 of the domain hold many points.
_ERROR_UNIFORM = 20_001
_ERROR_CLUSTER = 300
_ERROR_SMALLEST = 1e-9

_WARMUP_TOL = 0.1  # the loosest tolerance bvpkit accepts: the warm-up is there for its side effects
_WARMUP_NODES = 200

_SCIPY_STATUS = {0: "solved", 1: "max nodes reached", 2: "singular Jacobian", 3: "bc tolerance not met"}


@dataclass
class Run:
    """One solver on one instance at one tolerance."""

    instance: str
    tol: float
    solver: str
    outcome: str  # status word, SciPy's status in words, "timeout" or "crashed"
    success: bool = False
    method: str = ""  # for auto: the method that produced the answer, and what was tried before
    true_error: float = math.nan
    estimate: float | None = None
    condition: float | None = None
    seconds: float = math.nan
    message: str = ""

    @property
    def false_success(self) -> str:
        """Why a claimed success is false ('' when it is not)."""
        if not self.success:
            return ""
        if not math.isfinite(self.true_error):
            return "error not measurable"
        reasons = []
        if self.true_error > FALSE_FACTOR * self.tol:
            reasons.append(f"> {FALSE_FACTOR:g} x tol")
        estimate = self.estimate if self.estimate is not None else math.nan
        if math.isfinite(estimate) and self.true_error > FALSE_FACTOR * estimate:
            reasons.append(f"> {FALSE_FACTOR:g} x estimate")
        return ", ".join(reasons)


# --- the child process ------------------------------------------------------------------------

_PREPARED: dict[str, Any] = {}


def _prepare(name: str) -> dict[str, Any]:
    import bvpkit

    inst = BY_NAME[name]
    start = time.perf_counter()
    problem = bvpkit.Problem(list(inst.equations), list(inst.conditions), inst.domain,
                             constants=dict(inst.constants))
    problem = bvpkit.prepare(problem)  # code generation is not part of the timed solve
    tr = translate(inst)
    try:
        # one loose untimed solve each, so that the first timed run of an instance does not pay
        # for one-time work (bvpkit builds the default guess symbolically once, then remembers
        # it; the first solve_bvp call of a process loads SciPy's sparse machinery)
        bvpkit.solve(problem, method="collocation", tol=_WARMUP_TOL, max_nodes=_WARMUP_NODES, verify=False)
        x = np.linspace(*inst.domain, INITIAL_NODES)
        with warnings.catch_warnings(), np.errstate(all="ignore"):
            warnings.simplefilter("ignore")
            solve_bvp(tr.fun, tr.bc, x, tr.guess(x), fun_jac=tr.fun_jac, bc_jac=tr.bc_jac, tol=_WARMUP_TOL,
                      max_nodes=_WARMUP_NODES)
    except Exception:  # noqa: BLE001, S110 - a failing warm-up only means no warm-up
        pass
    grid = check_points(inst, _ERROR_UNIFORM, _ERROR_CLUSTER, _ERROR_SMALLEST)
    _PREPARED[name] = (problem, tr, grid, inst.exact(grid), inst.unknown)
    return {"seconds": time.perf_counter() - start}


def _true_error(values: Any, exact: np.ndarray) -> float:
    values = np.asarray(values, dtype=float)
    if values.shape != exact.shape or not np.isfinite(values).all():
        return math.inf
    return float(np.max(np.abs(values - exact) / (1 + np.abs(exact))))


def _solve_bvpkit(name: str, method: str, tol: float, max_nodes: int) -> dict[str, Any]:
    import bvpkit

    problem, _, grid, exact, unknown = _PREPARED[name]
    with warnings.catch_warnings(record=True) as seen:
        warnings.simplefilter("always")
        start = time.perf_counter()
        sol = bvpkit.solve(problem, method=method, tol=tol, max_nodes=max_nodes)
        seconds = time.perf_counter() - start
    d = sol.diagnostics
    try:
        error = _true_error(sol.evaluate(unknown, at=grid), exact)
    except Exception as err:  # noqa: BLE001 - an unmeasurable answer is reported, not fatal
        error, sol_note = math.nan, f"; evaluate failed: {type(err).__name__}: {err}"
    else:
        sol_note = ""
    used = sol.method
    before = [a.method for a in d.attempts[:-1]] if len(d.attempts) > 1 else []
    if method == "auto" and before:
        used += " after " + ", ".join(f"{a.method} ({a.status})" for a in d.attempts[:-1])
    note = sol.message + sol_note
    if seen:
        note += f"; {len(seen)} warning(s), first: {seen[0].category.__name__}: {str(seen[0].message)[:100]}"
    estimate = d.error_estimate if d.error_estimate is not None and math.isfinite(d.error_estimate) else None
    return {"outcome": sol.status.word, "success": bool(sol.success), "method": used, "true_error": error,
            "estimate": estimate, "condition": d.condition, "seconds": seconds, "message": note}


def _solve_scipy(name: str, tol: float, max_nodes: int) -> dict[str, Any]:
    _, tr, grid, exact, _ = _PREPARED[name]
    a, b = tr.instance.domain
    x = np.linspace(a, b, INITIAL_NODES)
    y = tr.guess(x)
    with warnings.catch_warnings(record=True) as seen, np.errstate(all="ignore"):
        warnings.simplefilter("always")
        start = time.perf_counter()
        res = solve_bvp(tr.fun, tr.bc, x, y, fun_jac=tr.fun_jac, bc_jac=tr.bc_jac, tol=tol,
                        max_nodes=max_nodes)
        seconds = time.perf_counter() - start
        error = _true_error(res.sol(grid)[0], exact)
    note = f"{res.x.size} nodes, max rms residual {np.max(res.rms_residuals):.2g}"
    if seen:
        note += f"; {len(seen)} warning(s), first: {seen[0].category.__name__}: {str(seen[0].message)[:100]}"
    return {"outcome": _SCIPY_STATUS.get(res.status, f"status {res.status}"), "success": bool(res.success),
            "method": "", "true_error": error, "estimate": None, "condition": None, "seconds": seconds,
            "message": note}


def _worker(conn) -> None:
    while True:
        job = conn.recv()
        if job is None:
            return
        try:
            kind, name, *rest = job
            if kind == "prepare":
                reply = _prepare(name)
            elif rest[0] == SCIPY:
                reply = _solve_scipy(name, rest[1], rest[2])
            else:
                reply = _solve_bvpkit(name, *rest)
            conn.send(("ok", reply))
        except BaseException as err:  # noqa: BLE001 - everything goes back to the parent as data
            text = f"{type(err).__name__}: {err}".strip()[:300]
            conn.send(("crashed", text + "\n" + traceback.format_exc(limit=3)))


def _control_check() -> None:
    """The exact-solution check must refuse wrong solutions; stop if it cannot."""
    base = BY_NAME["reaction_left_layer-eps1e-2"]
    shock = BY_NAME["shock_layer_cos-eps1e-2"]
    from scipy import special

    wrong = [
        dataclasses.replace(base, name="control-scaled", exact=lambda x: base.exact(x) * (1 + 1e-8)),
        dataclasses.replace(shock, name="control-width", exact=lambda x: np.cos(np.pi * x)
                            + special.erf(x / math.sqrt(0.01)) / special.erf(1 / math.sqrt(0.01))),
        dataclasses.replace(base, name="control-sign", exact=lambda x: np.exp(x / 0.1) / math.exp(0.0)),
    ]
    for inst in wrong:
        if check_exact(inst).ok:
            raise RuntimeError(
                f"the exact-solution check accepted the wrong solution {inst.name}; fix it first")


def _solvers() -> list[str]:
    from bvpkit.methods import REGISTRY

    return ["auto", *REGISTRY, SCIPY]


def run(
    instances: Sequence[Instance | str] | None = None,
    *,
    tols: Sequence[float] = TOLERANCES,
    timeout: float = TIMEOUT,
    max_nodes: int = MAX_NODES,
    out: str | Path | None = None,
    quick: bool = False,
    progress: bool = True,
) -> str:
    """Run the test set and return the report (Markdown); write it to ``out`` if given.

    Parameters
    ----------
    instances : sequence of Instance or names, optional
        Members of :data:`INSTANCES` (the child process finds them by name). Default: all of
        them (``quick``: a handful, at one tolerance).
    tols : sequence of float
    timeout : float
        Wall-time limit of each solve, in seconds.
    max_nodes : int
        Mesh limit for every solver.
    out : path, optional
        File to write the report to; nothing is written without it.
    """
    if quick:
        instances = instances or list(QUICK)
        tols = (QUICK_TOLERANCE,) if tols == TOLERANCES else tols
    chosen = [BY_NAME[i] if isinstance(i, str) else i for i in (instances or INSTANCES)]
    foreign = [i.name for i in chosen if BY_NAME.get(i.name) is not i]
    if foreign:  # the child process finds instances by name in INSTANCES
        raise ValueError(f"run() takes instances of INSTANCES or their names; not {', '.join(foreign)}")
    _control_check()
    checks = {i.name: check_exact(i) for i in chosen}
    usable = [i for i in chosen if checks[i.name].ok]
    solvers = _solvers()
    runs: list[Run] = []
    child = Child(_worker)
    started = time.perf_counter()
    try:
        for n, inst in enumerate(usable, 1):
            if progress:
                print(f"[{n}/{len(usable)}] {inst.name} ({time.perf_counter() - started:.0f} s so far)",
                      file=sys.stderr)
            failed = ""
            for tol in tols:
                for solver in solvers:
                    failed = failed or child.prepare(inst.name, (), PREPARE_TIMEOUT)
                    if failed:
                        runs.append(Run(inst.name, tol, solver, "crashed", message=failed))
                        continue
                    kind, reply = child.ask(("solve", inst.name, solver, tol, max_nodes), timeout)
                    if kind == "ok":
                        runs.append(Run(inst.name, tol, solver, **reply))
                    else:
                        spent = timeout if kind == "timeout" else math.nan
                        runs.append(Run(inst.name, tol, solver, kind, seconds=spent,
                                        message=str(reply).splitlines()[0] if reply else ""))
    finally:
        child.close()
    text = report(chosen, checks, runs, solvers, tols, timeout, max_nodes, time.perf_counter() - started)
    if out is not None:
        Path(out).write_text(text)
    return text


# --- the report ----------------------------------------------------------------------------------


def _e(value: float | None) -> str:
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return "-"
    if math.isinf(value):
        return "inf"
    return f"{value:.1e}"


def _seconds(value: float) -> str:
    ms = 1e3 * value
    return f"{ms:.2g} ms" if ms < 10 else f"{ms:.0f} ms" if ms < 1000 else f"{value:.3g} s"


def _brief(r: Run | None) -> str:
    """One overview cell."""
    if r is None:
        return "-"
    if not r.success:
        return r.outcome
    est = f" (est {_e(r.estimate)})" if r.estimate is not None else ""
    head = "**FALSE**" if r.false_success else "ok"
    via = f" [{r.method.split()[0]}]" if r.solver == "auto" and r.method else ""
    return f"{head} {_e(r.true_error)}{est}, {_seconds(r.seconds)}{via}"


def _cell(text: str) -> str:
    return text.replace("|", "\\|").replace("\n", " ")


def report(chosen, checks, runs, solvers, tols, timeout, max_nodes, seconds) -> str:
    import scipy

    import bvpkit

    stamp = datetime.datetime.now().strftime("%Y-%m-%d %H:%M")
    lines = [
        f"# bvpkit test set, run of {stamp}",
        "",
        (f"bvpkit {bvpkit.__version__}, SciPy {scipy.__version__}, NumPy {np.__version__}; "
         f"machine: {machine()}."),
        (f"Tolerances {', '.join(f'{t:g}' for t in tols)}; {timeout:g} s per solve (child process); "
         f"max_nodes {max_nodes} for every solver; total {seconds / 60:.1f} min."),
        "",
        ("True error: max over a fine grid (20001 uniform points plus geometric clusters at the ends and "
         "layers) of |y - y_exact| / (1 + |y_exact|). A **false success** claims success while the true "
         f"error is above {FALSE_FACTOR:g} x tol or above {FALSE_FACTOR:g} x the solver's own error "
         "estimate. solve_bvp gives no error estimate, and its tol bounds the relative residual of the "
         "collocation equations, not the error: its flags measure the error against the tolerance it was "
         "given. Condition: bvpkit's stability constant of the linearised problem (diagnostics.condition). "
         "Times are of the solve alone (parsing and code generation done before, one untimed warm-up "
         "solve per instance); a timeout counts as the limit in the total."),
        "",
        "## Instances",
        "",
        (f"Exact solutions are checked before use: scaled residual of the equation (finite differences, "
         f"limit {EXACT_RESIDUAL_TOL:g}) and of the conditions (limit {EXACT_CONDITION_TOL:g})."),
        "",
        "| instance | equation | conditions | domain | check (equation / conditions) | source |",
        "| --- | --- | --- | --- | --- | --- |",
    ]
    for inst in chosen:
        c: ExactCheck = checks[inst.name]
        verdict = f"{c.ode_residual:.0e} / {c.bc_residual:.0e}"
        if not c.ok:
            verdict += f" **REFUSED** {c.problem}"
        consts = ", ".join(f"{k} = {v:.6g}" for k, v in inst.constants.items())
        lines.append(
            f"| {inst.name} | `{_cell('; '.join(inst.equations))}`{' (' + consts + ')' if consts else ''} | "
            f"`{_cell('; '.join(inst.conditions))}` | [{inst.domain[0]:g}, {inst.domain[1]:g}] | {verdict} | "
            f"{_cell(inst.source)} |")
    refused = [i.name for i in chosen if not checks[i.name].ok]
    lines += ["", f"Refused (exact solution failed its check): {', '.join(refused) or 'none'}.", ""]

    lines += ["## Overview", "",
              ("One row per instance and tolerance: `ok` true error (est: the solver's estimate), time; "
               "**FALSE** marks a false success; otherwise the status word. The full table follows."), "",
              "| instance | tol | " + " | ".join(solvers) + " |",
              "| --- | --- | " + " | ".join("---" for _ in solvers) + " |"]
    by_key = {(r.instance, r.tol, r.solver): r for r in runs}
    for inst in chosen:
        for tol in tols:
            if (inst.name, tol, solvers[0]) in by_key:
                cells = [_brief(by_key.get((inst.name, tol, s))) for s in solvers]
                lines.append(f"| {inst.name} | {tol:g} | " + " | ".join(cells) + " |")
    lines += ["", "## Results", "",
              ("| instance | tol | solver | result | true error | estimate | condition | time (s) | "
               "false success |"),
              "| --- | --- | --- | --- | --- | --- | --- | --- | --- |"]
    for r in runs:
        result = r.outcome + (f" ({r.method})" if r.solver == "auto" and r.method else "")
        flag = f"**FALSE** ({r.false_success})" if r.false_success else ""
        lines.append(f"| {r.instance} | {r.tol:g} | {r.solver} | {_cell(result)} | {_e(r.true_error)} | "
                     f"{_e(r.estimate)} | {_e(r.condition)} | {r.seconds:.3g} | {flag} |")

    lines += ["", "## Summary", "",
              ("| solver | runs | solved honestly | false successes | honest failures | timeouts | crashed | "
               "median time of honest solves (s) | total time (s) |"),
              "| --- | --- | --- | --- | --- | --- | --- | --- | --- |"]
    for s in solvers:
        mine = [r for r in runs if r.solver == s]
        honest = [r for r in mine if r.success and not r.false_success]
        false = [r for r in mine if r.false_success]
        failed = [r for r in mine if not r.success and r.outcome not in ("timeout", "crashed")]
        timeouts = [r for r in mine if r.outcome == "timeout"]
        crashed = [r for r in mine if r.outcome == "crashed"]
        median = f"{np.median([r.seconds for r in honest]):.3g}" if honest else "-"
        total = sum(r.seconds for r in mine if math.isfinite(r.seconds))
        counts = " | ".join(str(len(group)) for group in (mine, honest, false, failed, timeouts, crashed))
        lines.append(f"| {s} | {counts} | {median} | {total:.1f} |")

    lines += ["", "### False successes", ""]
    false_runs = [r for r in runs if r.false_success]
    if false_runs:
        lines += ["| solver | instance | tol | true error | estimate | condition | why | message |",
                  "| --- | --- | --- | --- | --- | --- | --- | --- |"]
        for r in false_runs:
            who = r.solver + (f" ({_cell(r.method)})" if r.solver == "auto" else "")
            lines.append(f"| {who} | {r.instance} | {r.tol:g} | {_e(r.true_error)} | {_e(r.estimate)} | "
                         f"{_e(r.condition)} | {r.false_success} | {_cell(r.message[:160])} |")
    else:
        lines.append("None.")

    lines += ["", "### Solved by neither auto nor solve_bvp", ""]
    unsolved = []
    for inst in chosen:
        for tol in tols:
            pair = [by_key.get((inst.name, tol, s)) for s in ("auto", SCIPY)]
            if all(p is not None for p in pair) and not any(p.success and not p.false_success for p in pair):
                said = [p.outcome + (", false success" if p.false_success else "") for p in pair]
                unsolved.append(f"{inst.name} at tol {tol:g} (auto: {said[0]}; solve_bvp: {said[1]})")
    lines += [f"- {u}" for u in unsolved] or ["None."]

    lines += ["", "### Messages of failed and flagged runs", ""]
    notes = [r for r in runs if (not r.success or r.false_success) and r.message]
    lines += [f"- {r.instance}, tol {r.tol:g}, {r.solver}: {_cell(r.message[:240])}" for r in notes] or [
        "None."]
    warned = [r for r in runs if "warning(s)" in r.message and r.solver != SCIPY]
    if warned:
        lines += ["", "### bvpkit runs that emitted Python warnings", ""]
        for r in warned:
            said = r.message[r.message.rfind("; ", 0, r.message.find("warning(s)")) + 2:]
            lines.append(f"- {r.instance}, tol {r.tol:g}, {r.solver}: {_cell(said[:200])}")
    return "\n".join(lines) + "\n"


def main(argv: Sequence[str] = ()) -> None:
    parser = argparse.ArgumentParser(prog="python -m benchmarks testset", description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true",
                        help=f"a handful of instances at tol {QUICK_TOLERANCE:g}")
    parser.add_argument("--out", metavar="FILE", help="also write the report to FILE")
    parser.add_argument("--only", nargs="+", metavar="NAME", help="instance names (see --list)")
    parser.add_argument("--tol", nargs="+", type=float, metavar="T", help="tolerances (default 1e-4 1e-7)")
    parser.add_argument("--timeout", type=float, default=TIMEOUT, help="seconds per solve (default 10)")
    parser.add_argument("--max-nodes", type=int, default=MAX_NODES, help="mesh limit (default 100000)")
    parser.add_argument("--list", action="store_true",
                        help="list the instances and their exact-solution checks")
    args = parser.parse_args(list(argv))
    if args.only:
        unknown = [n for n in args.only if n not in BY_NAME]
        if unknown:
            parser.error(f"unknown instance(s) {', '.join(unknown)}; see --list")
    if args.list:
        for inst in INSTANCES:
            c = check_exact(inst)
            print(f"{inst.name:42s} {'ok     ' if c.ok else 'REFUSED'} equation {c.ode_residual:.0e}, "
                  f"conditions {c.bc_residual:.0e}  {inst.source[:90]}")
        return
    tols = tuple(args.tol) if args.tol else TOLERANCES
    print(run(args.only, tols=tols, timeout=args.timeout, max_nodes=args.max_nodes, out=args.out,
              quick=args.quick))


if __name__ == "__main__":
    main(sys.argv[1:])
