"""Pseudo-arclength machinery on the collocation equations (what continuation steps with).

The unknowns ``z`` are the collocation unknowns of a system with one or more constants
solved for (``CompiledSystem.freeing``): the states on a mesh, the parameters, the freed
constants last. ``G(z) = 0`` has one equation fewer than unknowns for one freed constant
(a curve), two fewer for two.

* :func:`tangent` -- the unit tangent of the curve, from the bordered system
  ``[G_z; t_prev] t = [0; 1]`` (Keller 1977), with the sign of that matrix's determinant:
  it changes at a simple branch point and not at a fold, which is how branch points are
  seen (the bordered matrix is regular at a fold, singular at a branch point);
* :func:`correct` -- Newton on ``G(z) = 0`` and the arclength hyperplane;
* :class:`Bordered` -- solves with ``[G_z; t]`` (regular at folds);
* :func:`branch_test` -- a smooth test function that vanishes at a branch point: the last
  component ``g`` of ``[[A, b], [c^T, 0]] [v; g] = [0; 1]`` with ``A = [G_z; t]`` (a bordered
  test function, Govaerts 2000, *Numerical Methods for Bifurcations of Dynamical Equilibria*,
  SIAM, chapter 3), with ``v`` the null vector at a branch point;
* :func:`fold_test` -- the same for a fold in one freed constant: ``A = G_x``, the Jacobian
  in the states and parameters only; with its gradient for Newton on the fold curve.

Norms are weighted (``CollocationEquations.weights``: node weights divided by the length, so
norms of states do not grow with the mesh).
"""

from __future__ import annotations

import math

import numpy as np
import scipy.sparse as sparse

from ..methods.discrete import CollocationEquations, sparse_lu

_MAX_NEWTON = 12
#: A chord step that shrinks the correction by less than this (against the step before) has
#: the corrector form the Jacobian afresh at its iterate.
_CHORD_RATE = 0.3
#: Column ordering of SuperLU for the bordered matrices: the minimum-degree ordering of
#: A^T + A keeps the block-bidiagonal structure with its dense border row to about twice the
#: matrix's own entries; SuperLU's default (COLAMD) filled a 5179-unknown wedge-flow matrix
#: to 11 million entries (0.32 s a factorisation against 0.05 s).
_ORDER = "MMD_AT_PLUS_A"


def _lu(matrix):  # noqa: ANN001, ANN202
    """SuperLU of a bordered matrix; :class:`~bvpkit.methods.discrete.SingularMatrix` (a RuntimeError)
    when it is exactly singular or holds NaN, inf or the huge entries of a diverging iterate."""
    return sparse_lu(matrix, "the bordered matrix", permc_spec=_ORDER)


def _row(vector: np.ndarray) -> sparse.csr_matrix:
    return sparse.csr_matrix(vector.reshape(1, -1))


def bordered(matrix, *rows) -> sparse.csc_matrix:  # noqa: ANN001
    """``matrix`` (sparse) with dense ``rows`` (vectors or 1-row sparse matrices) below it, in CSC.

    Built on the compressed arrays directly: SciPy's general ``vstack`` costs milliseconds on
    a small system, more than the factorisation itself."""
    a = matrix if matrix.format == "csc" else sparse.csc_matrix(matrix)
    a.sort_indices()
    dense = np.vstack([np.asarray(r.toarray() if sparse.issparse(r) else r, dtype=float).reshape(1, -1) for r in rows])
    m, columns = a.shape
    r = dense.shape[0]
    counts = np.diff(a.indptr)
    indptr = a.indptr + r * np.arange(columns + 1)
    indices = np.empty(a.nnz + r * columns, dtype=np.int64)
    data = np.empty(a.nnz + r * columns)
    old = np.arange(a.nnz) + r * np.repeat(np.arange(columns), counts)
    indices[old], data[old] = a.indices, a.data
    new = (indptr[1:] - r)[:, None] + np.arange(r)[None, :]
    indices[new] = m + np.arange(r)[None, :]
    data[new] = dense.T
    return sparse.csc_matrix((data, indices, indptr), shape=(m + r, columns))


