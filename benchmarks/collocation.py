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




def _small_problems() -> list[tuple[str, bvpkit.Problem, dict]]:
    """Blasius, Bratu, Troesch, a beam and a layer: the small smooth problems of issue 15."""
    return [
        ("Blasius on [0, 10]", bvpkit.Problem(["f''' + f*f''/2 = 0"], ["f(0) = 0", "f'(0) = 0", "f'(10) = 1"],
                                               (0, 10), guess={"f": "x - 1 + exp(-x)"}), {}),
        ("Bratu, lam = 1", bvpkit.Problem(["y'' + exp(y) = 0"], ["y(0) = 0", "y(1) = 0"], (0, 1)), {}),
        ("Troesch, mu = 5", bvpkit.Problem(["y'' = mu*sinh(mu*y)"], ["y(0) = 0", "y(1) = 1"], (0, 1),
                                           constants={"mu": 5.0}), {}),
        ("beam on an elastic bed", bvpkit.Problem(["EI*w'''' + kb*w = q"], ["w(0) = 0", "w''(0) = 0", "w(L) = 0",
                                                                          "w''(L) = 0"], (0, "L"),
                                                  constants={"EI": 2.0e3, "kb": 5.0e4, "q": 800.0, "L": 3.0}), {}),
        ("layer, eps = 1e-3", bvpkit.Problem(["eps*y'' + y' = 0"], ["y(0) = 0", "y(1) = 1"], (0, 1),
                                             constants={"eps": 1e-3}), {}),
    ]


def small_problems(tol: float = 1e-6, repeats: int = 7) -> str:
    """Target: collocation at most 10x one Newton iteration (residual, exact Jacobian, one LU
    and solve) on its own final mesh."""
    import statistics
    import time

    from bvpkit.methods.discrete import CollocationEquations

    lines = [f"### Collocation against one Newton iteration on its final mesh, tol = {tol:g}", "",
             "| problem | nodes | collocation, verify off (ms) | with error estimate (ms) | one Newton iteration (ms) "
             "| ratio, verify off (target <= 10) | ratio with estimate |", "| --- | --- | --- | --- | --- | --- | --- |"]
    for name, problem, _ in _small_problems():
        prepared = bvpkit.prepare(problem)
        sol = bvpkit.solve(prepared, method="collocation", tol=tol, verify=False)
        view = sol.interpolant
        eq = CollocationEquations(prepared.compiled, view.t, view.k)

        def newton_iteration(eq=eq, y=view.y, p=view.p):  # noqa: ANN001, ANN202
            col, bc, _, ym, _ = eq.parts(y, p)
            return eq.factor(y, p, ym).solve(np.concatenate([col.T.ravel(), bc]))

        runs = {"off": [], "on": [], "newton": []}
        for _ in range(repeats):
            for key in runs:
                start = time.perf_counter()
                if key == "newton":
                    for _ in range(10):
                        newton_iteration()
                    runs[key].append((time.perf_counter() - start) / 10)
                    continue
                bvpkit.solve(prepared, method="collocation", tol=tol, verify=key == "on")
                runs[key].append(time.perf_counter() - start)
        off, on, one = (statistics.median(runs[k]) for k in ("off", "on", "newton"))
        lines.append(f"| {name} | {view.t.size} | {1e3 * off:.2f} | {1e3 * on:.2f} | {1e3 * one:.3f} | "
                     f"{off / one:.1f} [{min(runs['off']) / one:.1f}, {max(runs['off']) / one:.1f}] | {on / one:.1f} |")
    return "\n".join(lines) + "\n"


def sixth_order(tol: float = 1e-10, repeats: int = 5) -> str:
    """Target: at tol 1e-10, the sixth-order method on at least 3x fewer nodes and in at most half the
    time of the fourth-order one, on the small problems above (both with their error estimates)."""
    import statistics
    import time

    lines = [f"### Sixth-order against fourth-order collocation, tol = {tol:g}, error estimates on", "",
             "| problem | 4th: nodes | 6th: mesh nodes (output points) | node ratio (target >= 3) | 4th (ms) | "
             "6th (ms) | time ratio 4th/6th (target >= 2) | 4th estimate | 6th estimate |",
             "| --- | --- | --- | --- | --- | --- | --- | --- | --- |"]
    for name, problem, _ in _small_problems():
        prepared = bvpkit.prepare(problem)
        runs = {"collocation": [], "collocation6": []}
        sols = {}
        for _ in range(repeats):
            for method in runs:
                start = time.perf_counter()
                sols[method] = bvpkit.solve(prepared, method=method, tol=tol)
                runs[method].append(time.perf_counter() - start)
        four, six = sols["collocation"], sols["collocation6"]
        if not (four.success and six.success):
            lines.append(f"| {name} | {four.status.word} | {six.status.word}: {six.message[:60]} | | | | | | |")
            continue
        mesh6 = (six.x.size - 1) // 3 + 1
        t4, t6 = statistics.median(runs["collocation"]), statistics.median(runs["collocation6"])
        lines.append(f"| {name} | {four.x.size} | {mesh6} ({six.x.size}) | {four.x.size / mesh6:.1f} "
                     f"({four.x.size / six.x.size:.1f} by output points) | {1e3 * t4:.1f} | {1e3 * t6:.1f} | "
                     f"{t4 / t6:.2f} | {four.diagnostics.error_estimate:.1e} | {six.diagnostics.error_estimate:.1e} |")
    return "\n".join(lines) + "\n"


SECTIONS = [blasius_finite, bratu, small_problems, sixth_order]
