"""Continuation: trace a solution family through a parameter, around folds.

Two steppers, switched automatically:

* **natural** steps in the parameter, each a full :func:`bvpkit.solve` (the selector, error
  estimate and diagnostics at every point), started from a secant prediction; the step grows
  after easy solves and shrinks (to a floor) after failures;
* **pseudo-arclength** steps (Keller 1977) on the discretised problem when the branch turns:
  the collocation equations of ``solve_bvp`` (3-stage Lobatto IIIA) on the mesh of the last
  solution, with the parameter as one more unknown, bordered by the arclength equation.
  Their Jacobian is exact (from codegen's ``df/dy``, ``df/dp``) and sparse; the tangent is
  the solution of the bordered system ``[G_z; t_prev] t = [0; 1]``. Each arclength point
  carries collocation's deferred-correction error estimate; one whose estimate misses the
  tolerance is solved again at its parameter value with mesh refinement, and the arclength
  steps go on on the refined mesh.

A fold is a sign change of the tangent's parameter component; it is located by Brent's
method on that component along the arclength, on the mesh and on the halved mesh (their
difference is the reported error).
"""

from __future__ import annotations

import math
import time
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from ._output import json_ready, progress_bar, write_columns
from .diagnostics import Attempt, hermite
from .discrete import CollocationEquations, node_weights
from .driver import DEFAULT_TOL, settle, solve
from .errors import OptionError, closest
from .guess import Start
from .methods.base import Outcome
from .prepared import Prepared, prepare
from .solution import Solution
from .status import Status

