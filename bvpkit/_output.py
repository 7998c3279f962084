"""Shared helpers for the tables that Solution, Branch and SweepResult write (figures: plots.py)."""

from __future__ import annotations

import csv
from collections.abc import Mapping
from pathlib import Path
from typing import Any, TextIO

from .errors import MissingExtraError, OptionError


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


#: The words that install the table libraries (pandas, xarray), as the README gives them.
TABLES_INSTALL = 'pip install ".[tables]"'


def optional(module: str, feature: str) -> Any:
    """``module`` imported on first use; missing, a :class:`~bvpkit.errors.MissingExtraError`
    says which extra installs it."""
    import importlib


    try:
        return importlib.import_module(module)
    except ImportError:
        raise MissingExtraError(f"{feature} needs {module}: {TABLES_INSTALL}") from None


def data_frame(columns: Mapping[str, Any], feature: str = "to_pandas()") -> Any:
    """Equal-length columns as a pandas DataFrame (the ``tables`` extra); a missing value
    (None) of a number column becomes NaN."""
    import numpy as np

    pandas = optional("pandas", feature)
    frame = {}
    for name, values in columns.items():
        values = list(values)
        if any(isinstance(v, str) for v in values) or all(v is None for v in values):
            frame[name] = values
        else:
            frame[name] = np.array([np.nan if v is None else v for v in values])
    return pandas.DataFrame(frame)


def output_labels(named: Mapping[str, str], outputs: Any) -> dict[str, str]:
    """Label -> expression of the outputs asked for: the problem's outputs keep their names, a
    mapping gives its own labels, and a plain expression is its own label."""
    if isinstance(outputs, Mapping):
        labels = {}
        for label, text in outputs.items():
            if not isinstance(label, str) or not isinstance(text, str):
                raise _option_error(f"outputs: a label and an expression as text each, got {label!r}: {text!r}")
            labels[label] = named.get(text, text)
        return labels
    if isinstance(outputs, str):
        raise _option_error(f"outputs must be a list of expressions, got the text {outputs!r}; write [{outputs!r}]")
    return {text: named.get(text, text) for text in (outputs if outputs is not None else list(named))}


def _option_error(message: str) -> Exception:

    return OptionError(message)
