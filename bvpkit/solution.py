"""``Solution``: the answer, how far to trust it, and ways to ask it questions."""

from __future__ import annotations

import math
from pathlib import Path
from typing import Any

import numpy as np

from ._lazy import LazyModule
from ._output import write_columns
from .compiled import CompiledSystem
from .diagnostics import Diagnostics, hermite
from .errors import BvpkitError
from .status import Status

sp = LazyModule("sympy")

# Gauss-Legendre nodes per mesh interval for integrate(): exact for the cubic interpolant
# times smooth functions of it to well below the solver's own error.
_GAUSS_POINTS = 5

# Parsed and compiled quantities, shared by every Solution of the same system: evaluating
# "f''(0)" along a continuation must not re-parse or re-compile it at each point.
_QUANTITIES: dict[tuple, Any] = {}
_MAX_CACHED = 2_000


class Solution:
    """Result of :func:`bvpkit.solve`.

    Attributes
    ----------
    success : bool
        True when the solve converged and its error estimate meets the tolerance.
    status : Status
        The outcome (``status.word`` is the status word; see ``docs/failures.md``).
    message : str
        What happened, in words a person can act on.
    method : str
        The method that produced this answer.
    x : ndarray, shape (m,)
        The final mesh (on the truncated interval for an infinite domain).
    y : ndarray, shape (n, m)
        The states on the mesh (SciPy's layout); ``state_names`` says what each row holds.
    parameters : dict of str to float
        Values of the unknown parameters.
    parameter_errors : dict of str to float
        Their estimated absolute errors (NaN when not estimated).
    outputs : dict of str to float
        The problem's named outputs, evaluated.
    output_errors : dict of str to float
        Estimated absolute errors of the outputs (from the refined solve and, for infinite
        domains, the previous truncation).
    diagnostics : Diagnostics
        Residuals, error estimates, iterations, what was tried.
    """

    def __init__(
        self,
        problem,  # noqa: ANN001 - bvpkit.Problem
        compiled: CompiledSystem,
        k: np.ndarray,
        status: Status,
        message: str,
        method: str,
        x: np.ndarray,
        y: np.ndarray,
        p: np.ndarray,
        diagnostics: Diagnostics,
        parameter_errors: np.ndarray | None = None,
        reference: tuple[np.ndarray, np.ndarray, np.ndarray] | None = None,
        previous: tuple[np.ndarray, np.ndarray, np.ndarray] | None = None,
    ):
        self.problem = problem
        self.status = status
        self.success = status is Status.SOLVED
        self.message = message
        self.method = method
        self.x = np.asarray(x, float)
        self.y = np.asarray(y, float)
        self._p = np.asarray(p, float)
        self._compiled = compiled
        self._k = np.asarray(k, float)
        self.diagnostics = diagnostics
        names = compiled.layout.parameters
        self.parameters = {q: float(v) for q, v in zip(names, self._p)}
        errs = parameter_errors if parameter_errors is not None else np.full(len(names), np.nan)
        self.parameter_errors = {q: float(v) for q, v in zip(names, errs)}
        self._reference = reference
        self._previous = previous
        self._spline = hermite(compiled, self.x, self.y, self._p, self._k, physical=True)
        self.outputs: dict[str, float] = {}
        self.output_errors: dict[str, float] = {}
        if self.x.size and np.isfinite(self.y).all():
            for name, text in problem.outputs.items():
                self.outputs[name], self.output_errors[name] = self._output(text)

    # -- public questions ---------------------------------------------------------------
    @property
    def state_names(self) -> tuple[str, ...]:
        """What each row of ``y`` holds: ``("f", "f'", "f''")``."""
        return self._compiled.layout.state_names

    def evaluate(self, expression: str, at: Any = None) -> float | np.ndarray:
        """Evaluate an expression of the solution.

        Parameters
        ----------
        expression : str
            Point values (``"f''(0)"``, ``"y(1/2)"``, ``"f'(inf)"``), states and derivatives
            at the running point (``"f'"``), the independent variable, constants and
            parameters, combined with the expression language.
        at : array_like, optional
            Points at which to evaluate an expression that depends on the running point.

        Returns
        -------
        float or ndarray, shape (len(at),)
        """
        return self._evaluate_on(self.x, self.y, self._p, expression, at)

    def integrate(self, expression: str) -> float:
        """Integral of an expression of the running point over the whole domain.

        For an infinite domain the integral is taken up to the truncation length, after
        checking that the integrand has decayed there; otherwise an error says so.
        """
        value, tail = self._integral(self.x, self.y, self._p, expression)
        length = self.x[-1] - self.x[0]
        if any(self.problem.infinite) and abs(tail) * length > 1e-6 * max(1.0, abs(value)):
            raise BvpkitError(
                f"the integrand of '{expression}' is {tail:.3g} at the truncated end "
                f"{self.problem.independent} = {self.x[-1]:.6g}: the integral over the "
                "infinite domain does not converge"
            )
        return value

    def table(self) -> dict[str, np.ndarray]:
        """Columns of the mesh solution: the independent variable, then every state."""
        columns = {self.problem.independent: self.x}
        for name, row in zip(self.state_names, self.y):
            columns[name] = row
        return columns

    def to_csv(self, path: str | Path) -> None:
        """Write :meth:`table` as CSV (one row per mesh node)."""
        write_columns(path, self.table())

    def as_dict(self) -> dict[str, Any]:
        """Plain JSON-ready data: outcome, outputs with errors, parameters, diagnostics."""
        return _json_ready(
            {
                "success": self.success,
                "status": self.status.word,
                "message": self.message,
                "method": self.method,
                "outputs": self.outputs,
                "output_errors": self.output_errors,
                "parameters": self.parameters,
                "parameter_errors": self.parameter_errors,
                "state_names": list(self.state_names),
                "diagnostics": self.diagnostics.as_dict(),
            }
        )

    def summary(self) -> str:
        """A short human summary: outcome, method and why, outputs with errors, diagnostics."""
        d = self.diagnostics
        lines = [f"{'solved' if self.success else 'FAILED'} ({self.status.word}): {self.message}"]
        lines.append(f"method: {self.method}; {d.selection}")
        for name, value in self.parameters.items():
            lines.append(f"  {name} = {value:.12g}  (+/- {_fmt_err(self.parameter_errors[name])})")
        for name, value in self.outputs.items():
            lines.append(f"  {name} = {value:.12g}  (+/- {_fmt_err(self.output_errors[name])})")
        facts = [
            f"{d.iterations} Newton iteration{_s(d.iterations)}",
            f"{d.mesh_nodes} nodes",
            f"residual {d.max_residual:.2g}",
            f"boundary residual {d.bc_residual:.2g}",
            f"error estimate {_fmt_err(d.error_estimate)}",
        ]
        if d.truncation_length is not None:
            facts.append(f"infinity placed at {d.truncation_length:.4g}")
        facts.append(f"{d.seconds:.3g} s")
        lines.append("  " + ", ".join(facts))
        if len(d.attempts) > 1:
            tried = "; ".join(
                f"{a.method} on [{a.domain[0]:.4g}, {a.domain[1]:.4g}]: {a.status}" for a in d.attempts
            )
            lines.append(f"  tried: {tried}")
        return "\n".join(lines)

    def __repr__(self) -> str:
        return f"<Solution {self.status.word} by {self.method}: {self.message}>"

    # -- internals ----------------------------------------------------------------------
    def _states(self, points: np.ndarray) -> np.ndarray:
        return self._spline(np.asarray(points, float))

    def _slopes_at_ends(self) -> tuple[np.ndarray, np.ndarray]:
        c = self._compiled
        with np.errstate(all="ignore"):
            f = c.slopes(self.x[[0, -1]], self.y[:, [0, -1]], self._p, self._k, physical=True)
        return f[:, 0], f[:, 1]

    def _output(self, text: str) -> tuple[float, float]:
        value = float(self.evaluate(text))
        error = 0.0 if self._reference is not None else math.nan
        for other in (self._reference, self._previous):
            if other is None:
                continue
            try:
                error += abs(value - float(self._evaluate_on(*other, text, None)))
            except BvpkitError:
                error = math.nan  # e.g. a point outside the shorter truncated domain
        return value, error

    def _internal(self, expression: str) -> tuple[Any, list, bool]:
        """The expression compiled over ``(x, y, p, k, t)`` with ``t`` its point values, the
        point values still to fill in, and whether it depends on the running point."""
        prepared = self.problem.__dict__.get("_quantities")
        if prepared and expression in prepared:
            return prepared[expression]
        return compile_quantity(self.problem, self._compiled, expression)

    def _evaluate_on(self, x, y, p, expression: str, at: Any) -> float | np.ndarray:  # noqa: ANN001
        f, placeholders, running = self._internal(expression)
        system, k = self._compiled.layout, self._k
        spline = self._spline if x is self.x else hermite(self._compiled, x, y, p, k, physical=True)
        values = np.empty(len(placeholders))
        for i, (point, name, order) in enumerate(placeholders):
            where = self._point(point, x, p)
            state = spline(np.array([where]))
            if order < self.problem.orders[name]:
                v = state[system.index(name, order), 0]
            else:
                with np.errstate(all="ignore"):
                    v = self._compiled.slopes(np.array([where]), state, p, k, physical=True)[
                        system.index(name, order - 1), 0
                    ]
            values[i] = v
        if at is None:
            if running:
                raise BvpkitError(
                    f"'{expression}' depends on the running point {self.problem.independent}; "
                    "pass at=[...] or evaluate at a point, e.g. f(0)"
                )
            points = np.array([x[0]])
        else:
            points = np.atleast_1d(np.asarray(at, dtype=float))
            if points.ndim != 1:
                raise BvpkitError("at= must be a number or a 1-D sequence of numbers")
            self._check_inside(points, x)
        with np.errstate(all="ignore"):
            result = f(points, spline(points) if running else np.zeros((system.n, points.size)), p, k, values)[0]
        result = np.broadcast_to(result, points.shape).astype(float)
        if at is None:
            return float(result[0])
        return result if np.ndim(at) else float(result[0])

    def _point(self, point: Any, x: np.ndarray, p: np.ndarray) -> float:
        """Where a point value is taken: a number, or a compiled function of ``(x, p, k)``."""
        if not isinstance(point, float):
            with np.errstate(all="ignore"):
                point = float(point(np.zeros(1), p, self._k)[0, 0])
        if math.isinf(point):
            return float(x[-1] if point > 0 else x[0])
        self._check_inside(np.array([point]), x)
        return point

    def _check_inside(self, points: np.ndarray, x: np.ndarray) -> None:
        slack = 1e-12 * max(1.0, abs(x[0]), abs(x[-1]))
        if not np.isfinite(points).all() or points.min() < x[0] - slack or points.max() > x[-1] + slack:
            bad = points[~((points >= x[0] - slack) & (points <= x[-1] + slack))]
            shown = bad[0] if bad.size else float("nan")
            note = " (the infinite domain was truncated there)" if any(self.problem.infinite) else ""
            raise BvpkitError(
                f"{self.problem.independent} = {shown:g} is outside the solved interval "
                f"[{x[0]:.6g}, {x[-1]:.6g}]{note}"
            )

    def _integral(self, x, y, p, expression: str) -> tuple[float, float]:  # noqa: ANN001
        nodes, weights = np.polynomial.legendre.leggauss(_GAUSS_POINTS)
        h = np.diff(x)
        mid = 0.5 * (x[1:] + x[:-1])
        points = (mid[:, None] + 0.5 * h[:, None] * nodes[None, :]).ravel()
        values = np.asarray(self._evaluate_on(x, y, p, expression, points))
        total = float(np.sum(values.reshape(h.size, -1) * (0.5 * h[:, None] * weights[None, :])))
        tail = float(self._evaluate_on(x, y, p, expression, [x[-1]])[0])
        return total, tail