_GROW, _SHRINK = 1.5, 0.5
_TURNING = 0.3  # |d lam / ds| below this: the branch is turning, step in arclength
_STRAIGHT = 0.6  # |d lam / ds| above this (after a fold): back to natural steps


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
    success : bool
    message : str
    steps : list of str
        ``"natural"`` or ``"arclength"`` for each point.
    """

    def __init__(self, name: str, outputs: dict[str, str]):
        self.name = name
        self._outputs = list(outputs)
        self._expressions = dict(outputs)
        self.solutions: list[Solution] = []
        self.steps: list[str] = []
        self._values: list[float] = []
        self.folds: list[Fold] = []
        self.success = False
        self.interrupted = False
        self.message = ""
        self.seconds = 0.0

    @property
    def parameter(self) -> np.ndarray:
        return np.array(self._values)

    @property
    def outputs(self) -> dict[str, np.ndarray]:
        return {o: np.array([s.evaluate(self._expressions[o], allow_failed=True) for s in self.solutions])
                for o in self._outputs}

    def _add(self, value: float, solution: Solution, how: str) -> None:
        self._values.append(float(value))
        self.solutions.append(solution)
        self.steps.append(how)

    def table(self) -> dict[str, np.ndarray]:
        """Columns: the parameter, each output, and how each point was reached."""
        return {self.name: self.parameter, **self.outputs, "step": np.array(self.steps)}

    def to_csv(self, path: str | Path) -> None:
        write_columns(path, self.table())

    def as_dict(self) -> dict[str, Any]:
        outputs = self.outputs
        status = "solved" if self.success else "interrupted" if self.interrupted else "not_converged"
        return json_ready({
            "success": self.success,
            "status": status,
            "message": self.message,
            "parameter_name": self.name,
            "parameter": self.parameter.tolist(),
            "outputs": {k: v.tolist() for k, v in outputs.items()},
            "steps": list(self.steps),
            "folds": [
                {"parameter": f.parameter, "error": f.error, "outputs": f.outputs, "index": f.index}
                for f in self.folds
            ],
            "seconds": self.seconds,
        })

    def summary(self) -> str:
        lines = [f"{'traced' if self.success else 'STOPPED'}: {self.message}"]
        outputs = self.outputs
        header = [self.name, *self._outputs, "step"]
        lines.append("  ".join(f"{h:>14s}" for h in header))
        for i, value in enumerate(self._values):
            row = [f"{value:14.8g}", *(f"{outputs[o][i]:14.8g}" for o in self._outputs), f"{self.steps[i]:>14s}"]
            lines.append("  ".join(row))
        for f in self.folds:
            shown = ", ".join(f"{k} = {v:.10g}" for k, v in f.outputs.items())
            lines.append(f"fold at {self.name} = {f.parameter:.12g} (+/- {f.error:.2g}){'; ' + shown if shown else ''}")
        return "\n".join(lines)

    def plot(self, path: str | Path, output: str | None = None, **options: Any) -> Any:
        """Draw every output (or ``output``) against the parameter, folds marked (``plot`` extra;
        options of :func:`bvpkit.plots.branch_figure`)."""
        from .plots import branch_figure

        return branch_figure(self, path, [output] if output else options.pop("outputs", None), **options)


def _resolve_outputs(prepared: Prepared, outputs: Sequence[str] | None) -> dict[str, str]:
    """Label -> expression: a name of the problem's outputs keeps its name as the label."""
    labels = {}
    named = prepared.outputs
    for text in outputs if outputs is not None else list(named):
        if not isinstance(text, str):
            raise OptionError(f"outputs must be expressions as text, got {text!r}")
        labels[text] = named.get(text, text)
    for label, text in labels.items():
        prepared.quantity(text)  # parsed and checked now, not at the first point
    return labels


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
    outputs : sequence of str, optional
        Expressions (or names of the problem's outputs) recorded along the branch; default
        the problem's outputs.
    tol : float, optional
        Tolerance of each point (default: the problem's, else 1e-6).
    method : str, optional
        Method of the natural steps (default auto: the selector decides at each point).
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

    Returns
    -------
    Branch
        Ctrl-C keeps what was traced: the branch is returned with ``success`` False.
    """
    from .problem import Problem

    if not isinstance(problem, Problem | Prepared):
        raise OptionError(f"trace() takes a bvpkit.Problem, got {type(problem).__name__}")
    prepared = prepare(problem)
    if name not in prepared.constants:
        raise OptionError(
            f"'{name}' is not a constant of the problem{closest(name, prepared.constants)}; "
            "a traced parameter must be one of its constants"
        )
    for label, value in (("start", start), ("stop", stop)):
        if isinstance(value, bool) or not isinstance(value, int | float) or not math.isfinite(value):
            raise OptionError(f"{label} must be a finite number, got {value!r}")
    if start == stop:
        raise OptionError("start and stop must differ")
    if isinstance(max_points, bool) or not isinstance(max_points, int) or max_points < 2:
        raise OptionError(f"max_points must be a whole number of at least 2, got {max_points!r}")
    tol = float(tol if tol is not None else prepared.settings.get("tol", DEFAULT_TOL))
    names = _resolve_outputs(prepared, outputs)
    tracer = _Tracer(prepared, name, float(start), float(stop), names, tol, method, step, max_points, progress)
    tracer.fixed, tracer.verify = fixed_step, verify
    return tracer.run()


class _Tracer:
    def __init__(self, prepared, name, start, stop, outputs, tol, method, step, max_points, progress):  # noqa: ANN001
        self.prepared, self.name, self.start, self.stop = prepared, name, start, stop
        self.tol, self.method, self.max_points = tol, method, max_points
        self.span = abs(stop - start)
        self.step = abs(step) if step else self.span / 50
        self.lo, self.hi = min(start, stop), max(start, stop)
        self.direction = 1.0 if stop > start else -1.0
        self.edge = stop  # the end of the range the natural steps head for
        self.branch = Branch(name, outputs)
        self.compiled = prepared.compiled
        self.free = self.compiled.freeing(name)  # the constant solved for: the last parameter
        self.index = self.compiled.layout.constants.index(name)
        self.bar = progress_bar(progress, max_points)
        self.fixed, self.verify = False, True

    # -- helpers ------------------------------------------------------------------------
    def _solve_at(self, value: float, guess: Any) -> Solution:
        return solve(self.prepared.with_constants(**{self.name: value}), tol=self.tol, method=self.method,
                     guess=guess, verify=self.verify)

    @staticmethod
    def _view(sol: Solution):  # noqa: ANN205
        return sol.interpolant

    def _z(self, sol: Solution, value: float, t: np.ndarray | None = None) -> np.ndarray:
        """The unknowns of the collocation equations: states on ``t`` (default its own mesh),
        then the parameters, the traced constant last."""
        view = sol.interpolant
        y = view.y if t is None else hermite(self.compiled, view.t, view.y, view.p, view.k)(np.clip(t, 0.0, 1.0))
        return np.concatenate([y.T.ravel(), view.p, [value]])

    def _k(self, sol: Solution) -> np.ndarray:
        return sol.interpolant.k.copy()

    def _solution(self, disc: CollocationEquations, z: np.ndarray, t: np.ndarray, iterations: int,
                  seconds: float, fold: bool = False) -> Solution:
        y, pz = disc.split(z)
        value = float(pz[-1])
        p = pz[:-1]
        k = disc.k.copy()
        k[self.index] = value
        estimate, reference = self._estimate(disc, z, t, k, fold)
        attempt = Attempt("arclength", "the branch turns: pseudo-arclength step on the collocation equations",
                          "solved", "converged", iterations, disc.m, seconds, self._ends(p, k), estimate)
        outcome = Outcome(Status.SOLVED, f"pseudo-arclength point, {self.name} = {value:.10g}", disc.x, y, p,
                          iterations=iterations, error_estimate=estimate if math.isfinite(estimate) else None,
                          method="arclength")
        if reference is not None:
            outcome.reference = Outcome(Status.SOLVED, "deferred correction", *reference)
        if math.isfinite(estimate) and estimate > self.tol:
            outcome.message += (". Near a fold the states are sensitive to the parameter; arclength steps keep "
                                "their mesh")
        return settle(self.prepared.with_constants(**{self.name: value}), k, outcome, [attempt],
                      "pseudo-arclength continuation near a fold", seconds, self.tol)

    def _ends(self, p: np.ndarray, k: np.ndarray) -> tuple[float, float]:
        from .guess import positions

        ends = positions(np.asarray(self.compiled.maps(p, k), float))
        return float(ends[0]), float(ends[-1])

    def _estimate(self, disc: CollocationEquations, z: np.ndarray, t: np.ndarray, k: np.ndarray,  # noqa: ANN202
                  fold: bool = False):
        """Error of an arclength point by deferred correction, as collocation's own estimate:
        the error of its states against the exact solution at its parameter value (the defect
        solved with the Newton matrix at that value; it grows, truthfully, as the point nears
        a fold). At a fold (``fold``), or where that matrix is singular, the distance to the
        exact branch instead (the defect solved with the bordered matrix ``[G_z; t]``).
        Returns the estimate and the corrected point ``(x, y, p)``."""
        from .discrete import SingularMatrix
        from .methods.base import Trial, compare

        y, pz = disc.split(z)
        p = pz[:-1]
        with np.errstate(all="ignore"):
            try:
                if fold:
                    raise SingularMatrix("at a fold")
                eq = CollocationEquations(self.compiled, disc.x, k)
                parts = eq.parts(y, p)
                lu = eq.factor(y, p, parts[3])
                trial = Trial(self.compiled, disc.x, y, p, k, self.tol)
            except SingularMatrix:
                eq, p, parts = disc, pz, disc.parts(y, pz)
                try:
                    lu = _BorderedSolve(disc, z, t)
                except RuntimeError:
                    return math.nan, None
                trial = Trial(self.free, disc.x, y, pz, disc.k, self.tol)
            x2, y2, p2 = eq.defect_correction(y, p, parts, lu)
            estimate, _ = compare(Outcome(Status.SOLVED, "", disc.x, y, p), Outcome(Status.SOLVED, "", x2, y2, p2), trial)
        if not math.isfinite(estimate):
            return math.nan, None
        return estimate, (x2, y2, p2[:-1] if eq is disc else p2)

    def _inside(self, value: float) -> bool:
        slack = 1e-12 * max(1.0, abs(self.lo), abs(self.hi))
        return self.lo - slack <= value <= self.hi + slack

    def _add(self, value: float, sol: Solution, how: str) -> None:
        self.branch._add(value, sol, how)
        if self.bar is not None:
            self.bar.update(1)

    # -- the trace ----------------------------------------------------------------------
    def run(self) -> Branch:
        started = time.perf_counter()
        b = self.branch
        try:
            first = self._solve_at(self.start, None)
            if not first.success:
                b.message = f"the first point ({self.name} = {self.start:g}) did not solve: {first.message}"
                return b
            self._add(self.start, first, "natural")
            self._loop()
        except KeyboardInterrupt:
            b.success = False
            b.interrupted = True
            b.message = f"interrupted after {len(b.solutions)} points; what was traced is kept"
        finally:
            b.seconds = time.perf_counter() - started
            if self.bar is not None:
                self.bar.close()
        return b

    def _loop(self) -> None:
        b = self.branch
        value = self.start
        step = self.step
        while len(b.solutions) < self.max_points:
            # ---- natural step -------------------------------------------------------------
            target = value + self.direction * step
            crossing = (target - self.edge) * self.direction >= 0
            if crossing:
                target = self.edge
            guess = self._predict(target)
            sol = self._solve_at(target, guess)
            turning = self._turning(sol, target) if sol.success else False
            if sol.success and not turning:
                self._add(target, sol, "natural")
                value = target
                if crossing:
                    b.success, b.message = True, self._done(self._ending(self.edge))
                    return
                iterations = sol.diagnostics.iterations
                if not self.fixed:
                    step = min(step * (_GROW if iterations <= 4 else 1.0), self.span / 4)
                continue
            if not turning and step > self.span * 1e-3:
                step *= _SHRINK
                continue
            # ---- the branch turns (or natural steps fail): pseudo-arclength ---------------
            with np.errstate(all="ignore"):
                try:
                    outcome = self._arclength()
                except (RuntimeError, ValueError, np.linalg.LinAlgError) as err:  # a singular bordered matrix
                    outcome = False, self._done(
                        f"the arclength steps stopped near {self.name} = {b.parameter[-1]:.6g} ({err}); the branch "
                        "may end or branch off here"
                    )
            if outcome is not None:
                b.success, b.message = outcome
                return
            value = b.parameter[-1]
            step = max(abs(b.parameter[-1] - b.parameter[-2]), self.span / 100)
        b.success = False
        b.message = self._done(f"stopped after max_points = {self.max_points} points")

    def _ending(self, edge: float) -> str:
        if edge == self.stop:
            return f"reached {self.name} = {self.stop:g}"
        return f"the branch turned back and reached the other end of the range, {self.name} = {edge:g},"

    def _done(self, what: str) -> str:
        folds = f"; {len(self.branch.folds)} fold(s) located" if self.branch.folds else ""
        return f"{what} in {len(self.branch.solutions)} points{folds}"

    def _predict(self, target: float) -> Any:
        b = self.branch
        last = b.solutions[-1]
        if len(b.solutions) < 2:
            return last
        prev = b.solutions[-2]
        d_last = b.parameter[-1] - b.parameter[-2]
        lv, pv = last.interpolant, prev.interpolant
        if d_last == 0 or not np.array_equal(lv.k[np.arange(lv.k.size) != self.index],
                                             pv.k[np.arange(pv.k.size) != self.index]):
            return last  # another truncation length: no secant between the two
        ratio = (target - b.parameter[-1]) / d_last
        y_prev = hermite(self.compiled, pv.t, pv.y, pv.p, pv.k)(lv.t)
        y = lv.y + ratio * (lv.y - y_prev)
        p = lv.p + ratio * (lv.p - pv.p)
        k = lv.k.copy()
        k[self.index] = target
        return Start(self.compiled, lv.t, y, p, k)

    def _turning(self, sol: Solution, target: float) -> bool:
        """Is the branch turning here (small |d lam/ds| from the secant)?"""
        last = self.branch.solutions[-1].interpolant
        view = sol.interpolant
        if not np.array_equal(np.delete(view.k, self.index), np.delete(last.k, self.index)):
            return False
        dy = hermite(self.compiled, view.t, view.y, view.p, view.k)(last.t) - last.y
        w = node_weights(last.t)
        dlam = target - self.branch.parameter[-1]
        norm = math.sqrt(float(np.sum(w * dy * dy)) + float(np.sum((view.p - last.p) ** 2)) + dlam**2)
        return norm > 0 and abs(dlam) / norm < _TURNING

    def _arclength(self) -> tuple[bool, str] | None:
        """Step in arclength until the branch is straight again; return an end state or None."""
        b = self.branch
        last = b.solutions[-1]
        t_mesh = last.interpolant.t
        disc = CollocationEquations(self.free, t_mesh, self._k(last))
        z = self._z(last, b.parameter[-1])
        if len(b.solutions) >= 2:
            prev = b.solutions[-2]
            zp = self._z(prev, b.parameter[-2], t_mesh)
            tangent = z - zp
        else:
            tangent = np.zeros_like(z)
            tangent[-1] = self.direction
        z, _ = disc.correct(z, disc.tangent(z, tangent), self.tol)  # polish onto the discrete curve
        if z is None:
            return False, self._done(f"pseudo-arclength could not start at {self.name} = {b.parameter[-1]:.6g}")
        tangent = disc.tangent(z, tangent)
        ds = 0.05 * math.sqrt(float(np.sum(disc.weights * z * z)) + 1.0)
        min_ds = ds * 1e-6
        while len(b.solutions) < self.max_points:
            started = time.perf_counter()
            z_new, its = disc.correct(z + ds * tangent, tangent, self.tol)
            if z_new is None:
                ds *= _SHRINK
                if ds < min_ds:
                    return False, self._done(
                        f"the arclength step fell below its floor near {self.name} = {b.parameter[-1]:.6g}; "
                        "the branch may end or branch off here"
                    )
                continue
            t_new = disc.tangent(z_new, tangent)
            lam_old, lam_new = z[-1], z_new[-1]
            if tangent[-1] * t_new[-1] < 0:
                self._locate_fold(disc, z, tangent, ds)
            sol = self._solution(disc, z_new, t_new, its, time.perf_counter() - started)
            if not self._inside(lam_new):
                # left the range: finish exactly on its end if the branch allows
                edge = self.hi if lam_new > self.hi else self.lo
                end = self._solve_at(edge, sol)
                if end.success:
                    self._add(edge, end, "natural")
                return True, self._done(self._ending(edge))
            if sol.status is Status.ERROR_TOO_LARGE:
                # the mesh no longer fits the branch: a full solve at this value (mesh refinement,
                # its own estimate) from this point, and the arclength steps go on on its mesh
                better = self._solve_at(float(lam_new), sol)
                if better.success:
                    sol = better
                    disc, z_new, t_new = self._remeshed(disc, better, float(lam_new), t_new)
            self._add(lam_new, sol, "arclength")
            z, tangent = z_new, t_new
            ds = ds * _GROW if its <= 3 else ds * (_SHRINK if its >= 8 else 1.0)
            if abs(tangent[-1]) > _STRAIGHT and self.branch.folds and abs(lam_new - lam_old) > 0:
                self.direction = 1.0 if lam_new > lam_old else -1.0
                self.edge = self.hi if self.direction > 0 else self.lo
                return None
        return False, self._done(f"stopped after max_points = {self.max_points} points")

    def _remeshed(self, disc: CollocationEquations, sol: Solution, value: float, t: np.ndarray):  # noqa: ANN202
        """The collocation equations on ``sol``'s mesh, its unknowns, and the tangent ``t``
        carried over (interpolated, then the tangent of the new discrete curve)."""
        mesh = sol.interpolant.t
        new = CollocationEquations(self.free, mesh, self._k(sol))
        z = self._z(sol, value)
        ty, tp = disc.split(t)
        carried = new.join(np.array([np.interp(mesh, disc.x, row) for row in ty]), tp)
        return new, z, new.tangent(z, carried)

    def _locate_fold(self, disc: CollocationEquations, z0: np.ndarray, t0: np.ndarray, ds: float) -> None:
        """Find the fold between ``z0`` and ``z0 + ds t0`` on this mesh and on the halved mesh."""
        found = _fold_on(disc, z0, t0, ds, self.tol)
        if found is None:
            return
        z_fold = found
        # the same on the halved mesh, for the error estimate
        x = disc.x
        fine_x = np.sort(np.concatenate([x, 0.5 * (x[1:] + x[:-1])]))
        y, pz = disc.split(z0)
        y_fine = hermite(self.free, x, y, pz, disc.k)(fine_x)
        fine = CollocationEquations(self.free, fine_x, disc.k)
        yt, pt = disc.split(t0)
        t_fine = fine.join(np.array([np.interp(fine_x, x, row) for row in yt]), pt)
        z_fine0, _ = fine.correct(fine.join(y_fine, pz), fine.tangent(fine.join(y_fine, pz), t_fine), self.tol)
        error = math.nan
        if z_fine0 is not None:
            t_f = fine.tangent(z_fine0, t_fine)
            other = _fold_on(fine, z_fine0, t_f, ds * 1.5, self.tol)
            if other is not None:
                error = abs(float(other[-1]) - float(z_fold[-1]))
        sol = self._solution(disc, z_fold, disc.tangent(z_fold, t0), 0, 0.0, fold=True)
        value = float(z_fold[-1])
        outputs = {o: float(sol.evaluate(e, allow_failed=True)) for o, e in self.branch._expressions.items()}
        self.branch.folds.append(Fold(value, outputs, error, len(self.branch.solutions), sol))


class _BorderedSolve:
    """Solves with the arclength-bordered matrix ``[G_z; t]``, the border's right side zero
    (a correction normal to the branch); regular at a fold, where ``G_y`` alone is not."""

    def __init__(self, disc: CollocationEquations, z: np.ndarray, t: np.ndarray):
        import scipy.sparse as sparse
        from scipy.sparse.linalg import splu

        self._lu = splu(sparse.vstack([disc.jacobian(z), sparse.csr_matrix(t * disc.weights)]).tocsc())

    def solve(self, b: np.ndarray) -> np.ndarray:
        return self._lu.solve(np.append(b, 0.0))


def _fold_on(disc: CollocationEquations, z0: np.ndarray, t0: np.ndarray, ds: float, tol: float) -> np.ndarray | None:
    """Brent's method on the tangent's parameter component (the last unknown) along the arclength from ``z0``."""
    where = -1
    cache: dict[float, np.ndarray] = {}

    def component(s: float) -> float:
        z, _ = disc.correct(z0 + s * t0, t0, tol * 1e-2)
        if z is None:
            raise ArithmeticError
        cache[s] = z
        return float(disc.tangent(z, t0)[where])

    from scipy.optimize import brentq  # imported here: scipy.optimize costs 0.3 s at start-up

    try:
        lo, hi = component(0.0), component(ds)
        if lo * hi > 0:
            return None
        s = brentq(component, 0.0, ds, xtol=1e-12 * max(ds, 1e-300), rtol=4 * np.finfo(float).eps, maxiter=60)
    except (ArithmeticError, ValueError, RuntimeError):
        return None
    return cache.get(s, disc.correct(z0 + s * t0, t0, tol * 1e-2)[0])
