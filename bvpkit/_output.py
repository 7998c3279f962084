"""Shared helpers for the tables that Solution, Branch and SweepResult write (figures: plots.py)."""

from __future__ import annotations

import csv
from collections.abc import Mapping
from pathlib import Path
from typing import Any, TextIO


def write_columns(path: str | Path | TextIO, columns: Mapping[str, Any]) -> None:
    """Write equal-length columns as CSV: a header row, then numbers in full precision (text as is).

    ``path`` may also be a text file already open for writing (the command line opens the
    files a spec names itself, without following links; see ``cli.SpecOutput``).
    """
    if hasattr(path, "write"):
        _write_rows(path, columns)  # type: ignore[arg-type]
        return
    with open(path, "w", newline="") as handle:  # type: ignore[arg-type]
        _write_rows(handle, columns)


def real_columns(columns: Mapping[str, Any]) -> dict[str, Any]:
    """Columns with each complex one as two real ones, ``re(name)`` and ``im(name)`` (the one
    written form of complex values in tables)."""
    out: dict[str, Any] = {}
    for name, values in columns.items():
        kind = getattr(getattr(values, "dtype", None), "kind", None)
        if kind == "c" or (kind in (None, "O") and any(isinstance(v, complex) for v in values)):
            out[f"re({name})"] = [None if v is None else float(v.real) for v in values]
            out[f"im({name})"] = [None if v is None else float(v.imag) for v in values]
        else:
            out[name] = values
    return out


def _write_rows(handle: TextIO, columns: Mapping[str, Any]) -> None:
    columns = real_columns(columns)
    writer = csv.writer(handle)
    writer.writerow(columns)
    for row in zip(*columns.values()):
        writer.writerow([_cell(v) for v in row])


def _cell(value: Any) -> str:
    """Text as it is, numbers in full precision, booleans as words, nothing as an empty cell."""
    if value is None:
        return ""
    if isinstance(value, str | bool):
        return str(value)
    return repr(float(value))


def progress_bar(enabled: bool, total: int):  # noqa: ANN201
    """A tqdm bar on a terminal when asked and installed (the ``progress`` extra), else None."""
    import sys

    if not enabled or not sys.stderr.isatty():
        return None
    try:
        from tqdm import tqdm
    except ImportError:
        return None  # a convenience only: without the extra, work quietly
    return tqdm(total=total, unit="point", leave=False)


def json_ready(value: Any) -> Any:
    """The one cleaner of results for JSON: NaN and inf become null, NumPy scalars and arrays
    plain numbers and lists, tuples lists, keys strings, a complex number ``{"re": ..., "im":
    ...}``."""
    import math

    if isinstance(value, complex):
        return {"re": json_ready(value.real), "im": json_ready(value.imag)}
    if isinstance(value, dict):
        return {str(k): json_ready(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [json_ready(v) for v in value]
    if hasattr(value, "tolist") and not isinstance(value, str):  # NumPy arrays and scalars
        return json_ready(value.tolist())
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    return value
