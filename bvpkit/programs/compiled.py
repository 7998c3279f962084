"""Compiled systems: the numerical callables of a standard form, and their disk cache.

Nothing here imports SymPy: a system whose programs are in the cache (keyed by its content
and the bvpkit code, see code_stamp) is rebuilt from them alone. ``codegen.py`` makes the
programs in the first place.

A program is the plain data of one generated function (:mod:`bvpkit.programs.program`); callables are
built from programs by :func:`bvpkit.programs.program.build`, which prints Python source from them
afresh and checks it before compiling. No stored text is ever executed.

Cache files are read only from a folder owned by the user and not writable by group or
others, only when they are regular files owned by the user (opened without following
symbolic links) and at most ``CACHE_FILE_LIMIT`` bytes long, and used only when signed with
the folder's key (:func:`signing_key`). Anything else is skipped, with one note on the
``bvpkit.cache`` logger (the command line prints it to standard error).
"""

from __future__ import annotations

import dataclasses
import functools
import logging
from collections.abc import Callable, Sequence
from typing import Any

import numpy as np

from .. import __version__
from ..errors import ProgramError
from .layout import StateLayout
from .program import build, stored_size

_LOG = logging.getLogger("bvpkit.cache")
_LOG.addHandler(logging.NullHandler())  # a library does not print; the command line adds a handler
_NOTED: set[str] = set()


def note(message: str) -> None:
    """Say once per process why (part of) the cache was skipped, on the ``bvpkit.cache`` logger."""
    if message not in _NOTED:
        _NOTED.add(message)
        _LOG.warning(message)


#: What each need of a system is, in words (refusals of a method that does not take it).
NEEDS = {"singular_term": "the term S y/(x - a) singular at the left end"}


class CompiledSystem:
    """The numerical callables of a standard form (see :class:`~bvpkit.reduce.form.StandardForm`):
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
    programs : tuple of dict
        The generated functions as plain data (what the disk cache stores; see
        :mod:`bvpkit.programs.program`).
    """

    def __init__(self, layout: StateLayout, functions: dict[str, Callable], pattern: np.ndarray,
                 sides: np.ndarray, programs: tuple):
        self.layout, self.jac_pattern, self.bc_sides, self.programs = layout, pattern, sides, programs
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

    @property
    def needs(self) -> frozenset[str]:
        """What a method must take to solve this system beyond a plain standard form
        (``"singular_term"``: the term ``S Y / t``); methods declare what they take."""
        return frozenset({"singular_term"}) if self.layout.singular else frozenset()

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
        if x.ndim == 1 and y.ndim == 2 and not at.any():  # no point at t = 0: the plain term
            return f + (S @ y) / x
        with np.errstate(all="ignore"):
            term = (S @ y) / np.where(at, 1.0, x)
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

    def freeing(self, *names: str) -> Freed:
        """A view of this system with the constants ``names`` solved for, as the last parameters."""
        return Freed(self, [self.layout.constants.index(name) for name in names])


class Freed:
    """A compiled system with constants turned into unknown parameters (the last ones).

    Continuation traces a branch through a constant by solving for it (and a fold curve
    through two); the Jacobians in the constants are compiled with the system, so no new
    code is needed.
    """

    def __init__(self, base: CompiledSystem, indices: Sequence[int]):
        self.base, self.indices = base, list(indices)
        lay = base.layout
        self.layout = dataclasses.replace(lay, parameters=(*lay.parameters, *(lay.constants[i] for i in self.indices)))
        self.jac_pattern, self.programs = base.jac_pattern, base.programs
        self.bc_sides = np.full(base.bc_sides.size, 2)

    n = CompiledSystem.n
    n_parameters = CompiledSystem.n_parameters

    def _split(self, p, k):  # noqa: ANN001, ANN202
        free = len(self.indices)
        k = np.array(k, dtype=float)
        k[self.indices] = p[len(p) - free:]
        return p[: len(p) - free], k

    def rhs(self, x, y, p, k):  # noqa: ANN001, ANN201
        return self.base.rhs(x, y, *self._split(p, k))

    slopes = rhs

    def jac(self, x, y, p, k):  # noqa: ANN001, ANN201
        return self.base.jac(x, y, *self._split(p, k))

    def pjac(self, x, y, p, k):  # noqa: ANN001, ANN201
        q, kk = self._split(p, k)
        columns = self.base.kjac(x, y, q, kk)[:, self.indices]
        # d(u**n)/dn = u**n log(u) is 0 * -inf where u = 0; its limit there is 0
        columns = np.where(np.isnan(columns), 0.0, columns)
        return np.concatenate([self.base.pjac(x, y, q, kk), columns], axis=1)

    def bc(self, ya, yb, p, k):  # noqa: ANN001, ANN201
        return self.base.bc(ya, yb, *self._split(p, k))

    def bc_jac(self, ya, yb, p, k):  # noqa: ANN001, ANN201
        q, kk = self._split(p, k)
        a, b, dp = self.base.bc_jac(ya, yb, q, kk)
        columns = self.base.bc_kjac(ya, yb, q, kk)[:, self.indices]
        return a, b, np.concatenate([np.reshape(dp, (a.shape[0], -1)), columns], axis=1)

    def maps(self, p, k):  # noqa: ANN001, ANN201
        return self.base.maps(*self._split(p, k))

    def row_scale(self, p, k):  # noqa: ANN001, ANN201
        return self.base.row_scale(*self._split(p, k))

    def singular(self, p, k):  # noqa: ANN001, ANN201
        return self.base.singular(*self._split(p, k))


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
    """The bvpkit version and a hash of its source files' names and contents: part of every
    cache file's name, so that code changed in place (a development checkout) never meets
    files written by the old code, and two copies of the same code (a checkout and its
    installed copy) share their cache files."""
    if not _STAMP:
        import hashlib
        import os


        folder = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))  # the package
        digest = hashlib.sha256()
        for root, _, files in sorted(os.walk(folder)):
            for name in sorted(f for f in files if f.endswith(".py")):
                path = os.path.join(root, name)
                digest.update(os.path.relpath(path, folder).encode() + b"\0")
                with open(path, "rb") as handle:  # about 0.5 MB in all: a millisecond
                    digest.update(hashlib.sha256(handle.read()).digest())
        _STAMP.append(f"{__version__}-{digest.hexdigest()[:12]}")
    return _STAMP[0]


