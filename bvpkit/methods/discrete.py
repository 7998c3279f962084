"""The collocation equations of SciPy's ``solve_bvp`` on a fixed mesh, with an exact sparse Jacobian.

3-stage Lobatto IIIA (Kierzenka and Shampine 2001): on each interval
``y_i+1 - y_i - h/6 (f_i + 4 f_mid + f_i+1) = 0`` with
``y_mid = (y_i + y_i+1)/2 - h/8 (f_i+1 - f_i)``, then the boundary conditions. The Jacobian
is assembled from codegen's exact ``df/dy`` and ``df/dp`` (the block formulas are those of
SciPy's own ``construct_global_jac``, with batched matrix products). Used by bvpkit's
collocation solver (with its error estimate) and pseudo-arclength continuation.

Linear algebra (:func:`factor_blocks`, for collocation and multiple shooting): the Newton
matrix is embedded in a banded one with every condition separated (parameters and the
left-end states that right-end conditions read carried along the mesh as constant copies),
its rows ordered left conditions, interval rows, right conditions, and factored with
LAPACK's banded LU (``dgbtrf``) in one call; large systems with sparse Jacobians go to a
sparse LU (SuperLU) of the matrix without its zero entries, the crossover measured in
``benchmarks/scale.py``.
"""

from __future__ import annotations

import contextlib
import functools

import numpy as np
import scipy.sparse as sparse
from scipy.sparse.linalg import splu

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


@functools.lru_cache(maxsize=64)
def _csc_layout(k: int, n: int, n_p: int, n_bc: int) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """The compressed-column form of :func:`_block_pattern`: the order that takes the values
    into CSC order, the row indices and column pointers, and the rows in value order. From
    two blocks on, the pattern has no repeated entry, so a matrix is its values put in that order: no COO
    conversion (sorting and summing) per matrix, which cost more than the block products."""
    rows, cols = _block_pattern(k, n, n_p, n_bc)
    order = np.lexsort((rows, cols))
    counts = np.bincount(cols, minlength=n * k + n_p)
    indptr = np.concatenate([[0], np.cumsum(counts)])
    for array in (order, rows):
        array.setflags(write=False)
    indices = rows[order]
    indices.setflags(write=False)
    indptr.setflags(write=False)
    return order, indices, indptr, rows


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
    shape = ((k - 1) * n + a.shape[0], n * k + n_p)
    if k == 1:  # one block: the two boundary blocks fall on the same entries, which add up
        rows, cols = _block_pattern(k, n, n_p, a.shape[0])
        v = np.concatenate(values)
        return sparse.csc_matrix((v if scale is None else v * scale[rows], (rows, cols)), shape=shape)
    order, indices, indptr, rows = _csc_layout(k, n, n_p, a.shape[0])
    v = np.concatenate(values)
    if scale is not None:
        v = v * scale[rows]
    return sparse.csc_matrix((v[order], indices.copy(), indptr.copy()), shape=shape)


class SingularMatrix(RuntimeError):
    """The Newton matrix is exactly singular (or holds NaN or inf)."""


#: Entries beyond this mark a diverging iterate: products of two of them overflow inside a
#: sparse LU, and SuperLU then fails after its BLAS has printed complaints to standard output
#: (seen in a trace whose corrector diverged to entries of 1e162), which would spoil --json.
HUGE_ENTRY = 1e100


def sparse_lu(matrix, what: str = "the Newton matrix", **options):  # noqa: ANN001, ANN201
    """SuperLU of ``matrix`` (CSC); :class:`SingularMatrix` when it is exactly singular, holds
    NaN or inf, or entries beyond :data:`HUGE_ENTRY`, checked before SuperLU sees it."""
    data = matrix.data
    if not np.isfinite(data).all():
        raise SingularMatrix(f"{what} holds NaN or inf")
    if data.size and float(np.max(np.abs(data))) > HUGE_ENTRY:
        raise SingularMatrix(f"{what} holds entries beyond {HUGE_ENTRY:.0e} (a diverging iterate)")
    try:
        return splu(matrix, **options)
    except RuntimeError as err:
        raise SingularMatrix(str(err)) from None


