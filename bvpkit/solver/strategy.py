"""Which method first, which next on failure, and why, in words; the time budget of a solve.

The selector does no numerics of its own: it reads a few cheap facts about the problem
(:func:`survey`), orders the registered methods, and runs them until one succeeds. Each
attempt gets a share of the solve's time budget and stops between two of its steps when the
share is spent (``Trial.deadline``), so a slow attempt yields to the next. What a failure
says decides what comes next:

* collocation goes first (on the published test set it was 10 to 60 times faster than
  multiple shooting, and more accurate, on the problems where the survey's growth once sent
  them to shooting first); it gives up early (``Trial.patience``) when Newton's method finds
  no solution on its first meshes of a nonlinear problem and continuation can take over;
* Newton failing (not converged, the mesh limit with Newton unconverged, a singular matrix,
  overflow along the guess) on a problem that allows it goes to continuation from an easier
  problem (:mod:`bvpkit.solver.homotopy`): overflow means a guess far from the solution, not a
  domain error of ``log`` or ``sqrt``;
* a converged solution whose error cannot meet the tolerance because the problem is
  ill-conditioned ends the search: no method in double precision can do better, and a
  method that claims it would be wrong;
* a success that disagrees with an earlier converged solution beyond both estimates is not
  trusted;
* when everything failed with Newton stalling, a quick trace of the constants looks for a
  fold before their values: the problem may have no solution there.
"""

from __future__ import annotations

import dataclasses
import functools
import math
import time
from dataclasses import dataclass
from typing import Any

import numpy as np

from .. import methods
from ..errors import OptionError
from ..methods.base import Outcome, Trial
from ..methods.diagnostics import Attempt, hermite, survey
from ..programs.compiled import NEEDS
from ..status import Status
from . import homotopy
from .homotopy import free_span


@dataclass
class Step:
    """One step of a plan: a method, or continuation along a path into a method."""
    name: str  # the method's registry name, or "continuation"
    reason: str
    weight: float  # its share of the time budget, relative to the steps after it

    @property
    def continuation(self) -> bool:
        return self.name == CONTINUATION


@dataclass
class Plan:
    """Steps to try in order, each with the reason it is in that place."""
    steps: list[Step]

    @property
    def selection(self) -> str:
        first = self.steps[0]
        return f"chose {first.name.replace('_', ' ')}: {first.reason}"


@dataclass
class Context:
    """What the selector needs beyond the trial.

    Attributes
    ----------
    prepared : Prepared or None
        The prepared problem (continuation builds its easier problems from it); None: no
        continuation.
    homotopy : str
        ``"auto"`` (continuation when the methods fail and the problem allows it), ``"off"``,
        or the name of a constant to continue in (tried first).
    deadline : float or None
        ``time.perf_counter()`` value by which the whole solve should end.
    follow : callable or None
        The path follower (``bvpkit.trace``): continuation takes a turn on its path with it,
        and the diagnosis of a value with no solution traces with it; None: neither.
    """

    prepared: Any = None
    homotopy: str = "auto"
    deadline: float | None = None
    follow: Any = None


CONTINUATION = "continuation"
_FALLBACK = "fallback"  # completed at run time with the step it follows
# Thresholds of the selector, each with the reason it is where it is.
STIFF = 500.0  # max |Re eig J| * length: explicit integrators need ~this many steps; layers form
_OSCILLATES = 1.0  # max |Im eig J| * length above this (a sixth of a turn): worth saying in the reason
_ROUNDING = float(np.finfo(float).eps)
#: Shares of the time budget: each step gets ``weight / (sum of the weights of the steps
#: left)`` of the time left. Collocation first and continuation measured fastest on the test
#: set (benchmarks/testset.py); shooting is the slow fallback.
_WEIGHTS = {"first": 4.0, CONTINUATION: 3.0, "fallback": 2.0, "named": 12.0}  # named: most of it, as asked
#: Meshes on which Newton may fail from the start before collocation hands over to
#: continuation: one coarse first mesh often fails and the next succeeds (viscous shocks,
#: Bratu near its fold, in the test set); two in a row did not recover there.
_PATIENCE = 2
#: Past its share, a method still finishes the step it is in (it checks between steps); the
#: system stops it after this much more (seconds, or this part of the share if longer).
_GRACE, _GRACE_SHARE = 0.5, 0.25
# Failures that continuation from an easier problem can cure: Newton found no solution.
#: Tolerances at or below which a mesh limit met with Newton converged calls a higher order next.
_TIGHT_RESOLUTION = 1e-8
_NEWTON_FAILED = (Status.NOT_CONVERGED, Status.MESH_LIMIT, Status.SINGULAR, Status.NON_FINITE)


