"""Periodic orbits with an unknown period: the phase condition.

A problem whose conditions are all ``f^(j)(a) = f^(j)(b)`` on autonomous equations, with an
end of the domain an unknown parameter (the period), has a whole family of solutions, each
shifted along the orbit; :class:`bvpkit.Problem` counts one condition fewer for it
(``problem.phase``) and this class pins the orbit with ``u'(a) = 0`` for the first unknown.
"""

from __future__ import annotations

from dataclasses import dataclass

from .._lazy import LazyModule
from .transform import Transform, register

_form = LazyModule("bvpkit.reduce.form")  # SymPy's work: loaded only when a problem is reduced


@register
@dataclass(frozen=True)
class Periodic(Transform):
    """The phase condition ``u'(a) = 0`` of a periodic orbit."""

    kind = "periodic"

    @classmethod
    def applies(cls, problem) -> bool:  # noqa: ANN001
        return bool(problem.phase)

    @classmethod
    def conditions(cls, work) -> None:  # noqa: ANN001
        """``u'(a) = 0``: the first state's derivative at the left end, from the equations."""
        system = work.systems[0]
        a = work.problem.points[0].xreplace(work.names.region(0))
        swap = {work.local[i]: work.value(i, 0, 1) for i in range(len(system))}
        swap[_form._PHYSICAL] = a
        work.conditions.append((system[0].xreplace(swap), "phase"))
