"""What a standard form holds, as plain data (no SymPy).

:class:`StateLayout` is everything the numerical side (methods, driver, solutions) asks of a
:class:`~bvpkit.reduce.form.StandardForm`: the states and what they are, the regions stacked in
``Y``, the parameters and constants by name, and what the reduction added. It travels in
caches as JSON, so a solve from a cached problem never imports SymPy.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass
from typing import Any


def written(name: str, k: int) -> str:
    """A state as a person writes it: ``f''``; the primes go inside a bracket (``re(T')``, the
    real part of ``T'``); an added state's description (``integral(c)``) as it is."""
    if not k:
        return name
    if name.endswith(")") and "(" in name:
        return name[:-1] + "'" * k + ")"
    return name + "'" * k


class States:
    """What a region's ``states`` (``(function, derivative order)`` per state) tell."""

    states: tuple[tuple[str, int], ...]

    @property
    def region_size(self) -> int:
        """States per region (user states, then added ones)."""
        return len(self.states)

    @property
    def state_names(self) -> tuple[str, ...]:
        """``("f", "f'", "f''")``: what each state of a region holds, as a person writes it."""
        return tuple(written(name, k) for name, k in self.states)

    def index(self, name: str, order: int) -> int:
        """Row of ``name``'s derivative ``order`` within a region."""
        return self.states.index((name, order))

    def order(self, name: str) -> int:
        return 1 + max(k for f, k in self.states if f == name)


@dataclass(frozen=True)
class StateLayout(States):
    """Plain facts of a standard form.

    Attributes
    ----------
    key : str
        Content hash of the symbolic form (the compiled-code cache key).
    independent : str
        Name of the user's independent variable.
    functions : tuple of (str, int)
        The unknown functions and their orders.
    states : tuple of (str, int)
        One region's states: the user's, then the added ones.
    users : int
        User states per region.
    regions : int
        Regions stacked in ``Y`` (row ``r * region_size + i`` is state ``i`` of region ``r``).
    parameters, constants : tuple of str
        Names of ``p`` and ``k`` (``_length`` is the truncation length of an infinite end;
        ``name@r`` a region's own value of a constant).
    condition_kinds : tuple of str
        Per condition: ``given``, ``continuity``, ``added`` or ``phase``.
    singular : bool
        A term ``S Y / t`` singular at ``t = 0`` is part of the equations.
    stretch : tuple of int
        Per region, the power ``d`` of its map ``x = c_r + h_r t**d`` (empty: all affine).
    algebraic : tuple of str
        One region's algebraic unknowns (empty for most problems): not states of ``Y``, but
        values ``Z`` the algebraic equations fix at every point (``Z`` stacks the regions
        like ``Y``: row ``r * len(algebraic) + j``).
    """

    key: str
    independent: str
    functions: tuple[tuple[str, int], ...]
    states: tuple[tuple[str, int], ...]
    users: int
    regions: int
    parameters: tuple[str, ...]
    constants: tuple[str, ...]
    condition_kinds: tuple[str, ...] = ()
    singular: bool = False
    stretch: tuple[int, ...] = ()
    algebraic: tuple[str, ...] = ()

    @property
    def n_algebraic(self) -> int:
        """Size of ``Z``: all regions' algebraic unknowns."""
        return self.regions * len(self.algebraic)

    @property
    def n(self) -> int:
        """Size of ``Y``: all regions' states."""
        return self.regions * len(self.states)

    @property
    def row_names(self) -> tuple[str, ...]:
        """What each row of ``Y`` holds (with its region when there are several)."""
        if self.regions == 1:
            return self.state_names
        return tuple(f"{name} in region {r + 1}" for r in range(self.regions) for name in self.state_names)

    def power(self, r: int) -> int:
        """The power ``d`` of region ``r``'s map ``x = c_r + h_r t**d`` (1: affine)."""
        return int(self.stretch[r]) if r < len(self.stretch) else 1

    def mesh_nodes(self, points: int) -> int:
        """The nodes of a solution whose standard mesh has ``points`` points (one mesh per region)."""
        return points * self.regions

    def rows(self, i: int) -> list[int]:
        """The rows of ``Y`` that hold state ``i`` of each region, left to right."""
        return [r * len(self.states) + i for r in range(self.regions)]

    @property
    def user_rows(self) -> list[int]:
        """Rows of ``Y`` holding user states (every region)."""
        size = len(self.states)
        return [r * size + i for r in range(self.regions) for i in range(self.users)]

    def as_dict(self) -> dict[str, Any]:
        return asdict(self)

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> StateLayout:
        fields = dict(data)
        for name in ("functions", "states"):
            fields[name] = tuple((str(a), int(b)) for a, b in fields[name])
        for name in ("parameters", "constants", "condition_kinds"):
            fields[name] = tuple(fields[name])
        fields["algebraic"] = tuple(str(a) for a in fields.get("algebraic", ()))
        fields["stretch"] = tuple(int(v) for v in fields.get("stretch", ()))
        return cls(**fields)
