"""SymPy -> vectorised NumPy callables with exact Jacobians (the code ``compiled.py`` runs).

Each generated function evaluates over a whole mesh at once: states ``y`` have shape
``(n, m)`` (SciPy's layout) or ``(n,)`` for a single point, and the output follows.
Common subexpressions are eliminated across a function's entries.

The generated source holds only internal names (``_x``, ``_y0``, ``_p0``, ``_k0``, ``_t0``)
and the names of NumPy/SciPy functions: no text a user typed ever reaches ``compile``.
:func:`check_source` enforces that before anything is compiled.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence

import numpy as np
import sympy as sp
from sympy.printing.numpy import SciPyPrinter

from .compiled import (
    CACHE_VARIABLE,
    CompiledSystem,
    _MEMORY,
    assemble,
    build_quantity,
    check_source,
    read_cache,
    write_cache,
)
from .reduce import X, StandardForm

# names of compiled.py that code and tests reach through this module
__all__ = ["CACHE_VARIABLE", "CompiledSystem", "check_source", "compile_expressions", "compile_system"]


class _Printer(SciPyPrinter):
    """SciPy's printer, with pi from NumPy (importing scipy.constants costs 0.15 s at start-up)."""

    def _print_Pi(self, expr):  # noqa: ANN001, ANN202, N802
        return "numpy.pi"


def _printer() -> SciPyPrinter:
    return _Printer({"fully_qualified_modules": True, "inline": True})


def _unpack(lines: list[str], name: str, symbols: Sequence[sp.Symbol], used: set) -> None:
    for i, s in enumerate(symbols):
        if s in used:
            lines.append(f"    {s.name} = {name}[{i}]")


def _function_source(
    fname: str,
    args: Sequence[tuple[str, Sequence[sp.Symbol]]],
    entries: dict[tuple[int, ...], sp.Expr],
    shape: tuple[int, ...],
    mesh: str | None,
) -> str:
    """Source of ``def fname(args): out[index] = expr ...`` with shared subexpressions.

    ``mesh`` names the argument whose trailing shape the output takes (``None``: no
    trailing mesh axis, as for boundary conditions).
    """
    keys = list(entries)
    exprs = [entries[key] for key in keys]
    temps, reduced = sp.cse(exprs, symbols=sp.numbered_symbols("_t"), order="none")
    used: set = set()
    for e in [*reduced, *(t[1] for t in temps)]:
        used |= e.free_symbols
    printer = _printer()
    lines = [f"def {fname}({', '.join(a for a, _ in args)}):"]
    for arg, symbols in args:
        if arg == "x":
            if X in used:
                lines.append("    _x = x")
        else:
            _unpack(lines, arg, symbols, used)
    if mesh is None:
        lines.append(f"    out = numpy.zeros({shape!r})")
    else:
        lines.append(f"    shape = numpy.broadcast(x, {mesh}[0]).shape")
        lines.append(f"    out = numpy.zeros({shape!r} + shape)")
    for t, e in temps:
        lines.append(f"    {t.name} = {printer.doprint(e)}")
    for key, e in zip(keys, reduced):
        index = ", ".join(str(i) for i in key)
        lines.append(f"    out[{index}] = {printer.doprint(e)}")
    lines.append("    return out")
    return "\n".join(lines) + "\n"


def _bc_sides(form: StandardForm) -> np.ndarray:
    sides = []
    for e in form.conditions:
        used = e.free_symbols
        left, right = bool(used & set(form.ya)), bool(used & set(form.yb))
        if used & set(form.p) or left == right:
            sides.append(2)
        else:
            sides.append(0 if left else 1)
    return np.array(sides, dtype=int)


def _derivatives(exprs, symbols) -> dict:  # noqa: ANN001
    """``{(i, j): d exprs[i] / d symbols[j]}`` for the entries that are not zero."""
    found = {}
    for i, e in enumerate(exprs):
        used = e.free_symbols
        for j, s in enumerate(symbols):
            if s in used:
                d = sp.diff(e, s)
                if d != 0:
                    found[(i, j)] = d
    return found


