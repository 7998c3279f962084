"""Convergence diagnostics as plain, typed data (no printing here)."""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field
from typing import Any

from .._output import json_ready
from .discrete import block_matrix, one_blas_thread


@dataclass
class Attempt:
    """One try of one method on one (possibly truncated) domain.

    Attributes
    ----------
    method : str
        Registry name of the method.
    reason : str
        Why the selector tried it, in words.
    status : str
        Status word (see :class:`bvpkit.status.Status`).
    message : str
        What happened, in words.
    iterations : int
        Newton iterations.
    nodes : int
        Mesh nodes of the result (segments + 1 for shooting).
    seconds : float
        Wall time of the attempt.
    domain : (float, float)
        The interval solved on (the truncated one for infinite domains).
    error_estimate : float or None
        Estimated max relative error of the states, ``|dy| / (1 + |y|)``.
    """

    method: str
    reason: str
    status: str
    message: str
    iterations: int
    nodes: int
    seconds: float
    domain: tuple[float, float]
    error_estimate: float | None = None


@dataclass
class Diagnostics:
    """What the solve did and how far to trust it.

    Attributes
    ----------
    method : str
        Method that produced the answer.
    iterations : int
        Newton iterations of the final attempt.
    mesh_nodes : int
        Size of the final mesh.
    max_residual : float
        Max relative residual of the differential equations on the final mesh,
        ``|y' - f(x, y)| / (1 + |f|)``, measured by bvpkit between mesh nodes.
    bc_residual : float
        Max absolute residual of the boundary conditions.
    error_estimate : float
        Estimated max relative error ``|y - y_exact| / (1 + |y|)`` over the states:
        discretisation (collocation: deferred correction of the solution with its own
        Newton matrix; shooting: a re-solve with a tighter integrator) plus truncation.
    discretisation_error : float or None
        The part of ``error_estimate`` from the mesh.
    truncation_error : float or None
        For infinite domains: the change seen in the last lengthening of the domain.
    truncation_length : float or None
        For infinite domains: the distance from the finite end (from 0 when both ends are
        infinite) at which the infinite end was placed.
    condition : float or None
        Stability constant of the linearised problem on the final mesh (see
        :func:`condition_estimate`): an error can be up to about this times the residual.
    seconds : float
        Wall time of the whole solve.
    attempts : list of Attempt
        Everything that was tried, in order.
    selection : str
        Why the first method was chosen.
    tol : float or None
        The tolerance the solve was asked for.
    """

    method: str
    iterations: int
    mesh_nodes: int
    max_residual: float
    bc_residual: float
    error_estimate: float
    discretisation_error: float | None = None
    truncation_error: float | None = None
    truncation_length: float | None = None
    condition: float | None = None
    seconds: float = 0.0
    attempts: list[Attempt] = field(default_factory=list)
    selection: str = ""
    tol: float | None = None

    def as_dict(self) -> dict[str, Any]:
        """Plain JSON-ready data (non-finite floats become None)."""
        return json_ready(dataclasses.asdict(self))


