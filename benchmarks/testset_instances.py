"""Two-point problems with exact solutions from the published test literature.

``INSTANCES`` is plain data: one :class:`Instance` per problem and parameter value, each
with its equation and condition strings (bvpkit's notation), domain, constants, the exact
solution as a NumPy function of ``x`` and its source. ``benchmarks/testset.py`` runs every
method on them; unit tests may reuse them.

Sources are given beside each family. "From memory" means the problem was recalled without
the text at hand: the problem numbers may be off, and the formulas are trusted only because
``benchmarks/testset_check.py`` verifies every exact solution numerically (residual of the
equation by finite differences on a fine grid, and the conditions) before it is used.
Where a test set prints an approximate "exact" solution, the one here is the exact one,
derived analytically and marked so.

Every exact function is written to be evaluated without overflow or NaN at the parameter
values used (exponentials with non-positive arguments, ``log cosh`` by ``log1p``, the
integral of ``exp(t**2/(2 eps))`` through Dawson's function, scaled Airy functions).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass

import numpy as np
from scipy import special
from scipy.optimize import brentq


@dataclass(frozen=True)
class Instance:
    """One problem at one parameter value.

    Attributes
    ----------
    name : str
        Unique, command-line friendly (``family-eps1e-3``).
    equations : tuple of str
        The differential equation in bvpkit's notation (primes are derivatives).
    conditions : tuple of str
        Boundary conditions at the two ends.
    domain : (float, float)
    constants : mapping of str to float
        Values of the named constants of the strings.
    exact : callable
        ``exact(x) -> ndarray``, the exact ``y`` at the points ``x`` (shape of ``x``).
    source : str
        Where the problem comes from (author, year, where, its number there).
    parameter : str or None
        The constant that is varied across the family (its value is in ``constants``);
        None for problems taken at one setting.
    focus : tuple of float
        Interior points where the solution has a layer; the error grid is refined there
        (and always at the ends).
    unknown : str
        Name of the unknown function.
    """

    name: str
    equations: tuple[str, ...]
    conditions: tuple[str, ...]
    domain: tuple[float, float]
    constants: Mapping[str, float]
    exact: Callable[[np.ndarray], np.ndarray]
    source: str
    parameter: str | None = None
    focus: tuple[float, ...] = ()
    unknown: str = "y"


def _tag(value: float) -> str:
    """``1e-3`` for 0.001, ``0.2`` for 0.2: short parameter tags for instance names."""
    text = f"{value:.0e}" if value < 0.1 else f"{value:g}"
    return text.replace("e-0", "e-").replace("+0", "")


# Sources, written once (see the module docstring for what "from memory" means).
_CASH = (
    "Cash, J. R., test set of two-point BVPs used in the papers of Cash and coworkers on "
    "deferred-correction codes (e.g. Cash and Mazzia 2005, J. Comput. Appl. Math. 184, "
    "362-381), problem {n}; from memory"
)
_DERIVED = "; exact form derived here analytically (the set prints a layer approximation)"


def _cos(x):
    return np.cos(np.pi * x)


def _lncosh(z):
    a = np.abs(z)
    return a + np.log1p(np.exp(-2 * a)) - math.log(2)


def _family_reaction_left(eps: float) -> Instance:
    r = math.sqrt(eps)

    def exact(x):  # sinh((1 - x)/r) / sinh(1/r), with non-positive exponents only
        return (np.exp(-x / r) - np.exp(-(2 - x) / r)) / -math.expm1(-2 / r)

    return Instance(
        f"reaction_left_layer-eps{_tag(eps)}", ("eps*y'' - y = 0",), ("y(0) = 1", "y(1) = 0"), (0.0, 1.0),
        {"eps": eps}, exact, _CASH.format(n=1), "eps")


def _family_advection_right(eps: float) -> Instance:
    def exact(x):
        return -np.expm1((x - 1) / eps) / -math.expm1(-1 / eps)

    return Instance(
        f"advection_right_layer-eps{_tag(eps)}", ("eps*y'' - y' = 0",), ("y(0) = 1", "y(1) = 0"), (0.0, 1.0),
        {"eps": eps}, exact, _CASH.format(n=2), "eps")


def _family_variable_advection(eps: float) -> Instance:
    return Instance(
        f"variable_advection_smooth-eps{_tag(eps)}",
        ("eps*y'' + (2 + cos(pi*x))*y' - y = -(1 + eps*pi**2)*cos(pi*x) - (2 + cos(pi*x))*pi*sin(pi*x)",),
        ("y(-1) = -1", "y(1) = -1"), (-1.0, 1.0), {"eps": eps}, _cos, _CASH.format(n=3), "eps")


def _family_advection_reaction(eps: float) -> Instance:
    lam = (1 + eps) / eps

    def exact(x):
        return np.exp(x - 1) + np.exp(-lam * (1 + x))

    return Instance(
        f"advection_reaction_left_layer-eps{_tag(eps)}", ("eps*y'' + y' - (1 + eps)*y = 0",),
        ("y(-1) = 1 + exp(-2)", "y(1) = 1 + exp(-2*(1 + eps)/eps)"), (-1.0, 1.0), {"eps": eps}, exact,
        _CASH.format(n=4), "eps")


def _family_turning_smooth(eps: float) -> Instance:
    return Instance(
        f"turning_point_smooth-eps{_tag(eps)}",
        ("eps*y'' + x*y' - y = -(1 + eps*pi**2)*cos(pi*x) - pi*x*sin(pi*x)",),
        ("y(-1) = -1", "y(1) = -1"), (-1.0, 1.0), {"eps": eps}, _cos, _CASH.format(n=5), "eps", focus=(0.0,))


def _family_shock_cos(eps: float) -> Instance:
    s = math.sqrt(2 * eps)

    def exact(x):
        return _cos(x) + special.erf(x / s) / special.erf(1 / s)

    return Instance(
        f"shock_layer_cos-eps{_tag(eps)}", ("eps*y'' + x*y' = -eps*pi**2*cos(pi*x) - pi*x*sin(pi*x)",),
        ("y(-1) = -2", "y(1) = 0"), (-1.0, 1.0), {"eps": eps}, exact, _CASH.format(n=6), "eps", focus=(0.0,))


def _family_corner(eps: float) -> Instance:
    s = math.sqrt(2 * eps)
    c = math.sqrt(2 * eps / math.pi)

    def exact(x):
        return _cos(x) + x + (x * special.erf(x / s) + c * np.exp(-x**2 / (2 * eps))) / (
            special.erf(1 / s) + c * math.exp(-1 / (2 * eps)))

    return Instance(
        f"corner_layer-eps{_tag(eps)}", ("eps*y'' + x*y' - y = -(1 + eps*pi**2)*cos(pi*x) - pi*x*sin(pi*x)",),
        ("y(-1) = -1", "y(1) = 1"), (-1.0, 1.0), {"eps": eps}, exact, _CASH.format(n=7), "eps", focus=(0.0,))


def _family_advection_left(eps: float) -> Instance:
    d = -math.expm1(-1 / eps)

    def exact(x):
        return (2 - math.exp(-1 / eps) - np.exp(-x / eps)) / d

    return Instance(
        f"advection_left_layer-eps{_tag(eps)}", ("eps*y'' + y' = 0",), ("y(0) = 1", "y(1) = 2"), (0.0, 1.0),
        {"eps": eps}, exact, _CASH.format(n=8), "eps")


def _family_peak(eps: float) -> Instance:
    def exact(x):
        return 1 / (eps + x**2)

    return Instance(
        f"peak_at_centre-eps{_tag(eps)}", ("(eps + x**2)*y'' + 4*x*y' + 2*y = 0",),
        ("y(-1) = 1/(1 + eps)", "y(1) = 1/(1 + eps)"),
        (-1.0, 1.0), {"eps": eps}, exact, _CASH.format(n=9), "eps",
        focus=(0.0,))


def _family_shock_plain(eps: float) -> Instance:
    s = math.sqrt(2 * eps)

    def exact(x):
        return 1 + special.erf(x / s) / special.erf(1 / s)

    return Instance(
        f"shock_layer-eps{_tag(eps)}", ("eps*y'' + x*y' = 0",), ("y(-1) = 0", "y(1) = 2"), (-1.0, 1.0),
        {"eps": eps}, exact, _CASH.format(n=10), "eps", focus=(0.0,))


_REACTION = "eps*y'' - y = -(eps*pi**2 + 1)*cos(pi*x)"


def _family_reaction_smooth(eps: float) -> Instance:
    return Instance(
        f"reaction_smooth-eps{_tag(eps)}", (_REACTION,), ("y(-1) = -1", "y(1) = -1"),
        (-1.0, 1.0), {"eps": eps},
        _cos, _CASH.format(n=11), "eps")


def _family_reaction_right(eps: float) -> Instance:
    r = math.sqrt(eps)
    d = -math.expm1(-4 / r)

    def exact(x):  # cos(pi x) + sinh((1 + x)/r) / sinh(2/r)
        return _cos(x) + (np.exp(-(1 - x) / r) - np.exp(-(3 + x) / r)) / d

    return Instance(
        f"reaction_right_layer-eps{_tag(eps)}", (_REACTION,), ("y(-1) = -1", "y(1) = 0"), (-1.0, 1.0),
        {"eps": eps}, exact, _CASH.format(n=12) + _DERIVED, "eps")


def _family_reaction_left_cos(eps: float) -> Instance:
    r = math.sqrt(eps)
    d = -math.expm1(-4 / r)

    def exact(x):  # cos(pi x) + sinh((1 - x)/r) / sinh(2/r)
        return _cos(x) + (np.exp(-(1 + x) / r) - np.exp(-(3 - x) / r)) / d

    return Instance(
        f"reaction_left_layer_cos-eps{_tag(eps)}", (_REACTION,), ("y(-1) = 0", "y(1) = -1"), (-1.0, 1.0),
        {"eps": eps}, exact, _CASH.format(n=13) + _DERIVED, "eps")


def _family_reaction_two(eps: float) -> Instance:
    r = math.sqrt(eps)
    d = 1 + math.exp(-2 / r)

    def exact(x):  # cos(pi x) + cosh(x/r) / cosh(1/r)
        return _cos(x) + (np.exp((x - 1) / r) + np.exp(-(x + 1) / r)) / d

    return Instance(
        f"reaction_two_layers-eps{_tag(eps)}", (_REACTION,), ("y(-1) = 0", "y(1) = 0"),
        (-1.0, 1.0), {"eps": eps},
        exact, _CASH.format(n=14) + _DERIVED, "eps")


def _family_airy(eps: float) -> Instance:
    # eps y'' = x y: with t = x / eps**(1/3), y = c1 Ai(t) + c2 Bi(t). Bi(T) is huge at the
    # right end T = eps**(-1/3), so c2 is written d2 / Bi(T) and Bi(t)/Bi(T) is formed from
    # the scaled functions (airye) without ever forming Bi(T).
    T = eps ** (-1 / 3)
    zeta_T = 2 / 3 * T**1.5
    ai_m, _, bi_m, _ = special.airy(-T)
    aie_T, _, bie_T, _ = special.airye(T)
    ai_T = aie_T * math.exp(-zeta_T)
    bi_m_over_bi_T = bi_m * math.exp(-zeta_T) / bie_T
    c1, d2 = np.linalg.solve([[ai_m, bi_m_over_bi_T], [ai_T, 1.0]], [1.0, 1.0])

    def exact(x):
        x = np.asarray(x, dtype=float)
        t = x / eps ** (1 / 3)
        out = np.empty_like(t)
        neg = t < 0
        ai, _, bi, _ = special.airy(t[neg])
        out[neg] = c1 * ai + d2 * bi * math.exp(-zeta_T) / bie_T
        tp = t[~neg]
        aie, _, bie, _ = special.airye(tp)
        zeta = 2 / 3 * tp**1.5
        out[~neg] = c1 * aie * np.exp(-zeta) + d2 * bie / bie_T * np.exp(zeta - zeta_T)
        return out

    return Instance(
        f"airy_turning_point-eps{_tag(eps)}", ("eps*y'' - x*y = 0",), ("y(-1) = 1", "y(1) = 1"), (-1.0, 1.0),
        {"eps": eps}, exact, _CASH.format(n=15) + "; exact solution by Airy functions, analytic", "eps",
        focus=(0.0,))


def _family_oscillatory(eps: float, label: str) -> Instance:
    def exact(x):
        return np.sin(np.pi * x / (2 * eps))

    return Instance(
        f"oscillatory-eps{label}", ("eps**2*y'' + pi**2/4*y = 0",), ("y(0) = 0", "y(1) = sin(pi/(2*eps))"),
        (0.0, 1.0), {"eps": eps}, exact,
        _CASH.format(n=16) + "; eps chosen so that 1/(2 eps) is a half-integer, away from the resonances "
        "1/(2 eps) = integer where the solution is not unique", "eps")


def _family_rational_interior(eps: float) -> Instance:
    def exact(x):
        return x / np.sqrt(eps + x**2)

    return Instance(
        f"interior_layer_rational-eps{_tag(eps)}", ("y'' + 3*eps*y/(eps + x**2)**2 = 0",),
        ("y(-0.1) = -0.1/sqrt(eps + 0.01)", "y(0.1) = 0.1/sqrt(eps + 0.01)"),
        (-0.1, 0.1), {"eps": eps}, exact,
        _CASH.format(n=17), "eps", focus=(0.0,))


def _family_decay(eps: float) -> Instance:
    def exact(x):
        return np.exp(-x / eps)

    return Instance(
        f"advection_decay-eps{_tag(eps)}", ("eps*y'' + y' = 0",), ("y(0) = 1", "y(1) = exp(-1/eps)"),
        (0.0, 1.0),
        {"eps": eps}, exact, _CASH.format(n=18), "eps")


def _family_nonlinear_corner(eps: float) -> Instance:
    def exact(x):  # 1 + eps log cosh((x - 0.745)/eps)
        return 1 + eps * _lncosh((x - 0.745) / eps)

    # the conditions' values written without cosh of a large argument (cosh(745) overflows)
    return Instance(
        f"nonlinear_corner-eps{_tag(eps)}", ("eps*y'' + y'**2 = 1",),
        ("y(0) = 1.745 + eps*log((1 + exp(-1.49/eps))/2)", "y(1) = 1.255 + eps*log((1 + exp(-0.51/eps))/2)"),
        (0.0, 1.0), {"eps": eps}, exact, _CASH.format(n=20), "eps", focus=(0.745,))


def _family_nonlinear_reaction(eps: float) -> Instance:
    r = math.sqrt(eps)

    def exact(x):
        return np.exp(-x / r)

    return Instance(
        f"nonlinear_reaction_layer-eps{_tag(eps)}", ("eps*y'' = y + y**2 - exp(-2*x/sqrt(eps))",),
        ("y(0) = 1", "y(1) = exp(-1/sqrt(eps))"), (0.0, 1.0), {"eps": eps}, exact, _CASH.format(n=21), "eps")


def _family_resonance(eps: float) -> Instance:
    # w(x) = -exp(x^2/(2 eps)) + (x/eps) int_0^x exp(t^2/(2 eps)) dt solves eps w'' - x w' + w = 0
    # (reduction of order from the solution x); with the integral written through Dawson's
    # function, w(x) = exp(x^2/(2 eps)) (2 s D(s) - 1), s = x / sqrt(2 eps), and the ratio
    # w(x)/w(1) keeps only exp((x^2 - 1)/(2 eps)) <= 1.
    q = math.sqrt(2 * eps)
    S = 1 / q
    g1 = 2 * S * special.dawsn(S) - 1

    def exact(x):
        s = x / q
        return x / 2 + 1.5 * np.exp((x**2 - 1) / (2 * eps)) * (2 * s * special.dawsn(s) - 1) / g1

    return Instance(
        f"turning_point_resonance-eps{_tag(eps)}", ("eps*y'' - x*y' + y = 0",), ("y(-1) = 1", "y(1) = 2"),
        (-1.0, 1.0), {"eps": eps}, exact,
        "turning-point problem of the resonance type (layers at both ends, outer solution x/2 fixed by "
        "exponentially small terms), as given in bvpkit issue 18; exact solution analytic by reduction "
        "of order, evaluated with scipy.special.dawsn", "eps", focus=(0.0,))


def _family_viscous_shock(eps: float) -> Instance:
    a = brentq(lambda a: a * math.tanh(a / (2 * eps)) - 1, 1.0, 2.0, xtol=1e-15)

    def exact(x):
        return -a * np.tanh(a * x / (2 * eps))

    return Instance(
        f"viscous_shock-eps{_tag(eps)}", ("eps*y'' = y*y'",), ("y(-1) = 1", "y(1) = -1"), (-1.0, 1.0),
        {"eps": eps}, exact,
        "steady viscous Burgers equation, standing shock; exact tanh profile with a*tanh(a/(2 eps)) = 1, "
        "analytic (common practice, no source). Its linearisation is nearly singular (translation of the "
        "shock), condition ~ exp(1/(2 eps)); kept at moderate eps", "eps", focus=(0.0,))


def _family_bratu(lam: float) -> Instance:
    theta = brentq(lambda t: t - math.sqrt(2 * lam) * math.cosh(t / 4), 1e-12, 4.798714560, xtol=1e-15)

    def exact(x):
        return -2 * np.log(np.cosh((x - 0.5) * theta / 2) / math.cosh(theta / 4))

    return Instance(
        f"bratu-lam{lam:g}", ("y'' + lam*exp(y) = 0",), ("y(0) = 0", "y(1) = 0"),
        (0.0, 1.0), {"lam": lam}, exact,
        "Bratu, G., 1914, Bull. Soc. Math. France 42, 113-142 (the problem); lower branch, exact form "
        "y = -2 log(cosh((x - 1/2) theta/2) / cosh(theta/4)), theta = sqrt(2 lam) cosh(theta/4), smaller "
        "root; from memory", "lam")


def _quadratic_two_solutions() -> Instance:
    def exact(x):
        return 4 / (1 + x) ** 2

    return Instance(
        "quadratic_two_solutions", ("y'' = 3/2*y**2",), ("y(0) = 4", "y(1) = 1"), (0.0, 1.0), {},
        exact,
        "Stoer, J. and Bulirsch, R., Introduction to Numerical Analysis, Springer (1980 and later "
        "editions), section 7.3, example with two solutions; the one listed here is 4/(1 + x)^2; from "
        "memory")


def _textbook_nonlinear() -> Instance:
    def exact(x):
        return x**2 + 16 / x

    return Instance(
        "nonlinear_advection_textbook", ("y'' = (32 + 2*x**3 - y*y')/8",), ("y(1) = 17", "y(3) = 43/3"),
        (1.0, 3.0), {}, exact,
        "Burden, R. L. and Faires, J. D., Numerical Analysis, Brooks/Cole (several editions), section "
        "11.2 (nonlinear shooting), Example 1; from memory")


def _textbook_linear() -> Instance:
    c2 = (8 - 12 * math.sin(math.log(2)) - 4 * math.cos(math.log(2))) / 70
    c1 = 11 / 10 - c2

    def exact(x):
        return c1 * x + c2 / x**2 - 0.3 * np.sin(np.log(x)) - 0.1 * np.cos(np.log(x))

    return Instance(
        "euler_type_linear", ("y'' = -2/x*y' + 2/x**2*y + sin(ln(x))/x**2",), ("y(1) = 1", "y(2) = 2"),
        (1.0, 2.0), {}, exact,
        "Burden, R. L. and Faires, J. D., Numerical Analysis, Brooks/Cole (several editions), section "
        "11.1 (linear shooting), Example 1; from memory")


def _beam_simply_supported() -> Instance:
    def exact(x):
        return x * (1 - 2 * x**2 + x**3) / 24

    return Instance(
        "beam_simply_supported", ("y'''' = 1",), ("y(0) = 0", "y''(0) = 0", "y(1) = 0", "y''(1) = 0"),
        (0.0, 1.0),
        {}, exact,
        "uniformly loaded simply supported beam, deflection q x (L^3 - 2 L x^2 + x^3) / (24 EI) with "
        "q = EI = L = 1 (Timoshenko, S. P. and Gere, J. M., Mechanics of Materials, table of beam "
        "deflections; from memory)")


def _beam_cantilever() -> Instance:
    def exact(x):
        return x**2 * (6 - 4 * x + x**2) / 24

    return Instance(
        "beam_cantilever", ("y'''' = 1",), ("y(0) = 0", "y'(0) = 0", "y''(1) = 0", "y'''(1) = 0"), (0.0, 1.0),
        {}, exact,
        "uniformly loaded cantilever, deflection q x^2 (6 L^2 - 4 L x + x^2) / (24 EI) with q = EI = L = 1 "
        "(Timoshenko, S. P. and Gere, J. M., Mechanics of Materials, table of beam deflections; from "
        "memory)")


def _fin(m: float) -> Instance:
    # theta/theta_b = [cosh m(L - x) + beta sinh m(L - x)] / [cosh mL + beta sinh mL], beta = h/(m k),
    # here L = 1 and h/k = 1 (condition y'(1) + y(1) = 0); divided through by exp(mL).
    beta = 1 / m

    def exact(x):
        return np.exp(-m * x) * ((1 + beta) + np.exp(-2 * m * (1 - x)) * (1 - beta)) / (
            (1 + beta) + math.exp(-2 * m) * (1 - beta))

    return Instance(
        f"fin_convective_tip-m{m:g}", ("y'' = m**2*y",), ("y(0) = 1", "y'(1) + y(1) = 0"),
        (0.0, 1.0), {"m": m},
        exact,
        "straight fin with a convective tip (Incropera, F. P. and DeWitt, D. P., Fundamentals of Heat "
        "and Mass Transfer, Wiley, table 3.4, case A; from memory), with L = 1, h/k = 1; a boundary layer "
        "at the base for large m", "m")


def _build() -> list[Instance]:
    out: list[Instance] = []
    out += [_family_reaction_left(e) for e in (1e-2, 1e-4)]
    out += [_family_advection_right(e) for e in (1e-2, 1e-4)]
    out += [_family_variable_advection(e) for e in (1e-2, 1e-4)]
    out += [_family_advection_reaction(e) for e in (1e-2, 1e-3)]
    out += [_family_turning_smooth(e) for e in (1e-3,)]
    out += [_family_shock_cos(e) for e in (1e-2, 1e-4)]
    out += [_family_corner(e) for e in (1e-2, 1e-4)]
    out += [_family_advection_left(e) for e in (1e-2, 1e-3)]
    out += [_family_peak(e) for e in (1e-2, 1e-4)]
    out += [_family_shock_plain(e) for e in (1e-2, 1e-4)]
    out += [_family_reaction_smooth(e) for e in (1e-3,)]
    out += [_family_reaction_right(e) for e in (1e-4,)]
    out += [_family_reaction_left_cos(e) for e in (1e-4,)]
    out += [_family_reaction_two(e) for e in (1e-2, 1e-4)]
    out += [_family_airy(e) for e in (1e-2, 1e-4)]
    out += [_family_oscillatory(0.2, "0.2"), _family_oscillatory(1 / 21, "1_21")]
    out += [_family_rational_interior(e) for e in (1e-4, 1e-6)]
    out += [_family_decay(e) for e in (1e-2, 1e-4)]
    out += [_family_nonlinear_corner(e) for e in (1e-2, 1e-3)]
    out += [_family_nonlinear_reaction(e) for e in (1e-2, 1e-4)]
    out += [_family_resonance(e) for e in (1e-1, 1e-2, 1e-3)]
    out += [_family_viscous_shock(e) for e in (1e-1, 5e-2)]
    out += [_family_bratu(lam) for lam in (1.0, 3.0)]
    out += [_quadratic_two_solutions(), _textbook_nonlinear(), _textbook_linear()]
    out += [_beam_simply_supported(), _beam_cantilever()]
    out += [_fin(m) for m in (10.0, 100.0)]
    names = [i.name for i in out]
    assert len(set(names)) == len(names), "instance names must be unique"
    return out


#: Every instance, in family order.
INSTANCES: list[Instance] = _build()

#: Instances by name.
BY_NAME: dict[str, Instance] = {i.name: i for i in INSTANCES}

#: A handful for smoke runs (``--quick``): a smooth problem, boundary, interior and corner
#: layers, a nonlinear corner and a regular nonlinear problem.
QUICK = (
    "variable_advection_smooth-eps1e-2",
    "advection_right_layer-eps1e-2",
    "shock_layer_cos-eps1e-2",
    "turning_point_resonance-eps1e-2",
    "nonlinear_corner-eps1e-2",
    "bratu-lam1",
)
