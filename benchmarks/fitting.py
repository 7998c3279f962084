"""Fitting constants to measurements: ``bvpkit.fit`` (exact Jacobians from the Newton matrix,
warm-started solves) against the loop a user writes by hand around ``scipy.optimize.least_squares``
(``jac="2-point"``: forward differences, one more solve per constant per Jacobian), on the
same data, alternated in one process.

The reference is the least-squares optimum of the analytic model on the same data (the fin's
closed-form profile fitted by ``least_squares`` with its analytic Jacobian to 1e-15), and
the standard errors of that analytic fit; digits are counted against both.
"""

from __future__ import annotations

import statistics
import time

import numpy as np

import bvpkit

TOL = 1e-8
SIGMA = 0.01


def _profile(x: np.ndarray, m: float, bi: float) -> np.ndarray:
    # analytic: theta'' = m^2 theta, theta(0) = 1, theta'(1) + Bi theta(1) = 0 (times b for theta(0) = b)
    return (np.cosh(m * (1 - x)) + bi / m * np.sinh(m * (1 - x))) / (np.cosh(m) + bi / m * np.sinh(m))


def _reference(x: np.ndarray, y: np.ndarray, start: np.ndarray, names: list[str]) -> tuple[np.ndarray, np.ndarray]:
    """The analytic model's optimum and standard errors (central differences of the closed form
    with step 1e-6 for its Jacobian: ~1e-12 relative)."""
    from scipy.optimize import least_squares

    def model(v: np.ndarray) -> np.ndarray:
        given = dict(zip(names, v))
        return given.get("b", 1.0) * _profile(x, given["m"], given.get("Bi", 1.0))

    def jac(v: np.ndarray) -> np.ndarray:
        cols = []
        for i in range(len(v)):
            h = 1e-6 * max(abs(v[i]), 1.0)
            e = np.zeros_like(v)
            e[i] = h
            cols.append((model(v + e) - model(v - e)) / (2 * h * SIGMA))
        return np.column_stack(cols)

    out = least_squares(lambda v: (model(v) - y) / SIGMA, start, jac=jac, xtol=1e-15, ftol=1e-15, gtol=1e-15)
    J = jac(out.x)
    return out.x, np.sqrt(np.diag(np.linalg.inv(J.T @ J)))


def _hand_loop(prepared, x: np.ndarray, y: np.ndarray, names: list[str], start: np.ndarray):  # noqa: ANN001, ANN202
    """What a user writes: least_squares over solves, forward-difference Jacobian, standard
    errors from that Jacobian; each solve warm-started from the last (as bvpkit.fit does)."""
    from scipy.optimize import least_squares

    last = {"sol": None}

    def residuals(v: np.ndarray) -> np.ndarray:
        sol = bvpkit.solve(prepared.with_constants(**dict(zip(names, map(float, v)))), tol=TOL, guess=last["sol"])
        if not sol.success:
            return np.full(x.size, np.nan)
        last["sol"] = sol
        return (sol.evaluate("theta", at=x) - y) / SIGMA

    out = least_squares(residuals, start, method="trf", x_scale=np.abs(start), max_nfev=200)
    J = out.jac
    return out.x, np.sqrt(np.diag(np.linalg.inv(J.T @ J))), out.nfev + out.njev * len(names)


def _case(title: str, names: list[str], true: dict, start: dict, n: int, seed: int, repeats: int = 9) -> str:
    x = np.linspace(0.05, 1.0, n)
    rng = np.random.default_rng(seed)
    y = true.get("b", 1.0) * _profile(x, true["m"], true.get("Bi", 1.0)) + SIGMA * rng.standard_normal(n)
    fin = bvpkit.Problem(["theta'' = m**2*theta"], ["theta(0) = b", "theta'(1) + Bi*theta(1) = 0"], (0, 1),
                         constants={"m": start["m"], "Bi": start.get("Bi", 1.0), "b": start.get("b", 1.0)})
    prepared = bvpkit.prepare(fin)
    s0 = np.array([start[k] for k in names])
    ref_values, ref_errors = _reference(x, y, s0, names)
    times: dict[str, list[float]] = {"bvpkit.fit": [], "hand loop": []}
    found: dict[str, tuple] = {}
    for _ in range(repeats + 1):  # the first round warms both up (compiled code, imports), untimed
        for name in times:
            began = time.perf_counter()
            if name == "bvpkit.fit":
                r = bvpkit.fit(prepared, {"theta": (x, y)}, vary=dict(zip(names, s0)), sigma=SIGMA, tol=TOL)
                got = (np.array([r.values[k] for k in names]), np.array([r.errors[k] for k in names]), r.evaluations)
            else:
                got = _hand_loop(prepared, x, y, names, s0)
            times[name].append(time.perf_counter() - began)
            found[name] = got
    base = statistics.median(times["hand loop"][1:])
    lines = [f"### {title}", "",
             f"{n} samples of the analytic profile with noise sigma = {SIGMA} (seed {seed}), true "
             + ", ".join(f"{k} = {true[k]}" for k in names) + ", start " + ", ".join(f"{k} = {start[k]}" for k in names)
             + f", solves at tol = {TOL:g}. Reference: the analytic model's optimum "
             + ", ".join(f"{k} = {v:.12g}" for k, v in zip(names, ref_values)) + " and standard errors "
             + ", ".join(f"{v:.6g}" for v in ref_errors) + ".", "",
             "| contender | median time (ms) | ratio to hand loop | solves | max rel. error of values | "
             "max rel. error of standard errors |", "| --- | --- | --- | --- | --- | --- |"]
    for name, t in times.items():
        values, errors, solves = found[name]
        ev = np.max(np.abs(values - ref_values) / np.abs(ref_values))
        ee = np.max(np.abs(errors - ref_errors) / np.abs(ref_errors))
        med = statistics.median(t[1:])
        lines.append(f"| {name} | {1e3 * med:.1f} | {med / base:.2f} | {solves} | {ev:.1e} | {ee:.1e} |")
    return "\n".join(lines) + "\n"


def fin_fit() -> str:
    return _case("Fit of a fin's m from 20 noisy samples: bvpkit.fit against a hand-written least_squares loop",
                 ["m"], {"m": 2.0}, {"m": 1.0}, 20, 27)


def fin_fit_two() -> str:
    return _case("Fit of m and a tip Biot number from 20 noisy samples: bvpkit.fit against a hand loop",
                 ["m", "Bi"], {"m": 2.0, "Bi": 1.0}, {"m": 1.5, "Bi": 0.5}, 20, 7)


def fin_fit_three() -> str:
    return _case("Fit of m, a tip Biot number and the base value from 20 noisy samples: bvpkit.fit against a hand loop",
                 ["m", "Bi", "b"], {"m": 2.0, "Bi": 1.0, "b": 1.0}, {"m": 1.5, "Bi": 0.5, "b": 0.8}, 20, 11)


SECTIONS = [fin_fit, fin_fit_two, fin_fit_three]


if __name__ == "__main__":  # pragma: no cover
    print(fin_fit())
    print(fin_fit_two())
    print(fin_fit_three())
