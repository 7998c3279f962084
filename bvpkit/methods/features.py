"""Narrow features of the equations, found before a solve.

A source of width ``1e-4`` in a rod of length 1 (``y'' = -A exp(-((x - c)/w)**2)``) lies
between every sample a method takes on its first mesh: the methods then see ``y'' = 0``,
converge at once to ``y = 0`` and estimate an error of round-off, a confident wrong answer.
Terms that depend on the independent variable alone (sources, coefficients, forcing) can be
examined before the solve, cheaply and without the solution:

* at preparation (:func:`bvpkit.reduce.prepared.feature_terms`, SymPy's work once per problem
  structure), every term of
  the standard form's right-hand side that can make a narrow feature and holds no state is
  collected with its *argument*: ``exp``, ``tanh``, ``erf``, ``erfc``, ``atan``, ``log`` and
  fractional or negative powers (their argument ``u``), ``abs``, ``sign``, steps, ``min`` and
  ``max`` (``u`` the difference of the two sides: a corner where it is zero). Both are
  compiled into one program of ``(t, p, k)``;
* before each solve (:func:`locate`), the arguments are sampled on a grid of the standard
  variable: a feature sits where an argument passes through zero or has an extremum (the
  centre of ``exp(-((x - c)/w)**2)`` is the maximum of its argument, smooth and wide
  whatever ``w``), and at the ends (a layer of the forcing). Each such point is located by
  bisection or golden section on the argument (to round-off, however narrow the feature),
  and the width of the term itself is read by zooming in geometrically: the distance at
  which it has changed by a tenth of its whole change nearby.

What a method does with them: the first mesh holds points graded into each narrow feature
(:func:`seeded`); the integrators of shooting stop at each corner and take steps no longer
than a feature's width across it (:func:`pieces`); and a success whose final mesh does not
hold a feature (:func:`unresolved`) is no success (the driver says so).

Not covered: features that appear only through the solution (a layer of the solution, a
corner of ``abs(y - 1)``): they depend on a solution not yet known; the methods' own error
control and the checks of their estimates are what catch those.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..programs.compiled import build_quantity

#: Samples of the arguments over the standard variable ``[0, 1]``.
_SAMPLES = 2049
#: A term narrower than this (in the standard variable) is a feature: collocation's first mesh
#: has a spacing of 1/40, and follows by itself what spans a few of its intervals.
NARROW = 0.01
#: Zoom distances ``2**-2 ... 2**-52`` from a candidate point.
_ZOOM = 2.0 ** -np.arange(2, 53)
#: The width of a term: the distance at which it has changed by this part of its whole change.
_SHARE = 0.1
#: Features below this width (in the standard variable, relative to the position) cannot be
#: seeded into a mesh of doubles: points that close to each other are rounded together.
_FINEST = 1e-13
#: At most this many candidate points per argument; more is an oscillation, not a feature.
_PER_TERM = 50
#: At most this many terms are examined.
MAX_TERMS = 64
#: Steps of bisection and golden section (each bracket starts within one sample interval).
_BISECTIONS = 52
_GOLDEN = 64
#: A feature's window, in widths, on either side of its centre: seeded points and the
#: integrators' short steps cover it.
_WINDOW = 16.0


@dataclass(frozen=True)
class Feature:
    """A narrow feature or a corner of the equations, in the standard variable ``t``.

    Attributes
    ----------
    centre : float
        Where it is (``t`` in ``[0, 1]``).
    width : float
        The distance from ``centre`` at which the term has changed by a tenth of its change
        nearby (within a factor of two); ``math.inf`` for a corner.
    corner : bool
        A corner or step (``abs``, ``min``, ``max``, ``sign``, a step function): a node and an
        integrator's breakpoint belong exactly there (its width is ``math.inf``).
    """

    centre: float
    width: float
    corner: bool = False

    @property
    def narrow(self) -> bool:
        return self.width < NARROW

    @property
    def representable(self) -> bool:
        """Whether points a width apart around the centre are distinct doubles."""
        return self.width >= _FINEST * max(1.0, abs(self.centre))


# -- before a solve (no SymPy) ------------------------------------------------------------
_FUNCTIONS: dict[str, Any] = {}
_FOUND: dict[tuple, tuple[dict, tuple[Feature, ...]]] = {}


def _function(program: dict):  # noqa: ANN202
    key = json.dumps(program, sort_keys=True)
    function = _FUNCTIONS.get(key)
    if function is None:
        if len(_FUNCTIONS) > 500:
            _FUNCTIONS.clear()
        function = _FUNCTIONS[key] = build_quantity(program)
    return function


def locate(found: dict | None, p: np.ndarray, k: np.ndarray) -> tuple[Feature, ...]:
    """The narrow features and corners of the terms ``found`` (:func:`bvpkit.reduce.prepared.feature_terms`) at these values of
    the parameters and constants, in order of position (a cheap search; see the module
    docstring). Never raises: a term that cannot be evaluated is passed over."""
    if not found:
        return ()
    p, k = np.asarray(p, float), np.asarray(k, float)
    key = (id(found), p.tobytes(), k.tobytes())
    known = _FOUND.get(key)
    if known is not None and known[0] is found:  # the same terms (an id is reused only once they are gone)
        return known[1]
    try:
        with np.errstate(all="ignore"):
            result = _locate(_function(found["program"]), list(found["corner"]), p, k)
    except (ValueError, TypeError, KeyError, ArithmeticError, IndexError):
        result = ()
    if len(_FOUND) > 256:
        _FOUND.clear()
    _FOUND[key] = (found, result)
    return result


def _locate(function, corner: list[bool], p: np.ndarray, k: np.ndarray) -> tuple[Feature, ...]:  # noqa: ANN001
    count = len(corner)

    def values(t: np.ndarray) -> np.ndarray:
        out = np.asarray(function(np.asarray(t, float), p, k), float)
        return np.broadcast_to(out, (2 * count, np.size(t)))

    t = np.linspace(0.0, 1.0, _SAMPLES)
    sampled = values(t)
    points: list[float] = []
    terms: list[int] = []
    kinks: list[bool] = []
    for j in range(count):
        u = sampled[2 * j]
        finite = np.isfinite(u)
        if not finite.any():
            continue
        zeros = list(t[(u == 0) & finite])
        sign = np.sign(u)
        crossing = np.flatnonzero((sign[:-1] * sign[1:] < 0) & finite[:-1] & finite[1:])
        slope = np.sign(np.diff(u))
        turning = np.flatnonzero((slope[:-1] * slope[1:] < 0) & finite[:-2] & finite[1:-1] & finite[2:])
        if len(zeros) + crossing.size + turning.size > _PER_TERM:
            continue  # an oscillating argument: no localised feature
        roots = _bisect(lambda s, j=j: values(s)[2 * j], t[crossing], t[crossing + 1]) if crossing.size else []
        extrema = _golden(lambda s, j=j: values(s)[2 * j], t[turning], t[turning + 2],
                          maximum=slope[turning] > 0) if turning.size else []
        for c in [*zeros, *roots, *extrema, 0.0, 1.0]:
            points.append(float(c))
            terms.append(j)
        # a corner term's corners are the zeros of its argument
        kinks += [corner[j]] * (len(zeros) + len(roots)) + [False] * (len(extrema) + 2)
    if not points:
        return ()
    features = _widths(values, np.array(points), np.array(terms), kinks)
    return _merged(features)


def _bisect(u, a: np.ndarray, b: np.ndarray) -> list[float]:  # noqa: ANN001
    """Roots of ``u`` in the brackets ``[a, b]`` (a sign change in each)."""
    a, b = a.astype(float).copy(), b.astype(float).copy()
    ua = np.sign(u(a))
    for _ in range(_BISECTIONS):
        middle = 0.5 * (a + b)
        same = np.sign(u(middle)) == ua
        a, b = np.where(same, middle, a), np.where(same, b, middle)
    return list(0.5 * (a + b))


def _golden(u, a: np.ndarray, b: np.ndarray, maximum: np.ndarray) -> list[float]:  # noqa: ANN001
    """Extrema of ``u`` in the brackets ``[a, b]`` (maxima where ``maximum``), by golden section."""
    ratio = (math.sqrt(5.0) - 1.0) / 2.0
    sign = np.where(maximum, -1.0, 1.0)  # minimise sign * u
    a, b = a.astype(float).copy(), b.astype(float).copy()
    for _ in range(_GOLDEN):
        c, d = b - ratio * (b - a), a + ratio * (b - a)
        left = sign * u(c) <= sign * u(d)
        a, b = np.where(left, a, c), np.where(left, d, b)
    return list(0.5 * (a + b))


def _widths(values, points: np.ndarray, terms: np.ndarray, kinks: list[bool]) -> list[Feature]:  # noqa: ANN001
    """The width of each term at each candidate point, by zooming in on it (``kinks``: the
    candidate is a corner of its term)."""
    zoom = _ZOOM[None, :]
    right, left = points[:, None] + zoom, points[:, None] - zoom
    inside_right, inside_left = right <= 1.0, left >= 0.0
    where = np.concatenate([points, np.clip(right, 0.0, 1.0).ravel(), np.clip(left, 0.0, 1.0).ravel()])
    rows = 2 * terms + 1
    every = values(where)
    m, z = points.size, _ZOOM.size
    centre = every[rows, np.arange(m)]
    at_right = every[rows[:, None], m + np.arange(m * z).reshape(m, z)]
    at_left = every[rows[:, None], m + m * z + np.arange(m * z).reshape(m, z)]
    change = np.fmax(np.where(inside_right, np.abs(at_right - centre[:, None]), np.nan),
                     np.where(inside_left, np.abs(at_left - centre[:, None]), np.nan))
    features = []
    for i in range(m):
        row = change[i]
        if not math.isfinite(centre[i]) or not np.all(np.isfinite(row[~np.isnan(row)])):
            continue  # a pole or an overflow: a singular term, not a feature to seed
        whole = np.nanmax(row) if np.any(~np.isnan(row)) else 0.0
        is_corner = kinks[i] and 0.0 < points[i] < 1.0
        if not whole > 0.0 and not is_corner:
            continue
        if is_corner:  # a corner or a step: a node and a breakpoint there, whatever the width
            features.append(Feature(float(points[i]), math.inf, True))
            continue
        reached = np.flatnonzero(row >= _SHARE * whole)  # zoom distances from large to small
        width = float(_ZOOM[reached[-1]]) if reached.size else float(_ZOOM[-1])
        if width < NARROW:
            features.append(Feature(float(points[i]), width))
    return features


def _merged(features: list[Feature]) -> tuple[Feature, ...]:
    """One feature per place: narrow ones within a width of each other merged (the narrower
    width kept), and anything within round-off of a corner taken into the corner."""
    out: list[Feature] = []
    for f in sorted(features, key=lambda f: f.centre):
        if out:
            last = out[-1]
            distance = abs(f.centre - last.centre)
            both_narrow = f.narrow and last.narrow
            if distance <= 1e-14 or (both_narrow and distance <= min(f.width, last.width)):
                centre = last.centre if last.corner or not f.corner else f.centre
                out[-1] = Feature(centre, min(last.width, f.width), last.corner or f.corner)
                continue
        out.append(f)
    return tuple(out)


# -- what the methods do with them --------------------------------------------------------
def _grading(width: float, spacing: float) -> np.ndarray:
    """Offsets from a feature's centre: a few points per width across it, then spacing that
    grows by 1.5 until it reaches ``spacing``."""
    offsets = [0.0, 0.5, 1.0, 1.5, 2.0, 3.0, 4.0]
    step = 1.0
    while offsets[-1] * width < 4 * spacing and step * width < spacing:
        step *= 1.5
        offsets.append(offsets[-1] + step)
    out = np.array(offsets) * width
    return np.concatenate([-out[:0:-1], out])


def seeded(t: np.ndarray, features: tuple[Feature, ...], limit: int | None = None) -> np.ndarray:
    """The mesh ``t`` with points graded into every narrow feature, and the corners as nodes
    (ends kept; strictly increasing). Features whose points would push the mesh past
    ``limit`` nodes are left out (the check after the solve says so)."""
    t = np.asarray(t, float)
    if not features:
        return t
    added = []
    for f in features:
        if f.narrow and f.representable:
            j = int(np.clip(np.searchsorted(t, f.centre), 1, t.size - 1))
            spacing = float(t[j] - t[j - 1])
            added.append(f.centre + _grading(f.width, spacing))
        elif f.corner:
            added.append(np.array([f.centre]))
    if not added:
        return t
    extra = np.concatenate(added)
    extra = extra[(extra > t[0]) & (extra < t[-1])]
    mesh = np.unique(np.concatenate([t, extra]))
    # points closer than round-off to a neighbour are one point
    gap = np.diff(mesh) > 1e-15 * np.maximum(1.0, np.abs(mesh[1:]))
    mesh = mesh[np.concatenate([[True], gap])]
    if mesh[-1] != t[-1]:
        mesh[-1] = t[-1]
    if limit is not None and mesh.size > limit:
        return t
    return mesh


def pieces(features: tuple[Feature, ...], starts: np.ndarray, lengths: np.ndarray) -> list[tuple[float, float, float]]:
    """Pieces ``(tau_a, tau_b, max_step)`` of the segment variable ``tau`` in ``[0, 1]`` (segment
    ``j`` covers ``t = starts[j] + tau lengths[j]``) for an integrator that carries every
    segment at once: it stops at each corner, and across each narrow feature takes steps no
    longer than its width. One piece ``(0, 1, inf)`` when there is nothing to respect."""
    edges = {0.0, 1.0}
    windows = []
    for f in features:
        for start, length in zip(starts, lengths):
            tau = (f.centre - start) / length
            if f.corner and 0.0 < tau < 1.0:
                edges.add(float(tau))
            if f.narrow and f.representable:
                half = _WINDOW * f.width / length
                a, b = max(0.0, tau - half), min(1.0, tau + half)
                if a < b:
                    windows.append((a, b, f.width / length))
                    edges.update((a, b))
    cuts = sorted(edges)
    out = []
    for a, b in zip(cuts[:-1], cuts[1:]):
        if b - a <= 1e-15:
            continue
        step = min((w for lo, hi, w in windows if lo < b and hi > a), default=math.inf)
        out.append((a, b, step))
    return out or [(0.0, 1.0, math.inf)]


def unresolved(x: np.ndarray, features: tuple[Feature, ...]) -> Feature | None:
    """The first narrow feature the mesh ``x`` does not resolve (fewer than three nodes within
    two widths of its centre), or None."""
    x = np.asarray(x, float)
    for f in features:
        if not f.narrow:
            continue
        inside = np.count_nonzero(np.abs(x - f.centre) <= 2.0 * f.width)
        if inside < 3:
            return f
    return None


def words(feature: Feature, place, scale: float) -> str:  # noqa: ANN001 - place: (t) -> str
    """The feature in the user's words: where (``place(t)``) and how wide (``scale``: the length
    of the region in the user's variable)."""
    return (f"a narrow feature (a term in the independent variable alone) near {place(feature.centre)}, about "
            f"{feature.width * scale:.2g} wide")
