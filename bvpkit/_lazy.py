"""A module imported on first use.

SymPy costs a third of a second to import; a solve of a problem rebuilt from the cache
(``prepared.py``) never touches it, so the modules on that path name it through
``LazyModule("sympy")`` and pay for it only when a symbolic step really runs.
"""

from __future__ import annotations

import importlib
from types import ModuleType


class LazyModule:
    """Stands for the module ``name``; the first attribute access imports it."""

    def __init__(self, name: str):
        self.__dict__["_name"] = name
        self.__dict__["_module"] = None

    def _load(self) -> ModuleType:
        module = self.__dict__["_module"]
        if module is None:
            module = importlib.import_module(self.__dict__["_name"])
            self.__dict__["_module"] = module
        return module

    def __getattr__(self, attribute: str):  # noqa: ANN204
        return getattr(self._load(), attribute)


def applied_undef() -> type:
    """SymPy's class of undefined applied functions (``f(x)``), imported on demand."""
    from sympy.core.function import AppliedUndef

    return AppliedUndef
