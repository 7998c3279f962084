"""Constants fitted to measurements, with standard errors; and uncertainty carried to outputs.

:func:`fit` minimises ``sum(((model_i - data_i) / sigma_i)**2)`` over the constants varied
with SciPy's trust-region reflective least squares (``scipy.optimize.least_squares``,
``method="trf"``), its Jacobian the exact one of :mod:`bvpkit.solver.sensitivity` (the
collocation equations' Newton matrix at each solution, one solve per constant), each
residual a solve warm-started from the last. A solve that fails inside the fit returns
non-finite residuals, on which the trust-region solver shrinks its step.

The covariance of the fitted constants is ``(J^T J)^-1`` at the optimum (Gauss-Newton; with
``sigma`` given it is taken as the data's true standard deviations, otherwise the noise is
estimated from the residuals: the covariance times ``chi^2 / (N - n)``). The information
matrix ``J^T J`` is judged on the Jacobian with columns scaled by the constants' values
(relative changes): when its smallest singular value is below ``_SINGULAR`` of its largest,
or two estimates correlate within ``_CORRELATED`` of +/-1, the constants are not
identifiable one by one; the result says which combination the data determine and gives no
finite errors for the constants in it.
"""

from __future__ import annotations

import math
import time
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

from .._output import json_ready
from ..errors import BvpkitError
from ..reduce.mapping import positions
from ..reduce.prepared import prepare
from ..solver import driver
from ..solver.solution import Solution, sampling
from ..status import Status
from .continuation import trace

#: The information matrix's smallest singular value below this fraction of its largest: the
#: constants' relative changes along that direction change the residuals by less than round-off
#: of the solves' tolerance would (a singular information matrix, in double precision).
_SINGULAR = 1e-7
#: Two estimates correlating within this of +/-1 cannot be told apart by the data.
_CORRELATED = 1e-6


@dataclass(repr=False)
class FitResult:
    """The outcome of :func:`fit`.

    Attributes
    ----------
    values : dict of str to float
        The fitted constants.
    errors : dict of str to float
        Their standard errors (inf for constants the data do not determine one by one).
    covariance, correlation : ndarray, shape (n, n)
        In the order of ``names`` (NaN where not determined).
    names : tuple of str
        The constants varied.
    residuals : dict of str to ndarray
        ``model - data`` per data set (by its expression).
    weighted : ndarray
        All residuals divided by their sigmas, in the order of the data sets.
    data : dict of str to (ndarray or None, ndarray, ndarray)
        Each data set's points (None for a point output), values and sigmas.
    chi_square : float
        ``sum(weighted**2)``; ``degrees_of_freedom`` is the number of data less ``n``.
    solution : Solution
        The solution at the fitted values.
    success : bool, status : Status, message : str
    determined : str or None
        When not identifiable: the combination the data determine (``"m*Bi"``).
    evaluations : int
        Solves made; ``jacobians``, exact Jacobians formed.
    seconds : float
    """

    values: dict
    errors: dict
    covariance: np.ndarray | None
    correlation: np.ndarray | None
    names: tuple
    residuals: dict
    weighted: np.ndarray
    data: dict
    chi_square: float
    degrees_of_freedom: int
    solution: Solution | None
    success: bool
    status: Status
    message: str
    determined: str | None
    evaluations: int
    jacobians: int
    seconds: float

    def summary(self) -> str:
        head = "fitted" if self.success else f"FAILED ({self.status.word})"
        lines = [f"{head}: {self.message}"]
        if self.values:
            for name in self.names:
                e = self.errors.get(name, math.nan)
                shown = f"+/- {e:.3g}" if math.isfinite(e) else "not determined alone"
                lines.append(f"  {name} = {self.values[name]:.10g}  ({shown})")
        if len(self.names) > 1 and self.correlation is not None:
            pairs = [f"{a}~{b} {self.correlation[i, j]:+.3f}" for i, a in enumerate(self.names)
                     for j, b in enumerate(self.names) if j > i and math.isfinite(self.correlation[i, j])]
            if pairs:
                lines.append("  correlation: " + ", ".join(pairs))
        if math.isfinite(self.chi_square):
            lines.append(f"  chi-square {self.chi_square:.4g} on {self.degrees_of_freedom} degrees of freedom, "
                         f"{self.evaluations} solves, {self.jacobians} exact Jacobians, {self.seconds:.3g} s")
        return "\n".join(lines)

    def as_dict(self) -> dict[str, Any]:
        return json_ready({"success": self.success, "status": self.status.word, "message": self.message,
                           "values": {k: float(v) for k, v in self.values.items()},
                           "errors": {k: float(v) for k, v in self.errors.items()},
                           "names": list(self.names), "covariance": self.covariance,
                           "correlation": self.correlation, "determined": self.determined,
                           "chi_square": float(self.chi_square), "degrees_of_freedom": self.degrees_of_freedom,
                           "residuals": {k: np.atleast_1d(np.asarray(v, float)) for k, v in self.residuals.items()}})

    def __repr__(self) -> str:
        return f"<FitResult {self.status.word}: {self.values}>"