def carry(vector: np.ndarray, n: int, x_from: np.ndarray, x_to: np.ndarray) -> np.ndarray:
    """A vector of unknowns (``n`` states per node, node-major, then parameters) on the mesh
    ``x_from`` carried onto the mesh ``x_to`` (linear interpolation of each state)."""
    if x_from.size == x_to.size and np.array_equal(x_from, x_to):
        return vector
    ys = vector[: n * x_from.size].reshape(x_from.size, n).T
    moved = np.array([np.interp(x_to, x_from, row) for row in ys])
    return np.concatenate([moved.T.ravel(), vector[n * x_from.size:]])


def determinant_sign(lu) -> float:  # noqa: ANN001 - a SuperLU object
    """The sign of the determinant of the matrix SuperLU factored: ``Pr A Pc = L U``, ``L``
    unit lower triangular, so ``sign det A = sign(Pr) sign(Pc) sign(prod diag U)``."""
    diagonal = lu.U.diagonal()
    if not np.all(np.isfinite(diagonal)) or np.any(diagonal == 0):
        return 0.0
    sign = -1.0 if np.count_nonzero(diagonal < 0) % 2 else 1.0
    return sign * _parity(lu.perm_r) * _parity(lu.perm_c)


def _parity(permutation: np.ndarray) -> float:
    """+1 for an even permutation, -1 for an odd one: ``(-1)**(size - cycles)``, the cycles
    counted by pointer doubling (each index learns the smallest index of its cycle)."""
    perm = np.asarray(permutation, dtype=np.int64)
    smallest, step = np.arange(perm.size), perm.copy()
    reach = 1
    while reach < perm.size:
        smallest = np.minimum(smallest, smallest[step])
        step = step[step]
        reach *= 2
    smallest = np.minimum(smallest, smallest[step])
    cycles = int(np.count_nonzero(smallest == np.arange(perm.size)))
    return -1.0 if (perm.size - cycles) % 2 else 1.0


def norm(eq: CollocationEquations, v: np.ndarray) -> float:
    return math.sqrt(float(np.sum(eq.weights * v * v)))


def inner(eq: CollocationEquations, u: np.ndarray, v: np.ndarray) -> float:
    return float(np.sum(eq.weights * u * v))


def tangent(eq: CollocationEquations, z: np.ndarray, previous: np.ndarray, extra=None,  # noqa: ANN001
            keep: list | None = None) -> tuple[np.ndarray, float]:
    """Unit tangent (weighted norm) at ``z`` oriented like ``previous``, and the sign of
    ``det [G_z; previous]`` (times the orientation), which changes at a simple branch point.
    ``extra`` adds equations as in :func:`correct` (their Jacobian rows). ``keep``, when
    given, receives the factorisation of ``[G_z; previous]``: the next :func:`correct` reuses
    it as its chord matrix."""
    rows = [eq.jacobian(z)]
    if extra is not None:
        rows.append(extra(z)[1])
    matrix = bordered(rows[0], *rows[1:], previous * eq.weights)
    lu = _lu(matrix)
    rhs = np.zeros(matrix.shape[0])
    rhs[-1] = 1.0
    t = lu.solve(rhs)
    t /= norm(eq, t)
    sign = determinant_sign(lu)
    if inner(eq, t, previous) < 0:
        t = -t
    if keep is not None:
        keep[:] = [lu]
    return t, sign