# States up to which the banded LU is used whatever the blocks hold; above, a sparse LU when the
# blocks are sparse and their coupling is local (a small bandwidth once reordered), so that
# SuperLU's fill stays small. Measured (benchmarks/scale.py, "crossover" and "large"): on the
# reacting chain the banded LU wins at 50 states (27 against 47 ms) and the sparse one from
# 100 (175 against 300 ms; 330 against 950 at 200; 0.9 against 6.1 s at 400); on blocks with
# scattered couplings SuperLU fills them in and the banded LU stays 2-4x ahead up to 150.
BAND_LIMIT = 64
SPARSE_DENSITY = 0.25  # share of non-zero entries of the interval blocks above which sparse cannot pay
SPARSE_BANDWIDTH = 0.25  # bandwidth of the blocks (reordered), as a share of the states, above which neither


class Factored:
    """An LU of a bordered block-bidiagonal Newton matrix with ``solve(b, trans="N" | "T")``.

    Banded: the matrix ``M`` is embedded in a larger banded one ``M+`` (see
    :func:`factor_blocks`): ``row_map[r]`` is the band row of row ``r`` of ``M``,
    ``unknown_map[j]`` the band column of unknown ``j``. ``M z = b`` is ``M+ z+ = b+`` with
    ``b+`` zero on the added rows; ``M^T u = b`` is ``M+^T v = d`` with ``d`` holding ``b``
    on the mapped unknowns, ``u = v[row_map]`` (the added rows only copy unknowns, so their
    columns sum back to those of ``M``). Sparse: SciPy's SuperLU.
    """

    def __init__(self, size: int, lu=None, band=None, maps=None, dense=None):  # noqa: ANN001
        self.size, self._lu, self._band, self._dense = size, lu, band, dense
        self._maps = maps

    @property
    def banded(self) -> bool:
        return self._band is not None

    def solve(self, b: np.ndarray, trans: str = "N") -> np.ndarray:
        if self._lu is not None:
            return self._lu.solve(b, trans=trans)
        if self._dense is not None:
            from scipy.linalg.lapack import dgetrs

            lu, piv = self._dense
            return dgetrs(lu, piv, b, trans=0 if trans == "N" else 1)[0]
        from scipy.linalg.lapack import dgbtrs

        lu, piv, kl, ku = self._band
        rows, unknowns, order, plain = self._maps
        if plain:  # rows only reordered, unknowns as they are
            if trans == "N":
                return dgbtrs(lu, kl, ku, b[order], piv)[0]
            return dgbtrs(lu, kl, ku, b, piv, trans=1)[0][rows]
        full = np.zeros((lu.shape[1],) + b.shape[1:])
        if trans == "N":
            full[rows] = b
            x, info = dgbtrs(lu, kl, ku, full, piv)
            return x[unknowns]
        full[unknowns] = b
        u, info = dgbtrs(lu, kl, ku, full, piv, trans=1)
        return u[rows]


@functools.lru_cache(maxsize=64)
def _maps(k: int, n: int, n_p: int, n_bc: int, left_rows: tuple, right_rows: tuple, q: int):  # noqa: ANN202
    """Row and unknown maps of the banded embedding (see :func:`_augmented`); the band order of
    the rows (``order[band row] = row``, -1 for an added row); whether both maps are trivial."""
    N = n + q + n_p
    ka = len(left_rows) + q
    row_map = np.empty((k - 1) * n + n_bc, int)
    row_map[: (k - 1) * n] = (ka + np.arange(k - 1)[:, None] * N + np.arange(n)[None, :]).ravel()
    row_map[(k - 1) * n + np.asarray(left_rows, int)] = np.arange(len(left_rows))
    row_map[(k - 1) * n + np.asarray(right_rows, int)] = ka + (k - 1) * N + np.arange(len(right_rows))
    unknown_map = np.concatenate([(np.arange(k)[:, None] * N + np.arange(n)[None, :]).ravel(),
                                  n + q + np.arange(n_p)])
    order = np.full(N * k, -1)
    order[row_map] = np.arange(row_map.size)
    plain = q == 0 and n_p == 0
    for array in (row_map, unknown_map, order):
        array.setflags(write=False)
    return row_map, unknown_map, order, plain


