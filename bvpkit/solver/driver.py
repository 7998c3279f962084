"""``solve``: options, infinite domains, and settling the outcome into a ``Solution``.

The first iterate comes from :mod:`bvpkit.solver.start`.

Everything here works on the prepared problem (``prepared.py``): the standard form on
``t`` in ``[0, 1]``. An infinite end is truncated at the length ``_length`` (a constant of
the standard form): the solve starts at a length ``L0`` and lengthens it by ``GROWTH``
(each solve started from the previous one) until the states on the common interval change
by less than half the tolerance. Each truncated solve is error-controlled to an eighth of
the tolerance, so the change measures truncation rather than discretisation noise, and the
reported error estimate (the sum of both) meets the tolerance when ``success`` is True.

:func:`settle` is the one place that turns a method's outcome into a :class:`Solution` and
settles its status (``solve`` and continuation both use it).
"""

from __future__ import annotations

import math
import time
from collections.abc import Mapping
from typing import Any

import numpy as np

from ..reduce import features as _features
from ..reduce import guess as _guess
from .. import methods
from . import strategy
from ..methods.diagnostics import Diagnostics, condition_estimate, hermite, residuals
from ..errors import BvpkitError, OptionError
from ..generated.layout import LENGTH
from ..methods.base import Outcome, Trial
from ..reduce.prepared import DEFAULT_TRUNCATION, Prepared, prepare
from .solution import Interpolant, Solution
from .start import as_start, check_guess, initial
from ..status import Status

DEFAULT_TOL = 1e-6
DEFAULT_MAX_NODES = 20_000
GROWTH = 1.5  # lengthening factor of a truncated domain
MAX_LENGTHENINGS = 12  # 1.5**12 ~ 130: from 10 to ~1300 units before giving up
_SHARE_TRUNCATION = 0.5  # part of the tolerance allowed to truncation
_SHARE_DISCRETISATION = 0.125  # each truncated solve's error target: two of them stay below tol/4

DEFAULT_TIME_LIMIT = 8.0  # seconds for a whole solve (a share to each attempt); see strategy.py
_OPTIONS = {"method", "tol", "max_nodes", "verify", "truncation", "homotopy", "time_limit"}
#: Unit round-off of double precision: the stability constant times it is the smallest error
#: any method can promise.
_ROUNDING = float(np.finfo(float).eps)
#: A stability constant (over the solution's size) this many times ``1 + |eigenvalue| x length``
#: of the Jacobian is more than the problem's fast modes explain: the layers of the test set
#: (benchmarks/testset.py) stay below 50 times, y'' + pi^2 y = 0 at its eigenvalue is 1e7 times.
_NEAR_SINGULAR = 1e3
#: Growth of the stability constant on halving the mesh above which it has no limit: a
#: singular problem's grows 4 times (the trapezoidal rule's second order), a well-posed one's
#: converges (y'' + pi^2 y = 0 at its eigenvalue: 4.0; the layers of the test set: 1.0 to 1.3).
_DIVERGING = 3.0
_SAMPLES = 21  # points where the Jacobian's eigenvalues are read for that comparison
#: Round-off times the stability constant up to this is an accuracy worth reporting as reached
#: (precision_limit); above, the problem is too ill-conditioned for any answer (error_too_large).
_MEANINGFUL = 1e-3


