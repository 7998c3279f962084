"""Growing systems: a chain of reacting species in a slab, 4 to 400 states.

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


def _chain_rhs(x, y):  # noqa: ANN001, ANN202
    """The chain's right-hand side as solve_bvp takes it: states (c1, c1', c2, c2', ...)."""
    c, d = y[0::2], y[1::2]
    out = np.empty_like(y)
    out[0::2] = d
    react = K * c**2
    out[1::2] = react
    out[3::2] -= react[:-1]
    return out


def _hand(species: int, tol: float, nodes: int = 41):
    def bc(ya, yb):
        return np.concatenate([ya[1::2], yb[0::2] - np.array([1.0] + [0.1] * (species - 1))])

    x = np.linspace(0, 1, nodes)
    y = np.zeros((2 * species, x.size))
    y[0::2] = 0.5
    return lambda: solve_bvp(_chain_rhs, bc, x, y, tol=tol).sol(0.0)[0]


def _hand_analytic(species: int, tol: float, nodes: int = 41):
    """solve_bvp with analytic Jacobians (dense ``df/dy`` per node, as solve_bvp takes them)."""
    n = 2 * species
    surface = np.array([1.0] + [0.1] * (species - 1))

    def jac(x, y):
        m = y.shape[1]
        out = np.zeros((n, n, m))
        i = np.arange(species)
        out[2 * i, 2 * i + 1] = 1.0
        out[2 * i + 1, 2 * i] = 2 * K * y[0::2]
        out[2 * i[1:] + 1, 2 * i[:-1]] = -2 * K * y[0:-2:2]
        return out

    def bc(ya, yb):
        return np.concatenate([ya[1::2], yb[0::2] - surface])

    def bc_jac(ya, yb):
        a, b = np.zeros((n, n)), np.zeros((n, n))
        i = np.arange(species)
        a[i, 2 * i + 1] = 1.0
        b[species + i, 2 * i] = 1.0
        return a, b

    x = np.linspace(0, 1, nodes)
    y = np.zeros((n, x.size))
    y[0::2] = 0.5
    return lambda: solve_bvp(_chain_rhs, bc, x, y, fun_jac=jac, bc_jac=bc_jac, tol=tol).sol(0.0)[0]


def large(tol: float = 1e-6, species: int = 100, repeats: int = 5) -> str:
    """Target: the 200-state chain in at most 0.5x the time of solve_bvp with analytic Jacobians."""
    p = bvpkit.prepare(chain_problem(species))
    reference = bvpkit.solve(p, tol=1e-9, method="collocation").evaluate("c1(0)")
    contenders = [
        Contender("hand-written solve_bvp, analytic Jacobians", _hand_analytic(species, tol)),
        Contender("bvpkit collocation, verify off",
                  lambda: bvpkit.solve(p, method="collocation", tol=tol, verify=False).evaluate("c1(0)")),
        Contender("bvpkit collocation, with error estimate",
                  lambda: bvpkit.solve(p, method="collocation", tol=tol).evaluate("c1(0)")),
    ]
    race(contenders, repeats=repeats)
    return table(f"Reacting chain, n = {2 * species} states, tol = {tol:g} (target: bvpkit <= 0.5x)", contenders,
                 contenders[0].name, reference, "Error against bvpkit at tol 1e-9. Both on the machine's default "
                 "BLAS threads; bvpkit runs its Newton solve on one (discrete.one_blas_thread).")


