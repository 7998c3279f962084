"""The map between the standard variable and the user's, and solutions carried across maps.

Region ``r`` of a standard form covers ``x = c_r + h_r t**d_r`` for ``t`` in ``[0, 1]``
(``d_r = 1`` but for a stretched region: :mod:`bvpkit.reduce.stretch`); ``(c_r, h_r)``
come from the compiled ``maps(p, k)`` (a free end or a truncation length moves them). These
few functions are the one place that map is written; the map back of a solution
(:class:`Interpolant`), the first iterate and the classes' loops use
them. :class:`Start` is a guess as standard-form arrays, and :func:`carried` reads a
previous solution on another problem's maps (other constants, a longer truncation).
"""

from __future__ import annotations

from typing import Any

import numpy as np

from ..methods.diagnostics import hermite


def positions(maps: np.ndarray) -> np.ndarray:
    """The ends and interfaces ``(X_0, ..., X_R)`` in the user's variable, from the region
    maps ``(c_r, h_r)`` (a truncated infinite end where it is placed now)."""
    return np.concatenate([maps[:, 0], [maps[-1, 0] + maps[-1, 1]]])


def physical(t: np.ndarray, maps: np.ndarray, stretch: tuple = ()) -> np.ndarray:
    """The user's variable of every region at the standard mesh ``t``: ``(regions, len(t))``.

    Region ``r`` covers ``x = c_r + h_r t**d_r`` (``stretch`` holds the powers ``d_r``; empty:
    all 1, the affine map of most problems)."""
    t = np.asarray(t, float)[None, :]
    powers = np.array([stretch[r] if r < len(stretch) else 1 for r in range(maps.shape[0])], float)[:, None]
    return maps[:, 0:1] + maps[:, 1:2] * (t if not len(stretch) else np.abs(t) ** powers * np.sign(t))


def standard(x: np.ndarray, c: np.ndarray, h: np.ndarray, power: np.ndarray | int = 1) -> np.ndarray:
    """The standard variable ``t`` of points ``x`` of regions with maps ``x = c + h t**power``."""
    s = (np.asarray(x, float) - c) / h
    if np.all(np.asarray(power) == 1):
        return s
    return np.sign(s) * np.abs(s) ** (1.0 / np.asarray(power, float))


#: Where a stretched map's ``dx/dt`` vanishes (``t = 0``), slopes are read this close to it:
#: ``x - a = h t**d`` is then below 1e-24 h, and the slope's limit is reached to round-off.
_NEAR_END = 1e-12


def nudged(t: np.ndarray, power: np.ndarray | int = 1) -> np.ndarray:
    """``t`` with the ends of stretched maps (``t = 0``, ``power > 1``) moved to ``_NEAR_END``,
    where ``dx/dt`` is not zero, so a slope ``(dY/dt) / (dx/dt)`` reads its limit."""
    t = np.asarray(t, float)
    return np.where((np.asarray(power) > 1) & (t < _NEAR_END), _NEAR_END, t)


def rate(t: np.ndarray, h: np.ndarray, power: np.ndarray | int = 1) -> np.ndarray:
    """``dx/dt`` of the maps ``x = c + h t**power`` at ``t`` (``h`` for an affine map)."""
    t = np.asarray(t, float)
    power = np.asarray(power, float)
    if np.all(power == 1):
        return np.broadcast_to(np.asarray(h, float), np.broadcast(t, h).shape).astype(float)
    return h * power * np.abs(t) ** (power - 1.0)


class Start:
    """A guess given as standard-form arrays (what continuation predicts), used like a Solution.

    Parameters
    ----------
    compiled : CompiledSystem
    t : ndarray, shape (m,)
        The standard mesh.
    y : ndarray, shape (n, m)
    p : ndarray, shape (n_p,)
    k : ndarray
        The constants it belongs to (its region maps).
    """

    def __init__(self, compiled, t: np.ndarray, y: np.ndarray, p: np.ndarray, k: np.ndarray):  # noqa: ANN001
        self.compiled = compiled
        self.t, self.y, self.p, self.k = (np.asarray(a, float) for a in (t, y, p, k))

    @property
    def layout(self):  # noqa: ANN201
        return self.compiled.layout