def options(settings: Mapping[str, Any], given: Mapping[str, Any]) -> dict[str, Any]:
    """Solver options from a problem's settings and the arguments given (which win), checked."""
    chosen = {k: v for k, v in settings.items() if k in _OPTIONS}
    chosen.update({k: v for k, v in given.items() if v is not None})
    method = chosen.get("method", "auto")
    if method != "auto":
        methods.get(method)
    tol = chosen.get("tol", DEFAULT_TOL)
    if isinstance(tol, bool) or not isinstance(tol, int | float) or not (1e-13 <= tol <= 0.1):
        raise OptionError(f"tol must be a number between 1e-13 and 0.1, got {tol!r}")
    max_nodes = chosen.get("max_nodes", DEFAULT_MAX_NODES)
    if isinstance(max_nodes, bool) or not isinstance(max_nodes, int) or not 10 <= max_nodes <= 10**7:
        raise OptionError(f"max_nodes must be a whole number from 10 to 10**7, got {max_nodes!r}")
    verify = chosen.get("verify", True)
    if not isinstance(verify, bool):
        raise OptionError(f"verify must be true or false, got {verify!r}")
    truncation = chosen.get("truncation", DEFAULT_TRUNCATION)
    if isinstance(truncation, bool) or not isinstance(truncation, int | float) or not 0 < truncation < 1e8:
        raise OptionError(f"truncation must be a positive length, got {truncation!r}")
    homotopy = chosen.get("homotopy", "auto")
    if not isinstance(homotopy, str) or not homotopy:
        raise OptionError(f"homotopy must be \"auto\", \"off\" or the name of a constant, got {homotopy!r}")
    time_limit = chosen.get("time_limit", DEFAULT_TIME_LIMIT)
    if isinstance(time_limit, bool) or not isinstance(time_limit, int | float) or not 0 < time_limit <= 1e6:
        raise OptionError(f"time_limit must be a positive number of seconds, got {time_limit!r}")
    # the selector's budget binds auto; a method named alone runs to its end unless a limit is given
    limited = method == "auto" or "time_limit" in chosen
    return {"method": method, "tol": float(tol), "max_nodes": max_nodes, "verify": verify,
            "truncation": float(truncation), "homotopy": homotopy, "time_limit": float(time_limit),
            "limited": limited}


def _check_homotopy(prepared: Prepared, homotopy: str) -> None:
    """A constant named for continuation must be one of the problem's constants."""
    if homotopy in ("auto", "off"):
        return
    if homotopy not in prepared.constants:
        from ..errors import closest

        raise OptionError(
            f"homotopy names '{homotopy}', which is not a constant of the problem"
            f"{closest(homotopy, prepared.constants)}; give \"auto\", \"off\" or one of its constants"
        )
    if prepared.constants[homotopy] == 0 and prepared.layout.eigenvalue is None:
        raise OptionError(f"homotopy in '{homotopy}': its value is 0, where a continuation from 0 would "
                          "start")


