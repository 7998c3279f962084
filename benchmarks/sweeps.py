"""Sweep speed: one worker against a hand-written loop, two workers against one, small sweeps.

Targets (issue 15): one worker at most 1.2x a plain loop of seeded ``solve_bvp`` calls; two
workers at least 1.7x faster than one, on the bundled pellet chart (300 points) and on a
2,000-point chart; the default worker count never slower than one worker on a small sweep.
A control measures what the machine gives two processes at all (pure Python, no bvpkit):
two workers cannot beat that.
"""

from __future__ import annotations

import multiprocessing
import statistics
import time
from pathlib import Path

import numpy as np
from scipy.integrate import solve_bvp

import bvpkit

SPEC = Path(__file__).parents[1] / "specs" / "pellet_design_chart.toml"
BIOT = [1.0, 3.0, 10.0, 30.0, 100.0]
TOL = 1e-7  # the bundled chart's own tolerance


def _hand(phis: np.ndarray) -> list[float]:
    """The loop an engineer writes: each point seeded by its neighbour's solution."""
    S = np.array([[0.0, 0.0], [0.0, -2.0]])  # c'' + (2/r) c' = phi^2 c as y' = f + S y / r
    out = []
    for Bi in BIOT:
        x = np.linspace(0, 1, 11)
        y = np.vstack([np.ones_like(x), np.zeros_like(x)])
        for phi in phis:
            res = solve_bvp(lambda x, y, phi=phi: np.vstack([y[1], phi**2 * y[0]]),
                            lambda ya, yb, Bi=Bi: np.array([ya[1], yb[1] - Bi * (1 - yb[0])]), x, y, S=S, tol=TOL)
            if res.success:
                x, y = res.x, res.y
            out.append(3 * res.y[1, -1] / phi**2)
    return out


def _burn(count: int) -> float:
    total = 0
    for i in range(count):
        total += i * i
    return float(total)


def _small_arrays(count: int) -> float:
    """NumPy on small arrays, the kind of work a solve of a small problem does."""
    a, b = np.ones(50), np.empty(50)
    for _ in range(count):
        np.multiply(a, 1.0000001, out=b)
        np.add(b, 0.5, out=a)
    return float(a[0])


def _capacity(work, size: int, repeats: int = 3) -> tuple[float, str]:  # noqa: ANN001
    """Throughput of two processes against one on the same work (the machine's share of cores)."""
    ratios = []
    with multiprocessing.get_context("spawn").Pool(2) as pool:
        pool.map(work, [10, 10])
        for _ in range(repeats):
            start = time.perf_counter()
            pool.map(work, [size])
            one = time.perf_counter() - start
            start = time.perf_counter()
            pool.map(work, [size, size])
            two = time.perf_counter() - start
            ratios.append(2 * one / two)
    return statistics.median(ratios), f"{min(ratios):.2f}-{max(ratios):.2f}"


def _row(name: str, times: list[float], base: float, note: str = "") -> str:
    t = statistics.median(times)
    return f"| {name} | {t:.2f} | {min(times):.2f}-{max(times):.2f} | {t / base:.2f} | {note} |"


def _chart(count: int, repeats: int) -> list[str]:
    problem = bvpkit.load(SPEC)
    phis = np.geomspace(0.1, 100, count)
    grid = {"phi": phis, "Bi": BIOT}
    bvpkit.sweep(problem, {"phi": phis[:3], "Bi": BIOT[:1]}, workers=1)  # warm: the preparation is cached
    _hand(phis[:3])
    runs = {"hand": [], 1: [], 2: []}
    values = {}
    for _ in range(repeats):  # alternating
        start = time.perf_counter()
        values["hand"] = _hand(phis)
        runs["hand"].append(time.perf_counter() - start)
        for workers in (1, 2):
            start = time.perf_counter()
            result = bvpkit.sweep(problem, grid, workers=workers)
            runs[workers].append(time.perf_counter() - start)
            values[workers] = result.column("effectiveness")
    hand = statistics.median(runs["hand"])
    one, two = statistics.median(runs[1]), statistics.median(runs[2])
    # analytic: 3 f / (phi^2 (1 + f / Bi)), f = phi coth(phi) - 1 (the spec's description)
    exact = np.array([3 * (p / np.tanh(p) - 1) / (p**2 * (1 + (p / np.tanh(p) - 1) / b)) for b in BIOT for p in phis])
    err = {k: float(np.max(np.abs(np.asarray(v) - exact) / exact)) for k, v in values.items()}
    return [
        f"### Pellet chart, {count * len(BIOT)} points, tol = {TOL:g}", "",
        "| run | median (s) | range (s) | ratio to the hand loop | note |", "| --- | --- | --- | --- | --- |",
        _row("hand-written loop of seeded solve_bvp calls", runs["hand"], hand, f"max rel. error {err['hand']:.1e}"),
        _row("bvpkit.sweep, 1 worker (target <= 1.2)", runs[1], hand,
             f"max rel. error {err[1]:.1e}, with an error estimate per point"),
        _row("bvpkit.sweep, 2 workers", runs[2], hand,
             f"{one / two:.2f}x faster than 1 worker (target >= 1.7); max rel. error {err[2]:.1e}"),
        "",
    ]


