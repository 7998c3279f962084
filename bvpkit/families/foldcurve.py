"""Fold curves in two parameters: how a fold (an ignition or extinction limit, a separation
point) moves as a second constant changes.

From a fold in the constant ``name`` (found by a trace), the fold is followed as ``along``
changes, by pseudo-arclength on the minimally augmented system (Govaerts 2000, *Numerical
Methods for Bifurcations of Dynamical Equilibria*, SIAM, chapter 4): the collocation
equations ``G(x, lam, mu) = 0`` with both constants as unknowns, and one more equation
``g(x, lam, mu) = 0``, the bordered test function that vanishes where the Jacobian in the
states and parameters ``G_x`` is singular (``arclength.fold_test``). Its gradient needs the
second derivatives of ``G``, taken as central differences of the exact Jacobian
(``arclength.fold_gradient``). Step control, requested values (``at``) and the estimate of
each point (the distance to the exact fold curve, by deferred correction with the bordered
matrix) are as in :mod:`bvpkit.families.continuation`; a point whose estimate misses the tolerance
is carried onto the halved mesh. Where the fold curve turns back in ``along`` (two folds of
an S-shaped branch meet and vanish) a **cusp** is reported.
"""

from __future__ import annotations

import math
import time
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np

from .._output import data_frame, json_ready, write_columns
from ..errors import OptionError, closest
from ..language.problem import Problem
from ..language.units import labelled
from ..methods.base import Outcome, Trial, compare
from ..methods.diagnostics import Attempt, hermite
from ..methods.discrete import CollocationEquations, SingularMatrix
from ..reduce.prepared import Prepared, prepare
from ..solver import plots
from ..solver.driver import Run, options, settle
from ..solver.solution import Solution
from ..status import Status
from . import arclength as arc
from .continuation import (
    MAX_ANGLE,
    MAX_DRIFT,
    _estimate,
    _number,
    _resolve_outputs,
    _Tracer,
    output_values,
    real_constant,
)

_GROW, _SHRINK = 1.5, 0.5
#: Over a positive range of more than two decades (drawn on a log scale) a step changes the
#: second constant by at most this fraction of its value, so the curve is smooth on that scale.
_RATIO = 0.35


