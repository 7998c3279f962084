"""Compiled systems: the numerical callables of a first-order system, and their disk cache.

Nothing here imports SymPy: a system whose generated code is in the cache (keyed by its
content and the bvpkit code, see code_stamp) is rebuilt from that code alone. ``codegen.py`` writes the
code in the first place.

The generated source holds only internal names (``_x``, ``_y0``, ``_p0``, ``_k0``, ``_t0``)
and the names of NumPy/SciPy functions: no text a user typed ever reaches ``compile``.
:func:`check_source` enforces that before anything is compiled, whatever the code's origin.
"""

from __future__ import annotations

import functools
import re
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import scipy  # submodules (scipy.special for erf) load on first use by generated code

from .layout import StateLayout

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


def _build(source: str, names: Sequence[str]) -> dict[str, Callable]:
    check_source(source)
    namespace = dict(_NAMESPACE)
    # The source is generated from a validated SymPy tree in internal symbols only
    # (check_source above); no user text reaches it.
    exec(compile(source, "<bvpkit-generated>", "exec"), namespace)  # noqa: S102
    return {name: namespace[name] for name in names}


@dataclass(frozen=True)
class CompiledSystem:
    """Numerical callables of a first-order system (see :class:`~bvpkit.reduce.FirstOrderSystem`).

    Attributes
    ----------
    layout : StateLayout
        The states, parameters and constants the callables work on.
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

    layout: StateLayout
    rhs: Callable
    jac: Callable
    pjac: Callable
    bc: Callable
    bc_jac: Callable
    jac_pattern: np.ndarray
    source: str
    bc_sides: np.ndarray
    physical: Callable | None = None
    singular_matrix: Callable | None = None
    domain_ends: Callable | None = None
    system: Any = None  # the symbolic FirstOrderSystem, when this process built it

    @property
    def n(self) -> int:
        return self.layout.n

    @property
    def n_parameters(self) -> int:
        return len(self.layout.parameters)

    def singular(self, p: np.ndarray, k: np.ndarray) -> np.ndarray | None:
        """The matrix ``S`` of the term ``S y / (x - a)``, or None."""
        return self.singular_matrix(p, k) if self.layout.singular else None

    def slopes(self, x, y, p, k, physical: bool = False) -> np.ndarray:  # noqa: ANN001
        """``y'`` in the method's variable (or the physical one), singular term included.

        At the singular end itself the limit ``(I - S)^-1 f(a, y(a))`` is used (the value
        SciPy's ``solve_bvp`` also takes).
        """
        if physical and self.layout.rescaled:
            a, b = self.domain_ends(p, k)
            return self.slopes((np.asarray(x) - a) / (b - a), y, p, k) / (b - a)
        f = self.rhs(x, y, p, k)
        if not self.layout.singular:
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


_FUNCTIONS = ["rhs", "jac", "pjac", "bc", "bc_jac_a", "bc_jac_b", "bc_jac_p", "physical", "singular_matrix",
              "domain_ends"]


def assemble(layout: StateLayout, source: str, pattern: np.ndarray, sides: np.ndarray, system: Any = None) -> CompiledSystem:
    """The callables of generated ``source`` (checked by :func:`check_source` first)."""
    f = _build(source, _FUNCTIONS)

    def bc_jac(ya, yb, p, k, _a=f["bc_jac_a"], _b=f["bc_jac_b"], _p=f["bc_jac_p"]):
        return _a(ya, yb, p, k), _b(ya, yb, p, k), _p(ya, yb, p, k)

    compiled = CompiledSystem(
        layout=layout,
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
        system=system,
    )
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
