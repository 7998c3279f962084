"""The public entry points that make solutions, wired to what sits above the solver.

The selector's continuation from an easier problem takes a turn on its path, and diagnoses a
value with no solution near it, by tracing (:func:`bvpkit.trace`); the driver sits below
continuation, so it is given the tracer rather than importing it. A solution's sampling check
of :meth:`~bvpkit.Solution.propagate` solves at many constants, as a sweep does; it is given
its sampler by :mod:`bvpkit.families.fitting`. This module, above both, is where they meet:
``bvpkit.solve`` is the driver's with ``follow=trace``, and ``bvpkit.trace``, ``fold_curve``,
``sweep`` and ``fit`` are reached through here, so that every solution a user gets has both.
"""

from __future__ import annotations

from typing import Any

from .families.continuation import trace
from .families.fitting import fit
from .families.foldcurve import fold_curve
from .families.sweep import sweep
from .solver import driver
from .solver.solution import Solution


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
    return driver.solve(problem, method=method, tol=tol, guess=guess, max_nodes=max_nodes, verify=verify,
                        truncation=truncation, homotopy=homotopy, time_limit=time_limit, follow=trace)


solve.__doc__ = (driver.solve.__doc__ or "").replace(
    """    follow : callable, optional
        A path follower (``bvpkit.trace``) for the selector's continuation from an easier
        problem to go round a turn, and to look for a fold when no solution is found; the
        public ``bvpkit.solve`` passes it (without it those two steps are skipped).
""", "")


__all__ = ["fit", "fold_curve", "solve", "sweep", "trace"]
