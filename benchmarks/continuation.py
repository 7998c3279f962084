"""bvpkit.trace against a hand-written loop of solve_bvp calls seeded with the previous solution."""

from __future__ import annotations

import math

import numpy as np
from scipy.integrate import solve_bvp

import bvpkit

from .harness import Contender, race, table

POINTS = 100
LAST = 3.5  # just below the fold at 3.51383071912516 (analytic)


def _reference() -> float:
    from scipy.optimize import brentq

    t = brentq(lambda t: t - math.sqrt(2 * LAST) * math.cosh(t / 4), 1e-9, 4.7987)
    return t * math.tanh(t / 4)  # analytic y'(0) on the lower branch at lam = 3.5


def _hand(values: np.ndarray, tol: float) -> tuple[float, str]:
    x = np.linspace(0, 1, 41)
    y = np.zeros((2, x.size))
    last, failure = math.nan, ""
    for lam in values:
        res = solve_bvp(lambda x, y, lam=lam: np.vstack([y[1], -lam * np.exp(y[0])]),
                        lambda ya, yb: np.array([ya[0], yb[0]]), x, y, tol=tol)
        if res.status != 0:
            failure = f"failed at lam = {lam:.6g}: {res.message}"
            break
        x, y, last = res.x, res.y, res.sol(0.0)[1]
    return last, failure


def bratu_trace(tol: float = 1e-6) -> str:
    values = np.linspace(0.1, LAST, POINTS)
    p = bvpkit.Problem(["y'' + lam*exp(y) = 0"], ["y(0) = 0", "y(1) = 0"], (0, 1), constants={"lam": 0.1})
    step = (LAST - 0.1) / (POINTS - 1)
    contenders = [
        Contender(f"hand-written loop of {POINTS} solve_bvp calls, FD Jacobians", lambda: _hand(values, tol)[0]),
        Contender(f"bvpkit.trace, {POINTS} fixed steps, verify off",
                  lambda: bvpkit.trace(p, "lam", start=0.1, stop=LAST, outputs=["y'(0)"], tol=tol, step=step,
                                       fixed_step=True, verify=False, max_points=POINTS + 5).outputs["y'(0)"][-1]),
        Contender(f"bvpkit.trace, {POINTS} fixed steps, error estimate at each point",
                  lambda: bvpkit.trace(p, "lam", start=0.1, stop=LAST, outputs=["y'(0)"], tol=tol, step=step,
                                       fixed_step=True, max_points=POINTS + 5).outputs["y'(0)"][-1]),
        Contender("bvpkit.trace, adaptive steps, verify off",
                  lambda: bvpkit.trace(p, "lam", start=0.1, stop=LAST, outputs=["y'(0)"], tol=tol,
                                       verify=False).outputs["y'(0)"][-1]),
        Contender("bvpkit.trace, adaptive steps, error estimate at each point",
                  lambda: bvpkit.trace(p, "lam", start=0.1, stop=LAST, outputs=["y'(0)"], tol=tol).outputs["y'(0)"][-1]),
    ]
    race(contenders, repeats=3)
    _, failure = _hand(np.linspace(0.1, 3.6, 104), tol)
    branch = bvpkit.trace(p, "lam", start=0.1, stop=3.6, outputs=["y'(0)"], tol=tol)
    fold = branch.folds[0].parameter if branch.folds else math.nan
    note = (f"Bratu family from lam = 0.1 to {LAST} (the fold is at 3.5138). Continued to 3.6, the hand-written "
            f"loop {failure or 'did not fail'}; bvpkit.trace went round the fold (located at {fold:.12g}) "
            f"and came back along the upper branch in {len(branch.parameter)} points.")
    return table(f"Tracing Bratu to near the fold, tol = {tol:g}", contenders, contenders[0].name, _reference(), note)


