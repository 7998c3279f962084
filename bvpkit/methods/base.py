"""The small interface every solution method implements.

Contract of a method (subclass :class:`Method`):

1. ``name`` is the registry name (also the ``--method`` word); ``summary`` is one line for
   docs and ``--help``.
2. ``_solve(trial)`` solves the standard form (``y' = F(t, y, p, k)``, ``G(y(0), y(1), p, k)
   = 0`` on ``[0, 1]``) starting from ``trial.y`` / ``trial.p`` and returns an
   :class:`Outcome`. It never raises for a solve that fails; it sets ``status`` and
   ``message`` (places in the user's variable through ``trial.place``). It never prints.
   It keeps what its own ``_refine`` needs in ``Outcome.workspace``, never in new attributes.
3. ``_refine(trial, outcome)`` returns a more accurate solution of the same problem (finer
   mesh, tighter integrator tolerance) started from ``outcome``; the base class compares the
   two to estimate the error of ``outcome``, and tightens the tolerance when the estimate
   misses it. A method need not know how the estimate is used.

4. Class attributes declare what the method takes and is good at (``takes``,
   ``strengths``, ``rank``); the selector filters and orders on them, and no module outside
   ``methods/`` tests a method's name.

The base class does the shared work around these hooks: floating-point guards, the check
that a result is finite, the error estimate and its tightening loop.
"""

from __future__ import annotations

import dataclasses
import time
from collections.abc import Callable
from dataclasses import dataclass
from typing import ClassVar

import numpy as np

from ..language.options import TOL_FLOOR
from ..programs.compiled import NEEDS, CompiledSystem
from ..status import Status
from .diagnostics import crossings, hermite
from .discrete import midpoint_values

# Each round of tightening asks for this fraction of the tolerance times the ratio of the
# tolerance to the error seen; three rounds cover a miss of several orders of magnitude.
_TIGHTEN_SAFETY = 0.3
_TIGHTEN_ROUNDS = 3
_SMALLEST_TOL = TOL_FLOOR  # below this, double precision round-off dominates any method


@dataclass
class Trial:
    """Input of one method call: the standard form on ``[0, 1]`` and where to start.

    Attributes
    ----------
    compiled : CompiledSystem
        The standard form's callables (a singular term and its limit are inside ``rhs``).
    x : ndarray, shape (m,)
        Initial mesh of the standard variable, from 0 to 1.
    y : ndarray, shape (n, m)
        Guess of the states on the mesh.
    p : ndarray, shape (n_p,)
        Guess of the unknown parameters.
    k : ndarray, shape (n_k,)
        Values of the constants.
    tol : float
        Tolerance asked of the method's own error control.
    max_nodes : int
        Mesh limit.
    verify : bool
        Estimate the error (costs a second, refined solve).
    place : callable ``(float) -> str``
        How a point of the standard variable reads in the user's variable, for messages
        (``"x = 0.53"``).
    deadline : float or None
        A ``time.perf_counter()`` value: past it the method stops between two of its steps
        and reports :attr:`~bvpkit.status.Status.NOT_CONVERGED` with why (the selector's
        budget for this attempt). None: no limit.
    patience : int or None
        Meshes on which Newton's method may fail to converge, from the start, before the method
        gives up with :attr:`~bvpkit.status.Status.NOT_CONVERGED` (the selector sets it when
        continuation from an easier problem can take over; None: no limit, refinement goes on).
    features : tuple of bvpkit.methods.features.Feature
        Narrow features and corners of the equations' terms in ``t`` alone, found before the
        solve: a method's first mesh keeps the points graded into them, its integrators stop at
        the corners and take short steps across them.
    """

    compiled: CompiledSystem
    x: np.ndarray
    y: np.ndarray
    p: np.ndarray
    k: np.ndarray
    tol: float
    max_nodes: int = 20_000
    verify: bool = True
    place: Callable[[float], str] = lambda t: f"t = {t:.6g}"  # noqa: E731
    deadline: float | None = None
    patience: int | None = None
    features: tuple = ()

    def out_of_time(self) -> bool:
        """Whether the attempt's time budget is spent."""
        return self.deadline is not None and time.perf_counter() > self.deadline


