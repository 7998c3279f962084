"""``solve``: a prepared problem solved, its classes' loops around the solve, the outcome settled.

One solve (:func:`_once`) takes the first iterate from :mod:`bvpkit.solver.start` and runs
the selector (:mod:`bvpkit.solver.strategy`) on it. Each problem class may wrap that in a
loop of its own (:meth:`bvpkit.reduce.transform.Transform.around`: an infinite end lengthened
until the answer stops changing); :func:`bvpkit.solver.settle.settle` turns the result into a
:class:`~bvpkit.solver.solution.Solution`. Everything here works on the prepared problem
(``reduce/prepared.py``): the standard form on ``t`` in ``[0, 1]``; no class is named.
"""

from __future__ import annotations

import time
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

from .. import methods
from ..errors import OptionError, closest
from ..language.options import DEFAULT_TOL, SolveOptions
from ..language.problem import Problem
from ..methods.base import Trial
from ..reduce.mapping import positions
from ..reduce.prepared import Prepared, prepare
from . import strategy
from .settle import Run, place, settle
from .solution import Solution
from .start import check_guess, initial

__all__ = ["DEFAULT_TOL", "Job", "Run", "options", "settle", "solve", "solve_at"]


def options(settings: Mapping[str, Any] | None, given: Mapping[str, Any]) -> SolveOptions:
    """Solver options from a problem's settings and the arguments given (which win), checked
    (a method's name against the registry)."""
    chosen = SolveOptions.make(settings, given)
    if chosen.method != "auto":
        methods.get(chosen.method)
    return chosen


@dataclass
class Job:
    """One solve to run: the problem, its options, where to start and at which constants.

    ``tol`` may be tighter than ``options.tol`` (a class's loop asks each inner solve for
    a share of the tolerance); ``deadline`` is the ``time.perf_counter()`` value by which the
    whole solve should end (None: no limit); ``follow`` the selector's path follower."""

    prepared: Prepared
    options: SolveOptions
    guess: Any
    k: np.ndarray
    tol: float
    deadline: float | None = None
    follow: Callable | None = None


def _check_homotopy(prepared: Prepared, homotopy: str) -> None:
    """A constant named for continuation must be one of the problem's constants, not zero."""
    if homotopy in ("auto", "off"):
        return
    if homotopy not in prepared.constants:
        raise OptionError(
            f"homotopy names '{homotopy}', which is not a constant of the problem"
            f"{closest(homotopy, prepared.constants)}; give \"auto\", \"off\" or one of its constants"
        )
    if prepared.constants[homotopy] == 0:
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
    follow: Callable | None = None,
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

    follow : callable, optional
        A path follower (``bvpkit.trace``) for the selector's continuation from an easier
        problem to go round a turn, and to look for a fold when no solution is found; the
        public ``bvpkit.solve`` passes it (without it those two steps are skipped).

    Returns
    -------
    Solution
        ``success`` is False (and ``message`` says why) when the solve failed; bad input
        raises a :class:`~bvpkit.BvpkitError` instead.
    """

    if not isinstance(problem, Problem | Prepared):
        raise OptionError(f"solve() takes a bvpkit.Problem, got {type(problem).__name__}")
    prepared = prepare(problem)
    chosen = options(prepared.settings, {"method": method, "tol": tol, "max_nodes": max_nodes, "verify": verify,
                                         "truncation": truncation, "homotopy": homotopy,
                                         "time_limit": time_limit})
    _check_homotopy(prepared, chosen.homotopy)
    started = time.perf_counter()
    # the selector's budget binds auto; a method named alone runs to its end unless a limit is given
    deadline = started + chosen.time_limit if chosen.limited else None
    check_guess(prepared, guess)
    job = Job(prepared, chosen, guess, prepared.k(chosen), chosen.tol, deadline, follow)
    step = _once
    for transform in reversed(prepared.transforms):
        step = transform.around(step)
    return settle(prepared, step(job), time.perf_counter() - started)


def _once(job: Job) -> Run:
    """One solve: the first iterate, then the selector's attempts."""
    prepared = job.prepared
    t, y, p = initial(prepared, job.k, job.guess, job.options)
    compiled = prepared.compiled
    with np.errstate(all="ignore"):
        ends = positions(np.asarray(compiled.maps(p, job.k), float))
    trial = Trial(compiled, t, y, p, job.k, job.tol, job.options.max_nodes, job.options.verify,
                  place=place(compiled, p, job.k), features=prepared.features(p, job.k))
    context = strategy.Context(prepared, job.options.homotopy, job.deadline, job.follow)
    outcome, attempts, selection = strategy.run(trial, job.options.method, (float(ends[0]), float(ends[-1])),
                                                context)
    return Run(outcome, job.k, attempts, selection, job.tol, prepared.independent)


def solve_at(prepared: Prepared, k: np.ndarray, guess: Any, *, tol: float, method: str = "auto",
             verify: bool = True, change: float | None = None, max_nodes: int | None = None) -> Solution:
    """One solve at the constants ``k`` exactly as given: no class's loop runs (a truncated
    infinite end stays where ``k`` puts it). Continuation calls it at each point of a trace,
    checking its classes its own way (:meth:`Transform.along`); ``change`` is an error it
    measured beyond the method's (reported with the solution). No continuation from an
    easier problem here: a trace that fails at a value shortens its step or turns to
    pseudo-arclength instead; ``max_nodes`` bounds its mesh (a step past a fold fails fast)."""
    started = time.perf_counter()
    chosen = options(prepared.settings, {"method": method, "tol": tol, "verify": verify, "homotopy": "off",
                                         "max_nodes": max_nodes})
    run = _once(Job(prepared, chosen, guess, np.asarray(k, float), chosen.tol))
    run.extra_error = change
    return settle(prepared, run, time.perf_counter() - started)