@dataclass
class _DataSet:
    text: str
    at: np.ndarray | None  # the points (None: a point output)
    measured: np.ndarray
    sigma: np.ndarray
    explicit: bool  # sigmas given (else 1, and the noise is estimated from the residuals)


def fit(problem: Any, data: Any, *, vary: Mapping[str, Any], sigma: Any = None,
        bounds: Mapping[str, Any] | None = None, tol: float | None = None, method: str | None = None,
        max_solves: int = 200) -> FitResult:
    """Fit constants of ``problem`` to measurements.

    Parameters
    ----------
    problem : Problem or Prepared
    data : mapping of str to data, or a list of ``(expression, data)`` pairs
        Each expression of the solution (``"theta"``, ``"theta'"``, ``"-k*theta'(0)"``) maps
        to measured values: ``(x_values, y_values)`` (or ``(x, y, sigma)``) for an expression
        of the running point, a number (or ``(value, sigma)``) for a point output.
    vary : mapping of str to float or None
        The constants fitted and their start values (None: the problem's value).
    sigma : float, mapping of expression to float or array, optional
        Standard deviations of the measurements (per data set, or per point). Given, they
        are taken as the true ones; without them the noise is estimated from the residuals.
    bounds : mapping of str to (low, high), optional
        Bounds on constants varied.
    tol : float, optional
        Tolerance of each solve (default: the problem's, or 1e-6; the fit's own tolerances are
        SciPy's on the constants and the cost, 1e-10 relative).
    method : str, optional
        The solve method (default ``auto``).
    max_solves : int
        Budget of residual evaluations (each a warm-started solve).

    Returns
    -------
    FitResult
        Bad input (data outside the domain, an expression naming no unknown, ``vary`` naming
        something else than a constant, non-finite or non-positive sigmas, fewer data than
        constants varied) raises a :class:`~bvpkit.BvpkitError` before any solve.
    """
    from scipy.optimize import least_squares

    started = time.perf_counter()
    prepared = problem if hasattr(problem, "compiled") else prepare(problem)
    names, start = _varied(prepared, vary)
    sets = _data_sets(prepared, data, sigma, {**prepared.constants, **dict(zip(names, start))})
    low, high = _bounds(names, start, bounds)
    total = sum(s.measured.size for s in sets)
    if total < len(names):
        raise BvpkitError(f"fit: {total} measured value{'s' if total != 1 else ''} cannot determine "
                          f"{len(names)} constants; give at least as many data as constants varied")
    indices = [prepared.layout.constants.index(n) for n in names]
    state: dict[str, Any] = {"guess": None, "solution": None, "x": None, "solves": 0, "jacobians": 0}

    def solved(x: np.ndarray) -> Solution | None:
        if state["x"] is not None and np.array_equal(x, state["x"]):
            return state["solution"]
        try:
            here = prepared.with_constants(**{n: float(v) for n, v in zip(names, x)})
        except BvpkitError as err:  # a value the problem refuses (a step too far): shrink the step
            state["x"], state["solution"], state["refused"] = np.array(x, float), None, str(err)
            return None
        # the iterations' solves skip the error estimate (the residual control stays); the
        # solution at the fitted values is solved again with it, below
        sol = driver.solve(here, tol=tol, method=method, guess=state["guess"], verify=False, follow=trace)
        state["solves"] += 1
        state["x"], state["solution"] = np.array(x, float), sol if sol.success else None
        if sol.success:
            state["guess"] = sol
        else:
            state["failed"] = sol
        return state["solution"]

    def model(sol: Solution) -> np.ndarray:
        return np.concatenate([np.atleast_1d(np.real(sol.evaluate(s.text, at=s.at))) for s in sets])

    weights = np.concatenate([s.sigma for s in sets])
    measured = np.concatenate([s.measured for s in sets])

    def residuals(x: np.ndarray) -> np.ndarray:
        sol = solved(x)
        if sol is None:
            return np.full(total, np.nan)
        try:
            return (model(sol) - measured) / weights
        except BvpkitError:  # a data point the solution does not reach (a varied end moved)
            return np.full(total, np.nan)

    def jacobian(x: np.ndarray) -> np.ndarray:
        sol = solved(x)
        if sol is None:
            return np.full((total, len(names)), np.nan)
        state["jacobians"] += 1
        d, _ = sol.derivatives([(s.text, s.at) for s in sets], indices, estimate=False)
        return d / weights[:, None]

    first = residuals(np.asarray(start, float))
    if not np.isfinite(first).all():
        failed = state.get("failed")
        cause = failed.message if failed is not None else "the data lie outside the solved interval"
        return _failed(names, sets, failed.status if failed is not None else Status.NOT_CONVERGED,
                       f"the solve at the start values failed: {cause}", state, started)
    scale = np.where(np.asarray(start) != 0, np.abs(start), 1.0)
    try:
        out = least_squares(residuals, np.asarray(start, float), jac=jacobian, bounds=(low, high), method="trf",
                            x_scale=scale, xtol=1e-10, ftol=1e-10, gtol=1e-10, max_nfev=max_solves)
    except BvpkitError as err:  # no derivatives where the solution family turns (a fold)
        return _failed(names, sets, Status.NOT_CONVERGED, f"the fit stopped: {err}", state, started)
    x = out.x
    sol = solved(x)
    if sol is None:
        failed = state.get("failed")
        return _failed(names, sets, failed.status if failed else Status.NOT_CONVERGED,
                       f"the solve at the fitted values failed: {failed.message if failed else ''}", state, started)
    # the final statistics on the solution with its error estimate (the iterations' solves skip it)
    final = driver.solve(prepared.with_constants(**dict(zip(names, map(float, x)))), tol=tol, method=method,
                         guess=sol, follow=trace)
    state["solves"] += 1
    if not final.success:
        return _failed(names, sets, final.status, f"the solve at the fitted values failed: {final.message}",
                       {**state, "failed": final}, started)
    state["x"], state["solution"] = np.array(x, float), final
    sol = final
    r = residuals(x)
    J = jacobian(x)
    values = dict(zip(names, map(float, x)))
    raw = {}
    at = 0
    for s in sets:
        raw[s.text] = r[at:at + s.measured.size] * s.sigma
        at += s.measured.size
    chi2 = float(r @ r)
    dof = total - len(names)
    given = sets[0].explicit
    factor = 1.0 if given else (chi2 / dof if dof > 0 else math.nan)
    covariance, correlation, errors, determined, why = _statistics(names, x, J, factor)
    if not out.success:
        status, message = Status.NOT_CONVERGED, f"the least-squares iteration stopped: {out.message}"
    elif determined is not None:
        status, message = Status.NOT_IDENTIFIABLE, why
    else:
        status = Status.SOLVED
        message = f"converged after {state['solves']} solves"
    return FitResult(values=values, errors=errors, covariance=covariance, correlation=correlation, names=tuple(names),
                     residuals=raw, weighted=r, data={s.text: (s.at, s.measured, s.sigma) for s in sets}, chi_square=chi2, degrees_of_freedom=dof, solution=sol,
                     success=status is Status.SOLVED, status=status, message=message, determined=determined,
                     evaluations=state["solves"], jacobians=state["jacobians"],
                     seconds=time.perf_counter() - started)


