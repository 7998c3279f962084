"""Exact derivatives of a solution's outputs with respect to its constants.

A solution ``z = (Y on the mesh, p)`` of the collocation equations ``G(z, k) = 0`` moves with
the constants ``k`` as ``G_z dz/dk = -G_k``: one factorisation of the Newton matrix ``G_z``
and one solve per constant (the forward form) give the exact derivative of the discrete
solution. The Jacobian in the constants is compiled with the system (the columns
``CompiledSystem.freeing`` gives continuation), so a constant that sets a domain end (the
map ``x = c + h t`` onto the standard interval holds it), a free end, an unknown parameter
and an eigenvalue (both parameters of the standard form) are all covered the same way.

The solve that made the solution does not hand its factorisation on (the methods differ:
shooting keeps none), so the Newton matrix of the fourth-order collocation equations is
formed afresh at the solution on its own mesh (after Newton steps that put the solution on
those equations exactly: none or one for a collocation solution), with exact Jacobians from
the compiled system.

An output ``O(z, k)`` (a point value, an integral, an output expression, a parameter) is an
explicit function of the discrete solution; its derivative ``dO/dk = O_z dz/dk + O_k`` is the
derivative of ``eps -> O(z + eps dz/dk, k + eps e)`` at 0, taken by a five-point centred
difference of that explicit function (no solve in it; truncation ``~ step**4``, round-off
``~ 1e-16 / step``: about 12 digits of the discrete derivative).

The error estimate is the difference of the derivatives on the solution's mesh and on the
halved mesh (the solution carried there and put on its equations by Newton's method); the
value given is the halved mesh's with Richardson's correction for the fourth order.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np

from ..errors import BvpkitError
from ..methods.diagnostics import hermite
from ..methods.discrete import CollocationEquations, SingularMatrix, factor_blocks

#: Relative step of the centred difference along the tangent (truncation ~ step**4 = 1e-12,
#: round-off ~ 1e-16 / step = 1e-13 relative to the output's size).
_STEP = 1e-3
#: The same for the three-point difference (truncation ~ step**2 = 1e-10, round-off ~ 1e-11).
_STEP_COARSE = 1e-5
#: Newton steps that put a solution on the collocation equations of a mesh (from a solution
#: of the same problem: quadratic from close by).
_POLISH_STEPS = 8
_POLISH_TOL = 1e-13
#: Richardson's factor for the fourth-order equations: the halved mesh's error is 1/16 of the mesh's.
_ORDER_FACTOR = 15.0


@dataclass
class Sensitivities:
    """Derivatives of outputs with respect to constants (from :meth:`Solution.sensitivity`).

    Attributes
    ----------
    outputs : tuple of str
        The outputs' labels (rows).
    wrt : tuple of str
        The constants (columns).
    values : dict of str to float
        Each output's value on the solution.
    derivatives : dict of str to dict of str to float
        ``derivatives[output][constant]``.
    errors : dict of str to dict of str to float
        Estimated absolute errors of the derivatives (the difference on the solution's mesh
        and on the halved mesh; NaN when not estimated).
    matrix, error_matrix : ndarray, shape (len(outputs), len(wrt))
        The same as arrays.
    """

    outputs: tuple
    wrt: tuple
    values: dict
    matrix: np.ndarray
    error_matrix: np.ndarray
    derivatives: dict = field(init=False)
    errors: dict = field(init=False)

    def __post_init__(self) -> None:
        self.derivatives = {o: {w: float(self.matrix[i, j]) for j, w in enumerate(self.wrt)}
                            for i, o in enumerate(self.outputs)}
        self.errors = {o: {w: float(self.error_matrix[i, j]) for j, w in enumerate(self.wrt)}
                       for i, o in enumerate(self.outputs)}

    def table(self) -> dict[str, list]:
        """Columns: output, constant, value, derivative, error (one row per pair)."""
        rows: dict[str, list] = {"output": [], "constant": [], "value": [], "derivative": [], "error": []}
        for o in self.outputs:
            for w in self.wrt:
                rows["output"].append(o)
                rows["constant"].append(w)
                rows["value"].append(self.values[o])
                rows["derivative"].append(self.derivatives[o][w])
                rows["error"].append(self.errors[o][w])
        return rows

    def summary(self) -> str:
        """A plain-text table: one row per output, one column per constant (``d output / d constant``)."""
        width = max([len(o) for o in self.outputs] + [6])
        head = " " * width + "".join(f"  {'d/d' + w:>30}" for w in self.wrt)
        lines = [head]
        for o in self.outputs:
            cells = "".join(f"  {_cell(self.derivatives[o][w], self.errors[o][w]):>30}" for w in self.wrt)
            lines.append(f"{o:<{width}}{cells}")
        return "\n".join(lines)

    def as_dict(self) -> dict:
        return {"values": dict(self.values), "derivatives": self.derivatives, "errors": self.errors}


def _cell(value: float, error: float) -> str:
    if math.isfinite(error):
        return f"{value:.10g} (+/- {error:.1g})"
    return f"{value:.10g}"


class Tangents:
    """The derivatives of a discrete solution in the constants ``indices`` on one mesh.

    ``z`` holds the solution on the mesh (states node-major, then parameters); ``dz`` its
    derivatives, shape ``(len(z), len(indices))``. The solution is first put on the
    collocation equations of the mesh by Newton's method (``steps`` at most; one serves a
    fit, whose solves met the tolerance on this mesh); the Jacobian of its last step, with
    the constants' columns beside it, gives the tangents.
    """

    def __init__(self, compiled, t: np.ndarray, y: np.ndarray, p: np.ndarray, k: np.ndarray,  # noqa: ANN001
                 indices: Sequence[int], steps: int = _POLISH_STEPS):
        self.compiled, self.t, self.k, self.indices = compiled, t, np.asarray(k, float), list(indices)
        names = [compiled.layout.constants[i] for i in self.indices]
        freed = CollocationEquations(compiled.freeing(*names), t, self.k)
        own = CollocationEquations(compiled, t, self.k)
        z = own.join(y, p)
        n_p = own.n_p
        for _ in range(steps):
            r = own.residual(z)
            if not np.isfinite(r).all():
                raise SingularMatrix("the collocation equations are not finite at the solution")
            # one evaluation of the Jacobian blocks with the constants freed: the states' and
            # parameters' columns make the Newton matrix (LU by the solver's own banded or
            # sparse path), the constants' columns the right-hand sides of the tangents
            ys, ps = own.split(z)
            left, right, columns, (a, b, dp) = freed._blocks(ys, np.concatenate([ps, self.k[self.indices]]))
            with np.errstate(all="ignore"):
                lu = factor_blocks(left, right, columns[:, :, :n_p] if n_p else None, a, b,
                                   dp[:, :n_p] if n_p else None)
            step = lu.solve(r)
            if not np.isfinite(step).all():
                raise SingularMatrix("the Newton matrix at the solution is singular")
            z = z - step
            if np.max(np.abs(step) / (1.0 + np.abs(z))) < _POLISH_TOL:
                break
        self.y, self.p = own.split(z)
        m_intervals, n = left.shape[0], left.shape[1]
        constant_columns = np.concatenate([columns[:, :, n_p:].reshape(m_intervals * n, -1), dp[:, n_p:]])
        dz = lu.solve(-constant_columns)
        if not np.isfinite(dz).all():
            raise SingularMatrix("the Newton matrix at the solution is singular")
        self.dy = [own.split(dz[:, j])[0] for j in range(dz.shape[1])]
        self.dp = [own.split(dz[:, j])[1] for j in range(dz.shape[1])]

    def derivatives(self, view_of: Callable, values_of: Callable, fine: bool = True) -> np.ndarray:
        """``d values / d k`` for the constants, shape ``(len(values), len(indices))``:
        ``values_of(view_of(t, y, p, k))`` differenced along each tangent (five points; with
        ``fine`` False three, about ten digits at half the cost: a fit's Jacobian)."""
        columns = []
        for j, i in enumerate(self.indices):
            scale = abs(self.k[i]) if self.k[i] != 0 else 1.0
            step = (_STEP if fine else _STEP_COARSE) * scale
            e = np.zeros_like(self.k)
            e[i] = 1.0
            at = {}
            for s in (-2, -1, 1, 2) if fine else (-1, 1):
                eps = s * step
                view = view_of(self.t, self.y + eps * self.dy[j], self.p + eps * self.dp[j], self.k + eps * e)
                at[s] = np.asarray(values_of(view), float)
            if fine:
                columns.append((at[-2] - 8 * at[-1] + 8 * at[1] - at[2]) / (12 * step))
            else:
                columns.append((at[1] - at[-1]) / (2 * step))
        return np.column_stack(columns) if columns else np.zeros((0, 0))


def halved(t: np.ndarray) -> np.ndarray:
    """The mesh with every interval cut in two."""
    return np.sort(np.concatenate([t, 0.5 * (t[1:] + t[:-1])]))


def derivatives(compiled, t: np.ndarray, y: np.ndarray, p: np.ndarray, k: np.ndarray,  # noqa: ANN001
                indices: Sequence[int], view_of: Callable, values_of: Callable,
                estimate: bool = True) -> tuple[np.ndarray, np.ndarray]:
    """Derivatives of ``values_of(view)`` in the constants ``indices``, and their error
    estimates (NaN without ``estimate``), shape ``(len(values), len(indices))`` each.

    Without ``estimate``: on the solution's mesh alone (three-point differences of the
    outputs along the tangents, about ten digits: a fit's Jacobian). With it: on the halved mesh too;
    the value is the halved mesh's, corrected by Richardson's rule for the fourth order, and
    the error the difference of the two meshes' derivatives (an upper estimate of the halved
    mesh's error, itself larger than the corrected value's).
    """
    try:
        coarse = Tangents(compiled, t, y, p, k, indices, steps=_POLISH_STEPS if estimate else 1).derivatives(
            view_of, values_of, fine=estimate)
        if not estimate:
            return coarse, np.full_like(coarse, np.nan)
        fine_t = halved(t)
        fine_y = hermite(compiled, t, y, p, k)(fine_t)
        fine = Tangents(compiled, fine_t, fine_y, p, k, indices).derivatives(view_of, values_of)
    except SingularMatrix as err:
        raise BvpkitError(
            f"sensitivity: {err}; the outputs do not depend smoothly on the constants here (a fold or "
            "a branch point of the solution family)"
        ) from None
    return fine + (fine - coarse) / _ORDER_FACTOR, np.abs(fine - coarse)


@dataclass
class Propagation:
    """Spread of outputs from the spread of constants (from :meth:`Solution.propagate`).

    Attributes
    ----------
    outputs : tuple of str
    values : dict of str to float
        The outputs on the solution.
    deviations : dict of str to float
        First-order standard deviations ``sqrt(diag(S C S^T))`` (``S`` the sensitivities,
        ``C`` the constants' covariance).
    covariance : ndarray, shape (len(outputs), len(outputs))
        First-order covariance of the outputs.
    sensitivities : Sensitivities
    sampled : dict of str to float or None
        Standard deviations of the outputs over the samples (None when not sampled).
    sampled_mean : dict of str to float or None
    samples : ndarray, shape (n_samples, len(outputs)) or None
        The outputs of each sampled solve (NaN where a solve failed); ``failed`` counts those.
    """

    outputs: tuple
    values: dict
    deviations: dict
    covariance: np.ndarray
    sensitivities: Sensitivities
    sampled: dict | None = None
    sampled_mean: dict | None = None
    samples: np.ndarray | None = None
    failed: int = 0

    def summary(self) -> str:
        width = max([len(o) for o in self.outputs] + [6])
        lines = []
        for o in self.outputs:
            line = f"{o:<{width}}  {self.values[o]:.10g} +/- {self.deviations[o]:.4g} (first order)"
            if self.sampled is not None:
                line += f", {self.sampled[o]:.4g} over {self.samples.shape[0]} samples"
            lines.append(line)
        if self.failed:
            lines.append(f"{self.failed} sampled solve{'s' if self.failed != 1 else ''} failed (left out)")
        return "\n".join(lines)


def covariance_of(names: Sequence[str], deviations: Mapping | None, covariance) -> np.ndarray:  # noqa: ANN001
    """The constants' covariance from their standard deviations or a given matrix (checked)."""
    n = len(names)
    if covariance is not None:
        c = np.asarray(covariance, float)
        if c.shape != (n, n):
            raise BvpkitError(f"propagate: the covariance must be {n} x {n} (one row per constant: {', '.join(names)})")
        if not np.isfinite(c).all() or not np.allclose(c, c.T, rtol=1e-10, atol=0):
            raise BvpkitError("propagate: the covariance must be finite and symmetric")
        if np.linalg.eigvalsh(c).min() < -1e-12 * max(np.abs(c).max(), 1e-300):
            raise BvpkitError("propagate: the covariance is not positive semi-definite")
        return c
    sd = np.array([deviations[name] for name in names], float)
    if not (np.isfinite(sd).all() and (sd >= 0).all()):
        raise BvpkitError("propagate: standard deviations of the constants must be finite and not negative")
    return np.diag(sd ** 2)