def pellet_sweep(repeats: int = 3) -> str:
    python, python_spread = _capacity(_burn, 4_000_000)
    arrays, arrays_spread = _capacity(_small_arrays, 200_000)
    lines = [f"Control: two processes do {python:.2f}x ({python_spread}) the work of one in the same time on "
             f"pure Python, {arrays:.2f}x ({arrays_spread}) on NumPy with small arrays, on this machine now; two "
             "workers of a sweep (NumPy on small arrays) cannot do better than the second figure.", ""]
    lines += _chart(60, repeats)
    lines += _chart(400, repeats)
    problem = bvpkit.load(SPEC)
    small = {"phi": [0.5, 1.0, 2.0], "Bi": [1.0, 10.0]}
    times = {"default": [], 1: []}
    for _ in range(5):
        for key in ("default", 1):
            start = time.perf_counter()
            bvpkit.sweep(problem, small, workers=None if key == "default" else 1)
            times[key].append(time.perf_counter() - start)
    base = statistics.median(times[1])
    lines += ["### A small sweep (6 points)", "", "| run | median (s) | range (s) | ratio to 1 worker | note |",
              "| --- | --- | --- | --- | --- |",
              _row("1 worker", times[1], base), _row("default worker count", times["default"], base,
                                                    "starts workers only when the work left pays for them"), ""]
    return "\n".join(lines)




# -- issue 25: charts of small problems on one core, against a hand loop of seeded solve_bvp ------
_FIN_H = (0.2, 1.0, 5.0)  # tip coefficients (1/m) of our own pin fin: 3 slow values
_FIN_M = np.linspace(1.0, 12.0, 100)  # fin parameter m (1/m): the fast axis
_BRATU_LAM = np.linspace(0.05, 3.4, 300)


def _hand_fin(tol: float) -> list[float]:
    """theta'' = m^2 theta, theta(0) = 1, theta'(1) + H theta(1) = 0: each point seeded by its neighbour."""
    out = []
    for H in _FIN_H:
        x = np.linspace(0, 1, 11)
        y = np.vstack([np.ones_like(x), np.zeros_like(x)])
        for m in _FIN_M:
            res = solve_bvp(lambda x, y, m=m: np.vstack([y[1], m * m * y[0]]),
                            lambda a, b, H=H: np.array([a[0] - 1.0, b[1] + H * b[0]]), x, y, tol=tol,
                            fun_jac=lambda x, y, m=m: np.array([[np.zeros_like(x), np.ones_like(x)],
                                                                [np.full_like(x, m * m), np.zeros_like(x)]]),
                            bc_jac=lambda a, b, H=H: (np.array([[1.0, 0.0], [0.0, 0.0]]),
                                                      np.array([[0.0, 0.0], [H, 1.0]])))
            if res.success:
                x, y = res.x, res.y
            out.append(res.sol(0.0)[1])
    return out


def _hand_bratu(tol: float) -> list[float]:
    """y'' + lam e^y = 0, y(0) = y(1) = 0, lower branch: each point seeded by its neighbour."""
    out = []
    x = np.linspace(0, 1, 11)
    y = np.zeros((2, x.size))
    for lam in _BRATU_LAM:
        res = solve_bvp(lambda x, y, lam=lam: np.vstack([y[1], -lam * np.exp(y[0])]),
                        lambda a, b: np.array([a[0], b[0]]), x, y, tol=tol,
                        fun_jac=lambda x, y, lam=lam: np.array([[np.zeros_like(x), np.ones_like(x)],
                                                                [-lam * np.exp(y[0]), np.zeros_like(x)]]),
                        bc_jac=lambda a, b: (np.array([[1.0, 0.0], [0.0, 0.0]]), np.array([[0.0, 0.0], [1.0, 0.0]])))
        if res.success:
            x, y = res.x, res.y
        out.append(res.sol(0.0)[1])
    return out


