"""Convergence diagnostics as plain, typed data (no printing here)."""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field
from typing import Any


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
        discretisation (from a re-solve on a refined mesh) plus truncation.
    discretisation_error : float or None
        The part of ``error_estimate`` from the mesh.
    truncation_error : float or None
        For infinite domains: the change seen in the last lengthening of the domain.
    truncation_length : float or None
        For infinite domains: the distance from the finite end (from 0 when both ends are
        infinite) at which the infinite end was placed.
    condition : float or None
        Estimated condition number of the final Newton (boundary) matrix.
    seconds : float
        Wall time of the whole solve.
    attempts : list of Attempt
        Everything that was tried, in order.
    selection : str
        Why the first method was chosen.
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

    def as_dict(self) -> dict[str, Any]:
        """Plain JSON-ready data (non-finite floats become None)."""
        return _clean(dataclasses.asdict(self))


def _clean(value: Any) -> Any:
    if isinstance(value, dict):
        return {k: _clean(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_clean(v) for v in value]
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def hermite(compiled, x, y, p, k):  # noqa: ANN001, ANN201
    """The C1 cubic interpolant through the states with slopes from the equations.

    For collocation this is the solution SciPy's ``solve_bvp`` itself returns; for shooting
    it is a 4th-order accurate interpolant of the nodes. Returns a callable
    ``(points) -> ndarray, shape (n, len(points))``.
    """
    import numpy as np
    from scipy.interpolate import CubicHermiteSpline

    with np.errstate(all="ignore"):
        slopes = compiled.rhs(x, y, p, k)
    return CubicHermiteSpline(x, y, slopes, axis=1, extrapolate=False)


def residuals(compiled, x, y, p, k) -> tuple[float, float]:  # noqa: ANN001
    """Max relative residual of the equations between nodes, and of the boundary conditions.

    The equation residual is measured at the midpoint of each mesh interval of the C1
    cubic interpolant: ``|S'(x) - f(x, S(x))| / (1 + |f(x, S(x))|)``; it is the same
    measure for every method, so methods can be compared.
    """
    import numpy as np

    with np.errstate(all="ignore"):
        spline = hermite(compiled, x, y, p, k)
        mid = 0.5 * (x[1:] + x[:-1])
        s = spline(mid)
        ds = spline.derivative()(mid)
        f = compiled.rhs(mid, s, p, k)
        r = np.abs(ds - f) / (1.0 + np.abs(f))
        bc = np.abs(compiled.bc(y[:, 0], y[:, -1], p, k))
    equation = float(np.max(r)) if r.size else 0.0
    boundary = float(np.max(bc)) if bc.size else 0.0
    return (equation if np.isfinite(equation) else math.inf, boundary if np.isfinite(boundary) else math.inf)