def states_growth(tol: float = 1e-6, repeats: int = 3) -> str:
    """Target: time growing no faster than states^2.2 from 10 to 400 states."""
    lines = ["### Cost against the number of states (chain, tol = 1e-6)", "",
             "| states n | bvpkit collocation, verify off (ms, median [range]) | solve_bvp, analytic Jacobians (ms) |",
             "| --- | --- | --- |"]
    ns, ours, theirs = [], [], []
    for species in (5, 10, 25, 50, 100, 200):
        p = bvpkit.prepare(chain_problem(species))
        bvpkit.solve(p, method="collocation", tol=tol, verify=False)  # warm
        mine = Contender("bvpkit", lambda p=p: bvpkit.solve(p, method="collocation", tol=tol, verify=False).evaluate("c1(0)"))
        contenders = [mine]
        if species <= 100:  # solve_bvp's dense blocks take minutes beyond
            contenders.append(Contender("solve_bvp", _hand_analytic(species, tol)))
        race(contenders, repeats=repeats)
        ns.append(2 * species)
        ours.append(statistics.median(mine.times))
        hand = statistics.median(contenders[1].times) if len(contenders) > 1 else float("nan")
        theirs.append(hand)
        lines.append(f"| {2 * species} | {1e3 * ours[-1]:.1f} [{1e3 * min(mine.times):.1f}, {1e3 * max(mine.times):.1f}] | "
                     f"{1e3 * hand:.1f} |")
    fit_a = np.polyfit(np.log(ns), np.log(ours), 1)[0]
    known = [i for i, t in enumerate(theirs) if t == t]
    fit_b = np.polyfit(np.log([ns[i] for i in known]), np.log([theirs[i] for i in known]), 1)[0]
    lines += ["", f"Fitted exponent of time against n (10 to 400 states): bvpkit {fit_a:.2f} (target <= 2.2); "
              f"solve_bvp {fit_b:.2f} (10 to 200 states).", ""]
    return "\n".join(lines)


_PREPARE = """
import sys, time
sys.path.insert(0, {root!r})
from benchmarks.scale import chain_problem
import bvpkit
start = time.perf_counter()
problem = chain_problem({species})
built = time.perf_counter()
bvpkit.prepare(problem)
print(built - start, time.perf_counter() - built)
"""


def preparation(repeats: int = 3) -> str:
    """Targets: a 200-state chain prepared in at most 3 s, 600 states in at most 10 s (parse,
    validate, reduce, generate and compile), each in a fresh process with the cache off."""
    import os
    import subprocess
    import sys
    from pathlib import Path

    root = str(Path(__file__).parents[1])
    lines = ["### Preparation of large systems (fresh process, cache off)", "",
             "| states | Problem (s) | prepare (s) | total, median [range] (s) | target (s) |", "| --- | --- | --- | --- | --- |"]
    for species, target in ((50, None), (100, 3.0), (200, None), (300, 10.0)):
        runs = []
        for _ in range(repeats):
            done = subprocess.run([sys.executable, "-c", _PREPARE.format(root=root, species=species)],
                                  env={**os.environ, "BVPKIT_CACHE_DIR": "off"}, capture_output=True, text=True)
            if done.returncode:
                raise RuntimeError(done.stderr[-500:])
            runs.append(tuple(map(float, done.stdout.split())))
        totals = [a + b for a, b in runs]
        middle = runs[totals.index(statistics.median(totals))] if repeats % 2 else runs[0]
        lines.append(f"| {2 * species} | {middle[0]:.2f} | {middle[1]:.2f} | {statistics.median(totals):.2f} "
                     f"[{min(totals):.2f}, {max(totals):.2f}] | {target if target else ''} |")
    return "\n".join(lines) + "\n"


