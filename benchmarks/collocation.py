"""bvpkit's collocation path against a hand-written solve_bvp call with finite-difference Jacobians."""

from __future__ import annotations

import math

import numpy as np
from scipy.integrate import solve_bvp
from scipy.optimize import brentq

import bvpkit

from .harness import Contender, race, table

BLASIUS = 0.33205733621519630  # Boyd 1999, SIAM Review, Table 1


def _bratu_reference() -> float:
    t = brentq(lambda t: t - math.sqrt(2) * math.cosh(t / 4), 1e-9, 4.7987)
    return t * math.tanh(t / 4)  # analytic y'(0), lam = 1, lower branch


def blasius_finite(tol: float = 1e-6, length: float = 10.0) -> str:
    """The same truncated problem (f'(10) = 1) both ways, then bvpkit's own infinite-domain job."""

    def hand():
        def f(x, y):
            return np.vstack([y[1], y[2], -0.5 * y[0] * y[2]])

        def bc(ya, yb):
            return np.array([ya[0], ya[1], yb[1] - 1.0])

        x = np.linspace(0, length, 41)
        y = np.vstack([x - 1 + np.exp(-x), 1 - np.exp(-x), np.exp(-x)])
        return solve_bvp(f, bc, x, y, tol=tol).sol(0.0)[2]

    finite = bvpkit.Problem(["f''' + f*f''/2 = 0"], ["f(0) = 0", "f'(0) = 0", f"f'({length}) = 1"],
                            (0, length), guess={"f": "x - 1 + exp(-x)"})
    infinite = bvpkit.Problem(["f''' + f*f''/2 = 0"], ["f(0) = 0", "f'(0) = 0", "f'(inf) = 1"],
                              (0, "inf"), guess={"f": "x - 1 + exp(-x)"})
    contenders = [
        Contender("hand-written solve_bvp, FD Jacobians, [0, 10]", hand),
        Contender("bvpkit collocation, verify off, [0, 10]",
                  lambda: bvpkit.solve(finite, method="collocation", tol=tol, verify=False).evaluate("f''(0)")),
        Contender("bvpkit collocation, with error estimate, [0, 10]",
                  lambda: bvpkit.solve(finite, method="collocation", tol=tol).evaluate("f''(0)")),
        Contender("bvpkit auto, (0, inf) with truncation search and estimate",
                  lambda: bvpkit.solve(infinite, tol=tol).evaluate("f''(0)")),
    ]
    race(contenders)
    return table(f"Blasius boundary layer, tol = {tol:g}", contenders, contenders[0].name, BLASIUS,
                 "Error is against Boyd (1999); the [0, 10] rows carry the truncation error of L = 10.")


def bratu(tol: float = 1e-6) -> str:
    def hand():
        def f(x, y):
            return np.vstack([y[1], -np.exp(y[0])])

        def bc(ya, yb):
            return np.array([ya[0], yb[0]])

        x = np.linspace(0, 1, 41)
        return solve_bvp(f, bc, x, np.zeros((2, x.size)), tol=tol).sol(0.0)[1]

    p = bvpkit.Problem(["y'' + exp(y) = 0"], ["y(0) = 0", "y(1) = 0"], (0, 1))
    contenders = [
        Contender("hand-written solve_bvp, FD Jacobians", hand),
        Contender("bvpkit collocation, verify off", lambda: bvpkit.solve(p, method="collocation", tol=tol, verify=False).evaluate("y'(0)")),
        Contender("bvpkit collocation, with error estimate", lambda: bvpkit.solve(p, method="collocation", tol=tol).evaluate("y'(0)")),
        Contender("bvpkit auto", lambda: bvpkit.solve(p, tol=tol).evaluate("y'(0)")),
    ]
    race(contenders)
    return table(f"Bratu, lam = 1, lower branch, tol = {tol:g}", contenders, contenders[0].name, _bratu_reference())


SECTIONS = [blasius_finite, bratu]
