"""The user's names in a standard form: what a function, constant or parameter of the problem
is made of among the form's own (one name, or the real and imaginary parts of a complex
one), for the guesses and the quantities compiled from expressions of the user's names.
"""

from __future__ import annotations

from typing import Any

from .._lazy import LazyModule

sp = LazyModule("sympy")


def spelled(form, name: str) -> tuple[tuple[str, Any], ...]:
    """The names of ``form`` that make up the user's function, constant or parameter ``name``,
    each with its factor (``((name, 1),)`` unless a class splits it)."""
    for t in form.transforms:
        found = t.spelled(name)
        if found is not None:
            return found
    return ((name, 1),)


def factor(z: Any) -> sp.Expr:
    """A factor of :func:`spelled` (1, 1j) as SymPy's."""
    z = complex(z)
    return sp.Integer(int(z.real)) + sp.I * sp.Integer(int(z.imag))


def user_symbols(problem, form) -> dict:  # noqa: ANN001
    """The user's constants and unknown parameters (plain Symbols) as expressions of the
    standard form's ``k`` and ``p``."""
    out = {}
    for names, symbols, own in ((problem.constants, form.k, form.constants),
                                (form_parameters(problem), form.p, form.parameters)):
        for name in names:
            pieces = spelled(form, name)
            if all(piece in own for piece, _ in pieces):
                out[sp.Symbol(name)] = sp.Add(*(factor(f) * symbols[own.index(piece)] for piece, f in pieces))
    return out


def form_parameters(problem) -> list[str]:  # noqa: ANN001
    """The user's unknown parameters, the eigenvalue included."""
    return [*problem.unknown_parameters, *([problem.eigenvalue] if problem.eigenvalue else [])]


def real_parts(form, e: sp.Expr, replace: dict, where: str) -> list:
    """The real expressions of ``e`` (in the user's names) with ``replace`` made in it: ``[e]``,
    or its real and imaginary parts when a class splits values."""
    for t in form.transforms:
        found = t.parts(e, replace, where)
        if found is not None:
            return found
    return [e.xreplace(replace)]