def solve(
    problem: Any,
    *,
    method: str | None = None,
    tol: float | None = None,
    guess: Any = None,
    max_nodes: int | None = None,
    verify: bool | None = None,
    truncation: float | None = None,
    homotopy: str | None = None,
    time_limit: float | None = None,
) -> Solution:
    """Solve a boundary-value problem.

    Parameters
    ----------
    problem : Problem or Prepared
    method : {"auto", "collocation", ...}, optional
        ``"auto"`` (default) lets the selector choose and fall back; a name from
        ``bvpkit.methods.REGISTRY`` runs that method alone.
    tol : float, optional
        Tolerance on the estimated relative error of the states, ``|dy| / (1 + |y|)``
        (default 1e-6, or the problem's settings).
    guess : Solution or mapping of str to expression, optional
        Start from a previous solution of the same problem (other constants allowed), or from
        expressions per unknown function (these replace the problem's own guesses).
    max_nodes : int, optional
        Mesh limit (default 20000).
    verify : bool, optional
        Estimate the error (collocation: by deferred correction; shooting: by a re-solve with
        a tighter integrator, checked by deferred correction) and the stability constant of
        the problem (default True). Without it, the solve is faster (see ``benchmarks/``)
        and ``error_estimate`` and ``condition`` are not computed (NaN and None).
    truncation : float, optional
        First placement of an infinite end, measured from the finite end (default 10). The
        domain is lengthened from there until the solution stops changing.
    homotopy : str, optional
        Continuation from an easier problem when the methods fail from the guess:
        ``"auto"`` (default: the nonlinear terms scaled up from zero, a small constant
        multiplying the highest derivative brought down from 0.1, the domain grown from a
        short one; whichever the problem allows), ``"off"``, or the name of a constant to
        continue in, tried first (from 0.1 down for a small constant of the highest
        derivative, else from 0 to its value).
    time_limit : float, optional
        Seconds for the whole solve (default 8 with ``method="auto"``; a method named alone has
        no limit unless one is given): each attempt gets a share and stops between two of its
        steps when it is spent, so a slow method yields to the next.

    Returns
    -------
    Solution
        ``success`` is False (and ``message`` says why) when the solve failed; bad input
        raises a :class:`~bvpkit.BvpkitError` instead.
    """
    from ..language.problem import Problem

    if not isinstance(problem, Problem | Prepared):
        raise OptionError(f"solve() takes a bvpkit.Problem, got {type(problem).__name__}")
    prepared = prepare(problem)
    chosen = options(prepared.settings, {"method": method, "tol": tol, "max_nodes": max_nodes, "verify": verify,
                                         "truncation": truncation, "homotopy": homotopy,
                                         "time_limit": time_limit})
    _check_homotopy(prepared, chosen["homotopy"])
    start = time.perf_counter()
    if chosen["limited"]:
        # the selector's budget; a method named alone runs to its end unless a limit is given
        chosen["deadline"] = start + chosen["time_limit"]
    check_guess(prepared, guess)
    if any(prepared.infinite):
        return _solve_infinite(prepared, guess, chosen, start)
    k = prepared.k()
    t, y, p = initial(prepared, k, guess, chosen)
    outcome, attempts, selection = _run(prepared, t, y, p, k, chosen["tol"], chosen)
    return settle(prepared, k, outcome, attempts, selection, time.perf_counter() - start, chosen["tol"])


def place(compiled, p: np.ndarray, k: np.ndarray):  # noqa: ANN001, ANN201
    """How a point of the standard variable reads in the user's variable, for messages."""
    with np.errstate(all="ignore"):
        maps = np.asarray(compiled.maps(p, k), float)
    name = compiled.layout.independent

    def where(t: float) -> str:
        xs = _guess.physical(np.array([float(t)]), maps, compiled.layout.stretch)[:, 0]
        if xs.size == 1:
            return f"{name} = {xs[0]:.6g}"
        return f"{name} = " + " / ".join(f"{x:.6g}" for x in xs) + " (the same place in each region)"

    return where


def _run(prepared: Prepared, t, y, p, k, tol: float, chosen: dict) -> tuple[Outcome, list, str]:  # noqa: ANN001
    compiled = prepared.compiled
    with np.errstate(all="ignore"):
        ends = _guess.positions(np.asarray(compiled.maps(p, k), float))
    trial = Trial(compiled, t, y, p, k, tol, chosen["max_nodes"], chosen["verify"], place=place(compiled, p, k),
                  features=prepared.features(p, k))
    context = strategy.Context(prepared, chosen["homotopy"], chosen.get("deadline"))
    return strategy.run(trial, chosen["method"], (float(ends[0]), float(ends[-1])), context)


def _length_of(prepared: Prepared, k: np.ndarray) -> float:
    """The truncation length in the user's variable (``_length`` is in the stretched variable
    ``xi`` of a region mapped by ``x = a + xi**d``: the length is ``_length**d``)."""
    return float(k[prepared.layout.constants.index(LENGTH)]) ** _power(prepared)


def _k_at(prepared: Prepared, length: float) -> np.ndarray:
    """The constants with the infinite end placed ``length`` from the finite one."""
    return prepared.k(length ** (1.0 / _power(prepared)))


def _power(prepared: Prepared) -> int:
    return prepared.layout.power(prepared.layout.regions - 1)


