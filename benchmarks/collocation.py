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





# A straight pin fin with a convective tip (our own numbers): theta'' = m^2 theta, theta(0) = 1,
# theta'(L) + H theta(L) = 0. Analytic: theta'(0) = -m (sinh mL + (H/m) cosh mL) / (cosh mL + (H/m) sinh mL).
_FIN_M, _FIN_H, _FIN_L = 4.0, 0.8, 1.0


def _fin_reference() -> float:
    m, h, length = _FIN_M, _FIN_H, _FIN_L
    ratio = h / m
    return -m * (math.sinh(m * length) + ratio * math.cosh(m * length)) / (
        math.cosh(m * length) + ratio * math.sinh(m * length))


def _troesch_reference() -> float:
    """y'(0) of Troesch's problem at mu = 5 (Roberts and Shipman 1976: 4.575046e-2), refined by bvpkit
    collocation at tol 1e-11 in the benchmark run below."""
    p = bvpkit.Problem(["y'' = mu*sinh(mu*y)"], ["y(0) = 0", "y(1) = 1"], (0, 1), constants={"mu": 5.0})
    return bvpkit.solve(p, method="collocation", tol=1e-11).evaluate("y'(0)")


def _scipy_small(tol: float):  # noqa: ANN202
    """solve_bvp with analytic Jacobians, seeded as a careful user would (11 nodes, the same guesses)."""

    def bratu():
        x = np.linspace(0, 1, 11)
        sol = solve_bvp(lambda x, y: np.vstack([y[1], -np.exp(y[0])]), lambda a, b: np.array([a[0], b[0]]),
                        x, np.zeros((2, x.size)), tol=tol,
                        fun_jac=lambda x, y: np.array([[np.zeros_like(x), np.ones_like(x)],
                                                       [-np.exp(y[0]), np.zeros_like(x)]]),
                        bc_jac=lambda a, b: (np.array([[1.0, 0.0], [0.0, 0.0]]), np.array([[0.0, 0.0], [1.0, 0.0]])))
        return sol.sol(0.0)[1]

    def troesch():
        x = np.linspace(0, 1, 11)
        mu = 5.0
        sol = solve_bvp(lambda x, y: np.vstack([y[1], mu * np.sinh(mu * y[0])]),
                        lambda a, b: np.array([a[0], b[0] - 1.0]), x, np.vstack([x, np.ones_like(x)]), tol=tol,
                        fun_jac=lambda x, y: np.array([[np.zeros_like(x), np.ones_like(x)],
                                                       [mu * mu * np.cosh(mu * y[0]), np.zeros_like(x)]]),
                        bc_jac=lambda a, b: (np.array([[1.0, 0.0], [0.0, 0.0]]), np.array([[0.0, 0.0], [1.0, 0.0]])))
        return sol.sol(0.0)[1]

    def fin():
        x = np.linspace(0, _FIN_L, 11)
        m2 = _FIN_M**2
        sol = solve_bvp(lambda x, y: np.vstack([y[1], m2 * y[0]]),
                        lambda a, b: np.array([a[0] - 1.0, b[1] + _FIN_H * b[0]]), x, np.ones((2, x.size)),
                        tol=tol, fun_jac=lambda x, y: np.array([[np.zeros_like(x), np.ones_like(x)],
                                                                [np.full_like(x, m2), np.zeros_like(x)]]),
                        bc_jac=lambda a, b: (np.array([[1.0, 0.0], [0.0, 0.0]]), np.array([[0.0, 0.0], [_FIN_H, 1.0]])))
        return sol.sol(0.0)[1]

    return {"Bratu, lam = 1": bratu, "Troesch, mu = 5": troesch, "pin fin, convective tip": fin}