def _s(count: int) -> str:
    return "" if count == 1 else "s"


def _fmt_err(value: float | None) -> str:
    if value is None or not math.isfinite(value):
        return "not estimated"
    return f"{value:.2g}"


def _json_ready(value: Any) -> Any:
    if isinstance(value, dict):
        return {str(k): _json_ready(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_json_ready(v) for v in value]
    if isinstance(value, float | np.floating):
        return float(value) if math.isfinite(value) else None
    if isinstance(value, np.integer):
        return int(value)
    return value


def remember_quantity(problem, text: str, function: Any, points: list, running: bool) -> None:  # noqa: ANN001
    """Install a compiled expression kept by ``prepared.py`` (no parsing, no SymPy)."""
    problem.__dict__.setdefault("_quantities", {})[text] = (function, points, running)


def compile_quantity(problem, compiled: CompiledSystem, expression: str) -> tuple[Any, list, bool]:  # noqa: ANN001
    """An expression of the solution compiled over ``(x, y, p, k, t)`` with ``t`` its point
    values; the point values (numbers, or compiled functions of ``(x, p, k)``); whether it
    depends on the running point. Cached per system and text."""
    key = (compiled.layout.key, problem.independent, expression)
    if key in _QUANTITIES:
        return _QUANTITIES[key]
    from .codegen import compile_expressions
    from .reduce import X

    system = compiled.system if compiled.system is not None else problem.system
    e = problem.parse_quantity(expression, where=f"expression '{expression}'")
    points = problem.point_values(e)
    replace: dict[sp.Basic, sp.Basic] = {problem.x: X}
    replace.update({sp.Symbol(c): system.k[i] for i, c in enumerate(system.constants)})
    replace.update({sp.Symbol(q): system.p[i] for i, q in enumerate(system.parameters)})
    placeholders, symbols = [], []
    for i, (node, name, order, point) in enumerate(points):
        symbol = sp.Symbol(f"_t_point{i}")
        replace[node] = symbol
        point = point.xreplace(replace)
        if point.is_Number or point in (sp.oo, -sp.oo):
            placeholders.append((float(point), name, order))
        else:  # a point that depends on constants or parameters: compiled as a function of them
            where = compile_expressions([point], [("x", [X]), ("p", system.p), ("k", system.k)], mesh="x")
            placeholders.append((where, name, order))
        symbols.append(symbol)
    for name in problem.unknowns:
        f = sp.Function(name)(problem.x)
        for j in range(problem.orders[name]):
            node = f if j == 0 else sp.Derivative(f, (problem.x, j))
            replace[node] = system.y[system.index(name, j)]
        replace[sp.Derivative(f, (problem.x, problem.orders[name]))] = system.highest(name)
    e = e.xreplace(replace)
    running = bool(e.free_symbols & ({X} | set(system.y)))
    function = compile_expressions(
        [e], [("x", [X]), ("y", system.y), ("p", system.p), ("k", system.k), ("t", symbols)], mesh="y"
    )
    result = (function, placeholders, running)
    if len(_QUANTITIES) > _MAX_CACHED:
        _QUANTITIES.clear()
    _QUANTITIES[key] = result
    return result

