"""Many points of a sweep solved as one vectorised Newton system.

A chart of small problems costs interpreter time, not arithmetic: one solve of a two-state
problem on a hundred nodes is a few hundred small array operations. Here the points of one
chunk of a sweep (other values of the constants, the same problem) share a mesh, and every
step of 4th-order collocation (:mod:`bvpkit.methods.collocation`) runs for all of them at
once: the standard form's generated functions evaluate every point and node in one call (the
constants as columns, ``(n_k, K, 1)``), the Newton matrices of the points are the diagonal
blocks of one banded matrix factored by one LAPACK call (their bands laid side by side), and
each point keeps its own line search, its own convergence test, its own residual check, its
own error estimate (deferred correction with its block of the last Newton matrix) and its
own stability constant.

A point the batch does not settle (Newton not converged from the shared start, a residual
that asks for more nodes, an estimate above the tolerance) is left to the caller, which
solves it alone as before. A settled point becomes a :class:`~bvpkit.solver.solution.Solution`
through :func:`bvpkit.solver.settle.settle`, the one place an outcome becomes a solution, so its
status, message and estimate are what a solve of it alone on that mesh gives.

The batch takes what collocation's banded path takes without extra unknowns: no unknown
parameters, separated conditions (each reads one end), up to
:data:`~bvpkit.methods.discrete.BAND_LIMIT` states, and problem classes without numerical
hooks (a loop around the solve such as an infinite end's, or a verdict such as an
eigenvalue's mode, stays with the driver); a singular term ``S y / t`` is taken, with its
limit at ``t = 0``. :func:`applies` says whether a prepared problem qualifies.
"""

from __future__ import annotations

import math
import time
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from ..methods.base import Outcome
from ..methods.collocation import _OUT_OF_DOMAIN_HALVINGS, _SETTLED
from ..methods.diagnostics import _EXACT_INVERSE, Attempt
from ..methods.discrete import (
    _D,
    _DH,
    _H,
    _T,
    BAND_LIMIT,
    _condition_positions,
    _maps,
    one_blas_thread,
    sparse_pays,
)
from ..status import Status

#: Newton's method of the batch: solve_bvp's line search (as :func:`methods.collocation._newton`),
#: at most this many iterations, each with a fresh matrix.
_MAX_ITERATIONS = 6
_SIGMA, _TAU, _TRIALS = 0.2, 0.5, 4


#: The numerical hooks of a problem class (:class:`bvpkit.reduce.transform.Transform`): a class
#: that has any of them (a loop around the solve, a verdict, its own start or constants) is
#: solved point by point, where the driver runs them.
_HOOKS = ("constants", "start", "around", "check", "along", "describe", "ends")


def applies(prepared, options: Mapping[str, Any]) -> bool:  # noqa: ANN001 - a Prepared
    """Whether the points of ``prepared`` can be solved together (see the module docstring)."""
    from ..programs.compiled import CompiledSystem
    from ..reduce.transform import Transform

    compiled = prepared.compiled
    plain = all(getattr(type(t), hook, None) is getattr(Transform, hook) for t in prepared.transforms
                for hook in _HOOKS)
    return (plain and type(compiled) is CompiledSystem and compiled.n_parameters == 0
            and compiled.n <= BAND_LIMIT and bool(np.all(compiled.bc_sides < 2))
            and not sparse_pays(compiled.jac_pattern)
            and options.get("method", "auto") in ("auto", "collocation"))