def _augmented(left, right, parameters, a, b, dp):  # noqa: ANN001, ANN202
    """The blocks of the banded embedding of a bordered block-bidiagonal matrix.

    Every condition becomes separated (Ascher and Russell 1981, the reformulation into
    standard form, done here on the linear system): the parameters ride along each node as
    constant unknowns (``p_i+1 - p_i = 0``), and the states at ``t = 0`` that a condition at
    ``t = 1`` also reads (multipoint continuity, periodic conditions) are carried to the
    right end as copies ``w`` (``w_0 = y_0[c]``, ``w_i+1 = w_i``). Per node the unknowns are
    ``(y, w, p)``, ``N = n + q + n_p`` of them; conditions touching ``y(1)`` go last, the
    others (and the copy starts) first. Returns the interval blocks ``(m-1, N, N)``, the
    left and right condition blocks, and the maps of :func:`_maps`.
    """
    k, n = left.shape[0] + 1, left.shape[1]
    n_p = 0 if parameters is None else parameters.shape[2]
    touches_right = (b != 0).any(axis=1)
    right_rows = touches_right.nonzero()[0]
    left_rows = (~touches_right).nonzero()[0]
    carried = (a[right_rows] != 0).any(axis=0).nonzero()[0] if right_rows.size else np.zeros(0, int)
    q = carried.size
    N = n + q + n_p
    if q == 0 and n_p == 0:
        L, R = left, right
    else:
        L = np.zeros((k - 1, N, N))
        R = np.zeros((k - 1, N, N))
        L[:, :n, :n], R[:, :n, :n] = left, right
        if n_p:
            L[:, :n, n + q:] = parameters
        extra = np.arange(n, N)
        L[:, extra, extra] = -1.0
        R[:, extra, extra] = 1.0
    ka = left_rows.size + q
    A = np.zeros((ka, N))
    A[: left_rows.size, :n] = a[left_rows]
    if n_p:
        A[: left_rows.size, n + q:] = dp[left_rows]
    A[left_rows.size + np.arange(q), carried] = -1.0
    A[left_rows.size + np.arange(q), n + np.arange(q)] = 1.0
    B = np.zeros((right_rows.size, N))
    B[:, :n] = b[right_rows]
    if q:
        B[:, n:n + q] = a[right_rows][:, carried]
    if n_p:
        B[:, n + q:] = dp[right_rows]
    maps = _maps(k, n, n_p, a.shape[0], tuple(left_rows.tolist()), tuple(right_rows.tolist()), q)
    return L, R, A, B, maps


def _band_storage(L, R, A, B) -> tuple[np.ndarray, int, int]:  # noqa: ANN001
    """LAPACK banded storage ``ab[kl + ku + r - c, c] = M[r, c]`` of the separated block matrix
    (rows: ``A`` on the first block, the interval rows, ``B`` on the last block).

    The interval blocks are written through strided views of the storage (entry ``(i, r, c)``
    of the left block goes to ``ab[kl + ku + ka + r - c, i N + c]``), no index arrays; ``ab``
    is column-major, as LAPACK takes it.
    """
    k, N = L.shape[0] + 1, L.shape[1]
    ka = A.shape[0]
    kl = ka + N - 1
    ku = max(2 * N - 1 - ka, N - 1)
    ldab = 2 * kl + ku + 1
    size = N * k
    flat = np.zeros(size * ldab)  # column-major (LAPACK's order): entry (d, c) at c * ldab + d
    item = flat.itemsize
    strides = (N * ldab * item, item, (ldab - 1) * item)
    top = kl + ku + ka
    for block, offset in ((L, top), (R, N * ldab + top - N)):
        np.ndarray(block.shape, float, flat, offset * item, strides)[...] = block
    first, last = _condition_positions(k, N, ka, B.shape[0])
    flat[first] = A.ravel()
    flat[last] = B.ravel()
    return flat.reshape(size, ldab).T, kl, ku


