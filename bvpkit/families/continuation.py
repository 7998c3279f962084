"""Continuation: trace a solution family through a parameter, around folds and through branch points.

Two steppers, switched automatically, on the prepared problem (every class ``solve`` takes):

* **natural** steps in the parameter, each a solve at that value (the selector, error
  estimate and diagnostics at every point; the method that worked at the last point is
  tried first), started from a secant prediction;
* **pseudo-arclength** steps (Keller 1977) on the collocation equations of the mesh of the
  last point, the parameter one more unknown (``CompiledSystem.freeing``), bordered by the
  arclength equation (``arclength.py``). Each arclength point carries collocation's
  deferred-correction error estimate; one whose estimate misses the tolerance is solved
  again at its parameter value with mesh refinement, and the steps go on on that mesh.

**Step control by the branch's geometry.** A step is accepted only when the branch as it is
drawn turns by at most ``max_angle`` (default :data:`MAX_ANGLE`, 8 degrees) at the last point
-- in the plane of each traced output against the parameter, both scaled to their spread so
far (at least 5% of the range asked for, and of an output's size), as a plot scales them -- when the angle between the new secant (or tangent) and the previous one in the
solution's own weighted norm is within the same bound, and when the corrector moved the
predicted point by at most :data:`MAX_DRIFT` of the step; otherwise the step is halved. A
plot of the outputs against the parameter turns by at most about 8 degrees at each point
(but at branch points); where the finished branch, scaled to its final ranges, still turns
more, points are added halfway along the chord (``"between"``). Steps grow by half after
easy, straight steps. Below a floor (:data:`FLOOR` of the range for
natural steps, a millionth of the first arclength step) the trace stops and says where.

**Folds** are sign changes of the tangent's parameter component, located by secant steps
on that component along the arclength, on the mesh and on the halved mesh (their
difference is the reported error). **Branch points** are sign changes of the determinant of
the bordered Jacobian ``[G_z; t]`` (regular at folds, singular at branch points), located
by bracketed secant steps on a bordered test function (``arclength.branch_test``) and refined on
halved meshes until two successive meshes agree to the tolerance; the trace then switches
onto the other branch (along the null vector) unless ``branch_switching=False``.

**Infinite domains.** The truncation length is chosen once, by the first point's solve,
and held; after each point a cheap far-field check (the change of each state, or of its
slope, over the last tenth of the truncated domain) runs, and only when it exceeds the tolerance is the
point solved again on a domain half as long again and compared; infinity moves out only
when that comparison asks for it.

**Requested points** (``at``) are solved at exactly those values, on every part of the
branch that passes them (both sides of a fold).
"""

from __future__ import annotations

import math
import time
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from .._output import data_frame, json_ready, output_labels, progress_bar, write_columns
from ..errors import OptionError, closest
from ..language.problem import Problem
from ..language.units import labelled
from ..methods.base import Outcome, Trial, compare
from ..methods.diagnostics import Attempt, hermite
from ..methods.discrete import CollocationEquations, SingularMatrix
from ..reduce.mapping import Start, positions
from ..reduce.prepared import Prepared, prepare
from ..solver import plots
from ..solver.driver import Run, options, settle, solve, solve_at
from ..solver.solution import Solution
from ..status import Status
from . import arclength as arc
from .stability import stable

_GROW, _SHRINK = 1.5, 0.5
_TURNING = 0.3  # |d lam / ds| (lam in its size, _size) below this: the branch is turning, step in arclength
_STRAIGHT = 0.6  # |d lam / ds| (the same) above this (after a fold or a branch switch): back to natural steps
#: Largest angle between successive secants or tangents of an accepted step (radians).
MAX_ANGLE = math.radians(8.0)
#: Largest distance of the corrected point from the predicted one, relative to the step.
MAX_DRIFT = 0.2
#: Smallest natural step, relative to the range: below it the trace switches to arclength steps.
FLOOR = 1e-7
#: Most halvings in a row of a natural step (log2(1/FLOOR) is 23): a step that keeps failing
#: is given up after this many solves, whatever it started from.
MAX_HALVINGS = 24
#: A natural step's solve may refine its mesh up to this many times the last point's nodes
#: (at least _MESH_LEAST): a step past a fold has no solution, and its Newton iterations on
#: ever finer meshes up to the global limit cost more than the rest of a trace (two such
#: steps took 4.4 s of an 8.6 s Bratu trace); a step that only needs more nodes is retried
#: without the bound.
_MESH_ROOM, _MESH_LEAST = 8, 400
#: A fold predicted within this part of the natural step hands over to arclength before the
#: step is tried (from the change of the tangent's parameter component along the branch).
_FOLD_AHEAD = 1.2
#: Folds that close in on one value, each gap at most this part of the one before (in three
#: gaps running), make a spiral: the branch winds through ever more folds towards a limit
#: point (a singular solution), and the trace ends there, saying so.
_SPIRAL_RATIO, _SPIRAL_FOLDS = 0.6, 4
#: A chord shorter than this fraction of the finished drawing shows no bend a reader can see:
#: its angles are round-off, and no point is added on it.
SHORTEST_CHORD = 1e-4
#: Points closer than this fraction of the finished drawing to the point before them carry
#: nothing new (a requested value met twice by round-off): the later one is dropped.
SAME_POINT = 1e-6
_OUTPUT_FLOOR = 0.05  # an output's scale in the drawn plane: its spread so far, at least 5% of its size
_SETTLED = 4  # points on a branch before its drawn angle is checked while tracing


@dataclass
class Fold:
    """A located fold (turning point) of the branch.

    Attributes
    ----------
    parameter : float
        Value of the parameter at the fold.
    outputs : dict of str to float
        The requested outputs at the fold.
    error : float
        Estimated error of ``parameter`` (fold on the mesh against the halved mesh).
    index : int
        The fold lies between branch points ``index - 1`` and ``index``.
    solution : Solution
    """

    parameter: float
    outputs: dict[str, float]
    error: float
    index: int
    solution: Solution = field(repr=False)


@dataclass
class BranchPoint(Fold):
    """A located simple branch point (bifurcation), with the fields of :class:`Fold`;
    ``error`` is the difference between its location on the two finest meshes used, and
    ``switched`` says whether the trace went on along the other branch from here."""

    switched: bool = False


