"""Compiled systems: the numerical callables of a first-order system, and their disk cache.

Nothing here imports SymPy: a system whose programs are in the cache (keyed by its content
and the bvpkit code, see code_stamp) is rebuilt from them alone. ``codegen.py`` makes the
programs in the first place.

A program is the plain data of one generated function (:mod:`bvpkit.program`); callables are
built from programs by :func:`bvpkit.program.build`, which prints Python source from them
afresh and checks it before compiling. No stored text is ever executed.

Cache files are read only from a folder owned by the user and not writable by group or
others, only when they are regular files owned by the user (opened without following
symbolic links) and at most ``CACHE_FILE_LIMIT`` bytes long. Anything else is skipped, with
one note on the ``bvpkit.cache`` logger (the command line prints it to standard error).
"""

from __future__ import annotations

import logging
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from .errors import ProgramError
from .layout import StateLayout
from .program import build

_LOG = logging.getLogger("bvpkit.cache")
_LOG.addHandler(logging.NullHandler())  # a library does not print; the command line adds a handler
_NOTED: set[str] = set()


def note(message: str) -> None:
    """Say once per process why (part of) the cache was skipped, on the ``bvpkit.cache`` logger."""
    if message not in _NOTED:
        _NOTED.add(message)
        _LOG.warning(message)


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
    programs : tuple of dict
        The generated functions as plain data (what a disk cache stores; see
        :mod:`bvpkit.program`).
    """

    layout: StateLayout
    rhs: Callable
    jac: Callable
    pjac: Callable
    bc: Callable
    bc_jac: Callable
    jac_pattern: np.ndarray
    programs: tuple
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
CACHE_FILE_LIMIT = 8 * 2**20  # bytes; larger cache files are skipped unread. The largest entry of
#   the bundled specs and benchmarks (the 40-state chain of benchmarks/scale.py) is 21 kB: 400
#   times that leaves room for systems well beyond what SymPy generates in reasonable time,
#   while a hostile file can cost at most a fraction of a second of parsing. A skipped file
#   costs a regeneration, never a wrong result.


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


def _me() -> int | None:
    import os

    return os.geteuid() if hasattr(os, "geteuid") else None  # no owners to compare on Windows


def private_folder(create: bool = False):  # noqa: ANN201 - a pathlib.Path or None
    """The cache folder, if it is a folder owned by the user and not writable by group or
    others (as secure shells treat key folders); else None, with a note saying why.

    With ``create``, a missing folder is made (mode 0700).
    """
    import os
    import stat

    folder = _cache_dir()
    if folder is None:
        return None
    try:
        info = os.stat(folder)
    except FileNotFoundError:
        if not create:
            return None
        try:
            folder.mkdir(mode=0o700, parents=True, exist_ok=True)
            info = os.stat(folder)
        except OSError as err:
            note(f"cache folder {folder} not used: cannot create it ({err.strerror})")
            return None
    except OSError as err:
        note(f"cache folder {folder} not used: {err.strerror}")
        return None
    me = _me()
    if not stat.S_ISDIR(info.st_mode):
        why = "it is not a folder"
    elif me is not None and info.st_uid != me:
        why = f"it belongs to another user (uid {info.st_uid})"
    elif me is not None and info.st_mode & 0o022:
        why = f"it is writable by group or others (mode {stat.S_IMODE(info.st_mode):o}; chmod go-w to use it)"
    else:
        return folder
    note(f"cache folder {folder} not used: {why}")
    return None


def read_private(path: Any) -> bytes | None:
    """The bytes of a cache file, or None: missing, or skipped (with a note) unless it is a
    regular file owned by the user, not writable by group or others, reached without a
    symbolic link and at most ``CACHE_FILE_LIMIT`` bytes."""
    import errno
    import os
    import stat

    flags = os.O_RDONLY | getattr(os, "O_NOFOLLOW", 0) | getattr(os, "O_NONBLOCK", 0)  # a FIFO must not block
    try:
        handle = os.open(path, flags)
    except FileNotFoundError:
        return None
    except OSError as err:
        why = "it is a symbolic link" if err.errno == errno.ELOOP else err.strerror
        note(f"cache entry {path.name} skipped: {why}")
        return None
    try:
        info = os.fstat(handle)
        me = _me()
        if not stat.S_ISREG(info.st_mode):
            why = "it is not a regular file"
        elif me is not None and info.st_uid != me:
            why = f"it belongs to another user (uid {info.st_uid})"
        elif me is not None and info.st_mode & 0o022:
            why = "it is writable by group or others"
        elif info.st_size > CACHE_FILE_LIMIT:
            why = f"it is larger than {CACHE_FILE_LIMIT} bytes"
        else:
            chunks, size = [], 0
            while size <= CACHE_FILE_LIMIT:  # read to the end, never past the limit (the file may grow)
                chunk = os.read(handle, min(1 << 20, CACHE_FILE_LIMIT + 1 - size))
                if not chunk:
                    return b"".join(chunks)
                chunks.append(chunk)
                size += len(chunk)
            why = f"it is larger than {CACHE_FILE_LIMIT} bytes"
    except OSError as err:
        why = err.strerror
    finally:
        os.close(handle)
    note(f"cache entry {path.name} skipped: {why}")
    return None


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


def checksum(body: Any) -> str:
    """SHA-256 of a JSON-ready body (a guard against damage, not against a writer)."""
    import hashlib
    import json

    return hashlib.sha256(json.dumps(body, sort_keys=True, separators=(",", ":")).encode()).hexdigest()


def read_json(path: Any) -> Any:
    """A cache file's ``body`` (see :func:`write_json`), or None: missing, skipped, damaged."""
    import json

    if path is None or private_folder() is None:
        return None
    data = read_private(path)
    if data is None:
        return None
    try:
        stored = json.loads(data)
        body = stored["body"]
        if stored["sha256"] != checksum(body):
            raise ValueError("checksum")
    except (ValueError, KeyError, TypeError, RecursionError):
        note(f"cache entry {path.name} skipped: damaged or in an older format")
        return None
    return body


