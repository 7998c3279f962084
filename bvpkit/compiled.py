"""Compiled systems: the numerical callables of a first-order system, and their disk cache.

Nothing here imports SymPy: a system whose generated code is in the cache (keyed by its
content and the bvpkit code, see code_stamp) is rebuilt from that code alone. ``codegen.py`` writes the
code in the first place.

The generated source holds only internal names (``_x``, ``_y0``, ``_p0``, ``_k0``, ``_t0``)
and the names of NumPy/SciPy functions: no text a user typed ever reaches ``compile``.
:func:`check_source` enforces that before anything is compiled, whatever the code's origin.
"""

from __future__ import annotations

import dataclasses
import functools
import re
from collections.abc import Callable, Sequence
from typing import Any

import numpy as np
import scipy  # submodules (scipy.special for erf) load on first use by generated code

from .layout import StateLayout

_NAMESPACE = {"numpy": np, "scipy": scipy, "functools": functools}
_ALLOWED_WORDS = re.compile(
    r"^(_[xyptk]\w*|_ya\d+|_yb\d+|numpy(\.\w+)*|scipy(\.\w+)*|functools\.reduce|def|return|"
    r"out|x|y|p|k|t|ya|yb|shape|abs|rhs|jac|pjac|kjac|bc|bc_jac_[abpk]|quantity|singular_matrix|"
    r"region_maps)$"
)


def check_source(source: str) -> None:
    """Refuse generated code holding any name outside the internal vocabulary."""
    for word in re.findall(r"[A-Za-z_][\w.]*", source):
        if not _ALLOWED_WORDS.match(word) and not re.fullmatch(r"\d*[eE]\d*", word):
            raise RuntimeError(f"generated code holds an unexpected name {word!r}")


def _build(source: str, names: Sequence[str]) -> dict[str, Callable]:
    check_source(source)
    namespace = dict(_NAMESPACE)
    # The source is generated from a validated SymPy tree in internal symbols only
    # (check_source above); no user text reaches it.
    exec(compile(source, "<bvpkit-generated>", "exec"), namespace)  # noqa: S102
    return {name: namespace[name] for name in names}