@dataclass
class Outcome:
    """Result of one method call (the raw material of a ``Solution``), in the standard form.

    Attributes
    ----------
    status : Status
    message : str
    x, y, p : ndarray
        Mesh, states and parameters (the guess when the method failed early).
    iterations : int
    error_estimate : float or None
        Estimated max relative error of the states and parameters.
    parameter_errors : ndarray or None
    condition : float or None
        The stability constant, when the method computed it on the way.
    reference : Outcome or None
        The more accurate solve the estimate came from.
    method : str
        Registry name of the method that produced it (set by the selector).
    workspace : object
        The method's own state, read by its own ``_refine`` only (a typed record per method).
    resolution : bool
        A ``mesh_limit`` met with Newton's method converged on every mesh, or a residual at its
        round-off floor on a fine mesh (``precision_limit`` of the residual control): the mesh
        could not be made fine enough (a higher order, on fewer nodes, may), not a start too far
        from a solution.
    """

    status: Status
    message: str
    x: np.ndarray
    y: np.ndarray
    p: np.ndarray
    iterations: int = 0
    error_estimate: float | None = None
    parameter_errors: np.ndarray | None = None
    condition: float | None = None
    reference: Outcome | None = None
    method: str = ""
    workspace: object = None
    resolution: bool = False

    @property
    def ok(self) -> bool:
        return self.status is Status.SOLVED

    @property
    def converged(self) -> bool:
        """Newton converged (the estimate may still miss the tolerance)."""
        return self.status in (Status.SOLVED, Status.ERROR_TOO_LARGE) and bool(np.isfinite(self.y).all())


class Method:
    """Base of the solution methods; see the module docstring for the contract."""

    name: ClassVar[str] = ""
    summary: ClassVar[str] = ""
    #: Place in the selector's order of fallbacks (lower first).
    rank: ClassVar[int] = 100
    #: What the method is good at, read by the selector: "layers" (an adaptive mesh follows
    #: thin layers and fronts), "growth" (splits steep growth of the sensitivities),
    #: "default" (the first choice for a smooth problem).
    strengths: ClassVar[frozenset[str]] = frozenset()
    #: What the method takes beyond a plain standard form: the needs of problem classes
    #: (``"singular_term"``: a term ``S y / t`` singular at ``t = 0``); the selector offers a
    #: problem only to the methods that take all its classes need.
    takes: ClassVar[frozenset[str]] = frozenset()
    #: The cost model the selector reads for a method declaring "tight": the order of accuracy
    #: in the mesh spacing (0: no mesh, e.g. shooting) and the work per mesh node of a whole
    #: solve with its error estimate, relative to a method of ``node_cost`` 1. A mesh of
    #: order ``q`` needs nodes ~ ``tol**(-1/q)``, so the work of two methods compares as
    #: ``node_cost * tol**(-1/q)``.
    order: ClassVar[int] = 0
    node_cost: ClassVar[float] = 1.0

    def solve(self, trial: Trial) -> Outcome:
        """Solve, check the result is finite, and (if asked) estimate and control the error.

        An error raised inside SciPy on the way (non-finite values it refuses, a failed
        factorisation) becomes a failed outcome that says so, never a traceback. A system
        that needs what the method does not take (``compiled.needs``) is not tried.
        """
        missing = sorted(trial.compiled.needs - self.takes)
        if missing:
            return Outcome(Status.NOT_CONVERGED, f"{self.name.replace('_', ' ')} cannot take "
                           f"{', '.join(NEEDS.get(m, m) for m in missing)}; use a method that does",
                           np.asarray(trial.x, float), np.asarray(trial.y, float), np.asarray(trial.p, float))
        try:
            return self._solve_and_verify(trial)
        except (ValueError, ArithmeticError, np.linalg.LinAlgError, RuntimeError) as err:
            text = str(err).strip().rstrip(".") or type(err).__name__
            status = Status.NON_FINITE if "finite" in text or "nan" in text.lower() else Status.NOT_CONVERGED
            return Outcome(status, f"{self.name.replace('_', ' ')} stopped: {text}; {status.hint}",
                           np.asarray(trial.x, float), np.asarray(trial.y, float), np.asarray(trial.p, float))

    def _solve_and_verify(self, trial: Trial) -> Outcome:
        with np.errstate(all="ignore"):
            outcome = self._checked(self._solve(trial), trial)
            if not (outcome.ok and trial.verify):
                return outcome
            tol = trial.tol
            for _ in range(_TIGHTEN_ROUNDS + 1):
                reference = self._checked(self._refine(dataclasses.replace(trial, tol=tol), outcome), trial)
                if not reference.ok:
                    # no estimate, no claim of success
                    outcome.error_estimate = np.inf
                    outcome.reference = None
                    outcome.status = Status.ERROR_TOO_LARGE
                    outcome.message = (
                        f"{outcome.message}, but the refined solve for the error estimate failed "
                        f"({reference.message}), so the error is unknown"
                    )
                    return outcome
                estimate, p_errors = compare(outcome, reference, trial)
                outcome.error_estimate, outcome.parameter_errors = estimate, p_errors
                outcome.reference = reference
                if reference.condition is not None:
                    outcome.condition = reference.condition
                if estimate <= trial.tol or tol <= _SMALLEST_TOL:
                    break
                tol = max(_SMALLEST_TOL, tol * min(0.1, _TIGHTEN_SAFETY * trial.tol / estimate))
                retry = self._checked(
                    self._solve(dataclasses.replace(trial, tol=tol, x=outcome.x, y=outcome.y, p=outcome.p)), trial
                )
                if not retry.ok:
                    break
                retry.iterations += outcome.iterations
                outcome = retry
            if outcome.error_estimate is not None and outcome.error_estimate > trial.tol:
                outcome.status = Status.ERROR_TOO_LARGE
                outcome.message = (
                    f"converged, but the estimated error {outcome.error_estimate:.2g} is above "
                    f"the tolerance {trial.tol:.2g} even after tightening"
                )
            return outcome

    def _checked(self, outcome: Outcome, trial: Trial) -> Outcome:
        if outcome.ok and not (np.isfinite(outcome.y).all() and np.isfinite(outcome.p).all()):
            bad = np.argwhere(~np.isfinite(outcome.y))
            where = f" at {trial.place(outcome.x[bad[0][1]])}" if len(bad) else " in the parameters"
            outcome.status = Status.NON_FINITE
            outcome.message = f"the solution holds NaN or inf{where}"
        return outcome

    def _solve(self, trial: Trial) -> Outcome:  # pragma: no cover - abstract
        raise NotImplementedError

    def _refine(self, trial: Trial, outcome: Outcome) -> Outcome:  # pragma: no cover - abstract
        raise NotImplementedError