def _ordered(trial: Trial) -> list[type]:
    """The registered methods that can take this problem, in the order of their ranks."""
    needs = trial.compiled.needs
    return sorted((m for m in methods.REGISTRY.values() if needs <= m.takes),
                  key=lambda m: m.rank)


def _first(candidates: list[type], strength: str) -> type:
    for m in candidates:
        if strength in m.strengths:
            return m
    return candidates[0]


def _tight(trial: Trial, candidates: list[type], first: type, facts) -> tuple[type, float] | None:  # noqa: ANN001
    """A method declaring "tight" whose cost model predicts less work than ``first`` at this
    tolerance on this (smooth) problem, with the predicted ratio of work; None otherwise."""
    if not (facts is not None and math.isfinite(facts.stiffness) and facts.stiffness < STIFF and first.order):
        return None
    best = None
    for m in candidates:
        if "tight" in m.strengths and m.order > first.order:
            ratio = (m.node_cost / first.node_cost) * trial.tol ** (1 / first.order - 1 / m.order)
            if ratio < 1 and (best is None or ratio < best[1]):
                best = (m, ratio)
    return best


def _needed(trial: Trial, need: str) -> str:
    """What the problem holds that a method must take, in words (the singular term in the
    problem's own names)."""
    if need == "singular_term":
        return f"the term {singular_term(trial)} singular at the left end"
    return NEEDS.get(need, need)


def singular_term(trial: Trial) -> str:
    """The singular term of ``trial``'s problem in its own names: ``S y/r``, ``S y/(x - 1.5)``."""
    x = trial.compiled.layout.independent
    with np.errstate(all="ignore"):
        a = float(np.asarray(trial.compiled.maps(trial.p, trial.k), float)[0, 0])
    return f"S y/{x}" if a == 0 else f"S y/({x} - {a:g})" if math.isfinite(a) else f"S y/({x} - a)"


def _why(trial: Trial, name: str, facts=None) -> str:  # noqa: ANN001
    """Why the default method goes first, in words read from the survey."""
    # only needs that leave some method out say why this one goes first
    narrowing = {n for n in trial.compiled.needs if not all(n in m.takes for m in methods.REGISTRY.values())}
    if narrowing:
        held = ", ".join(_needed(trial, n) for n in sorted(narrowing))
        return f"the equations hold {held}, which {name} treats exactly (the methods without it are left out)"
    if facts is None:
        facts = survey(trial.compiled, trial.x, trial.y, trial.p, trial.k)
    if not math.isfinite(facts.stiffness):
        return "the Jacobian is not finite along the guess; the most forgiving start"
    if facts.stiffness >= STIFF:
        return (f"stiff: |real part of an eigenvalue| x length of the Jacobian reaches {facts.stiffness:.2g}, so "
                "the solution has layers that an adaptive mesh follows")
    turns = (f", oscillating: |imaginary part| x length {facts.oscillation:.2g}"
             if facts.oscillation > _OSCILLATES else "")
    words = (f"smooth (sensitivity grows by {facts.growth:.2g}, |real part of an eigenvalue| x length "
             f"{facts.stiffness:.2g}{turns}); the fastest robust choice at this size")
    if facts.growth > 1e8:
        words = (f"sensitivity grows by {facts.growth:.0e} across the domain, which its global Newton matrix "
                 "takes without integrating (on the test set it was faster than multiple shooting there)")
    return words