class Branch:
    """A traced solution family; see :func:`trace`.

    Attributes
    ----------
    name : str
        The parameter traced.
    parameter : ndarray, shape (N,)
    outputs : dict of str to ndarray, shape (N,)
    solutions : list of Solution
    folds : list of Fold
    branch_points : list of BranchPoint
    requested : dict of float to list of Solution
        The solutions at the values asked for with ``at`` (one per part of the branch that
        passes the value).
    success : bool
    message : str
    steps : list of str
        ``"natural"``, ``"arclength"``, ``"requested"``, ``"branch point"`` or ``"between"``
        (added after the trace where the drawn branch turned sharply) for each point.
    truncation : list of float or None
        Where infinity stood at each point (None for a finite domain).
    stability : list of bool or None
        Per point, whether it is a stable steady state (``trace(..., stability=True)``;
        None where not judged or where the reading does not apply).
    """

    def __init__(self, name: str, outputs: dict[str, str]):
        self.name = name
        self._outputs = list(outputs)
        self._expressions = dict(outputs)
        self.solutions: list[Solution] = []
        self.steps: list[str] = []
        self._values: list[float] = []
        self._rows: list[dict[str, float]] = []
        self.folds: list[Fold] = []
        self.branch_points: list[BranchPoint] = []
        self.requested: dict[float, list[Solution]] = {}
        self.stability: list[bool | None] = []
        self._judge = False  # whether points are judged stable (trace(..., stability=True))
        self.success = False
        self.interrupted = False
        self.out_of_points = False  # stopped by its budget of points (max_points)
        self.message = ""
        self.seconds = 0.0

    @property
    def status(self) -> Status:
        """``solved``; ``interrupted``; ``point_limit`` (stopped by ``max_points``, every point
        kept converged); or ``not_converged`` (a step could not go on)."""
        if self.success:
            return Status.SOLVED
        if self.interrupted:
            return Status.INTERRUPTED
        return Status.POINT_LIMIT if self.out_of_points else Status.NOT_CONVERGED

    @property
    def parameter(self) -> np.ndarray:
        return np.array(self._values)

    @property
    def outputs(self) -> dict[str, np.ndarray]:
        return {o: np.array([row[o] for row in self._rows]) for o in self._outputs}

    @property
    def truncation(self) -> list[float | None]:
        return [s.diagnostics.truncation_length for s in self.solutions]

    def _add(self, value: float, solution: Solution, how: str, outputs: np.ndarray | None = None) -> None:
        """Append a point; ``outputs``: its outputs when already evaluated (in ``_outputs`` order)."""
        self._values.append(float(value))
        self.solutions.append(solution)
        self.steps.append(how)
        self.stability.append(stable(solution) if self._judge else None)
        if outputs is not None:
            self._rows.append(dict(zip(self._outputs, (float(v) for v in outputs))))
            return
        self._rows.append(output_values(solution, self._expressions))

    def _insert(self, index: int, value: float, solution: Solution, how: str) -> None:
        """Put a point at ``index`` (a point added between two others to smooth the drawing)."""
        self._add(value, solution, how)
        for items in (self._values, self.solutions, self.steps, self.stability, self._rows):
            items.insert(index, items.pop())
        for found in (*self.folds, *self.branch_points):
            if found.index >= index:
                found.index += 1

    def _thin(self) -> None:
        """Drop every point closer than :data:`SAME_POINT` of the drawing (outputs against the
        parameter, each scaled to its spread) to the point before it; of two such points the
        one reached by a plain step goes, a requested one stays."""
        if len(self._values) < 2:
            return
        rows = np.array([[self._values[i], *(row[o] for o in self._outputs)] for i, row in enumerate(self._rows)])
        spread = np.ptp(np.where(np.isfinite(rows), rows, 0.0), axis=0)
        spread = np.where(spread > 0, spread, 1.0)
        keep = [0]
        for i in range(1, len(rows)):
            j = keep[-1]
            if not np.all(np.abs(rows[i] - rows[j]) / spread < SAME_POINT):
                keep.append(i)
            elif self.steps[j] != "requested" and self.steps[i] == "requested" and self.steps[j] != "branch point":
                keep[-1] = i  # the requested point stands for both
        if len(keep) == len(rows):
            return
        gone = {id(self.solutions[i]) for i in range(len(rows)) if i not in set(keep)}
        new_index = {old: new for new, old in enumerate(keep)}
        for found in (*self.folds, *self.branch_points):
            # a fold lies between points index - 1 and index: the first kept point at or after it
            found.index = next((new_index[i] for i in keep if i >= found.index), len(keep))
        for items in ("_values", "solutions", "steps", "stability", "_rows"):
            old = getattr(self, items)
            setattr(self, items, [old[i] for i in keep])
        for value in list(self.requested):
            self.requested[value] = [s for s in self.requested[value] if id(s) not in gone]
            if not self.requested[value]:
                del self.requested[value]

    def _pop(self) -> None:
        """Drop the last point (past a branch point, on the branch the trace leaves)."""
        gone = self.solutions.pop()
        self._values.pop()
        self.steps.pop()
        self.stability.pop()
        self._rows.pop()
        for value in list(self.requested):
            self.requested[value] = [s for s in self.requested[value] if s is not gone]
            if not self.requested[value]:
                del self.requested[value]

    @property
    def error_estimate(self) -> np.ndarray:
        """Per point, the estimated error of its solution (NaN where none was made)."""
        return np.array([_estimate(s) for s in self.solutions], float)

    def table(self) -> dict[str, np.ndarray]:
        """Columns: the parameter, each output, each point's error estimate and how it was reached."""
        columns = {self.name: self.parameter, **self.outputs, "error_estimate": self.error_estimate,
                   "step": np.array(self.steps)}
        if self._judge:
            words = {True: "stable", False: "unstable", None: "-"}
            columns["stability"] = np.array([words[v] for v in self.stability])
        return columns

    def to_pandas(self) -> Any:
        """:meth:`table` as a pandas DataFrame, one row per point (the ``tables`` extra)."""
        return data_frame(self.table())

    def to_csv(self, path: str | Path, units: Mapping[str, str] | None = None, independent: str | None = None) -> None:
        """:meth:`table` as CSV; headers labelled with ``units`` when given (``lam [N]``)."""
        write_columns(path, labelled(self.table(), units, independent))

    def as_dict(self) -> dict[str, Any]:
        outputs = self.outputs
        status = self.status.word

        def points(found: list) -> list[dict[str, Any]]:
            return [{"parameter": f.parameter, "error": f.error, "outputs": f.outputs, "index": f.index} for f in found]

        return json_ready({
            "success": self.success,
            "status": status,
            "message": self.message,
            "parameter_name": self.name,
            "parameter": self.parameter.tolist(),
            "outputs": {k: v.tolist() for k, v in outputs.items()},
            "steps": list(self.steps),
            "error_estimate": self.error_estimate.tolist(),
            "truncation": self.truncation,
            "folds": points(self.folds),
            "branch_points": points(self.branch_points),
            "stability": list(self.stability) if self._judge else None,
            "seconds": self.seconds,
        })

    def summary(self) -> str:
        lines = [f"{'traced' if self.success else 'STOPPED'}: {self.message}"]
        outputs = self.outputs
        header = [self.name, *self._outputs, "error", "step", *(["stability"] if self._judge else [])]
        lines.append("  ".join(f"{h:>14s}" for h in header))
        words = {True: "stable", False: "unstable", None: "-"}
        errors = self.error_estimate
        for i, value in enumerate(self._values):
            row = [f"{value:14.8g}", *(f"{outputs[o][i]:14.8g}" for o in self._outputs), f"{errors[i]:14.2g}",
                   f"{self.steps[i]:>14s}"]
            if self._judge:
                row.append(f"{words[self.stability[i]]:>14s}")
            lines.append("  ".join(row))
        for kind, found in (("fold", self.folds), ("branch point", self.branch_points)):
            for f in found:
                shown = ", ".join(f"{k} = {v:.10g}" for k, v in f.outputs.items())
                switched = "; the trace followed the other branch from here" if getattr(f, "switched", False) else ""
                lines.append(f"{kind} at {self.name} = {f.parameter:.12g} (+/- {f.error:.2g})"
                             f"{'; ' + shown if shown else ''}{switched}")
        return "\n".join(lines)

    def plot(self, path: str | Path, output: str | None = None, **options: Any) -> Any:
        """Draw every output (or ``output``) against the parameter, folds marked (``plot`` extra;
        options of :func:`bvpkit.solver.plots.branch_figure`)."""

        return plots.branch_figure(self, path, [output] if output else options.pop("outputs", None), **options)


def _estimate(solution: Solution) -> float:
    """A solution's error estimate as a plain number (NaN where none was made)."""
    value = solution.diagnostics.error_estimate
    return float(value) if value is not None else math.nan


def output_values(solution: Solution, expressions: dict[str, str]) -> dict[str, float]:
    """Each output (label -> expression) evaluated on ``solution``; NaN where it cannot be."""
    row = {}
    for label, text in expressions.items():
        try:
            row[label] = float(solution.evaluate(text, allow_failed=True))
        except (ValueError, ArithmeticError):
            row[label] = math.nan
    return row


def _resolve_outputs(prepared: Prepared, outputs: Sequence[str] | None) -> dict[str, str]:
    """Label -> expression: a name of the problem's outputs keeps its name as the label; a
    complex value is recorded as its real and imaginary parts (``re(label)``, ``im(label)``)."""
    for text in (outputs.values() if isinstance(outputs, Mapping) else outputs or []):
        if not isinstance(text, str):
            raise OptionError(f"outputs must be expressions as text, got {text!r}")
    return prepared.real_outputs(output_labels(prepared.outputs, outputs))  # parsed and checked now


