"""Reading a spec file: once, bounded, without blocking (no pydantic, no SymPy).

``bvpkit solve`` reads a spec's bytes here once: they are the key of its prepared problem,
the text the cache entry must carry (:mod:`bvpkit.reduce.prepared`), and, when no entry serves,
the text :func:`bvpkit.io.spec.loads` validates. A FIFO, a device or a folder is refused
before anything is read from it; a file past :data:`MAX_SPEC_BYTES` before it is read
whole.
"""

from __future__ import annotations

import os
import stat
from pathlib import Path

from ..errors import SpecError
from ..language import limits

#: Spec files larger than this are refused unread: a real spec is a few kilobytes.
MAX_SPEC_BYTES = 1_000_000


def read_spec(path: str | Path, what: str = "spec file") -> str:
    """The text of the spec file (or another small text file, ``what``) at ``path``.

    Raises
    ------
    SpecError
        Missing, not a regular file (a folder, a FIFO, a device), larger than
        :data:`MAX_SPEC_BYTES`, unreadable, or not UTF-8.
    """
    path = Path(path)
    try:
        # O_NONBLOCK: opening a FIFO with no writer returns at once (it is refused below)
        handle = os.open(path, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0) | getattr(os, "O_CLOEXEC", 0))
    except FileNotFoundError:
        raise SpecError(f"{path}: no such file") from None
    except IsADirectoryError:
        raise SpecError(f"{path}: is a folder, not a {what}") from None
    except OSError as err:
        raise SpecError(f"{path}: cannot read ({err.strerror})") from None
    try:
        info = os.fstat(handle)
        if stat.S_ISDIR(info.st_mode):
            raise SpecError(f"{path}: is a folder, not a {what}")
        if not stat.S_ISREG(info.st_mode):
            raise SpecError(f"{path}: not a regular file (a pipe, a device or a socket); "
                            f"give the path of a {what}")
        if info.st_size > MAX_SPEC_BYTES:
            raise SpecError(f"{path}: {info.st_size} bytes; a {what} is limited to {MAX_SPEC_BYTES}")
        chunks, size = [], 0
        while size <= MAX_SPEC_BYTES:  # the file may grow while it is read: never past the limit
            chunk = os.read(handle, MAX_SPEC_BYTES + 1 - size)
            if not chunk:
                break
            chunks.append(chunk)
            size += len(chunk)
        if size > MAX_SPEC_BYTES:
            raise SpecError(f"{path}: more than {MAX_SPEC_BYTES} bytes; a {what} is limited to {MAX_SPEC_BYTES}")
    except OSError as err:
        raise SpecError(f"{path}: cannot read ({err.strerror})") from None
    finally:
        os.close(handle)
    raw = b"".join(chunks)
    try:
        return raw.decode("utf-8")
    except UnicodeDecodeError as err:
        raise SpecError(f"{path}: not UTF-8 text (byte {err.start})") from None


def spec_facts(text: str, overrides: dict[str, float]) -> dict | None:
    """What a spec gives as it stands, read without validating it: ``title``, ``settings``
    (as :func:`bvpkit.io.spec.to_problem` makes them), ``arguments`` (of
    :class:`~bvpkit.Problem`, constants with the ``--set`` values), ``own`` (regions' values
    of constants), ``outputs``, ``constants`` and ``parameters`` (guesses; an eigenvalue's 0).

    Used to tie a prepared problem kept on disk to the spec it was made for (no pydantic, no
    SymPy). None when the text is not a spec of the usual shape: the entry is then not used,
    and the full validation says what is wrong.
    """
    import math
    import tomllib


    try:
        data = tomllib.loads(text)
    except (tomllib.TOMLDecodeError, RecursionError):
        return None
    section = data.get("problem")
    if not isinstance(section, dict):
        return None

    def table(where: dict, name: str) -> dict:
        value = where.get(name, {})
        if not isinstance(value, dict):
            raise TypeError(name)
        return value

    def number(value: object) -> float | complex:
        """A number of the spec: a complex one is a table ``{ re = ..., im = ... }``."""
        if isinstance(value, dict):
            if not value or not set(value) <= {"re", "im"}:
                raise TypeError("not a complex number")
            return complex(float(value.get("re", 0.0)), float(value.get("im", 0.0)))
        return float(value)  # type: ignore[arg-type]

    try:
        constants = {str(k): number(v) for k, v in table(section, "constants").items()}
        for name, value in overrides.items():
            if name not in constants:
                return None
            checked = limits.check_number(value, f"value of '{name}'")
            constants[name] = complex(checked) if isinstance(constants[name], complex) else float(checked)
        parameters = {str(k): number(v) for k, v in table(section, "unknown_parameters").items()}
        eigenvalue = section.get("eigenvalue")
        if eigenvalue is not None:
            parameters[eigenvalue] = 0.0
        if not all(math.isfinite(v.real) and math.isfinite(v.imag) for v in [*constants.values(), *parameters.values()]):
            return None
        settings = dict(table(data, "solver"))  # as the spec model keeps it: only the keys given
        save = table(data, "save")
        settings["save"] = {"solution_csv": save.get("solution_csv"), "report_json": save.get("report_json")}
        if table(data, "units"):
            settings["units"] = dict(data["units"])
        for name in ("trace", "fold_curve", "fit"):
            if name in data:
                settings[name] = dict(table(data, name))
        if "sweep" in data:
            settings["sweep"] = _sweep(table(data, "sweep"))
        regions = section.get("regions")
        if regions is not None:
            regions = [{**{k: v for k, v in r.items()},
                        "constants": {k: number(v) for k, v in r.get("constants", {}).items()}} for r in regions]
        own = {f"{name}@{r + 1}": number(value) for r, region in enumerate(regions or [])
               for name, value in region["constants"].items()}
        title = data.get("title", "")
        outputs = dict(table(data, "outputs"))
        arguments = {
            "equations": section.get("equations"), "conditions": section.get("conditions"),
            "domain": section.get("domain"), "independent": section.get("independent", "x"),
            "unknowns": section.get("unknowns"), "constants": constants,
            "unknown_parameters": {k: number(v) for k, v in table(section, "unknown_parameters").items()},
            "guess": dict(table(section, "guess")),
            "outputs": outputs, "settings": settings, "title": title, "eigenvalue": eigenvalue,
            "mode": section.get("mode"), "regions": regions,
        }
    except (TypeError, ValueError, AttributeError, KeyError, OverflowError):
        return None
    return {"title": title, "settings": settings, "arguments": arguments, "own": own, "outputs": outputs,
            "constants": constants, "parameters": parameters}


def _sweep(section: dict) -> dict:
    from ..families.sweep import axis_values

    grid = {}
    for name, axis in section["grid"].items():
        if isinstance(axis, list):
            grid[name] = [limits.check_value(v, f"value of '{name}'") for v in axis]
        else:
            grid[name] = axis_values(name, axis["from"], axis["to"], axis["count"], axis.get("spacing", "linear"))
    return {"grid": grid, "outputs": section.get("outputs")}