def _failed(names: list, sets: list, status: Status, message: str, state: dict, started: float) -> FitResult:
    return FitResult(values={}, errors={}, covariance=None, correlation=None, names=tuple(names),
                     residuals={}, weighted=np.zeros(0), data={}, chi_square=math.nan, degrees_of_freedom=0,
                     solution=state.get("failed"), success=False, status=status, message=message, determined=None,
                     evaluations=state["solves"], jacobians=state["jacobians"], seconds=time.perf_counter() - started)


def _statistics(names: list, x: np.ndarray, J: np.ndarray, factor: float):  # noqa: ANN202
    """Covariance, correlation, standard errors; the combination determined and why, when
    the constants are not identifiable one by one."""
    n = len(names)
    scale = np.where(x != 0, np.abs(x), 1.0)
    relative = J * scale[None, :]  # derivatives in relative changes of the constants
    if not np.isfinite(relative).all():
        nan = np.full((n, n), np.nan)
        return nan, nan, {k: math.nan for k in names}, None, ""
    _, s, vt = np.linalg.svd(relative, full_matrices=False)
    singular = s[-1] <= _SINGULAR * s[0] if s.size else True
    if not singular:
        inverse = (vt.T / s ** 2) @ vt  # (relative^T relative)^-1
        covariance = factor * inverse * np.outer(scale, scale)
        sd = np.sqrt(np.diag(covariance))
        correlation = covariance / np.outer(sd, sd)
        off = np.abs(correlation - np.eye(n))
        if n == 1 or off.max() < 1 - _CORRELATED:
            return covariance, correlation, dict(zip(names, map(float, sd))), None, ""
        null = vt[-1]
    else:
        null = vt[-1]
    # the direction along which the constants move without changing the fit (relative changes)
    involved = [i for i in range(n) if abs(null[i]) > 1e-3 * np.abs(null).max()]
    determined = _combination([names[i] for i in involved], null[involved], x[involved])
    covariance = np.full((n, n), np.nan)
    correlation = np.full((n, n), np.nan)
    for i in involved:
        for j in involved:
            correlation[i, j] = 1.0 if i == j else float(np.sign(null[i] * null[j]))
    errors = {name: (math.inf if i in involved else math.nan) for i, name in enumerate(names)}
    told = ", ".join(names[i] for i in involved)
    why = (f"the data do not determine {told} one by one: they change the fit only through "
           f"{determined} (the information matrix is singular along the other direction); vary that "
           "combination, hold all but one of them, or add data that tell them apart")
    return covariance, correlation, errors, determined, why