class FoldCurve:
    """A fold followed in two constants; see :func:`fold_curve`.

    Attributes
    ----------
    name, along_name : str
        The constant the fold is in, and the one it is followed along.
    along : ndarray, shape (N,)
        Values of ``along`` at the points of the curve, in order along it.
    parameter : ndarray, shape (N,)
        The fold's value of ``name`` there.
    outputs : dict of str to ndarray, shape (N,)
    solutions : list of Solution
        The solution at each fold.
    cusps : list of dict
        Where the curve turns back in ``along`` (``{"along": ..., "parameter": ...}``).
    requested : dict of float to list of Solution
        The folds at the values of ``along`` asked for with ``at``.
    success : bool
    message : str
    """

    def __init__(self, name: str, along: str, outputs: dict[str, str]):
        self.name, self.along_name = name, along
        self._expressions = dict(outputs)
        self._along: list[float] = []
        self._values: list[float] = []
        self._rows: list[dict[str, float]] = []
        self.solutions: list[Solution] = []
        self.cusps: list[dict[str, float]] = []
        self.requested: dict[float, list[Solution]] = {}
        self.success = False
        self.out_of_points = False  # a leg spent its budget of points (max_points)
        self.message = ""
        self.seconds = 0.0

    @property
    def status(self) -> Status:
        """``solved``; ``point_limit`` (a leg spent ``max_points``; every point kept converged);
        or ``not_converged``."""
        if self.success:
            return Status.SOLVED
        return Status.POINT_LIMIT if self.out_of_points else Status.NOT_CONVERGED

    @property
    def along(self) -> np.ndarray:
        return np.array(self._along)

    @property
    def parameter(self) -> np.ndarray:
        return np.array(self._values)

    @property
    def outputs(self) -> dict[str, np.ndarray]:
        return {o: np.array([row[o] for row in self._rows]) for o in self._expressions}

    def _add(self, along: float, value: float, solution: Solution) -> None:
        self._along.append(float(along))
        self._values.append(float(value))
        self.solutions.append(solution)
        self._rows.append(output_values(solution, self._expressions))

    @property
    def error_estimate(self) -> np.ndarray:
        """Per point, the estimated error of the fold's solution (NaN where none was made)."""
        return np.array([_estimate(s) for s in self.solutions], float)

    def table(self) -> dict[str, np.ndarray]:
        """Columns: the second constant, the first at the fold, each output, each point's error estimate."""
        return {self.along_name: self.along, self.name: self.parameter, **self.outputs,
                "error_estimate": self.error_estimate}

    def to_pandas(self) -> Any:
        """:meth:`table` as a pandas DataFrame, one row per point of the curve (the ``tables`` extra)."""
        return data_frame(self.table())

    def to_csv(self, path: str | Path, units: Mapping[str, str] | None = None, independent: str | None = None) -> None:
        """:meth:`table` as CSV; headers labelled with ``units`` when given."""
        write_columns(path, labelled(self.table(), units, independent))

    def as_dict(self) -> dict[str, Any]:
        return json_ready({
            "success": self.success, "status": self.status.word,
            "message": self.message, "parameter_name": self.name, "along_name": self.along_name,
            "along": self.along.tolist(), "parameter": self.parameter.tolist(),
            "outputs": {k: v.tolist() for k, v in self.outputs.items()}, "error_estimate": self.error_estimate.tolist(),
            "cusps": self.cusps, "seconds": self.seconds,
        })

    def summary(self) -> str:
        lines = [f"{'traced' if self.success else 'STOPPED'}: {self.message}"]
        header = [self.along_name, f"{self.name} at fold", *self._expressions, "error"]
        lines.append("  ".join(f"{h:>16s}" for h in header))
        outputs = self.outputs
        errors = self.error_estimate
        for i, (a, v) in enumerate(zip(self._along, self._values)):
            lines.append("  ".join([f"{a:16.10g}", f"{v:16.10g}", *(f"{outputs[o][i]:16.10g}" for o in outputs),
                                    f"{errors[i]:16.2g}"]))
        for c in self.cusps:
            lines.append(f"cusp near {self.along_name} = {c['along']:.8g}, {self.name} = {c['parameter']:.8g}: two "
                         "folds meet and vanish there")
        return "\n".join(lines)

    def plot(self, path: str | Path, **options: Any) -> Any:
        """Draw the fold curve and the outputs along it, cusps marked (``plot`` extra; options of
        :func:`bvpkit.solver.plots.fold_curve_figure`); returns the figure."""

        return plots.fold_curve_figure(self, path, **options)