@functools.lru_cache(maxsize=64)
def _condition_positions(k: int, N: int, ka: int, kb: int) -> tuple[np.ndarray, np.ndarray]:
    """Flat positions (column-major banded storage) of the condition blocks' entries."""
    kl = ka + N - 1
    ku = max(2 * N - 1 - ka, N - 1)
    ldab = 2 * kl + ku + 1
    size = N * k
    out = []
    for rows, first_col in ((np.arange(ka), 0), (np.arange(size - kb, size), size - N)):
        r, c = np.meshgrid(rows, first_col + np.arange(N), indexing="ij")
        out.append((c * ldab + kl + ku + r - c).ravel())
    return out[0], out[1]


#: States from which the Newton solve runs BLAS on one thread. Below, the BLAS calls are too
#: small for OpenBLAS to thread them anyway; above, threads oversubscribe the cores of a
#: machine that does anything else (a sweep's other worker, a second job): measured on the
#: 200-state chain of benchmarks/scale.py, 0.9 s on one thread against 8.8-9.9 s with the
#: default two threads on a 2-core machine with one other busy process (section "threads").
THREADS_FROM = 16
_CONTROLLER: list = []


def one_blas_thread(n: int):  # noqa: ANN201 - a context manager
    """A context in which BLAS runs on one thread, for a system of ``n`` states (none below
    ``THREADS_FROM``, or when threadpoolctl is missing)."""
    if n < THREADS_FROM:
        return contextlib.nullcontext()
    if not _CONTROLLER:
        try:
            from threadpoolctl import ThreadpoolController
        except ImportError:  # pragma: no cover - a core dependency, but the solve runs without it
            _CONTROLLER.append(None)
        else:
            _CONTROLLER.append(ThreadpoolController())
    controller = _CONTROLLER[0]
    return contextlib.nullcontext() if controller is None else controller.limit(limits=1, user_api="blas")


@functools.lru_cache(maxsize=32)
def _sparse_pays(n: int, packed: bytes) -> bool:
    p = np.unpackbits(np.frombuffer(packed, np.uint8))[: n * n].reshape(n, n).astype(np.int64)
    blocks = (p + np.eye(n, dtype=np.int64) + p @ p) > 0
    if blocks.mean() > SPARSE_DENSITY:
        return False
    from scipy.sparse.csgraph import reverse_cuthill_mckee

    symmetric = sparse.csr_matrix(blocks | blocks.T)
    order = reverse_cuthill_mckee(symmetric, symmetric_mode=True)
    r, c = np.nonzero(blocks[np.ix_(order, order)])
    return bool(np.abs(r - c).max() <= SPARSE_BANDWIDTH * n)


def sparse_pays(pattern: np.ndarray) -> bool:
    """Whether the sparse LU pays for collocation blocks of this Jacobian pattern ``(n, n)``:
    more than ``BAND_LIMIT`` states, blocks (``I + J + J J``) sparser than ``SPARSE_DENSITY``
    and, reordered by reverse Cuthill-McKee, of a bandwidth within ``SPARSE_BANDWIDTH`` of the
    states (local coupling: chains, grids of the method of lines), so that SuperLU's fill stays small."""
    pattern = np.asarray(pattern, bool)
    n = pattern.shape[0]
    if n <= BAND_LIMIT:
        return False
    return _sparse_pays(n, np.packbits(pattern).tobytes())