class _Points:
    """The standard form at ``K`` points (values of the constants): states ``(n, K, m)``."""

    def __init__(self, compiled, ks: np.ndarray):  # noqa: ANN001
        self.c, self.ks = compiled, ks  # ks (K, n_k)
        self.K, self.n = ks.shape[0], compiled.n
        self.k3 = ks.T[:, :, None]  # (n_k, K, 1): each constant a column over the points
        self.p = np.zeros(0)
        self._rhs, self._jac = compiled._f["rhs"], compiled._f["jac"]
        if compiled.layout.singular:
            pairs = [compiled._matrices(self.p, k) for k in ks]
            self.S = np.stack([s for s, _ in pairs])  # (K, n, n)
            self.Dlim = np.stack([d for _, d in pairs])
        else:
            self.S = None
        self.scale = np.stack([compiled.row_scale(self.p, k) for k in ks], axis=1)  # (n, K, 1)

    def rhs(self, x: np.ndarray, y: np.ndarray) -> np.ndarray:
        f = self._rhs(x, y, self.p, self.k3)
        if self.S is None:
            return f
        at = x == 0
        with np.errstate(all="ignore"):
            term = np.einsum("kij,jkm->ikm", self.S, y) / np.where(at, 1.0, x)
        out = f + np.where(at, 0.0, term)
        if at.any():
            out[:, :, at] = np.einsum("kij,jkm->ikm", self.Dlim, f[:, :, at])
        return out

    def jac(self, x: np.ndarray, y: np.ndarray) -> np.ndarray:
        """``(K, m, n, n)``: points, then nodes, first."""
        J = self._jac(x, y, self.p, self.k3)
        J = np.ascontiguousarray(np.broadcast_to(J, (self.n, self.n) + y.shape[1:]).transpose(2, 3, 0, 1))
        if self.S is None:
            return J
        at = x == 0
        with np.errstate(all="ignore"):
            J = J + np.where(at[None, :, None, None], 0.0, self.S[:, None] / np.where(at, 1.0, x)[None, :, None, None])
        if at.any():
            J[:, at] = np.einsum("kij,kmjl->kmil", self.Dlim, J[:, at])
        return J

    def bc(self, y: np.ndarray) -> np.ndarray:
        return np.stack([self.c.bc(y[:, j, 0], y[:, j, -1], self.p, k) for j, k in enumerate(self.ks)])

    def bc_jac(self, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        pairs = [self.c.bc_jac(y[:, j, 0], y[:, j, -1], self.p, k)[:2] for j, k in enumerate(self.ks)]
        return np.stack([a for a, _ in pairs]), np.stack([b for _, b in pairs])


def _midpoints(y: np.ndarray, f: np.ndarray, h: np.ndarray) -> np.ndarray:
    """:func:`bvpkit.methods.discrete.midpoint_values` with the mesh on the last axis."""
    return 0.5 * (y[..., 1:] + y[..., :-1]) + h / 8 * (f[..., :-1] - f[..., 1:])


class _BandLU:
    """The LU of the block-diagonal matrix of the points' collocation matrices, in one band.

    Each point's bordered block-bidiagonal matrix (separated conditions: those at ``t = 0``
    first, those at ``t = 1`` last, as :func:`bvpkit.methods.discrete.factor_blocks` orders them) has
    the same bandwidth; side by side in LAPACK's band storage they form the band of the
    block-diagonal matrix, factored by one ``dgbtrf`` (partial pivoting never crosses from one
    point's rows to another's: the entries between them are zero).
    """

    def __init__(self, left: np.ndarray, right: np.ndarray, a: np.ndarray, b: np.ndarray, sides: np.ndarray):
        from scipy.linalg.lapack import dgbtrf

        K, intervals, n, _ = left.shape
        m = intervals + 1
        left_rows, right_rows = np.flatnonzero(sides == 0), np.flatnonzero(sides == 1)
        ka, kb = left_rows.size, right_rows.size
        kl, ku = ka + n - 1, max(2 * n - 1 - ka, n - 1)
        ldab = 2 * kl + ku + 1
        size = n * m
        flat = np.zeros(K * size * ldab)
        item = flat.itemsize
        strides = (size * ldab * item, n * ldab * item, item, (ldab - 1) * item)
        top = kl + ku + ka
        for block, offset in ((left, top), (right, n * ldab + top - n)):
            np.ndarray(block.shape, float, flat, offset * item, strides)[...] = block
        first, last = _condition_positions(m, n, ka, kb)
        shift = (np.arange(K) * size * ldab)[:, None]
        flat[(first[None, :] + shift).ravel()] = a[:, left_rows].reshape(K, -1).ravel()
        flat[(last[None, :] + shift).ravel()] = b[:, right_rows].reshape(K, -1).ravel()
        ab = flat.reshape(K * size, ldab).T
        with one_blas_thread(n):
            self.lu, self.piv, info = dgbtrf(ab, kl, ku, overwrite_ab=1)
        self.kl, self.ku, self.K, self.size = kl, ku, K, size
        _, _, order, _ = _maps(m, n, 0, sides.size, tuple(left_rows.tolist()), tuple(right_rows.tolist()), 0)
        self.order = order
        rows = np.empty_like(order)
        rows[order] = np.arange(order.size)
        self.rows = rows
        diagonal = self.lu[kl + ku].reshape(K, size)
        # a singular block (or NaN/inf in it) shows on U's diagonal of that point's columns
        self.singular = ~np.all(np.isfinite(diagonal) & (diagonal != 0), axis=1) if info >= 0 else np.ones(K, bool)

    def solve(self, rhs: np.ndarray, trans: bool = False) -> np.ndarray:
        """``rhs`` ``(K, size)`` or ``(K, size, columns)`` in equation order; the result in unknown order."""
        from scipy.linalg.lapack import dgbtrs

        columns = rhs.shape[2:]
        if not trans:
            band = rhs[:, self.order].reshape((self.K * self.size,) + columns)
            return dgbtrs(self.lu, self.kl, self.ku, band, self.piv)[0].reshape(rhs.shape)
        out = dgbtrs(self.lu, self.kl, self.ku, rhs.reshape((self.K * self.size,) + columns), self.piv, trans=1)[0]
        return out.reshape(rhs.shape)[:, self.rows]


class _Equations:
    """Collocation's equations (:class:`bvpkit.methods.discrete.CollocationEquations`) at every point."""

    def __init__(self, points: _Points, x: np.ndarray):
        self.pts, self.x = points, x
        self.h = np.diff(x)
        self.mid = x[:-1] + 0.5 * self.h
        self.n, self.K, self.m = points.n, points.K, x.size

    def parts(self, y: np.ndarray):  # noqa: ANN201
        pts, h = self.pts, self.h
        f = pts.rhs(self.x, y)
        ym = _midpoints(y, f, h)
        fm = pts.rhs(self.mid, ym)
        col = y[..., 1:] - y[..., :-1] - h / 6 * (f[..., :-1] + f[..., 1:] + 4 * fm)
        return col, pts.bc(y), f, ym, fm

    def vector(self, col: np.ndarray, bc: np.ndarray) -> np.ndarray:
        """Residuals ``(K, size)`` in collocation's equation order (intervals node-major, then conditions)."""
        return np.concatenate([col.transpose(1, 2, 0).reshape(self.K, -1), bc], axis=1)

    def states(self, z: np.ndarray) -> np.ndarray:
        """Unknowns ``(K, size)`` (node-major) as states ``(n, K, m)``."""
        return z.reshape(self.K, self.m, self.n).transpose(2, 0, 1)

    def factor(self, y: np.ndarray, ym: np.ndarray) -> _BandLU:
        h = self.h[None, :, None, None]
        J, Jm = self.pts.jac(self.x, y), self.pts.jac(self.mid, ym)
        left = -(h / 6) * (J[:, :-1] + 2 * Jm + (h / 2) * (Jm @ J[:, :-1]))
        right = -(h / 6) * (J[:, 1:] + 2 * Jm - (h / 2) * (Jm @ J[:, 1:]))
        diagonal = np.arange(self.n)
        left[..., diagonal, diagonal] -= 1.0
        right[..., diagonal, diagonal] += 1.0
        a, b = self.pts.bc_jac(y)
        finite = (np.isfinite(left).all(axis=(1, 2, 3)) & np.isfinite(right).all(axis=(1, 2, 3))
                  & np.isfinite(a).all(axis=(1, 2)) & np.isfinite(b).all(axis=(1, 2)))
        if not finite.all():
            # NaN in one block would spread to the next through the elimination: such a point
            # borrows a finite point's blocks and is marked singular (it is solved alone)
            donor = int(np.argmax(finite)) if finite.any() else None
            if donor is None:
                lu = _BandLU(np.zeros_like(left) - np.eye(self.n), np.zeros_like(right) + np.eye(self.n),
                             np.broadcast_to(np.eye(self.n), a.shape).copy(),
                             np.broadcast_to(np.eye(self.n), b.shape).copy(), self.pts.c.bc_sides)
                lu.singular[:] = True
                return lu
            for q in (left, right, a, b):
                q[~finite] = q[donor]
        lu = _BandLU(left, right, a, b, self.pts.c.bc_sides)
        lu.singular |= ~finite
        return lu

    def lobatto_residuals(self, y: np.ndarray, f: np.ndarray) -> tuple:
        h = self.h
        y0, y1, f0, f1 = y[..., :-1], y[..., 1:], f[..., :-1], f[..., 1:]
        out = []
        for j in range(2):
            xs = self.x[:-1] + _T[j] * h
            ys = _H[0, j] * y0 + _H[1, j] * h * f0 + _H[2, j] * y1 + _H[3, j] * h * f1
            ds = (_DH[0, j] * y0 + _DH[2, j] * y1) / h + _DH[1, j] * f0 + _DH[3, j] * f1
            fs = self.pts.rhs(xs, ys)
            out += [ds - fs, fs]
        return tuple(out)


def _newton(eq: _Equations, y: np.ndarray, tol: float):  # noqa: ANN202
    """Damped Newton at every point (each its own line search and convergence test).

    Returns ``(y, parts, lu, iterations (K,), settled (K,))``."""
    K = eq.K
    tol_r = 2 / 3 * eq.h * 5e-2 * tol
    scale = eq.pts.scale
    parts = eq.parts(y)
    done = np.zeros(K, bool)
    failed = np.zeros(K, bool)
    iterations = np.zeros(K, int)
    lu = None
    with np.errstate(all="ignore"):
        for _ in range(_MAX_ITERATIONS):
            active = ~(done | failed)
            if not active.any():
                break
            lu = eq.factor(y, parts[3])
            failed |= active & lu.singular
            active &= ~lu.singular
            if not active.any():
                break
            res = eq.vector(parts[0], parts[1])
            step = lu.solve(res)
            cost = np.einsum("ks,ks->k", step, step)
            dy = eq.states(step)
            alpha = np.where(active, 1.0, 0.0)
            trials = np.zeros(K, int)
            halvings = np.zeros(K, int)
            searching = active.copy()
            new_y, new_parts, new_cost = y, parts, cost
            while searching.any():
                trial_y = y - alpha[None, :, None] * dy
                trial_parts = eq.parts(trial_y)
                trial_res = eq.vector(trial_parts[0], trial_parts[1])
                finite = np.isfinite(trial_res).all(axis=1)
                trial_step = lu.solve(np.where(finite[:, None], trial_res, 0.0))
                trial_cost = np.where(finite, np.einsum("ks,ks->k", trial_step, trial_step), np.inf)
                outside = searching & ~np.isfinite(trial_cost) & (halvings < _OUT_OF_DOMAIN_HALVINGS)
                accept = searching & ~outside & ((trial_cost < (1 - 2 * alpha * _SIGMA) * cost) | (trials >= _TRIALS)
                                                 | ~np.isfinite(trial_cost))
                if accept.any():
                    keep = accept[None, :, None]
                    new_y = np.where(keep, trial_y, new_y)
                    new_parts = tuple(np.where(accept[:, None] if q.ndim == 2 else keep, tq, q)
                                      for q, tq in zip(new_parts, trial_parts))
                    new_cost = np.where(accept, trial_cost, new_cost)
                retry = searching & ~accept
                alpha = np.where(retry, alpha * _TAU, alpha)
                halvings = np.where(outside, halvings + 1, halvings)
                trials = np.where(retry & ~outside, trials + 1, trials)
                searching = retry
            stuck = active & ~np.isfinite(new_cost)  # no step stays in the equations' domain
            failed |= stuck
            moved = active & ~stuck
            y = np.where(moved[None, :, None], new_y, y)
            parts = tuple(np.where(moved[:, None] if q.ndim == 2 else moved[None, :, None], nq, q)
                          for q, nq in zip(parts, new_parts))
            iterations += moved
            col, bc, _, _, fm = parts
            met = ((np.abs(col) < tol_r * (scale + np.abs(fm))).all(axis=(0, 2))
                   & (np.abs(bc) < tol).all(axis=1))
            small = (alpha == 1.0) & (np.max(np.abs(dy) / (1.0 + np.abs(y)), axis=(0, 2)) < _SETTLED)
            done |= moved & (met | small)
    return y, parts, lu, iterations, done & ~failed


def _rms(eq: _Equations, y: np.ndarray, parts) -> np.ndarray:  # noqa: ANN001
    """:func:`methods.collocation._rms_residuals` at every point: ``(K, m-1)``."""
    col, _, f, _, fm = parts
    r1, f1, r2, f2 = eq.lobatto_residuals(y, f)
    s = eq.pts.scale
    r_mid = np.sum((1.5 * col / eq.h / (s + np.abs(fm))) ** 2, axis=0)
    total = 32 / 45 * r_mid + 49 / 90 * (np.sum((r1 / (s + np.abs(f1))) ** 2, axis=0)
                                         + np.sum((r2 / (s + np.abs(f2))) ** 2, axis=0))
    return np.sqrt(0.5 * total)


def _estimates(eq: _Equations, y: np.ndarray, parts, lu: _BandLU) -> tuple[np.ndarray, np.ndarray]:  # noqa: ANN001
    """Each point's error estimate (deferred correction against its collocation solution,
    compared as :func:`methods.base.compare` does on the halved mesh) and the corrected
    solution on the halved mesh ``(n, K, 2m - 1)``."""
    col, bc, f, ym, _ = parts
    h = eq.h
    r1, _, r2, _ = eq.lobatto_residuals(y, f)
    defect = h * (16 / 45 * 1.5 * col / h + 49 / 180 * (r1 + r2))
    c = -7.0 * (r2 - r1) / (2.0 * _D)
    jm = eq.pts.jac(eq.mid, ym)  # (K, m-1, n, n)
    defect = defect + np.einsum("kmij,jkm->ikm", jm, h * h * c / 120.0)
    e = eq.states(lu.solve(-eq.vector(defect, bc)))
    nodes = y + e
    with np.errstate(all="ignore"):
        fn = eq.pts.rhs(eq.x, nodes)
    outside = ~np.isfinite(fn)
    if outside.any():
        fn = np.where(outside, f, fn)
    fine = np.empty(y.shape[:2] + (2 * eq.m - 1,))
    fine[..., ::2], fine[..., 1::2] = nodes, _midpoints(nodes, fn, h) - h * c / 64.0
    mine = np.empty_like(fine)
    mine[..., ::2], mine[..., 1::2] = y, _midpoints(y, f, h)
    return np.max(np.abs(mine - fine) / (1.0 + np.abs(fine)), axis=(0, 2)), fine


def _stability(eq: _Equations, lu: _BandLU) -> np.ndarray:
    """Each point's stability constant ``||(D M)^-1||_inf`` (rows in derivative units), as
    :func:`bvpkit.methods.diagnostics.stability_constant` computes it from its block of the LU."""
    size, K = lu.size, lu.K
    inverse = 1.0 / np.concatenate([np.repeat(1.0 / eq.h, eq.n), np.ones(size - (eq.m - 1) * eq.n)])
    if size <= _EXACT_INVERSE:
        identity = np.broadcast_to(np.diag(inverse), (K, size, size))
        return np.max(np.sum(np.abs(lu.solve(np.ascontiguousarray(identity))), axis=2), axis=1)
    best = np.zeros(K)
    alternating = (1.0 + np.arange(size) / max(size - 1, 1)) * np.where(np.arange(size) % 2, -1.0, 1.0)
    for start in (np.ones(size), alternating):
        # Hager's iteration (diagnostics._hager) on every block at once, each block its own steps
        x = np.broadcast_to(start / np.sum(np.abs(start)), (K, size)).copy()
        estimate = np.zeros(K)
        going = np.ones(K, bool)
        for _ in range(5):
            yv = inverse * lu.solve(x, trans=True)
            estimate = np.where(going, np.maximum(estimate, np.sum(np.abs(yv), axis=1)), estimate)
            z = lu.solve(inverse * np.where(yv >= 0, 1.0, -1.0))
            j = np.argmax(np.abs(z), axis=1)
            going &= np.abs(z[np.arange(K), j]) > np.einsum("ks,ks->k", z, x)
            if not going.any():
                break
            x = np.where(going[:, None], 0.0, x)
            x[np.arange(K)[going], j[going]] = 1.0
        best = np.maximum(best, estimate)
    return np.where(np.isfinite(best), best, np.inf)


def _carried(x: np.ndarray, y: np.ndarray, f: np.ndarray, new: np.ndarray) -> np.ndarray:
    """The C1 cubics of ``(x, y, f)`` (states ``(n, K, m)``) at the nodes ``new``."""
    h = np.diff(x)
    i = np.clip(np.searchsorted(x, new, side="right") - 1, 0, x.size - 2)
    t = (new - x[i]) / h[i]
    h00, h10, h01, h11 = 2 * t**3 - 3 * t**2 + 1, t**3 - 2 * t**2 + t, -2 * t**3 + 3 * t**2, t**3 - t**2
    return h00 * y[..., i] + h10 * h[i] * f[..., i] + h01 * y[..., i + 1] + h11 * h[i] * f[..., i + 1]


#: Rounds of joint refinement: the mesh of the points still open is refined where any of them
#: asks, by the factor its residual predicts (as collocation does alone).
_ROUNDS = 4


def solve_points(prepared, points: Sequence[Mapping[str, float]], start, options: Mapping[str, Any]) -> list:  # noqa: ANN001
    """Solutions at ``points`` (values of constants), all started from the solution ``start``
    on its mesh; None where the batch does not settle a point (the caller solves it alone).

    Each round runs Newton's method at the points still open on a shared mesh; a point that
    converges with its residual within the tolerance (and, verified, its estimate) is
    settled on that mesh; the points that converged but ask for more nodes go on to the next
    round, on the mesh refined where any of them asked (their solutions carried over); a
    point whose Newton iteration fails is left to the caller. A value refused by the problem
    gives None there too (the caller says why)."""
    from ..language.options import SolveOptions
    from ..methods.collocation import _pieces, _split
    from ..solver.settle import Run, settle

    began = time.perf_counter()
    out: list = [None] * len(points)
    chosen = SolveOptions.make(prepared.settings, options)  # as a solve of one point reads them
    tol, verify, max_nodes = chosen.tol, chosen.verify, chosen.max_nodes
    heres, index = [], []
    for i, point in enumerate(points):
        try:
            heres.append(prepared.with_constants(**point))
            index.append(i)
        except Exception:  # noqa: BLE001 - the caller says why, solving it alone
            continue
    view = getattr(start, "interpolant", None)
    if not heres or view is None or view.y.shape[0] != prepared.compiled.n or view.t.size > max_nodes:
        return out
    compiled = prepared.compiled
    ks_all = np.stack([h.k() for h in heres])
    x = np.asarray(view.t, float)
    open_ = np.arange(len(heres))  # positions in heres still to settle
    y = np.repeat(np.asarray(view.y, float)[:, None, :], open_.size, axis=1)
    settled_rows: list[tuple[int, Outcome]] = []
    total = np.zeros(len(heres), int)  # Newton iterations of each point over the rounds
    with np.errstate(all="ignore"):
        for _ in range(_ROUNDS):
            eq = _Equations(_Points(compiled, ks_all[open_]), x)
            y, parts, lu, iterations, converged = _newton(eq, y, tol)
            total[open_] += iterations
            if lu is None or not converged.any():
                break
            finite = np.isfinite(y).all(axis=(0, 2))
            rms = _rms(eq, y, parts)
            met = converged & finite & (rms <= tol).all(axis=1) & (np.abs(parts[1]) <= tol).all(axis=1)
            estimates = condition = fine = None
            if verify and met.any():
                estimates, fine = _estimates(eq, y, parts, lu)
                condition = _stability(eq, lu)
                met &= np.isfinite(estimates) & (estimates <= tol)
            for j in np.flatnonzero(met):
                count = int(total[open_[j]])
                outcome = Outcome(Status.SOLVED, f"converged in {count} Newton iteration{'s' if count != 1 else ''} "
                                  f"on {x.size} nodes", x, y[:, j, :].copy(), np.zeros(0), iterations=count,
                                  method="collocation")
                if verify:
                    outcome.error_estimate = float(estimates[j])
                    outcome.parameter_errors = np.zeros(0)
                    outcome.condition = float(condition[j])
                    fx = np.empty(2 * x.size - 1)
                    fx[::2], fx[1::2] = x, eq.mid
                    outcome.reference = Outcome(Status.SOLVED, "deferred correction", fx, fine[:, j, :].copy(),
                                                np.zeros(0))
                settled_rows.append((int(open_[j]), outcome))
            # converged but the residual asks for more nodes: refine jointly, carry on
            finer = converged & finite & ~met & np.isfinite(rms).all(axis=1) & (rms > tol).any(axis=1)
            if not finer.any():
                break
            pieces = _pieces(np.max(rms[finer], axis=0), tol)
            if x.size + int(np.sum(pieces - 1)) > max_nodes:
                break
            new_x = _split(x, pieces)
            y = _carried(x, y[:, finer], parts[2][:, finer], new_x)
            x, open_ = new_x, open_[finer]
    seconds = (time.perf_counter() - began) / max(len(heres), 1)
    reason = "solved with the other points of its chunk in one Newton system, from a neighbour's solution"
    for position, outcome in settled_rows:
        started = time.perf_counter()
        attempt = Attempt(method="collocation", reason=reason, status=Status.SOLVED.word, message=outcome.message,
                          iterations=outcome.iterations, nodes=int(outcome.x.size), seconds=seconds,
                          domain=(math.nan, math.nan), error_estimate=outcome.error_estimate)
        run = Run(outcome, ks_all[position], [attempt], f"chose collocation: {reason}", tol,
                  independent=prepared.layout.independent)
        out[index[position]] = settle(heres[position], run, seconds + time.perf_counter() - started)
    return out
