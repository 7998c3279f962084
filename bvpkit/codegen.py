"""SymPy -> vectorised NumPy callables with exact Jacobians.

Each generated function evaluates over a whole mesh at once: states ``y`` have shape
``(n, m)`` (SciPy's layout) or ``(n,)`` for a single point, and the output follows.
Common subexpressions are eliminated across a function's entries.

The generated source holds only internal names (``_x``, ``_y0``, ``_p0``, ``_k0``, ``_t0``)
and the names of NumPy/SciPy functions: no text a user typed ever reaches ``compile``.
:func:`check_source` enforces that before anything is compiled.
"""

from __future__ import annotations

import functools
import re
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np
import scipy  # submodules (scipy.special for erf) load on first use by generated code
import sympy as sp
from sympy.printing.numpy import SciPyPrinter

from .reduce import X, FirstOrderSystem

_NAMESPACE = {"numpy": np, "scipy": scipy, "functools": functools}
_ALLOWED_WORDS = re.compile(
    r"^(_[xyptk]\w*|_ya\d+|_yb\d+|numpy(\.\w+)*|scipy(\.\w+)*|functools\.reduce|def|return|"
    r"out|x|y|p|k|t|ya|yb|shape|abs|rhs|jac|pjac|bc|bc_jac_[abp]|quantity|physical|singular_matrix|"
    r"domain_ends)$"
)


def check_source(source: str) -> None:
    """Refuse generated code holding any name outside the internal vocabulary."""
    for word in re.findall(r"[A-Za-z_][\w.]*", source):
        if not _ALLOWED_WORDS.match(word) and not re.fullmatch(r"\d*[eE]\d*", word):
            raise RuntimeError(f"generated code holds an unexpected name {word!r}")


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


def _build(source: str, names: Sequence[str]) -> dict[str, Callable]:
    check_source(source)
    namespace = dict(_NAMESPACE)
    # The source is generated from a validated SymPy tree in internal symbols only
    # (check_source above); no user text reaches it.
    exec(compile(source, "<bvpkit-generated>", "exec"), namespace)  # noqa: S102
    return {name: namespace[name] for name in names}


@dataclass(frozen=True)
class CompiledSystem:
    """Numerical callables of a :class:`~bvpkit.reduce.FirstOrderSystem`.

    Attributes
    ----------
    rhs : callable ``(x, y, p, k) -> ndarray, shape (n, m)``
    jac : callable ``(x, y, p, k) -> ndarray, shape (n, n, m)``; ``d rhs_i / d y_j``
    pjac : callable ``(x, y, p, k) -> ndarray, shape (n, n_p, m)``; ``d rhs_i / d p_j``
    bc : callable ``(ya, yb, p, k) -> ndarray, shape (n + n_p,)``
    bc_jac : callable ``(ya, yb, p, k) -> (dbc/dya, dbc/dyb, dbc/dp)``
    jac_pattern : ndarray of bool, shape (n, n)
        Which entries of ``jac`` can be non-zero.
    bc_sides : ndarray of int, shape (n + n_p,)
        Per boundary condition, which states it can involve: 0 those at the left end only,
        1 those at the right end only, 2 both ends or the unknown parameters. Separated
        conditions let collocation solve its Newton steps with a banded LU.
    source : str
        The generated Python source (what a disk cache stores).
    """

    system: FirstOrderSystem
    rhs: Callable
    jac: Callable
    pjac: Callable
    bc: Callable
    bc_jac: Callable
    jac_pattern: np.ndarray
    source: str
    bc_sides: np.ndarray = None  # type: ignore[assignment]
    physical: Callable | None = None
    singular_matrix: Callable | None = None
    domain_ends: Callable | None = None

    @property
    def n(self) -> int:
        return self.system.n

    @property
    def n_parameters(self) -> int:
        return len(self.system.parameters)

    def singular(self, p: np.ndarray, k: np.ndarray) -> np.ndarray | None:
        """The matrix ``S`` of the term ``S y / (x - a)``, or None."""
        return None if self.system.singular is None else self.singular_matrix(p, k)

    def slopes(self, x, y, p, k, physical: bool = False) -> np.ndarray:  # noqa: ANN001
        """``y'`` in the method's variable (or the physical one), singular term included.

        At the singular end itself the limit ``(I - S)^-1 f(a, y(a))`` is used (the value
        SciPy's ``solve_bvp`` also takes).
        """
        if physical and self.system.rescaled:
            a, b = self.domain_ends(p, k)
            return self.slopes((np.asarray(x) - a) / (b - a), y, p, k) / (b - a)
        f = self.rhs(x, y, p, k)
        if self.system.singular is None:
            return f
        S = self.singular_matrix(p, k)
        a = self.domain_ends(p, k)[0]
        d = np.asarray(x, float) - a
        out = np.array(f, dtype=float)
        at = d == 0
        with np.errstate(all="ignore"):
            term = np.tensordot(S, y, axes=(1, 0)) / np.where(at, 1.0, d)
        out = out + np.where(at, 0.0, term)
        if np.any(at):
            limit = np.linalg.solve(np.eye(S.shape[0]) - S, np.reshape(f, (S.shape[0], -1))[:, np.ravel(at)])
            if out.ndim == 1:
                out = limit[:, 0]
            else:
                out[:, at] = limit
        return out


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


