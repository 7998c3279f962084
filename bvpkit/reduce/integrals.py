"""Integral conditions: ``integral(c) = 1/2`` over the domain.

Each integral named in a condition becomes an added state ``z' = integrand`` with
``z(a) = 0``, read at the right end as ``z(b)`` (the condition's integral replaced by it).
"""

from __future__ import annotations

from dataclasses import dataclass

from .._lazy import LazyModule
from .transform import Transform, register

sp = LazyModule("sympy")
_form = LazyModule("bvpkit.reduce.form")  # SymPy's work: loaded only when a problem is reduced
_expr = LazyModule("bvpkit.language.expr")


def _found(problem) -> list:  # noqa: ANN001
    """The distinct integrals of the conditions, in order of first appearance."""
    found: list = []
    for c in problem.conditions:
        for g in sorted(c.atoms(_expr.DomainIntegral), key=sp.default_sort_key):
            if g not in found:
                found.append(g)
    return found


@register
@dataclass(frozen=True)
class Integrals(Transform):
    """Integrals over the domain in the conditions, as added states."""

    kind = "integrals"
    keeps_evolution = False

    @classmethod
    def applies(cls, problem) -> bool:  # noqa: ANN001
        return any(c.has(_expr.DomainIntegral) for c in problem.conditions)

    @classmethod
    def room(cls, problem) -> int:  # noqa: ANN001
        return len(_found(problem))

    @classmethod
    def states(cls, work) -> None:  # noqa: ANN001
        problem = work.problem
        replace = _form._local_replace(problem, work.user_states, work.local)
        added = []
        for g in _found(problem):
            integrand = [g.args[0].xreplace({**replace, **work.names.region(r)}) for r in range(len(work.systems))]
            i = work.add_state(f"integral({_form._as_written(g.args[0], problem)})", integrand)
            work.substitutions[g] = work.value(i, work.last, -1)
            added.append(i)
        work.scratch[cls.kind] = added

    @classmethod
    def conditions(cls, work) -> None:  # noqa: ANN001
        for i in work.scratch[cls.kind]:
            work.conditions.append((work.value(i, 0, 1), "added"))