def small_against_scipy(tol: float = 1e-6, repeats: int = 9) -> str:
    """Target (issue 25): auto with its error estimate <= 0.6x solve_bvp with analytic Jacobians (geo-mean)."""
    import statistics

    problems = {
        "Bratu, lam = 1": (bvpkit.Problem(["y'' + exp(y) = 0"], ["y(0) = 0", "y(1) = 0"], (0, 1)), "y'(0)",
                           _bratu_reference(), "analytic (lower branch)"),
        "Troesch, mu = 5": (bvpkit.Problem(["y'' = mu*sinh(mu*y)"], ["y(0) = 0", "y(1) = 1"], (0, 1),
                                           constants={"mu": 5.0}, guess={"y": "x"}), "y'(0)", _troesch_reference(),
                            "bvpkit at tol 1e-11; Roberts and Shipman 1976 give 4.575046e-2"),
        "pin fin, convective tip": (bvpkit.Problem(["T'' = m**2*T"], ["T(0) = 1", "T'(L) + H*T(L) = 0"], (0, "L"),
                                                   constants={"m": _FIN_M, "H": _FIN_H, "L": _FIN_L}, guess={"T": "1"}),
                                    "T'(0)", _fin_reference(), "analytic"),
    }
    hands = _scipy_small(tol)
    lines = [f"### Small problems: bvpkit auto against solve_bvp with analytic Jacobians, tol = {tol:g}", "",
             "Both from 11 nodes and the same guesses (bvpkit: the problem's guess; solve_bvp: the same values). "
             "Medians of alternating runs; the ratio is bvpkit's time over solve_bvp's.", "",
             "| problem | solve_bvp (ms) | auto, estimate on (ms) | ratio (target geo-mean <= 0.6) | collocation, "
             "estimate on (ms) | ratio | error solve_bvp / auto | auto's estimate | reference |",
             "| --- | --- | --- | --- | --- | --- | --- | --- | --- |"]
    ratios = []
    for name, (problem, what, reference, source) in problems.items():
        prepared = bvpkit.prepare(problem)
        contenders = [
            Contender("solve_bvp", hands[name]),
            Contender("auto", lambda prepared=prepared, what=what: bvpkit.solve(prepared, tol=tol).evaluate(what)),
            Contender("collocation", lambda prepared=prepared, what=what: bvpkit.solve(
                prepared, method="collocation", tol=tol).evaluate(what)),
        ]
        race(contenders, repeats=repeats, warmup=2)
        base, auto, coll = (statistics.median(c.times) for c in contenders)
        ratios.append(auto / base)
        estimate = bvpkit.solve(prepared, tol=tol).diagnostics.error_estimate
        errors = [abs(c.value - reference) / abs(reference) for c in contenders[:2]]
        lines.append(f"| {name} | {1e3 * base:.2f} | {1e3 * auto:.2f} | {auto / base:.2f} | {1e3 * coll:.2f} | "
                     f"{coll / base:.2f} | {errors[0]:.1e} / {errors[1]:.1e} | {estimate:.1e} | {source} |")
    geo = math.exp(sum(math.log(r) for r in ratios) / len(ratios))
    lines += ["", f"Geometric mean of auto's ratios: {geo:.2f} (target <= 0.6).", ""]
    return "\n".join(lines) + "\n"
def tight_auto(repeats: int = 7) -> str:
    """Target (issue 25): at tol 1e-10 on Blasius [0, 10] and Bratu, auto <= 0.67x of fourth-order
    collocation; auto picks the sixth order where its declared cost model says it pays."""
    import statistics
    import time

    blasius = bvpkit.Problem(["f''' + f*f''/2 = 0"], ["f(0) = 0", "f'(0) = 0", "f'(10) = 1"], (0, 10),
                             guess={"f": "x - 1 + exp(-x)"})
    problems = {
        "Blasius on [0, 10]": (blasius, "f''(0)", BLASIUS),
        "Bratu, lam = 1": (bvpkit.Problem(["y'' + exp(y) = 0"], ["y(0) = 0", "y(1) = 0"], (0, 1)), "y'(0)",
                           _bratu_reference()),
    }
    lines = ["### Tight tolerances: auto, the fourth order and the sixth order, error estimates on", "",
             "Medians of alternating runs. Blasius's error includes its truncation at 10 (~1e-9).", "",
             "| problem | tol | 4th (ms) | 6th (ms) | auto (ms) | auto picked | auto / 4th (target <= 0.67 at 1e-10) "
             "| 6th / 4th | errors 4th / 6th / auto |", "| --- | --- | --- | --- | --- | --- | --- | --- | --- |"]
    for name, (problem, what, reference) in problems.items():
        prepared = bvpkit.prepare(problem)
        for tol in (1e-10, 1e-11, 1e-12):
            runs = {"collocation": [], "collocation6": [], "auto": []}
            sols = {}
            for method in runs:
                bvpkit.solve(prepared, method=method, tol=tol)
            for _ in range(repeats):
                for method in runs:
                    start = time.perf_counter()
                    sols[method] = bvpkit.solve(prepared, method=method, tol=tol)
                    runs[method].append(time.perf_counter() - start)
            t4, t6, ta = (statistics.median(runs[m]) for m in runs)
            errors = " / ".join(f"{abs(sols[m].evaluate(what) - reference) / abs(reference):.0e}"
                                if sols[m].success else sols[m].status.word for m in runs)
            lines.append(f"| {name} | {tol:g} | {1e3 * t4:.1f} | {1e3 * t6:.1f} | {1e3 * ta:.1f} | "
                         f"{sols['auto'].method} | {ta / t4:.2f} | {t6 / t4:.2f} | {errors} |")
    return "\n".join(lines) + "\n"


SECTIONS = [blasius_finite, bratu, small_problems, small_against_scipy, sixth_order, tight_auto]