class CompiledSystem:
    """The numerical callables of a standard form (see :class:`~bvpkit.reduce.StandardForm`):
    what every method calls.

    ``rhs`` is the whole right-hand side ``F(t, Y, p, k) + S Y / t`` in the method variable
    ``t`` on ``[0, 1]``; at ``t = 0`` it takes the limit ``(I - S)^+ F`` of a singular term
    (as SciPy's ``solve_bvp`` does), so methods need not know that a term is singular.

    Attributes
    ----------
    layout : StateLayout
        The states, regions, parameters and constants the callables work on.
    rhs : callable ``(x, y, p, k) -> ndarray, shape (n, m)``
    jac : callable ``(x, y, p, k) -> ndarray, shape (n, n, m)``; ``d rhs_i / d y_j``
    pjac : callable ``(x, y, p, k) -> ndarray, shape (n, n_p, m)``; ``d rhs_i / d p_j``
    kjac : callable ``(x, y, p, k) -> ndarray, shape (n, n_k, m)``; ``d rhs_i / d k_j``
    bc : callable ``(ya, yb, p, k) -> ndarray, shape (n + n_p,)``
    bc_jac : callable ``(ya, yb, p, k) -> (dbc/dya, dbc/dyb, dbc/dp)``
    bc_kjac : callable ``(ya, yb, p, k) -> dbc/dk``
    maps : callable ``(p, k) -> ndarray, shape (regions, 2)``
        ``(c_r, h_r)`` per region: ``x = c_r + h_r t``.
    jac_pattern : ndarray of bool, shape (n, n)
        Which entries of ``jac`` can be non-zero.
    bc_sides : ndarray of int, shape (n + n_p,)
        Per condition, which states it can involve: 0 those at ``t = 0`` only, 1 those at
        ``t = 1`` only, 2 both or the parameters. Separated conditions let collocation
        solve its Newton steps with a banded LU.
    source : str
        The generated Python source (what the disk cache stores).
    """

    def __init__(self, layout: StateLayout, functions: dict[str, Callable], pattern: np.ndarray,
                 sides: np.ndarray, source: str):
        self.layout, self.jac_pattern, self.bc_sides, self.source = layout, pattern, sides, source
        self._f = functions
        self.bc = functions["bc"]
        self.bc_kjac = functions["bc_jac_k"]
        self.maps = functions["region_maps"]
        self._singular: dict[bytes, tuple[np.ndarray, np.ndarray]] = {}
        if layout.singular:
            self.rhs, self.jac = self._rhs_singular, self._jac_singular
            self.pjac = functools.partial(self._flat_singular, functions["pjac"])
            self.kjac = functools.partial(self._flat_singular, functions["kjac"])
        else:
            self.rhs, self.jac, self.pjac, self.kjac = (functions[name] for name in ("rhs", "jac", "pjac", "kjac"))

    def bc_jac(self, ya, yb, p, k):  # noqa: ANN001, ANN201
        f = self._f
        return f["bc_jac_a"](ya, yb, p, k), f["bc_jac_b"](ya, yb, p, k), f["bc_jac_p"](ya, yb, p, k)

    @property
    def n(self) -> int:
        return self.layout.n

    @property
    def n_parameters(self) -> int:
        return len(self.layout.parameters)

    def slopes(self, x, y, p, k) -> np.ndarray:  # noqa: ANN001
        """``dY/dt`` (the right-hand side, singular term and its limit included)."""
        return self.rhs(x, y, p, k)

    def row_scale(self, p: np.ndarray, k: np.ndarray) -> np.ndarray:
        """Per row of ``Y``, the length ``h_r`` of its region in the user's variable, shape (n, 1):
        ``dY/dt`` is ``h_r`` times the derivative in the user's variable."""
        with np.errstate(all="ignore"):
            h = np.abs(np.asarray(self.maps(p, k), float)[:, 1])
        return np.repeat(np.where(np.isfinite(h) & (h > 0), h, 1.0), self.layout.region_size)[:, None]

    def singular(self, p: np.ndarray, k: np.ndarray) -> np.ndarray | None:
        """The matrix ``S`` of the term ``S Y / t``, or None."""
        return self._matrices(p, k)[0] if self.layout.singular else None

    def _matrices(self, p, k) -> tuple[np.ndarray, np.ndarray]:  # noqa: ANN001
        """``S`` and ``D = (I - S)^+`` (the limit at ``t = 0``) for these values."""
        key = np.ascontiguousarray(p, float).tobytes() + np.ascontiguousarray(k, float).tobytes()
        found = self._singular.get(key)
        if found is None:
            S = np.asarray(self._f["singular_matrix"](p, k), float)
            found = (S, np.linalg.pinv(np.eye(S.shape[0]) - S))
            if len(self._singular) > 64:
                self._singular.clear()
            self._singular[key] = found
        return found

    def _rhs_singular(self, x, y, p, k):  # noqa: ANN001, ANN202
        f = self._f["rhs"](x, y, p, k)
        S, D = self._matrices(p, k)
        x = np.asarray(x, float)
        at = x == 0
        with np.errstate(all="ignore"):
            term = np.tensordot(S, y, axes=(1, 0)) / np.where(at, 1.0, x)
        out = f + np.where(at, 0.0, term)
        if np.any(at):
            if out.ndim == 1:
                out = D @ f
            else:
                out[:, at] = D @ f[:, at]
        return out

    def _jac_singular(self, x, y, p, k):  # noqa: ANN001, ANN202
        J = self._f["jac"](x, y, p, k)
        S, D = self._matrices(p, k)
        x = np.asarray(x, float)
        if J.ndim == 2:  # one point
            return D @ J if x == 0 else J + S / x
        at = x == 0
        with np.errstate(all="ignore"):
            out = J + S[:, :, None] / np.where(at, 1.0, x)
        if np.any(at):
            out[:, :, at] = np.einsum("ij,jkm->ikm", D, J[:, :, at])
        return out

    def _flat_singular(self, function, x, y, p, k):  # noqa: ANN001, ANN202
        """``pjac``/``kjac`` with the limit at ``t = 0`` (the singular term holds no parameter)."""
        P = function(x, y, p, k)
        x = np.asarray(x, float)
        at = x == 0
        if np.any(at):
            _, D = self._matrices(p, k)
            if P.ndim == 3:
                P = P.copy()
                P[:, :, at] = np.einsum("ij,jkm->ikm", D, P[:, :, at])
            else:
                P = D @ P
        return P

    def freeing(self, name: str) -> Freed:
        """A view of this system with the constant ``name`` solved for, as the last parameter."""
        return Freed(self, self.layout.constants.index(name))