def _solve_infinite(prepared: Prepared, guess: Any, chosen: dict, started: float) -> Solution:
    tol = chosen["tol"]
    # Every truncated solve is error-controlled to a fraction of the tolerance, so that the
    # change between two lengths measures truncation, not the noise of two discretisations.
    inner_tol = tol * _SHARE_DISCRETISATION
    length = chosen["truncation"]
    if isinstance(guess, Solution | _guess.Start):
        # a previous solution already knows a good length: start there (continuation, sweeps)
        length = max(length, _length_of(prepared, as_start(guess).k))
    attempts: list = []
    previous: Outcome | None = None
    previous_k = None
    growth = GROWTH ** _power(prepared)  # by GROWTH in the variable t of a stretched map
    change = math.inf
    selection = ""
    outcome: Outcome | None = None
    for _ in range(MAX_LENGTHENINGS):
        k = _k_at(prepared, length)
        if previous is None:
            t, y, p = initial(prepared, k, guess, chosen)
        else:
            ratio = (_length_of(prepared, previous_k) / length) ** (1.0 / _power(prepared))  # in t
            t = _extended_mesh(previous.x, ratio, prepared.layout)
            p = previous.p.copy()
            last = _guess.Start(prepared.compiled, previous.x, previous.y, previous.p, previous_k)
            y = _guess.carried(last, prepared.compiled, t, p, k)
            with np.errstate(all="ignore"):
                if not np.isfinite(prepared.compiled.rhs(t, y, p, k)).all():
                    # continued along its slope the solution left the equations' domain (a
                    # decaying y under y**1.5): held at its far-end values instead
                    y = _guess.carried(last, prepared.compiled, t, p, k, hold=True)
        outcome, tried, chosen_reason = _run(prepared, t, y, p, k, inner_tol, chosen)
        attempts += tried
        selection = chosen_reason
        if not outcome.ok:
            if previous is None:
                return settle(prepared, k, outcome, attempts, selection, time.perf_counter() - started, tol, length)
            break
        if previous is not None:
            compiled = prepared.compiled
            change = _guess.truncation_change(
                _guess.Start(compiled, previous.x, previous.y, previous.p, previous_k),
                _guess.Start(compiled, outcome.x, outcome.y, outcome.p, k))
            if change <= _SHARE_TRUNCATION * tol:
                return settle(prepared, k, outcome, attempts, selection, time.perf_counter() - started, tol, length,
                              change, Interpolant(prepared.compiled, previous.x, previous.y, previous.p, previous_k))
        previous, previous_k = outcome, k
        length *= growth
    assert outcome is not None and previous is not None
    elapsed = time.perf_counter() - started
    if outcome.ok:
        outcome.status = Status.TRUNCATION
        outcome.message = (
            f"the solution still changed by {change:.2g} when infinity was moved out to "
            f"{length / growth:.4g}; "
            + Status.TRUNCATION.hint
        )
        return settle(prepared, _k_at(prepared, length / growth), outcome, attempts, selection, elapsed, tol,
                      length / growth, change)
    # A longer domain failed: hand back the last converged one, marked as not settled.
    previous.status = Status.TRUNCATION
    shorter = _length_of(prepared, previous_k)
    previous.message = (
        f"the solve failed when infinity was moved out to {length:.4g} ({outcome.message}); the solution shown "
        f"stops at a length of {shorter:.4g} and had not settled (last change {change:.2g})"
    )
    return settle(prepared, previous_k, previous, attempts, selection, elapsed, tol, shorter, change)


