"""Which method first, which next on failure, and why, in words.

The selector does no numerics of its own: it reads a few cheap facts about the problem
(:func:`survey`), orders the registered methods, and runs them until one succeeds.
"""

from __future__ import annotations

import dataclasses
import math
import time
from dataclasses import dataclass

import numpy as np

from . import methods
from .diagnostics import Attempt, survey
from .methods.base import Outcome, Trial
from .status import Status


@dataclass
class Plan:
    """Methods to try in order, each with the reason it is in that place."""

    steps: list[tuple[str, str]]

    @property
    def selection(self) -> str:
        name, reason = self.steps[0]
        return f"chose {name.replace('_', ' ')}: {reason}"


# Thresholds of the selector, each with the reason it is where it is.
STIFF = 500.0  # max |Re eig J| * length: explicit integrators need ~this many steps; layers form
STEEP_GROWTH = 1e8  # single shooting loses ~log10(growth) digits and overflows soon after


def _ordered(trial: Trial) -> list[type]:
    """The registered methods that can take this problem, in the order of their ranks."""
    return sorted((m for m in methods.REGISTRY.values() if m.takes_singular_term or not trial.compiled.layout.singular),
                  key=lambda m: m.rank)


def _first(candidates: list[type], strength: str) -> type:
    for m in candidates:
        if strength in m.strengths:
            return m
    return candidates[0]


def plan(trial: Trial, method: str = "auto") -> Plan:
    """Order the methods for ``trial``; a named method is tried alone.

    With ``"auto"`` the order comes from what the methods declare (``strengths``,
    ``takes_singular_term``, ``rank``) and a survey of the linearised problem along the guess
    (:func:`bvpkit.diagnostics.survey`): stiff problems (layers) go to a method strong on
    layers, whose mesh follows them; problems whose IVP sensitivities grow steeply go to one
    that splits growth; everything else to the default, which measured fastest on the small
    smooth problems of the benchmarks (``benchmarks/``). The other methods follow as
    fallbacks, in the order of their ranks.
    """
    if method != "auto":
        methods.get(method)  # validates the name
        return Plan([(method, "asked for by name")])
    candidates = _ordered(trial)
    if trial.compiled.layout.singular:
        first = _first(candidates, "default")
        reason = ("the equations hold a term S y/(x - a) singular at the left end, which "
                  f"{first.name.replace('_', ' ')} treats exactly (the methods without it are left out)")
    else:
        facts = survey(trial.compiled, trial.x, trial.y, trial.p, trial.k)
        if not math.isfinite(facts.stiffness):
            first = _first(candidates, "default")
            reason = "the Jacobian is not finite along the guess; the most forgiving start"
        elif facts.stiffness >= STIFF:
            first = _first(candidates, "layers")
            reason = (f"stiff: |eigenvalue| x length of the Jacobian reaches {facts.stiffness:.2g}, so the solution "
                      "has layers that an adaptive mesh follows")
        elif facts.growth > STEEP_GROWTH:
            first = _first(candidates, "growth")
            reason = (f"sensitivity grows by {facts.growth:.0e} across the domain; splitting the domain into "
                      "segments splits that growth")
        else:
            first = _first(candidates, "default")
            reason = (f"smooth (sensitivity grows by {facts.growth:.2g}, |eigenvalue| x length "
                      f"{facts.stiffness:.2g}); the fastest robust choice at this size")
    steps = [(first.name, reason)]
    for m in candidates:
        if m.name != first.name:
            steps.append((m.name, f"fallback after {steps[-1][0].replace('_', ' ')}"))
    return Plan(steps)


def run(trial: Trial, method: str = "auto", domain: tuple[float, float] = (0.0, 1.0)) -> tuple[Outcome, list[Attempt], str]:
    """Try the methods of the plan in order until one succeeds.

    Returns the successful outcome (or the last failure, when all fail), the attempts made
    and the sentence saying why the first method was chosen.
    """
    chosen = plan(trial, method)
    attempts: list[Attempt] = []
    outcome: Outcome | None = None
    converged: list[tuple[str, Outcome]] = []  # converged but inaccurate: witnesses against a later claim
    for name, reason in chosen.steps:
        start = time.perf_counter()
        result = methods.get(name).solve(dataclasses.replace(trial))  # each method its own copy of the trial
        attempts.append(
            Attempt(
                method=name,
                reason=reason,
                status=result.status.word,
                message=result.message,
                iterations=result.iterations,
                nodes=int(result.x.size),
                seconds=time.perf_counter() - start,
                domain=domain,
                error_estimate=result.error_estimate,
            )
        )
        result.method = name
        if result.ok:
            conflict = _disagreement(result, converged, trial)
            if conflict is None:
                return result, attempts, chosen.selection
            result.status = Status.ERROR_TOO_LARGE
            result.message = f"{result.message}, but {conflict}"
            attempts[-1].status, attempts[-1].message = result.status.word, result.message
        if result.status is Status.ERROR_TOO_LARGE and np.isfinite(result.y).all():
            converged.append((name, result))
        if outcome is None or _better(result, outcome):
            outcome = result
    assert outcome is not None
    return outcome, attempts, chosen.selection


def _disagreement(result: Outcome, converged: list[tuple[str, Outcome]], trial: Trial) -> str | None:
    """Why ``result`` cannot be a success: it differs from an earlier method's converged (if
    inaccurate) solution by more than both error estimates allow; None when they agree.

    Two methods that disagree beyond their estimates cannot both be right, and the later
    claim has no better title than the earlier one (seen on an ill-conditioned problem:
    shooting claimed 1e-13 where collocation honestly reported 0.05 and the truth was 10).
    """
    from .diagnostics import hermite

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
    rank = {Status.ERROR_TOO_LARGE: 0, Status.MESH_LIMIT: 1}
    return rank.get(new.status, 9) < rank.get(old.status, 9)


def finite(values: np.ndarray) -> bool:
    return bool(np.all(np.isfinite(values)))