_MEMORY: dict[str, CompiledSystem] = {}
CACHE_VARIABLE = "BVPKIT_CACHE_DIR"  # where generated code is kept; "off" disables the disk cache


def _cache_dir():  # noqa: ANN202
    import os
    from pathlib import Path

    chosen = os.environ.get(CACHE_VARIABLE)
    if chosen == "off":
        return None
    if chosen:
        return Path(chosen)
    base = os.environ.get("XDG_CACHE_HOME") or os.path.join(os.path.expanduser("~"), ".cache")
    return Path(base) / "bvpkit"


def _cache_file(key: str):  # noqa: ANN202
    from . import __version__

    folder = _cache_dir()
    return None if folder is None else folder / f"system-{key}-{__version__}.json"


def _read_cache(key: str) -> tuple[str, np.ndarray, np.ndarray] | None:
    """The cached source, Jacobian pattern and condition sides, or None (missing, unreadable or corrupted)."""
    import hashlib
    import json

    path = _cache_file(key)
    if path is None:
        return None
    try:
        data = json.loads(path.read_text())
        source, pattern, sides, digest = data["source"], data["pattern"], data["sides"], data["sha256"]
        if hashlib.sha256(source.encode()).hexdigest() != digest or data["key"] != key:
            return None
        return source, np.array(pattern, dtype=bool), np.array(sides, dtype=int)
    except (OSError, ValueError, KeyError, TypeError):
        return None  # a corrupted or half-written file is regenerated, never trusted


def _write_cache(key: str, source: str, pattern: np.ndarray, sides: np.ndarray) -> None:
    """Write atomically: a temporary file in the same folder, then os.replace (safe for concurrent writers)."""
    import hashlib
    import json
    import os
    import tempfile

    path = _cache_file(key)
    if path is None:
        return
    data = {"key": key, "source": source, "pattern": pattern.tolist(), "sides": sides.tolist(),
            "sha256": hashlib.sha256(source.encode()).hexdigest()}
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        handle, temporary = tempfile.mkstemp(prefix=".system-", suffix=".tmp", dir=path.parent)
        with os.fdopen(handle, "w") as out:
            json.dump(data, out)
        os.replace(temporary, path)
    except OSError:
        pass  # a read-only or full disk costs speed, not correctness


def compile_system(system: FirstOrderSystem) -> CompiledSystem:
    """Generate (or fetch from the in-process or disk cache) the callables of ``system``.

    The disk cache (``~/.cache/bvpkit`` or ``$BVPKIT_CACHE_DIR``; ``off`` disables it) is
    keyed by the system's content and the bvpkit version; generated code is re-checked by
    :func:`check_source` before it is compiled, whatever its origin.
    """
    key = system.key()
    cached = _MEMORY.get(key)
    if cached is not None:
        return cached
    stored = _read_cache(key)
    if stored is not None:
        source, pattern, sides = stored
    else:
        source, pattern = _system_source(system)
        sides = _bc_sides(system)
        _write_cache(key, source, pattern, sides)
    f = _build(source, ["rhs", "jac", "pjac", "bc", "bc_jac_a", "bc_jac_b", "bc_jac_p",
                        "physical", "singular_matrix", "domain_ends"])

    def bc_jac(ya, yb, p, k, _a=f["bc_jac_a"], _b=f["bc_jac_b"], _p=f["bc_jac_p"]):
        return _a(ya, yb, p, k), _b(ya, yb, p, k), _p(ya, yb, p, k)

    compiled = CompiledSystem(
        system=system,
        rhs=f["rhs"],
        jac=f["jac"],
        pjac=f["pjac"],
        bc=f["bc"],
        bc_jac=bc_jac,
        jac_pattern=pattern,
        source=source,
        bc_sides=sides,
        physical=f["physical"],
        singular_matrix=f["singular_matrix"],
        domain_ends=f["domain_ends"],
    )
    _MEMORY[key] = compiled
    return compiled


def compile_expressions(
    exprs: Sequence[sp.Expr], args: Sequence[tuple[str, Sequence[sp.Symbol]]], mesh: str
) -> Callable:
    """A vectorised callable ``(*args) -> ndarray, shape (len(exprs), m)`` (cached by content)."""
    key = (tuple(sp.srepr(e) for e in exprs), tuple((a, tuple(map(str, s))) for a, s in args), mesh)
    cached = _QUANTITIES.get(key)
    if cached is None:
        entries = {(i,): e for i, e in enumerate(exprs)}
        source = _function_source("quantity", args, entries, (len(exprs),), mesh)
        cached = _build(source, ["quantity"])["quantity"]
        if len(_QUANTITIES) > 2_000:
            _QUANTITIES.clear()
        _QUANTITIES[key] = cached
    return cached


_QUANTITIES: dict[tuple, Callable] = {}