def _combination(names: list, null: np.ndarray, values: np.ndarray) -> str:
    """The combination of the constants the data determine, from the direction ``null`` (in
    relative changes) along which they move without changing the fit: for two non-zero
    constants, the product of powers ``a**alpha * b**beta`` constant along it
    (``alpha n_a + beta n_b = 0``), written with the first power 1."""
    if len(names) == 1:
        return f"nothing of {names[0]}"
    if len(names) == 2 and np.all(values != 0):
        alpha, beta = null[1], -null[0]
        if abs(beta) > abs(alpha) * (1 + 1e-3):  # the first of equals stays first
            names, alpha, beta = names[::-1], beta, alpha
        q = beta / alpha
        power = _fraction(abs(q))
        op = "*" if q > 0 else "/"
        return f"{names[0]}{op}{names[1]}" if power == "1" else f"{names[0]}{op}{names[1]}**{power}"
    return " and ".join(names) + " together"


def _fraction(v: float) -> str:
    for d in (1, 2, 3, 4):
        if abs(v * d - round(v * d)) < 1e-3 and round(v * d) != 0:
            nmr = int(round(v * d))
            return str(nmr) if d == 1 else f"({nmr}/{d})"
    return f"{v:.4g}"


def _varied(prepared, vary: Mapping[str, Any]) -> tuple[list[str], list[float]]:  # noqa: ANN001
    if not isinstance(vary, Mapping) or not vary:
        raise BvpkitError("fit: vary= names no constant; give {name: start value} for each constant to fit")
    constants = prepared.constants
    names, start = [], []
    for name, value in vary.items():
        if name not in constants:
            what = ("an unknown parameter (found by every solve; fit a constant instead)"
                    if name in prepared.parameters else "not a constant of the problem")
            known = ", ".join(constants) or "none"
            raise BvpkitError(f"fit: vary names '{name}', {what}; its constants: {known}")
        if name not in prepared.layout.constants:
            raise BvpkitError(f"fit: constant '{name}' is complex or a region's own value; only real constants are fitted")
        v = constants[name] if value is None else value
        try:
            v = float(v)
        except (TypeError, ValueError):
            raise BvpkitError(f"fit: the start value of '{name}' is {value!r}, not a number") from None
        if not math.isfinite(v):
            raise BvpkitError(f"fit: the start value of '{name}' is {v}, not a finite number")
        names.append(name)
        start.append(v)
    return names, start


