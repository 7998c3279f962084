"""Expressions of a solution (``f''(0)``, ``1 - f'``, ``w(L-)``, ``integral(c**2)``), compiled once.

:func:`compile_quantity` (SymPy's side) turns the text into a :class:`Quantity`: plain data
(a generated program and a list of what to fill in) that a solution evaluates without SymPy:

* point values become placeholders, each ``(point, state, order, side)``: the point a
  number or a compiled function of the parameters and constants, the highest derivative of
  a function read from the equations (the slope of the state below it);
* ``integral(...)`` becomes a placeholder filled by quadrature of its integrand, itself a
  quantity;
* what remains is a function of the running point ``x``, the user states and highest
  derivatives there, ``p``, ``k`` and the placeholders.
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
        ``y`` holds the user states of a region, then the highest derivative of each function.
    points : list of (float or dict, int, int, int)
        ``(point, state, order, side)`` per point value: the point a number (``inf`` for an
        infinite end) or the program of a function of ``(x, p, k)``; ``state`` the row of the
        function's value in a region; ``side`` -1, 0 or +1.
    integrals : list of Quantity
        Integrands of ``integral(...)`` placeholders (after the point values in ``t``).
    running : bool
        Whether it depends on the running point.
    """

    program: dict
    points: list = field(default_factory=list)
    integrals: list = field(default_factory=list)
    running: bool = False

    def plain(self) -> dict[str, Any]:
        return {"program": self.program, "points": [list(p) for p in self.points],
                "integrals": [q.plain() for q in self.integrals], "running": self.running}

    @classmethod
    def from_plain(cls, data: dict[str, Any]) -> Quantity:
        points = [(p if isinstance(p, dict) else float(p), int(s), int(o), int(side)) for p, s, o, side in data["points"]]
        return cls(dict(data["program"]), points, [cls.from_plain(q) for q in data["integrals"]], bool(data["running"]))


def input_symbols(form) -> tuple:  # noqa: ANN001 - a StandardForm
    """The symbols a quantity's ``y`` holds: the user states, then each function's highest derivative."""
    return tuple(sp.Symbol(f"_y{i}", real=True) for i in range(form.users + len(form.functions)))


def compile_quantity(problem, form, text: str, parsed: Any = None) -> Quantity:  # noqa: ANN001
    """Compile an expression of the solution of ``problem`` (with standard form ``form``)."""
    from ..language.expr import DomainIntegral
    from ..programs.codegen import X, compile_expressions

    e = parsed if parsed is not None else problem.parse_quantity(text, where=f"expression '{text}'")
    y = input_symbols(form)
    names = {sp.Symbol(c): form.k[i] for i, c in enumerate(form.constants) if c in problem.constants}
    names.update({sp.Symbol(q): form.p[i] for i, q in enumerate(form.parameters)})
    replace: dict = {problem.x: X, **names}
    found = sorted(e.atoms(DomainIntegral), key=sp.default_sort_key)
    outside = e.xreplace({g: sp.Dummy() for g in found})
    values = problem.point_values(outside)
    integrals = []
    for g in found:
        integrals.append((g, sp.Dummy(), compile_quantity(problem, form, "", parsed=g.args[0])))
    points, placeholders = [], []
    for i, pv in enumerate(values):
        symbol = sp.Symbol(f"_t_point{i}", real=True)
        replace[pv.node] = symbol
        where = pv.point.xreplace(names)
        if where.is_Number or where in (sp.oo, -sp.oo):
            at: Any = float(where)
        else:  # a point that depends on constants or parameters: a function of them
            at = compile_expressions([where], [("x", [X]), ("p", form.p), ("k", form.k)], mesh="x").program
        order = int(pv.order)
        highest = order == problem.orders[pv.name]
        state = form.states.index((pv.name, order - 1 if highest else order))
        points.append((at, int(state), order, int(pv.side)))
        placeholders.append(symbol)
    for f_index, (name, order) in enumerate(form.functions):
        f = sp.Function(name)(problem.x)
        for j in range(order):
            replace[f if j == 0 else sp.Derivative(f, (problem.x, j))] = y[form.states.index((name, j))]
        replace[sp.Derivative(f, (problem.x, order))] = y[form.users + f_index]
    # the integrals' values follow the point values in ``t``, named as the program grammar allows
    filled = [sp.Symbol(f"_t_point{len(points) + j}", real=True) for j in range(len(integrals))]
    replace.update({g: s for (g, _, _), s in zip(integrals, filled)})
    e = e.xreplace(replace)
    running = bool(e.free_symbols & ({X} | set(y)))
    t = placeholders + filled
    function = compile_expressions([e], [("x", [X]), ("y", y), ("p", form.p), ("k", form.k), ("t", t)], mesh="y")
    return Quantity(function.program, points, [q for _, _, q in integrals], running)


def highest_order(state: int, order: int, states) -> bool:  # noqa: ANN001
    """Whether a placeholder asks for a highest derivative (read from the slope of ``state``)."""
    return states[state][1] != order


__all__ = ["Quantity", "compile_quantity", "input_symbols"]