def factor_blocks(left: np.ndarray, right: np.ndarray, parameters: np.ndarray | None, a: np.ndarray,
                  b: np.ndarray, dp: np.ndarray | None, scale: np.ndarray | None = None,
                  sparse_blocks: bool | None = None) -> Factored:
    """LU of the bordered block-bidiagonal matrix of :func:`block_matrix` (same arguments).

    Small blocks (``N <= BAND_LIMIT`` unknowns per node, copies and parameters included) or
    dense ones: LAPACK's banded LU (``dgbtrf``) of the banded embedding (:func:`_augmented`),
    whatever the conditions: separated, non-separated (multipoint continuity links ``t = 0``
    and ``t = 1``) or with unknown parameters. One LAPACK call, no Python work per node.
    Large sparse blocks (``sparse_blocks``; default: measured from ``left``): SuperLU of the
    matrix with its zero entries dropped (its fill-reducing column order then sees the
    coupling of the equations, not full blocks). Raises :class:`SingularMatrix` when the
    matrix is singular or not finite.
    """
    k, n = left.shape[0] + 1, left.shape[1]
    n_p = 0 if parameters is None else parameters.shape[2]
    a, b = np.asarray(a, float), np.asarray(b, float)
    dp = np.zeros((a.shape[0], 0)) if dp is None or n_p == 0 else np.asarray(dp, float).reshape(a.shape[0], n_p)
    size = n * k + n_p
    if scale is not None:
        row = scale[: (k - 1) * n].reshape(k - 1, n, 1)
        left, right = left * row, right * row
        if parameters is not None:
            parameters = parameters * row
        s = scale[(k - 1) * n:, None]
        a, b, dp = a * s, b * s, dp * s
    if k == 1:  # one block (single shooting): the conditions alone, a small dense LU
        from scipy.linalg.lapack import dgetrf

        matrix = np.hstack([a + b, dp])
        if not np.isfinite(matrix).all():
            raise SingularMatrix("the Newton matrix holds NaN or inf")
        lu, piv, info = dgetrf(matrix)  # LAPACK itself: a singular matrix is our error, not a warning
        if info != 0:
            raise SingularMatrix("the Newton matrix is singular")
        return Factored(size, dense=(lu, piv))
    if sparse_blocks is None:
        sparse_blocks = n > BAND_LIMIT and np.count_nonzero(left[0]) + np.count_nonzero(left[-1]) <= \
            2 * SPARSE_DENSITY * n * n
    if sparse_blocks:
        matrix = block_matrix(left, right, parameters, a, b, dp if n_p else None)
        matrix.eliminate_zeros()
        return Factored(size, lu=sparse_lu(matrix))
    from scipy.linalg.lapack import dgbtrf

    L, R, A, B, maps = _augmented(left, right, parameters, a, b, dp)
    ab, kl, ku = _band_storage(L, R, A, B)
    with one_blas_thread(n):  # every caller: collocation, multiple shooting, the stability constant
        lu, piv, info = dgbtrf(ab, kl, ku, overwrite_ab=1)
    if info > 0:
        raise SingularMatrix("the Newton matrix is singular")
    if not np.isfinite(lu[kl + ku]).all():  # NaN or inf anywhere in the matrix reach U's diagonal
        raise SingularMatrix("the Newton matrix holds NaN or inf")
    return Factored(size, band=(lu, piv, kl, ku), maps=maps)


