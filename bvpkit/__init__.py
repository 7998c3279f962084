"""bvpkit: two-point boundary-value problems for ODEs, written as on paper.

>>> import bvpkit
>>> p = bvpkit.Problem(["y'' + y = 0"], ["y(0) = 0", "y'(0) = 1"], (0, 1))  # doctest: +SKIP
>>> bvpkit.solve(p).evaluate("y(1)")  # doctest: +SKIP
"""

from __future__ import annotations

from .continuation import Branch, Fold, trace
from .diagnostics import Attempt, Diagnostics
from .driver import solve
from .errors import (
    BvpkitError,
    ExpressionError,
    MissingExtraError,
    OptionError,
    ProblemError,
    SpecError,
)
from .problem import Problem
from .solution import Solution
from .status import Status
from .sweep import SweepResult, sweep

__version__ = "0.1.0"


def load(path):  # noqa: ANN001, ANN201
    """Read a TOML spec file into a :class:`Problem` (its solver settings carried along)."""
    from .spec import load as _load

    return _load(path)


__all__ = [
    "Attempt",
    "Branch",
    "Fold",
    "BvpkitError",
    "Diagnostics",
    "ExpressionError",
    "MissingExtraError",
    "OptionError",
    "Problem",
    "ProblemError",
    "Solution",
    "SpecError",
    "Status",
    "SweepResult",
    "__version__",
    "load",
    "solve",
    "sweep",
    "trace",
]