def compare(outcome: Outcome, reference: Outcome, trial: Trial) -> tuple[float, np.ndarray]:
    """Max relative difference ``|y - y_ref| / (1 + |y_ref|)`` at nodes, midpoints and the
    zero crossings of the reference's states between them (:func:`~bvpkit.methods.diagnostics.crossings`:
    where the relative difference of a state that is large elsewhere peaks); of the algebraic
    unknowns too, solved from the equations on each.

    Returns the state estimate (which includes the parameters) and the per-parameter
    absolute differences.
    """
    compiled, k = trial.compiled, trial.k
    x = outcome.x
    mid = 0.5 * (x[1:] + x[:-1])
    spline = hermite(compiled, reference.x, reference.y, reference.p, k)
    if reference.x.size == 2 * x.size - 1 and np.array_equal(reference.x[::2], x) and np.array_equal(
            reference.x[1::2], mid):
        # the reference lives on the halved mesh: its values are the comparison points
        h = np.diff(x)
        with np.errstate(all="ignore"):
            f = compiled.slopes(x, outcome.y, outcome.p, k)
        mine = np.empty_like(reference.y)
        mine[:, ::2] = outcome.y
        mine[:, 1::2] = midpoint_values(outcome.y, f, h)
        points, theirs = reference.x, reference.y
    else:
        points = np.sort(np.concatenate([x, mid]))
        mine = hermite(compiled, outcome.x, outcome.y, outcome.p, k)(points)
        theirs = spline(points)
    estimate = float(np.max(np.abs(mine - theirs) / (1.0 + np.abs(theirs))))
    if getattr(compiled, "layout", None) is not None and compiled.layout.algebraic:
        # the algebraic unknowns too, each solved from the equations on both solutions
        with np.errstate(all="ignore"):
            z_mine = compiled.algebraic(points, mine, outcome.p, k)
            z_theirs = compiled.algebraic(points, theirs, reference.p, k)
            gap = np.abs(z_mine - z_theirs) / (1.0 + np.abs(z_theirs))
        estimate = max(estimate, float(np.max(gap)) if np.isfinite(gap).all() else np.inf)
    roots = crossings(spline, points, theirs)
    if roots.size:
        theirs = spline(roots)
        mine = hermite(compiled, outcome.x, outcome.y, outcome.p, k)(roots)
        with np.errstate(all="ignore"):
            estimate = max(estimate, float(np.max(np.abs(mine - theirs) / (1.0 + np.abs(theirs)))))
    p_errors = np.abs(outcome.p - reference.p)
    if p_errors.size:
        estimate = max(estimate, float(np.max(p_errors / (1.0 + np.abs(reference.p)))))
    return estimate, p_errors
