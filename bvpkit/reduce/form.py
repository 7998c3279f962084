"""Every problem, reduced to one standard form.

The standard form is the one kind of problem every method solves (Ascher and Russell,
"Reformulation of boundary value problems into standard form", SIAM Review 23 (1981)
238-254)::

    dY/dt = F(t, Y, p, k) + S Y / t,   0 <= t <= 1,   G(Y(0), Y(1), p, k) = 0

with ``Y`` the states, ``p`` the unknown parameters (as many conditions more than states),
``k`` the constants (known values, changed without new code) and ``S`` the matrix of a term
singular at ``t = 0`` (zero for most problems). The core steps are here:

* :func:`_first_order` -- highest derivatives isolated; the state layout ``f, f', f'', g``;
* :func:`_given_conditions` -- the user's conditions in symbols of point values;
* :func:`_map` -- each region ``[X_r, X_r+1]`` mapped onto ``[0, 1]`` by ``x = c_r + h_r t``:
  a fixed end, or an unknown one (free boundary: ``h_r`` holds the parameter);
* :func:`_assemble` -- the regions' states stacked into one ``Y``; every state continuous at
  an interface unless a condition takes its one-sided values; conditions at any point become
  conditions on ``Y(0)`` and ``Y(1)``.

Each problem class is one transform object in a module of its own (integral conditions,
eigenvalues, periodic orbits, weak end singularities, the singular term, infinite ends:
:mod:`bvpkit.reduce.classes` lists them), whose symbolic hooks :func:`_build` runs on a
:class:`Reduction` at fixed points of the steps above (:mod:`bvpkit.reduce.transform`).

Two transforms of a finished standard form serve the selector's continuation from an easy
problem (:func:`path_form`): the nonlinear terms scaled by ``_homotopy`` (0: the problem
linearised about a constant state, 1: the user's), and the domain shortened by ``_reach``.

Nothing outside the reduce stage knows which classes a problem belongs to: the methods see
the standard form only; the driver, continuation and settling call the transforms' hooks; one
map (``x = c_r + h_r t`` and
the state rows of each region, kept in :class:`StandardForm`) takes a solution back to the
user's variable and states. User names never reach generated code: states are ``_y0``,
``_y1``, ..., parameters ``_p0``, constants ``_k0``, the variable ``_x``.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field, fields
from typing import Any

import sympy as sp
from sympy.core.function import AppliedUndef

from ..errors import ProblemError
from ..language.budget import budget, check_sizes
from ..language.exact import exact_key
from ..programs.codegen import X  # the method variable t (named _x in generated code)
from ..programs.layout import StateLayout, States
from .classes import PIPELINE

#: The user's (physical) variable while a region's system is being formed.
_PHYSICAL = sp.Symbol("_xphys", real=True)



def _symbols(prefix: str, n: int, real: bool = True) -> tuple[sp.Symbol, ...]:
    """Internal symbols ``_y0, _y1, ...``: real, or with no assumption while the values they
    stand for may be complex (so SymPy simplifies nothing a complex value would not allow:
    ``abs(s)**2`` stays, ``re(s)`` is not ``s``)."""
    return tuple(sp.Symbol(f"_{prefix}{i}", real=True) if real else sp.Symbol(f"_{prefix}{i}") for i in range(n))


@dataclass(frozen=True)
class StandardForm(States):
    """A problem in the standard form (see the module docstring), as SymPy expressions.

    Attributes
    ----------
    independent : str
        The user's name of the independent variable.
    functions : tuple of (str, int)
        The unknown functions and their orders.
    states : tuple of (str, int)
        One region's states: ``(function, derivative order)`` for the user's states, then
        ``(description, 0)`` for the added ones (integrals, the normalisation).
    users : int
        User states per region (the first ``users`` of ``states``).
    regions : int
        Regions; ``Y`` stacks ``regions`` copies of ``states``.
    rhs : tuple of sympy.Expr, length regions * len(states)
        ``F(t, Y, p, k)`` in the symbols ``X``, ``y``, ``p``, ``k``.
    conditions : tuple of sympy.Expr
        ``G`` in ``ya``, ``yb``, ``p``, ``k``; one per state of ``Y`` plus one per parameter.
    condition_kinds : tuple of str
        ``given`` (the user's), ``continuity`` (of a user state at an interface),
        ``added`` (of an added state), ``phase``.
    parameters, constants : tuple of str
        Names of ``p`` and ``k``; constants of a region's own are ``name@r`` and the
        truncation length of an infinite end is ``_length``.
    maps : tuple of (sympy.Expr, sympy.Expr)
        Per region, ``(c_r, h_r)`` with ``x = c_r + h_r t``, in ``p`` and ``k``.
    points : tuple of sympy.Expr
        The ends and interfaces in ``p`` and ``k`` (``oo`` for an infinite end).
    singular : tuple of tuple of sympy.Expr, or None
        ``S`` (size of ``Y``), nonzero in the first region's rows only.
    point_conditions : (tuple of sympy.Expr, tuple of (str, int, int, int))
        The user's conditions in point-value symbols, and what each symbol is:
        ``(symbol name, state, point, side)``; read by the default guess.
    stretch : tuple of int
        Per region, the power ``d`` of its map ``x = c_r + h_r t**d`` (empty: every map
        affine, ``d = 1``); see :mod:`bvpkit.reduce.stretch`.
    transforms : tuple of Transform
        The problem's classes, as the plain-data objects whose numerical hooks the solve
        driver, continuation and settling call (:mod:`bvpkit.reduce.transform`).
    algebraic : tuple of str
        One region's algebraic unknowns (functions without derivatives), ``Z`` stacking
        ``regions`` copies of them (empty for most problems).
    constraints : tuple of sympy.Expr, length regions * len(algebraic)
        ``G(t, Y, Z, p, k)``: the algebraic equations ``0 = G``, the ``j``-th of a region the one
        that determines its ``j``-th algebraic unknown (index 1: ``dG/dZ`` non-singular; see
        :mod:`bvpkit.reduce.algebraic`). ``F`` and the conditions may hold ``Z`` (symbols
        :attr:`z`, :attr:`za`, :attr:`zb`, numbered after ``Y``'s: the generated code takes
        ``(Y, Z)`` as one vector).
    """

    independent: str
    functions: tuple[tuple[str, int], ...]
    states: tuple[tuple[str, int], ...]
    users: int
    regions: int
    rhs: tuple
    conditions: tuple
    condition_kinds: tuple[str, ...]
    parameters: tuple[str, ...]
    constants: tuple[str, ...]
    maps: tuple
    points: tuple
    singular: tuple | None = None
    point_conditions: tuple = ()
    stretch: tuple = ()
    transforms: tuple = ()
    algebraic: tuple = ()
    constraints: tuple = ()
    y: tuple = field(init=False, repr=False)
    ya: tuple = field(init=False, repr=False)
    yb: tuple = field(init=False, repr=False)
    z: tuple = field(init=False, repr=False)
    za: tuple = field(init=False, repr=False)
    zb: tuple = field(init=False, repr=False)
    p: tuple = field(init=False, repr=False)
    k: tuple = field(init=False, repr=False)

    def __post_init__(self) -> None:
        n = len(self.rhs)
        object.__setattr__(self, "y", _symbols("y", n))
        object.__setattr__(self, "ya", _symbols("ya", n))
        object.__setattr__(self, "yb", _symbols("yb", n))
        for name in ("z", "za", "zb"):  # after Y's: _y{n}, _y{n+1}, ...
            prefix = "y" + name[1:]
            object.__setattr__(self, name, tuple(sp.Symbol(f"_{prefix}{n + i}", real=True)
                                                 for i in range(len(self.constraints))))
        object.__setattr__(self, "p", _symbols("p", len(self.parameters)))
        object.__setattr__(self, "k", _symbols("k", len(self.constants)))

    def key(self) -> str:
        """A content hash: equal forms have equal keys (the compiled-code cache key)."""
        cached = self.__dict__.get("_key")
        if cached is None:
            # every number by its exact binary value: forms that print alike to 15 digits
            # (1.0 and 1.0000000000000049) must not share compiled code
            cached = exact_key(tuple(getattr(self, f.name) for f in fields(self) if f.init))
            object.__setattr__(self, "_key", cached)
        return cached

    def layout(self) -> StateLayout:
        """The plain facts of this form (what the numerical side needs; no SymPy)."""
        return StateLayout(
            key=self.key(), independent=self.independent, functions=self.functions, states=self.states,
            users=self.users, regions=self.regions, parameters=self.parameters, constants=self.constants,
            condition_kinds=self.condition_kinds, singular=self.singular is not None, stretch=tuple(self.stretch),
            algebraic=tuple(self.algebraic),
        )


_MEMO: dict[str, StandardForm] = {}


def standard_form(problem) -> StandardForm:  # noqa: ANN001 - a bvpkit.Problem (imports us lazily)
    """The standard form of a validated :class:`~bvpkit.Problem` (kept per problem structure).

    Raises
    ------
    ProblemError
        When the highest derivatives cannot be isolated (a differential-algebraic system,
        or a highest derivative that appears nonlinearly), a singular term is of a kind
        bvpkit does not treat, or an eigenvalue problem is not linear.
    """
    key = problem.key()
    found = _MEMO.get(key)
    if found is None:
        found = _build(problem)
        if len(_MEMO) > 500:
            _MEMO.clear()
        _MEMO[key] = found
    return found


@dataclass
class Names:
    """The names of a problem's constants ``k`` and parameters ``p`` and their internal symbols.

    The lists are filled first (the problem's own names, then each class's, see
    :meth:`bvpkit.reduce.transform.Transform.names`); :meth:`seal` then makes the symbols."""

    constants: list[str]
    parameters: list[str]
    own_names: list[dict] = field(default_factory=list)  # per region: name -> index in constants
    k: dict = field(default_factory=dict)  # user Symbol -> k symbol (the problem's values)
    p: dict = field(default_factory=dict)
    own: list[dict] = field(default_factory=list)  # per region: user Symbol -> k symbol of its own value

    def seal(self, problem, real: bool = True) -> None:  # noqa: ANN001
        k = _symbols("k", len(self.constants), real)
        p = _symbols("p", len(self.parameters), real)
        self.k = {sp.Symbol(c): k[i] for i, c in enumerate(problem.constants)}
        self.p = {sp.Symbol(q): p[i] for i, q in enumerate(self.parameters)}
        self.own = [{sp.Symbol(name): k[i] for name, i in own.items()} for own in self.own_names]

    def symbol(self, name: str) -> sp.Symbol:
        """The ``k`` symbol of a constant added by a class (``_length``)."""
        return sp.Symbol(f"_k{self.constants.index(name)}", real=True)

    def region(self, r: int) -> dict:
        return {**self.k, **self.own[r], **self.p}


def _names(problem, classes, real: bool = True) -> Names:  # noqa: ANN001
    constants = list(problem.constants)
    own_names: list[dict] = []
    for r, region in enumerate(problem.regions):
        own = {}
        for name in region.constants:
            constants.append(f"{name}@{r + 1}")
            own[name] = len(constants) - 1
        own_names.append(own)
    names = Names(constants, list(problem.unknown_parameters), own_names)
    for cls in classes:
        cls.names(problem, names)
    names.seal(problem, real)
    return names


@dataclass
class Reduction:
    """A problem on its way to the standard form: what the transforms' symbolic hooks read and
    change (see :mod:`bvpkit.reduce.transform`).

    Attributes
    ----------
    problem : Problem
    names : Names
    user_states, states : list of (str, int)
        One region's user states, and all its states (user states, then added ones).
    local : tuple of sympy.Symbol
        One region's state symbols while its system is formed (room for every added state).
    systems : list of list of sympy.Expr
        Per region, the right-hand sides in the user's variable ``_xphys``, ``local`` and
        ``zlocal``.
    algebraic : list of str
        The algebraic unknowns (no derivatives in the equations).
    zlocal : tuple of sympy.Symbol
        One region's symbols of the algebraic unknowns.
    equations, texts : list of list
        Per region, the equations still to be made first order, and their text (a class may
        set some aside before: :meth:`~bvpkit.reduce.transform.Transform.set_aside`).
    constraints : list of list of sympy.Expr
        Per region, the algebraic equations ``0 = G`` in ``_xphys``, ``local`` and ``zlocal``,
        the ``j``-th determining the ``j``-th algebraic unknown.
    substitutions : dict
        Replacements made in every given condition (an integral by its added state's end value).
    given : list of sympy.Expr
        The user's conditions in point-value symbols (see :meth:`value`).
    conditions : list of (sympy.Expr, str)
        Every condition and its kind (``given``, ``added``, ``phase``, ``continuity``).
    points : tuple of sympy.Expr
        Ends and interfaces in the symbols of ``k`` and ``p``.
    ends : tuple of sympy.Expr
        The ends the regions' maps run between (in ``xi`` after a stretch).
    power : int
        The power ``d`` of a stretch ``x - a = xi**d`` (1: none).
    singular : list of list of sympy.Expr or None
        ``S`` of a term ``S y / (x - a)`` of the first region (one region's size).
    maps : list of (sympy.Expr, sympy.Expr)
        Per region ``(c_r, h_r)``: ``x = c_r + h_r t``.
    functions : list of (str, int)
        The standard form's functions and their orders (the user's, unless a class splits
        them: ``re(T)``, ``im(T)``).
    """

    problem: Any
    names: Names
    user_states: list
    states: list
    local: tuple
    systems: list = field(default_factory=list)
    algebraic: list = field(default_factory=list)
    zlocal: tuple = ()
    equations: list = field(default_factory=list)
    texts: list = field(default_factory=list)
    constraints: list = field(default_factory=list)
    zvalues: dict = field(default_factory=dict)
    substitutions: dict = field(default_factory=dict)
    given: list = field(default_factory=list)
    conditions: list = field(default_factory=list)
    points: tuple = ()
    ends: tuple = ()
    power: int = 1
    singular: list | None = None
    maps: list = field(default_factory=list)
    values: dict = field(default_factory=dict)
    real: bool = True  # whether the symbols carry SymPy's real assumption (see Transform.real_values)
    functions: list = field(default_factory=list)  # the form's functions and their orders
    scratch: dict = field(default_factory=dict)  # what a class keeps between its own hooks, by kind

    @property
    def last(self) -> int:
        """Index of the right end in ``points``."""
        return len(self.problem.points) - 1

    def value(self, state: int, point: int, side: int) -> sp.Symbol:
        """The symbol of a state's value at an end or interface (``side`` -1: from the left)."""
        side = side or (1 if point == 0 else -1)  # written f(L): continuous there, read from the left
        if (point == 0 and side < 0) or (point == self.last and side > 0):  # pragma: no cover - refused by Problem
            raise ProblemError("a one-sided value outside the domain")
        name = f"_v{state}_{point}_{side}"
        return self.values.setdefault((state, point, side),
                                      sp.Symbol(name, real=True) if self.real else sp.Symbol(name))

    def algebraic_value(self, j: int, point: int, side: int) -> sp.Symbol:
        """The symbol of algebraic unknown ``j``'s value at an end or interface (``side`` as in
        :meth:`value`: a region's own value, read from the left where not one-sided)."""
        side = side or (1 if point == 0 else -1)
        return self.zvalues.setdefault((j, point, side), sp.Symbol(f"_w{j}_{point}_{side}", real=True))

    def replacements(self) -> dict:
        """The user's functions and derivatives (and the variable) to one region's local symbols."""
        return _local_replace(self.problem, self.user_states, self.local, self.zlocal)

    def add_state(self, description: str, rhs_per_region: list) -> int:
        """An added state (``(description, 0)``) with its right-hand side in each region."""
        self.states.append((description, 0))
        for system, f in zip(self.systems, rhs_per_region):
            system.append(f)
        return len(self.states) - 1

    @property
    def parameter_symbols(self) -> set:
        return set(self.names.p.values())

    def spoken(self, e: Any) -> str:
        """``e`` printed with the user's names (``x``, ``y'``, ``L``) in place of the internal
        symbols, for messages; the independent variable is ``xi`` after a stretch."""
        swap = {_PHYSICAL: sp.Symbol("xi" if self.power > 1 else self.problem.independent)}
        for i, (name, order) in enumerate(self.states):
            swap[self.local[i]] = sp.Symbol(name + "'" * order)
        for table in (self.names.k, self.names.p, *self.names.own):
            swap.update({internal: user for user, internal in table.items()})
        return sp.sstr(e.xreplace(swap)) if isinstance(e, sp.Basic) else str(e)


def _build(problem) -> StandardForm:  # noqa: ANN001

    classes = [cls for cls in PIPELINE if cls.applies(problem)]
    real = all(cls.real_values for cls in classes)
    names = _names(problem, classes, real)
    functions = tuple((f, problem.orders[f]) for f in problem.unknowns if problem.orders[f] > 0)
    user_states = tuple((f, j) for f, order in functions for j in range(order))
    room = len(user_states) + sum(cls.room(problem) for cls in classes)
    local = _symbols("s", room, real)  # one region's states while its system is formed
    work = Reduction(problem, names, list(user_states), list(user_states), local,
                     algebraic=list(problem.algebraic), zlocal=_symbols("a", len(problem.algebraic), real),
                     real=real, functions=list(functions))
    work.equations = [list(region.equations) for region in problem.regions]
    work.texts = [list(region.equation_text) for region in problem.regions]
    work.constraints = [[] for _ in problem.regions]
    # 0. equations a class sets aside (the algebraic ones)
    for cls in classes:
        cls.set_aside(work)
    # 1. each region's first-order system in the user's variable
    work.systems = [_first_order(problem, work.equations[r], work.texts[r], user_states, local, work.zlocal,
                                 names.region(r)) for r in range(len(problem.regions))]
    work.points = tuple(p.xreplace(names.region(0)) for p in problem.points)
    # 2. added states (integrals of the conditions, the eigenvalue's normalisation)
    for cls in classes:
        cls.states(work)
    # 3. conditions: the user's, each class's, continuity at interfaces
    work.given = _given_conditions(work)
    work.conditions = [(c, "given") for c in work.given]
    for cls in classes:
        cls.conditions(work)
    for j in range(1, work.last):
        for i, (name, order) in enumerate(work.states):
            if i < len(user_states) and (name, order) in problem.jumps[j]:
                continue
            kind = "continuity" if i < len(user_states) else "added"
            work.conditions.append((work.value(i, j, -1) - work.value(i, j, 1), kind))
    # 4. rewrites of the equations (a stretch of the variable, the singular term)
    work.ends = work.points
    for cls in classes:
        cls.system(work)
    # 5. the map of each region onto [0, 1], then each class's
    work.maps = _map(work.ends)
    for cls in classes:
        cls.maps(work)
    # 6. rewrites of the whole reduction (complex values onto real ones)
    for cls in classes:
        cls.split(work)
    return _assemble(work, [t for t in (cls.finish(work) for cls in classes) if t is not None])


def _assemble(work: Reduction, transforms: list) -> StandardForm:
    """The regions' systems mapped onto ``[0, 1]`` and stacked into one ``Y``; conditions on
    ``Y(0)`` and ``Y(1)``."""
    problem, names, systems = work.problem, work.names, work.systems
    rhs, constraints = [], []
    for r, system in enumerate(systems):
        c, h = work.maps[r]
        for f in system:
            rhs.append(h * f.xreplace({_PHYSICAL: c + h * X}))
        for g in work.constraints[r]:  # an algebraic equation holds at each point: no factor h
            constraints.append(g.xreplace({_PHYSICAL: c + h * X}))
    n_region = len(work.states)
    total = n_region * len(systems)
    n_alg = len(work.algebraic)
    y = _symbols("y", total)
    z = tuple(sp.Symbol(f"_y{total + i}", real=True) for i in range(n_alg * len(systems)))  # StandardForm.z
    for r in range(len(systems)):
        swap = {work.local[i]: y[r * n_region + i] for i in range(n_region)}
        swap.update({work.zlocal[j]: z[r * n_alg + j] for j in range(n_alg)})
        for i in range(n_region):
            rhs[r * n_region + i] = rhs[r * n_region + i].xreplace(swap)
        for j in range(n_alg):
            constraints[r * n_alg + j] = constraints[r * n_alg + j].xreplace(swap)
    ya, yb = _symbols("ya", total), _symbols("yb", total)
    ends = {}
    for (state, point, side), symbol in work.values.items():
        ends[symbol] = yb[(point - 1) * n_region + state] if side < 0 else ya[point * n_region + state]
    for (j, point, side), symbol in work.zvalues.items():  # StandardForm.za, zb
        row = total + ((point - 1) if side < 0 else point) * n_alg + j
        ends[symbol] = sp.Symbol(f"_{'yb' if side < 0 else 'ya'}{row}", real=True)
    stacked = [c.xreplace(ends) for c, _ in work.conditions]
    matrix = None
    if work.singular is not None:
        S = work.singular
        matrix = tuple(
            tuple(S[i][j] if i < n_region and j < n_region else sp.Integer(0) for j in range(total))
            for i in range(total)
        )
    maps = list(work.maps)
    if work.power > 1:  # the map in the user's variable: x = a + (h_xi t)**d
        maps = [(work.points[0], maps[0][1] ** work.power)]
    names_of_values = tuple((symbol.name, state, point, side) for (state, point, side), symbol in work.values.items())
    algebraic_values = set(work.zvalues.values())  # the default guess reads conditions on the states alone
    given = tuple(c for c in work.given if not c.free_symbols & algebraic_values)
    return StandardForm(
        independent=problem.independent,
        functions=tuple(work.functions),
        states=tuple(work.states),
        users=len(work.user_states),
        regions=len(systems),
        rhs=tuple(rhs),
        conditions=tuple(stacked),
        condition_kinds=tuple(kind for _, kind in work.conditions),
        parameters=tuple(names.parameters),
        constants=tuple(names.constants),
        maps=tuple(maps),
        points=work.points,
        singular=matrix,
        point_conditions=(given, names_of_values),
        stretch=(work.power,) if work.power > 1 else (),
        transforms=tuple(transforms),
        algebraic=tuple(work.algebraic),
        constraints=tuple(constraints),
    )


# -- the transforms -------------------------------------------------------------------------
def _first_order(problem, equations, texts, user_states, local, zlocal, names) -> list:  # noqa: ANN001
    """One region's (differential) equations as ``s' = f(x, s, z, p, k)`` over the user states,
    ``z`` the algebraic unknowns' symbols ``zlocal``."""
    x = problem.x
    differential = [name for name in problem.unknowns if problem.orders[name] > 0]
    tops = {name: sp.Symbol(f"_top_{name}", real=True) for name in differential}
    replace: dict = {**names, **_local_replace(problem, user_states, local, zlocal)}
    for name in differential:
        f = sp.Function(name)(x)
        replace[sp.Derivative(f, (x, problem.orders[name]))] = tops[name]
    equations = [eq.xreplace(replace) for eq in equations]
    for eq, text in zip(equations, texts):
        leftover = eq.atoms(AppliedUndef, sp.Derivative)
        if leftover:  # pragma: no cover - Problem validation prevents this
            raise ProblemError(f"equation ({text}): could not read {sorted(map(str, leftover))[0]}")
    with budget("isolating the highest derivatives", advice="write each equation solved for its highest derivative"):
        solved = _isolate(equations, [tops[n] for n in differential], problem)
    check_sizes({f"the expression of {n}{chr(39) * problem.orders[n]}": e for n, e in zip(differential, solved)},
                step="isolating the highest derivatives")
    rhs = []
    for i, (name, order) in enumerate(user_states):
        rhs.append(local[i + 1] if order + 1 < problem.orders[name] else solved[differential.index(name)])
    return rhs


def _local_replace(problem, user_states, local, zlocal=()) -> dict:  # noqa: ANN001
    x = problem.x
    replace = {x: _PHYSICAL}
    for i, (name, order) in enumerate(user_states):
        f = sp.Function(name)(x)
        replace[f if order == 0 else sp.Derivative(f, (x, order))] = local[i]
    for j, symbol in enumerate(zlocal):
        replace[sp.Function(problem.algebraic[j])(x)] = symbol
    return replace


def _given_conditions(work: Reduction) -> list:
    """The user's conditions with point values (and integrals) as point-value symbols."""
    problem, names = work.problem, work.names
    result = []
    for c in problem.conditions:
        swap: dict = dict(work.substitutions)
        for pv in problem.point_values(c):
            j = problem.which_point(pv.point)
            if pv.name in work.algebraic:
                swap[pv.node] = work.algebraic_value(work.algebraic.index(pv.name), j, pv.side)
            else:
                swap[pv.node] = work.value(work.user_states.index((pv.name, pv.order)), j, pv.side)
        swap.update({s: names.k.get(s, names.p.get(s)) for s in c.free_symbols if s in names.k or s in names.p})
        result.append(c.xreplace(swap))
    return result


def _map(ends: tuple) -> list:
    """Per region ``(c_r, h_r)``: ``x = c_r + h_r t`` maps ``t`` in ``[0, 1]`` onto the region
    (None where an end is infinite: :mod:`bvpkit.reduce.infinite` places it)."""
    maps = []
    for left, right in zip(ends[:-1], ends[1:]):
        finite = left not in (sp.oo, -sp.oo) and right not in (sp.oo, -sp.oo)
        maps.append((left, right - left) if finite else None)
    return maps


# -- forms for continuation from an easy problem (the selector's fallback) ----------------------
#: The constant that scales the nonlinear terms: 0 the linearised problem, 1 the user's.
HOMOTOPY = "_homotopy"
#: The fraction of the domain solved (a single region shortened towards its left end).
REACH = "_reach"
#: Prefix of the constants holding the state about which the nonlinear terms are linearised.
ANCHOR = "_anchor"


def path_form(form: StandardForm) -> StandardForm:
    """``form`` with the constants ``_homotopy`` (``s``), ``_reach`` (``r``) and one anchor
    ``c_i`` per state added (user names cannot start with ``_``): the right-hand side becomes

        F_s = L + s (F - L),   L = F(t, c) + dF/dY(t, c) (Y - c)

    (rows linear in ``Y`` are left as they are), and the conditions likewise in ``Y(0)``,
    ``Y(1)``. At ``s = 1`` this is the user's problem; at ``s = 0`` it is linear in the
    states, the nonlinear terms replaced by their tangent at the constant state ``c`` (``c =
    0``: the nonlinear terms dropped, so Blasius' ``f''' + f f''/2 = 0`` becomes
    ``f''' = 0``; another ``c`` where the terms are not defined at 0, as ``sqrt(y)``), and one
    Newton step solves it. Linearising about a constant rather than about the guess keeps
    the path a problem of its own (the same code whatever the guess) and its start
    independent of a guess that may be poor.

    For a single region, ``t`` is also scaled by ``r``: ``dY/dt = r F_s(r t, Y)``, the map's
    length multiplied by ``r`` (``r**d`` for a stretched map): the problem on the first
    ``r``-th of the domain with the right end's conditions there, which grows the domain
    from a short one where a far-field condition is easy to meet. Parameters are not
    linearised.
    """
    n = len(form.rhs)
    constants = (*form.constants, HOMOTOPY, REACH, *(f"{ANCHOR}{i}" for i in range(n)))
    k = _symbols("k", len(constants))
    s, r = k[len(form.constants)], k[len(form.constants) + 1]
    anchors = k[len(form.constants) + 2:]

    def scaled(e: sp.Expr, variables: list, at: dict) -> sp.Expr:
        used = [v for v in variables if v in e.free_symbols]
        gradient = [sp.diff(e, v) for v in used]
        if not any(g.has(*variables) for g in gradient):
            return e  # linear in the states already
        tangent = e.xreplace(at) + sum(g.xreplace(at) * (v - at[v]) for g, v in zip(gradient, used))
        return tangent + s * (e - tangent)

    with budget("forming the linearised problem of the continuation"):
        rhs = [scaled(f, list(form.y), dict(zip(form.y, anchors))) for f in form.rhs]
        ends = {**dict(zip(form.ya, anchors)), **dict(zip(form.yb, anchors))}
        conditions = tuple(scaled(g, [*form.ya, *form.yb], ends) for g in form.conditions)
    maps, points = form.maps, form.points
    constraints = form.constraints  # the algebraic equations are kept as they are
    if form.regions == 1:
        rhs = [r * f.xreplace({X: r * X}) for f in rhs]
        constraints = tuple(g.xreplace({X: r * X}) for g in constraints)
        power = form.stretch[0] if form.stretch else 1
        c, h = form.maps[0]
        maps = ((c, h * r**power),)
        points = (form.points[0], c + h * r**power)
    return dataclasses.replace(form, rhs=tuple(rhs), conditions=conditions, constants=constants, maps=maps,
                               points=points, constraints=constraints)


# -- helpers ---------------------------------------------------------------------------------
def _as_written(e: sp.Expr, problem) -> str:  # noqa: ANN001
    """``e`` printed as a person writes it: ``y'`` rather than ``Derivative(y(x), x)``."""
    swap = {}
    for d in e.atoms(sp.Derivative):
        swap[d] = sp.Symbol(d.expr.func.__name__ + "'" * d.derivative_count)
    for f in e.atoms(AppliedUndef):
        swap[f] = sp.Symbol(f.func.__name__)
    return sp.sstr(e.xreplace(swap))


def _blows_up(e: sp.Expr) -> bool:
    return bool(e.has(sp.zoo, sp.nan, sp.oo, -sp.oo))


def _one_each(equations: list[sp.Expr], tops: list[sp.Symbol]) -> list[sp.Expr] | None:
    """Each equation holding one highest derivative linearly, each a different one (the
    usual case): each solved on its own, in time linear in the number of equations (the
    whole-system Jacobian below has n^2 entries). None when that is not the case."""
    wanted = set(tops)
    solved = {}
    for eq in equations:
        held = eq.free_symbols & wanted
        if len(held) != 1:
            return None
        (t,) = held
        coefficient = sp.diff(eq, t)
        if t in solved or coefficient == 0 or coefficient.has(t):
            return None
        solved[t] = -eq.xreplace({t: 0}) / coefficient
    return [solved[t] for t in tops] if len(solved) == len(tops) else None


def _isolate(equations: list[sp.Expr], tops: list[sp.Symbol], problem) -> list[sp.Expr]:  # noqa: ANN001
    names = [f"{n}{chr(39) * problem.orders[n]}" for n in problem.unknowns if problem.orders[n] > 0]
    one_each = _one_each(equations, tops)
    if one_each is not None:
        return one_each
    jac = sp.Matrix(equations).jacobian(tops)
    if not any(jac.has(t) for t in tops):
        # Linear in the highest derivatives: one exact linear solve.
        rest = sp.Matrix([eq.xreplace({t: 0 for t in tops}) for eq in equations])
        if jac.is_diagonal() and all(jac[i, i] != 0 for i in range(len(tops))):
            return [-rest[i] / jac[i, i] for i in range(len(tops))]  # each equation holds its own: no O(n^3) LU
        if len(tops) == 1:
            if jac[0, 0] == 0:
                raise ProblemError(f"the equation does not contain {names[0]}")
            return [-rest[0] / jac[0, 0]]
        if jac.rank(simplify=True) < len(tops):
            raise ProblemError(
                f"the equations cannot be solved for the highest derivatives {', '.join(names)} "
                "(they form a differential-algebraic system); differentiate a constraint or "
                "rewrite the system"
            )
        return list(jac.LUsolve(-rest))
    # A symbolic solve for highest derivatives that appear nonlinearly can run for minutes and
    # mostly finds several roots or none: refused at once, with what to write instead.
    nonlinear = [name for name, t in zip(names, tops) if any(entry.has(t) for entry in jac)]
    raise ProblemError(
        f"highest derivatives that appear nonlinearly ({', '.join(nonlinear)}) are not isolated by bvpkit: "
        f"write each equation solved for its highest derivative ({nonlinear[0]} = ...)"
    )
