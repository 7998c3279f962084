"""Algebraic unknowns solved where the equations are evaluated: the state-space form.

A problem with algebraic equations is, in the standard form, the semi-explicit system ::

    dY/dt = F(t, Y, Z),   0 = G(t, Y, Z)

with ``dG/dZ`` non-singular along the solution (index 1). By the implicit function theorem
``G = 0`` then defines ``Z = Z(t, Y)`` near the solution, and the system is the ordinary
differential equation ``dY/dt = F(t, Y, Z(t, Y))``: its *state-space form* (Hairer and
Wanner, Solving Ordinary Differential Equations II, 2nd ed., Springer 1996, sec. VI.1),
with the exact Jacobian ::

    d/dY F(t, Y, Z(t, Y)) = F_Y - F_Z G_Z^-1 G_Y

(likewise in the parameters and constants). :class:`StateSpace` evaluates it: at every
point where a method evaluates the equations, ``G(t, Y, Z) = 0`` is solved for ``Z`` by
Newton's method, vectorised over the points; the conditions read ``Z`` at the ends the same
way. Every method then solves the problem as an ODE, and the algebraic equations hold to
round-off wherever ``Z`` is reported. For Lobatto IIIA collocation this is the same discrete
solution as collocation of the DAE with ``G = 0`` imposed at the collocation points (the
method's stages are the points where ``F`` is evaluated), Ascher and Petzold's observation
for stiffly accurate collocation of semi-explicit index-1 systems (Ascher and Petzold,
Computer Methods for ODEs and DAEs, SIAM 1998, sec. 10.1).

Which root of ``G = 0`` (the branch) is the one the Newton iterations start next to. They
start from values already found, kept as tables ``(t, Y, Z)`` on meshes: the *seed* of the
solve (:meth:`StateSpace.seed`: the user's guess of ``Z``, a previous solution's ``Z``, or
by default the root Newton's method reaches from a constant at the left end, carried along
the mesh), then the latest meshes evaluated; each point starts from the table whose ``Y``
is nearest its own. So the branch the guess picked is followed as the solve moves, and a
probe far off the branch does not move the start of the points on it. The tables belong to
the thread that solves. A solution keeps its own ``Z`` (:meth:`StateSpace.holding`), so it
evaluates its algebraic unknowns on its own branch whatever was solved since.

Nothing here imports SymPy.
"""

from __future__ import annotations

import threading

import numpy as np

_EPS = float(np.finfo(float).eps)
#: Newton iterations for Z at a point: a warm start needs two or three; a start from a
#: constant on a strongly nonlinear equation may need a dozen halved steps.
_ITERATIONS = 40
#: Halvings of one point's Newton step before that point is given up.
_HALVINGS = 12
#: A Newton step this small relative to 1 + |Z| leaves Z at round-off: converged.
_CONVERGED = 16 * _EPS
#: Below this, a step that no longer shrinks fourfold is round-off stagnation: converged.
_STAGNATION = 1e-9
#: Meshes kept as starts besides the seed (the latest ones evaluated).
_RECENT = 3
#: A table this near (relative distance of the states) predicts a start good enough that
#: farther tables are not looked at.
_NEAR = 1e-4
#: A Newton step this small (relative) is the last: the one after it would be below round-off.
_LAST_STEP = 1e-8
#: Constants Newton's method starts from at the left end when nothing else is known: 0 first
#: (a root of many constraints), then 1 and -1 where dG/dZ vanishes at 0 (z**2 = 1 + y**2).
_CONSTANTS = (0.0, 1.0, -1.0)
#: Points solved one by one from a neighbour's root, at most, after a vectorised solve.
_MARCH = 400
#: Failed points remembered per solve (the first ones: what a failed solve's message reports).
_TROUBLE = 200


class _Memory(threading.local):
    """Per thread: the seed, the latest tables, a small cache of solves and the last trouble."""

    def __init__(self) -> None:
        self.seed: tuple | None = None
        self.recent: list = []
        self.cache: dict = {}
        self.trouble: list = []


