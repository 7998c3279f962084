"""The solve options: one typed, frozen record, validated once, shared by every front door.

Python keywords (``bvpkit.solve(problem, tol=1e-8)``), the ``[solver]`` table of a TOML spec
and the command line's flags all end here: each option is one :class:`Option` of
:data:`OPTIONS` (its default, its range, the words of its help), and :meth:`SolveOptions.make`
checks values against it. A new option is one entry here and one field of
:class:`SolveOptions`; the spec's ``[solver]`` keys and the command line's flags are read
from :data:`OPTIONS`.

Numbers have one default and one floor each, here: the tolerance's floor
(:data:`TOL_FLOOR`) is what double precision allows any method to promise, and the methods
clamp to it from this module.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

from ..errors import OptionError

#: Below this relative tolerance double precision round-off dominates any method.
TOL_FLOOR = 1e-13
#: Above this a "solution" is not worth the name.
TOL_CEILING = 0.1
DEFAULT_TOL = 1e-6
DEFAULT_MAX_NODES = 20_000
#: Seconds for a whole ``method="auto"`` solve (a share to each attempt); see solver/strategy.py.
DEFAULT_TIME_LIMIT = 8.0
#: First placement of an infinite end, measured from the finite one (0 when both are infinite).
DEFAULT_TRUNCATION = 10.0


@dataclass(frozen=True)
class Option:
    """One option: its name, what it holds (``kind``), default, range and help text."""

    name: str
    kind: str  # "number", "count", "switch", "word"
    default: Any
    low: float | None = None
    high: float | None = None
    help: str = ""
    #: What the option does, in the words of the command line's help.
    says: str = ""

    @property
    def flag(self) -> str:
        """The command line's flag (``--max-nodes``; a switch that is on by default: ``--no-verify``)."""
        word = self.name.replace("_", "-")
        return f"--no-{word}" if self.kind == "switch" and self.default is True else f"--{word}"

    def check(self, value: Any) -> Any:
        """``value`` converted and checked (an :class:`OptionError` naming the option otherwise)."""
        if self.kind == "switch":
            if not isinstance(value, bool):
                raise OptionError(f"{self.name} must be true or false, got {value!r}")
            return value
        if self.kind == "word":
            if not isinstance(value, str) or not value:
                raise OptionError(f"{self.name} must be {self.help}, got {value!r}")
            return value
        number = isinstance(value, int | float) and not isinstance(value, bool)
        if self.kind == "count":
            if not number or float(value) != int(value) or not self.low <= int(value) <= self.high:
                raise OptionError(f"{self.name} must be a whole number from {self.low:,} to {self.high:,}, "
                                  f"got {value!r}")
            return int(value)
        if not number or not math.isfinite(value) or not self.low <= float(value) <= self.high:
            raise OptionError(f"{self.name} must be {self.help}, got {value!r}")
        return float(value)


OPTIONS: dict[str, Option] = {o.name: o for o in (
    Option("method", "word", "auto", help='"auto" or the name of a method',
           says="solution method (default: the spec's, else auto)"),
    Option("tol", "number", DEFAULT_TOL, TOL_FLOOR, TOL_CEILING,
           help=f"a number between {TOL_FLOOR:g} and {TOL_CEILING:g}",
           says=f"tolerance on the relative error (default: the spec's, else {DEFAULT_TOL:g})"),
    Option("max_nodes", "count", DEFAULT_MAX_NODES, 10, 10**7, says=f"mesh limit (default {DEFAULT_MAX_NODES})"),
    Option("verify", "switch", True, says="skip the error estimate (faster)"),
    Option("truncation", "number", DEFAULT_TRUNCATION, 1e-8, 1e8, help="a positive length below 1e8",
           says=f"first placement of an infinite end (default {DEFAULT_TRUNCATION:g}; moved out from there)"),
    Option("homotopy", "word", "auto", help='"auto", "off" or the name of a constant',
           says="continuation from an easier problem: auto (default), off, or a constant to continue in"),
    Option("time_limit", "number", DEFAULT_TIME_LIMIT, 1e-3, 1e6,
           help="a positive number of seconds (at most 1e6)",
           says=f"seconds for the whole solve (default {DEFAULT_TIME_LIMIT:g} with method auto)"),
)}


@dataclass(frozen=True)
class SolveOptions:
    """How to solve: checked once (:meth:`make`), then read by attribute everywhere.

    Attributes
    ----------
    method : str
        ``"auto"`` or a registered method's name.
    tol : float
        Tolerance on the estimated relative error of the states, ``|dy| / (1 + |y|)``.
    max_nodes : int
        Mesh limit.
    verify : bool
        Estimate the error and the stability constant.
    truncation : float
        First placement of an infinite end.
    homotopy : str
        ``"auto"``, ``"off"`` or the name of a constant to continue in.
    time_limit : float
        Seconds for the whole solve.
    limited : bool
        Whether the time limit binds: always with ``method="auto"``; a method named alone
        runs to its end unless a limit was given.
    """

    method: str = "auto"
    tol: float = DEFAULT_TOL
    max_nodes: int = DEFAULT_MAX_NODES
    verify: bool = True
    truncation: float = DEFAULT_TRUNCATION
    homotopy: str = "auto"
    time_limit: float = DEFAULT_TIME_LIMIT
    limited: bool = True

    @classmethod
    def make(cls, *layers: Mapping[str, Any] | None) -> SolveOptions:
        """Options from layers of given values, later layers winning (a problem's settings,
        then the keywords of a call); None values are not given. Unknown names are ignored
        here (a spec's own sections are checked where they are read)."""
        chosen: dict[str, Any] = {}
        for layer in layers:
            for name, value in (layer or {}).items():
                if name in OPTIONS and value is not None:
                    chosen[name] = OPTIONS[name].check(value)
        method = chosen.get("method", "auto")  # a name the solver checks against its registry
        limited = method == "auto" or "time_limit" in chosen
        return cls(**{**{name: o.default for name, o in OPTIONS.items()}, **chosen, "limited": limited})

    def replace(self, **changes: Any) -> SolveOptions:
        """These options with some changed (checked like given ones)."""
        for name, value in changes.items():
            if name in OPTIONS:
                changes[name] = OPTIONS[name].check(value)
        return dataclasses.replace(self, **changes)

    def as_dict(self) -> dict[str, Any]:
        return {name: getattr(self, name) for name in OPTIONS}
