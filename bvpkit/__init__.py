"""bvpkit: two-point boundary-value problems for ODEs, written as on paper.

>>> import bvpkit
>>> p = bvpkit.Problem(["y'' + y = 0"], ["y(0) = 0", "y'(0) = 1"], (0, 1))  # doctest: +SKIP
>>> bvpkit.solve(p).evaluate("y(1)")  # doctest: +SKIP
"""

from __future__ import annotations

from .errors import (
    BvpkitError,
    ExpressionError,
    MissingExtraError,
    OptionError,
    ProblemError,
    SpecError,
)
from .status import Status
from .sweep import SweepResult, sweep  # eager: the function shares its name with its module

# The rest loads on first use (PEP 562), so that `import bvpkit` and a cached
# `bvpkit solve` stay light: SymPy, for one, is imported only when a problem is built.
_LAZY = {
    "Attempt": "diagnostics", "Diagnostics": "diagnostics", "Branch": "continuation", "Fold": "continuation",
    "trace": "continuation", "solve": "driver", "Problem": "problem", "Solution": "solution",
    "Interpolant": "solution", "Prepared": "prepared", "prepare": "prepared",
}


def __getattr__(name: str):  # noqa: ANN202
    if name in _LAZY:
        import importlib

        value = getattr(importlib.import_module(f".{_LAZY[name]}", __name__), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'bvpkit' has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted(__all__)


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
    "Interpolant",
    "Prepared",
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
    "prepare",
    "solve",
    "sweep",
    "trace",
]
