"""Assertions that check a solution independently of the method that produced it.

Each raises :class:`VerificationError` (an ``AssertionError``) with a message that names the
worst point and the size of the miss.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np
import sympy as sp

from .cases import Manufactured

#: Points per mesh interval at which residuals are re-evaluated (besides the nodes).
SAMPLES_PER_INTERVAL = 3


class VerificationError(AssertionError):
    """A solution failed a verification check."""


def _sample(solution) -> np.ndarray:  # noqa: ANN001
    x = solution.x
    inner = [x[:-1] + (j / (SAMPLES_PER_INTERVAL + 1)) * np.diff(x) for j in range(1, SAMPLES_PER_INTERVAL + 1)]
    return np.sort(np.concatenate([x, *inner]))


def _values(problem, solution, points: np.ndarray) -> dict[sp.Basic, np.ndarray]:  # noqa: ANN001
    """Every function and derivative of the equations at ``points``.

    Derivatives below each function's order come from the solution's states; the highest
    derivative is the derivative of the interpolant of the state below it, so the
    equation is checked with values the solver did not impose.
    """
    states = solution.interpolant(points)
    spline = solution.interpolant.derivative(points)
    system = solution.interpolant.layout
    values: dict[sp.Basic, np.ndarray] = {}
    held = solution.interpolant.algebraic(points) if system.algebraic else None
    for name in problem.unknowns:
        f = sp.Function(name)(problem.x)
        order = problem.orders[name]
        if order == 0:  # an algebraic unknown: its value, solved from its equation
            values[f] = held[system.algebraic.index(name)]
            continue
        pieces = _pieces(solution, name)
        for j in range(order):
            node = f if j == 0 else sp.Derivative(f, (problem.x, j))
            values[node] = sum(c * states[system.index(piece, j)] for piece, c in pieces)
        values[sp.Derivative(f, (problem.x, order))] = sum(c * spline[system.index(piece, order - 1)]
                                                           for piece, c in pieces)
    return values


def _pieces(solution, name: str) -> tuple:  # noqa: ANN001
    """The solved functions that make up the user's ``name`` with their factors (a complex
    function: its real and imaginary parts, ``re(T)`` and ``1j * im(T)``)."""
    for t in solution.prepared.transforms:
        found = t.spelled(name)
        if found is not None:
            return found
    return ((name, 1),)


def assert_solves(problem, solution, *, tol: float | None = None, points: np.ndarray | None = None) -> float:  # noqa: ANN001
    """Check that ``solution`` satisfies the equations and conditions of ``problem``.

    The original equations (as the user wrote them, before bvpkit's reduction) are
    evaluated with SymPy's own ``lambdify`` at the mesh nodes and between them, with the
    highest derivative taken from the interpolant, not from the reduced right-hand side.
    The residual is relative, ``|lhs - rhs| / (1 + max |term|)``.

    Parameters
    ----------
    tol : float, optional
        Allowed relative residual. Default ``max(1e-6, 30 e**0.75)`` with ``e`` the larger of
        the solve's error estimate and its tolerance: the derivative of a C1 cubic interpolant is one order less accurate
        than its values (``h**3`` against ``h**4``), so a correct solution with value error
        ``e`` has a residual of about ``e**0.75``; a wrong solution misses by far more.
    points : ndarray, optional
        Where to evaluate (default: nodes and 3 points per interval).

    Returns
    -------
    float
        The worst relative residual found.
    """
    if not solution.success:
        raise VerificationError(f"the solve did not succeed: {solution.message}")
    if not np.all(np.isfinite(solution.y)):
        raise VerificationError("the solution holds NaN or inf")
    estimate = float(solution.diagnostics.error_estimate)
    asked = solution.diagnostics.tol or 0.0
    if tol is None:
        tol = max(1e-6, 30 * max(estimate, asked) ** 0.75) if np.isfinite(estimate) else 1e-4
    points = _sample(solution) if points is None else np.asarray(points, float)
    values = _values(problem, solution, points)
    params = {sp.Symbol(k): v for k, v in problem.constants.items()}
    params.update({sp.Symbol(k): v for k, v in solution.parameters.items()})
    worst = (0.0, 0.0, "")
    nodes = list(values)
    dummies = [sp.Dummy() for _ in nodes]
    for i, (eq, text) in enumerate(zip(problem.equations, problem.equation_text)):
        e = eq.xreplace(dict(zip(nodes, dummies))).xreplace(params)
        terms = sp.Add.make_args(sp.expand(e))
        f = sp.lambdify([problem.x, *dummies], [e, *terms], modules="numpy")  # our own expression, not user text
        with np.errstate(all="ignore"):
            out = [np.broadcast_to(v, points.shape) for v in f(points, *[values[n] for n in nodes])]
        scale = 1.0 + np.max(np.abs(np.array(out[1:])), axis=0)
        miss = np.abs(out[0]) / scale
        j = int(np.nanargmax(miss)) if np.any(np.isfinite(miss)) else 0
        if not np.all(np.isfinite(miss)) or miss[j] > worst[0]:
            worst = (float(miss[j]) if np.isfinite(miss[j]) else np.inf, float(points[j]), f"equation {i + 1} ({text})")
    if not worst[0] <= tol:
        raise VerificationError(
            f"{worst[2]} misses by {worst[0]:.3g} (relative) at {problem.independent} = {worst[1]:.6g}; "
            f"allowed {tol:.3g}"
        )
    # boundary conditions, from point values of the solution
    for i, (c, text) in enumerate(zip(problem.conditions, problem.condition_text)):
        value = _condition_value(problem, solution, c)
        if value is None:
            continue
        if not abs(value) <= tol * 10:
            raise VerificationError(f"condition {i + 1} ({text}) misses by {abs(value):.3g}; allowed {10 * tol:.3g}")
    return worst[0]


def _condition_value(problem, solution, c: sp.Expr) -> float | None:  # noqa: ANN001
    from ..language.expr import DomainIntegral

    if c.has(DomainIntegral):
        return None  # checked through the added state by the solver; skip here
    swap = {}
    for pv in problem.point_values(c):
        side = "-" if pv.side < 0 else "+" if pv.side > 0 else ""
        where = "inf" if pv.point == sp.oo else "-inf" if pv.point == -sp.oo else sp.sstr(pv.point)
        swap[pv.node] = _number(solution.evaluate(pv.name + "'" * pv.order + "(" + where + side + ")"))
    values = {**problem.constants, **solution.parameters}
    e = c.xreplace(swap).xreplace({sp.Symbol(k): _number(v) for k, v in values.items() if _number(v) is not None})
    try:
        return complex(e) if e.has(sp.I) else float(e)
    except TypeError:
        return None


def _number(value: Any) -> sp.Expr | None:
    """A SymPy number from a numeric value (real or complex), built without parsing anything;
    None for what is not a number (a list of region values)."""
    if isinstance(value, bool):
        return None
    if isinstance(value, int | float | np.integer | np.floating):
        return sp.Float(float(value))
    if isinstance(value, complex | np.complexfloating):
        return sp.Float(float(value.real)) + sp.I * sp.Float(float(value.imag))
    return None


def assert_matches_exact(solution, case: Manufactured, *, factor: float = 10.0, floor: float = 1e-11) -> float:  # noqa: ANN001
    """Check ``|y - exact| / (1 + |exact|) <= factor * error_estimate + floor`` for every state
    (and every algebraic unknown with an exact solution in ``case.others``).

    This is what a method's claim of success promises: the true error is within its own
    estimate. Returns the worst true relative error.
    """
    if not solution.success:
        raise VerificationError(f"the solve did not succeed: {solution.message}")
    problem = case.problem
    points = _sample(solution)
    states = solution.interpolant(points)
    system = solution.interpolant.layout
    name = problem.unknowns[0]
    estimate = float(solution.diagnostics.error_estimate)
    allowed = factor * (estimate if np.isfinite(estimate) else 0.0) + floor
    worst = (0.0, 0.0, 0)
    for j in range(problem.orders[name]):
        exact = case(points, j)
        miss = np.abs(states[system.index(name, j)] - exact) / (1.0 + np.abs(exact))
        i = int(np.argmax(miss))
        if miss[i] > worst[0]:
            worst = (float(miss[i]), float(points[i]), j)
    if case.others:  # the algebraic unknowns of an index-1 problem: their error is the states' own, in size
        held = solution.interpolant.algebraic(points)
        for other in case.others:
            exact = case.other(other, points)
            miss = np.abs(held[system.algebraic.index(other)] - exact) / (1.0 + np.abs(exact))
            i = int(np.argmax(miss))
            if miss[i] > worst[0]:
                worst = (float(miss[i]), float(points[i]), other)
    if not worst[0] <= allowed:
        what = worst[2] if isinstance(worst[2], str) else name + "'" * worst[2]
        raise VerificationError(
            f"{what} misses the exact solution by {worst[0]:.3g} (relative) at {problem.independent} = "
            f"{worst[1]:.6g}, but {solution.method} estimated its error as {estimate:.3g} "
            f"(allowed {allowed:.3g}); problem: {case.description}"
        )
    return worst[0]


def assert_converges(problem, *, quantity: str, exact: float | None = None, method: str = "auto",  # noqa: ANN001
                     tols: Sequence[float] = (1e-3, 1e-4, 1e-5, 1e-6), slope: tuple[float, float] = (0.5, 2.0)) -> float:
    """Check that the error in ``quantity`` falls with the tolerance at the expected rate.

    The error is measured against ``exact`` (or, without it, against a solve at a hundred
    times the tightest tolerance); the slope of log(error) against log(tol), fitted by least
    squares, must lie in ``slope`` (about 1 for a method whose error control works). Errors
    below 1e-13 are round-off and are left out of the fit. Returns the fitted slope.
    """
    import bvpkit

    if exact is None:
        reference = bvpkit.solve(problem, tol=min(tols) / 100, method=method)
        if not reference.success:  # its numbers are no reference: say so instead of comparing with them
            raise VerificationError(f"the reference solve at tol = {min(tols) / 100:g} failed: {reference.message}")
        exact = reference.evaluate(quantity)
    errors = []
    for tol in tols:
        sol = bvpkit.solve(problem, tol=tol, method=method)
        if not sol.success:
            raise VerificationError(f"the solve at tol = {tol:g} failed: {sol.message}")
        errors.append(abs(sol.evaluate(quantity) - exact))
    pairs = [(t, e) for t, e in zip(tols, errors) if e > 1e-13]
    if len(pairs) < 2:
        return float("nan")  # already exact to round-off at every tolerance
    fitted = float(np.polyfit(np.log([t for t, _ in pairs]), np.log([e for _, e in pairs]), 1)[0])
    table = ", ".join(f"tol {t:g}: error {e:.3g}" for t, e in zip(tols, errors))
    if not slope[0] <= fitted <= slope[1]:
        raise VerificationError(
            f"the error in {quantity} falls with slope {fitted:.2f} against the tolerance, outside "
            f"{slope}; {table}"
        )
    worst = max(range(len(tols)), key=lambda i: errors[i] / tols[i])
    if errors[worst] > 10 * tols[worst] * (1 + abs(exact)):
        raise VerificationError(f"at tol = {tols[worst]:g} the error in {quantity} is {errors[worst]:.3g}; {table}")
    return fitted


def assert_methods_agree(problem, *, quantities: Sequence[str], tol: float = 1e-6,  # noqa: ANN001
                         methods: Sequence[str] | None = None, **options: Any) -> dict[str, dict[str, float]]:
    """Solve with each method; every two that succeed must agree within their error estimates.

    Agreement means ``|q1 - q2| <= 10 (e1 + e2) (1 + |q|) + 1e-12`` with ``e`` each solve's
    error estimate. Returns ``{method: {quantity: value}}`` for the methods that succeeded.
    """
    import bvpkit

    from ..methods import REGISTRY

    results: dict[str, dict[str, float]] = {}
    estimates: dict[str, float] = {}
    for method in methods or list(REGISTRY):
        sol = bvpkit.solve(problem, tol=tol, method=method, **options)
        if sol.success:
            results[method] = {q: float(sol.evaluate(q)) for q in quantities}
            estimates[method] = float(sol.diagnostics.error_estimate)
    names = list(results)
    for i, first in enumerate(names):
        for second in names[i + 1:]:
            for q in quantities:
                a, b = results[first][q], results[second][q]
                allowed = 10 * (estimates[first] + estimates[second]) * (1 + abs(a)) + 1e-12
                if not abs(a - b) <= allowed:
                    raise VerificationError(
                        f"{first} and {second} disagree on {q}: {a:.12g} against {b:.12g} "
                        f"(difference {abs(a - b):.3g}, allowed {allowed:.3g} from their error estimates)"
                    )
    if not results:
        raise VerificationError("no method succeeded")
    return results