def small_charts(repeats: int = 5, tol: float = 1e-6) -> str:
    """Targets (issue 25): a 300-point chart of a small linear problem on one core <= 0.3x a hand loop
    of seeded solve_bvp calls with analytic Jacobians; a nonlinear one <= 0.5x."""
    import math

    fin = bvpkit.Problem(["T'' = m**2*T"], ["T(0) = 1", "T'(1) + H*T(1) = 0"], (0, 1),
                         constants={"m": 1.0, "H": 1.0}, outputs={"slope": "T'(0)"})
    bratu = bvpkit.Problem(["y'' + lam*exp(y) = 0"], ["y(0) = 0", "y(1) = 0"], (0, 1), constants={"lam": 0.05},
                           outputs={"slope": "y'(0)"})
    charts = [
        ("linear: pin fin, m x H = 100 x 3", fin, {"m": _FIN_M, "H": list(_FIN_H)}, _hand_fin, 0.3,
         np.array([-m * (math.sinh(m) + H / m * math.cosh(m)) / (math.cosh(m) + H / m * math.sinh(m))
                   for H in _FIN_H for m in _FIN_M]), "analytic"),
        ("nonlinear: Bratu, lam = 300 values to 3.4", bratu, {"lam": _BRATU_LAM}, _hand_bratu, 0.5, None,
         "analytic (lower branch)"),
    ]
    lines = ["### Charts of small problems on one core, tol = 1e-6", "",
             "bvpkit.sweep with workers=1 (this process), each point with its error estimate, against a hand loop "
             "of solve_bvp calls with analytic Jacobians, each seeded by its neighbour. Medians of alternating runs.",
             "", "| chart | hand loop (s) | bvpkit.sweep (s) | ratio (target) | points solved together | "
             "max rel. error hand / bvpkit | largest estimate |", "| --- | --- | --- | --- | --- | --- | --- |"]
    for name, problem, grid, hand, target, exact, source in charts:
        prepared = bvpkit.prepare(problem)
        bvpkit.sweep(prepared, {k: (v[:3] if k != "H" else v[:1]) for k, v in grid.items()}, workers=1)
        times = {"hand": [], "sweep": []}
        for _ in range(repeats):
            start = time.perf_counter()
            mine = hand(tol)
            times["hand"].append(time.perf_counter() - start)
            start = time.perf_counter()
            result = bvpkit.sweep(prepared, grid, workers=1)
            times["sweep"].append(time.perf_counter() - start)
        if exact is None:  # analytic Bratu slope t tanh(t/4), t = sqrt(2 lam) cosh(t/4), lower root
            from scipy.optimize import brentq

            exact = np.array([(lambda t: t * math.tanh(t / 4))(
                brentq(lambda t, lam=lam: t - math.sqrt(2 * lam) * math.cosh(t / 4), 1e-9, 4.7987))
                for lam in _BRATU_LAM])
        got = np.asarray(result.column("slope"), float)
        errors = (float(np.max(np.abs(np.asarray(mine) - exact) / np.abs(exact))),
                  float(np.max(np.abs(got - exact) / np.abs(exact))))
        together = _counted(prepared, grid)
        h, s = statistics.median(times["hand"]), statistics.median(times["sweep"])
        estimates = [row["error_estimate"] for row in result.table if row["success"]]
        lines.append(f"| {name} | {h:.3f} | {s:.3f} | {s / h:.2f} (<= {target}) | {together} of "
                     f"{len(result.table)} | {errors[0]:.1e} / {errors[1]:.1e} ({source}) | "
                     f"{max(estimates):.1e} |")
    return "\n".join(lines) + "\n"


def _counted(prepared, grid) -> int:  # noqa: ANN001
    """How many points of one more run of the chart the batch settled (counted by wrapping it)."""
    import bvpkit.families.batched as batched

    original, count = batched.solve_points, [0]

    def counting(*args, **kwargs):  # noqa: ANN002, ANN003, ANN202
        found = original(*args, **kwargs)
        count[0] += sum(sol is not None for sol in found)
        return found

    batched.solve_points = counting
    try:
        bvpkit.sweep(prepared, grid, workers=1)
    finally:
        batched.solve_points = original
    return count[0]


SECTIONS = [pellet_sweep, small_charts]