KEY_FILE = "entry-key"  # in the cache folder: the secret every entry is signed with


def signing_key(create: bool = False) -> bytes | None:
    """The secret (32 random bytes, a file of mode 0600 in the private cache folder) that
    signs every cache entry, or None (no private folder; with ``create``, a missing or
    damaged key file is made anew, which leaves every older entry unsigned).

    An entry is used only when its signature is this key's: an entry edited or written by
    anyone who does not hold the key (a changed number, a file from another machine or
    another copy of the folder) is skipped. A writer who can read the key (the user's own
    account) can sign; against it, the program grammar's bounds still hold.
    """
    import os
    import secrets

    folder = private_folder(create=create)
    if folder is None:
        return None
    path = folder / KEY_FILE
    data = read_private(path)
    if data is not None and len(data) == 32:
        return data
    if not create:
        return None
    fresh = secrets.token_bytes(32)
    try:
        if data is None and not path.exists():
            try:  # the first writer wins; the others read its key
                handle = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL | getattr(os, "O_NOFOLLOW", 0), 0o600)
            except FileExistsError:
                return signing_key(create=False)
            with os.fdopen(handle, "wb") as out:
                out.write(fresh)
        else:  # damaged: replaced whole
            write_atomically(path, fresh)
            if read_private(path) != fresh:
                return None
    except OSError:
        return None
    return fresh


def signature(body: Any, key: bytes | None = None) -> str | None:
    """HMAC-SHA-256 of a JSON-ready body under the cache's :func:`signing_key` (None without one)."""
    import hashlib
    import hmac
    import json

    key = key or signing_key()
    if key is None:
        return None
    text = json.dumps(body, sort_keys=True, separators=(",", ":"))
    return hmac.new(key, text.encode(), hashlib.sha256).hexdigest()


def read_json(path: Any) -> Any:
    """A cache file's ``body`` (see :func:`write_json`), or None: missing, skipped, damaged,
    or not signed with this cache's key."""
    import hmac
    import json

    if path is None or private_folder() is None:
        return None
    data = read_private(path)
    if data is None:
        return None
    try:
        stored = json.loads(data)
        body = stored["body"]
        if type(stored.get("signature")) is not str:
            raise ValueError("format")
        wanted = signature(body)
        if wanted is None or not hmac.compare_digest(stored["signature"], wanted):
            note(f"cache entry {path.name} skipped: it is not signed with this cache's key (edited, or made "
                 "elsewhere)")
            return None
    except (ValueError, KeyError, TypeError, AttributeError, RecursionError):
        note(f"cache entry {path.name} skipped: damaged or in an older format")
        return None
    return body


def write_json(path: Any, body: Any) -> None:
    """Keep a JSON-ready ``body`` signed with the cache's key (see :func:`write_atomically`)."""
    import json

    if private_folder(create=True) is None:
        return
    signed = signature(body, signing_key(create=True))
    if signed is not None:
        write_atomically(path, json.dumps({"body": body, "signature": signed}, separators=(",", ":")))


def read_cache(key: str) -> tuple[list, np.ndarray, np.ndarray] | None:
    """The cached programs, Jacobian pattern and condition sides, or None (missing, skipped or damaged)."""
    path = _cache_file(key)
    body = read_json(path)
    if body is None:
        return None
    try:
        if type(body) is not dict or body.get("key") != key or type(body.get("programs")) is not list:
            raise ValueError("key")
        stored_size(body["programs"])  # before anything is sized or built from it
        return body["programs"], np.array(body["pattern"], dtype=bool), np.array(body["sides"], dtype=int)
    except ProgramError as err:
        note(f"cache entry {path.name} skipped: {err.one_line()}")
    except (ValueError, KeyError, TypeError, OverflowError, RecursionError):
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


