"""The collocation equations of SciPy's ``solve_bvp`` on a fixed mesh, with an exact sparse Jacobian.

3-stage Lobatto IIIA (Kierzenka and Shampine 2001): on each interval
``y_i+1 - y_i - h/6 (f_i + 4 f_mid + f_i+1) = 0`` with
``y_mid = (y_i + y_i+1)/2 - h/8 (f_i+1 - f_i)``, then the boundary conditions. The Jacobian
is assembled from codegen's exact ``df/dy`` and ``df/dp`` (the block formulas are those of
SciPy's own ``construct_global_jac``, with batched matrix products). Used by bvpkit's
collocation solver (with its error estimate) and pseudo-arclength continuation.

Linear algebra: when every boundary condition involves one end only and there are no
unknown parameters, the rows are ordered left conditions, interval rows, right conditions,
which makes the Newton matrix banded (``n - 1 + k_left`` sub- and ``2n - 1 - k_left``
super-diagonals); it is factored with LAPACK's banded LU (``dgbtrf``), several times faster
than a general sparse LU of the same matrix. Otherwise a sparse LU (SuperLU) is used.
"""

from __future__ import annotations

import functools
import math

import numpy as np
import scipy.sparse as sparse
from scipy.sparse.linalg import splu


_MAX_NEWTON = 12
# Hermite basis (values and derivatives) at the two interior 5-point Lobatto nodes t = 1/2 -+ sqrt(3/7)/2
_D = 0.5 * np.sqrt(3 / 7)  # = sqrt(21) / 14
_T = np.array([0.5 - _D, 0.5 + _D])
_H = np.array([2 * _T**3 - 3 * _T**2 + 1, _T**3 - 2 * _T**2 + _T, -2 * _T**3 + 3 * _T**2, _T**3 - _T**2])
_DH = np.array([6 * _T**2 - 6 * _T, 3 * _T**2 - 4 * _T + 1, -6 * _T**2 + 6 * _T, 3 * _T**2 - 2 * _T])


def node_weights(x: np.ndarray) -> np.ndarray:
    """Trapezoidal weights of the mesh nodes, divided by the length: sums over the nodes
    approximate mean values, so norms of states do not grow with the mesh."""
    h = np.diff(x)
    w = np.zeros(x.size)
    w[:-1] += 0.5 * h
    w[1:] += 0.5 * h
    return w / ((x[-1] - x[0]) or 1.0)


def midpoint_values(y, f, h):  # noqa: ANN001, ANN201
    """The C1 cubic with values ``y`` and slopes ``f`` at the nodes, at the interval
    midpoints: ``(y_i + y_i+1)/2 + h (f_i - f_i+1)/8`` (also collocation's ``y_mid``)."""
    return 0.5 * (y[:, 1:] + y[:, :-1]) + h / 8 * (f[:, :-1] - f[:, 1:])


@functools.lru_cache(maxsize=64)
def _block_pattern(k: int, n: int, n_p: int, n_bc: int) -> tuple[np.ndarray, np.ndarray]:
    """Rows and columns of the entries of :func:`block_matrix`, in the order of its values."""
    i = np.arange(k - 1)[:, None, None]
    r = np.arange(n)
    rows = (i * n + r[None, :, None]).repeat(n, axis=2).ravel()
    cols = (i * n + r[None, None, :]).repeat(n, axis=1).ravel()
    R, C = [rows, rows], [cols, cols + n]
    if n_p:
        prow = (i * n + r[None, :, None]).repeat(n_p, axis=2)
        R.append(prow.ravel())
        C.append(np.broadcast_to(n * k + np.arange(n_p)[None, None, :], prow.shape).ravel())
    base = (k - 1) * n
    for offset, width in ((0, n), ((k - 1) * n, n), (n * k, n_p)):
        if width:
            rr, cc = np.meshgrid(base + np.arange(n_bc), offset + np.arange(width), indexing="ij")
            R.append(rr.ravel())
            C.append(cc.ravel())
    return np.concatenate(R), np.concatenate(C)