def fold_curve(
    problem: Any,
    name: str,
    *,
    along: str,
    start: float,
    stop: float,
    outputs: Sequence[str] | None = None,
    tol: float | None = None,
    at: Sequence[float] | None = None,
    search: tuple[float, float] | None = None,
    max_points: int = 200,
    max_angle: float | None = None,
) -> FoldCurve:
    """Follow a fold in the constant ``name`` as the constant ``along`` goes from ``start`` to ``stop``.

    Parameters
    ----------
    problem : Problem or Prepared
    name : str
        The constant the fold is in (the ignition parameter, say).
    along : str
        The second constant (the Biot number, say).
    start, stop : float
        The range of ``along``.
    outputs : sequence of str, optional
        Expressions recorded at each fold (default: the problem's outputs).
    tol : float, optional
        Tolerance of each point (default: the problem's, else 1e-6).
    at : sequence of float, optional
        Values of ``along`` at which to locate the fold exactly.
    search : (float, float), optional
        The range of ``name`` in which a trace looks for the first fold, at the problem's own
        value of ``along`` (or ``start`` when that is outside the range). Default: from the
        problem's value of ``name`` up to a hundred times it (and down, if nothing is found).
    max_points : int
        Upper bound on the points of the curve.
    max_angle : float, optional
        Largest angle (radians) between successive tangents (default 8 degrees).

    Returns
    -------
    FoldCurve
    """

    if not isinstance(problem, Problem | Prepared):
        raise OptionError(f"fold_curve() takes a bvpkit.Problem, got {type(problem).__name__}")
    prepared = prepare(problem)
    for constant in (name, along):
        if constant not in prepared.constants:
            raise OptionError(f"'{constant}' is not a constant of the problem{closest(constant, prepared.constants)}")
        real_constant(prepared, constant)
    if name == along:
        raise OptionError("the fold's constant and the one it is followed along must differ")
    start, stop = _number(start, "start"), _number(stop, "stop")
    if start == stop:
        raise OptionError("start and stop must differ")
    requested = sorted({_number(v, "a value of at") for v in (at or [])})
    angle = MAX_ANGLE if max_angle is None else _number(max_angle, "max_angle")
    tol = options(prepared.settings, {"tol": tol}).tol
    labels = _resolve_outputs(prepared, outputs)
    curve = FoldCurve(name, along, labels)
    started = time.perf_counter()
    mu0 = prepared.constants[along]
    if not min(start, stop) <= mu0 <= max(start, stop):
        mu0 = start
    here = prepared.with_constants(**{along: mu0})
    fold = None
    lam0 = prepared.constants[name]
    ranges = [search] if search is not None else [(lam0 / 10**j if lam0 > 0 else lam0 - j, 100 * max(abs(lam0), 1e-3))
                                                  for j in range(4)]
    for lo, hi in ranges:
        try:
            tracer_branch = _first_fold(here, name, float(lo), float(hi), labels, tol)
        except Exception:  # noqa: BLE001 - a failed search is tried with the next range
            continue
        if tracer_branch is not None and tracer_branch.folds:
            fold = tracer_branch.folds[0]
            break
    if fold is None:
        curve.message = (f"no fold in {name} found at {along} = {mu0:g} (searched {name} from the problem's value "
                         "upward); give search=(lo, hi), a range of it that holds the fold")
        return curve
    follower = _Follower(prepared, name, along, fold, tol, requested, angle, max_points, curve)
    follower.geometric = min(start, stop) > 0 and max(start, stop) / min(start, stop) > 100
    try:
        follower.run(start, stop)
    except SingularMatrix as exc:  # a last guard: the steps handle it where they can go on
        curve.success = False
        curve.message = (f"stopped: a linear system of the fold curve was singular ({exc}); "
                         "the curve may end there (a cusp meets a branch point?)")
    curve.seconds = time.perf_counter() - started
    return curve


def _first_fold(problem: Prepared, name: str, lo: float, hi: float, labels: dict, tol: float):  # noqa: ANN202
    """A trace of ``name`` from ``lo`` up to ``hi`` that stops at its first fold."""
    tracer = _Tracer(problem, name, lo, hi, labels, tol, None, None, 200, False)
    tracer.first_fold_only = True
    branch = tracer.run()
    return branch