def write_json(path: Any, body: Any) -> None:
    """Keep a JSON-ready ``body`` with its checksum (see :func:`write_atomically`)."""
    import json

    write_atomically(path, json.dumps({"body": body, "sha256": checksum(body)}, separators=(",", ":")))


def read_cache(key: str) -> tuple[list, np.ndarray, np.ndarray] | None:
    """The cached programs, Jacobian pattern and condition sides, or None (missing, skipped or damaged)."""
    path = _cache_file(key)
    body = read_json(path)
    if body is None:
        return None
    try:
        if body["key"] != key or type(body["programs"]) is not list:
            raise ValueError("key")
        return body["programs"], np.array(body["pattern"], dtype=bool), np.array(body["sides"], dtype=int)
    except (ValueError, KeyError, TypeError):
        note(f"cache entry {path.name} skipped: it does not hold what its name says")
        return None


def write_cache(key: str, programs: Sequence[dict], pattern: np.ndarray, sides: np.ndarray) -> None:
    """Keep the programs of a system on disk (see :func:`write_atomically`)."""
    path = _cache_file(key)
    if path is None:
        return
    write_json(path, {"key": key, "programs": list(programs), "pattern": pattern.tolist(),
                      "sides": sides.tolist()})


CACHE_KEEP = 500  # files of each kind (system-, problem-) kept; the oldest go first


def write_atomically(path: Any, text: str) -> None:
    """Write a cache file: a temporary file (mode 0600) in the same folder, then ``os.replace``
    (safe for concurrent writers and readers); then drop the oldest files of the same kind
    beyond ``CACHE_KEEP``. Writes only into a private folder (made with mode 0700 if
    missing; see :func:`private_folder`). Never raises: a read-only or full disk costs
    speed, not correctness."""
    import os
    import tempfile

    kind = path.name.split("-", 1)[0]
    try:
        if private_folder(create=True) != path.parent:
            return
        handle, temporary = tempfile.mkstemp(prefix=f".{kind}-", suffix=".tmp", dir=path.parent)  # mode 0600
        with os.fdopen(handle, "w") as out:
            out.write(text)
        os.replace(temporary, path)
        files = list(path.parent.glob(f"{kind}-*.json"))
        if len(files) > CACHE_KEEP:
            files.sort(key=lambda f: f.lstat().st_mtime)
            for old in files[: len(files) - CACHE_KEEP]:
                old.unlink(missing_ok=True)
    except OSError:
        pass


_FUNCTIONS = ["rhs", "jac", "pjac", "bc", "bc_jac_a", "bc_jac_b", "bc_jac_p", "physical", "singular_matrix",
              "domain_ends"]


def _expected_shapes(layout: StateLayout, m: int) -> dict[str, list[int]]:
    n, n_p = layout.n, len(layout.parameters)
    return {"rhs": [n], "physical": [n], "jac": [n, n], "pjac": [n, n_p], "singular_matrix": [n, n],
            "domain_ends": [2], "bc": [m], "bc_jac_a": [m, n], "bc_jac_b": [m, n], "bc_jac_p": [m, n_p]}


def assemble(layout: StateLayout, programs: Sequence[dict], pattern: np.ndarray, sides: np.ndarray,
             system: Any = None) -> CompiledSystem:
    """The callables of a system's ``programs`` (see :func:`bvpkit.program.build`).

    Raises
    ------
    ProgramError
        The programs are not a system's ten functions of the shapes ``layout`` implies, or one
        is outside the grammar; or ``pattern``, ``sides`` do not fit the layout.
    """
    pattern, sides = np.asarray(pattern), np.asarray(sides)
    if (pattern.shape != (layout.n, layout.n) or pattern.dtype != bool or sides.ndim != 1
            or not np.isin(sides, (0, 1, 2)).all()):
        raise ProgramError("the Jacobian pattern or the condition sides do not fit the state layout")
    shapes = _expected_shapes(layout, sides.size)
    if (not isinstance(programs, Sequence) or len(programs) != len(_FUNCTIONS)
            or any(not isinstance(q, dict) or q.get("name") not in shapes
                   or q.get("shape") != shapes[q["name"]] for q in programs)):
        raise ProgramError("the programs are not the ten functions of a system with this state layout")
    f = build(programs)

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
        programs=tuple(programs),
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
    try:
        return assemble(layout, *stored)
    except ProgramError as err:
        skipped(layout.key, err)
        return None


def skipped(key: str, err: ProgramError) -> None:
    """Note a system's cache entry refused by the program checks (it is then regenerated)."""
    note(f"cache entry {_cache_file(key).name} skipped: {err.one_line()}")


def build_quantity(program: dict) -> Callable:
    """The ``quantity`` function of ``program`` (see :func:`bvpkit.program.build`),
    carrying the program as ``.program`` (what a cache of quantities stores)."""
    if not isinstance(program, dict) or program.get("name") != "quantity":
        raise ProgramError("a compiled quantity must be a program named 'quantity'")
    function = build([program])["quantity"]
    function.program = program
    return function
