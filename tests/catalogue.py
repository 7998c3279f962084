"""Problems with exact or published answers, shared by the test modules.

Each entry: a Problem factory, the quantity to check, its reference value, the source of
that value, and the relative accuracy required at the tolerance given.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable

from scipy.optimize import brentq

import bvpkit


def bratu_t(lam: float, branch: str) -> float:
    """Root t of t = sqrt(2 lam) cosh(t/4) (analytic solution of the Bratu problem)."""
    g = lambda t: t - math.sqrt(2 * lam) * math.cosh(t / 4)  # noqa: E731
    # the two roots straddle the fold parameter t* ~ 4.7987 (where d/dt of the ratio vanishes)
    return brentq(g, 1e-9, 4.7987) if branch == "lower" else brentq(g, 4.7987, 40.0)


def bratu_slope(lam: float, branch: str) -> float:
    """y'(0) of y = -2 ln(cosh((x - 1/2) t/2) / cosh(t/4)): analytic, y'(0) = t tanh(t/4)."""
    t = bratu_t(lam, branch)
    return t * math.tanh(t / 4)


@dataclass
class Case:
    name: str
    make: Callable[[], bvpkit.Problem]
    quantity: str
    reference: float
    source: str
    rel: float  # required relative accuracy at tol
    tol: float = 1e-8
    guess: dict | None = None


BLASIUS_FPP0 = 0.33205733621519630  # Boyd 1999, SIAM Review 41(2), Table 1 (15 digits); Howarth 1938 to 5


def blasius() -> bvpkit.Problem:
    return bvpkit.Problem(
        equations=["f''' + f*f''/2 = 0"],
        conditions=["f(0) = 0", "f'(0) = 0", "f'(inf) = 1"],
        domain=(0, "inf"),
        independent="eta",
        guess={"f": "eta - 1 + exp(-eta)"},
    )


def bratu() -> bvpkit.Problem:
    return bvpkit.Problem(["y'' + lam*exp(y) = 0"], ["y(0) = 0", "y(1) = 0"], (0, 1), constants={"lam": 1.0})


EI, Q, L = 2.5e4, 800.0, 1.7  # our own demo beam; the check values are formulas in EI, q, L


def cantilever() -> bvpkit.Problem:
    return bvpkit.Problem(
        ["EI*w'''' = q"],
        ["w(0) = 0", "w'(0) = 0", "w''(L) = 0", "w'''(L) = 0"],
        (0, "L"),
        constants={"EI": EI, "q": Q, "L": L},
    )


def simply_supported() -> bvpkit.Problem:
    return bvpkit.Problem(
        ["EI*w'''' = q"],
        ["w(0) = 0", "w''(0) = 0", "w(L) = 0", "w''(L) = 0"],
        (0, "L"),
        constants={"EI": EI, "q": Q, "L": L},
    )


M_FIN, L_FIN = 9.0, 0.15  # our own fin: m = 9 1/m, L = 0.15 m


def fin() -> bvpkit.Problem:
    return bvpkit.Problem(
        ["T'' = m**2*T"], ["T(0) = 1", "T'(Lf) = 0"], (0, "Lf"), constants={"m": M_FIN, "Lf": L_FIN}
    )


def boundary_layer(eps: float) -> bvpkit.Problem:
    return bvpkit.Problem(["eps*y'' + y' = 0"], ["y(0) = 0", "y(1) = 1"], (0, 1), constants={"eps": eps})


CASES = [
    Case("blasius", blasius, "f''(0)", BLASIUS_FPP0, "Boyd 1999, SIAM Review, Table 1", 1e-8, tol=1e-10),
    Case("bratu_lower", bratu, "y'(0)", bratu_slope(1.0, "lower"),
         "analytic: t tanh(t/4), t = sqrt(2 lam) cosh(t/4), lower root", 1e-8),
    Case("bratu_upper", bratu, "y'(0)", bratu_slope(1.0, "upper"),
         "analytic: t tanh(t/4), t = sqrt(2 lam) cosh(t/4), upper root", 1e-8, guess={"y": "16*x*(1-x)"}),
    Case("cantilever_tip", cantilever, "w(L)", Q * L**4 / (8 * EI),
         "analytic: q L^4 / (8 EI), any strength-of-materials handbook", 1e-9),
    Case("simply_supported_midspan", simply_supported, "w(L/2)", 5 * Q * L**4 / (384 * EI),
         "analytic: 5 q L^4 / (384 EI), any strength-of-materials handbook", 1e-9),
    Case("fin_efficiency", fin, "-T'(0)/(m**2*Lf)", math.tanh(M_FIN * L_FIN) / (M_FIN * L_FIN),
         "analytic: tanh(mL)/(mL), insulated tip", 1e-8),
    Case("boundary_layer_1e-3", lambda: boundary_layer(1e-3), "y'(0)",
         1 / (1e-3 * (1 - math.exp(-1 / 1e-3))),
         "analytic: y = (1 - exp(-x/eps)) / (1 - exp(-1/eps)), y'(0) = 1/(eps (1 - exp(-1/eps)))", 1e-5),
]
