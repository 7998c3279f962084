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

from .budget import budget
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
from .reduce import X, FirstOrderSystem

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


def _bc_sides(system: FirstOrderSystem) -> np.ndarray:
    sides = []
    for e in system.conditions:
        used = e.free_symbols
        left, right = bool(used & set(system.ya)), bool(used & set(system.yb))
        if used & set(system.p) or left == right:
            sides.append(2)
        else:
            sides.append(0 if left else 1)
    return np.array(sides, dtype=int)


def _system_source(system: FirstOrderSystem) -> tuple[str, np.ndarray]:
    n, n_p = system.n, len(system.p)
    xyk = [("x", [X]), ("y", system.y), ("p", system.p), ("k", system.k)]
    ab = [("ya", system.ya), ("yb", system.yb), ("p", system.p), ("k", system.k)]
    m = len(system.conditions)
    rhs = {(i,): e for i, e in enumerate(system.rhs) if e != 0}
    jac, pjac, pattern = {}, {}, np.zeros((n, n), dtype=bool)
    for i, e in enumerate(system.rhs):
        for j, s in enumerate(system.y):
            d = sp.diff(e, s)
            if d != 0:
                jac[(i, j)] = d
                pattern[i, j] = True
        for j, s in enumerate(system.p):
            d = sp.diff(e, s)
            if d != 0:
                pjac[(i, j)] = d
    bc = {(i,): e for i, e in enumerate(system.conditions) if e != 0}
    bca, bcb, bcp = {}, {}, {}
    for i, e in enumerate(system.conditions):
        for j in range(n):
            for store, s in ((bca, system.ya[j]), (bcb, system.yb[j])):
                d = sp.diff(e, s)
                if d != 0:
                    store[(i, j)] = d
        for j, s in enumerate(system.p):
            d = sp.diff(e, s)
            if d != 0:
                bcp[(i, j)] = d
    physical = {(i,): e for i, e in enumerate(system.physical_rhs or system.rhs) if e != 0}
    singular = {}
    if system.singular is not None:
        singular = {(i, j): e for i, row in enumerate(system.singular) for j, e in enumerate(row) if e != 0}
    finite_ends = {(i,): e for i, e in enumerate(system.domain) if e not in (sp.oo, -sp.oo)}
    parts = [
        _function_source("physical", xyk, physical, (n,), "y"),
        _function_source("singular_matrix", [("p", system.p), ("k", system.k)], singular, (n, n), None),
        _function_source("domain_ends", [("p", system.p), ("k", system.k)], finite_ends, (2,), None),
        _function_source("rhs", xyk, rhs, (n,), "y"),
        _function_source("jac", xyk, jac, (n, n), "y"),
        _function_source("pjac", xyk, pjac, (n, n_p), "y"),
        _function_source("bc", ab, bc, (m,), None),
        _function_source("bc_jac_a", ab, bca, (m, n), None),
        _function_source("bc_jac_b", ab, bcb, (m, n), None),
        _function_source("bc_jac_p", ab, bcp, (m, n_p), None),
    ]
    return "".join(parts), pattern


def compile_system(system: FirstOrderSystem) -> CompiledSystem:
    """Generate (or fetch from the in-process or disk cache) the callables of ``system``.

    The disk cache (``~/.cache/bvpkit`` or ``$BVPKIT_CACHE_DIR``; ``off`` disables it) is
    keyed by the system's content and the bvpkit code (compiled.code_stamp); generated code is re-checked by
    :func:`check_source` before it is compiled, whatever its origin.
    """
    key = system.key()
    cached = _MEMORY.get(key)
    if cached is not None and cached.system is not None:
        return cached
    stored = read_cache(key)
    if stored is not None:
        source, pattern, sides = stored
    else:
        with budget("generating code for the equations (derivatives and shared subexpressions)",
                    advice="simplify the equations, or split them with added unknown functions"):
            source, pattern = _system_source(system)
        sides = _bc_sides(system)
        write_cache(key, source, pattern, sides)
    return assemble(system.state_layout(), source, pattern, sides, system)


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
