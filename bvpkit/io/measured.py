"""Measurements for ``bvpkit fit`` from a CSV file.

The first row names the columns: the independent variable (a unit in brackets after a name,
``x [m]``, is dropped, as bvpkit writes its own CSV headers), then one column per expression
of the solution measured (``theta``, ``theta'``), and optionally ``sigma``, the standard
deviation of each row's measurements. An empty cell is a value not measured at that point.
The file is read once, bounded (:func:`bvpkit.io.specfile.read_spec`).
"""

from __future__ import annotations

import csv
import io
import math
from pathlib import Path
from typing import Any

from ..errors import SpecError
from .specfile import read_spec

#: The column of per-row standard deviations.
SIGMA_COLUMN = "sigma"


def _name(header: str) -> str:
    text = header.strip()
    if text.endswith("]") and " [" in text:
        text = text[: text.rindex(" [")].strip()
    return text


def read_measurements(path: str | Path, independent: str, sigma: Any = None) -> dict[str, tuple]:
    """``{expression: (x_values, y_values)}`` (with per-point sigmas as a third item when the
    file has a ``sigma`` column and ``sigma`` is not given), from the CSV file at ``path``."""
    text = read_spec(path, "CSV file of measurements")
    rows = [r for r in csv.reader(io.StringIO(text)) if any(cell.strip() for cell in r)]
    if len(rows) < 2:
        raise SpecError(f"{path}: no measurements (a header row and at least one row of numbers are needed)")
    header = [_name(h) for h in rows[0]]
    if not header or header[0] != independent:
        raise SpecError(f"{path}: the first column must be the independent variable '{independent}', "
                        f"not '{header[0] if header else ''}'")
    if len(set(header)) != len(header):
        raise SpecError(f"{path}: a column name appears twice in the header")
    measured = [h for h in header[1:] if h != SIGMA_COLUMN]
    if not measured:
        raise SpecError(f"{path}: no column of measured values after '{independent}'")
    columns: dict[str, list[float]] = {h: [] for h in header}
    for number, row in enumerate(rows[1:], start=2):
        if len(row) != len(header):
            raise SpecError(f"{path}: row {number} has {len(row)} cells, the header {len(header)}")
        for h, cell in zip(header, row):
            cell = cell.strip()
            if not cell:
                if h in (independent, SIGMA_COLUMN):
                    raise SpecError(f"{path}: row {number} has no value of '{h}'")
                columns[h].append(math.nan)
                continue
            try:
                value = float(cell)
            except ValueError:
                raise SpecError(f"{path}: row {number}, column '{h}': {cell!r} is not a number") from None
            if not math.isfinite(value):
                raise SpecError(f"{path}: row {number}, column '{h}': {cell!r} is not a finite number")
            columns[h].append(value)
    x = columns[independent]
    data: dict[str, tuple] = {}
    for h in measured:
        keep = [i for i, v in enumerate(columns[h]) if not math.isnan(v)]
        if not keep:
            raise SpecError(f"{path}: column '{h}' holds no values")
        item: tuple = ([x[i] for i in keep], [columns[h][i] for i in keep])
        if SIGMA_COLUMN in columns and sigma is None:
            item += ([columns[SIGMA_COLUMN][i] for i in keep],)
        data[h] = item
    return data