def _bounds(names: list, start: list, bounds: Mapping[str, Any] | None) -> tuple[np.ndarray, np.ndarray]:
    low, high = np.full(len(names), -np.inf), np.full(len(names), np.inf)
    for name, pair in (bounds or {}).items():
        if name not in names:
            raise BvpkitError(f"fit: bounds given for '{name}', which is not varied (varied: {', '.join(names)})")
        try:
            lo, hi = (float(-np.inf if b is None else b) for b in pair)
        except (TypeError, ValueError):
            raise BvpkitError(f"fit: bounds of '{name}' must be (low, high), got {pair!r}") from None
        i = names.index(name)
        if not lo < hi or not lo <= start[i] <= hi:
            raise BvpkitError(f"fit: bounds of '{name}' ({lo:g}, {hi:g}) must be increasing and hold its start value {start[i]:g}")
        low[i], high[i] = lo, hi
    return low, high


def _ends(prepared, values: Mapping[str, float]) -> tuple[float, float]:  # noqa: ANN001
    """The domain's ends at these constants (an infinite end as inf)."""
    here = prepared.with_constants(**{n: v for n, v in values.items() if n in prepared.constants})
    with np.errstate(all="ignore"):
        ends = positions(np.asarray(here.compiled.maps(here.p0(), here.k()), float))
    a, b = float(ends[0]), float(ends[-1])
    written = prepared.facts["arguments"].get("domain", (None, None))
    for i, end in enumerate(written):
        if str(end).strip() in ("inf", "+inf", "oo"):
            b = math.inf if i else b
        elif str(end).strip() in ("-inf", "-oo"):
            a = -math.inf if i == 0 else a
    return a, b


def _names_unknown(quantity) -> bool:  # noqa: ANN001
    program = quantity.program
    text = repr(program.get("entries")) + repr(program.get("temps"))
    return bool(quantity.points or quantity.integrals or "'_y" in text or "'_p" in text)