def write_atomically(path: Any, text: str | bytes) -> None:
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
        with os.fdopen(handle, "wb" if isinstance(text, bytes) else "w") as out:
            out.write(text)
        os.replace(temporary, path)
        files = list(path.parent.glob(f"{kind}-*.json"))
        if len(files) > CACHE_KEEP:
            files.sort(key=lambda f: f.lstat().st_mtime)
            for old in files[: len(files) - CACHE_KEEP]:
                old.unlink(missing_ok=True)
    except OSError:
        pass


_FUNCTIONS = ["rhs", "jac", "pjac", "kjac", "bc", "bc_jac_a", "bc_jac_b", "bc_jac_p", "bc_jac_k", "singular_matrix",
              "region_maps"]


def _expected_shapes(layout: StateLayout, m: int) -> dict[str, list[int]]:
    n, n_p, n_k = layout.n, len(layout.parameters), len(layout.constants)
    return {"rhs": [n], "jac": [n, n], "pjac": [n, n_p], "kjac": [n, n_k], "singular_matrix": [n, n],
            "region_maps": [layout.regions, 2], "bc": [m], "bc_jac_a": [m, n], "bc_jac_b": [m, n],
            "bc_jac_p": [m, n_p], "bc_jac_k": [m, n_k]}


def assemble(layout: StateLayout, programs: Sequence[dict], pattern: np.ndarray, sides: np.ndarray) -> CompiledSystem:
    """The callables of a standard form's ``programs`` (see :func:`bvpkit.programs.program.build`).

    Raises
    ------
    ProgramError
        The programs are not a system's functions of the shapes ``layout`` implies, or one is
        outside the grammar; or ``pattern``, ``sides`` do not fit the layout.
    """
    pattern, sides = np.asarray(pattern), np.asarray(sides)
    if (pattern.shape != (layout.n, layout.n) or pattern.dtype != bool or sides.ndim != 1
            or not np.isin(sides, (0, 1, 2)).all()):
        raise ProgramError("the Jacobian pattern or the condition sides do not fit the state layout")
    shapes = _expected_shapes(layout, sides.size)
    n, n_p, n_k = layout.n, len(layout.parameters), len(layout.constants)
    xyk = [["x", 1], ["y", n], ["p", n_p], ["k", n_k]]
    ab = [["ya", n], ["yb", n], ["p", n_p], ["k", n_k]]
    arguments = {name: (xyk, "y") if name in ("rhs", "jac", "pjac", "kjac") else ([["p", n_p], ["k", n_k]], None)
                 if name in ("singular_matrix", "region_maps") else (ab, None) for name in shapes}
    if (not isinstance(programs, Sequence) or len(programs) != len(_FUNCTIONS)
            or any(not isinstance(q, dict) or q.get("name") not in shapes
                   or q.get("shape") != shapes[q["name"]] for q in programs)
            or sorted(q["name"] for q in programs) != sorted(_FUNCTIONS)
            or any((_arity(q), q.get("mesh")) != arguments[q["name"]] for q in programs)):
        raise ProgramError("the programs are not the functions of a system with this state layout")
    compiled = CompiledSystem(layout, build(programs), pattern, sides, tuple(programs))
    _MEMORY[layout.key] = compiled
    return compiled


def _arity(program: dict) -> list:
    """``[[argument, number of symbols], ...]`` of a program (the grammar checks the symbols)."""
    args = program.get("args")
    if type(args) is not list or not all(type(a) is list and len(a) == 2 and type(a[1]) is list for a in args):
        return []
    return [[a[0], len(a[1])] for a in args]


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


_QUANTITY_FUNCTIONS: dict[str, Callable] = {}


_QUANTITY_BY_IDENTITY: dict[int, tuple[dict, Callable]] = {}


def quantity_function(program: dict) -> Callable:
    """The callable of a quantity's program, built once per program text."""
    # the same program object again (a guess recipe's, an output's, on every solve): found
    # without printing it to a key; the entry keeps the object alive, so its id is not reused
    known = _QUANTITY_BY_IDENTITY.get(id(program))
    if known is not None and known[0] is program:
        return known[1]
    import json

    key = json.dumps(program, sort_keys=True)
    function = _QUANTITY_FUNCTIONS.get(key)
    if function is None:
        if len(_QUANTITY_FUNCTIONS) > 4_000:
            _QUANTITY_FUNCTIONS.clear()
        function = _QUANTITY_FUNCTIONS[key] = build_quantity(program)
    if len(_QUANTITY_BY_IDENTITY) > 4_000:
        _QUANTITY_BY_IDENTITY.clear()
    _QUANTITY_BY_IDENTITY[id(program)] = (program, function)
    return function


def build_quantity(program: dict) -> Callable:
    """The ``quantity`` function of ``program`` (see :func:`bvpkit.programs.program.build`),
    carrying the program as ``.program`` (what a cache of quantities stores)."""
    if not isinstance(program, dict) or program.get("name") != "quantity":
        raise ProgramError("a compiled quantity must be a program named 'quantity'")
    function = build([program])["quantity"]
    function.program = program
    return function
