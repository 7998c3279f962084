"""The contract of a problem class: one transform object with a fixed set of hooks.

Every problem class bvpkit knows (integral conditions, eigenvalues, periodic orbits, weak
end singularities, a singular left-end term, infinite ends, complex values, ...) is one
subclass of :class:`Transform` in one module of this folder. The reduce stage
(:func:`bvpkit.reduce.form.standard_form`) runs the symbolic hooks of the classes a problem
belongs to, in the order of :data:`bvpkit.reduce.classes.PIPELINE`, on a
:class:`~bvpkit.reduce.form.Reduction` (the first-order system being built, in the user's
variable); each returns the plain-data object that travels inside the prepared problem
(``prepared.transforms``). The solve driver, continuation, settling and the first iterate
loop over those objects and call the numerical hooks; none of them tests which classes a
problem belongs to.

Symbolic hooks (classmethods, SymPy; run once per problem structure, in this order, each
only for a class that :meth:`Transform.applies`):

1. ``names(problem, names)`` -- the constants and parameters the class adds (the
   truncation length of an infinite end; the eigenvalue);
1a. ``set_aside(work)`` -- equations set aside before the rest are made first order (the
   algebraic equations, as the standard form's ``G``);
2. ``states(work)`` -- added states and their equations (an integral, the normalisation);
3. ``conditions(work)`` -- added conditions (an added state's start, a phase condition);
4. ``system(work)`` -- a rewrite of the regions' equations (a stretch of the variable, the
   singular term split off);
5. ``maps(work)`` -- the regions' maps onto ``[0, 1]`` (a truncated infinite end);
6. ``split(work)`` -- a rewrite of the whole reduction onto other states and names (complex
   values onto their real and imaginary parts);
7. ``finish(work)`` -- the transform object itself, plain data, made from what the steps saw.

Numerical hooks (methods of the object; plain NumPy, no SymPy), each with a default that
does nothing:

* :meth:`Transform.constants` -- values of the constants the class added, from the options;
* :meth:`Transform.start` -- the first iterate of a solve from scratch (the eigenvalue guess);
* :meth:`Transform.begin` -- the start of every solve, from scratch or from a previous
  solution, once the first iterate's states are known (where the algebraic unknowns' inner
  Newton iterations start: the branch);
* :meth:`Transform.around` -- a loop around a solve (lengthening a truncated domain);
* :meth:`Transform.check` -- a verdict on a converged solution (the eigenvalue's mode);
* :meth:`Transform.diagnose` -- the class's own cause of a failed solve, in words (where the
  algebraic equations stop determining their unknowns);
* :meth:`Transform.along` -- a check of each point of a trace (the far field);
* :meth:`Transform.describe` -- what the class adds to a solution's message and diagnostics;
* :meth:`Transform.ends` -- the true ends of the domain where the solved one differs.

The map back to the user's names (each with a default that changes nothing): :meth:`Transform.spelled`
(the names of the standard form that make up one of the user's), :meth:`Transform.parts` (the
real expressions an expression of the solution is evaluated as; symbolic), :meth:`Transform.inward`
and :meth:`Transform.outward` (values by the user's names to those of the standard form, and
back: a complex constant or parameter to its real and imaginary parts).

``needs`` names what a method must be able to take for this class (``"singular_term"``);
methods declare what they take, and the selector matches the two.

A new class is one module here (a subclass, registered with :func:`register`) and its
tests; ``DEVELOPERS.md`` says how.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable, Mapping
from typing import Any, ClassVar

#: kind -> class, for reading transforms back from plain data (the disk cache, workers).
KINDS: dict[str, type[Transform]] = {}


def register(cls: type[Transform]) -> type[Transform]:
    """Class decorator: make ``cls`` readable from plain data by its ``kind``."""
    KINDS[cls.kind] = cls
    return cls


@dataclasses.dataclass(frozen=True)
class Transform:
    """One problem class, as plain data once the reduction is done (see the module docstring)."""

    kind: ClassVar[str] = ""
    #: What a method must take to solve a problem of this class.
    needs: ClassVar[frozenset[str]] = frozenset()
    #: Whether the values the reduction forms are real (its symbols carry SymPy's real
    #: assumption); a class of complex values says False, and rewrites them onto real ones in
    #: its ``split`` hook.
    real_values: ClassVar[bool] = True
    #: Whether a steady state of this class can still be read as one of ``u_t = u'' - g``
    #: (the stability judgement of traced points).
    keeps_evolution: ClassVar[bool] = False

    # -- symbolic hooks (SymPy; the reduce stage) ---------------------------------------------
    @classmethod
    def applies(cls, problem: Any) -> bool:
        return False

    @classmethod
    def room(cls, problem: Any) -> int:
        """How many states this class adds to a region (room for their symbols)."""
        return 0

    @classmethod
    def names(cls, problem: Any, names: Any) -> None:
        """Add constants or parameters to ``names`` (a :class:`~bvpkit.reduce.form.Names`)."""

    @classmethod
    def set_aside(cls, work: Any) -> None:
        """Take equations out of ``work.equations`` before the rest are made first order."""

    @classmethod
    def states(cls, work: Any) -> None:
        """Add states and their right-hand sides to every region of ``work``."""

    @classmethod
    def conditions(cls, work: Any) -> None:
        """Add conditions to ``work``."""

    @classmethod
    def system(cls, work: Any) -> None:
        """Rewrite the regions' equations in ``work``."""

    @classmethod
    def maps(cls, work: Any) -> None:
        """Rewrite the regions' maps onto ``[0, 1]`` in ``work``."""

    @classmethod
    def split(cls, work: Any) -> None:
        """Rewrite the whole reduction ``work`` onto other states and names (its states,
        systems, conditions and names all at once)."""

    @classmethod
    def finish(cls, work: Any) -> Transform:
        """The plain-data object of this class for the problem ``work`` reduced."""
        return cls()

    # -- numerical hooks (plain data, NumPy) --------------------------------------------------
    def constants(self, options: Any) -> dict[str, float]:
        """Values of the constants this class added (by name), for the solve's options."""
        return {}

    def start(self, prepared: Any, t: Any, y: Any, p: Any, k: Any, given: bool) -> tuple[Any, Any]:
        """The first iterate ``(y, p)`` of a solve from scratch (``given``: the user gave
        guess expressions)."""
        return y, p

    def begin(self, prepared: Any, t: Any, y: Any, p: Any, k: Any, guess: Any) -> None:
        """The start of a solve on the mesh ``t`` from the states ``y``: ``guess`` is the
        previous solution carried from (a :class:`~bvpkit.reduce.mapping.Start`), or the guess
        recipes in force (name -> :class:`~bvpkit.reduce.guess.GuessRecipe`)."""

    def around(self, solve: Callable[[Any], Any]) -> Callable[[Any], Any]:
        """A solve wrapped in this class's loop: ``solve(job) -> run`` in, the same out
        (:class:`bvpkit.solver.driver.Job` and :class:`~bvpkit.solver.driver.Run`)."""
        return solve

    def check(self, prepared: Any, outcome: Any, k: Any) -> tuple[Any, str] | None:
        """A verdict ``(status, message)`` on a converged outcome, or None (no objection)."""
        return None

    def diagnose(self, prepared: Any, outcome: Any, k: Any) -> str | None:
        """The cause of a failed outcome that this class can tell (it replaces the method's
        words), or None."""
        return None

    def along(self, solution: Any, resolve: Callable[[Any, Any], Any], tol: float) -> Any:
        """A point of a trace checked (and re-solved through ``resolve(k, guess)`` when this
        class asks for it); returns the solution to keep."""
        return solution

    def describe(self, prepared: Any, run: Any, ends: tuple[float, float]) -> str:
        """What this class adds to the message of a solved ``run`` ('' for nothing), given the
        ends solved on; it may note facts for the diagnostics in ``run.notes``."""
        return ""

    def ends(self, ends: list[float]) -> list[float]:
        """The true ends and interfaces of the domain, from those solved on."""
        return ends

    # -- the map back to the user's names -----------------------------------------------------
    def spelled(self, name: str) -> tuple[tuple[str, Any], ...] | None:
        """The names of the standard form (states' functions, constants, parameters) that make
        up the user's ``name``, each with its factor: ``(("re(T)", 1), ("im(T)", 1j))``; None
        when this class leaves the name as it is."""
        return None

    def parts(self, e: Any, replace: dict, where: str = "an expression") -> list | None:
        """The real expressions generated code evaluates for ``e``, an expression of the
        user's names, once ``replace`` (the user's names -> the standard form's symbols) is
        made in it (SymPy); None when this class leaves it to a plain replacement."""
        return None

    def inward(self, values: dict[str, Any]) -> dict[str, Any]:
        """Values by the user's names (constants, parameter guesses) as the standard form's."""
        return values

    def outward(self, values: dict[str, Any]) -> dict[str, Any]:
        """Values by the standard form's names (solved parameters) as the user's."""
        return values

    # -- plain data ---------------------------------------------------------------------------
    def plain(self) -> dict[str, Any]:
        return {"kind": self.kind, **_plain(dataclasses.asdict(self))}

    @staticmethod
    def from_plain(data: Mapping[str, Any]) -> Transform:
        """A transform read back from :meth:`plain` (a cache entry: checked by its class)."""
        fields = dict(data)
        kind = fields.pop("kind", None)
        cls = KINDS.get(kind) if isinstance(kind, str) else None
        if cls is None:
            raise ValueError(f"unknown problem class {kind!r}")
        return cls.read(fields)

    @classmethod
    def read(cls, fields: Mapping[str, Any]) -> Transform:
        """The object from its plain fields (subclasses with fields convert and check them)."""
        if fields:
            raise ValueError(f"{cls.kind}: unexpected fields {sorted(fields)}")
        return cls()


def _plain(value: Any) -> Any:
    if isinstance(value, dict):
        return {k: _plain(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_plain(v) for v in value]
    return value