def carried(start, compiled, t: np.ndarray, p: np.ndarray, k: np.ndarray,  # noqa: ANN001
            hold: bool = False) -> np.ndarray:
    """The states of a previous solution (or :class:`Start`) on the standard mesh ``t`` of a
    problem with the same layout but other constants (other region maps).

    Each region's states are read at the same points of the user's variable; beyond the
    previous solution's own interval (a longer truncation of an infinite domain) they are
    continued along their slope at the end, or held at their end values (``hold``: for
    states that decay towards a value the slope would overshoot, out of the domain of a
    fractional power).
    """
    layout = compiled.layout
    old_maps = np.asarray(compiled.maps(start.p, start.k), float)
    new_maps = np.asarray(compiled.maps(p, k), float)
    if np.allclose(old_maps, new_maps, rtol=0, atol=0) and t.size == start.t.size and np.array_equal(t, start.t):
        return start.y.copy()
    spline = hermite(start.compiled, start.t, start.y, start.p, start.k)
    size = layout.region_size
    y = np.empty((layout.n, t.size))
    with np.errstate(all="ignore"):
        slopes = start.compiled.rhs(start.t[[0, -1]], start.y[:, [0, -1]], start.p, start.k)
    for r in range(layout.regions):
        rows = slice(r * size, (r + 1) * size)
        d = layout.power(r)
        x = new_maps[r, 0] + new_maps[r, 1] * t**d
        s = standard(x, old_maps[r, 0], old_maps[r, 1], d)
        values = spline(np.clip(s, 0.0, 1.0))[rows]
        right, left = s > 1.0, s < 0.0
        if not hold:
            values[:, right] += slopes[rows, 1:2] * (s[right] - 1.0)
            values[:, left] += slopes[rows, 0:1] * s[left]
        y[rows] = values
    return y