def block_matrix(left: np.ndarray, right: np.ndarray, parameters: np.ndarray | None, a: np.ndarray,
                 b: np.ndarray, dp: np.ndarray | None, scale: np.ndarray | None = None) -> sparse.csc_matrix:
    """The one assembler of the bordered block-bidiagonal Newton matrices of the methods.

    Unknowns are ``k`` blocks of ``n`` (states at mesh nodes, or at the starts of shooting
    segments), then ``n_p`` parameters. Row block ``j`` (of ``k - 1``) links blocks ``j`` and
    ``j + 1``: ``left[j]``, ``right[j]`` (each ``(k-1, n, n)``) and ``parameters[j]``
    (``(k-1, n, n_p)``); then the boundary rows: ``a`` on the first block, ``b`` on the last,
    ``dp`` on the parameters. ``scale`` multiplies the rows. Collocation (its sparse path),
    multiple shooting and the stability constant's trapezoidal matrix all assemble here.
    """
    k, n = left.shape[0] + 1, left.shape[1]
    n_p = 0 if parameters is None else parameters.shape[2]
    a, b = np.asarray(a, float), np.asarray(b, float)
    values = [left.ravel(), right.ravel()]
    if n_p:
        values.append(parameters.ravel())
    values += [a.ravel(), b.ravel()]
    if n_p:
        values.append(np.asarray(dp, float).ravel())
    rows, cols = _block_pattern(k, n, n_p, a.shape[0])
    v = np.concatenate(values)
    if scale is not None:
        v = v * scale[rows]
    return sparse.csc_matrix((v, (rows, cols)), shape=((k - 1) * n + a.shape[0], n * k + n_p))


class SingularMatrix(RuntimeError):
    """The Newton matrix is exactly singular (or holds NaN or inf)."""


class Factored:
    """An LU of the Newton matrix with ``solve(b, trans="N" | "T")``, banded or sparse.

    ``rows`` is the row order of the banded form (None for the sparse LU).
    """

    def __init__(self, size: int, lu=None, band=None, rows=None):  # noqa: ANN001
        self.size, self._lu, self._band, self._rows = size, lu, band, rows

    def solve(self, b: np.ndarray, trans: str = "N") -> np.ndarray:
        if self._lu is not None:
            return self._lu.solve(b, trans=trans)
        from scipy.linalg.lapack import dgbtrs

        lu, piv, kl, ku = self._band
        if trans == "N":
            x, info = dgbtrs(lu, kl, ku, b[self._rows], piv)
            return x
        u, info = dgbtrs(lu, kl, ku, b, piv, trans=1)
        out = np.empty_like(u)
        out[self._rows] = u
        return out