class Freed:
    """A compiled system with one constant turned into an unknown parameter (the last one).

    Continuation traces a branch through a constant by solving for it; the Jacobians in
    the constants are compiled with the system, so no new code is needed.
    """

    def __init__(self, base: CompiledSystem, index: int):
        self.base, self.index = base, index
        lay = base.layout
        self.layout = dataclasses.replace(lay, parameters=(*lay.parameters, lay.constants[index]))
        self.jac_pattern, self.source = base.jac_pattern, base.source
        self.bc_sides = np.full(base.bc_sides.size, 2)

    n = CompiledSystem.n
    n_parameters = CompiledSystem.n_parameters

    def _split(self, p, k):  # noqa: ANN001, ANN202
        k = np.array(k, dtype=float)
        k[self.index] = p[-1]
        return p[:-1], k

    def rhs(self, x, y, p, k):  # noqa: ANN001, ANN201
        return self.base.rhs(x, y, *self._split(p, k))

    slopes = rhs

    def jac(self, x, y, p, k):  # noqa: ANN001, ANN201
        return self.base.jac(x, y, *self._split(p, k))

    def pjac(self, x, y, p, k):  # noqa: ANN001, ANN201
        q, kk = self._split(p, k)
        column = self.base.kjac(x, y, q, kk)[:, self.index: self.index + 1]
        return np.concatenate([self.base.pjac(x, y, q, kk), column], axis=1)

    def bc(self, ya, yb, p, k):  # noqa: ANN001, ANN201
        return self.base.bc(ya, yb, *self._split(p, k))

    def bc_jac(self, ya, yb, p, k):  # noqa: ANN001, ANN201
        q, kk = self._split(p, k)
        a, b, dp = self.base.bc_jac(ya, yb, q, kk)
        column = self.base.bc_kjac(ya, yb, q, kk)[:, self.index: self.index + 1]
        return a, b, np.concatenate([np.reshape(dp, (a.shape[0], -1)), column], axis=1)

    def maps(self, p, k):  # noqa: ANN001, ANN201
        return self.base.maps(*self._split(p, k))

    def row_scale(self, p, k):  # noqa: ANN001, ANN201
        return self.base.row_scale(*self._split(p, k))

    def singular(self, p, k):  # noqa: ANN001, ANN201
        return self.base.singular(*self._split(p, k))


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
    folder = _cache_dir()
    return None if folder is None else folder / f"system-{key}-{code_stamp()}.json"


_STAMP: list[str] = []


def code_stamp() -> str:
    """The bvpkit version and a hash of its source files' names, sizes and modification
    times: part of every cache file's name, so that code changed in place (a development
    checkout) never meets files written by the old code."""
    if not _STAMP:
        import hashlib
        import os

        from . import __version__

        folder = os.path.dirname(os.path.abspath(__file__))
        digest = hashlib.sha256()
        for root, _, files in sorted(os.walk(folder)):
            for name in sorted(f for f in files if f.endswith(".py")):
                info = os.stat(os.path.join(root, name))
                digest.update(f"{os.path.relpath(os.path.join(root, name), folder)}:{info.st_size}:{info.st_mtime_ns};".encode())
        _STAMP.append(f"{__version__}-{digest.hexdigest()[:12]}")
    return _STAMP[0]


def read_cache(key: str) -> tuple[str, np.ndarray, np.ndarray] | None:
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


def write_cache(key: str, source: str, pattern: np.ndarray, sides: np.ndarray) -> None:
    """Keep generated code on disk (see :func:`write_atomically`)."""
    import hashlib
    import json

    path = _cache_file(key)
    if path is None:
        return
    data = {"key": key, "source": source, "pattern": pattern.tolist(), "sides": sides.tolist(),
            "sha256": hashlib.sha256(source.encode()).hexdigest()}
    write_atomically(path, json.dumps(data))


CACHE_KEEP = 500  # files of each kind (system-, problem-) kept; the oldest go first


def write_atomically(path: Any, text: str) -> None:
    """Write a cache file: a temporary file in the same folder, then ``os.replace`` (safe
    for concurrent writers and readers); then drop the oldest files of the same kind beyond
    ``CACHE_KEEP``. Never raises: a read-only or full disk costs speed, not correctness."""
    import os
    import tempfile

    kind = path.name.split("-", 1)[0]
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        handle, temporary = tempfile.mkstemp(prefix=f".{kind}-", suffix=".tmp", dir=path.parent)
        with os.fdopen(handle, "w") as out:
            out.write(text)
        os.replace(temporary, path)
        files = list(path.parent.glob(f"{kind}-*.json"))
        if len(files) > CACHE_KEEP:
            files.sort(key=lambda f: f.stat().st_mtime)
            for old in files[: len(files) - CACHE_KEEP]:
                old.unlink(missing_ok=True)
    except OSError:
        pass


_FUNCTIONS = ["rhs", "jac", "pjac", "kjac", "bc", "bc_jac_a", "bc_jac_b", "bc_jac_p", "bc_jac_k", "singular_matrix",
              "region_maps"]


def assemble(layout: StateLayout, source: str, pattern: np.ndarray, sides: np.ndarray) -> CompiledSystem:
    """The callables of generated ``source`` (checked by :func:`check_source` first)."""
    compiled = CompiledSystem(layout, _build(source, _FUNCTIONS), pattern, sides, source)
    _MEMORY[layout.key] = compiled
    return compiled


def load_compiled(layout: StateLayout) -> CompiledSystem | None:
    """The compiled system of ``layout`` from the in-process or disk cache, or None."""
    cached = _MEMORY.get(layout.key)
    if cached is not None:
        return cached
    stored = read_cache(layout.key)
    if stored is None:
        return None
    return assemble(layout, *stored)


def build_quantity(source: str) -> Callable:
    """The ``quantity`` function of generated ``source`` (checked first)."""
    function = _build(source, ["quantity"])["quantity"]
    function.source = source  # what a cache of quantities stores
    return function