class StateSpace:
    """The state-space form of a system whose programs take ``(Y, Z)`` and give ``(F, G)``.

    Parameters
    ----------
    raw : dict of callable
        The generated ``rhs``, ``jac``, ``pjac``, ``kjac``, ``bc``, ``bc_jac_a``,
        ``bc_jac_b``, ``bc_jac_p`` and ``bc_jac_k`` over the vector ``(Y, Z)``.
    n, nz : int
        Sizes of ``Y`` and ``Z``.
    fixed : (t, T) or None
        A solution's own start table (:meth:`_table`: its ``Y``, ``Z`` and ``dZ/dY`` on its
        mesh ``t``): its only start, never replaced (see :meth:`holding`).
    """

    def __init__(self, raw: dict, n: int, nz: int, fixed: tuple | None = None):
        self.raw, self.n, self.nz, self.fixed = raw, n, nz, fixed
        self._memory = _Memory()

    # -- the reduced functions (what methods call) ---------------------------------------
    def rhs(self, x, y, p, k):  # noqa: ANN001, ANN201
        z, R, _ = self._solved(x, y, p, k)
        return self._shaped(R[: self.n], y)

    def jac(self, x, y, p, k):  # noqa: ANN001, ANN201
        z, R, J = self._solved(x, y, p, k)
        n = self.n
        out = J[:n, :n] - np.einsum("ikm,kjm->ijm", J[:n, n:], _divide(J[n:, n:], J[n:, :n]))
        return self._shaped(out, y)

    def pjac(self, x, y, p, k):  # noqa: ANN001, ANN201
        return self._columns("pjac", x, y, p, k)

    def kjac(self, x, y, p, k):  # noqa: ANN001, ANN201
        return self._columns("kjac", x, y, p, k)

    def _columns(self, name: str, x, y, p, k):  # noqa: ANN001, ANN202
        z, R, J = self._solved(x, y, p, k)
        n = self.n
        X, W = self._points(x, y), np.vstack([self._flat(y), z])
        with np.errstate(all="ignore"):
            P = np.asarray(self.raw[name](X, W, p, k), float).reshape(self.n + self.nz, -1, X.size)
        out = P[:n] - np.einsum("ikm,kjm->ijm", J[:n, n:], _divide(J[n:, n:], P[n:]))
        return self._shaped(out, y)

    def values(self, x, y, p, k) -> np.ndarray:  # noqa: ANN001
        """``Z`` at the points: shape ``(nz, m)``, or ``(nz,)`` for a single point ``y`` of shape ``(n,)``."""
        z, _, _ = self._solved(x, y, p, k)
        return z[:, 0] if np.ndim(y) == 1 else z

    def residual(self, x, y, p, k) -> float:  # noqa: ANN001
        """Largest ``|G| / (1 + |Z|)`` at the points, with ``Z`` as solved there (round-off when
        the inner solves converged; inf where they did not)."""
        z, R, _ = self._solved(x, y, p, k)
        with np.errstate(all="ignore"):
            r = np.abs(R[self.n:]) / (1.0 + np.abs(z))
        if not r.size:
            return 0.0
        worst = float(np.max(r))
        return worst if np.isfinite(worst) else float("inf")

    def determinant(self, x, y, p, k) -> tuple[np.ndarray, np.ndarray]:  # noqa: ANN001
        """``det dG/dZ`` at the points, and the product of the norms of ``G``'s rows (its
        derivatives in ``Y`` and ``Z``): their ratio is the scale-free size of the determinant."""
        z, R, J = self._solved(x, y, p, k)
        n = self.n
        with np.errstate(all="ignore"):
            det = np.linalg.det(np.moveaxis(J[n:, n:], -1, 0)) if self.nz else np.ones(J.shape[-1])
            scale = np.prod(np.sqrt(np.sum(J[n:] ** 2, axis=1)), axis=0)
        return det, scale

    # -- conditions --------------------------------------------------------------------
    def _ends(self, ya, yb, p, k):  # noqa: ANN001, ANN202
        y = np.stack([np.asarray(ya, float), np.asarray(yb, float)], axis=1)
        z, R, J = self._solved(np.array([0.0, 1.0]), y, p, k)
        return y, z, J

    def bc(self, ya, yb, p, k):  # noqa: ANN001, ANN201
        y, z, _ = self._ends(ya, yb, p, k)
        return self.raw["bc"](np.concatenate([y[:, 0], z[:, 0]]), np.concatenate([y[:, 1], z[:, 1]]), p, k)

    def bc_jac(self, ya, yb, p, k):  # noqa: ANN001, ANN201
        """``(dG/dya, dG/dyb, dG/dp)`` of the conditions, ``Z`` at each end a function of the
        states (and parameters) there."""
        n = self.n
        y, z, J = self._ends(ya, yb, p, k)
        wa, wb = np.concatenate([y[:, 0], z[:, 0]]), np.concatenate([y[:, 1], z[:, 1]])
        A, B, P = (np.asarray(self.raw[f](wa, wb, p, k), float) for f in ("bc_jac_a", "bc_jac_b", "bc_jac_p"))
        P = P.reshape(A.shape[0], -1)
        dy = -_divide(J[n:, n:], J[n:, :n])  # dZ/dY at each end, (nz, n, 2)
        with np.errstate(all="ignore"):
            pz = np.asarray(self.raw["pjac"](np.array([0.0, 1.0]), np.vstack([y, z]), p, k), float)
        dp = -_divide(J[n:, n:], pz.reshape(n + self.nz, -1, 2)[n:])  # dZ/dp at each end
        A_out = A[:, :n] + A[:, n:] @ dy[:, :, 0]
        B_out = B[:, :n] + B[:, n:] @ dy[:, :, 1]
        P_out = P + A[:, n:] @ dp[:, :, 0] + B[:, n:] @ dp[:, :, 1]
        return A_out, B_out, P_out

    def bc_kjac(self, ya, yb, p, k):  # noqa: ANN001, ANN201
        n = self.n
        y, z, J = self._ends(ya, yb, p, k)
        wa, wb = np.concatenate([y[:, 0], z[:, 0]]), np.concatenate([y[:, 1], z[:, 1]])
        A, B = (np.asarray(self.raw[f](wa, wb, p, k), float) for f in ("bc_jac_a", "bc_jac_b"))
        K = np.asarray(self.raw["bc_jac_k"](wa, wb, p, k), float).reshape(A.shape[0], -1)
        with np.errstate(all="ignore"):
            kz = np.asarray(self.raw["kjac"](np.array([0.0, 1.0]), np.vstack([y, z]), p, k), float)
        dk = -_divide(J[n:, n:], kz.reshape(n + self.nz, -1, 2)[n:])
        return K + A[:, n:] @ dk[:, :, 0] + B[:, n:] @ dk[:, :, 1]

    # -- where the inner Newton iterations start ---------------------------------------
    def seed(self, x, y, p, k, start: np.ndarray | None = None) -> np.ndarray:  # noqa: ANN001
        """Start a solve: solve ``G = 0`` on the mesh ``x`` along the states ``y`` from
        ``start`` (shape ``(nz, m)``: a guess of ``Z``, or a previous solution's), or by
        default from the root at the left end that Newton's method reaches from a constant
        (0, else 1 or -1), carried along the mesh; keep the result as the start of every
        evaluation that follows (the branch). Returns ``Z``, NaN where no root was found."""
        memory = self._memory
        memory.seed, memory.recent, memory.cache, memory.trouble = None, [], {}, []
        X, Y = self._points(x, y), self._flat(y)
        if start is None:
            Z, bad, singular = self._from_constants(X, Y, p, k)
        else:
            Z0 = np.broadcast_to(np.asarray(start, float).reshape(self.nz, -1), (self.nz, X.size)).copy()
            Z0 = np.where(np.isfinite(Z0), Z0, 0.0)
            Z, _, _, bad, singular = self._newton(X, Y, Z0, p, k)
            Z, bad = self._march(X, Y, Z, bad, p, k)
        self._note(X, Y, bad, singular)
        if (~bad).sum() >= 2:
            keep = ~bad
            _, J = self._evaluate(X[keep], Y[:, keep], Z[:, keep], p, k)
            memory.seed = self._table(X[keep], Y[:, keep], Z[:, keep], J)
        return Z

    def holding(self, t, y, p, k) -> StateSpace:  # noqa: ANN001
        """A copy whose Newton iterations always start from the solution ``(t, y)``'s own
        algebraic unknowns (solved now, from this system's starts)."""
        t, y = np.asarray(t, float), self._flat(y)
        z, _, J = self._solved(t, y, p, k)
        keep = np.isfinite(z).all(axis=0) & np.isfinite(y).all(axis=0)
        fixed = self._table(t[keep], y[:, keep], z[:, keep], J[:, :, keep]) if keep.sum() >= 2 else None
        return StateSpace(self.raw, self.n, self.nz, fixed)

    def _table(self, X, Y, Z, J) -> tuple[np.ndarray, np.ndarray]:  # noqa: ANN001
        """A start table: the mesh, and rows ``Y``, ``Z`` and ``dZ/dY = -G_Z^-1 G_Y`` (flattened)
        there, from which a start is predicted to first order at nearby states."""
        n = self.n
        S = -_divide(J[n:, n:], J[n:, :n]).reshape(self.nz * n, X.size)
        return X.copy(), np.vstack([Y, Z, S])

    def share(self, other: StateSpace) -> None:
        """Start from ``other``'s tables (and keep them with it) from now on."""
        self._memory = other._memory

    @property
    def trouble(self) -> list:
        """Where the inner solves failed since the solve began (in this thread): a list of
        ``(t, singular)`` per failed point, ``t`` the standard variable and ``singular``
        whether ``dG/dZ`` was singular there."""
        return list(self._memory.trouble)

    def _tables(self) -> list:
        if self.fixed is not None:
            return [self.fixed]
        memory = self._memory
        return memory.recent + ([memory.seed] if memory.seed is not None else [])

    def _start(self, X: np.ndarray, Y: np.ndarray) -> np.ndarray | None:
        """Per point, ``Z`` predicted from the table whose ``Y`` is nearest (interpolated in ``t``):
        ``Z_table + dZ/dY (Y - Y_table)``, exact to second order in the distance."""
        tables = self._tables()
        if not tables:
            return None
        n, nz = self.n, self.nz
        best = np.full(X.size, np.inf)
        Z0 = None
        # tables of as many points (the same mesh again, or the segments of an integration a step
        # on) first, taken point for point: the distance in Y says whether they are near
        for t, T in sorted(tables, key=lambda table: table[0].size != X.size):
            Ti = T if t.size == X.size else _interpolate(t, T, X)
            dy = Y - Ti[:n]
            with np.errstate(all="ignore"):
                d = np.max(np.abs(dy) / (1.0 + np.abs(Ti[:n])), axis=0) if n else np.zeros(X.size)
                guess = Ti[n:n + nz] + np.einsum("ijm,jm->im", Ti[n + nz:].reshape(nz, n, X.size), dy)
            guess = np.where(np.isfinite(guess), guess, Ti[n:n + nz])
            d[~np.isfinite(d)] = np.inf
            if Z0 is None:
                Z0, best = guess, d
            else:
                better = d < best
                Z0[:, better] = guess[:, better]
                best[better] = d[better]
            if best.max() <= _NEAR:
                break
        return Z0

    # -- the inner solves ---------------------------------------------------------------
    def _points(self, x, y) -> np.ndarray:  # noqa: ANN001
        m = 1 if np.ndim(y) == 1 else np.shape(y)[1]
        x = np.asarray(x, float)
        return np.broadcast_to(x.ravel() if x.ndim else x, (m,)).astype(float)

    def _flat(self, y) -> np.ndarray:  # noqa: ANN001
        return np.asarray(y, float).reshape(self.n, -1)

    def _shaped(self, out: np.ndarray, y) -> np.ndarray:  # noqa: ANN001
        return out[..., 0] if np.ndim(y) == 1 else out

    def _solved(self, x, y, p, k) -> tuple[np.ndarray, np.ndarray, np.ndarray]:  # noqa: ANN001
        """``Z`` and the raw ``(F, G)`` and Jacobian at ``(x, y, Z)`` (cached for the last few calls:
        a method asks for the right-hand side and then the Jacobian at the same points)."""
        X, Y = self._points(x, y), self._flat(y)
        p, k = np.asarray(p, float), np.asarray(k, float)
        key = (X.tobytes(), Y.tobytes(), p.tobytes(), k.tobytes())
        memory = self._memory
        found = memory.cache.get(key)
        if found is not None:
            return found
        Z0 = self._start(X, Y)
        if Z0 is None:
            Z, bad, singular = self._from_constants(X, Y, p, k)
            R, J = self._evaluate(X, Y, Z, p, k)
        else:
            Z, R, J, bad, singular = self._newton(X, Y, Z0, p, k)
            if bad.any():
                Z, bad = self._march(X, Y, Z, bad, p, k)
                R, J = self._evaluate(X, Y, Z, p, k)
        if bad.any():
            self._note(X, Y, bad, singular)
            Z[:, bad] = np.nan
            R[:, bad] = np.nan
            J[:, :, bad] = np.nan
        elif self.fixed is None and X.size >= 3 and np.all(np.diff(X) > 0):
            memory.recent = [self._table(X, Y, Z, J), *memory.recent][:_RECENT]
        if len(memory.cache) >= 4:
            memory.cache.clear()
        memory.cache[key] = (Z, R, J)
        return Z, R, J

    def _evaluate(self, X, Y, Z, p, k):  # noqa: ANN001, ANN202
        W = np.vstack([Y, Z])
        with np.errstate(all="ignore"):
            R = np.asarray(self.raw["rhs"](X, W, p, k), float).reshape(self.n + self.nz, X.size)
            J = np.asarray(self.raw["jac"](X, W, p, k), float).reshape(self.n + self.nz, self.n + self.nz, X.size)
        return R, J

    def _newton(self, X, Y, Z, p, k):  # noqa: ANN001, ANN202
        """Newton's method for ``G(X, Y, Z) = 0`` at every point from ``Z``, a step halved
        at a point where it made ``|G|`` grow. Returns ``(Z, R, J, bad, singular)``: ``R``
        and ``J`` evaluated at the final ``Z``; ``bad`` where it did not converge,
        ``singular`` where ``dG/dZ`` was singular."""
        quick = self._quick(X, Y, Z, p, k)
        return quick if quick is not None else self._careful(X, Y, Z, p, k)

    def _quick(self, X, Y, Z, p, k):  # noqa: ANN001, ANN202
        """Full Newton steps at every point while every point behaves (the usual case from a
        warm start); None as soon as one does not (a step that makes ``|G|`` grow, a value or
        step that is not finite), for :meth:`_careful` to take over from ``Z``."""
        n, m = self.n, X.size
        Z = np.array(Z, float)
        last = stepped = None
        for _ in range(8):
            R, J = self._evaluate(X, Y, Z, p, k)
            G = R[n:]
            with np.errstate(all="ignore"):
                size = np.max(np.abs(G), axis=0)
                if not np.isfinite(size).all() or (last is not None and (size > 1.5 * last).any()):
                    return None
                dz = -_divide(J[n:, n:], G[:, None, :])[:, 0, :]
                rel = np.max(np.abs(dz) / (1.0 + np.abs(Z)), axis=0)
            if not np.isfinite(rel).all():
                return None
            converged = rel <= _CONVERGED
            if stepped is not None:
                converged |= (rel <= _STAGNATION) & (rel >= 0.25 * stepped)
            if (converged | (rel <= _LAST_STEP)).all():
                # the last step, taken without another evaluation: Z + dz is exact to round-off
                # (Newton's error squares), F and G follow to first order (exact to the same),
                # the Jacobian stays that at Z (within |dz|, at most _LAST_STEP, relative)
                dz = np.where(converged, 0.0, dz)
                R = R + np.einsum("ijm,jm->im", J[:, n:], dz)
                no = np.zeros(m, bool)
                return Z + dz, R, J, no, no.copy()
            Z = Z + np.where(converged, 0.0, dz)
            last, stepped = size, np.where(converged, 0.0, rel)
        return None

    def _careful(self, X, Y, Z, p, k):  # noqa: ANN001, ANN202
        """Newton's method point by point in effect: a step halved where it made ``|G|`` grow,
        points given up one at a time (see :meth:`_newton`)."""
        n, m = self.n, X.size
        Z = np.array(Z, float)
        done, bad, singular = (np.zeros(m, bool) for _ in range(3))
        before = Z.copy()
        last = np.full(m, np.inf)  # |G| at the iterate the current step left
        stepped = np.full(m, np.inf)  # size of the last step
        halved = np.zeros(m, int)
        R = J = None
        for _ in range(_ITERATIONS):
            R, J = self._evaluate(X, Y, Z, p, k)
            G, Gz = R[n:], J[n:, n:]
            with np.errstate(all="ignore"):
                size = np.max(np.abs(G), axis=0)
            finite = np.isfinite(G).all(axis=0) & np.isfinite(Gz).all(axis=(0, 1))
            active = ~(done | bad)
            first = ~np.isfinite(last)
            bad |= active & ~finite & first
            back = active & ~first & (~finite | (size > 1.5 * last))
            if back.any():
                halved[back] += 1
                bad |= back & (halved > _HALVINGS)
                back &= ~bad
                Z[:, back] = before[:, back] + 0.5 * (Z[:, back] - before[:, back])
            go = ~(done | bad | back)
            if go.any():
                dz = np.full((self.nz, m), np.nan)
                dz[:, go] = -_divide(Gz[:, :, go], G[:, go][:, None, :])[:, 0, :]
                with np.errstate(all="ignore"):
                    rel = np.max(np.abs(dz) / (1.0 + np.abs(Z)), axis=0)
                fails = go & ~np.isfinite(rel)
                singular |= fails
                bad |= fails
                converged = go & np.isfinite(rel) & (
                    (rel <= _CONVERGED) | ((rel <= _STAGNATION) & (rel >= 0.25 * stepped)))
                done |= converged
                move = go & ~fails & ~converged
                before[:, move] = Z[:, move]
                last[move] = size[move]
                stepped[move] = rel[move]
                Z[:, move] += dz[:, move]
            if (done | bad).all():
                break
        bad |= ~done
        if back.any() or not done.all():
            R, J = self._evaluate(X, Y, Z, p, k)
        return Z, R, J, bad, singular

    def _from_constants(self, X, Y, p, k):  # noqa: ANN001, ANN202
        """``Z`` by Newton's method from a constant: at the leftmost point from 0, 1 or -1 (the
        first that converges), then at every point from that root, and where that fails from
        a neighbour's root. Returns ``(Z, bad, singular)``."""
        m = X.size
        order = np.argsort(X, kind="stable")
        first = order[:1]
        root = None
        for c in _CONSTANTS:
            Z1, _, _, bad1, _ = self._newton(X[first], Y[:, first], np.full((self.nz, 1), c), p, k)
            if not bad1.any():
                root = Z1[:, 0]
                break
        if root is None:
            Z, _, _, bad, singular = self._newton(X, Y, np.zeros((self.nz, m)), p, k)
        else:
            Z, _, _, bad, singular = self._newton(X, Y, np.repeat(root[:, None], m, axis=1), p, k)
        Z, bad = self._march(X, Y, Z, bad, p, k)
        return Z, bad, singular & bad

    def _march(self, X, Y, Z, bad, p, k):  # noqa: ANN001, ANN202
        """Points that failed solved one by one from the root of their nearest solved
        neighbour along ``t`` (outwards from the points solved)."""
        if not bad.any() or bad.all():
            return Z, bad
        Z, bad = Z.copy(), bad.copy()
        order = np.argsort(X, kind="stable")
        budget = _MARCH
        for sweep in (order, order[::-1]):
            previous = None  # the last point solved in this direction; None once a march failed
            for i in sweep:
                if not bad[i]:
                    previous = i
                    continue
                if previous is None or budget <= 0:
                    continue
                budget -= 1
                Zi, _, _, b, _ = self._newton(X[i:i + 1], Y[:, i:i + 1], Z[:, previous:previous + 1], p, k)
                if b[0]:
                    previous = None  # past a point the march cannot reach (no root there): stop this run
                else:
                    Z[:, i], bad[i] = Zi[:, 0], False
                    previous = i
        return Z, bad

    def _note(self, X, Y, bad, singular) -> None:  # noqa: ANN001
        trouble = self._memory.trouble
        if len(trouble) >= _TROUBLE:
            return
        where = np.flatnonzero(bad)
        first = where[np.argsort(X[where], kind="stable")][:8]  # the leftmost points of this call
        trouble.extend((float(X[i]), bool(singular[i])) for i in first)