class Hermite:
    """C1 piecewise-cubic Hermite interpolant of ``y`` with slopes ``dy`` on the mesh ``x``.

    A lean stand-in for ``scipy.interpolate.CubicHermiteSpline`` (whose input checks cost
    more than the evaluation on the meshes of a continuation); evaluating outside
    ``[x[0], x[-1]]`` gives NaN. ``y`` and ``dy`` have shape ``(n, m)``.
    """

    def __init__(self, x, y, dy):  # noqa: ANN001
        import numpy as np

        self.x = np.asarray(x, float)
        self.y = np.asarray(y, float)
        self.dy = np.asarray(dy, float)
        self.h = np.diff(self.x)

    def _locate(self, points):  # noqa: ANN001, ANN202
        import numpy as np

        points = np.asarray(points, float)
        i = np.clip(np.searchsorted(self.x, points, side="right") - 1, 0, self.x.size - 2)
        h = self.h[i]
        t = (points - self.x[i]) / h
        outside = (points < self.x[0]) | (points > self.x[-1]) | ~np.isfinite(points)
        return points, i, h, t, outside

    def __call__(self, points):  # noqa: ANN001, ANN204
        import numpy as np

        if np.ndim(points) == 0:
            return self(np.array([points], float))[:, 0]
        points, i, h, t, outside = self._locate(points)
        t2, t3 = t * t, t * t * t
        h00, h10, h01, h11 = 2 * t3 - 3 * t2 + 1, t3 - 2 * t2 + t, -2 * t3 + 3 * t2, t3 - t2
        out = (h00 * self.y[:, i] + h10 * h * self.dy[:, i] + h01 * self.y[:, i + 1] + h11 * h * self.dy[:, i + 1])
        if np.any(outside):
            out[:, outside] = np.nan
        return out

    def pairs(self, rows, points):  # noqa: ANN001, ANN201
        """The values ``S_rows[k](points[k])``: one state per point (what a search for the
        zeros of single states needs, without evaluating every state everywhere)."""
        import numpy as np

        points, i, h, t, outside = self._locate(points)
        t2, t3 = t * t, t * t * t
        h00, h10, h01, h11 = 2 * t3 - 3 * t2 + 1, t3 - 2 * t2 + t, -2 * t3 + 3 * t2, t3 - t2
        out = (h00 * self.y[rows, i] + h10 * h * self.dy[rows, i] + h01 * self.y[rows, i + 1]
               + h11 * h * self.dy[rows, i + 1])
        return np.where(outside, np.nan, out)

    def derivative(self):  # noqa: ANN201
        """A callable giving the interpolant's first derivative."""
        import numpy as np

        def first(points):  # noqa: ANN001, ANN202
            if np.ndim(points) == 0:
                return first(np.array([points], float))[:, 0]
            points, i, h, t, outside = self._locate(points)
            t2 = t * t
            d00, d10, d01, d11 = (6 * t2 - 6 * t) / h, 3 * t2 - 4 * t + 1, (-6 * t2 + 6 * t) / h, 3 * t2 - 2 * t
            out = d00 * self.y[:, i] + d10 * self.dy[:, i] + d01 * self.y[:, i + 1] + d11 * self.dy[:, i + 1]
            if np.any(outside):
                out[:, outside] = np.nan
            return out

        return first


def hermite(compiled, x, y, p, k) -> Hermite:  # noqa: ANN001
    """The C1 cubic interpolant through the states with slopes from the equations.

    For collocation this is the collocation solution itself (as in SciPy's ``solve_bvp``);
    for shooting it is a 4th-order accurate interpolant of the nodes. ``x`` is the standard
    variable. Returns a callable ``(points) -> ndarray, shape (n, len(points))``.
    """
    import numpy as np

    with np.errstate(all="ignore"):
        slopes = compiled.rhs(x, y, p, k)
    return Hermite(x, y, slopes)


_CROSSING_STEPS = 60  # enough for bisection to shrink a bracket of [0, 1] to round-off
_NEAR_ZERO = 1e-3  # |y| below this: 1 / (1 + |y|) is within 0.1 % of its value at the root