def _extended_mesh(t: np.ndarray, ratio: float, layout) -> np.ndarray:  # noqa: ANN001
    """The standard mesh after an infinite end moved out by ``1 / ratio``: the old points where
    they were in the user's variable, new ones beyond at the spacing of the old far end."""
    if layout.regions > 1:
        return t.copy()  # other regions keep their mesh; the far region is read by interpolation
    both = all(layout.infinite)
    if both:  # x = L (2 t - 1): the old mesh shrinks towards the middle
        old = 0.5 + (t - 0.5) * ratio
    elif layout.infinite[1]:
        old = t * ratio
    else:
        old = 1.0 - (1.0 - t) * ratio
    h = max(float(np.diff(old[-5:]).mean()), 1.0 / 400)
    pieces = [old]
    if old[-1] < 1.0:
        pieces.append(np.linspace(old[-1], 1.0, max(2, int(math.ceil((1.0 - old[-1]) / h)) + 1))[1:])
    if old[0] > 0.0:
        pieces.insert(0, np.linspace(0.0, old[0], max(2, int(math.ceil(old[0] / h)) + 1))[:-1])
    mesh = np.concatenate(pieces)
    mesh[0], mesh[-1] = 0.0, 1.0
    return mesh


def settle(prepared: Prepared, k: np.ndarray, outcome: Outcome, attempts: list, selection: str, seconds: float,
           tol: float | None, length: float | None = None, change: float | None = None,
           previous: Interpolant | None = None) -> Solution:
    """Turn a method's outcome into a :class:`Solution`, settling its status: the last guards
    (finite values, the estimate within the tolerance, the eigenvalue's mode), the residuals
    and stability constant, and the words of the message."""
    compiled = prepared.compiled
    layout = compiled.layout
    residual, bc_residual = residuals(compiled, outcome.x, outcome.y, outcome.p, k)
    discretisation = outcome.error_estimate
    estimate = math.nan
    if discretisation is not None:
        estimate = discretisation + (change if change is not None and math.isfinite(change) else 0.0)
    status, message = outcome.status, outcome.message
    if status is Status.SOLVED and length is not None:
        a, b = _guess.positions(np.asarray(compiled.maps(outcome.p, k), float))[[0, -1]]
        ends = [f"{v:.4g}" for v, inf in zip((a, b), layout.infinite) if inf]
        how = (f"the solution changed by {change:.2g} from the last shorter domain"
               if change is not None and math.isfinite(change) else "held there along a trace")
        message += f"; infinity placed at {layout.independent} = {' and '.join(ends)} ({how})"
    verified = outcome.error_estimate is not None  # verify=False skips the condition estimate too
    condition = None
    if (verified and status in (Status.SOLVED, Status.ERROR_TOO_LARGE, Status.PRECISION_LIMIT)
            and np.isfinite(outcome.y).all()):
        condition = outcome.condition if outcome.condition is not None else condition_estimate(
            compiled, outcome.x, outcome.y, outcome.p, k)
    if condition is not None and math.isfinite(estimate):
        # Round-off alone, amplified by the problem's stability constant, bounds what any method
        # in double precision can promise: the estimate never claims better than that.
        estimate = max(estimate, condition * _ROUNDING)
    # The last guards: success never comes with non-finite values or an estimate above tol.
    if status is Status.SOLVED and not (np.isfinite(outcome.y).all() and np.isfinite(outcome.p).all()):
        status, message = Status.NON_FINITE, "the solution holds NaN or inf; " + Status.NON_FINITE.hint
    if status is Status.SOLVED:
        # ... nor with a narrow feature of the equations that the answer's mesh steps over
        status, message = _features_resolved(prepared, outcome, k, status, message)
    attainable = condition * _ROUNDING if condition is not None and math.isfinite(condition) else math.inf
    missed = (status is Status.SOLVED and tol is not None and math.isfinite(estimate)
              and estimate > tol * (1 + 1e-9))
    if missed and attainable <= _MEANINGFUL and estimate <= attainable * (1 + 1e-9):
        # the method met the tolerance; round-off times the stability constant alone does not
        status = Status.PRECISION_LIMIT
        message = (
            "tolerance below what double precision allows here: the method converged and its own estimate "
            "meets the tolerance, but round-off alone, amplified by the stability constant "
            f"{condition:.2g}, can change the solution by about {attainable:.2g}, the accuracy reached, "
            f"against the tolerance {tol:.2g}; " + Status.PRECISION_LIMIT.hint
        )
    if (status is Status.PRECISION_LIMIT and discretisation is not None and math.isfinite(attainable)
            and attainable > discretisation):
        message += (f"; round-off amplified by the stability constant {condition:.2g} bounds the accuracy at "
                    f"about {attainable:.2g}, the error estimate given")
    if status is Status.SOLVED and tol is not None and math.isfinite(estimate) and estimate > tol * (1 + 1e-9):
        status = Status.ERROR_TOO_LARGE
        message = f"converged, but the estimated error {estimate:.2g} is above the tolerance {tol:.2g}"
    if (status is Status.ERROR_TOO_LARGE and tol is not None and condition is not None
            and condition * _ROUNDING > tol and "ill-conditioned" not in message):
        message += (
            f"; the problem is ill-conditioned (stability constant {condition:.2g}), so round-off alone can "
            f"change the solution by {condition * _ROUNDING:.2g}: no method in double precision can do better. "
            "Look for a formulation whose answer depends less on small changes (other conditions, a "
            "shorter domain, other variables)"
        )
    if layout.eigenvalue is not None and status is Status.SOLVED:
        found = _guess.interior_zeros(_guess.first_function(layout, outcome.y))
        if found != layout.mode - 1 and _by_order(compiled, outcome, k, layout.mode):
            message += (f"; every mode of {layout.functions[0][0]} keeps as many interior zeros, so mode "
                        f"{layout.mode} was told by the order of the eigenvalues")
        elif found != layout.mode - 1:
            name = layout.functions[0][0]
            status = Status.OTHER_MODE
            message = (
                f"asked for mode {layout.mode} ({layout.mode - 1} interior zeros of {name}), but the solution "
                f"found has {found} interior zeros (mode {found + 1}); " + Status.OTHER_MODE.hint
            )
    if status is Status.SOLVED and tol is not None and condition is not None:
        warning = _nearly_singular(compiled, outcome, k, condition, tol)
        if warning:
            status, message = Status.NEARLY_SINGULAR, f"{message}; but {warning}"
    elif status is Status.PRECISION_LIMIT and tol is not None and condition is not None:
        # round-off times a huge stability constant: say when the cause is a singular problem
        warning = _nearly_singular(compiled, outcome, k, condition, tol)
        if warning:
            message = f"{message}; {warning}"
    diagnostics = Diagnostics(
        method=outcome.method or (attempts[-1].method if attempts else ""),
        iterations=outcome.iterations,
        mesh_nodes=int(outcome.x.size * layout.regions),
        max_residual=residual,
        bc_residual=bc_residual,
        error_estimate=estimate,
        discretisation_error=discretisation,
        truncation_error=change if length is not None else None,
        truncation_length=length,
        condition=condition,
        seconds=seconds,
        attempts=attempts,
        selection=selection,
        tol=tol,
    )
    reference = None
    if outcome.reference is not None:
        ref = outcome.reference
        reference = Interpolant(compiled, ref.x, ref.y, ref.p, k)
    return Solution(prepared, k, status, message, diagnostics.method, outcome.x, outcome.y, outcome.p,
                    diagnostics, outcome.parameter_errors, reference, previous)