def plan(trial: Trial, method: str = "auto", context: Context | None = None) -> Plan:
    """Order the steps for ``trial``; a named method is tried alone.

    With ``"auto"``: the default method (collocation: declared ``"default"``, it takes every
    problem, and it measured fastest) first, unless a method declaring ``"tight"`` predicts
    less work by the declared cost models (``order``, ``node_cost``) on a smooth problem;
    continuation next when the problem allows a path (:func:`bvpkit.solver.homotopy.paths`)
    and the context has the prepared problem; then the
    other methods in the order of their ranks. A constant named for continuation puts
    continuation first.
    """
    if method != "auto":
        chosen = methods.get(method)  # validates the name
        missing = sorted(trial.compiled.needs - chosen.takes)
        if missing:
            able = ", ".join(m.name for m in _ordered(trial))
            raise OptionError(f"method {method!r} cannot take {', '.join(_needed(trial, n) for n in missing)} of "
                              f"this problem; use {able} or auto")
        return Plan([Step(method, "asked for by name", 1.0)])
    context = context or Context()
    candidates = _ordered(trial)
    first = _first(candidates, "default")
    named = context.homotopy not in ("auto", "off")
    steps = []
    if named and context.prepared is not None:
        steps.append(Step(CONTINUATION, f"continuation in {context.homotopy} asked for by name",
                          _WEIGHTS["named"]))
    facts = None if trial.compiled.needs else survey(trial.compiled, trial.x, trial.y, trial.p, trial.k)
    tight = _tight(trial, candidates, first, facts)
    if tight is not None:
        chosen, ratio = tight
        reason = (f"tolerance {trial.tol:.2g} is tight and the problem smooth (|eigenvalue| x length "
                  f"{facts.stiffness:.2g}): by the declared orders and work per node ({chosen.order} against "
                  f"{first.order}, {chosen.node_cost / first.node_cost:g} times the work), "
                  f"{chosen.name.replace('_', ' ')} needs about {ratio:.2f} of the work of "
                  f"{first.name.replace('_', ' ')}")
        first = chosen
    else:
        reason = _why(trial, first.name.replace("_", " "), facts)
    steps.append(Step(first.name, reason, _WEIGHTS["first"]))
    if context.homotopy == "auto" and context.prepared is not None:
        steps.append(Step(CONTINUATION, f"{first.name.replace('_', ' ')} found no solution from the guess: "
                          "continuation from an easier problem", _WEIGHTS[CONTINUATION]))
    for m in candidates:
        if m.name != first.name:
            steps.append(Step(m.name, _FALLBACK, _WEIGHTS["fallback"]))
    return Plan(steps)


