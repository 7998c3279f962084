"""Expressions of a solution (``f''(0)``, ``1 - f'``, ``w(L-)``, ``integral(c**2)``), compiled once.

:func:`compile_quantity` (SymPy's side) turns the text into a :class:`Quantity`: plain data
(a generated program and a list of what to fill in) that a solution evaluates without SymPy:

* point values become placeholders, each ``(point, state, order, side)``: the point a
  number or a compiled function of the parameters and constants, the highest derivative of
  a function read from the equations (the slope of the state below it);
* ``integral(...)`` becomes a placeholder filled by quadrature of its integrand, itself a
  quantity;
* what remains is a function of the running point ``x``, the user states, highest
  derivatives and algebraic unknowns there, ``p``, ``k`` and the placeholders.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from .._lazy import LazyModule

sp = LazyModule("sympy")


@dataclass
class Quantity:
    """A compiled expression of a solution (see the module docstring).

    Attributes
    ----------
    program : dict
        The generated function ``quantity(x, y, p, k, t)`` as plain data (:mod:`bvpkit.programs.program`);
        ``y`` holds the user states of a region, then the highest derivative of each function,
        then the algebraic unknowns; one entry for a real value, two (real and imaginary parts)
        for a complex one.
    points : list of (float or dict, int, int, int)
        ``(point, state, order, side)`` per point value: the point a number (``inf`` for an
        infinite end) or the program of a function of ``(x, p, k)``; ``state`` the row of the
        function's value in a region (past the region's states: an algebraic unknown, by
        its place in ``layout.algebraic``); ``side`` -1, 0 or +1.
    integrals : list of Quantity
        Integrands of ``integral(...)`` placeholders (after the point values in ``t``).
    running : bool
        Whether it depends on the running point.
    """

    program: dict
    points: list = field(default_factory=list)
    integrals: list = field(default_factory=list)
    running: bool = False

    @property
    def parts(self) -> int:
        """1 for a real value, 2 for a complex one (its real and imaginary parts)."""
        return int(self.program["shape"][0])

    def plain(self) -> dict[str, Any]:
        return {"program": self.program, "points": [list(p) for p in self.points],
                "integrals": [q.plain() for q in self.integrals], "running": self.running}

    @classmethod
    def from_plain(cls, data: dict[str, Any]) -> Quantity:
        points = [(p if isinstance(p, dict) else float(p), int(s), int(o), int(side)) for p, s, o, side in data["points"]]
        return cls(dict(data["program"]), points, [cls.from_plain(q) for q in data["integrals"]], bool(data["running"]))


def input_symbols(form) -> tuple:  # noqa: ANN001 - a StandardForm
    """The symbols a quantity's ``y`` holds: the user states, then each function's highest
    derivative, then the algebraic unknowns."""
    return tuple(sp.Symbol(f"_y{i}", real=True)
                 for i in range(form.users + len(form.functions) + len(form.algebraic)))


def compile_quantity(problem, form, text: str, parsed: Any = None) -> Quantity:  # noqa: ANN001
    """Compile an expression of the solution of ``problem`` (with standard form ``form``).

    A complex value (:mod:`bvpkit.reduce.complex`) is compiled as its real and imaginary
    parts: the program's two entries (:attr:`Quantity.parts`); each point value and integral
    of a complex function fills one placeholder per part."""
    from ..language.expr import DomainIntegral
    from ..programs.codegen import X, compile_expressions
    from .spelling import factor, real_parts, spelled, user_symbols

    e = parsed if parsed is not None else problem.parse_quantity(text, where=f"expression '{text}'")
    y = input_symbols(form)
    names = user_symbols(problem, form)
    replace: dict = {problem.x: X, **names}
    found = sorted(e.atoms(DomainIntegral), key=sp.default_sort_key)
    outside = e.xreplace({g: sp.Dummy() for g in found})
    values = problem.point_values(outside)
    integrals = [(g, compile_quantity(problem, form, "", parsed=g.args[0])) for g in found]
    points, placeholders = [], []
    for pv in values:
        where = pv.point.xreplace(names)
        if where.is_Number or where in (sp.oo, -sp.oo):
            at: Any = float(where)
        else:  # a point that depends on constants or parameters: a function of them
            at = compile_expressions([where], [("x", [X]), ("p", form.p), ("k", form.k)], mesh="x").program
        order = int(pv.order)
        if pv.name in form.algebraic:  # its value, in the rows after a region's states
            symbol = sp.Symbol(f"_t_point{len(points)}", real=True)
            state = len(form.states) + form.algebraic.index(pv.name)
            points.append((at, int(state), order, int(pv.side)))
            placeholders.append(symbol)
            replace[pv.node] = symbol
            continue
        highest = order == problem.orders[pv.name]
        value = sp.S.Zero
        for piece, f in spelled(form, pv.name):
            symbol = sp.Symbol(f"_t_point{len(points)}", real=True)
            state = form.states.index((piece, order - 1 if highest else order))
            points.append((at, int(state), order, int(pv.side)))
            placeholders.append(symbol)
            value += factor(f) * symbol
        replace[pv.node] = value
    for name in problem.unknowns:
        if name in form.algebraic:
            continue  # read below, after the states
        order = problem.orders[name]
        f = sp.Function(name)(problem.x)
        pieces = spelled(form, name)
        for j in range(order):
            replace[f if j == 0 else sp.Derivative(f, (problem.x, j))] = sp.Add(
                *(factor(c) * y[form.states.index((piece, j))] for piece, c in pieces))
        replace[sp.Derivative(f, (problem.x, order))] = sp.Add(
            *(factor(c) * y[form.users + form.functions.index((piece, order))] for piece, c in pieces))
    for j, name in enumerate(form.algebraic):
        replace[sp.Function(name)(problem.x)] = y[form.users + len(form.functions) + j]
    # the integrals' values follow the point values in ``t`` (one per part), named as the
    # program grammar allows
    filled = []
    for g, q in integrals:
        symbols = [sp.Symbol(f"_t_point{len(points) + len(filled) + i}", real=True) for i in range(q.parts)]
        filled += symbols
        replace[g] = symbols[0] if q.parts == 1 else symbols[0] + sp.I * symbols[1]
    parts = real_parts(form, e, replace, f"expression '{text}'" if text else "an integrand")
    running = any(part.free_symbols & ({X} | set(y)) for part in parts)
    t = placeholders + filled
    function = compile_expressions(parts, [("x", [X]), ("y", y), ("p", form.p), ("k", form.k), ("t", t)], mesh="y")
    return Quantity(function.program, points, [q for _, q in integrals], bool(running))


def highest_order(state: int, order: int, states) -> bool:  # noqa: ANN001
    """Whether a placeholder asks for a highest derivative (read from the slope of ``state``)."""
    return states[state][1] != order


__all__ = ["Quantity", "compile_quantity", "input_symbols"]