def crossings(spline, points, values):  # noqa: ANN001, ANN201
    """Where a state of ``spline`` crosses zero between consecutive ``points``.

    ``values`` is ``spline(points)``, shape ``(n, len(points))``. A relative difference
    ``|dy| / (1 + |y|)`` is largest where ``y`` itself passes through zero, and a state that
    is large everywhere else (a slope ``1e5`` on both sides of a symmetric peak) crosses
    zero between any two samples: comparing at nodes and midpoints alone can miss a
    difference a hundred times the one seen. Each sign change of a state between two
    consecutive points (not near zero at either) is found by false position (the Illinois variant) on that state of
    the interpolant, to ``|y| <= 1e-3`` or a bracket at round-off. Returns the sorted points
    (possibly empty).
    """
    import numpy as np

    points = np.asarray(points, float)
    values = np.asarray(values, float)
    if points.size < 2:
        return np.empty(0)
    with np.errstate(all="ignore"):
        # a sign change between two values that are already near zero needs no root: the
        # measure 1 / (1 + |y|) is at its harshest at those points themselves
        near = np.minimum(np.abs(values[:, :-1]), np.abs(values[:, 1:])) <= _NEAR_ZERO
        change = ((np.sign(values[:, :-1]) * np.sign(values[:, 1:]) < 0) & ~near
                  & np.isfinite(values[:, :-1] * values[:, 1:]))
    rows, left = np.nonzero(change)
    if rows.size == 0:
        return np.empty(0)
    a, b = points[left].copy(), points[left + 1].copy()
    fa, fb = values[rows, left].copy(), values[rows, left + 1].copy()
    columns = np.arange(rows.size)
    pairs = getattr(spline, "pairs", None)
    best = 0.5 * (a + b)
    for step in range(_CROSSING_STEPS):
        with np.errstate(all="ignore"):
            guess = (a * fb - b * fa) / (fb - fa)
        # bisect every third step, and where false position gives nothing inside the bracket
        inside = np.isfinite(guess) & (guess > a) & (guess < b)
        middle = np.where(inside & (step % 3 != 2), guess, 0.5 * (a + b))
        with np.errstate(all="ignore"):
            at = pairs(rows, middle) if pairs is not None else spline(middle)[rows, columns]
        best = middle
        if np.all((np.abs(at) <= _NEAR_ZERO) | ~np.isfinite(at) | (b - a <= 4e-16 * np.maximum(1.0, np.abs(b)))):
            break
        left_side = np.sign(at) == np.sign(fa)
        # Illinois: halve the value kept at the end that stays, so the bracket closes from both sides
        fb = np.where(left_side, fb * 0.5, fb)
        fa = np.where(left_side, fa, fa * 0.5)
        a, fa = np.where(left_side, middle, a), np.where(left_side, at, fa)
        b, fb = np.where(left_side, b, middle), np.where(left_side, fb, at)
    return np.unique(best)


def residuals(compiled, x, y, p, k) -> tuple[float, float]:  # noqa: ANN001
    """Max relative residual of the equations between nodes, and of the boundary conditions.

    The equation residual is measured at the midpoint of each mesh interval of the C1
    cubic interpolant: ``|S'(x) - f(x, S(x))| / (1 + |f(x, S(x))|)`` in the user's variable
    (``|S_t - F| / (h_r + |F|)`` in the standard one); it is the same measure for every
    method, so methods can be compared. With algebraic equations, ``|G| / (1 + |Z|)`` at the
    nodes and midpoints counts too (round-off where their inner solves converged).
    """
    import numpy as np

    with np.errstate(all="ignore"):
        f = compiled.rhs(x, y, p, k)
        h = np.diff(x)
        mid = x[:-1] + 0.5 * h
        # the cubic Hermite interpolant and its derivative at the midpoints of the intervals
        s = 0.5 * (y[:, 1:] + y[:, :-1]) + h / 8 * (f[:, :-1] - f[:, 1:])  # discrete.midpoint_values
        ds = 1.5 * (y[:, 1:] - y[:, :-1]) / h - 0.25 * (f[:, :-1] + f[:, 1:])
        fm = compiled.rhs(mid, s, p, k)
        r = np.abs(ds - fm) / (compiled.row_scale(p, k) + np.abs(fm))
        bc = np.abs(compiled.bc(y[:, 0], y[:, -1], p, k))
        held = getattr(compiled, "algebraic_residual", None)  # the algebraic equations, where there are any
        algebraic = max(held(x, y, p, k), held(mid, s, p, k)) if held is not None else 0.0
    equation = max(float(np.max(r)) if r.size else 0.0, algebraic)
    boundary = float(np.max(bc)) if bc.size else 0.0
    return (equation if np.isfinite(equation) else math.inf, boundary if np.isfinite(boundary) else math.inf)