def _features_resolved(prepared: Prepared, outcome: Outcome, k: np.ndarray, status: Status,
                        message: str) -> tuple[Status, str]:
    """A success whose mesh does not hold a narrow feature of the equations
    (:func:`bvpkit.reduce.features.unresolved`) is no success: the method never saw the feature, and
    its error estimate cannot either."""
    missed = _features.unresolved(outcome.x, prepared.features(outcome.p, k))
    if missed is None:
        return status, message
    compiled = prepared.compiled
    with np.errstate(all="ignore"):
        scale = float(np.abs(np.asarray(compiled.maps(outcome.p, k), float)[0, 1]))
    what = _features.words(missed, place(compiled, outcome.p, k), scale)
    if not missed.representable:
        why = (f"{what}: narrower than double precision can resolve there, so no mesh holds it; write the term "
               "as a step (min, max) or widen it")
    else:
        why = (f"{what}, which the final mesh of {outcome.x.size} nodes does not resolve (the method stepped over "
               "it, and its error estimate cannot see it); raise max_nodes or give a finer first guess there")
    return Status.MESH_LIMIT, f"{message}, but the equations hold {why}"


def _by_order(compiled, outcome: Outcome, k: np.ndarray, mode: int) -> bool:  # noqa: ANN001
    """Whether the modes of this eigenvalue problem are told apart by the order of the
    eigenvalues alone (all with as many interior zeros), and the eigenvalue found is the
    ``mode``-th: the guess's eigenvalue within 5%."""
    report: dict = {}
    try:
        _, guessed = _guess.eigen_guess(compiled, _guess.initial_mesh(), k, mode, report)
    except (BvpkitError, ArithmeticError, ValueError, np.linalg.LinAlgError):
        return False
    found = float(outcome.p[compiled.layout.eigenvalue])
    return bool(report.get("by_order")) and abs(found - guessed) <= 0.05 * max(abs(found), 1e-300)


