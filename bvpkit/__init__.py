"""bvpkit: two-point boundary-value problems for ODEs, written as on paper.

>>> import bvpkit
>>> p = bvpkit.Problem(["y'' + y = 0"], ["y(0) = 0", "y'(0) = 1"], (0, 1))  # doctest: +SKIP
>>> bvpkit.solve(p).evaluate("y(1)")  # doctest: +SKIP
"""

from __future__ import annotations

from . import _interrupt

_interrupt.install_if_command()  # first: Ctrl-C while the `bvpkit` command starts (see _interrupt.py)

import sys  # noqa: E402
import types  # noqa: E402

from .errors import (  # noqa: E402
    BvpkitError,
    ExpressionError,
    MissingExtraError,
    OptionError,
    ProblemError,
    SpecError,
)
from .status import Status  # noqa: E402

# Everything else loads on first use (PEP 562), so that `import bvpkit` stays light (no
# NumPy, no SymPy): the command line handles Ctrl-C before anything heavy is imported, and
# a cached `bvpkit solve` never imports SymPy.
_LAZY = {
    "Attempt": "diagnostics", "Diagnostics": "diagnostics", "Branch": "continuation", "Fold": "continuation",
    "trace": "continuation", "solve": "driver", "Problem": "problem", "Solution": "solution",
    "Interpolant": "solution", "Prepared": "prepared", "prepare": "prepared",
    "BranchPoint": "continuation", "FoldCurve": "foldcurve", "fold_curve": "foldcurve",
    "sweep": "sweep", "SweepResult": "sweep",
}


def __getattr__(name: str):  # noqa: ANN202
    if name in _LAZY:
        import importlib

        value = getattr(importlib.import_module(f".{_LAZY[name]}", __name__), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'bvpkit' has no attribute {name!r}")


class _Package(types.ModuleType):
    """The package's module type: ``bvpkit.sweep`` stays the function.

    Importing the submodule ``bvpkit.sweep`` makes Python set the package's attribute
    ``sweep`` to that module, which would hide the function of the same name; that one
    assignment is declined (the module stays reachable as ``sys.modules["bvpkit.sweep"]``
    and through ``from bvpkit.sweep import ...``).
    """

    def __setattr__(self, name: str, value: object) -> None:
        if name in _LAZY and name == _LAZY[name] and isinstance(value, types.ModuleType):
            return
        super().__setattr__(name, value)


sys.modules[__name__].__class__ = _Package


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
    "BranchPoint",
    "Fold",
    "FoldCurve",
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
    "fold_curve",
    "load",
    "prepare",
    "solve",
    "sweep",
    "trace",
]