@dataclass
class Survey:
    """Cheap facts about a problem along its guess, read by the strategy selector.

    Attributes
    ----------
    length : float
        Length of the (finite or truncated) interval.
    growth : float
        Upper estimate of how much IVP sensitivities grow across the interval:
        ``exp(integral of max(0, max Re eig J) dx)`` along the guess.
    stiffness : float
        ``max |Re eig J| * length``: large values mean fast modes (layers) that an explicit
        integrator or a coarse uniform mesh cannot follow.
    rates : ndarray, shape (m,)
        ``max(0, max Re eig J)`` at the guess nodes (used to place shooting nodes).
    oscillation : float
        ``max |Im eig J| * length``: how many radians the fastest oscillating mode turns
        across the interval (0 when none oscillates).
    """

    length: float
    growth: float
    stiffness: float
    rates: Any = None
    oscillation: float = 0.0


_SURVEY_POINTS = 11


def _eigen_parts(matrices):  # noqa: ANN001, ANN202
    """Real parts of the eigenvalues of a stack of square matrices ``(k, n, n)``, shape
    ``(k, n)``, and the largest imaginary part of each, shape ``(k,)``; one and two states in
    closed form (LAPACK's call per matrix costs more than the arithmetic)."""
    import numpy as np

    n = matrices.shape[-1]
    if n == 1:
        return matrices[:, :, 0], np.zeros(matrices.shape[0])
    if n == 2:
        a, b, c, d = matrices[:, 0, 0], matrices[:, 0, 1], matrices[:, 1, 0], matrices[:, 1, 1]
        half = 0.5 * (a + d)
        discriminant = 0.25 * (a - d) ** 2 + b * c
        root = np.sqrt(np.maximum(discriminant, 0.0))  # complex pair: no real part added
        return np.stack([half + root, half - root], axis=1), np.sqrt(np.maximum(-discriminant, 0.0))
    eig = np.linalg.eigvals(matrices)
    return eig.real, np.abs(eig.imag).max(axis=1)