def bratu_round_the_fold(tol: float = 1e-6) -> str:
    """The cost of a trace is its points: round the fold and back against a hand loop over as
    many values (the loop stays on the lower branch; it cannot turn)."""
    p = bvpkit.Problem(["y'' + lam*exp(y) = 0"], ["y(0) = 0", "y(1) = 0"], (0, 1), constants={"lam": 0.1})

    def traced() -> bvpkit.families.continuation.Branch:
        return bvpkit.trace(p, "lam", start=0.1, stop=5.0, outputs=["y'(0)"], tol=tol, at=[LAST], return_to=1.0)

    points = len(traced().parameter)
    values = np.linspace(0.1, LAST, points)
    contenders = [
        Contender(f"hand-written loop of {points} seeded solve_bvp calls (0.1 -> {LAST})",
                  lambda: _hand(values, tol)[0]),
        Contender(f"bvpkit.trace 0.1 -> fold -> 1.0 on the upper branch ({points} points)",
                  lambda: traced().requested[LAST][0].evaluate("y'(0)")),
    ]
    race(contenders, repeats=5)
    note = (f"Bratu at tol = {tol:g}: the trace's {points} points (natural steps, the turn in "
            "pseudo-arclength, the fold located, a solution at lam = 3.5 exactly, each point with its "
            "error estimate) against the same number of seeded solve_bvp calls along the lower branch. "
            "Check value: y'(0) at lam = 3.5 on the lower branch (analytic).")
    return table("Tracing Bratu round the fold: the cost per point", contenders, contenders[0].name, _reference(), note)


# -- the wedge flows through their separation fold (an infinite domain) ------------------------

WEDGE = "f''' + f*f'' + beta*(1 - f'**2) = 0"
FOLD_BETA = -0.1988377350  # Belden et al. 2019 (Hartree 1937 gives -0.1988)


def _wedge_rhs(beta: float):  # noqa: ANN202
    def f(x, y):  # noqa: ANN001, ANN202
        return np.vstack([y[1], y[2], -y[0] * y[2] - beta * (1 - y[1] ** 2)])

    def jac(x, y):  # noqa: ANN001, ANN202
        j = np.zeros((3, 3, x.size))
        j[0, 1] = j[1, 2] = 1.0
        j[2, 0], j[2, 1], j[2, 2] = -y[2], 2 * beta * y[1], -y[0]
        return j

    return f, jac


def _wedge_hand(values: np.ndarray, tol: float, length: float = 15.0) -> tuple[float, int, str]:
    """The loop a user writes: solve_bvp at a fixed truncation, each call seeded by the last;
    returns f''(0) at beta = 0, the number of values solved and the failure, if any."""
    x = np.linspace(0, length, 41)
    y = np.vstack([x - 1 + np.exp(-x), 1 - np.exp(-x), np.exp(-x)])
    at_zero, done = math.nan, 0
    for beta in values:
        f, jac = _wedge_rhs(beta)
        res = solve_bvp(f, lambda ya, yb: np.array([ya[0], ya[1], yb[1] - 1]), x, y, tol=tol, fun_jac=jac,
                        max_nodes=100_000)
        if res.status != 0:
            return at_zero, done, f"failed at beta = {beta:.6g}: {res.message}"
        x, y = res.x, res.y
        if beta == 0.0:
            at_zero = float(res.y[2, 0])
        done += 1
    return at_zero, done, ""