def real_constant(prepared: Prepared, name: str) -> None:
    """A traced constant must be real: a complex one is refused, with what to write instead."""
    if isinstance(prepared.constants[name], complex):
        raise OptionError(
            f"'{name}' is a complex constant; a trace follows a real one: write {name} = {name}_re + 1j*{name}_im "
            "with real constants of their own and trace one of them"
        )


def _number(value: Any, label: str) -> float:
    if isinstance(value, bool) or not isinstance(value, int | float) or not math.isfinite(value):
        raise OptionError(f"{label} must be a finite number, got {value!r}")
    return float(value)


def trace(
    problem: Any,
    name: str,
    *,
    start: float,
    stop: float,
    outputs: Sequence[str] | None = None,
    tol: float | None = None,
    method: str | None = None,
    step: float | None = None,
    max_points: int = 200,
    progress: bool = False,
    fixed_step: bool = False,
    verify: bool = True,
    at: Sequence[float] | None = None,
    return_to: float | None = None,
    branch_switching: bool = True,
    max_angle: float | None = None,
    stability: bool = False,
    switch: bool | None = None,
) -> Branch:
    """Trace the solutions of ``problem`` as the constant ``name`` goes from ``start`` to ``stop``.

    Parameters
    ----------
    problem : Problem or Prepared
        Any problem ``solve`` takes (singular ends, free ends, infinite domains, regions...).
    name : str
        A constant of the problem.
    start, stop : float
        The range. After a fold the branch may come back; the trace ends when the parameter
        reaches ``stop`` or leaves the range on the other side.
    outputs : sequence of str, or mapping of str to str, optional
        Expressions (or names of the problem's outputs) recorded along the branch; default
        the problem's outputs. A mapping gives each a label (``{"wall_gradient": "y'(0)"}``),
        which names its column and its axis.
    tol : float, optional
        Tolerance of each point (default: the problem's, else 1e-6).
    method : str, optional
        Method of the natural steps (default auto: the selector decides, the method that
        worked at the last point first).
    step : float, optional
        First step in the parameter (default (stop - start) / 50).
    max_points : int
        Upper bound on the points of the branch.
    progress : bool
        Show a progress bar (needs the ``progress`` extra: tqdm).
    fixed_step : bool
        Keep the natural step at ``step`` instead of adapting it (it still shrinks on failure).
    verify : bool
        Estimate the error at each natural point (default True; off is about twice as fast).
    at : sequence of float, optional
        Values of the parameter at which to solve exactly, on every part of the branch that
        passes them (``branch.requested``).
    return_to : float, optional
        After the branch has turned (a fold) or switched (a branch point), end when the
        parameter comes back to this value.
    branch_switching : bool
        At a simple branch point, go on along the other branch (default True); the same
        name as the spec's ``branch_switching`` and the command line's
        ``--no-branch-switching``.
    max_angle : float, optional
        Largest angle (radians) between successive secants of accepted steps (default
        :data:`MAX_ANGLE`, 8 degrees).
    stability : bool
        Judge each point as the steady state of the diffusion equation ``u_t = u'' - g`` of a
        problem ``u'' = g(x, u, u')`` (reaction-diffusion, heat conduction with a source,
        ignition): ``branch.stability`` True, False, or None where that reading does not
        apply (see :mod:`bvpkit.families.stability`). Default False: every entry None.
    switch : bool, optional
        The former name of ``branch_switching``, kept for one release; giving both refuses.

    Returns
    -------
    Branch
        Ctrl-C keeps what was traced: the branch is returned with ``success`` False.
    """

    if not isinstance(problem, Problem | Prepared):
        raise OptionError(f"trace() takes a bvpkit.Problem, got {type(problem).__name__}")
    prepared = prepare(problem)
    if name not in prepared.constants:
        raise OptionError(
            f"'{name}' is not a constant of the problem{closest(name, prepared.constants)}; "
            "a traced parameter must be one of its constants"
        )
    real_constant(prepared, name)
    start, stop = _number(start, "start"), _number(stop, "stop")
    if start == stop:
        raise OptionError("start and stop must differ")
    if isinstance(max_points, bool) or not isinstance(max_points, int) or max_points < 2:
        raise OptionError(f"max_points must be a whole number of at least 2, got {max_points!r}")
    requested = sorted({_number(v, "a value of at") for v in (at or [])})
    if return_to is not None:
        return_to = _number(return_to, "return_to")
    angle = MAX_ANGLE if max_angle is None else _number(max_angle, "max_angle")
    if not 0 < angle < math.pi / 2:
        raise OptionError(f"max_angle must be between 0 and pi/2 radians, got {angle!r}")
    tol = options(prepared.settings, {"tol": tol}).tol
    names = _resolve_outputs(prepared, outputs)
    tracer = _Tracer(prepared, name, start, stop, names, tol, method, step, max_points, progress)
    tracer.fixed, tracer.verify, tracer.requested, tracer.return_to = fixed_step, verify, requested, return_to
    if switch is not None:
        if branch_switching is not True:
            raise OptionError("give branch_switching only (switch is its former name)")
        branch_switching = switch
    if not isinstance(branch_switching, bool):
        raise OptionError(f"branch_switching must be true or false, got {branch_switching!r}")
    tracer.switch, tracer.max_angle = branch_switching, angle
    if not isinstance(stability, bool):
        raise OptionError(f"stability must be true or false, got {stability!r}")
    tracer.branch._judge = stability
    return tracer.run()


class _Point:
    """The tracer's state at an accepted point: the solution, the collocation unknowns on its
    mesh (the traced constant last), the tangent there and the sign of the bordered
    determinant (for branch points)."""

    def __init__(self, value: float, solution: Solution):
        self.value, self.solution = value, solution
        view = solution.interpolant
        self.t, self.k = view.t, view.k.copy()
        self.z = np.concatenate([view.y.T.ravel(), view.p, [value]])
        self.tangent: np.ndarray | None = None
        self.sign = 0.0
        self.out: np.ndarray | None = None  # the traced outputs there (for the plotted plane's angle)