class CollocationEquations:
    """The collocation equations of ``solve_bvp`` on a fixed mesh, the parameter an unknown.

    Unknowns ``z = (y.ravel() in node-major order, p)``; equations: the Lobatto IIIA
    residuals ``y_i+1 - y_i - h/6 (f_i + 4 f_mid + f_i+1)`` with
    ``y_mid = (y_i + y_i+1)/2 - h/8 (f_i+1 - f_i)``, then the boundary conditions.
    """

    def __init__(self, compiled, x: np.ndarray, k: np.ndarray):  # noqa: ANN001
        self.c, self.x, self.k = compiled, x, k
        self.n, self.m = compiled.n, x.size
        self.n_p = compiled.n_parameters
        self.h = np.diff(x)
        self.mid = x[:-1] + 0.5 * self.h
        self._weights = None
        sides = compiled.bc_sides
        # per row, the length of its region in the user's variable (residuals are measured there);
        # set by parts() for the parameters it is called with (a free end moves it)
        self.scale = np.ones((self.n, 1))
        self.n_bc = sides.size
        self.banded = bool(self.n_p == 0 and (sides < 2).all())
        self.sides = sides

    @property
    def weights(self) -> np.ndarray:
        if self._weights is None:
            self._weights = np.concatenate([np.repeat(node_weights(self.x), self.n), np.ones(self.n_p)])
        return self._weights

    def row_scale(self) -> np.ndarray:
        """Row factors putting each interval's rows in derivative units (1/h); conditions as they are."""
        return np.concatenate([np.repeat(1.0 / self.h, self.n), np.ones(self.n_bc)])

    def split(self, z: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        return z[: self.n * self.m].reshape(self.m, self.n).T, z[self.n * self.m:]

    def join(self, y: np.ndarray, p: np.ndarray) -> np.ndarray:
        return np.concatenate([y.T.ravel(), p])

    def parts(self, y: np.ndarray, p: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """Interval residuals ``(n, m-1)``, boundary residuals, and ``f``, ``y_mid``, ``f_mid``."""
        c, k, h = self.c, self.k, self.h
        self.scale = c.row_scale(p, k)
        f = c.rhs(self.x, y, p, k)
        ym = midpoint_values(y, f, h)
        fm = c.rhs(self.mid, ym, p, k)
        col = y[:, 1:] - y[:, :-1] - h / 6 * (f[:, :-1] + f[:, 1:] + 4 * fm)
        return col, c.bc(y[:, 0], y[:, -1], p, k), f, ym, fm

    def residual(self, z: np.ndarray) -> np.ndarray:
        y, p = self.split(z)
        col, bc, _, _, _ = self.parts(y, p)
        return np.concatenate([col.T.ravel(), bc])

    def _blocks(self, y: np.ndarray, p: np.ndarray, ym: np.ndarray | None = None):  # noqa: ANN202
        """``d col_i / d y_i``, ``d col_i / d y_i+1`` (each ``(m-1, n, n)``), the parameter
        block ``(m-1, n, n_p)`` or None, and the condition Jacobians."""
        c, k, h, n = self.c, self.k, self.h, self.n
        if ym is None:
            f = c.rhs(self.x, y, p, k)
            ym = midpoint_values(y, f, h)
        # (m, n, n) and (m-1, n, n), contiguous: batched products run twice as fast on them
        J = np.ascontiguousarray(np.moveaxis(c.jac(self.x, y, p, k), -1, 0))
        Jm = np.ascontiguousarray(np.moveaxis(c.jac(self.mid, ym, p, k), -1, 0))
        hh = h[:, None, None]
        # left = -I - h/6 (J_i + 4 Jm (I/2 + h/8 J_i)), right = I - h/6 (J_i+1 + 4 Jm (I/2 - h/8 J_i+1))
        JmJl = Jm @ J[:-1]
        JmJr = Jm @ J[1:]
        left = -(hh / 6) * (J[:-1] + 2 * Jm + (hh / 2) * JmJl)
        right = -(hh / 6) * (J[1:] + 2 * Jm - (hh / 2) * JmJr)
        diagonal = np.arange(n)
        left[:, diagonal, diagonal] -= 1.0
        right[:, diagonal, diagonal] += 1.0
        block = None
        if self.n_p:
            P = np.moveaxis(c.pjac(self.x, y, p, k), -1, 0)  # (m, n, n_p)
            Pm = np.moveaxis(c.pjac(self.mid, ym, p, k), -1, 0)
            dym = -hh / 8 * (P[1:] - P[:-1])
            block = -hh / 6 * (P[:-1] + P[1:] + 4 * (Pm + Jm @ dym))
        return left, right, block, c.bc_jac(y[:, 0], y[:, -1], p, k)

    def jacobian(self, z: np.ndarray, scale: np.ndarray | None = None) -> sparse.csc_matrix:
        y, p = self.split(z)
        return self._sparse(self._blocks(y, p), scale)

    def _sparse(self, blocks, scale: np.ndarray | None) -> sparse.csc_matrix:  # noqa: ANN001
        left, right, pblock, (a, b, dp) = blocks
        return block_matrix(left, right, pblock, a, b, dp if self.n_p else None, scale)

    def _band_layout(self):  # noqa: ANN202
        """Row order and band widths for separated conditions (rows: left conditions, interval
        rows, right conditions), and the banded-storage offsets of the interval blocks."""
        if getattr(self, "_layout", None) is None:
            n, m = self.n, self.m
            left_rows = np.flatnonzero(self.sides == 0)
            right_rows = np.flatnonzero(self.sides == 1)
            ka = left_rows.size
            base = (m - 1) * n
            order = np.concatenate([base + left_rows, np.arange(base), base + right_rows])
            kl = ka + n - 1  # interval rows: row ka + i n + j, columns i n .. (i + 2) n - 1
            ku = max(2 * n - 1 - ka, n - 1)
            ldab = 2 * kl + ku + 1
            # flat positions (column-major banded storage) of the condition blocks' entries
            size = n * m
            positions = []
            for rows, first_col in ((np.arange(ka), 0), (np.arange(size - right_rows.size, size), size - n)):
                r, c = np.meshgrid(rows, first_col + np.arange(n), indexing="ij")
                positions.append((c * ldab + kl + ku + r - c).ravel())
            self._layout = (order, kl, ku, ldab, left_rows, right_rows, positions)
        return self._layout

    def _banded(self, blocks, scale: np.ndarray | None) -> tuple[np.ndarray, int, int, np.ndarray]:  # noqa: ANN001
        """LAPACK banded storage ``ab[kl + ku + r - c, c] = M[r, c]`` of the Newton matrix.

        The interval blocks are written through strided views of the storage (entry ``(i, r, c)`` of the
        left block goes to ``ab[kl + ku + ka + r - c, i n + c]``), no index arrays; ``ab`` is
        column-major, as LAPACK takes it.
        """
        order, kl, ku, ldab, left_rows, right_rows, positions = self._band_layout()
        left, right, _, (a, b, _) = blocks
        n, m = self.n, self.m
        size = n * m
        ka = left_rows.size
        if scale is not None:
            row = scale[: (m - 1) * n].reshape(m - 1, n, 1)
            left, right = left * row, right * row
            a, b = a * scale[(m - 1) * n:, None], b * scale[(m - 1) * n:, None]
        flat = np.zeros(size * ldab)  # column-major (LAPACK's order): entry (d, c) at c * ldab + d
        item = flat.itemsize
        strides = (n * ldab * item, item, (ldab - 1) * item)
        top = kl + ku + ka
        for block, offset in ((left, top), (right, n * ldab + top - n)):
            np.ndarray(block.shape, float, flat, offset * item, strides)[...] = block
        flat[positions[0]] = np.asarray(a)[left_rows].ravel()
        flat[positions[1]] = np.asarray(b)[right_rows].ravel()
        return flat.reshape(size, ldab).T, kl, ku, order

    def factor(self, y: np.ndarray, p: np.ndarray, ym: np.ndarray | None = None,
               scale: np.ndarray | None = None) -> Factored:
        """LU of the Newton matrix at ``(y, p)`` (rows multiplied by ``scale``, if given).

        Raises :class:`SingularMatrix` when it is singular or not finite.
        """
        blocks = self._blocks(y, p, ym)
        size = self.n * self.m + self.n_p
        if not self.banded:
            matrix = self._sparse(blocks, scale)
            if not np.isfinite(matrix.data).all():
                raise SingularMatrix("the collocation matrix holds NaN or inf")
            try:
                return Factored(size, lu=splu(matrix))
            except RuntimeError as err:
                raise SingularMatrix(str(err)) from None
        from scipy.linalg.lapack import dgbtrf

        ab, kl, ku, order = self._banded(blocks, scale)
        lu, piv, info = dgbtrf(ab, kl, ku, overwrite_ab=1)
        if info > 0:
            raise SingularMatrix("the collocation matrix is singular")
        if not np.isfinite(lu[kl + ku]).all():  # NaN or inf anywhere in the matrix reach U's diagonal
            raise SingularMatrix("the collocation matrix holds NaN or inf")
        return Factored(size, band=(lu, piv, kl, ku), rows=order)

    def lobatto_residuals(self, y: np.ndarray, p: np.ndarray, parts) -> tuple:  # noqa: ANN001
        """Residual ``S' - f(x, S)`` of the cubic ``S`` at the two interior 5-point Lobatto nodes
        of each interval, and ``f`` there: each ``(n, m-1)``."""
        _, _, f, _, _ = parts
        h = self.h
        y0, y1, f0, f1 = y[:, :-1], y[:, 1:], f[:, :-1], f[:, 1:]
        out = []
        for j in range(2):
            xs = self.x[:-1] + _T[j] * h
            ys = _H[0, j] * y0 + _H[1, j] * h * f0 + _H[2, j] * y1 + _H[3, j] * h * f1
            ds = (_DH[0, j] * y0 + _DH[2, j] * y1) / h + _DH[1, j] * f0 + _DH[3, j] * f1
            fs = self.c.rhs(xs, ys, p, self.k)
            out += [ds - fs, fs]
        return tuple(out)

    def defect_correction(self, y: np.ndarray, p: np.ndarray, parts, lu):  # noqa: ANN001, ANN202
        """The error of the collocation solution, from its defect (deferred correction).

        The error ``e = y_exact - S`` of the cubic ``S`` satisfies the linearised equations
        ``e' - J e = -(S' - f(x, S))`` with the conditions' residual on the right. Over each
        interval the defect is the integral of ``S' - f(S)``, taken with 5-point Lobatto
        quadrature (two degrees above the method's own Simpson rule, under which it vanishes);
        one solve with the Newton matrix already factored gives ``e`` at the nodes and in the
        parameters. Returns the corrected solution on the halved mesh ``(x, y, p)``: better
        than the collocation solution by an order of ``h``.
        """
        col, bc, _, ym, _ = parts
        h = self.h
        r1, _, r2, _ = self.lobatto_residuals(y, p, parts)
        # the integral of the residual over each interval
        defect = h * (16 / 45 * 1.5 * col / h + 49 / 180 * (r1 + r2))
        # ... and of J times the error it builds up inside the interval, R(x) = integral of r from
        # x_i: with r ~ c t (t - 1/2)(t - 1) (zero at both ends and the middle), the integral of
        # R over the interval is h^2 c / 120, and c = -7 (r2 - r1) / (2 d) with d = sqrt(21)/14
        c = -7.0 * (r2 - r1) / (2.0 * _D)
        jm = self.c.jac(self.mid, ym, p, self.k)
        defect = defect + np.einsum("ijm,jm->im", jm, h * h * c / 120.0)
        e = lu.solve(-np.concatenate([defect.T.ravel(), bc]))
        ey, ep = self.split(e)
        y_nodes, p_new = y + ey, p + ep
        # on the halved mesh: the corrected cubic at the midpoints, plus the error built up
        # inside the interval, -R(mid) = -h c / 64
        f = self.c.rhs(self.x, y_nodes, p_new, self.k)
        outside = ~np.isfinite(f)
        if outside.any():  # a correction of round-off size left the domain (u**1.5 at u = -1e-16)
            f[outside] = parts[2][outside]
        middle = midpoint_values(y_nodes, f, h) - h * c / 64.0
        fine = np.empty((y.shape[0], 2 * self.m - 1))
        fine[:, ::2], fine[:, 1::2] = y_nodes, middle
        x = np.empty(2 * self.m - 1)
        x[::2], x[1::2] = self.x, self.mid
        return x, fine, p_new

    def tangent(self, z: np.ndarray, previous: np.ndarray) -> np.ndarray:
        """Unit tangent (weighted norm) of the solution curve at ``z``, oriented like ``previous``."""
        matrix = sparse.vstack([self.jacobian(z), sparse.csr_matrix(previous * self.weights)]).tocsc()
        rhs = np.zeros(matrix.shape[0])
        rhs[-1] = 1.0
        t = splu(matrix).solve(rhs)
        t /= math.sqrt(float(np.sum(self.weights * t * t)))
        return t if float(np.sum(self.weights * t * previous)) >= 0 else -t

    def correct(self, predicted: np.ndarray, tangent: np.ndarray, tol: float) -> tuple[np.ndarray | None, int]:
        """Newton on ``G(z) = 0``, ``<t, z - z_pred> = 0``; None when it does not converge."""
        z = predicted.copy()
        border = sparse.csr_matrix(tangent * self.weights)
        for it in range(1, _MAX_NEWTON + 1):
            g = self.residual(z)
            r = np.concatenate([g, [float(np.sum(self.weights * tangent * (z - predicted)))]])
            if not np.isfinite(r).all():
                return None, it
            try:
                step = splu(sparse.vstack([self.jacobian(z), border]).tocsc()).solve(-r)
            except RuntimeError:
                return None, it
            z = z + step
            if not np.isfinite(z).all():
                return None, it
            if np.max(np.abs(step) / (1.0 + np.abs(z))) <= 0.01 * tol:
                return z, it
        return None, _MAX_NEWTON


