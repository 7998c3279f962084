"""bvpkit: two-point boundary-value problems for ODEs, written as on paper.

>>> import bvpkit
>>> p = bvpkit.Problem(["y'' + y = 0"], ["y(0) = 0", "y'(0) = 1"], (0, 1))  # doctest: +SKIP
>>> bvpkit.solve(p).evaluate("y(1)")  # doctest: +SKIP
"""

from __future__ import annotations

from . import _interrupt

_interrupt.install_if_command()  # first: Ctrl-C while the `bvpkit` command starts (see _interrupt.py)

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
    "Attempt": "methods.diagnostics", "Diagnostics": "methods.diagnostics", "Branch": "families.continuation",
    "Fold": "families.continuation", "trace": "public", "solve": "public",
    "Problem": "language.problem", "Solution": "solver.solution", "Interpolant": "reduce.mapping",
    "Prepared": "reduce.prepared", "prepare": "reduce.prepared", "BranchPoint": "families.continuation",
    "FoldCurve": "families.foldcurve", "fold_curve": "public", "sweep": "public",
    "SweepResult": "families.sweep", "fit": "public", "FitResult": "families.fitting",
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
    from .io.spec import load as _load

    return _load(path)


__all__ = [
    "Attempt",
    "Branch",
    "BranchPoint",
    "Fold",
    "FoldCurve",
    "FitResult",
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
    "fit",
    "trace",
]