def _nearly_singular(compiled, outcome: Outcome, k: np.ndarray, condition: float,  # noqa: ANN001
                     tol: float) -> str:
    """Why a converged solution that meets the tolerance is still a warning ('' when it is not).

    The stability constant ``K`` bounds how far a change of the equations moves the solution;
    against the solution's size ``Y = 1 + max |y|`` (the tolerance is relative) it reads
    ``K / Y``. Two conditions together: ``K tol / Y > 1`` (a change of the equations within
    the tolerance asked could move the solution by more than its own size, so the tolerance
    no longer pins it down), and ``K / Y`` far above what the problem's own fast modes explain
    (``_NEAR_SINGULAR`` times ``1 + |eigenvalue| x length`` of the Jacobian along the solution:
    a thin layer of width ``eps`` has ``K ~ 1/eps`` and is well posed). Both hold near a
    singular linearised problem: a homogeneous problem at an eigenvalue, a resonance, a fold
    or a branch point.
    """
    size = 1.0 + float(np.max(np.abs(outcome.y[compiled.layout.user_rows]), initial=0.0))
    relative = condition / size
    if not (math.isfinite(relative) and relative > _NEAR_SINGULAR):
        return ""
    if relative <= _NEAR_SINGULAR * (1.0 + _fastest(compiled, outcome, k)):
        return ""
    if relative * tol > 1.0:
        return (f"the problem is nearly singular here (stability constant {condition:.2g}, against a tolerance "
                f"of {tol:.2g}): {_likely_cause(compiled, outcome, k)}")
    growth = _growth_on_halving(compiled, outcome, k)
    if growth < _DIVERGING:
        return ""
    return (f"the problem is singular here (its stability constant, {condition:.2g} on this mesh, grows "
            f"{growth:.2g} times when the mesh is halved: it has no bound, whatever the tolerance): "
            f"{_likely_cause(compiled, outcome, k)}")


def _growth_on_halving(compiled, outcome: Outcome, k: np.ndarray) -> float:  # noqa: ANN001
    """How much the stability constant (``condition_estimate``, trapezoidal rule) grows when the
    solution's mesh is halved: about 1 for a well-posed problem, where it converges; about 4
    for a singular linearised problem, where the discrete eigenvalue closing on zero (at the
    rule's second order) sets the figure and the constant has no limit. NaN when it cannot
    be estimated."""
    x = outcome.x
    fine = np.empty(2 * x.size - 1)
    fine[::2], fine[1::2] = x, 0.5 * (x[1:] + x[:-1])
    with np.errstate(all="ignore"):
        y = hermite(compiled, x, outcome.y, outcome.p, k)(fine)
        if not np.isfinite(y).all():
            return math.nan
        coarse = condition_estimate(compiled, x, outcome.y, outcome.p, k)
        halved = condition_estimate(compiled, fine, y, outcome.p, k)
    if coarse is None or halved is None or not (coarse > 0 and math.isfinite(coarse)):
        return math.nan
    return halved / coarse


