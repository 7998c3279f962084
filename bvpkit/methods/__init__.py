"""Solution methods and their registry.

A new method is one module holding a :class:`~bvpkit.methods.base.Method` subclass plus
one line in ``REGISTRY``; the CLI's ``--method`` choices, the docs and the tests' method
parametrisation all read this dict.
"""

from __future__ import annotations

from ..errors import OptionError, closest
from .base import Method, Outcome, Trial
from .collocation import Collocation
from .collocation6 import SixthOrderCollocation
from .multiple_shooting import MultipleShooting
from .single_shooting import SingleShooting

REGISTRY: dict[str, type[Method]] = {
    Collocation.name: Collocation,
    SingleShooting.name: SingleShooting,
    MultipleShooting.name: MultipleShooting,
    SixthOrderCollocation.name: SixthOrderCollocation,
}


def get(name: str) -> Method:
    """The method registered under ``name``; an unknown name lists the valid ones."""
    try:
        return REGISTRY[name]()
    except KeyError:
        valid = ", ".join(["auto", *REGISTRY])
        raise OptionError(
            f"unknown method '{name}'{closest(name, REGISTRY)}; valid methods: {valid}"
        ) from None


__all__ = ["REGISTRY", "Method", "Outcome", "Trial", "get"]