class _Tracer:
    def __init__(self, prepared, name, start, stop, outputs, tol, method, step, max_points, progress):  # noqa: ANN001
        self.prepared, self.name, self.start, self.stop = prepared, name, start, stop
        self.tol, self.method, self.max_points = tol, method, max_points
        self.span = abs(stop - start)
        # a first step is at most the largest a natural step grows to (a quarter of the range):
        # a step of 1e80 would otherwise be halved one failed solve at a time, at the end of
        # the range where every target is clipped
        self.step = min(abs(step), self.span / 4) if step else self.span / 50
        self.lo, self.hi = min(start, stop), max(start, stop)
        self.direction = 1.0 if stop > start else -1.0
        self.edge = stop  # the end of the range the natural steps head for
        self.branch = Branch(name, outputs)
        self.compiled = prepared.compiled
        self.free = self.compiled.freeing(name)  # the constant solved for: the last parameter
        self.index = self.compiled.layout.constants.index(name)
        self.bar = progress_bar(progress, max_points)
        self.fixed, self.verify, self.switch = False, True, True
        self.requested: list[float] = []
        self.return_to: float | None = None
        self.max_angle = MAX_ANGLE
        self.first_fold_only = False  # fold curves start from the first fold of a trace
        self.since = 0  # index in points where the current branch starts (after a branch switch)
        self.points: list[_Point] = []
        self.turned = False  # a fold passed or a branch switched: return_to applies from now on
        self.k: np.ndarray | None = None  # the constants of the trace (what a class's check moved held)
        self.last_method = method or "auto"
        self._seen: tuple[Solution, np.ndarray] | None = None  # the last candidate's outputs
        self.probe = np.random.default_rng(20261202)  # fixed: the border of the branch test

    # -- solving at a value --------------------------------------------------------------------
    def _at(self, value: float, guess: Any, bounded: bool = False) -> Solution:
        """The solution at ``value``; ``bounded``: one attempt, its mesh bounded by the last
        point's (a natural step that may have overshot a fold fails fast)."""
        k = self.k.copy()
        k[self.index] = value
        here = self.prepared.with_constants(**{self.name: value})
        limit = None
        if bounded and self.points:
            limit = max(_MESH_ROOM * self.points[-1].solution.diagnostics.mesh_nodes, _MESH_LEAST)
        sol = solve_at(here, k, guess, tol=self.tol, method=self.last_method, verify=self.verify, max_nodes=limit)
        if limit is not None:
            return sol
        if not sol.success and self.last_method != (self.method or "auto"):
            sol = solve_at(here, k, guess, tol=self.tol, method=self.method or "auto", verify=self.verify)
        if sol.success:
            self.last_method = self.method or sol.method if sol.method != "arclength" else self.last_method
        return sol

    def _equations(self, point: _Point) -> CollocationEquations:
        return self._on(point.t, point.k)

    def _on(self, x: np.ndarray, k: np.ndarray) -> CollocationEquations:
        """The freed collocation equations on mesh ``x``, the traced constant measured in the
        norm by its size (:meth:`_size`), so that a trace in Re = 5000 steps as one in Re/1000."""
        sizes = np.ones(self.free.n_parameters)
        sizes[-1] = self._size()
        return CollocationEquations(self.free, x, k, sizes)

    def _size(self) -> float:
        """The traced constant's unit in the arclength norm: a tenth of the largest end of the
        range, at least 1 (a range within 10 of 0 steps as it did)."""
        return max(1.0, 0.1 * max(abs(self.lo), abs(self.hi)))

    def _inside(self, value: float) -> bool:
        slack = 1e-12 * max(1.0, abs(self.lo), abs(self.hi))
        return self.lo - slack <= value <= self.hi + slack

    # -- accepting points -------------------------------------------------------------------
    def _accept(self, value: float, sol: Solution, how: str, point: _Point | None = None) -> _Point:
        sol = self._checked(value, sol)
        point = point if point is not None and point.solution is sol else _Point(value, sol)
        if self.points and how != "requested":
            self._orient(point)
        seen = self._seen[1] if self._seen is not None and self._seen[0] is sol else None
        self.branch._add(value, sol, how, seen)
        point.out = np.array([self.branch._rows[-1][o] for o in self.branch._outputs])
        if how != "requested":
            self.points.append(point)
        if self.bar is not None:
            self.bar.update(1)
        return point

    def _orient(self, point: _Point) -> None:
        """The tangent and bordered-determinant sign at a new point; a sign change from the last
        point is a branch point between them."""
        last = self.points[-1]
        if point.tangent is None:
            eq = self._equations(point)
            previous = self._carry(last.tangent if last.tangent is not None else self._secant(last, point), last, point)
            try:
                with np.errstate(all="ignore"):
                    point.tangent, point.sign = arc.tangent(eq, point.z, previous)
            except (RuntimeError, ValueError):
                point.tangent, point.sign = previous / max(arc.norm(eq, previous), 1e-300), 0.0
        if last.sign and point.sign and last.sign != point.sign and not self._pending_switch:
            self._pending_branch = (last, point)

    def _carry(self, vector: np.ndarray, source: _Point, target: _Point) -> np.ndarray:
        """A vector of unknowns on ``source``'s mesh carried onto ``target``'s mesh."""
        return arc.carry(vector, self.compiled.n, source.t, target.t)

    def _secant(self, a: _Point, b: _Point) -> np.ndarray:
        """``b - a`` in the unknowns of ``b``'s mesh."""
        return b.z - self._carry(a.z, a, b)

    def _angle(self, eq: CollocationEquations, u: np.ndarray, v: np.ndarray) -> float:
        nu, nv = arc.norm(eq, u), arc.norm(eq, v)
        if nu == 0 or nv == 0:
            return 0.0
        return math.acos(max(-1.0, min(1.0, arc.inner(eq, u, v) / (nu * nv))))

    def _outs(self, sol: Solution) -> np.ndarray:
        return np.array(list(output_values(sol, self.branch._expressions).values()))

    def _plane_turn(self, value: float, sol: Solution) -> float:
        """The angle by which the drawn branch turns at the last point if ``(value, sol)`` comes
        next: in the plane of each output against the parameter, both scaled to their ranges."""
        if len(self.points) - self.since < _SETTLED or not self.branch._expressions:
            # near the start of a branch the spread so far is no scale (a parabola's vertex looks
            # sharp at any step); the finished branch is smoothed at its final scale instead
            return 0.0
        p0, p1 = self.points[-2], self.points[-1]
        for q in (p0, p1):
            if q.out is None:
                q.out = self._outs(q.solution)
        out = self._outs(sol)
        self._seen = (sol, out)  # kept for the branch's row if this point is accepted
        seen = np.array([q.out for q in self.points[self.since:] if q.out is not None] + [out])
        spread = np.ptp(seen, axis=0) if seen.shape[0] > 1 else np.zeros(out.size)
        scale = np.maximum(np.maximum(spread, _OUTPUT_FLOOR * np.max(np.abs(seen), axis=0)), 1e-300)
        values = [q.value for q in self.points[self.since:]] + [value]
        across = max(max(values) - min(values), _OUTPUT_FLOOR * self.span)
        first = np.concatenate([[(p1.value - p0.value) / across], (p1.out - p0.out) / scale])
        second = np.concatenate([[(value - p1.value) / across], (out - p1.out) / scale])
        if not (np.isfinite(first).all() and np.isfinite(second).all()):
            return 0.0
        a, b = np.linalg.norm(first), np.linalg.norm(second)
        if a == 0 or b == 0:
            return 0.0
        return math.acos(max(-1.0, min(1.0, float(first @ second) / (a * b))))

    # -- each class's check of a point (the far field of an infinite end) ----------------------
    def _checked(self, value: float, sol: Solution) -> Solution:
        """``sol`` after each class's check along a trace (:meth:`Transform.along`); constants a
        class moved (infinity placed further out) hold for the later points."""
        if not sol.success or not self.prepared.transforms:
            return sol
        here = self.prepared.with_constants(**{self.name: value})

        def resolve(k: np.ndarray, guess: Any) -> Solution:
            return solve_at(here, k, guess, tol=self.tol, method=self.last_method, verify=self.verify)

        kept = sol
        for transform in self.prepared.transforms:
            kept = transform.along(kept, resolve, self.tol)
        if kept is not sol:
            self.k = np.array(kept.interpolant.k, float)
        return kept

    # -- the trace ----------------------------------------------------------------------
    def run(self) -> Branch:
        started = time.perf_counter()
        b = self.branch
        self._pending_branch: tuple[_Point, _Point] | None = None
        self._pending_switch = False
        try:
            with np.errstate(all="ignore"):
                here = self.prepared.with_constants(**{self.name: self.start})
                first = solve(here, tol=self.tol, method=self.method, verify=self.verify, follow=trace)
                if not first.success:
                    b.message = f"the first point ({self.name} = {self.start:g}) did not solve: {first.message}"
                    return b
                self.k = first.interpolant.k.copy()
                self.last_method = self.method or first.method
                point = self._accept(self.start, first, "natural")
                point.tangent = self._initial_tangent(point)
                self._requested_here(self.start)
                self._loop()
                traced = len(b.solutions)
                b._thin()
                traced = len(b.solutions)
                self._smooth()
                added = len(b.solutions) - traced
                if added and f"in {traced} points" in b.message:
                    b.message = b.message.replace(f"in {traced} points", f"in {len(b.solutions)} points "
                                                  f"({added} added where the drawn branch bends)")
                elif added:
                    b.message += f"; {added} more points were added where the drawn branch bends"
        except KeyboardInterrupt:
            b.success = False
            b.interrupted = True
            b.message = f"interrupted after {len(b.solutions)} points; what was traced is kept"
        except SingularMatrix as exc:  # a last guard: the steps handle it where they can go on
            b.success = False
            b.message = (f"stopped after {len(b.solutions)} points: a linear system of the step was singular "
                         f"({exc}); the branch may end or branch off there; what was traced is kept")
        finally:
            b.seconds = time.perf_counter() - started
            if self.bar is not None:
                self.bar.close()
        return b

    def _smooth(self, passes: int = 4) -> None:
        """Points added where the finished branch, drawn with each output against the parameter
        (each scaled to its range, as a plot scales it), turns by more than ``max_angle``: the
        branch point of the chord's middle, on the collocation equations of its left end."""
        b = self.branch
        if not b._outputs:
            return
        for _ in range(passes):
            x = b.parameter
            if x.size < 3:
                return
            rows = np.array([[row[o] for o in b._outputs] for row in b._rows])
            data = np.column_stack([x, rows])
            spread = np.ptp(data, axis=0)
            spread = np.where(spread > 0, spread, 1.0)
            d = np.diff(data / spread, axis=0)
            lengths = np.linalg.norm(d, axis=1)
            cosine = np.sum(d[:-1] * d[1:], axis=1) / np.maximum(lengths[:-1] * lengths[1:], 1e-300)
            visible = (lengths[:-1] >= SHORTEST_CHORD) & (lengths[1:] >= SHORTEST_CHORD)
            sharp = np.flatnonzero((np.arccos(np.clip(cosine, -1, 1)) > self.max_angle) & visible) + 1
            segments = sorted({j for i in sharp if b.steps[i] != "branch point" for j in (i - 1, i)
                               if lengths[j] >= SHORTEST_CHORD})
            if not segments:
                return
            added = 0
            for j in reversed(segments):
                if len(b.solutions) >= 2 * self.max_points:
                    break
                middle = self._middle(b.solutions[j], b.solutions[j + 1], b._values[j], b._values[j + 1])
                if middle is not None:
                    value, sol = middle
                    b._insert(j + 1, value, sol, "between")
                    added += 1
            if not added:
                return

    def _middle(self, left: Solution, right: Solution, a: float, b: float) -> tuple[float, Solution] | None:
        """The point of the branch halfway between two of its points (None where it cannot be had)."""
        first, second = _Point(a, left), _Point(b, right)
        if not np.array_equal(np.delete(first.k, self.index), np.delete(second.k, self.index)):
            return None
        eq = self._equations(first)
        other = self._carry(second.z, second, first)
        chord = other - first.z
        if not np.any(chord):
            return None
        with np.errstate(all="ignore"):
            try:
                z, its = arc.correct(eq, first.z + 0.5 * chord, chord, self.tol)
                if z is None:
                    return None
                t, _ = arc.tangent(eq, z, chord)
            except (RuntimeError, ValueError):
                return None
            sol = self._solution(eq, z, t, its, 0.0)
        return (float(z[-1]), sol) if sol.success else None

    def _initial_tangent(self, point: _Point) -> np.ndarray:
        eq = self._equations(point)
        guess = np.zeros_like(point.z)
        guess[-1] = self.direction
        try:
            t, point.sign = arc.tangent(eq, point.z, guess)
        except (RuntimeError, ValueError):
            return guess
        return t

    def _requested_here(self, value: float) -> None:
        for r in self.requested:
            if abs(r - value) <= 1e-12 * max(1.0, abs(r)):
                self.branch.requested.setdefault(r, []).append(self.branch.solutions[-1])

    def _loop(self) -> None:
        b = self.branch
        step = self.step
        while len(b.solutions) < self.max_points:
            end = self._natural(step)
            if end is not None:
                b.success, b.message = end
                return
            end = self._arclength_leg()
            if end is not None:
                b.success, b.message = end
                return
            step = max(abs(b.parameter[-1] - b.parameter[-2]), self.span / 100) if len(b.parameter) > 1 else self.step
        b.success, b.message = self._out_of_points()

    def _ending(self, edge: float) -> str:
        if edge == self.stop:
            return f"reached {self.name} = {self.stop:g}"
        if self.return_to is not None and edge == self.return_to:
            return f"came back to {self.name} = {edge:g}"
        return f"the branch turned back and reached the other end of the range, {self.name} = {edge:g},"

    def _out_of_points(self) -> tuple[bool, str]:
        """The end of a trace that spent its budget of points: where it stopped, and how far it got."""
        b = self.branch
        b.out_of_points = True
        value = b._values[-1]
        shown = ", ".join(f"{o} = {b._rows[-1][o]:.6g}" for o in b._outputs[:2])
        where = f"{self.name} = {value:.6g}" + (f" ({shown})" if shown else "")
        turned = " after the fold" if self.turned else ""
        aim = self.return_to if self.turned and self.return_to is not None else self.edge
        return False, self._done(
            f"stopped at {where}{turned}, on the way to {self.name} = {aim:g}: its budget of max_points = "
            f"{self.max_points} points is spent (raise max_points to go further)", count=False)

    def _done(self, what: str, count: bool = True) -> str:
        found = [f"{len(self.branch.folds)} fold(s)"] if self.branch.folds else []
        if self.branch.branch_points:
            found.append(f"{len(self.branch.branch_points)} branch point(s)")
        counted = f" in {len(self.branch.solutions)} points" if count else ""
        return f"{what}{counted}" + (f"; {' and '.join(found)} located" if found else "")

    def _edges(self, value: float, target: float) -> tuple[float, bool, bool]:
        """The target clipped to the first end or requested value between ``value`` and it:
        ``(target, ends_here, requested)``."""
        stops = [(self.edge, True)]
        if self.turned and self.return_to is not None:
            stops.append((self.return_to, True))
        stops += [(r, False) for r in self.requested]
        best = (target, False, False)
        for where, ends in stops:
            if (where - value) * self.direction > 1e-12 * max(1.0, abs(where)) and \
                    (target - where) * self.direction >= 0:
                if (where - best[0]) * self.direction < 0 or (where == best[0] and ends):
                    best = (where, ends, not ends)
        return best

    # -- natural steps ----------------------------------------------------------------------
    def _natural(self, step: float) -> tuple[bool, str] | None:
        """Natural steps until the branch turns (None: go on in arclength) or the trace ends."""
        b = self.branch
        halvings = 0  # in a row: a count, not a clock, bounds the search for a step that works
        while len(b.solutions) < self.max_points:
            last = self.points[-1]
            value = last.value
            target, ends, requested = self._edges(value, value + self.direction * step)
            taken = abs(target - value)  # the step actually tried: halving starts from it
            if not self.fixed and self._fold_ahead(target):
                return None  # a fold lies within this step: round it by pseudo-arclength
            guess = self._predict(target)
            sol = self._at(target, guess, bounded=True)
            if not sol.success and sol.status is Status.MESH_LIMIT:
                if self._turning_ahead():
                    return None  # no solution on a bounded mesh with the branch already turning
                sol = self._at(target, guess)  # a point that needs a finer mesh than the last one
            point = _Point(target, sol) if sol.success else None
            turning = False
            if point is not None and len(self.points) >= 1:
                turning, too_sharp = self._geometry(last, point)
                too_sharp = too_sharp or self._plane_turn(target, sol) > self.max_angle
                if (too_sharp and not requested and not ends and step > self.span * FLOOR and not self.fixed
                        and halvings < MAX_HALVINGS):
                    step, halvings = min(step, taken) * _SHRINK, halvings + 1
                    continue
            if point is not None and not turning:
                halvings = 0
                self._accept(target, sol, "natural", point)
                if requested:
                    self.branch.requested.setdefault(target, []).append(self.branch.solutions[-1])
                    self.branch.steps[-1] = "requested"
                if self._pending_branch is not None:
                    end = self._branch_point()
                    if end is not None:
                        return end
                    return None  # switched: go on in arclength along the new branch
                if ends:
                    return True, self._done(self._ending(target))
                if not self.fixed and not requested:
                    easy = sol.diagnostics.iterations <= 4
                    step = min(step * (_GROW if easy else 1.0), self.span / 4)
                continue
            if not turning and step > self.span * 1e-3 and halvings < MAX_HALVINGS and not self._turning_ahead():
                step, halvings = min(step, taken) * _SHRINK, halvings + 1
                continue
            return None  # the branch turns (or natural steps fail): pseudo-arclength
        return self._out_of_points()

    def _turning_ahead(self) -> bool:
        """Whether the last tangent's parameter component is small enough that a failed step
        more likely met a fold than a hard point (arclength goes on at once then)."""
        tangent = self.points[-1].tangent
        if tangent is None:
            return False
        size = arc.norm(self._equations(self.points[-1]), tangent)
        return size > 0 and abs(float(tangent[-1])) / self._size() / size < 2 * _TURNING

    def _fold_ahead(self, target: float) -> bool:
        """Whether a fold lies before ``target``: the parameter component ``l'`` of the unit
        tangent at the last two points, extrapolated linearly in the arclength ``s`` to zero,
        puts the fold at ``s* = l'_1 ds / (l'_0 - l'_1)`` past the last point and its value at
        ``l_1 + l'_1 s* / 2`` (the parameter is quadratic in ``s`` near a fold)."""
        if len(self.points) - self.since < 2:
            return False
        prev, last = self.points[-2], self.points[-1]
        if prev.tangent is None or last.tangent is None or not self._same_k(prev, last):
            return False
        eq = self._equations(last)
        size0 = arc.norm(self._equations(prev), prev.tangent)
        size1 = arc.norm(eq, last.tangent)
        ds = arc.norm(eq, self._secant(prev, last))
        if not (size0 > 0 and size1 > 0 and ds > 0):
            return False
        l0, l1 = float(prev.tangent[-1]) / size0, float(last.tangent[-1]) / size1
        l0, l1 = l0 * self.direction, l1 * self.direction  # positive while the parameter moves on
        if not (0 < l1 < l0):
            return False
        s_star = l1 * ds / (l0 - l1)
        fold = last.value + self.direction * l1 * s_star / 2
        return (target - fold) * self.direction > -(_FOLD_AHEAD - 1) * abs(target - last.value)

    def _spiral(self) -> tuple[bool, str] | None:
        """The end of a trace whose folds close in on a limit (see ``_SPIRAL_RATIO``), or None."""
        folds = [f.parameter for f in self.branch.folds]
        if len(folds) < _SPIRAL_FOLDS:
            return None
        gaps = np.abs(np.diff(folds[-_SPIRAL_FOLDS:]))
        if not (np.all(gaps > 0) and np.all(gaps[1:] <= _SPIRAL_RATIO * gaps[:-1])):
            return None
        a, b, c = folds[-3:]
        limit = c - (c - b) ** 2 / ((c - b) - (b - a))  # Aitken's extrapolation of the folds
        return False, self._done(
            f"the branch spirals: its folds close in on {self.name} = {limit:.6g} (each gap about "
            f"{float(np.mean(gaps[1:] / gaps[:-1])):.2g} of the one before), a limit it winds round through ever "
            f"more folds (a singular solution); stopped there")

    def _same_k(self, a: _Point, b: _Point) -> bool:
        """Whether two points share every constant but the traced one (the truncation length:
        a secant between solutions on two truncations compares unlike things)."""
        return np.array_equal(np.delete(a.k, self.index), np.delete(b.k, self.index))

    def _geometry(self, last: _Point, new: _Point) -> tuple[bool, bool]:
        """Whether the branch is turning at ``new`` (small parameter component of the secant)
        and whether the step turned by more than the angle allowed."""
        if not self._same_k(last, new):
            return False, False  # another truncation length: no secant between the two
        eq = self._equations(new)
        secant = self._secant(last, new)
        size = arc.norm(eq, secant)
        turning = size > 0 and abs(secant[-1]) / self._size() / size < _TURNING
        too_sharp = False
        if len(self.points) - self.since >= 2 and self._same_k(self.points[-2], last):
            before = self._carry(self._secant(self.points[-2], last), last, new)
            too_sharp = self._angle(eq, before, secant) > self.max_angle
        return turning, too_sharp

    def _predict(self, target: float) -> Any:
        if len(self.points) < 2:
            return self.points[-1].solution
        last, prev = self.points[-1], self.points[-2]
        d_last = last.value - prev.value
        if d_last == 0 or not np.array_equal(np.delete(last.k, self.index), np.delete(prev.k, self.index)):
            return last.solution
        ratio = (target - last.value) / d_last
        z = last.z + ratio * self._secant(prev, last)
        n, m = self.compiled.n, last.t.size
        k = last.k.copy()
        k[self.index] = target
        return Start(self.compiled, last.t, z[: n * m].reshape(m, n).T, z[n * m: -1], k)

    # -- pseudo-arclength steps -------------------------------------------------------------
    def _arclength_leg(self) -> tuple[bool, str] | None:
        """Arclength steps until the branch is straight again (None) or the trace ends."""
        b = self.branch
        point = self.points[-1]
        eq = self._equations(point)
        tangent = point.tangent if point.tangent is not None else self._initial_tangent(point)
        if len(self.points) >= 2 and not self._pending_switch:
            secant = self._secant(self.points[-2], point)
            if arc.inner(eq, tangent, secant) < 0:
                tangent = -tangent
        z, _ = arc.correct(eq, point.z, tangent, self.tol)  # polish onto the discrete curve
        if z is not None:
            try:
                tangent, _ = arc.tangent(eq, z, tangent)
            except SingularMatrix:
                z = None
        if z is None:
            return False, self._done(f"pseudo-arclength could not start at {self.name} = {point.value:.6g}")
        ds = first_ds = self._first_ds(eq, z)
        min_ds = ds * 1e-6
        chord: list = []  # the factorisation of the last tangent's matrix, reused by the corrector
        # the value of the accepted point a step leaves: the polish above may move z's parameter
        # by round-off, and a requested value the point sits on must not count as crossed again
        here = point.value
        while len(b.solutions) < self.max_points:
            started = time.perf_counter()
            predicted = z + ds * tangent
            reuse = chord[0] if chord and chord[1] is eq else None
            z_new, its = arc.correct(eq, predicted, tangent, self.tol, chord=reuse)
            reason = None
            if z_new is not None:
                try:
                    kept: list = []
                    t_new, sign = arc.tangent(eq, z_new, tangent, keep=kept)
                except SingularMatrix:
                    z_new, reason = None, "the bordered Jacobian was singular there"
            if z_new is None:
                reason = reason or "the corrector did not converge"
            else:
                drift = arc.norm(eq, z_new - predicted) / max(ds, 1e-300)
                if self._angle(eq, tangent, t_new) > self.max_angle or drift > MAX_DRIFT:
                    reason = "the step turned too sharply"  # decided before the point's estimate is paid for
                else:
                    sol = self._solution(eq, z_new, t_new, its, time.perf_counter() - started)
                    if ds > 0.01 * first_ds and self._plane_turn(float(z_new[-1]), sol) > self.max_angle:
                        reason = "the drawn branch turned too sharply"
            if reason is not None:
                ds *= _SHRINK
                if ds < min_ds:
                    return False, self._done(
                        f"the arclength step fell below its floor near {self.name} = {float(z[-1]):.6g} ({reason}); "
                        "the branch may end or branch off here"
                    )
                continue
            lam_old, lam_new = here, float(z_new[-1])
            if tangent[-1] * t_new[-1] < 0:
                self._locate_fold(eq, z, tangent, ds, (float(tangent[-1]), float(t_new[-1])))
                self.turned = True
                spiral = self._spiral()
                if spiral is not None:
                    return spiral
                if self.first_fold_only and self.branch.folds:
                    return True, self._done(f"stopped at the first fold, {self.name} = {self.branch.folds[0].parameter:.10g}")
            for r in self._crossed(lam_old, lam_new):
                self._requested_between(eq, z, z_new, r)
            if self.turned and self.return_to is not None and self._between(self.return_to, lam_old, lam_new):
                end = self._finish_at(eq, z, z_new, self.return_to)
                if end is not None:
                    return end
            if not self._inside(lam_new):
                edge = self.hi if lam_new > self.hi else self.lo
                end = self._finish_at(eq, z, z_new, edge)
                return end if end is not None else (True, self._done(self._ending(edge)))
            smooth = self._angle(eq, tangent, t_new) < self.max_angle / 2
            new = _Point(lam_new, sol)
            new.z, new.t, new.k, new.tangent, new.sign = z_new, eq.x, eq.k.copy(), t_new, sign
            if sol.status is Status.ERROR_TOO_LARGE:
                # the mesh no longer fits the branch: a full solve at this value (mesh refinement,
                # its own estimate) from this point, and the arclength steps go on on its mesh
                better = self._at(lam_new, sol)
                if better.success:
                    sol, new = better, _Point(lam_new, better)  # its tangent: from the last point's
            accepted = self._accept(lam_new, sol, "arclength", new)
            chord = [kept[0], eq]
            if self._pending_branch is not None:
                end = self._branch_point()
                if end is not None:
                    return end
                point = self.points[-1]
                eq = self._equations(point)
                z, tangent, here = point.z, point.tangent, point.value
                ds = self._first_ds(eq, z)
                continue
            if accepted.t is not eq.x:
                eq = self._equations(accepted)  # a refined mesh, or a longer truncation
            z, tangent, here = accepted.z, accepted.tangent, accepted.value
            ds = ds * _GROW if its <= 3 and smooth else ds * (_SHRINK if its >= 8 else 1.0)
            if abs(float(tangent[-1])) / self._size() > _STRAIGHT and self.turned and abs(lam_new - lam_old) > 0:
                self.direction = 1.0 if lam_new > lam_old else -1.0
                self.edge = self.hi if self.direction > 0 else self.lo
                return None
        return self._out_of_points()

    def _first_ds(self, eq: CollocationEquations, z: np.ndarray) -> float:
        return 0.05 * math.sqrt(float(np.sum(eq.weights * z * z)) + 1.0)

    @staticmethod
    def _between(value: float, a: float, b: float) -> bool:
        return min(a, b) < value <= max(a, b) or min(a, b) <= value < max(a, b)

    def _crossed(self, a: float, b: float) -> list[float]:
        return [r for r in self.requested if self._between(r, a, b) and r != a]

    def _interpolated(self, eq: CollocationEquations, z0: np.ndarray, z1: np.ndarray, value: float) -> Start:
        """A start at ``value`` on the chord between two points of the discrete branch."""
        w = (value - z0[-1]) / (z1[-1] - z0[-1]) if z1[-1] != z0[-1] else 0.5
        z = z0 + w * (z1 - z0)
        n, m = self.compiled.n, eq.m
        k = eq.k.copy()
        k[self.index] = value
        return Start(self.compiled, eq.x, z[: n * m].reshape(m, n).T, z[n * m: -1], k)

    def _requested_between(self, eq: CollocationEquations, z0: np.ndarray, z1: np.ndarray, value: float) -> None:
        sol = self._at(value, self._interpolated(eq, z0, z1, value))
        if sol.success:
            self.branch._add(value, sol, "requested")
            self.branch.requested.setdefault(value, []).append(sol)

    def _finish_at(self, eq: CollocationEquations, z0: np.ndarray, z1: np.ndarray, value: float) -> tuple[bool, str] | None:
        sol = self._at(value, self._interpolated(eq, z0, z1, value))
        if not sol.success:
            return None
        self._accept(value, sol, "natural")
        return True, self._done(self._ending(value))

    def _solution(self, eq: CollocationEquations, z: np.ndarray, t: np.ndarray, iterations: int,
                  seconds: float, fold: bool = False) -> Solution:
        y, pz = eq.split(z)
        value = float(pz[-1])
        p = pz[:-1]
        k = eq.k.copy()
        k[self.index] = value
        estimate, reference = self._estimate(eq, z, t, k, fold)
        attempt = Attempt("arclength", "the branch turns: pseudo-arclength step on the collocation equations",
                          "solved", "converged", iterations, eq.m, seconds, self._ends(p, k), estimate)
        outcome = Outcome(Status.SOLVED, f"pseudo-arclength point, {self.name} = {value:.10g}", eq.x, y, p,
                          iterations=iterations, error_estimate=estimate if math.isfinite(estimate) else None,
                          method="arclength")
        if reference is not None:
            outcome.reference = Outcome(Status.SOLVED, "deferred correction", *reference)
        if math.isfinite(estimate) and estimate > self.tol:
            outcome.message += (". Near a fold the states are sensitive to the parameter; arclength steps keep "
                                "their mesh")
        here = self.prepared.with_constants(**{self.name: value})
        run = Run(outcome, k, [attempt], "pseudo-arclength continuation near a fold", self.tol, here.independent)
        return settle(here, run, seconds)

    def _ends(self, p: np.ndarray, k: np.ndarray) -> tuple[float, float]:
        ends = positions(np.asarray(self.compiled.maps(p, k), float))
        return float(ends[0]), float(ends[-1])

    def _estimate(self, eq: CollocationEquations, z: np.ndarray, t: np.ndarray, k: np.ndarray,  # noqa: ANN202
                  fold: bool = False):
        """Error of an arclength point by deferred correction, as collocation's own estimate:
        the error of its states against the exact solution at its parameter value (the defect
        solved with the Newton matrix at that value; it grows, truthfully, as the point nears
        a fold). At a fold (``fold``), or where that matrix is singular, the distance to the
        exact branch instead (the defect solved with the bordered matrix ``[G_z; t]``).
        Returns the estimate and the corrected point ``(x, y, p)``."""

        y, pz = eq.split(z)
        p = pz[:-1]
        with np.errstate(all="ignore"):
            try:
                if fold:
                    raise SingularMatrix("at a fold")
                own = CollocationEquations(self.compiled, eq.x, k)
                parts = own.parts(y, p)
                lu = own.factor(y, p, parts[3])
                trial = Trial(self.compiled, eq.x, y, p, k, self.tol)
            except SingularMatrix:
                own, p, parts = eq, pz, eq.parts(y, pz)
                try:
                    lu = arc.Bordered(eq, z, t)
                except RuntimeError:
                    return math.nan, None
                trial = Trial(self.free, eq.x, y, pz, eq.k, self.tol)
            x2, y2, p2 = own.defect_correction(y, p, parts, lu)
            estimate, _ = compare(Outcome(Status.SOLVED, "", eq.x, y, p), Outcome(Status.SOLVED, "", x2, y2, p2), trial)
        if not math.isfinite(estimate):
            return math.nan, None
        return estimate, (x2, y2, p2[:-1] if own is eq else p2)

    # -- folds ------------------------------------------------------------------------------
    def _locate_fold(self, eq: CollocationEquations, z0: np.ndarray, t0: np.ndarray, ds: float,
                     ends: tuple[float, float]) -> None:
        """Find the fold between ``z0`` and ``z0 + ds t0`` on this mesh and on the halved mesh
        (``ends``: the tangents' parameter components at both points)."""
        found = _fold_on(eq, z0, t0, ds, self.tol, ends=ends)
        if found is None:
            return
        z_fold, s_fold = found
        fine, z_fine0, t_fine = self._halved(eq, z0, t0)
        error = math.nan
        if z_fine0 is not None:
            other = _fold_on(fine, z_fine0, t_fine, ds * 1.5, self.tol, guess=s_fold)
            if other is not None:
                error = abs(float(other[0][-1]) - float(z_fold[-1]))
        try:
            t_fold, _ = arc.tangent(eq, z_fold, t0)
        except SingularMatrix:
            t_fold = t0
        sol = self._solution(eq, z_fold, t_fold, 0, 0.0, fold=True)
        value = float(z_fold[-1])
        outputs = {o: float(sol.evaluate(e, allow_failed=True)) for o, e in self.branch._expressions.items()}
        self.branch.folds.append(Fold(value, outputs, error, len(self.branch.solutions), sol))

    def _halved(self, eq: CollocationEquations, z0: np.ndarray, t0: np.ndarray):  # noqa: ANN202
        """The equations on the halved mesh, ``z0`` corrected onto them, and the carried tangent."""
        x = eq.x
        fine_x = np.sort(np.concatenate([x, 0.5 * (x[1:] + x[:-1])]))
        y, pz = eq.split(z0)
        y_fine = hermite(self.free, x, y, pz, eq.k)(fine_x)
        fine = self._on(fine_x, eq.k)
        t_fine = arc.carry(t0, eq.n, x, fine_x)
        start = fine.join(y_fine, pz)
        try:
            z, _ = arc.correct(fine, start, arc.tangent(fine, start, t_fine)[0], self.tol)
            if z is None:
                return fine, None, t_fine
            return fine, z, arc.tangent(fine, z, t_fine)[0]
        except (RuntimeError, ValueError):
            return fine, None, t_fine

    # -- branch points ---------------------------------------------------------------------
    def _branch_point(self) -> tuple[bool, str] | None:
        """Locate the branch point seen between the last two points, record it, and switch
        onto the other branch (None: the trace goes on) or end the trace."""
        a, b = self._pending_branch
        self._pending_branch = None
        eq = self._equations(a)
        found = self._locate_branch(eq, a.z, a.tangent, self._carry(b.z, b, a))
        if found is None:
            return None  # not located: the sign change was noise; go on
        eq, z_star, t_star, v, value, error = found
        with np.errstate(all="ignore"):
            sol = self._solution(eq, z_star, t_star, 0, 0.0, fold=True)
        outputs = {o: float(sol.evaluate(e, allow_failed=True)) for o, e in self.branch._expressions.items()}
        point = BranchPoint(value, outputs, error, len(self.branch.solutions), sol, switched=self.switch)
        self.branch.branch_points.append(point)
        if not self.switch:
            return None
        if self.points[-1] is b and len(self.points) > 1:  # past the branch point on the branch left behind
            self.points.pop()
            self.branch._pop()
            point.index = len(self.branch.solutions)
        self.branch._add(value, sol, "branch point")
        return self._switch(eq, z_star, v)

    def _locate_branch(self, eq: CollocationEquations, z0: np.ndarray, t0: np.ndarray, z1: np.ndarray):  # noqa: ANN202
        """The branch point between ``z0`` and the point near ``z1``, by bracketed secant steps on the
        bordered test function along the arclength; refined on halved meshes until two
        successive locations agree to the tolerance (the error reported is their difference)."""
        span = arc.inner(eq, t0, z1 - z0)
        if not span > 0:
            return None
        previous = None
        for _ in range(6):
            b = self.probe.standard_normal(z0.size)
            c = self.probe.standard_normal(z0.size)
            cache: dict[float, tuple[np.ndarray, np.ndarray, np.ndarray]] = {}

            def g(s: float, eq=eq, z0=z0, t0=t0, b=b, c=c, cache=cache) -> float:  # noqa: ANN001
                z, _ = arc.correct(eq, z0 + s * t0, t0, self.tol * 1e-2)
                if z is None:
                    raise ArithmeticError("no point of the branch here")
                t, _ = arc.tangent(eq, z, t0)
                value, v = arc.branch_test(eq, z, t, b, c)
                cache[s] = (z, t, v)
                return value

            try:
                with np.errstate(all="ignore"):
                    g0, g1 = g(0.0), g(span)
                    if g0 * g1 > 0:
                        return None
                    s = arc.locate(g, 0.0, span, g0, g1, xtol=1e-14 * span)
                    if s not in cache:
                        g(s)
            except (ArithmeticError, ValueError, RuntimeError):
                return None
            z_star, t_star, v = cache[s]
            value = float(z_star[-1])
            if previous is not None and abs(value - previous) <= self.tol * max(1.0, abs(value)):
                return eq, z_star, t_star, v / arc.norm(eq, v), value, abs(value - previous)
            previous = value
            fine, z_fine, t_fine = self._halved(eq, z_star, t_star)
            if z_fine is None:
                return eq, z_star, t_star, v / arc.norm(eq, v), value, math.nan
            # the bracket on the halved mesh: a short stretch either side of the point found
            back = max(span * 0.05, 1e-6 * (1.0 + abs(value)))
            z0 = z_fine - back * t_fine
            z0, _ = arc.correct(fine, z0, t_fine, self.tol)
            if z0 is None:
                return eq, z_star, t_star, v / arc.norm(eq, v), value, math.nan
            eq, t0, span = fine, t_fine, 2 * back
        return eq, z_star, t_star, v / arc.norm(eq, v), value, math.nan

    def _switch(self, eq: CollocationEquations, z_star: np.ndarray, v: np.ndarray) -> tuple[bool, str] | None:
        """Leave the branch point along ``v`` (the null vector of ``[G_z; t]``: the other
        branch's direction), the sign making the first unknown function positive at the start
        of the domain (or, where it vanishes there, at its largest value)."""
        n, m = self.compiled.n, eq.m
        first = v[: n * m].reshape(m, n)[:, 0]
        scale = float(np.max(np.abs(first)))
        lead = first[0] if abs(first[0]) > 1e-6 * scale else first[np.argmax(np.abs(first))]
        if lead < 0:  # the first unknown positive where the domain starts (or where largest)
            v = -v
        ds = self._first_ds(eq, z_star) * 0.2
        for _ in range(12):
            z_new, _ = arc.correct(eq, z_star + ds * v, v, self.tol)
            if z_new is not None and arc.norm(eq, z_new - z_star) > 0.5 * ds:
                break
            ds *= 0.5
        else:
            return False, self._done(f"the other branch at {self.name} = {float(z_star[-1]):.10g} could not be followed")
        t_new, sign = arc.tangent(eq, z_new, v)
        sol = self._solution(eq, z_new, t_new, 0, 0.0)
        new = _Point(float(z_new[-1]), sol)
        new.z, new.t, new.k, new.tangent, new.sign = z_new, eq.x, eq.k.copy(), t_new, sign
        self.turned = True
        self._pending_switch = True
        self.since = len(self.points)  # the new branch's geometry starts here
        self._accept(float(z_new[-1]), sol, "arclength", new)
        self._pending_switch = False
        self._pending_branch = None
        return None


