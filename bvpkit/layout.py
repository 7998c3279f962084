"""What a reduced first-order system holds, as plain data (no SymPy).

:class:`StateLayout` is everything the numerical side (methods, driver, solutions) asks of a
:class:`~bvpkit.reduce.FirstOrderSystem`: the states and what they are, the parameters and
constants by name, and the special structure (eigenvalue, rescaled domain, singular term).
It travels in caches as JSON, so a solve from a cached problem never imports SymPy.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass
from typing import Any


class States:
    """What a system's ``states`` (``(function, derivative order)`` per state) tell."""

    states: tuple[tuple[str, int], ...]

    @property
    def n(self) -> int:
        return len(self.states)

    @property
    def state_names(self) -> tuple[str, ...]:
        """``("f", "f'", "f''")``: what each state holds, as a person writes it."""
        return tuple(name + "'" * k for name, k in self.states)

    def index(self, name: str, order: int) -> int:
        return self.states.index((name, order))

    def order(self, name: str) -> int:
        return 1 + max(k for f, k in self.states if f == name)


@dataclass(frozen=True)
class StateLayout(States):
    """Plain facts of a first-order system.

    Attributes
    ----------
    key : str
        Content hash of the symbolic system (the compiled-code cache key).
    independent : str
        Name of the independent variable.
    states : tuple of (str, int)
        For state ``i``, the unknown function and the derivative order it holds.
    parameters, constants : tuple of str
        Names of the unknown parameters and of the constants, in the order of ``p`` and ``k``.
    rescaled : bool
        A domain end is an unknown parameter (the method variable runs over ``[0, 1]``).
    singular : bool
        A term ``S y / (x - a)`` singular at the left end was split off.
    eigenvalue : int or None
        Index in ``parameters`` of the eigenvalue; ``mode`` the mode asked for.
    users : int
        States ``0 .. users - 1`` hold the unknown functions; later ones are added states.
    """

    key: str
    independent: str
    states: tuple[tuple[str, int], ...]
    parameters: tuple[str, ...]
    constants: tuple[str, ...]
    rescaled: bool = False
    singular: bool = False
    eigenvalue: int | None = None
    mode: int | None = None
    users: int = 0

    def as_dict(self) -> dict[str, Any]:
        return asdict(self)

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> StateLayout:
        fields = dict(data)
        fields["states"] = tuple((str(name), int(order)) for name, order in fields["states"])
        fields["parameters"] = tuple(fields["parameters"])
        fields["constants"] = tuple(fields["constants"])
        return cls(**fields)
