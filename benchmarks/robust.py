"""Solving from no guess: bvpkit's auto from its default guess against solve_bvp given a good one."""

from __future__ import annotations

import numpy as np
from scipy.integrate import solve_bvp

import bvpkit

from .harness import Contender, race, table

BLASIUS = 0.33205733621519630  # Boyd 1999, SIAM Review, Table 1
# Amore, Boyd and Fernandez 2012 (16 digits; Kobayashi et al. 1955 give -1.588071)
THOMAS_FERMI = -1.588071022611375


def blasius_default_guess(tol: float = 1e-8, length: float = 12.0) -> str:
    """Blasius on [0, 12] (f'(12) = 1), where bvpkit's default guess f = x^2/24 leads Newton astray:
    auto gets there by continuation from the problem without its nonlinear term."""

    def hand(jacobian: bool):  # noqa: ANN202
        def f(x, y):  # noqa: ANN001, ANN202
            return np.vstack([y[1], y[2], -0.5 * y[0] * y[2]])

        def jac(x, y):  # noqa: ANN001, ANN202
            out = np.zeros((3, 3, x.size))
            out[0, 1] = out[1, 2] = 1.0
            out[2, 0], out[2, 2] = -0.5 * y[2], -0.5 * y[0]
            return out

        def bc(ya, yb):  # noqa: ANN001, ANN202
            return np.array([ya[0], ya[1], yb[1] - 1.0])

        def run() -> float:
            x = np.linspace(0, length, 41)
            y = np.vstack([x - 1 + np.exp(-x), 1 - np.exp(-x), np.exp(-x)])
            return solve_bvp(f, bc, x, y, fun_jac=jac if jacobian else None, tol=tol).sol(0.0)[2]

        return run

    p = bvpkit.Problem(["f''' + f*f''/2 = 0"], ["f(0) = 0", "f'(0) = 0", f"f'({length:g}) = 1"], (0, length))

    def auto() -> float:
        sol = bvpkit.solve(p, tol=tol)
        if not (sol.success and sol.method == "collocation"):
            raise RuntimeError(sol.message)
        return sol.evaluate("f''(0)")

    contenders = [
        Contender("solve_bvp given f = x - 1 + exp(-x), FD Jacobians", hand(False)),
        Contender("solve_bvp given f = x - 1 + exp(-x), exact Jacobian", hand(True)),
        Contender("bvpkit auto from its default guess, with error estimate", auto),
        Contender("bvpkit collocation alone from its default guess (fails)",
                  lambda: bvpkit.solve(p, tol=tol, method="collocation").evaluate("f''(0)",
                                                                                   allow_failed=True)),
    ]
    race(contenders)
    return table(f"Blasius on [0, {length:g}] from no guess, tol = {tol:g}", contenders, contenders[0].name,
                 BLASIUS,
                 "Error against Boyd (1999); truncation at 12 costs about 1e-10. The last row shows the "
                 "default guess's failure alone (mesh limit, a reversed-flow iterate).")


def thomas_fermi(tol: float = 1e-8) -> str:
    """Thomas-Fermi as written (y'' = y^(3/2)/sqrt(x), y(inf) = 0): the stretch x = xi^2 and the
    truncation search."""
    p = bvpkit.Problem(["y'' = y**(3/2)/sqrt(x)"], ["y(0) = 1", "y(inf) = 0"], (0, "inf"))
    contenders = [Contender("bvpkit auto, (0, inf), stretched, with truncation search and estimate",
                            lambda: bvpkit.solve(p, tol=tol).evaluate("y'(0)"))]
    race(contenders, repeats=3)
    return table(f"Thomas-Fermi y'(0), tol = {tol:g}", contenders, contenders[0].name, THOMAS_FERMI)


SECTIONS = [blasius_default_guess, thomas_fermi]