def _fold_on(eq: CollocationEquations, z0: np.ndarray, t0: np.ndarray, ds: float, tol: float,
             ends: tuple[float, float] | None = None, guess: float | None = None) -> tuple[np.ndarray, float] | None:
    """The fold between ``z0`` and ``z0 + ds t0`` and its arclength: the root of the tangent's
    parameter component (the last unknown) along the arclength. ``ends``: that component at
    both ends when the caller has it (both points are already corrected and their tangents
    known); ``guess``: where to look first.

    The fold's parameter is quadratic in the arclength there, so an error ``e`` in the arclength
    costs ``e**2`` in the parameter; the outputs at the fold are linear in it, hence the tight
    ``xtol``, which the secant steps reach in a couple more evaluations."""
    cache: dict[float, np.ndarray] = {}

    def component(s: float) -> float:
        z, _ = arc.correct(eq, z0 + s * t0, t0, tol * 1e-2)
        if z is None:
            raise ArithmeticError
        cache[s] = z
        return float(arc.tangent(eq, z, t0)[0][-1])

    try:
        lo, hi = ends if ends is not None else (component(0.0), component(ds))
        if lo * hi > 0:
            return None
        if guess is None:
            guess = ds * lo / (lo - hi)
        s = arc.locate(component, 0.0, ds, lo, hi, xtol=1e-10 * max(ds, 1e-300), guess=guess)
    except (ArithmeticError, ValueError, RuntimeError):
        return None
    z = cache[s] if s in cache else arc.correct(eq, z0 + s * t0, t0, tol * 1e-2)[0]
    return None if z is None else (z, s)