def _fastest(compiled, outcome: Outcome, k: np.ndarray) -> float:  # noqa: ANN001
    """``max |eigenvalue| x length`` of the Jacobian along the solution (oscillating modes
    count: their eigenvalues are imaginary), sampled at a few points."""
    x = outcome.x
    at = np.unique(np.linspace(0, x.size - 1, min(x.size, _SAMPLES)).astype(int))
    with np.errstate(all="ignore"):
        jac = np.moveaxis(np.asarray(compiled.jac(x[at], outcome.y[:, at], outcome.p, k)), -1, 0)
        if not np.isfinite(jac).all():
            return math.inf
        return float(np.max(np.abs(np.linalg.eigvals(jac)))) * float(x[-1] - x[0])


def _likely_cause(compiled, outcome: Outcome, k: np.ndarray) -> str:  # noqa: ANN001
    """The likely cause of a nearly singular problem, and what to do, in words."""
    x, y, p = outcome.x, outcome.y, outcome.p
    with np.errstate(all="ignore"):
        zero = np.zeros_like(y)
        homogeneous = (np.allclose(compiled.rhs(x, zero, p, k), 0.0, atol=1e-300)
                       and np.allclose(compiled.bc(zero[:, 0], zero[:, -1], p, k), 0.0, atol=1e-300))
        scale = 1.0 + float(np.max(np.abs(y)))
        shifted = y + scale * np.cos(np.arange(y.shape[0]))[:, None]  # another state, far from y
        jac, other = compiled.jac(x, y, p, k), compiled.jac(x, shifted, p, k)
        linear = bool(np.all(np.isfinite(jac)) and np.allclose(jac, other, rtol=1e-10, atol=1e-12))
    size = float(np.max(np.abs(y[compiled.layout.user_rows]))) if y.size else 0.0
    if homogeneous and linear:
        which = "the zero solution was found" if size < 1e-8 else "a solution was found"
        return (f"the problem is homogeneous (zero conditions and no forcing) and {which}, but a non-zero "
                "solution, and any multiple of it, very likely solves it too (an eigenvalue of the problem "
                "is at or next to these constants); add a normalisation (a condition such as y'(0) = 1), or "
                "state it as an eigenvalue problem")
    if linear:
        return ("the problem is linear and close to a resonance (its homogeneous version has a non-zero "
                "solution for nearby values of the constants), so the answer is very sensitive to the "
                "constants; check them, and trace one (bvpkit trace) to see the sensitivity")
    return ("a fold or branch point of the family of solutions is likely nearby (another solution may be "
            "close); trace a constant through this value (bvpkit trace) to see the family, and give a guess "
            "to pick a branch")


def solve_at(prepared: Prepared, k: np.ndarray, guess: Any, *, tol: float, method: str = "auto",
             verify: bool = True, change: float | None = None) -> Solution:
    """One solve at the constants ``k`` exactly as given: a truncated infinite end stays
    where ``k`` puts it (no truncation loop). Continuation calls it at each point of a
    trace, checking the truncation its own way; ``change`` is the truncation error it
    measured last (reported with the solution). No continuation from an easier problem here:
    a trace that fails at a value shortens its step or turns to pseudo-arclength instead."""
    started = time.perf_counter()
    chosen = options(prepared.settings, {"method": method, "tol": tol, "verify": verify, "homotopy": "off"})
    k = np.asarray(k, float)
    t, y, p = initial(prepared, k, guess, chosen)
    outcome, attempts, selection = _run(prepared, t, y, p, k, chosen["tol"], chosen)
    length = _length_of(prepared, k) if any(prepared.infinite) else None
    return settle(prepared, k, outcome, attempts, selection, time.perf_counter() - started, chosen["tol"], length,
                  change if length is not None else None)
