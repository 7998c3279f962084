"""Every problem, reduced to one standard form.

The standard form is the one kind of problem every method solves (Ascher and Russell,
"Reformulation of boundary value problems into standard form", SIAM Review 23 (1981)
238-254)::

    dY/dt = F(t, Y, p, k) + S Y / t,   0 <= t <= 1,   G(Y(0), Y(1), p, k) = 0

with ``Y`` the states, ``p`` the unknown parameters (as many conditions more than states),
``k`` the constants (known values, changed without new code) and ``S`` the matrix of a term
singular at ``t = 0`` (zero for most problems). Each problem class is one small transform
on the way there, applied to a first-order system in the user's variable:

* :func:`_first_order` -- highest derivatives isolated; the state layout ``f, f', f'', g``;
* :func:`_integrals` -- each ``integral(...)`` of a condition becomes an added state
  ``z' = integrand``, ``z(a) = 0``, read as ``z(b)``;
* :func:`_eigenvalue` -- the eigenvalue an unknown parameter, the normalisation
  ``integral(sum of squares) = 1`` an added state with two conditions;
* :func:`_phase` -- a periodic orbit of autonomous equations pinned by ``u'(a) = 0``;
* :func:`_stretch` -- fractional powers of ``x - a`` at a finite left end (``1/sqrt(x)``,
  ``x**(3/2)``) removed by ``x - a = xi**d``, ``d`` from the exponents seen: the region is
  mapped by ``x = c + h t**d`` (the map's power is kept in ``StandardForm.stretch``);
* :func:`_singular` -- a term ``S y / (x - a)`` singular at the left end split off;
* :func:`_map` -- each region ``[X_r, X_r+1]`` mapped onto ``[0, 1]`` by ``x = c_r + h_r t``:
  a fixed end, an unknown one (free boundary: ``h_r`` holds the parameter), or an infinite
  one (truncated at the length ``_length``, a constant the driver chooses);
* :func:`_stack` -- the regions' states stacked into one ``Y``; every state continuous at an
  interface unless a condition takes its one-sided values; conditions at any point become
  conditions on ``Y(0)`` and ``Y(1)``.

Two transforms of a finished standard form serve the selector's continuation from an easy
problem (:func:`path_form`): the nonlinear terms scaled by ``_homotopy`` (0: the problem
linearised about a constant state, 1: the user's), and the domain shortened by ``_reach``.

Nothing outside this module knows which classes a problem belongs to: the methods, the
selector and continuation see the standard form only, and one map (``x = c_r + h_r t`` and
the state rows of each region, kept in :class:`StandardForm`) takes a solution back to the
user's variable and states. User names never reach generated code: states are ``_y0``,
``_y1``, ..., parameters ``_p0``, constants ``_k0``, the variable ``_x``.
"""

from __future__ import annotations

import dataclasses
import hashlib
from dataclasses import dataclass, field, fields

import sympy as sp
from sympy.core.function import AppliedUndef

from ..language.budget import budget, check_sizes
from ..errors import ProblemError
from ..language.expr import DomainIntegral
from ..generated.layout import LENGTH, StateLayout, States

#: The method variable t (named _x in generated code, as every method calls it x).
X = sp.Symbol("_x", real=True)
#: The user's (physical) variable while a region's system is being formed.
_PHYSICAL = sp.Symbol("_xphys", real=True)



