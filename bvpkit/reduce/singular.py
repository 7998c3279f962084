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

def _shift(x: str, a: str) -> str:
    """``x - a`` as a person writes it: ``r`` at ``a = 0``, ``(x - 1)`` otherwise."""
    return x if a in ("0", "0.0") else f"({x} - {a})"


def _term(x: str, a: str) -> str:
    """The singular term bvpkit treats, in the problem's own names: ``S y/r``, ``S y/(x - 1)``."""
    return f"S y/{_shift(x, a)}"


def _singular(problem, systems, points, local, n: int, parameters: set, spoken=str,  # noqa: ANN001, ANN202
              variable: str = ""):
    """Split ``S s / (x - a)`` off the first region's equations, singular at the left end ``a``.

    Returns ``(S, regular right-hand sides of the first region)`` or None. A term singular at
    any other end or interface, or not of this form, is refused by name, in the user's names
    (``spoken``; ``variable``: the independent variable's name after a stretch).
    """
    name = variable or problem.independent
    last = len(points) - 1
    for r, system in enumerate(systems):
        for j, end in ((r, points[r]), (r + 1, points[r + 1])):
            if j == 0 or end in (sp.oo, -sp.oo):
                continue
            if any(_form._blows_up(f.xreplace({_form._PHYSICAL: end})) for f in system):
                where = "the right end" if j == last else "an interface"
                raise ProblemError(
                    f"the equations are singular at {where} {name} = {spoken(end)}: bvpkit treats singular terms at the "
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
            f"the equations are singular at the left end {name} = {spoken(a)}, which is an unknown parameter; this "
            "combination is not supported (a singular end must be fixed)"
        )
    S = [[sp.Integer(0)] * n for _ in range(n)]
    regular = list(first)
    s = local[:n]
    for i in rows:
        g = sp.cancel(sp.together((_form._PHYSICAL - a) * first[i]))
        for j in range(n):
            entry = sp.simplify(sp.diff(g, s[j]).xreplace({_form._PHYSICAL: a}))
            if _form._blows_up(entry) and not entry.has(*s):
                raise ProblemError(
                    f"{spoken(local[i])}' = {spoken(first[i])}: its coefficient of {spoken(s[j])} grows faster than "
                    f"1/{_shift(name, spoken(a))} at {name} = {spoken(a)}, and only terms {_term(name, spoken(a))} "
                    "are treated there"
                )
            if entry.has(*s) or _form._blows_up(entry):
                raise ProblemError(
                    f"the singular coefficient {spoken(entry)} at {name} = {spoken(a)} is not of the form "
                    f"{_term(name, spoken(a))}"
                )
            S[i][j] = entry
        rest = sp.cancel(sp.together(first[i] - sum(S[i][j] * s[j] for j in range(n)) / (_form._PHYSICAL - a)))
        if _form._blows_up(rest.xreplace({_form._PHYSICAL: a})):
            raise ProblemError(
                f"{spoken(local[i])}' = {spoken(first[i])} is singular at {name} = {spoken(a)} "
                f"in a way bvpkit cannot treat (only terms {_term(name, spoken(a))} are, e.g. "
                f"(2/{_shift(name, spoken(a))})*y')"
            )
        regular[i] = rest
    return S, regular


@register
@dataclass(frozen=True)
class SingularTerm(Transform):
    """The term ``S y / (x - a)`` of the first region, split off."""

    kind = "singular_term"
    needs = frozenset({"singular_term"})
    # u'' + (2/r) u' = g is the steady state of diffusion in a sphere or a cylinder
    # (families/stability.py takes the term's limit at the centre)
    keeps_evolution = True

    @classmethod
    def applies(cls, problem) -> bool:  # noqa: ANN001
        return True  # the analysis also refuses singular terms elsewhere

    @classmethod
    def system(cls, work) -> None:  # noqa: ANN001
        n = len(work.states)
        with budget("splitting off the singular term", advice="write the singular coefficient in a simpler form"):
            try:
                found = _singular(work.problem, work.systems, work.ends, work.local, n, work.parameter_symbols,
                                  work.spoken, "xi" if work.power > 1 else "")
            except ProblemError as err:
                if work.power == 1:
                    raise
                # the singular term is looked for in the stretched variable: the message says so
                x, a = work.problem.independent, work.spoken(work.points[0])
                raise ProblemError(f"with the stretch {_shift(x, a)} = xi**{work.power} that removes its "
                                   f"fractional powers, {err}") from None
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