def wedge_trace(tol: float = 1e-6) -> str:
    infinite = bvpkit.Problem([WEDGE], ["f(0) = 0", "f'(0) = 0", "f'(inf) = 1"], (0, "inf"), independent="eta",
                              constants={"beta": 1.0})
    finite = bvpkit.Problem([WEDGE], ["f(0) = 0", "f'(0) = 0", "f'(15) = 1"], (0, 15), independent="eta",
                            constants={"beta": 1.0})
    points, folds = {}, {}

    def traced(problem: bvpkit.Problem, key: str) -> float:
        branch = bvpkit.trace(problem, "beta", start=1.0, stop=-0.3, outputs=["f''(0)"], tol=tol, at=[0.0],
                              return_to=-0.05)
        points[key] = len(branch.parameter)
        folds[key] = branch.folds[0].parameter if branch.folds else math.nan
        return branch.requested[0.0][0].evaluate("f''(0)")

    # the loop runs through beta = 0 as close to the fold as it can, in about as many points as the trace takes
    values = np.concatenate([np.linspace(1.0, 0.0, 21), np.linspace(0.0, FOLD_BETA + 1e-3, 20)[1:]])
    contenders = [
        Contender(f"hand-written loop of {values.size} seeded solve_bvp calls at L = 15 (1 -> 0 -> -0.1978)",
                  lambda: _wedge_hand(values, tol)[0]),
        Contender("bvpkit.trace on (0, inf): beta 1 -> fold -> -0.05", lambda: traced(infinite, "inf")),
        Contender("bvpkit.trace on (0, 15): the same", lambda: traced(finite, "fin")),
    ]
    race(contenders, repeats=3)
    _, done, failure = _wedge_hand(np.linspace(1.0, -0.25, 60), tol)
    import statistics

    per_inf = statistics.median(contenders[1].times) / max(points.get("inf", 1), 1)
    per_fin = statistics.median(contenders[2].times) / max(points.get("fin", 1), 1)
    per_hand = statistics.median(contenders[0].times) / values.size
    note = (f"Wedge flows f''' + f f'' + beta (1 - f'^2) = 0, every contender at tol = {tol:g}. Check value: "
            "f''(0) at beta = 0 (Blasius, 0.469599988361: Boyd 1999's 0.332057336215 times sqrt 2). The trace "
            f"goes round the separation fold (located at {folds.get('inf', math.nan):.10g} on (0, inf), "
            f"{folds.get('fin', math.nan):.10g} on (0, 15); Belden et al. 2019: -0.1988377350) and back; "
            f"continued past the fold (60 values to -0.25), the hand loop {failure or 'did not fail'} after "
            f"{done} points. Points: {points.get('inf')} on (0, inf), {points.get('fin')} on (0, 15); time per "
            f"point {1e3 * per_inf:.1f} ms on (0, inf), {1e3 * per_fin:.1f} ms on the finite domain (ratio "
            f"{per_inf / per_fin:.2f}), {1e3 * per_hand:.1f} ms in the hand loop.")
    return table("Tracing the wedge flows through their fold", contenders, contenders[0].name, 0.469599988361, note)


# -- the slab's ignition limit against the Biot number -----------------------------------------

def _slab(bi: float):  # noqa: ANN202
    def f(x, y, p):  # noqa: ANN001, ANN202
        return np.vstack([y[1], -p[0] * np.exp(y[0])])

    return f


def _fold_by_hand(bi: float, tol: float) -> float:
    """A user's fold: march d up with seeded solve_bvp calls, halve the step on failure."""
    x = np.linspace(0, 1, 41)
    y = np.zeros((2, x.size))
    d, step = 0.2 * bi / math.e, 0.2 * bi / math.e
    best = d
    while step > 1e-7 * d:
        trial = d + step
        res = solve_bvp(lambda x, y, trial=trial: np.vstack([y[1], -trial * np.exp(y[0])]),
                        lambda ya, yb, bi=bi: np.array([ya[1], yb[1] + bi * yb[0]]), x, y, tol=tol)
        if res.status == 0 and np.isfinite(res.y).all() and res.y[0, 0] < 10:
            d, best, x, y = trial, trial, res.x, res.y
        else:
            step *= 0.5
    return best


def fold_curve(tol: float = 1e-8) -> str:
    p = bvpkit.Problem(["y'' + d*exp(y) = 0"], ["y'(0) = 0", "y'(1) + Bi*y(1) = 0"], (0, 1),
                       constants={"d": 0.1, "Bi": 1.0})
    his = [0.1, 0.3, 1.0, 3.0, 10.0]
    reference = 0.7289761161857099  # the fold at Bi = 10 by a one-parameter trace at tol 1e-10 (this project)
    contenders = [
        Contender("hand-written: march d with seeded solve_bvp, halving steps, at 5 Biot numbers",
                  lambda: [_fold_by_hand(bi, tol) for bi in his][-1]),
        Contender("bvpkit.fold_curve over Bi in [0.1, 10], the 5 values requested exactly",
                  lambda: bvpkit.fold_curve(p, "d", along="Bi", start=0.1, stop=10.0, tol=tol, at=his)
                  .requested[10.0][0].prepared.constants["d"]),
    ]
    race(contenders, repeats=3)
    note = ("Frank-Kamenetskii slab y'' + d e^y = 0, y'(0) = 0, y'(1) + Bi y(1) = 0: its ignition limit d_c(Bi). "
            "The hand loop finds the last d that solves to within 1e-7 of it; the fold curve follows the exact "
            "discrete fold (the whole curve, not five points). Check value: d_c(10).")
    return table("The ignition limit against the Biot number", contenders, contenders[0].name, reference, note)


SECTIONS = [bratu_trace, bratu_round_the_fold, wedge_trace, fold_curve]
