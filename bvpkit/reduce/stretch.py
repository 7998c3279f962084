"""Weak end singularities: fractional powers of ``x - a`` at a finite left end, removed by a
stretch of the variable ``x - a = xi**d``.

``1/sqrt(x)``, ``sqrt(x)`` and ``x**(3/2)`` at ``a = 0`` make the equations singular (or the
solution not smooth) there; with ``x = a + xi**d``, ``d`` the least common denominator of the
exponents (times the order of their bases at ``a``), every such power is a whole power of
``xi``, and ``dY/dxi = d xi**(d-1) F(a + xi**d, Y)``: the Jacobian factor absorbs a
``1/sqrt`` (Thomas-Fermi's ``y'' = y**(3/2)/sqrt(x)`` becomes regular). The states stay
derivatives in ``x``, so conditions and outputs are unchanged; the region's map becomes
``x = a + h t**d`` (its power in the standard form's ``stretch``, which the map back reads).
"""

from __future__ import annotations

from dataclasses import dataclass

from .._lazy import LazyModule
from ..errors import ProblemError
from ..language.budget import budget
from .transform import Transform, register

sp = LazyModule("sympy")
_form = LazyModule("bvpkit.reduce.form")  # SymPy's work: loaded only when a problem is reduced

#: The largest power ``d`` of a stretch ``x - a = xi**d`` (halves, thirds and sixths of
#: exponents are common; beyond, the stretched map crowds the mesh at one end too much).
_MAX_STRETCH = 6


def _stretch(problem, systems, points, parameters: set):  # noqa: ANN001, ANN202
    """Fractional powers of ``x - a`` at the finite left end ``a`` removed by ``x - a = xi**d``.

    ``1/sqrt(x)``, ``sqrt(x)`` and ``x**(3/2)`` at ``a = 0`` make the equations singular (or
    the solution not smooth) there; with ``x = a + xi**d``, ``d`` the least common
    denominator of the exponents (times the order of their bases at ``a``), every such power
    is a whole power of ``xi``, and ``dY/dxi = d xi**(d-1) F(a + xi**d, Y)``: the Jacobian
    factor absorbs a ``1/sqrt`` (Thomas-Fermi's ``y'' = y**(3/2)/sqrt(x)`` becomes regular).
    The states stay derivatives in ``x``, so conditions and outputs are unchanged.

    Returns ``(d, points)``: ``d`` (1 when nothing is stretched) and the ends for the
    singular split and the map, in ``xi`` for a stretched problem (``0`` and
    ``(b - a)**(1/d)``); ``systems[0]`` is rewritten in ``xi`` in place. Only a single region
    with a fixed (not unknown) left end is stretched.
    """
    a = points[0]
    if len(systems) != 1 or a in (sp.oo, -sp.oo) or a.free_symbols & parameters:
        return 1, points
    z = sp.Dummy("z", positive=True)
    power = 1
    for f in systems[0]:
        shifted = f.xreplace({_form._PHYSICAL: a + z})
        for base, exponent in (q.as_base_exp() for q in shifted.atoms(sp.Pow)):
            if not (exponent.is_Rational and not exponent.is_Integer and base.has(z)):
                continue
            try:
                lead = sp.Poly(base.as_leading_term(z).as_independent(z)[1], z)
                order = sp.Integer(lead.monoms()[0][0]) if lead.is_monomial else None
            except (sp.PolynomialError, ValueError, TypeError, NotImplementedError):
                order = None
            if order is None or order == 0:
                continue
            power = int(sp.ilcm(power, sp.Rational(order * exponent).q))
    if power == 1:
        return 1, points
    if power > _MAX_STRETCH:
        raise ProblemError(
            f"the equations hold powers of {problem.independent} - {a} with exponents that need a stretch "
            f"{problem.independent} - {a} = xi**{power} (at most {_MAX_STRETCH} is done): write them with "
            "simpler exponents"
        )
    xi = sp.Dummy("xi", positive=True)
    stretched = [power * xi ** (power - 1) * f.xreplace({_form._PHYSICAL: a + xi**power}) for f in systems[0]]
    systems[0][:] = [f.xreplace({xi: _form._PHYSICAL}) for f in stretched]
    b = points[-1]
    return power, (sp.Integer(0), b if b in (sp.oo, -sp.oo) else (b - a) ** sp.Rational(1, power))


@register
@dataclass(frozen=True)
class EndStretch(Transform):
    """A stretch ``x - a = xi**power`` of a single region with a fixed finite left end."""

    kind = "end_stretch"
    power: int = 1

    @classmethod
    def applies(cls, problem) -> bool:  # noqa: ANN001
        return len(problem.regions) == 1

    @classmethod
    def system(cls, work) -> None:  # noqa: ANN001
        with budget("looking for fractional powers of the independent variable at the left end"):
            work.power, work.ends = _stretch(work.problem, work.systems, work.points, work.parameter_symbols)

    @classmethod
    def finish(cls, work):  # noqa: ANN001, ANN206
        return cls(int(work.power)) if work.power > 1 else None

    @classmethod
    def read(cls, fields) -> EndStretch:  # noqa: ANN001
        power = fields.get("power")
        if set(fields) != {"power"} or isinstance(power, bool) or not isinstance(power, int) or not 1 < power <= _MAX_STRETCH:
            raise ValueError("end_stretch: a whole power from 2 to 6 expected")
        return cls(power)