def correct(eq: CollocationEquations, predicted: np.ndarray, direction: np.ndarray, tol: float,
            extra=None, chord=None) -> tuple[np.ndarray | None, int]:  # noqa: ANN001
    """Newton on ``G(z) = 0`` and ``<direction, z - predicted> = 0``; None when it does not converge.

    Returns the corrected point and the work done, in Newton steps (each factorisation, and
    the chord steps together as one). ``extra``, when given, is a callable
    ``z -> (residuals, Jacobian rows)`` adding equations (the fold condition of a fold
    curve). ``chord``, when given, is a factorisation of a
    nearby bordered matrix (the last point's tangent's, :func:`tangent` ``keep``): the steps
    reuse it (a chord method, Keller 1977) while they contract by a factor of at least
    :data:`_CHORD_RATE`, and the matrix is formed and factored afresh at the iterate when
    they do not: one factorisation a point instead of one an iteration on a smooth branch."""
    z = predicted.copy()
    border = direction * eq.weights
    last = math.inf
    lu = chord
    made = reused = 0  # factorisations made here, steps taken with an older one
    for it in range(1, _MAX_NEWTON + 1):
        with np.errstate(all="ignore"):
            g = eq.residual(z)
            residuals = [g]
            if extra is not None:
                more, jac = extra(z)
                residuals.append(np.atleast_1d(more))
        r = np.concatenate([*residuals, [inner(eq, direction, z - predicted)]])
        if not np.isfinite(r).all():
            return None, it
        try:
            if lu is None:
                with np.errstate(all="ignore"):
                    rows = [eq.jacobian(z)] + ([jac] if extra is not None else [])
                lu = _lu(bordered(rows[0], *rows[1:], border))
                fresh, made = True, made + 1
            else:
                fresh, reused = False, reused + 1
            step = lu.solve(-r)
        except RuntimeError:
            return None, it
        if not np.isfinite(step).all():
            return None, it
        size_now = float(np.max(np.abs(step) / (1.0 + np.abs(z + step))))
        if not fresh and size_now > _CHORD_RATE * last:
            lu = None  # the old matrix no longer contracts well: a Newton step at this iterate
            if size_now > last:
                continue  # this step would lead away: taken from the fresh matrix instead
        z = z + step
        if not np.isfinite(z).all():
            return None, it
        size = float(np.max(np.abs(step) / (1.0 + np.abs(z))))
        # the work done, counted as Newton steps (step control reads it): each factorisation,
        # and the chord steps together as one
        work = made + (1 if reused else 0)
        if size <= 0.01 * tol:
            return z, work
        # the round-off floor: steps that stop shrinking while already below the tolerance
        # (an exact Newton would halve its exponent each time; these no longer get smaller)
        if size <= tol and it > 2 and size > 0.5 * last:
            return z, work
        last = size
    return None, _MAX_NEWTON


class Bordered:
    """Solves with the arclength-bordered matrix ``[G_z; t]``, the border's right side zero
    (a correction normal to the branch); regular at a fold, where ``G_y`` alone is not."""

    def __init__(self, eq: CollocationEquations, z: np.ndarray, t: np.ndarray):
        self._lu = _lu(bordered(eq.jacobian(z), t * eq.weights))
        self.size = eq.n * eq.m + eq.n_p

    def solve(self, b: np.ndarray, trans: str = "N") -> np.ndarray:
        if trans != "N":
            return self._lu.solve(np.append(b, 0.0), trans=trans)[:-1]
        return self._lu.solve(np.append(b, 0.0))


def _bordered_test(matrix: sparse.csc_matrix, b: np.ndarray, c: np.ndarray) -> tuple[float, np.ndarray, np.ndarray]:
    """``g`` and the null-vector approximations ``v``, ``w`` of ``[[A, b], [c^T, 0]]``:
    ``[[A, b], [c^T, 0]] [v; g] = [0; 1]`` and the transposed system for ``w``."""
    size = matrix.shape[0]
    full = sparse.bmat([[matrix, sparse.csc_matrix(b.reshape(-1, 1))], [_row(c), None]]).tocsc()
    lu = _lu(full)
    rhs = np.zeros(size + 1)
    rhs[-1] = 1.0
    solved = lu.solve(rhs)
    transposed = lu.solve(rhs, trans="T")
    return float(solved[-1]), solved[:-1], transposed[:-1]


def branch_test(eq: CollocationEquations, z: np.ndarray, t: np.ndarray, b: np.ndarray,
                c: np.ndarray) -> tuple[float, np.ndarray]:
    """The bordered test function of a branch point at ``z`` (tangent ``t``), and ``v``: at a
    branch point ``g = 0`` and ``v`` spans the null space of ``[G_z; t]`` (the direction of
    the other branch)."""
    matrix = bordered(eq.jacobian(z), t * eq.weights)
    g, v, _ = _bordered_test(matrix, b, c)
    return g, v


