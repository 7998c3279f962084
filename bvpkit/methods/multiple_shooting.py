"""Multiple shooting: segments chosen from the growth of the sensitivities along the guess,
split when a segment's sensitivity grows too much; all segments integrated in one
vectorised IVP call; Newton with a sparse LU of the block system.

See :mod:`bvpkit.methods.shooting` for the engine.
"""

from __future__ import annotations

from .shooting import Shooting


class MultipleShooting(Shooting):
    name = "multiple_shooting"
    summary = "segments placed by sensitivity growth, one vectorised IVP call, sparse block Newton"
    rank = 1
    strengths = frozenset({"growth"})
    fixed_segments = None
