"""Single shooting: the unknown initial states (and parameters) found by Newton's method on
the boundary residual, with exact sensitivities from the variational equations.

Very accurate on smooth problems whose sensitivities grow moderately across the interval;
fails when they grow exponentially (the trajectory overflows before the far end), which is
reported with the x where it happened. See :mod:`bvpkit.methods.shooting` for the engine.
"""

from __future__ import annotations

from .shooting import Shooting


class SingleShooting(Shooting):
    name = "single_shooting"
    summary = "Newton on the initial states, exact variational sensitivities, DOP853 or Radau"
    rank = 2
    strengths = frozenset()
    fixed_segments = 1
