"""SymPy -> vectorised NumPy callables with exact Jacobians, by way of plain data.

Each generated function evaluates over a whole mesh at once: states ``y`` have shape
``(n, m)`` (SciPy's layout) or ``(n,)`` for a single point, and the output follows.
Common subexpressions are eliminated across a function's entries.

What this module produces is a *program* (:mod:`bvpkit.programs.program`): the function as plain
data, trees of numbers, internal symbols (``_x``, ``_y0``, ``_p0``, ``_k0``, ``_t0``) and a
fixed set of operations. Any SymPy node outside that grammar is refused here by name. The
callables are built from programs by :func:`bvpkit.programs.program.build`, whatever their origin
(made just now, or read from a cache), so no stored text is ever executed.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from typing import Any

import numpy as np
import sympy as sp

from ..errors import ProgramError
from ..language.budget import budget
from ..language.exact import exact_key
from . import program as _program
from .compiled import (
    _MEMORY,
    CACHE_VARIABLE,
    CompiledSystem,
    assemble,
    build_quantity,
    read_cache,
    skipped,
    write_cache,
)
from .program import check_source

#: The method variable t (named _x in generated code, as every method calls it x).
X = sp.Symbol("_x", real=True)

# names of compiled.py and program.py that code and tests reach through this module
__all__ = ["CACHE_VARIABLE", "CompiledSystem", "check_source", "compile_expressions", "compile_system",
           "derivative"]


class _RealAbs(sp.Function):
    """``|u|`` for a real ``u``: its derivative is ``sign(u) u'``.

    Generated code evaluates on real arrays only, but SymPy's ``Abs`` differentiates an
    argument it cannot prove real (``log(y)``, ``sqrt(y)``) into ``re``/``im`` terms and
    unevaluated derivatives. Derivatives are taken with ``Abs`` swapped for this.
    """

    nargs = 1

    def fdiff(self, argindex=1):  # noqa: ANN001, ANN201
        return sp.sign(self.args[0])


def _differentiable(e: sp.Expr) -> sp.Expr:
    return e.replace(sp.Abs, _RealAbs) if e.has(sp.Abs) else e


def derivative(e: sp.Expr, s: sp.Symbol) -> sp.Expr:
    """``d e / d s`` as generated code evaluates it (on real numbers)."""
    d = sp.diff(_differentiable(e), s)
    return d.replace(_RealAbs, sp.Abs) if d.has(_RealAbs) else d


# SymPy function -> program operation (the expression language's functions and what their
# derivatives bring: sign from abs, heaviside from min and max)
_FUNCTIONS: dict[type, str] = {
    sp.exp: "exp", sp.log: "log", sp.sin: "sin", sp.cos: "cos", sp.tan: "tan", sp.sinh: "sinh",
    sp.cosh: "cosh", sp.tanh: "tanh", sp.asin: "asin", sp.acos: "acos", sp.atan: "atan",
    sp.asinh: "asinh", sp.acosh: "acosh", sp.atanh: "atanh", sp.atan2: "atan2", sp.Abs: "abs",
    _RealAbs: "abs", sp.erf: "erf", sp.erfc: "erfc", sp.sign: "sign", sp.Heaviside: "heaviside",
}


def _number(e: sp.Expr) -> int | float:
    """A constant (``2``, ``pi``, ``sqrt(2)*erf(1)``) as one int or correctly rounded float:
    programs hold no arithmetic on numbers alone."""
    if e.is_Integer and abs(int(e)) <= _program.MAX_INTEGER:
        return int(e)
    try:
        value = float(e)
    except TypeError:  # SymPy cannot make a real float of it
        raise ProgramError(f"generated code cannot hold the complex value {sp.sstr(e)[:60]} (or it has no "
                           "value); check for roots or logarithms of negative constants") from None
    if not np.isfinite(value):
        raise ProgramError(f"generated code cannot hold the number {sp.sstr(e)[:40]} "
                           "(it is not a finite float)")
    return value


def _tree(e: sp.Basic) -> Any:
    """The plain tree of a SymPy expression (see :mod:`bvpkit.programs.program`)."""
    if e.is_Symbol:
        if not _program.SYMBOL.fullmatch(e.name):
            raise ProgramError(f"generated code cannot hold the name '{e.name}' (not an internal symbol)")
        return e.name
    if e in (sp.oo, -sp.oo, sp.zoo, sp.nan):
        raise ProgramError(f"generated code cannot hold the value {e} (infinite or undefined); "
                           "check the equations for a division by zero or an infinite constant")
    if e.is_number:
        return _number(e)
    if isinstance(e, sp.Add):
        return ["add", *(_tree(a) for a in e.args)]
    if isinstance(e, sp.Mul):
        return _mul(e)
    if isinstance(e, sp.Pow):
        base, exponent = e.args
        if exponent == sp.S.Half:
            return ["sqrt", _tree(base)]
        if exponent.is_Rational and exponent.is_negative:
            return ["div", 1, _tree(sp.Pow(base, -exponent, evaluate=False) if exponent != -1 else base)]
        return ["pow", _tree(base), _tree(exponent)]
    if isinstance(e, sp.Min | sp.Max):  # n-ary in SymPy, binary in programs
        op = "min" if isinstance(e, sp.Min) else "max"
        trees = [_tree(a) for a in e.args]
        out = trees[0]
        for t in trees[1:]:
            out = [op, out, t]
        return out
    if isinstance(e, sp.Heaviside):  # SymPy keeps its value at 0 (1/2 by default) as a second argument
        return ["heaviside", _tree(e.args[0]), _tree(e.args[1] if len(e.args) > 1 else sp.S.Half)]
    op = _FUNCTIONS.get(e.func)
    if op is not None and len(e.args) == _program.FUNCTIONS[op][1]:
        return [op, *(_tree(a) for a in e.args)]
    raise ProgramError(f"generated code cannot express {type(e).__name__} (in {sp.sstr(e)[:80]}); "
                       "only the functions of the expression language are supported")


def _mul(e: sp.Mul) -> Any:
    """A product as numerator / denominator (as written on paper), its sign in front."""
    coefficient, factors = e.as_coeff_mul()
    numerator, denominator = [], []
    for f in factors:
        if f.is_number:  # constants fold into one number (2*pi -> 6.283185307179586)
            coefficient *= f
        elif f.is_Pow and f.exp.is_Rational and f.exp.is_negative:
            denominator.append(f.base if f.exp == -1 else sp.Pow(f.base, -f.exp, evaluate=False))
        else:
            numerator.append(f)
    negative = bool(coefficient.is_extended_negative)
    coefficient = -coefficient if negative else coefficient
    top = ([] if coefficient == 1 else [_number(coefficient)]) + [_tree(f) for f in numerator]
    bottom = [_tree(f) for f in denominator]
    out = top[0] if len(top) == 1 else ["mul", *top] if top else 1
    if bottom:
        out = ["div", out, bottom[0] if len(bottom) == 1 else ["mul", *bottom]]
    return ["neg", out] if negative else out


def _function_program(
    fname: str,
    args: Sequence[tuple[str, Sequence[sp.Symbol]]],
    entries: dict[tuple[int, ...], sp.Expr],
    shape: tuple[int, ...],
    mesh: str | None,
) -> dict[str, Any]:
    """The program of ``def fname(args): out[index] = expr ...`` with shared subexpressions.

    ``mesh`` names the argument whose trailing shape the output takes (``None``: no
    trailing mesh axis, as for boundary conditions).

    Raises
    ------
    ProgramError
        An expression holds something generated code cannot express (named in the message).
    """
    keys = list(entries)
    # DiracDelta, the derivative of a step (second derivatives of abs, min, max), is zero away
    # from the step, which is all a function on a mesh can hold
    exprs = [e.replace(sp.DiracDelta, lambda *_: sp.S.Zero) if e.has(sp.DiracDelta) else e
             for e in (entries[key] for key in keys)]
    temps, reduced = sp.cse(exprs, symbols=sp.numbered_symbols("_t"), order="none")
    # a constant CSE pulled out (2*pi used twice) goes back into the expressions as one number:
    # programs never hold arithmetic on Python numbers (bvpkit.programs.program)
    numeric: dict = {}
    kept = []
    for t, e in temps:
        e = e.xreplace(numeric) if numeric else e
        if e.is_number:
            numeric[t] = e
        else:
            kept.append((t, e))
    if numeric:
        temps, reduced = kept, [e.xreplace(numeric) for e in reduced]
    # programs name temporaries _t0, _t1, ... in the order they are defined
    names = {t: sp.Symbol(f"_t{i}") for i, (t, _) in enumerate(temps)}
    try:
        program = {
            "name": fname,
            "args": [[a, [s.name for s in symbols]] for a, symbols in args],
            "shape": [int(d) for d in shape],
            "mesh": mesh,
            "temps": [[names[t].name, _tree(e.xreplace(names))] for t, e in temps],
            "entries": [[[int(i) for i in key], _tree(e.xreplace(names))] for key, e in zip(keys, reduced)],
        }
    except RecursionError:
        raise ProgramError("an expression is nested too deeply for generated code") from None
    _program.validate(program)  # a clear error now rather than at build time
    return program


def _bc_sides(form) -> np.ndarray:
    sides = []
    ya, yb, p = set(form.ya), set(form.yb), set(form.p)  # once: the loop stays linear in the size
    for e in form.conditions:
        used = e.free_symbols
        left, right = bool(used & ya), bool(used & yb)
        if used & p or left == right:
            sides.append(2)
        else:
            sides.append(0 if left else 1)
    return np.array(sides, dtype=int)


def _quick_derivative(e: sp.Expr, s: sp.Symbol) -> sp.Expr | None:
    """``d e / d s`` for sums of products of numbers, symbols and their numeric powers (most
    terms of large systems: reaction rates, couplings), without SymPy's general machinery
    (about ten times faster per entry; the result is the same expression ``sp.diff`` gives
    up to the order of factors). None when ``e`` holds anything else."""
    if e == s:
        return sp.S.One
    if e.is_Number or (e.is_Symbol and e != s):
        return sp.S.Zero
    if e.is_Add:
        parts = [_quick_derivative(a, s) for a in e.args]
        return None if any(d is None for d in parts) else sp.Add(*parts)
    if e.is_Mul:
        inside = [f for f in e.args if f.has(s)]
        if not inside:
            return sp.S.Zero
        if len(inside) > 1:
            return None
        factor = inside[0]
        rest = [f for f in e.args if f is not factor]
        if any(not (f.is_Number or f.is_Symbol or (f.is_Pow and f.base.is_Symbol and f.exp.is_Number)) for f in rest):
            return None
        d = _quick_derivative(factor, s)
        return None if d is None else sp.Mul(*rest, d)
    if e.is_Pow and e.base == s and e.exp.is_Number:
        return e.exp * s ** (e.exp - 1)
    return None


def _derivatives(exprs, symbols) -> dict:  # noqa: ANN001
    """``{(i, j): d exprs[i] / d symbols[j]}`` for the entries that are not zero."""
    found = {}
    position = {s: j for j, s in enumerate(symbols)}
    for i, e in enumerate(exprs):
        used = sorted(((position[s], s) for s in e.free_symbols if s in position), key=lambda pair: pair[0])
        if not used:
            continue
        e = _differentiable(e)
        for j, s in used:  # only the symbols the expression holds: linear in the system's size
            d = _quick_derivative(e, s)
            if d is None:
                d = sp.diff(e, s)
            if d != 0:
                if any(not q.exp.is_Number for q in d.atoms(sp.Pow)):
                    # SymPy writes d(u**n)/du as n*u**n/u, which is 0/0 where u = 0 (the
                    # surface of a polytrope); powsimp gives n*u**(n - 1)
                    d = sp.powsimp(d)
                found[(i, j)] = d.replace(_RealAbs, sp.Abs) if d.has(_RealAbs) else d
    return found


def _system_programs(form) -> tuple[list[dict[str, Any]], np.ndarray]:
    """Programs of the standard form's callables: ``rhs``, its Jacobians in ``y``, ``p`` and the
    constants ``k`` (continuation frees a constant by reading its column), the conditions and
    their Jacobians, the singular matrix and the region maps."""
    n, n_p, n_k = len(form.rhs), len(form.p), len(form.k)
    xyk = [("x", [X]), ("y", form.y), ("p", form.p), ("k", form.k)]
    ab = [("ya", form.ya), ("yb", form.yb), ("p", form.p), ("k", form.k)]
    pk = [("p", form.p), ("k", form.k)]
    m = len(form.conditions)
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
    programs = [
        _function_program("rhs", xyk, {(i,): e for i, e in enumerate(form.rhs) if e != 0}, (n,), "y"),
        _function_program("jac", xyk, jac, (n, n), "y"),
        _function_program("pjac", xyk, _derivatives(form.rhs, form.p), (n, n_p), "y"),
        _function_program("kjac", xyk, _derivatives(form.rhs, form.k), (n, n_k), "y"),
        _function_program("bc", ab, {(i,): e for i, e in enumerate(form.conditions) if e != 0}, (m,), None),
        _function_program("bc_jac_a", ab, _derivatives(form.conditions, form.ya), (m, n), None),
        _function_program("bc_jac_b", ab, _derivatives(form.conditions, form.yb), (m, n), None),
        _function_program("bc_jac_p", ab, _derivatives(form.conditions, form.p), (m, n_p), None),
        _function_program("bc_jac_k", ab, _derivatives(form.conditions, form.k), (m, n_k), None),
        _function_program("singular_matrix", pk, singular, (n, n), None),
        _function_program("region_maps", pk, maps, (len(form.maps), 2), None),
    ]
    return programs, pattern


def compile_system(form) -> CompiledSystem:
    """Generate (or fetch from the in-process or disk cache) the callables of ``form``.

    The disk cache (``~/.cache/bvpkit`` or ``$BVPKIT_CACHE_DIR``; ``off`` disables it) is
    keyed by the form's content and the bvpkit code (compiled.code_stamp) and holds
    programs (plain data), which :func:`bvpkit.programs.program.build` validates, prints and checks
    before anything is compiled, whatever their origin.
    """
    key = form.key()
    cached = _MEMORY.get(key)
    if cached is not None:
        return cached
    layout = form.layout()
    stored = read_cache(key)
    if stored is not None:
        try:
            return assemble(layout, *stored)
        except ProgramError as err:  # a cache entry that is not ours: skipped and rewritten
            skipped(key, err)
    with budget("generating code for the equations (derivatives and shared subexpressions)",
                advice="simplify the equations, or split them with added unknown functions"):
        programs, pattern = _system_programs(form)
    sides = _bc_sides(form)
    write_cache(key, programs, pattern, sides)
    return assemble(layout, programs, pattern, sides)


def compile_expressions(
    exprs: Sequence[sp.Expr], args: Sequence[tuple[str, Sequence[sp.Symbol]]], mesh: str
) -> Callable:
    """A vectorised callable ``(*args) -> ndarray, shape (len(exprs), m)`` (cached by content),
    carrying its program as ``.program``."""
    key = exact_key([list(exprs), [(a, list(s)) for a, s in args], mesh])
    cached = _QUANTITIES.get(key)
    if cached is None:
        entries = {(i,): e for i, e in enumerate(exprs)}
        program = _function_program("quantity", args, entries, (len(exprs),), mesh)
        cached = build_quantity(program)
        if len(_QUANTITIES) > 2_000:
            _QUANTITIES.clear()
        _QUANTITIES[key] = cached
    return cached


_QUANTITIES: dict[tuple, Callable] = {}