def survey(compiled, x, y, p, k) -> Survey:  # noqa: ANN001
    """Survey the growth and stiffness of the linearised problem along the guess ``(x, y)``."""
    import numpy as np

    # Eigenvalues at no more than _SURVEY_POINTS nodes (both ends included), rates
    # interpolated between them: the survey is a heuristic, and eigvals of many large
    # Jacobians would cost more than the solve it guides.
    every = max(1, -(-(x.size - 1) // (_SURVEY_POINTS - 1)))
    at = np.unique(np.concatenate([np.arange(0, x.size, every), [x.size - 1]]))

    with np.errstate(all="ignore"), one_blas_thread(compiled.n):  # threaded eigvals: 20x slower on 2 busy cores
        jac = compiled.jac(x[at], y[:, at], p, k)  # (n, n, len(at))
        finite = bool(np.isfinite(jac).all())
        if finite:
            real, imag = _eigen_parts(np.moveaxis(jac, -1, 0))
        else:
            real, imag = np.full((at.size, 1), np.nan), np.zeros(at.size)
    if not np.isfinite(real).all():
        return Survey(float(x[-1] - x[0]), math.inf, math.inf, np.full(x.size, np.inf))
    sampled = np.maximum(real.max(axis=1), 0.0)
    rates = np.interp(x, x[at], sampled)
    log_growth = float(np.sum(0.5 * (rates[1:] + rates[:-1]) * np.diff(x)))
    length = float(x[-1] - x[0])
    stiffness = float(np.abs(real).max() * length)
    oscillation = float(np.max(imag) * length) if imag.size else 0.0
    return Survey(length, math.exp(min(log_growth, 700.0)), stiffness, rates, oscillation)


def condition_estimate(compiled, x, y, p, k, max_unknowns: int = 200_000) -> float | None:  # noqa: ANN001
    """Stability constant of the linearised problem: how much it can amplify a residual.

    Estimates ``||M^-1||_inf`` for the Newton matrix ``M`` of the trapezoidal rule on the
    final mesh of whatever method produced the solution, with each interval's rows in
    derivative units (``(y_i+1 - y_i)/h - (f_i + f_i+1)/2``) and the boundary rows as they
    are. The figure hardly depends on the mesh, is comparable between methods, and bounds
    ``error <~ constant * residual`` (Ascher, Mattheij and Russell 1995, section 3.4).
    Estimated with a sparse LU and :func:`stability_constant`; None when the system is too
    large.
    """
    import numpy as np
    from scipy.sparse.linalg import splu


    n, m = y.shape
    n_p = len(p)
    size = n * m + n_p
    if size > max_unknowns:
        return None
    with np.errstate(all="ignore"):
        jac = compiled.jac(x, y, p, k)  # (n, n, m)
        pjac = compiled.pjac(x, y, p, k) if n_p else None
        a, b, dp = compiled.bc_jac(y[:, 0], y[:, -1], p, k)
    h = np.diff(x)[:, None, None]
    J = np.moveaxis(jac, -1, 0)
    eye = np.eye(n)
    # d/dy_i and d/dy_i+1 of (y_i+1 - y_i)/h - (f_i + f_i+1)/2
    left, right = -eye / h - 0.5 * J[:-1], eye / h - 0.5 * J[1:]
    params = -0.5 * np.moveaxis(pjac[:, :, :-1] + pjac[:, :, 1:], -1, 0) if n_p else None
    matrix = block_matrix(left, right, params, a, b, dp if n_p else None)
    if not np.isfinite(matrix.data).all():
        return math.inf
    try:
        lu = splu(matrix)
    except RuntimeError:  # exactly singular
        return math.inf
    return stability_constant(lu, size)


_EXACT_INVERSE = 120  # unknowns up to which the inverse itself is cheaper than the estimate


def stability_constant(lu, size: int, scale=None) -> float | None:  # noqa: ANN001
    """``||(D M)^-1||_inf`` from an LU of ``M`` (``lu.solve(b, trans)``), with ``D = diag(scale)``
    the row factors (none: ``D = I``).

    Exact (the inverse itself) up to ``_EXACT_INVERSE`` unknowns; above, Hager's estimate of
    ``||(D M)^-T||_1`` (Hager 1984; Higham 1988, ACM TOMS 14, 381-396), started from the
    vector of ones and from LAPACK's alternating vector ``(-1)^i (1 + i/(N-1))``, the larger
    kept. It is deterministic (SciPy's ``onenormest`` draws random columns, and gave
    different figures from run to run) and a lower bound, in our checks equal to the exact
    value (tests/test_methods.py).
    """
    import numpy as np

    inverse = 1.0 / np.asarray(scale, float) if scale is not None else np.ones(size)
    try:
        if size <= _EXACT_INVERSE:
            return float(np.max(np.sum(np.abs(lu.solve(np.diag(inverse))), axis=1)))

        def apply(v):  # noqa: ANN001, ANN202 - (D M)^-T v = D^-1 M^-T v
            return inverse * lu.solve(v, trans="T")

        def apply_t(v):  # noqa: ANN001, ANN202 - its transpose, M^-1 D^-1 v
            return lu.solve(inverse * v)

        alternating = (1.0 + np.arange(size) / max(size - 1, 1)) * np.where(np.arange(size) % 2, -1.0, 1.0)
        value = max(_hager(apply, apply_t, np.ones(size)), _hager(apply, apply_t, alternating))
    except (ValueError, RuntimeError, np.linalg.LinAlgError):  # pragma: no cover - degenerate input
        return None
    return value if math.isfinite(value) else math.inf


def _hager(apply, apply_t, x, iterations: int = 5) -> float:  # noqa: ANN001
    """Hager's estimate of ``||A||_1`` from the start ``x`` (two solves per step)."""
    import numpy as np

    x = x / np.sum(np.abs(x))
    estimate = 0.0
    for _ in range(iterations):
        y = apply(x)
        estimate = max(estimate, float(np.sum(np.abs(y))))
        z = apply_t(np.where(y >= 0, 1.0, -1.0))
        j = int(np.argmax(np.abs(z)))
        if abs(z[j]) <= float(z @ x):
            break
        x = np.zeros(x.size)
        x[j] = 1.0
    return estimate
