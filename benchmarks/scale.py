"""Growing systems: a chain of reacting species in a slab, n = 4, 10, 20, 40 states.

Species i (i = 1..m, n = 2m states) diffuses and reacts A1 -> A2 -> ... with second-order
rates: c1'' = k c1^2, ci'' = k ci^2 - k c(i-1)^2; symmetric centre ci'(0) = 0; surface
c1(1) = 1, ci(1) = 0.1 for i > 1. Our own scenario (a demo of size, not a published case).
"""

from __future__ import annotations

import statistics
import time

import numpy as np
from scipy.integrate import solve_bvp

import bvpkit

from .harness import Contender, race, table

K = 2.0


def chain_problem(species: int) -> bvpkit.Problem:
    names = [f"c{i}" for i in range(1, species + 1)]
    equations = [f"{names[0]}'' = k*{names[0]}**2"]
    equations += [f"{names[i]}'' = k*{names[i]}**2 - k*{names[i - 1]}**2" for i in range(1, species)]
    conditions = []
    for i, name in enumerate(names):
        conditions += [f"{name}'(0) = 0", f"{name}(1) = {1.0 if i == 0 else 0.1}"]
    return bvpkit.Problem(equations, conditions, (0, 1), constants={"k": K}, unknowns=names)


def _hand(species: int, tol: float, nodes: int = 41):
    def f(x, y):
        c, d = y[0::2], y[1::2]
        out = np.empty_like(y)
        out[0::2] = d
        react = K * c**2
        out[1::2] = react
        out[3::2] -= react[:-1]
        return out

    def bc(ya, yb):
        return np.concatenate([ya[1::2], yb[0::2] - np.array([1.0] + [0.1] * (species - 1))])

    x = np.linspace(0, 1, nodes)
    y = np.zeros((2 * species, x.size))
    y[0::2] = 0.5
    return lambda: solve_bvp(f, bc, x, y, tol=tol).sol(0.0)[0]


def chain(tol: float = 1e-6) -> str:
    sections = []
    for species in (2, 5, 10, 20):
        p = chain_problem(species)
        reference = bvpkit.solve(p, tol=1e-10, method="collocation").evaluate("c1(0)")
        contenders = [
            Contender("hand-written solve_bvp, FD Jacobians", _hand(species, tol)),
            Contender("bvpkit collocation, verify off",
                      lambda p=p: bvpkit.solve(p, method="collocation", tol=tol, verify=False).evaluate("c1(0)")),
            Contender("bvpkit multiple shooting, verify off",
                      lambda p=p: bvpkit.solve(p, method="multiple_shooting", tol=tol, verify=False).evaluate("c1(0)")),
            Contender("bvpkit auto, with error estimate", lambda p=p: bvpkit.solve(p, tol=tol).evaluate("c1(0)")),
        ]
        race(contenders, repeats=5)
        sections.append(table(f"Reacting chain, n = {2 * species} states, tol = {tol:g}", contenders,
                              contenders[0].name, reference, "Error against bvpkit at tol 1e-10."))
    return "\n".join(sections)


def growth() -> str:
    """Time against the number of states and the number of mesh nodes, with fitted exponents."""
    lines = ["### Cost growth", "", "| states n | bvpkit collocation (ms) | hand-written solve_bvp (ms) |", "| --- | --- | --- |"]
    ns, ours, theirs = [], [], []
    for species in (2, 5, 10, 20):
        p = chain_problem(species)
        bvpkit.solve(p, method="collocation", verify=False)
        ta = statistics.median(_time(lambda: bvpkit.solve(p, method="collocation", verify=False)) for _ in range(5))
        hand = _hand(species, 1e-6)
        tb = statistics.median(_time(hand) for _ in range(5))
        ns.append(2 * species)
        ours.append(ta)
        theirs.append(tb)
        lines.append(f"| {2 * species} | {1e3 * ta:.1f} | {1e3 * tb:.1f} |")
    fit_a = np.polyfit(np.log(ns), np.log(ours), 1)[0]
    fit_b = np.polyfit(np.log(ns), np.log(theirs), 1)[0]
    lines += ["", f"Fitted exponent of time against n: bvpkit {fit_a:.2f}, hand-written {fit_b:.2f}.", ""]
    lines += ["| mesh nodes m | residual + Jacobian evaluation (ms) | one Newton step: Jacobian, banded LU, solve (ms) |",
              "| --- | --- | --- |"]
    p = chain_problem(5)
    from bvpkit.discrete import CollocationEquations

    c = p.compiled()
    ms, ts, steps = [], [], []
    k = np.array([K])
    for m in (1_000, 4_000, 16_000, 64_000):
        x = np.linspace(0, 1, m)
        y = np.full((c.n, m), 0.5)
        t = statistics.median(_time(lambda: (c.rhs(x, y, np.zeros(0), k), c.jac(x, y, np.zeros(0), k))) for _ in range(7))
        eq = CollocationEquations(c, x, k)

        def step(eq=eq, y=y):  # noqa: ANN001, ANN202
            col, bc, _, ym, _ = eq.parts(y, np.zeros(0))
            return eq.factor(y, np.zeros(0), ym).solve(np.concatenate([col.T.ravel(), bc]))

        s = statistics.median(_time(step) for _ in range(7))
        ms.append(m)
        ts.append(t)
        steps.append(s)
        lines.append(f"| {m} | {1e3 * t:.2f} | {1e3 * s:.2f} |")
    fit_m = np.polyfit(np.log(ms), np.log(ts), 1)[0]
    fit_s = np.polyfit(np.log(ms), np.log(steps), 1)[0]
    lines += ["", f"Fitted exponent against m: vectorised evaluation {fit_m:.2f}, whole Newton step {fit_s:.2f}.", ""]
    return "\n".join(lines)


def _time(f) -> float:  # noqa: ANN001
    start = time.perf_counter()
    f()
    return time.perf_counter() - start


SECTIONS = [chain, growth]