def run(trial: Trial, method: str = "auto", domain: tuple[float, float] = (0.0, 1.0),
        context: Context | None = None) -> tuple[Outcome, list[Attempt], str]:
    """Try the steps of the plan in order until one succeeds, within the time budget.

    Returns the successful outcome (or the best failure, when all fail), the attempts made
    and the sentence saying why the first step was chosen.
    """
    context = context or Context()
    chosen = plan(trial, method, context)
    attempts: list[Attempt] = []
    outcome: Outcome | None = None
    converged: list[tuple[str, Outcome]] = []  # converged but inaccurate: witnesses against a later claim
    stalled: list[Status] = []  # how Newton failed, for the diagnosis at the end
    steps = list(chosen.steps)
    nonlinear = functools.cache(lambda: _nonlinear(trial))  # probed once, when first asked
    auto = method == "auto"
    ended = ""
    for i, step in enumerate(steps):
        if step.continuation and auto and context.homotopy == "auto" and not _continue(outcome, nonlinear):
            continue
        start = time.perf_counter()
        share = _deadline(steps[i:], context.deadline, start)
        attempt_trial = dataclasses.replace(trial, deadline=share)
        if share is not None:
            # methods stop between their steps past the share; the system itself stops a step
            # that runs far past it (one initial-value integration once took 9 s)
            hard = share + max(_GRACE, _GRACE_SHARE * (share - start))
            attempt_trial.compiled = _Timed(trial.compiled, hard)
        if auto and not step.continuation and i == 0 and _has_continuation(steps[i + 1:]):
            attempt_trial.patience = _PATIENCE if nonlinear() else None
        if step.continuation:
            found = _paths(context, trial)
            if isinstance(found, str):
                continue  # nothing to continue along: not an attempt
            result, reason = _follow(context, attempt_trial, step, found)
        else:
            reason = step.reason
            if reason == _FALLBACK:
                reason = f"fallback after {_label(attempts[-1]) if attempts else 'the plan'}"
            result = methods.get(step.name).solve(attempt_trial)
            result.method = step.name
        attempts.append(Attempt(method=result.method or step.name, reason=reason, status=result.status.word,
                                message=result.message, iterations=result.iterations,
                                nodes=int(result.x.size), seconds=time.perf_counter() - start, domain=domain,
                                error_estimate=result.error_estimate))
        if result.ok and result.condition is not None and result.condition * _ROUNDING >= 1.0:
            # converged where the problem is singular (round-off alone moves the answer by its own
            # size): not a solution to report while other methods may find a regular one
            result.status = Status.SINGULAR
            result.message = (f"{result.message}, but the problem is singular at that solution (stability "
                              f"constant {result.condition:.2g}): it is not determined there, as a periodic "
                              "orbit's period is not at the resting state it circles")
            attempts[-1].status, attempts[-1].message = result.status.word, result.message
        if result.ok:
            conflict = _disagreement(result, converged, trial)
            if conflict is None:
                return result, attempts, _selection(chosen, attempts, ended)
            result.status = Status.ERROR_TOO_LARGE
            result.message = f"{result.message}, but {conflict}"
            attempts[-1].status, attempts[-1].message = result.status.word, result.message
        if result.status is Status.ERROR_TOO_LARGE and np.isfinite(result.y).all():
            converged.append((result.method or step.name, result))
        if result.status in _NEWTON_FAILED:
            stalled.append(result.status)
        if outcome is None or _better(result, outcome):
            outcome = result
        promoted = False
        if auto and result.resolution and trial.tol <= _TIGHT_RESOLUTION:
            # the mesh limit met with Newton converged everywhere at a tight tolerance: the nodes
            # a higher order needs fall as tol**(1/order); a higher order next (at loose
            # tolerances the limit is a layer, where the adaptive integrators of shooting help)
            order = methods.get(result.method or step.name).order
            rest = steps[i + 1:]
            higher = [s for s in rest if not s.continuation and methods.get(s.name).order > order]
            reason = (f"{_label(attempts[-1])} could not make its mesh fine enough at the tight tolerance "
                      f"{trial.tol:.2g} (Newton converged on every mesh): a higher order needs fewer nodes")
            steps[i + 1:] = ([dataclasses.replace(s, reason=reason) for s in higher]
                             + [s for s in rest if s not in higher])
            promoted = bool(higher)
        if auto and _hopeless(result, trial) and not promoted:
            ended = ("double precision bounds the accuracy here (round-off times the stability constant), so "
                     "no other method was tried")
            break
        if context.deadline is not None and time.perf_counter() > context.deadline:
            ended = "the time budget of the solve was spent"
            break
    assert outcome is not None
    stuck = bool(stalled) and not converged and outcome.status in _NEWTON_FAILED
    if auto and context.prepared is not None and stuck and context.homotopy != "off" and nonlinear():
        diagnosis = _no_solution(context, trial)
        if diagnosis:
            outcome.message = f"{diagnosis} (what was seen: {outcome.message})"
    return outcome, attempts, _selection(chosen, attempts, ended)


class TimeUp(RuntimeError):
    """An attempt ran past its share of the time budget (raised inside the system's callables;
    a method turns it into a failed outcome that says so)."""

    def __init__(self) -> None:
        super().__init__("the time budget of this attempt is spent")


