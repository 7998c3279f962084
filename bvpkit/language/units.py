"""Units the user gave for names of a problem: printed in summaries, CSV headers and plots.

Units are optional labels, never arithmetic: bvpkit does not convert or check dimensions.
A spec gives them in a ``[units]`` table (``x = "m"``, ``tip_deflection = "mm"``); from
Python, ``Problem(..., settings={"units": {...}})``. Names may be the independent variable,
constants, unknown parameters, the eigenvalue, unknown functions and outputs. The unit of
a derivative column (``w'``) is made from its function's and the variable's units.
"""

from __future__ import annotations

import re
from collections.abc import Iterable, Mapping
from typing import Any

from ..errors import OptionError, closest

#: A point value of a function or its derivative, as written in outputs: ``f'(0)``, ``w(L-)``.
_POINT_VALUE = re.compile(r"^([A-Za-z_][A-Za-z0-9_]*'*)\([^()]*\)$")

#: Longest unit text accepted: a unit is a label in a header, not a sentence.
MAX_UNIT_LENGTH = 40


def check_units(units: Any, known: Iterable[str], where: str = "units") -> dict[str, str]:
    """Validate a table of units against the names a problem knows.

    Parameters
    ----------
    units : mapping of str to str
    known : iterable of str
        The names that may carry a unit.
    where : str
        How messages name the table (``"[units]"`` for a spec).

    Returns
    -------
    dict of str to str
    """
    if units is None:
        return {}
    if not isinstance(units, Mapping):
        raise OptionError(f"{where}: expected a table of names and units, e.g. {{ x = \"m\" }}")
    known = list(known)
    result = {}
    for name, unit in units.items():
        if name not in known:
            raise OptionError(
                f"{where} gives a unit for '{name}', which is not a name of the problem"
                f"{closest(str(name), known)} "
                f"(units are for: {', '.join(known)})"
            )
        if not isinstance(unit, str):
            raise OptionError(f"{where}: the unit of '{name}' must be text in quotes, e.g. \"m\"")
        text = unit.strip()
        if not text or len(text) > MAX_UNIT_LENGTH or not text.isprintable():
            raise OptionError(
                f"{where}: the unit of '{name}' must be 1 to {MAX_UNIT_LENGTH} printable characters, "
                f"got {unit!r}"
            )
        result[str(name)] = text
    return result


def names_with_units(problem: Any) -> list[str]:
    """The names of a problem (or prepared problem) that may carry a unit."""
    facts = problem.facts if hasattr(problem, "facts") else None
    if facts is not None:
        arguments = facts.get("arguments", {})
        extra = [arguments["eigenvalue"]] if arguments.get("eigenvalue") else []
        return [facts["independent"], *arguments.get("constants", {}),
                *arguments.get("unknown_parameters", {}), *extra, *facts["unknowns"], *facts["outputs"]]
    return [problem.independent, *problem.constants, *problem.unknown_parameters,
            *([problem.eigenvalue] if problem.eigenvalue else []), *problem.unknowns, *problem.outputs]


def units_of(problem: Any) -> dict[str, str]:
    """The units a problem (or prepared problem) carries in its settings, checked; ``{}`` when none."""
    if problem is None:
        return {}
    settings = problem.settings if hasattr(problem, "settings") else {}
    units = settings.get("units") if isinstance(settings, Mapping) else None
    if not units:
        return {}
    return check_units(units, names_with_units(problem), "settings['units']")


def unit_of(name: str, units: Mapping[str, str], independent: str | None = None) -> str | None:
    """The unit of a name or of a derivative column (``w''`` from ``w`` and the variable)."""
    if name in units:
        return units[name]
    point = _POINT_VALUE.match(name)  # f'(0), y(1/2), w(L-): the unit of the column f'
    if point:
        name = point.group(1)
        if name in units:
            return units[name]
    base = name.rstrip("'")
    order = len(name) - len(base)
    if order == 0 or base not in units:
        return None
    variable = units.get(independent or "", "")
    if not variable:
        return None
    power = f"^{order}" if order > 1 else ""
    return f"{units[base]}/{variable}{power}" if "/" not in variable and " " not in variable \
        else f"{units[base]}/({variable}){power}"


def label(name: str, units: Mapping[str, str], independent: str | None = None) -> str:
    """``"name [unit]"``, or the name alone when it has no unit."""
    unit = unit_of(name, units, independent)
    return f"{name} [{unit}]" if unit else name


def labelled(columns: Mapping[str, Any], units: Mapping[str, str] | None, independent: str | None = None) -> dict:
    """A table's columns with their headers labelled with units (as they are without units)."""
    return {label(name, units, independent) if units else name: values for name, values in columns.items()}