def _data_sets(prepared, data: Any, sigma: Any, values: Mapping[str, float]) -> list[_DataSet]:  # noqa: ANN001
    pairs = list(data.items()) if isinstance(data, Mapping) else list(data or [])
    if not pairs:
        raise BvpkitError("fit: no data; give {expression: (x_values, y_values)} or {expression: value}")
    a, b = _ends(prepared, values)
    sets = []
    for item in pairs:
        try:
            text, given = item
        except (TypeError, ValueError):
            raise BvpkitError(f"fit: a data item must be (expression, values), got {item!r}") from None
        text = str(text)
        quantity = prepared.quantity(text)
        if not _names_unknown(quantity):
            raise BvpkitError(f"fit: the data expression '{text}' names no unknown function or parameter, "
                              "so no solve can change it")
        if quantity.parts != 1:
            raise BvpkitError(f"fit: the data expression '{text}' has complex values; fit re(...) and im(...)")
        own_sigma = None
        if quantity.running:
            if not isinstance(given, tuple | list) or len(given) not in (2, 3):
                raise BvpkitError(f"fit: data for '{text}' (a function of {prepared.independent}) must be "
                                  f"(x_values, y_values) or (x_values, y_values, sigmas)")
            at = _numbers(given[0], f"the points of '{text}'")
            measured = _numbers(given[1], f"the values of '{text}'")
            if at.size != measured.size:
                raise BvpkitError(f"fit: '{text}' has {at.size} points and {measured.size} values")
            if len(given) == 3:
                own_sigma = given[2]
            slack = 1e-12 * max(1.0, abs(a) if math.isfinite(a) else 1.0, abs(b) if math.isfinite(b) else 1.0)
            outside = at[(at < a - slack) | (at > b + slack)]
            if outside.size:
                raise BvpkitError(f"fit: data of '{text}' at {prepared.independent} = {outside[0]:g} lie outside "
                                  f"the domain [{a:g}, {b:g}]")
        else:
            if isinstance(given, tuple | list):
                if len(given) != 2:
                    raise BvpkitError(f"fit: data for '{text}' (one value) must be a number or (value, sigma)")
                given, own_sigma = given
            at = None
            measured = _numbers(given, f"the value of '{text}'")
            if measured.size != 1:
                raise BvpkitError(f"fit: '{text}' is one value; give one number (or list its points in the expression)")
        s = own_sigma
        if s is None and sigma is not None:
            s = sigma.get(text) if isinstance(sigma, Mapping) else sigma
            if isinstance(sigma, Mapping) and s is None:
                raise BvpkitError(f"fit: sigma= gives no value for the data of '{text}'")
        explicit = s is not None
        try:
            s = np.atleast_1d(np.asarray(1.0 if s is None else s, dtype=float))
        except (TypeError, ValueError):
            raise BvpkitError(f"fit: the sigmas of '{text}' are not numbers") from None
        if s.ndim != 1 or s.size not in (1, measured.size):
            raise BvpkitError(f"fit: the sigmas of '{text}' must be one number or one per value ({measured.size})")
        if not (np.isfinite(s).all() and (s > 0).all()):
            raise BvpkitError(f"fit: the sigmas of '{text}' must be finite and positive")
        s = np.broadcast_to(s, measured.shape).astype(float)
        sets.append(_DataSet(text, at, measured, s, explicit))
    if len({s.explicit for s in sets}) > 1:
        missing = next(s.text for s in sets if not s.explicit)
        raise BvpkitError(f"fit: sigmas are given for some data sets but not for '{missing}'; give them for "
                          "every data set, or for none (the noise then estimated from the residuals)")
    if isinstance(sigma, Mapping):
        extra = [k for k in sigma if k not in [s.text for s in sets]]
        if extra:
            raise BvpkitError(f"fit: sigma= names '{extra[0]}', which is no data expression")
    return sets


def _numbers(values: Any, what: str) -> np.ndarray:
    try:
        a = np.atleast_1d(np.asarray(values, dtype=float))
    except (TypeError, ValueError):
        raise BvpkitError(f"fit: {what} are not numbers") from None
    if a.ndim != 1:
        raise BvpkitError(f"fit: {what} must be a flat list of numbers")
    if not np.isfinite(a).all():
        raise BvpkitError(f"fit: {what} hold a value that is not a finite number")
    return a


#: Points of the sampling check solved together in one vectorised Newton system (memory:
#: states x points x nodes floats per array).
_CHUNK = 250


@sampling
def _sample(solution: Solution, names: list, draws: np.ndarray, expressions: list) -> np.ndarray:
    """Outputs at drawn values of constants: the points solved as a sweep's are (together where
    the problem allows, :mod:`bvpkit.families.batched`; alone otherwise, each from ``solution``)."""
    from . import (
        batched,  # imported when a sampling first needs it (as the sweep does): a solve's start-up stays light
    )

    prepared = solution.prepared
    tol = solution.diagnostics.tol
    options = {"tol": tol, "verify": True}
    points = [dict(zip(names, map(float, d))) for d in draws]
    table = np.full((len(points), len(expressions)), np.nan)
    batch = batched.applies(prepared, options)
    for begin in range(0, len(points), _CHUNK):
        chunk = points[begin:begin + _CHUNK]
        found = batched.solve_points(prepared, chunk, solution, options) if batch else [None] * len(chunk)
        for i, (point, sol) in enumerate(zip(chunk, found)):
            if sol is None:
                try:
                    sol = driver.solve(prepared.with_constants(**point), tol=tol, guess=solution, follow=trace)
                except BvpkitError:  # a drawn value the problem refuses (a negative length): a failed sample
                    continue
            if sol.success:
                try:
                    table[begin + i] = [np.real(sol.evaluate(e)) for e in expressions]
                except BvpkitError:
                    continue
    return table