class CollocationEquations:
    """The collocation equations of ``solve_bvp`` on a fixed mesh, the parameter an unknown.

    Unknowns ``z = (y.ravel() in node-major order, p)``; equations: the Lobatto IIIA
    residuals ``y_i+1 - y_i - h/6 (f_i + 4 f_mid + f_i+1)`` with
    ``y_mid = (y_i + y_i+1)/2 - h/8 (f_i+1 - f_i)``, then the boundary conditions.
    """

    def __init__(self, compiled, x: np.ndarray, k: np.ndarray, sizes: np.ndarray | None = None):  # noqa: ANN001
        self.c, self.x, self.k = compiled, x, k
        # the typical size of each unknown parameter in the weighted norm (1: as it is); a
        # path follower gives its parameter's, so that its steps do not depend on the units
        self.sizes = sizes
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
        self._sparse_blocks: bool | None = None
        self._scaled: bool | None = None

    @property
    def weights(self) -> np.ndarray:
        if self._weights is None:
            sizes = np.ones(self.n_p) if self.sizes is None else np.asarray(self.sizes, float)
            self._weights = np.concatenate([np.repeat(node_weights(self.x), self.n), 1.0 / sizes**2])
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
        if self.n_p or self._scaled is None:  # the region lengths move only with the parameters
            self.scale = c.row_scale(p, k)
            self._scaled = True
        f = c.rhs(self.x, y, p, k)
        ym = midpoint_values(y, f, h)
        fm = c.rhs(self.mid, ym, p, k)
        col = y[:, 1:] - y[:, :-1] - h / 6 * (f[:, :-1] + f[:, 1:] + 4 * fm)
        return col, c.bc(y[:, 0], y[:, -1], p, k), f, ym, fm

    def residual(self, z: np.ndarray) -> np.ndarray:
        y, p = self.split(z)
        col, bc, _, _, _ = self.parts(y, p)
        return np.concatenate([col.T.ravel(), bc])

    def _blocks(self, y: np.ndarray, p: np.ndarray, ym: np.ndarray | None = None,
                seen: dict | None = None):  # noqa: ANN202
        """``d col_i / d y_i``, ``d col_i / d y_i+1`` (each ``(m-1, n, n)``), the parameter
        block ``(m-1, n, n_p)`` or None, and the condition Jacobians. ``seen``, when given,
        gets the Jacobians at the nodes and midpoints (``J``, ``Jm``, mesh axis first)."""
        c, k, h, n = self.c, self.k, self.h, self.n
        if ym is None:
            f = c.rhs(self.x, y, p, k)
            ym = midpoint_values(y, f, h)
        # (m, n, n) and (m-1, n, n), contiguous: batched products run twice as fast on them
        # (transpose, not np.moveaxis: the latter's axis checks cost more than the copy here)
        J = np.ascontiguousarray(c.jac(self.x, y, p, k).transpose(2, 0, 1))
        Jm = np.ascontiguousarray(c.jac(self.mid, ym, p, k).transpose(2, 0, 1))
        if seen is not None:
            seen.update(J=J, Jm=Jm)
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
            P = c.pjac(self.x, y, p, k).transpose(2, 0, 1)  # (m, n, n_p)
            Pm = c.pjac(self.mid, ym, p, k).transpose(2, 0, 1)
            dym = -hh / 8 * (P[1:] - P[:-1])
            block = -hh / 6 * (P[:-1] + P[1:] + 4 * (Pm + Jm @ dym))
        return left, right, block, c.bc_jac(y[:, 0], y[:, -1], p, k)

    def jacobian(self, z: np.ndarray, scale: np.ndarray | None = None) -> sparse.csc_matrix:
        y, p = self.split(z)
        return self._sparse(self._blocks(y, p), scale)

    def _sparse(self, blocks, scale: np.ndarray | None) -> sparse.csc_matrix:  # noqa: ANN001
        left, right, pblock, (a, b, dp) = blocks
        return block_matrix(left, right, pblock, a, b, dp if self.n_p else None, scale)

    def factor(self, y: np.ndarray, p: np.ndarray, ym: np.ndarray | None = None,
               scale: np.ndarray | None = None) -> Factored:
        """LU of the Newton matrix at ``(y, p)`` (rows multiplied by ``scale``, if given), by
        :func:`factor_blocks`; large systems with sparse Jacobians assemble their blocks
        sparse (:meth:`_sparse_matrix`). Raises :class:`SingularMatrix` when it is singular
        or not finite."""
        if self._sparse_blocks is None:
            self._sparse_blocks = sparse_pays(self.c.jac_pattern)
        with one_blas_thread(self.n):
            if self._sparse_blocks:
                matrix = self._sparse_matrix(y, p, ym, scale)
                return Factored(self.n * self.m + self.n_p, lu=sparse_lu(matrix, "the collocation matrix"))
            left, right, pblock, (a, b, dp) = self._blocks(y, p, ym)
            return factor_blocks(left, right, pblock, a, b, dp if self.n_p else None, scale, False)

    def _sparse_matrix(self, y: np.ndarray, p: np.ndarray, ym: np.ndarray | None,
                       scale: np.ndarray | None) -> sparse.csc_matrix:
        """The Newton matrix assembled from the Jacobian's non-zero pattern only: the blocks
        ``-+I - h/6 (J + 2 Jm +- h/2 Jm J)`` as block-diagonal sparse products, in time
        proportional to the non-zeros, not to ``n^2`` or ``n^3`` per interval."""
        c, k, h, n, m = self.c, self.k, self.h, self.n, self.m
        if ym is None:
            ym = midpoint_values(y, c.rhs(self.x, y, p, k), h)
        r, col = np.nonzero(c.jac_pattern)
        J = c.jac(self.x, y, p, k)[r, col, :]  # (nnz, m)
        Jmid = c.jac(self.mid, ym, p, k)  # (n, n, m - 1), evaluated once
        Jm = Jmid[r, col, :]  # (nnz, m - 1)
        size = (m - 1) * n
        base = (np.arange(m - 1) * n)[None, :]
        rows, cols = (r[:, None] + base).ravel(order="F"), (col[:, None] + base).ravel(order="F")

        def diag(values: np.ndarray) -> sparse.csr_matrix:
            return sparse.csr_matrix((values.ravel(order="F"), (rows, cols)), shape=(size, size))

        hrow = np.repeat(h, n)
        Dm = diag(Jm)
        Jl, Jr = diag(J[:, :-1]), diag(J[:, 1:])
        half = sparse.diags(hrow / 2)
        eye = sparse.identity(size, format="csr")
        left = -eye - sparse.diags(hrow / 6) @ (Jl + 2 * Dm + half @ (Dm @ Jl))
        right = eye - sparse.diags(hrow / 6) @ (Jr + 2 * Dm - half @ (Dm @ Jr))
        zeros = sparse.csr_matrix((size, n))
        interval = sparse.hstack([left, zeros]) + sparse.hstack([zeros, right])
        a, b, dp = c.bc_jac(y[:, 0], y[:, -1], p, k)
        bc = np.zeros((self.n_bc, n * m))
        bc[:, :n] = a
        bc[:, -n:] += b
        blocks = [[interval], [sparse.csr_matrix(bc)]]
        if self.n_p:
            P = c.pjac(self.x, y, p, k)
            Pm = c.pjac(self.mid, ym, p, k)
            dym = -h / 8 * (P[:, :, 1:] - P[:, :, :-1])  # (n, n_p, m - 1)
            JmDym = np.einsum("ijm,jkm->ikm", Jmid, dym)
            pblock = -h / 6 * (P[:, :, :-1] + P[:, :, 1:] + 4 * (Pm + JmDym))
            blocks = [[interval, sparse.csr_matrix(np.moveaxis(pblock, -1, 0).reshape(size, self.n_p))],
                      [sparse.csr_matrix(bc), sparse.csr_matrix(np.reshape(dp, (self.n_bc, self.n_p)))]]
        matrix = sparse.bmat(blocks, format="csr")
        if scale is not None:
            matrix = sparse.diags(scale) @ matrix
        matrix = matrix.tocsc()
        matrix.eliminate_zeros()
        return matrix

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