class _Timed:
    """The compiled system of an attempt, checking the attempt's hard deadline at each call of
    the right-hand side and its Jacobian (everything else is the system's own)."""

    def __init__(self, base, deadline: float):  # noqa: ANN001
        self._base, self._deadline = base, deadline

    def __getattr__(self, name: str):  # noqa: ANN204
        return getattr(self._base, name)

    def _check(self) -> None:
        if time.perf_counter() > self._deadline:
            raise TimeUp

    def rhs(self, x, y, p, k):  # noqa: ANN001, ANN201
        self._check()
        return self._base.rhs(x, y, p, k)

    slopes = rhs

    def jac(self, x, y, p, k):  # noqa: ANN001, ANN201
        self._check()
        return self._base.jac(x, y, p, k)


def _deadline(steps: list[Step], deadline: float | None, now: float) -> float | None:
    """This step's share of the time left: its weight over the weights of the steps left."""
    if deadline is None:
        return None
    total = sum(s.weight for s in steps)
    return now + max(0.0, deadline - now) * steps[0].weight / total


def _has_continuation(steps: list[Step]) -> bool:
    return any(s.continuation for s in steps)


def _continue(outcome: Outcome | None, nonlinear) -> bool:  # noqa: ANN001 - () -> bool
    """Whether the failure seen calls for continuation: Newton found no solution (or the
    equations overflowed along the guess). The mesh limit of a linear problem is a layer the
    mesh could not resolve, which no easier start cures."""
    if outcome is None or outcome.status not in _NEWTON_FAILED or outcome.resolution:
        return False  # a mesh that could not be made fine enough: no easier start cures it
    return outcome.status is not Status.MESH_LIMIT or nonlinear()


def _hopeless(result: Outcome, trial: Trial) -> bool:
    """A converged solution whose error is bounded below by round-off times the stability
    constant, above the tolerance: no method in double precision can do better."""
    if result.status is Status.PRECISION_LIMIT:
        return True
    condition = result.condition
    return (result.status is Status.ERROR_TOO_LARGE and condition is not None and math.isfinite(condition)
            and condition * _ROUNDING > trial.tol)


def _nonlinear(trial: Trial) -> bool:
    """Whether the equations are nonlinear in the unknowns: the Jacobian in the states changes
    with the states, or, for a free end, with the end (the length multiplies the equations, so
    ``y'' + y = 0`` with an unknown end is a nonlinear problem)."""
    with np.errstate(all="ignore"):
        y = trial.y
        scale = 1.0 + float(np.max(np.abs(y))) if y.size and np.isfinite(y).all() else 1.0
        other = y + 0.25 * scale * np.cos(np.arange(y.shape[0]) + 1.0)[:, None]
        a = trial.compiled.jac(trial.x, y, trial.p, trial.k)
        b = trial.compiled.jac(trial.x, other, trial.p, trial.k)
        # np.allclose's test (|a - b| <= atol + rtol |b|), written out: allclose costs more than the probe
        pairs = [(a, b)]
        if len(trial.p) and _free_end(trial):
            moved = trial.p + 0.25 * (1.0 + np.abs(trial.p))
            pairs.append((a, trial.compiled.jac(trial.x, y, moved, trial.k)))
        for a, b in pairs:
            close = np.abs(a - b) <= 1e-12 + 1e-10 * np.abs(b)  # inf - inf: NaN, quietly
            if not bool(close.all()):  # NaN or inf anywhere compares as not close: nonlinear
                return True
    return False


def _free_end(trial: Trial) -> bool:
    """Whether the problem's one unknown parameter sets the length of its domain."""
    return free_span(trial) is not None


def _paths(context: Context, trial: Trial):  # noqa: ANN202
    """The paths of continuation the problem allows, or why there are none (a str)."""
    named = context.homotopy if context.homotopy not in ("auto", "off") else None
    try:
        paths = homotopy.paths(context.prepared, named, trial)
    except Exception as err:  # noqa: BLE001 - a path that cannot be formed: continuation is skipped
        return f"no path could be formed ({type(err).__name__}: {err})"
    return paths or "the problem allows no path from an easier one"