class Interpolant:
    """A solution as a function of the user's variable (the C1 cubic of every method).

    Parameters
    ----------
    compiled : CompiledSystem
    t : ndarray, shape (m,)
        The standard mesh.
    y : ndarray, shape (n, m)
        The stacked states.
    p, k : ndarray
        Parameters and constants (they fix the region maps).

    Calling it with points ``x`` gives the states of a region at ``x``, shape
    ``(states per region, len(x))``; at an interface ``side = -1`` (default) reads the
    region on the left, ``+1`` the one on the right. :meth:`algebraic` gives the algebraic
    unknowns there (solved from the algebraic equations on the interpolated states, on this
    solution's own branch: ``z`` holds them at the nodes).
    """

    def __init__(self, compiled, t: np.ndarray, y: np.ndarray, p: np.ndarray, k: np.ndarray):  # noqa: ANN001
        t, y, p, k = (np.asarray(a, float) for a in (t, y, p, k))
        with np.errstate(all="ignore"):
            compiled = compiled.holding(t, y, p, k)  # its algebraic unknowns start from its own values
            self.z = np.asarray(compiled.algebraic(t, y, p, k), float)
        self.compiled = compiled
        self.layout = compiled.layout
        self.t, self.y, self.p, self.k = t, y, p, k
        with np.errstate(all="ignore"):
            self.maps = np.asarray(compiled.maps(self.p, self.k), float)
        self.points = positions(self.maps)
        self.powers = np.array([self.layout.power(r) for r in range(self.layout.regions)])  # x = c + h t**d
        self._spline = hermite(compiled, self.t, self.y, self.p, self.k)

    @property
    def ends(self) -> tuple[float, float]:
        """The solved interval in the user's variable (a truncated infinite end where placed)."""
        return float(self.points[0]), float(self.points[-1])

    def region(self, x: np.ndarray, side: int = -1) -> np.ndarray:
        """The region each point lies in (at an interface: by ``side``)."""
        x = np.asarray(x, float)
        inner = self.points[1:-1]
        r = np.searchsorted(inner, x, side="left" if side < 0 else "right")
        return np.clip(r, 0, self.layout.regions - 1)

    def standard(self, x: np.ndarray, r: np.ndarray) -> np.ndarray:
        """The standard variable of points ``x`` in regions ``r``."""
        return standard(x, self.maps[r, 0], self.maps[r, 1], self.powers[r])

    def _pick(self, stacked: np.ndarray, r: np.ndarray) -> np.ndarray:
        size = self.layout.region_size
        rows = r[None, :] * size + np.arange(size)[:, None]
        return stacked[rows, np.arange(r.size)[None, :]]

    def __call__(self, x: Any, side: int = -1, regions: np.ndarray | None = None) -> np.ndarray:
        x = np.atleast_1d(np.asarray(x, float))
        r = self.region(x, side) if regions is None else np.asarray(regions)
        return self._pick(self._spline(self.standard(x, r)), r)

    def slopes(self, x: Any, side: int = -1, regions: np.ndarray | None = None) -> np.ndarray:
        """The states' derivatives in the user's variable, from the equations."""
        x = np.atleast_1d(np.asarray(x, float))
        r = self.region(x, side) if regions is None else np.asarray(regions)
        t = nudged(self.standard(x, r), self.powers[r])
        with np.errstate(all="ignore"):
            f = self.compiled.rhs(t, self._spline(t), self.p, self.k)
        return self._pick(f, r) / rate(t, self.maps[r, 1], self.powers[r])[None, :]

    def algebraic(self, x: Any, side: int = -1, regions: np.ndarray | None = None) -> np.ndarray:
        """The algebraic unknowns of a region at ``x``, shape ``(len(layout.algebraic), len(x))``."""
        x = np.atleast_1d(np.asarray(x, float))
        r = self.region(x, side) if regions is None else np.asarray(regions)
        size = len(self.layout.algebraic)
        if not size:
            return np.zeros((0, x.size))
        t = self.standard(x, r)
        with np.errstate(all="ignore"):
            z = np.asarray(self.compiled.algebraic(t, self._spline(t), self.p, self.k), float)
        rows = r[None, :] * size + np.arange(size)[:, None]
        return z[rows, np.arange(r.size)[None, :]]

    def derivative(self, x: Any, side: int = -1, regions: np.ndarray | None = None) -> np.ndarray:
        """The derivative of the interpolating cubic itself (not of the equations) in the user's
        variable: a check that owes nothing to the right-hand side."""
        x = np.atleast_1d(np.asarray(x, float))
        r = self.region(x, side) if regions is None else np.asarray(regions)
        t = nudged(self.standard(x, r), self.powers[r])
        return self._pick(self._spline.derivative()(t), r) / rate(t, self.maps[r, 1], self.powers[r])[None, :]

    def inside(self, x: np.ndarray) -> bool:
        a, b = self.ends
        slack = 1e-12 * max(1.0, abs(a), abs(b))
        return bool(np.isfinite(x).all() and x.min() >= a - slack and x.max() <= b + slack)

    def user_nodes(self) -> tuple[np.ndarray, np.ndarray]:
        """The mesh in the user's variable, region after region (an interface appears twice),
        and the states there, shape ``(states per region + algebraic unknowns, nodes)``."""
        layout = self.layout
        x = physical(self.t, self.maps, layout.stretch).ravel()
        size, held = layout.region_size, len(layout.algebraic)
        y = np.concatenate([self.y[r * size:(r + 1) * size] for r in range(layout.regions)], axis=1)
        if held:  # the algebraic unknowns at the nodes, rows after the states
            y = np.vstack([y, np.concatenate([self.z[r * held:(r + 1) * held] for r in range(layout.regions)], axis=1)])
        return x, y

    def quadrature(self, count: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Gauss-Legendre points of every mesh interval of every region: ``(x, regions, dx)``,
        ``dx`` the weights in the user's variable (a sum of ``f(x) * dx`` integrates ``f``)."""
        nodes, weights = np.polynomial.legendre.leggauss(count)
        h = np.diff(self.t)
        mid = 0.5 * (self.t[1:] + self.t[:-1])
        s = (mid[:, None] + 0.5 * h[:, None] * nodes[None, :]).ravel()
        w = (0.5 * h[:, None] * weights[None, :]).ravel()
        xs, rs, dxs = [], [], []
        for region in range(self.layout.regions):
            c, scale = self.maps[region]
            xs.append(c + scale * s ** self.powers[region])
            rs.append(np.full(s.size, region))
            dxs.append(w * rate(s, scale, self.powers[region]))
        return np.concatenate(xs), np.concatenate(rs), np.concatenate(dxs)

    def far_end(self) -> tuple[np.ndarray, np.ndarray]:
        """The right end of the solved interval and its region, as arrays of one point."""
        return np.array([self.ends[1]]), np.array([self.layout.regions - 1])

    def nodes_text(self, count: int) -> str:
        """The nodes of a solution as its message counts them (per region) and in all."""
        regions = self.layout.regions
        if regions <= 1:
            return f"{count} nodes"
        return f"{count} nodes ({count // regions} in each of its {regions} regions)"