def _system_source(form: StandardForm) -> tuple[str, np.ndarray]:
    """Source of the standard form's callables: ``rhs``, its Jacobians in ``y``, ``p`` and the
    constants ``k`` (continuation frees a constant by reading its column), the conditions and
    their Jacobians, the singular matrix and the region maps."""
    n, n_p, n_k = len(form.rhs), len(form.p), len(form.k)
    xyk = [("x", [X]), ("y", form.y), ("p", form.p), ("k", form.k)]
    ab = [("ya", form.ya), ("yb", form.yb), ("p", form.p), ("k", form.k)]
    pk = [("p", form.p), ("k", form.k)]
    m = len(form.conditions)
    rhs = {(i,): e for i, e in enumerate(form.rhs) if e != 0}
    jac = _derivatives(form.rhs, form.y)
    pattern = np.zeros((n, n), dtype=bool)
    for i, j in jac:
        pattern[i, j] = True
    singular = {}
    if form.singular is not None:
        singular = {(i, j): e for i, row in enumerate(form.singular) for j, e in enumerate(row) if e != 0}
        for i, j in singular:
            pattern[i, j] = True
    maps = {(r, c): e for r, pair in enumerate(form.maps) for c, e in enumerate(pair) if e != 0}
    parts = [
        _function_source("rhs", xyk, rhs, (n,), "y"),
        _function_source("jac", xyk, jac, (n, n), "y"),
        _function_source("pjac", xyk, _derivatives(form.rhs, form.p), (n, n_p), "y"),
        _function_source("kjac", xyk, _derivatives(form.rhs, form.k), (n, n_k), "y"),
        _function_source("bc", ab, {(i,): e for i, e in enumerate(form.conditions) if e != 0}, (m,), None),
        _function_source("bc_jac_a", ab, _derivatives(form.conditions, form.ya), (m, n), None),
        _function_source("bc_jac_b", ab, _derivatives(form.conditions, form.yb), (m, n), None),
        _function_source("bc_jac_p", ab, _derivatives(form.conditions, form.p), (m, n_p), None),
        _function_source("bc_jac_k", ab, _derivatives(form.conditions, form.k), (m, n_k), None),
        _function_source("singular_matrix", pk, singular, (n, n), None),
        _function_source("region_maps", pk, maps, (len(form.maps), 2), None),
    ]
    return "".join(parts), pattern


def compile_system(form: StandardForm) -> CompiledSystem:
    """Generate (or fetch from the in-process or disk cache) the callables of ``form``.

    The disk cache (``~/.cache/bvpkit`` or ``$BVPKIT_CACHE_DIR``; ``off`` disables it) is
    keyed by the form's content and the bvpkit code (compiled.code_stamp); generated code is
    re-checked before it is compiled, whatever its origin.
    """
    key = form.key()
    cached = _MEMORY.get(key)
    if cached is not None:
        return cached
    stored = read_cache(key)
    if stored is not None:
        source, pattern, sides = stored
    else:
        source, pattern = _system_source(form)
        sides = _bc_sides(form)
        write_cache(key, source, pattern, sides)
    return assemble(form.layout(), source, pattern, sides)


def compile_expressions(
    exprs: Sequence[sp.Expr], args: Sequence[tuple[str, Sequence[sp.Symbol]]], mesh: str
) -> Callable:
    """A vectorised callable ``(*args) -> ndarray, shape (len(exprs), m)`` (cached by content)."""
    key = (tuple(sp.srepr(e) for e in exprs), tuple((a, tuple(map(str, s))) for a, s in args), mesh)
    cached = _QUANTITIES.get(key)
    if cached is None:
        entries = {(i,): e for i, e in enumerate(exprs)}
        source = _function_source("quantity", args, entries, (len(exprs),), mesh)
        cached = build_quantity(source)
        if len(_QUANTITIES) > 2_000:
            _QUANTITIES.clear()
        _QUANTITIES[key] = cached
    return cached


_QUANTITIES: dict[tuple, Callable] = {}