def _symbols(prefix: str, n: int) -> tuple[sp.Symbol, ...]:
    return tuple(sp.Symbol(f"_{prefix}{i}", real=True) for i in range(n))


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
    infinite : (bool, bool)
    eigenvalue : int or None
        Index in ``parameters`` of the eigenvalue; ``mode`` the mode asked for.
    phase : bool
        A phase condition was added (a periodic orbit).
    point_conditions : (tuple of sympy.Expr, tuple of (str, int, int, int))
        The user's conditions in point-value symbols, and what each symbol is:
        ``(symbol name, state, point, side)``; read by the default guess.
    stretch : tuple of int
        Per region, the power ``d`` of its map ``x = c_r + h_r t**d`` (empty: every map
        affine, ``d = 1``); see :func:`_stretch`.
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
    infinite: tuple[bool, bool] = (False, False)
    eigenvalue: int | None = None
    mode: int | None = None
    phase: bool = False
    point_conditions: tuple = ()
    stretch: tuple = ()
    y: tuple = field(init=False, repr=False)
    ya: tuple = field(init=False, repr=False)
    yb: tuple = field(init=False, repr=False)
    p: tuple = field(init=False, repr=False)
    k: tuple = field(init=False, repr=False)

    def __post_init__(self) -> None:
        n = len(self.rhs)
        object.__setattr__(self, "y", _symbols("y", n))
        object.__setattr__(self, "ya", _symbols("ya", n))
        object.__setattr__(self, "yb", _symbols("yb", n))
        object.__setattr__(self, "p", _symbols("p", len(self.parameters)))
        object.__setattr__(self, "k", _symbols("k", len(self.constants)))

    def key(self) -> str:
        """A content hash: equal forms have equal keys (the compiled-code cache key)."""
        cached = self.__dict__.get("_key")
        if cached is None:
            text = repr(tuple(getattr(self, f.name) for f in fields(self) if f.init))
            cached = hashlib.sha256(text.encode()).hexdigest()[:32]
            object.__setattr__(self, "_key", cached)
        return cached

    def layout(self) -> StateLayout:
        """The plain facts of this form (what the numerical side needs; no SymPy)."""
        return StateLayout(
            key=self.key(), independent=self.independent, functions=self.functions, states=self.states,
            users=self.users, regions=self.regions, parameters=self.parameters, constants=self.constants,
            condition_kinds=self.condition_kinds, infinite=self.infinite, singular=self.singular is not None,
            eigenvalue=self.eigenvalue, mode=self.mode, phase=self.phase, stretch=tuple(self.stretch),
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
class _Names:
    """The internal symbols of a problem's names."""

    constants: list[str]
    parameters: list[str]
    k: dict  # user Symbol -> k symbol (the problem's values)
    p: dict
    own: list[dict]  # per region: user Symbol -> k symbol of the region's own value

    def region(self, r: int) -> dict:
        return {**self.k, **self.own[r], **self.p}


def _names(problem) -> _Names:  # noqa: ANN001
    constants = list(problem.constants)
    own_names: list[dict] = []
    for r, region in enumerate(problem.regions):
        own = {}
        for name in region.constants:
            constants.append(f"{name}@{r + 1}")
            own[name] = len(constants) - 1
        own_names.append(own)
    if any(problem.infinite):
        constants.append(LENGTH)
    parameters = list(problem.unknown_parameters) + ([problem.eigenvalue] if problem.eigenvalue else [])
    k = _symbols("k", len(constants))
    p = _symbols("p", len(parameters))
    return _Names(
        constants, parameters,
        {sp.Symbol(c): k[i] for i, c in enumerate(problem.constants)},
        {sp.Symbol(q): p[i] for i, q in enumerate(parameters)},
        [{sp.Symbol(name): k[i] for name, i in own.items()} for own in own_names],
    )


def _build(problem) -> StandardForm:  # noqa: ANN001
    names = _names(problem)
    functions = tuple((f, problem.orders[f]) for f in problem.unknowns)
    user_states = tuple((f, j) for f, order in functions for j in range(order))
    added = len({g for c in problem.conditions for g in c.atoms(DomainIntegral)}) + (problem.eigenvalue is not None)
    local = _symbols("s", len(user_states) + added)  # one region's states while its system is formed
    # 1. each region's first-order system in the user's variable
    systems = [_first_order(problem, region, user_states, local, names.region(r))
               for r, region in enumerate(problem.regions)]
    states = list(user_states)
    # 2-3. added states: integrals of the conditions, the eigenvalue's normalisation
    integrals = _integrals(problem, systems, states, user_states, local, names)
    normalisation = _eigenvalue(problem, systems, states, local, names)
    # 4. conditions in point-value symbols
    values: dict[tuple[int, int, int], sp.Symbol] = {}

    def value(state: int, point: int, side: int) -> sp.Symbol:
        last = len(problem.points) - 1
        side = side or (1 if point == 0 else -1)  # written f(L): continuous there, read from the left
        if (point == 0 and side < 0) or (point == last and side > 0):  # pragma: no cover - refused by Problem
            raise ProblemError("a one-sided value outside the domain")
        return values.setdefault((state, point, side), sp.Symbol(f"_v{state}_{point}_{side}", real=True))

    given = _given_conditions(problem, user_states, integrals, value, names)
    point_conditions = tuple(given)
    conditions: list[tuple[sp.Expr, str]] = [(c, "given") for c in given]
    last = len(problem.points) - 1
    for z in range(len(user_states), len(states)):
        conditions.append((value(z, 0, 1), "added"))
    if normalisation is not None:
        conditions.append((value(normalisation, last, -1) - 1, "added"))
    if problem.phase:
        conditions.append((_phase(problem, systems[0], local, value, names), "phase"))
    for j in range(1, last):
        for i, (name, order) in enumerate(states):
            if i < len(user_states) and (name, order) in problem.jumps[j]:
                continue
            kind = "continuity" if i < len(user_states) else "added"
            conditions.append((value(i, j, -1) - value(i, j, 1), kind))
    # 5. singular terms, 6. the map onto [0, 1], 7. the stack
    points = tuple(p.xreplace(names.region(0)) for p in problem.points)
    with budget("looking for fractional powers of the independent variable at the left end"):
        power, stretched = _stretch(problem, systems, points, set(names.p.values()))
    with budget("splitting off the singular term", advice="write the singular coefficient in a simpler form"):
        singular = _singular(problem, systems, stretched, local, len(states), set(names.p.values()))
    if singular is not None:
        check_sizes({f"the right-hand side of state {i}": e for i, e in enumerate(singular[1])},
                    step="splitting off the singular term")
    maps = _map(stretched, names)
    rhs = []
    for r, system in enumerate(systems):
        c, h = maps[r]
        for i, f in enumerate(system):
            regular = f if singular is None or r else singular[1][i]
            rhs.append(h * regular.xreplace({_PHYSICAL: c + h * X}))
    n_region = len(states)
    total = n_region * len(systems)
    y = _symbols("y", total)
    for r in range(len(systems)):
        swap = {local[i]: y[r * n_region + i] for i in range(n_region)}
        for i in range(n_region):
            rhs[r * n_region + i] = rhs[r * n_region + i].xreplace(swap)
    ya, yb = _symbols("ya", total), _symbols("yb", total)
    ends = {}
    for (state, point, side), symbol in values.items():
        ends[symbol] = yb[(point - 1) * n_region + state] if side < 0 else ya[point * n_region + state]
    stacked = [c.xreplace(ends) for c, _ in conditions]
    matrix = None
    if singular is not None:
        matrix = tuple(
            tuple(singular[0][i][j] if i < n_region and j < n_region else sp.Integer(0) for j in range(total))
            for i in range(total)
        )
    if power > 1:  # the map in the user's variable: x = a + (h_xi t)**d
        maps = [(points[0], maps[0][1] ** power)]
    names_of_values = tuple((symbol.name, state, point, side) for (state, point, side), symbol in values.items())
    return StandardForm(
        independent=problem.independent,
        functions=functions,
        states=tuple(states),
        users=len(user_states),
        regions=len(systems),
        rhs=tuple(rhs),
        conditions=tuple(stacked),
        condition_kinds=tuple(kind for _, kind in conditions),
        parameters=tuple(names.parameters),
        constants=tuple(names.constants),
        maps=tuple(maps),
        points=points,
        singular=matrix,
        infinite=tuple(problem.infinite),
        eigenvalue=len(names.parameters) - 1 if problem.eigenvalue else None,
        mode=problem.mode,
        phase=bool(problem.phase),
        point_conditions=(point_conditions, names_of_values),
        stretch=(power,) if power > 1 else (),
    )


# -- the transforms -------------------------------------------------------------------------
def _first_order(problem, region, user_states, local, names) -> list:  # noqa: ANN001
    """One region's equations as ``s' = f(x, s, p, k)`` over the user states."""
    x = problem.x
    tops = {name: sp.Symbol(f"_top_{name}", real=True) for name in problem.unknowns}
    replace: dict = dict(names)
    replace[x] = _PHYSICAL
    for i, (name, order) in enumerate(user_states):
        f = sp.Function(name)(x)
        replace[f if order == 0 else sp.Derivative(f, (x, order))] = local[i]
    for name in problem.unknowns:
        f = sp.Function(name)(x)
        replace[sp.Derivative(f, (x, problem.orders[name]))] = tops[name]
    equations = [eq.xreplace(replace) for eq in region.equations]
    for eq, text in zip(equations, region.equation_text):
        leftover = eq.atoms(AppliedUndef, sp.Derivative)
        if leftover:  # pragma: no cover - Problem validation prevents this
            raise ProblemError(f"equation ({text}): could not read {sorted(map(str, leftover))[0]}")
    with budget("isolating the highest derivatives", advice="write each equation solved for its highest derivative"):
        solved = _isolate(equations, [tops[n] for n in problem.unknowns], problem)
    check_sizes({f"the expression of {n}{chr(39) * problem.orders[n]}": e for n, e in zip(problem.unknowns, solved)},
                step="isolating the highest derivatives")
    rhs = []
    for i, (name, order) in enumerate(user_states):
        rhs.append(local[i + 1] if order + 1 < problem.orders[name] else solved[problem.unknowns.index(name)])
    return rhs


def _local_replace(problem, user_states, local) -> dict:  # noqa: ANN001
    x = problem.x
    replace = {x: _PHYSICAL}
    for i, (name, order) in enumerate(user_states):
        f = sp.Function(name)(x)
        replace[f if order == 0 else sp.Derivative(f, (x, order))] = local[i]
    return replace


def _integrals(problem, systems, states, user_states, local, names) -> dict:  # noqa: ANN001
    """Integrals over the domain in the conditions: added states ``z' = integrand``, ``z(a) = 0``."""
    found: dict = {}
    for c in problem.conditions:
        for g in sorted(c.atoms(DomainIntegral), key=sp.default_sort_key):
            if g not in found:
                found[g] = len(states)
                states.append((f"integral({_as_written(g.args[0], problem)})", 0))
    replace = _local_replace(problem, user_states, local)
    for r, system in enumerate(systems):
        for g in found:
            system.append(g.args[0].xreplace({**replace, **names.region(r)}))
    return found


def _users(problem) -> int:  # noqa: ANN001
    return sum(problem.orders.values())


def _eigenvalue(problem, systems, states, local, names) -> int | None:  # noqa: ANN001
    """An eigenvalue problem: linear checks, and the normalisation as an added state."""
    if problem.eigenvalue is None:
        return None
    lam = names.p[sp.Symbol(problem.eigenvalue)]
    users = _users(problem)
    for system in systems:
        with budget("checking that the eigenvalue problem is linear"):
            _check_linear(system[:users], local[:users], lam, problem)
    values = [local[i] for i, (_, order) in enumerate(states[:users]) if order == 0]
    states.append(("integral of the squares (normalisation)", 0))
    for system in systems:
        system.append(sum(v**2 for v in values))
    return len(states) - 1


def _given_conditions(problem, user_states, integrals, value, names) -> list:  # noqa: ANN001
    """The user's conditions with point values (and integrals) as point-value symbols."""
    last = len(problem.points) - 1
    result = []
    for c in problem.conditions:
        swap: dict = {g: value(i, last, -1) for g, i in integrals.items()}
        for pv in problem.point_values(c):
            j = problem.which_point(pv.point)
            swap[pv.node] = value(user_states.index((pv.name, pv.order)), j, pv.side)
        swap.update({s: names.k.get(s, names.p.get(s)) for s in c.free_symbols if s in names.k or s in names.p})
        condition = c.xreplace(swap)
        _check_eigen_condition(problem, condition, names)
        result.append(condition)
    return result


def _phase(problem, system, local, value, names) -> sp.Expr:  # noqa: ANN001
    """``u'(a) = 0`` for the first unknown: the derivative of the first state at the left end."""
    a = problem.points[0].xreplace(names.region(0))
    swap = {local[i]: value(i, 0, 1) for i in range(len(system))}
    swap[_PHYSICAL] = a
    return system[0].xreplace(swap)


#: The largest power ``d`` of a stretch ``x - a = xi**d`` (halves, thirds and sixths of
#: exponents are common; beyond, the stretched map crowds the mesh at one end too much).
_MAX_STRETCH = 6


def _stretch(problem, systems, points, parameters: set):  # noqa: ANN001, ANN202
    """Fractional powers of ``x - a`` at the finite left end ``a`` removed by ``x - a = xi**d``.

    ``1/sqrt(x)``, ``sqrt(x)`` and ``x**(3/2)`` at ``a = 0`` make the equations singular (or
    the solution not smooth) there; with ``x = a + xi**d``, ``d`` the least common
    denominator of the exponents (times the order of their bases at ``a``), every such power
    is a whole power of ``xi``, and ``dY/dxi = d xi**(d-1) F(a + xi**d, Y)``: the Jacobian
    factor absorbs a ``1/sqrt`` (Thomas-Fermi's ``y'' = y**(3/2)/sqrt(x)`` becomes regular).
    The states stay derivatives in ``x``, so conditions and outputs are unchanged.

    Returns ``(d, points)``: ``d`` (1 when nothing is stretched) and the ends for the
    singular split and the map, in ``xi`` for a stretched problem (``0`` and
    ``(b - a)**(1/d)``); ``systems[0]`` is rewritten in ``xi`` in place. Only a single region
    with a fixed (not unknown) left end is stretched.
    """
    a = points[0]
    if len(systems) != 1 or a in (sp.oo, -sp.oo) or a.free_symbols & parameters:
        return 1, points
    z = sp.Dummy("z", positive=True)
    power = 1
    for f in systems[0]:
        shifted = f.xreplace({_PHYSICAL: a + z})
        for base, exponent in (q.as_base_exp() for q in shifted.atoms(sp.Pow)):
            if not (exponent.is_Rational and not exponent.is_Integer and base.has(z)):
                continue
            try:
                lead = sp.Poly(base.as_leading_term(z).as_independent(z)[1], z)
                order = sp.Integer(lead.monoms()[0][0]) if lead.is_monomial else None
            except (sp.PolynomialError, ValueError, TypeError, NotImplementedError):
                order = None
            if order is None or order == 0:
                continue
            power = int(sp.ilcm(power, sp.Rational(order * exponent).q))
    if power == 1:
        return 1, points
    if power > _MAX_STRETCH:
        raise ProblemError(
            f"the equations hold powers of {problem.independent} - {a} with exponents that need a stretch "
            f"{problem.independent} - {a} = xi**{power} (at most {_MAX_STRETCH} is done): write them with "
            "simpler exponents"
        )
    xi = sp.Dummy("xi", positive=True)
    stretched = [power * xi ** (power - 1) * f.xreplace({_PHYSICAL: a + xi**power}) for f in systems[0]]
    systems[0][:] = [f.xreplace({xi: _PHYSICAL}) for f in stretched]
    b = points[-1]
    return power, (sp.Integer(0), b if b in (sp.oo, -sp.oo) else (b - a) ** sp.Rational(1, power))


def _singular(problem, systems, points, local, n: int, parameters: set):  # noqa: ANN001, ANN202
    """Split ``S s / (x - a)`` off the first region's equations, singular at the left end ``a``.

    Returns ``(S, regular right-hand sides of the first region)`` or None. A term singular at
    any other end or interface, or not of this form, is refused by name.
    """
    name = problem.independent
    last = len(points) - 1
    for r, system in enumerate(systems):
        for j, end in ((r, points[r]), (r + 1, points[r + 1])):
            if j == 0 or end in (sp.oo, -sp.oo):
                continue
            if any(_blows_up(f.xreplace({_PHYSICAL: end})) for f in system):
                where = "the right end" if j == last else "an interface"
                raise ProblemError(
                    f"the equations are singular at {where} {name} = {end}: bvpkit treats singular terms at the "
                    f"left end only{'; reverse the direction of ' + name if j == last else ''}"
                )
    a = points[0]
    first = systems[0]
    if a in (sp.oo, -sp.oo):
        return None
    rows = [i for i, f in enumerate(first) if _blows_up(f.xreplace({_PHYSICAL: a}))]
    if not rows:
        return None
    if a.free_symbols & parameters:
        raise ProblemError(
            f"the equations are singular at the left end {name} = {a}, which is an unknown parameter; this "
            "combination is not supported (a singular end must be fixed)"
        )
    S = [[sp.Integer(0)] * n for _ in range(n)]
    regular = list(first)
    s = local[:n]
    for i in rows:
        g = sp.cancel(sp.together((_PHYSICAL - a) * first[i]))
        for j in range(n):
            entry = sp.simplify(sp.diff(g, s[j]).xreplace({_PHYSICAL: a}))
            if entry.has(*s) or _blows_up(entry):
                raise ProblemError(
                    f"the singular coefficient {sp.sstr(entry)} at {name} = {a} is not of the form S y/({name} - a)"
                )
            S[i][j] = entry
        rest = sp.cancel(sp.together(first[i] - sum(S[i][j] * s[j] for j in range(n)) / (_PHYSICAL - a)))
        if _blows_up(rest.xreplace({_PHYSICAL: a})):
            raise ProblemError(
                f"the term {sp.sstr(first[i])} is singular at {name} = {a} in a way bvpkit cannot treat (only "
                f"terms S y/({name} - a) are, e.g. (2/{name})*y')"
            )
        regular[i] = rest
    return S, regular


def _map(points, names) -> list:  # noqa: ANN001
    """Per region ``(c_r, h_r)``: ``x = c_r + h_r t`` maps ``t`` in ``[0, 1]`` onto the region."""
    length = sp.Symbol(f"_k{names.constants.index(LENGTH)}", real=True) if LENGTH in names.constants else None
    maps = []
    last = len(points) - 1
    for r in range(last):
        left, right = points[r], points[r + 1]
        left_inf, right_inf = left in (sp.oo, -sp.oo), right in (sp.oo, -sp.oo)
        if left_inf and right_inf:
            maps.append((-length, 2 * length))
        elif right_inf:
            maps.append((left, length))
        elif left_inf:
            maps.append((right - length, length))
        else:
            maps.append((left, right - left))
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
    if form.regions == 1:
        rhs = [r * f.xreplace({X: r * X}) for f in rhs]
        power = form.stretch[0] if form.stretch else 1
        c, h = form.maps[0]
        maps = ((c, h * r**power),)
        points = (form.points[0], c + h * r**power)
    return dataclasses.replace(form, rhs=tuple(rhs), conditions=conditions, constants=constants, maps=maps,
                               points=points)


# -- helpers ---------------------------------------------------------------------------------
def _as_written(e: sp.Expr, problem) -> str:  # noqa: ANN001
    """``e`` printed as a person writes it: ``y'`` rather than ``Derivative(y(x), x)``."""
    swap = {}
    for d in e.atoms(sp.Derivative):
        swap[d] = sp.Symbol(d.expr.func.__name__ + "'" * d.derivative_count)
    for f in e.atoms(AppliedUndef):
        swap[f] = sp.Symbol(f.func.__name__)
    return sp.sstr(e.xreplace(swap))


def _check_linear(rhs, s, lam, problem) -> None:  # noqa: ANN001
    """An eigenvalue problem must be linear and homogeneous, and linear in the eigenvalue."""
    name = problem.eigenvalue
    jac = sp.Matrix(rhs).jacobian(list(s))
    if any(jac.has(v) for v in s) or any(sp.simplify(r.xreplace({v: 0 for v in s})) != 0 for r in rhs):
        raise ProblemError(
            f"eigenvalue '{name}': the equations must be linear and homogeneous in the unknown "
            "functions (no terms without them, no products of them)"
        )
    if any(sp.simplify(sp.diff(entry, lam, 2)) != 0 for entry in jac):
        raise ProblemError(
            f"eigenvalue '{name}': the equations are not linear in the eigenvalue once solved for the highest "
            f"derivatives; write them so that it multiplies the functions, e.g. y'' + {name}*y = 0"
        )


def _check_eigen_condition(problem, condition: sp.Expr, names) -> None:  # noqa: ANN001
    if problem.eigenvalue is None:
        return
    name = problem.eigenvalue
    lam = names.p[sp.Symbol(name)]
    ends = [s for s in condition.free_symbols if s.name.startswith("_v")]
    if sp.diff(condition, lam, 2) != 0:
        raise ProblemError(f"eigenvalue '{name}': the boundary conditions are not linear in it")
    zero = condition.xreplace({s: 0 for s in ends})
    if sp.simplify(zero) != 0 or any(sp.diff(condition, s, 2) != 0 for s in ends):
        raise ProblemError(
            f"eigenvalue '{name}': the conditions must be linear and homogeneous (= 0); bvpkit adds the "
            "normalisation itself"
        )


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
    names = [f"{n}{chr(39) * problem.orders[n]}" for n in problem.unknowns]
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