class _Follower:
    """Pseudo-arclength along the fold curve (see the module docstring)."""
    def __init__(self, prepared: Prepared, name: str, along: str, fold, tol: float, requested: list[float],  # noqa: ANN001
                 angle: float, max_points: int, curve: FoldCurve):
        self.prepared, self.name, self.along, self.tol = prepared, name, along, tol
        self.requested, self.max_angle, self.max_points, self.curve = requested, angle, max_points, curve
        self.compiled = prepared.compiled
        self.free = self.compiled.freeing(name, along)
        self.one = self.compiled.freeing(name)
        view = fold.solution.interpolant
        self.t, self.k = view.t, view.k.copy()
        mu = float(self.k[self.compiled.layout.constants.index(along)])
        self.z0 = np.concatenate([view.y.T.ravel(), view.p, [fold.parameter, mu]])
        self.b = self.c = None

    # -- the augmented system -----------------------------------------------------------
    def _borders(self, eq: CollocationEquations, z: np.ndarray) -> None:
        """``b``: the column of the fold's constant (outside the range of ``G_x`` at a simple
        fold); ``c``: the null vector of ``G_x`` there (the one-parameter tangent's states)."""
        jac = eq.jacobian(z).tocsc()
        inner = jac.shape[1] - 2
        self.b = np.asarray(jac[:, inner].todense()).ravel()
        one = CollocationEquations(self.one, eq.x, self._k(z))
        guess = np.zeros(z.size - 1)
        guess[-1] = 1.0
        t, _ = arc.tangent(one, z[:-1], guess)
        self.c = t[:-1] / max(float(np.max(np.abs(t[:-1]))), 1e-300)

    def _extra(self, eq: CollocationEquations):  # noqa: ANN202
        import scipy.sparse as sparse

        def extra(z: np.ndarray):  # noqa: ANN202
            g, v, w = arc.fold_test(eq, z, 2, self.b, self.c)
            gradient = arc.fold_gradient(eq, z, 2, v, w)
            return np.array([g]), sparse.csr_matrix(gradient.reshape(1, -1))

        return extra

    def _k(self, z: np.ndarray) -> np.ndarray:
        k = self.k.copy()
        layout = self.compiled.layout
        k[layout.constants.index(self.name)] = z[-2]
        k[layout.constants.index(self.along)] = z[-1]
        return k

    # -- following ------------------------------------------------------------------------
    def run(self, start: float, stop: float) -> None:
        curve = self.curve
        eq = CollocationEquations(self.free, self.t, self.k)
        self._borders(eq, self.z0)
        extra = self._extra(eq)
        z, _ = arc.correct(eq, self.z0, self._unit_along(eq), self.tol, extra)
        if z is None:
            curve.message = f"the fold found at {self.along} = {self.z0[-1]:g} could not be followed"
            return
        mu0 = float(z[-1])
        self.bounds = (min(start, stop), max(start, stop))
        forward = self._leg(eq, z, stop, extra, 1.0) if stop != mu0 else []
        backward = self._leg(eq, z, start, extra, -1.0) if start != mu0 else []
        first = self._point(eq, z, 0.0)
        if any(abs(r - mu0) <= 1e-12 * max(1.0, abs(r)) for r in self.requested):
            first = (*first[:4], mu0)
        points = sorted([*backward, first, *forward], key=lambda item: item[0])
        for _, along, value, sol, requested in points:
            curve._add(along, value, sol)
            if requested is not None:
                curve.requested.setdefault(requested, []).append(sol)
        curve.cusps.sort(key=lambda c: c["along"])
        ends = [p[1] for p in points]

        def hit(value: float) -> bool:
            return any(abs(e - value) <= 1e-12 * max(1.0, abs(value)) for e in ends)

        curve.success = bool((hit(start) and hit(stop) or curve.cusps) and not self.failed)
        cusps = "; ".join(f"it turned back at a cusp near {self.along} = {c['along']:.6g}" for c in curve.cusps)
        curve.message = self.failed or (f"followed the fold in {self.name} from {self.along} = {min(ends):.6g} to "
                                        f"{max(ends):.6g} in {len(points)} points" + (f"; {cusps}" if cusps else ""))

    failed = ""
    geometric = False
    bounds = (-math.inf, math.inf)

    def _unit_along(self, eq: CollocationEquations) -> np.ndarray:
        d = np.zeros(eq.n * eq.m + eq.n_p)
        d[-1] = 1.0
        return d

    def _leg(self, eq: CollocationEquations, z: np.ndarray, end: float, extra, leg: float) -> list:  # noqa: ANN001
        """Arclength steps from ``z`` until ``along`` passes ``end``: ``(s, along, value, sol, requested)``
        each, ``s`` the arclength from the start of the curve, negative on the leg traced backwards."""
        # the borders of this leg's own mesh (the other leg may have refined its mesh and borders)
        self._borders(eq, z)
        sign = 1.0 if end > z[-1] else -1.0
        guess = self._unit_along(eq) * sign
        tangent, _ = arc.tangent(eq, z, guess, extra)
        ds = 0.05 * math.sqrt(float(np.sum(eq.weights * z * z)) + 1.0)
        floor = ds * 1e-6
        points: list = []
        s = 0.0
        while len(points) < self.max_points:
            predicted = z + ds * tangent
            z_new, its = arc.correct(eq, predicted, tangent, self.tol, extra)
            reason = None
            if z_new is not None:
                try:
                    t_new, _ = arc.tangent(eq, z_new, tangent, extra)
                except SingularMatrix:
                    z_new, reason = None, "the bordered Jacobian was singular there"
            if z_new is None:
                reason = reason or "the corrector did not converge"
            else:
                drift = arc.norm(eq, z_new - predicted) / max(ds, 1e-300)
                turn = self._angle(eq, tangent, t_new)
                if turn > self.max_angle or drift > MAX_DRIFT:
                    reason = "the step turned too sharply"
                elif self.geometric and abs(z_new[-1] - z[-1]) > _RATIO * abs(z[-1]):
                    reason = "the step is long for a range drawn on a log scale"
            if reason is not None:
                ds *= _SHRINK
                if ds < floor:
                    self.failed = (f"the fold curve's step fell below its floor near {self.along} = {float(z[-1]):.6g} "
                                   f"({reason})")
                    return points
                continue
            mu_old, mu_new = float(z[-1]), float(z_new[-1])
            for r in [r for r in self.requested if min(mu_old, mu_new) <= r <= max(mu_old, mu_new)
                      and r != mu_old and abs(r - self.z0[-1]) > 1e-12 * max(1.0, abs(r))]:
                at = self._at_value(eq, z, z_new, r, extra)
                if at is not None:
                    points.append((leg * (s + ds * (r - mu_old) / (mu_new - mu_old or 1.0)), r, float(at[-2]),
                                   self._solution(eq, at), r))
            s += ds
            lo, hi = self.bounds
            if not lo <= mu_new <= hi:  # past an end of the range (the far one, or after a cusp the near one)
                edge = hi if mu_new > hi else lo
                last = self._at_value(eq, z, z_new, edge, extra)
                if last is not None:
                    points.append((leg * s, edge, float(last[-2]), self._solution(eq, last), None))
                return points
            sol = self._solution(eq, z_new)
            if sol.diagnostics.error_estimate > self.tol:
                finer, z_fine = self._halved(eq, z_new)
                if z_fine is not None:
                    coarse_x = eq.x
                    eq, z_new = finer, z_fine
                    extra = self._extra(eq)
                    self._borders(eq, z_new)
                    t_new, _ = arc.tangent(eq, z_new, arc.carry(tangent, eq.n, coarse_x, eq.x), extra)
                    sol = self._solution(eq, z_new)
            points.append((leg * s, mu_new, float(z_new[-2]), sol, None))
            if t_new[-1] * tangent[-1] < 0:
                self.curve.cusps.append({"along": mu_new, "parameter": float(z_new[-2])})
            z, tangent = z_new, t_new
            ds = ds * _GROW if its <= 3 and turn < self.max_angle / 2 else ds * (_SHRINK if its >= 8 else 1.0)
        self.curve.out_of_points = True
        self.failed = (f"stopped at {self.along} = {float(z[-1]):.6g} ({self.name} = {float(z[-2]):.6g} at the fold), "
                       f"on the way to {self.along} = {end:g}: its budget of max_points = {self.max_points} points "
                       "is spent (raise max_points to go further)")
        return points

    def _angle(self, eq: CollocationEquations, u: np.ndarray, v: np.ndarray) -> float:
        c = arc.inner(eq, u, v) / max(arc.norm(eq, u) * arc.norm(eq, v), 1e-300)
        return math.acos(max(-1.0, min(1.0, c)))

    def _at_value(self, eq: CollocationEquations, z0: np.ndarray, z1: np.ndarray, value: float, extra):  # noqa: ANN001
        """The fold at exactly ``along = value``, corrected from the chord between two points."""
        w = (value - z0[-1]) / (z1[-1] - z0[-1]) if z1[-1] != z0[-1] else 1.0
        predicted = z0 + w * (z1 - z0)
        predicted[-1] = value
        z, _ = arc.correct(eq, predicted, self._unit_along(eq), self.tol * 1e-2, extra)
        return z

    def _halved(self, eq: CollocationEquations, z: np.ndarray):  # noqa: ANN202
        x = eq.x
        fine_x = np.sort(np.concatenate([x, 0.5 * (x[1:] + x[:-1])]))
        y, pz = eq.split(z)
        fine = CollocationEquations(self.free, fine_x, eq.k)
        start = fine.join(hermite(self.free, x, y, pz, eq.k)(fine_x), pz)
        self._borders(fine, start)
        z_fine, _ = arc.correct(fine, start, self._unit_along(fine), self.tol, self._extra(fine))
        return fine, z_fine

    def _point(self, eq: CollocationEquations, z: np.ndarray, s: float) -> tuple:
        return (s, float(z[-1]), float(z[-2]), self._solution(eq, z), None)

    def _solution(self, eq: CollocationEquations, z: np.ndarray) -> Solution:
        """The fold at ``z`` as a Solution; its estimate is the distance to the exact fold
        (the defect solved with the bordered one-parameter matrix, regular at the fold)."""
        y, pz = eq.split(z)
        k = self._k(z)
        p = pz[:-2]
        one = CollocationEquations(self.one, eq.x, k)
        z1 = z[:-1]
        estimate, reference = math.nan, None
        with np.errstate(all="ignore"):
            try:
                guess = np.zeros(z1.size)
                guess[-1] = 1.0
                t, _ = arc.tangent(one, z1, guess)
                lu = arc.Bordered(one, z1, t)
                parts = one.parts(y, pz[:-1])
                x2, y2, p2 = one.defect_correction(y, pz[:-1], parts, lu)
                trial = Trial(self.one, eq.x, y, pz[:-1], k, self.tol)
                estimate, _ = compare(Outcome(Status.SOLVED, "", eq.x, y, pz[:-1]),
                                      Outcome(Status.SOLVED, "", x2, y2, p2), trial)
                reference = Outcome(Status.SOLVED, "deferred correction", x2, y2, p2[:-1])
            except (RuntimeError, ValueError, np.linalg.LinAlgError):
                pass
        attempt = Attempt("fold curve", "a fold followed in two constants", "solved", "converged", 0, eq.m, 0.0,
                          (0.0, 1.0), estimate)
        outcome = Outcome(Status.SOLVED, f"fold at {self.name} = {float(z[-2]):.10g}, {self.along} = {float(z[-1]):.10g}",
                          eq.x, y, p, error_estimate=estimate if math.isfinite(estimate) else None, method="fold curve",
                          reference=reference)
        # at a fold the problem at a fixed value is singular by definition: its stability
        # constant says nothing about this point, which the bordered system fixes well
        outcome.condition = math.nan
        here = self.prepared.with_constants(**{self.name: float(z[-2]), self.along: float(z[-1])})
        return settle(here, Run(outcome, k, [attempt], "a fold followed in two constants", self.tol, here.independent),
                      0.0)