def fold_test(eq: CollocationEquations, z: np.ndarray, freed: int, b: np.ndarray,
              c: np.ndarray) -> tuple[float, np.ndarray, np.ndarray]:
    """The fold test ``g`` at ``z`` for the Jacobian in the states and parameters (the last
    ``freed`` unknowns are the freed constants), with the null vectors ``v`` (right) and
    ``w`` (left) of that Jacobian at a fold."""
    jac = eq.jacobian(z).tocsc()
    inner_size = jac.shape[1] - freed
    return _bordered_test(jac[:, :inner_size], b, c)


def fold_gradient(eq: CollocationEquations, z: np.ndarray, freed: int, v: np.ndarray,
                  w: np.ndarray) -> np.ndarray:
    """The gradient of the fold test ``g`` in all the unknowns: ``g_z = -w^T G_xz v``, the
    second derivatives by central differences of the exact Jacobian (``G_xx v`` by symmetry
    of second derivatives: the Jacobian at ``x +- eps v``; the freed constants' columns at
    ``z +- eps e``); accurate to ``eps^2``, enough for Newton's convergence."""
    size = z.size
    inner_size = size - freed
    gradient = np.zeros(size)
    eps = 1e-6 * (1.0 + float(np.max(np.abs(z[:inner_size])))) / max(float(np.max(np.abs(v))), 1e-300)
    direction = np.zeros(size)
    direction[:inner_size] = v
    with np.errstate(all="ignore"):
        plus = eq.jacobian(z + eps * direction).tocsc()[:, :inner_size]
        minus = eq.jacobian(z - eps * direction).tocsc()[:, :inner_size]
        gradient[:inner_size] = -((plus - minus).T @ w) / (2 * eps)
        for j in range(inner_size, size):
            step = 1e-6 * (1.0 + abs(z[j]))
            e = np.zeros(size)
            e[j] = step
            plus = eq.jacobian(z + e).tocsc()[:, :inner_size]
            minus = eq.jacobian(z - e).tocsc()[:, :inner_size]
            gradient[j] = -float(w @ ((plus - minus) @ v)) / (2 * step)
    return gradient


def locate(function, lo: float, hi: float, f_lo: float, f_hi: float, xtol: float,  # noqa: ANN001
           guess: float | None = None) -> float:
    """A root of ``function`` between ``lo`` and ``hi`` (values of opposite signs given).

    Secant steps from the two latest values while each at least halves ``|f|``, kept inside
    the bracket; a bisection of the bracket otherwise. ``guess``, when inside the bracket, is
    the first point tried. Every evaluation here is a corrector run and a factorisation, so
    the count matters: from a good guess three to five evaluations reach ``xtol``, where a
    bracketing method started from the ends takes eight to twelve.
    """
    if f_lo == 0:
        return lo
    if f_hi == 0:
        return hi
    a, fa, b, fb = lo, f_lo, hi, f_hi  # the bracket: fa and fb of opposite signs
    x_old, f_old = (a, fa) if abs(fa) > abs(fb) else (b, fb)
    x, fx = (b, fb) if x_old == a else (a, fa)
    trial = guess if guess is not None and min(a, b) < guess < max(a, b) else None
    for _ in range(100):
        if trial is None or not min(a, b) < trial < max(a, b):
            trial = x - fx * (x - x_old) / (fx - f_old) if fx != f_old else 0.5 * (a + b)
            if not min(a, b) < trial < max(a, b):
                trial = 0.5 * (a + b)
        step = abs(trial - x)
        x_old, f_old = x, fx
        x, fx = trial, function(trial)
        if fx == 0:
            return x
        if (fx > 0) == (fa > 0):
            a, fa = x, fx
        else:
            b, fb = x, fx
        if step <= xtol or abs(b - a) <= 2 * xtol:
            return x
        # the next secant from the two latest values, or a bisection when |f| did not halve
        trial = None if abs(fx) <= 0.5 * abs(f_old) else 0.5 * (a + b)
    return x