def _divide(A: np.ndarray, B: np.ndarray) -> np.ndarray:
    """``A^-1 B`` per point: ``A`` of shape ``(q, q, m)``, ``B`` of shape ``(q, c, m)``; NaN
    where ``A`` is singular or not finite."""
    q = A.shape[0]
    if q == 1:
        with np.errstate(all="ignore"):
            a = A[0, 0]
            return np.where((a != 0) & np.isfinite(a), B / np.where(a != 0, a, 1.0), np.nan)
    out = np.full(B.shape, np.nan)
    Am, Bm = np.moveaxis(A, -1, 0), np.moveaxis(B, -1, 0)
    with np.errstate(all="ignore"):
        ok = np.isfinite(Am).all(axis=(1, 2)) & np.isfinite(Bm).all(axis=(1, 2))
        if ok.any():
            det = np.linalg.det(Am[ok])
            good = np.flatnonzero(ok)[(det != 0) & np.isfinite(det)]
            if good.size:
                out[..., good] = np.moveaxis(np.linalg.solve(Am[good], Bm[good]), 0, -1)
    return out


def _interpolate(t: np.ndarray, values: np.ndarray, X: np.ndarray) -> np.ndarray:
    """Rows of ``values`` (on the increasing ``t``) interpolated linearly at ``X``, held beyond."""
    if t.size == 1:
        return np.repeat(values, X.size, axis=1)
    return np.array([np.interp(X, t, row) for row in values])