def _follow(context: Context, trial: Trial, step: Step, paths: list) -> tuple[Outcome, str]:
    """Continuation along ``paths`` in turn, within this step's share."""
    tried = []
    failed = None
    for path in paths:
        if trial.out_of_time():
            break
        result, how = homotopy.follow(context.prepared, path, trial, context.follow)
        result.method = result.method or "collocation"
        if result.ok:
            result.message = f"continued from an easier problem ({path.words}, {how}): {result.message}"
            return result, f"{step.reason}: {path.words}"
        words = f"{path.words}: {result.message}"
        if failed is None or _better(result, failed):  # the furthest failure's words first
            failed = result
            tried.insert(0, words)
        else:
            tried.append(words)
    message = "continuation failed: " + "; ".join(tried) if tried else "continuation ran out of time"
    failed = failed if failed is not None else _no_path(trial, message)
    failed.status = Status.NOT_CONVERGED if failed.ok else failed.status
    if failed.status is Status.MESH_LIMIT:  # a layer stopped it: the mesh limit's own words lead
        message = f"mesh limit reached on the way: {message}"
    failed.message = message
    failed.method = "collocation"
    return failed, f"{step.reason}: " + ", then ".join(p.words for p in paths)


def _no_path(trial: Trial, why: str) -> Outcome:
    return Outcome(Status.NOT_CONVERGED, f"continuation not tried: {why}", np.asarray(trial.x, float),
                   np.asarray(trial.y, float), np.asarray(trial.p, float), method="collocation")


def _no_solution(context: Context, trial: Trial) -> str:
    try:
        return homotopy.no_solution(context.prepared, dataclasses.replace(trial, deadline=context.deadline),
                                    context.follow)
    except Exception:  # noqa: BLE001 - a diagnosis that cannot run says nothing
        return ""


def _selection(chosen: Plan, attempts: list[Attempt], ended: str) -> str:
    """Why the first step was chosen, and (when several ran) what took over, in one line."""
    words = chosen.selection
    if len(attempts) > 1:
        failed = ", ".join(f"{_label(a)} ({a.status})" for a in attempts[:-1])
        last = attempts[-1]
        if last.status in ("solved", Status.NEARLY_SINGULAR.word):
            words += f"; that failed ({failed}), and {_label(last)} took over"
        else:
            words += f"; then {failed}, and {_label(last)} ({last.status})"
    if ended:
        words += f"; {ended}"
    return words


def _label(attempt: Attempt) -> str:
    name = attempt.method.replace("_", " ")
    if ": " in attempt.reason and "continuation" in attempt.reason:
        return f"{name} after continuation ({attempt.reason.rsplit(': ', 1)[1]})"
    return name


def _disagreement(result: Outcome, converged: list[tuple[str, Outcome]], trial: Trial) -> str | None:
    """Why ``result`` cannot be a success: it differs from an earlier method's converged (if
    inaccurate) solution by more than both error estimates allow; None when they agree.

    Two methods that disagree beyond their estimates cannot both be right, and the later
    claim has no better title than the earlier one (seen on an ill-conditioned problem:
    shooting claimed 1e-13 where collocation honestly reported 0.05 and the truth was 10).
    """

    for name, other in converged:
        points = other.x
        with np.errstate(all="ignore"):
            mine = hermite(trial.compiled, result.x, result.y, result.p, trial.k)(points)
            theirs = hermite(trial.compiled, other.x, other.y, other.p, trial.k)(points)
            distance = float(np.nanmax(np.abs(mine - theirs) / (1.0 + np.abs(theirs))))
        allowed = 2.0 * ((result.error_estimate or 0.0) + (other.error_estimate or 0.0)) + 10.0 * trial.tol
        if not distance <= allowed:
            return (f"it differs by {distance:.2g} from the converged solution of {name.replace('_', ' ')} "
                    f"(estimated error {other.error_estimate or math.nan:.2g}): the methods disagree beyond "
                    "their estimates, so neither is trusted")
    return None


def _better(new: Outcome, old: Outcome) -> bool:
    """Of two failures, keep the one that got furthest (converged but inaccurate beats diverged)."""
    rank = {Status.PRECISION_LIMIT: -1, Status.ERROR_TOO_LARGE: 0, Status.MESH_LIMIT: 1}
    return rank.get(new.status, 9) < rank.get(old.status, 9)


def finite(values: np.ndarray) -> bool:
    return bool(np.all(np.isfinite(values)))
