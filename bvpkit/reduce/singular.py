"""A term ``S y / (x - a)`` singular at the left end (a cylinder's or a sphere's centre).

Split off the first region's equations into the standard form's ``S Y / t`` (as Ascher and
Russell, and SciPy's ``solve_bvp``, do); a term singular at any other end or interface, or not
of this form, is refused by name. Methods declare whether they take the term
(``takes = {"singular_term"}``); the compiled system evaluates its limit at ``t = 0``.
"""

from __future__ import annotations

from dataclasses import dataclass

from .._lazy import LazyModule
from ..errors import ProblemError
from ..language.budget import budget, check_sizes
from .transform import Transform, register

sp = LazyModule("sympy")
_form = LazyModule("bvpkit.reduce.form")  # SymPy's work: loaded only when a problem is reduced

def _singular(problem, systems, points, local, n: int, parameters: set):  # noqa: ANN001, ANN202
    """Split ``S s / (x - a)`` off the first region's equations, singular at the left end ``a``.

    Returns ``(S, regular right-hand sides of the first region)`` or None. A term singular at
    any other end or interface, or not of this form, is refused by name.
    """
    name = problem.independent
    last = len(points) - 1
    for r, system in enumerate(systems):
        for j, end in ((r, points[r]), (r + 1, points[r + 1])):
            if j == 0 or end in (sp.oo, -sp.oo):
                continue
            if any(_form._blows_up(f.xreplace({_form._PHYSICAL: end})) for f in system):
                where = "the right end" if j == last else "an interface"
                raise ProblemError(
                    f"the equations are singular at {where} {name} = {end}: bvpkit treats singular terms at the "
                    f"left end only{'; reverse the direction of ' + name if j == last else ''}"
                )
    a = points[0]
    first = systems[0]
    if a in (sp.oo, -sp.oo):
        return None
    rows = [i for i, f in enumerate(first) if _form._blows_up(f.xreplace({_form._PHYSICAL: a}))]
    if not rows:
        return None
    if a.free_symbols & parameters:
        raise ProblemError(
            f"the equations are singular at the left end {name} = {a}, which is an unknown parameter; this "
            "combination is not supported (a singular end must be fixed)"
        )
    S = [[sp.Integer(0)] * n for _ in range(n)]
    regular = list(first)
    s = local[:n]
    for i in rows:
        g = sp.cancel(sp.together((_form._PHYSICAL - a) * first[i]))
        for j in range(n):
            entry = sp.simplify(sp.diff(g, s[j]).xreplace({_form._PHYSICAL: a}))
            if entry.has(*s) or _form._blows_up(entry):
                raise ProblemError(
                    f"the singular coefficient {sp.sstr(entry)} at {name} = {a} is not of the form S y/({name} - a)"
                )
            S[i][j] = entry
        rest = sp.cancel(sp.together(first[i] - sum(S[i][j] * s[j] for j in range(n)) / (_form._PHYSICAL - a)))
        if _form._blows_up(rest.xreplace({_form._PHYSICAL: a})):
            raise ProblemError(
                f"the term {sp.sstr(first[i])} is singular at {name} = {a} in a way bvpkit cannot treat (only "
                f"terms S y/({name} - a) are, e.g. (2/{name})*y')"
            )
        regular[i] = rest
    return S, regular


@register
@dataclass(frozen=True)
class SingularTerm(Transform):
    """The term ``S y / (x - a)`` of the first region, split off."""

    kind = "singular_term"
    needs = frozenset({"singular_term"})

    @classmethod
    def applies(cls, problem) -> bool:  # noqa: ANN001
        return True  # the analysis also refuses singular terms elsewhere

    @classmethod
    def system(cls, work) -> None:  # noqa: ANN001
        n = len(work.states)
        with budget("splitting off the singular term", advice="write the singular coefficient in a simpler form"):
            found = _singular(work.problem, work.systems, work.ends, work.local, n, work.parameter_symbols)
        if found is None:
            return
        S, regular = found
        check_sizes({f"the right-hand side of state {i}": e for i, e in enumerate(regular)},
                    step="splitting off the singular term")
        work.singular = S
        work.systems[0][:] = regular

    @classmethod
    def finish(cls, work):  # noqa: ANN001, ANN206
        return cls() if work.singular is not None else None