def crossover(m: int = 201, repeats: int = 3) -> str:
    """Where the sparse LU of the Newton matrix beats the banded one (discrete.BAND_LIMIT,
    sparse_pays): on the reacting chain itself, and on random blocks of three kinds."""
    import bvpkit.methods.discrete as discrete
    from bvpkit.methods.discrete import factor_blocks, one_blas_thread

    lines = ["### Banded against sparse LU: the reacting chain (whole collocation solves, verify off)", "",
             "| states | banded (ms) | sparse (ms) | sparse / banded | chosen |", "| --- | --- | --- | --- | --- |"]
    chosen = discrete.sparse_pays
    for species in (25, 50, 100, 200):
        p = bvpkit.prepare(chain_problem(species))
        times = {True: [], False: []}
        for _ in range(repeats):
            for use_sparse in (False, True):
                discrete.sparse_pays = lambda pattern, use_sparse=use_sparse: use_sparse
                try:
                    bvpkit.solve(p, method="collocation", verify=False)
                    start = time.perf_counter()
                    bvpkit.solve(p, method="collocation", verify=False)
                    times[use_sparse].append(time.perf_counter() - start)
                finally:
                    discrete.sparse_pays = chosen
        band, sp = statistics.median(times[False]), statistics.median(times[True])
        pick = "sparse" if chosen(p.compiled.jac_pattern) else "banded"
        lines.append(f"| {2 * species} | {1e3 * band:.1f} | {1e3 * sp:.1f} | {sp / band:.2f} | {pick} |")
    rng = np.random.default_rng(3)
    lines += ["", f"Random blocks, {m} nodes, separated conditions (one factorisation and solve):", "",
              "| unknowns per node | blocks | banded (ms) | sparse (ms) | sparse / banded |",
              "| --- | --- | --- | --- | --- |"]
    for n in (20, 60, 100, 150):
        for kind in ("three diagonals", "5% scattered", "dense"):
            if kind == "three diagonals":
                mask = np.abs(np.subtract.outer(np.arange(n), np.arange(n)))[None] <= 1
                mask = np.broadcast_to(mask, (m - 1, n, n))
            else:
                mask = rng.random((m - 1, n, n)) < (0.05 if kind == "5% scattered" else 1.0)
            left = np.where(mask, rng.normal(size=(m - 1, n, n)), 0.0) - np.eye(n)
            right = np.where(mask, rng.normal(size=(m - 1, n, n)), 0.0) + 3 * np.eye(n)
            a = np.zeros((n, n))
            b = np.zeros((n, n))
            half = n // 2
            a[:half, :half] = np.eye(half)
            b[half:, half:] = np.eye(n - half)
            times = {True: [], False: []}
            for _ in range(repeats):
                for sparse_blocks in (False, True):
                    start = time.perf_counter()
                    with one_blas_thread(n):  # as the solver runs it
                        factor_blocks(left, right, None, a, b, None, sparse_blocks=sparse_blocks).solve(np.ones(n * m))
                    times[sparse_blocks].append(time.perf_counter() - start)
            band, sp = statistics.median(times[False]), statistics.median(times[True])
            lines.append(f"| {n} | {kind} | {1e3 * band:.2f} | {1e3 * sp:.2f} | {sp / band:.2f} |")
    return "\n".join(lines) + "\n"


def threads(n: int = 60, m: int = 201, repeats: int = 5) -> str:
    """One BLAS thread against the machine's default in the banded LU of dense blocks, side by side."""
    from bvpkit.methods.discrete import factor_blocks, one_blas_thread

    rng = np.random.default_rng(5)
    left = rng.normal(size=(m - 1, n, n)) - np.eye(n)
    right = rng.normal(size=(m - 1, n, n)) + 3 * np.eye(n)
    a, b = np.zeros((n, n)), np.zeros((n, n))
    a[: n // 2, : n // 2] = np.eye(n // 2)
    b[n // 2:, n // 2:] = np.eye(n - n // 2)

    def one() -> float:
        with one_blas_thread(n):
            return float(factor_blocks(left, right, None, a, b, None, sparse_blocks=False).solve(np.ones(n * m))[0])

    def default() -> float:
        return float(factor_blocks(left, right, None, a, b, None, sparse_blocks=False).solve(np.ones(n * m))[0])

    contenders = [Contender("one BLAS thread (what the solver does from 16 states)", one),
                  Contender("BLAS on its default thread count", default)]
    race(contenders, repeats=repeats)
    return table(f"BLAS threads: banded LU of dense blocks, {n} unknowns per node, {m} nodes", contenders,
                 contenders[0].name, contenders[0].value, "Ratios above 1: the default thread count is slower.")


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
    prepared = bvpkit.prepare(chain_problem(5))
    from bvpkit.methods.discrete import CollocationEquations

    c = prepared.compiled
    ms, ts, steps = [], [], []
    k = prepared.k()
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



SECTIONS = [chain, growth, large, states_growth, preparation, crossover, threads]
