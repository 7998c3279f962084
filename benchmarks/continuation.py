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


SECTIONS = [bratu_trace]
