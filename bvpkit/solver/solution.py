"""``Solution``: the answer, in the user's variable and states, how far to trust it, and ways
to ask it questions.

A solution is computed in the standard form (``t`` on ``[0, 1]``, the regions' states
stacked in ``Y``); :class:`Interpolant` is the one map back: region ``r`` covers
``x = c_r + h_r t`` and holds rows ``r * size ... (r + 1) * size - 1`` of ``Y``, and a
derivative in ``x`` is one in ``t`` divided by ``h_r``.
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import Any

import numpy as np

from .._output import data_frame, json_ready, write_columns
from ..errors import BvpkitError
from ..language.units import label, units_of
from ..methods.diagnostics import Diagnostics
from ..programs.compiled import quantity_function
from ..reduce.mapping import Interpolant
from ..status import Status
from . import plots
from . import sensitivity as _sensitivity

#: The sampling of :meth:`Solution.propagate`: solves at many values of the constants, a
#: sweep's work, which sits above this stage; given by :func:`sampling` (bvpkit.families.fitting
#: gives it when imported, as the driver is given its tracer).
_SAMPLER = None


def sampling(function):  # noqa: ANN001, ANN201
    """Set the function that solves a solution's problem at drawn constants:
    ``function(solution, names, draws, expressions) -> ndarray (len(draws), len(expressions))``."""
    global _SAMPLER
    _SAMPLER = function
    return function


# Gauss-Legendre nodes per mesh interval for integrate(): exact for the cubic interpolant
# times smooth functions of it to well below the solver's own error.
_GAUSS_POINTS = 5


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
        The final mesh in the user's variable, region after region (an interface appears
        twice: as the end of one region and the start of the next); on the truncated
        interval for an infinite domain.
    y : ndarray, shape (n, m)
        The states at ``x`` (SciPy's layout), then the algebraic unknowns there;
        ``state_names`` says what each row holds (for a complex problem, the real and
        imaginary parts: ``re(T)``, ``im(T')``).
    parameters : dict of str to float (complex for a complex parameter)
        Values of the unknown parameters (empty when the solve failed: the last iterate is
        not an answer; :meth:`parameter_values` with ``allow_failed=True`` gives it).
    parameter_errors : dict of str to float
        Their estimated absolute errors (NaN when not estimated; of a complex value, the size
        of its complex error; empty when the solve failed).
    outputs : dict of str to float (complex for a complex value)
        The problem's named outputs, evaluated (empty when the solve failed).
    output_errors : dict of str to float
        Estimated absolute errors of the outputs (from the refined solve and, for infinite
        domains, the previous truncation).
    diagnostics : Diagnostics
        Residuals, error estimates, iterations, what was tried.
    prepared : Prepared
        The prepared problem this solves (``prepared.with_constants`` for variations).
    """

    def __init__(
        self,
        prepared,  # noqa: ANN001 - bvpkit.reduce.prepared.Prepared
        k: np.ndarray,
        status: Status,
        message: str,
        method: str,
        t: np.ndarray,
        y: np.ndarray,
        p: np.ndarray,
        diagnostics: Diagnostics,
        parameter_errors: np.ndarray | None = None,
        reference: Interpolant | None = None,
        previous: Interpolant | None = None,
    ):
        self.prepared = prepared
        self.status = status
        self.success = status.success
        self.message = message
        self.method = method
        self.diagnostics = diagnostics
        compiled = prepared.compiled
        self.interpolant = Interpolant(compiled, t, y, p, k)
        layout = compiled.layout
        self.x, self.y = self.interpolant.user_nodes()
        names = layout.parameters
        errs = parameter_errors if parameter_errors is not None else np.full(len(names), np.nan)
        self._parameters = prepared.user_values({q: float(v) for q, v in zip(names, self.interpolant.p)})
        # the error of a complex parameter is the size of the complex error (of both parts)
        self._parameter_errors = {q: float(abs(v)) for q, v in
                                  prepared.user_values({q: float(v) for q, v in zip(names, errs)}).items()}
        # a failed solve hands out no numbers as answers, its parameters no more than its outputs
        self.parameters = dict(self._parameters) if self.success else {}
        self.parameter_errors = dict(self._parameter_errors) if self.success else {}
        self._reference, self._previous = reference, previous
        self.outputs: dict[str, float] = {}
        self.output_errors: dict[str, float] = {}
        if self.success:
            for name, text in prepared.outputs.items():
                try:
                    self.outputs[name], self.output_errors[name] = self._output(text)
                except BvpkitError as err:  # a point the solution does not reach (a constant moved an end)
                    raise BvpkitError(f"output '{name}' ({text}): {err}") from None

    # -- public questions ---------------------------------------------------------------
    @property
    def state_names(self) -> tuple[str, ...]:
        """What each row of ``y`` holds: ``("f", "f'", "f''")``, then the algebraic unknowns."""
        layout = self.interpolant.layout
        return (*layout.state_names, *layout.algebraic)

    @property
    def independent(self) -> str:
        return self.prepared.independent

    def problem(self):  # noqa: ANN201 - a bvpkit.Problem
        """The symbolic problem solved (rebuilt with SymPy if this solution came from a cache)."""
        return self.prepared.problem()

    def plot(self, path: str | Path, functions: Any = None, *, allow_failed: bool = False, **options: Any) -> Any:
        """Draw every unknown function (or those named) against the independent variable, the
        outputs marked (``plot`` extra; options of :func:`bvpkit.solver.plots.solution_figure`);
        returns the figure. A failed solve raises unless ``allow_failed=True``."""

        return plots.solution_figure(self, path, [functions] if isinstance(functions, str) else functions,
                               allow_failed=allow_failed, **options)

    def parameter_values(self, *, allow_failed: bool = False) -> dict[str, float]:
        """The unknown parameters' values (name -> value).

        A failed solve raises (as :meth:`evaluate` does) unless ``allow_failed=True``; then
        the values are those of the last iterate, not an answer.
        """
        self._check_success("parameter_values", allow_failed)
        return dict(self._parameters)

    def evaluate(self, expression: str, at: Any = None, *, allow_failed: bool = False) -> float | np.ndarray:
        """Evaluate an expression of the solution.

        Parameters
        ----------
        expression : str
            Point values (``"f''(0)"``, ``"y(1/2)"``, ``"f'(inf)"``, ``"w(L-)"``), states and
            derivatives at the running point (``"f'"``), ``integral(...)`` over the domain,
            the independent variable, constants and parameters, in the expression language.
        at : array_like, optional
            Points at which to evaluate an expression that depends on the running point.
        allow_failed : bool
            Evaluate even though the solve failed (its numbers are not to be trusted);
            without it, a failed solution raises.

        Returns
        -------
        float or ndarray, shape (len(at),)
            Complex (a ``complex`` or a complex array) when the expression's value is.
        """
        self._check_success("evaluate", allow_failed)
        return _evaluate(self.interpolant, self.prepared, self.prepared.quantity(expression), expression, at)

    def integrate(self, expression: str, *, allow_failed: bool = False) -> float | complex:
        """Integral of an expression of the running point over the whole domain.

        For an infinite domain the integral is taken up to the truncation length, after
        checking that the integrand has decayed there; otherwise an error says so.
        """
        self._check_success("integrate", allow_failed)
        quantity = self.prepared.quantity(expression)
        value, tail = (_joined(v).item() for v in _integral(self.interpolant, self.prepared, quantity))
        a, b = self.interpolant.ends
        if self.prepared.truncated and abs(tail) * (b - a) > 1e-6 * max(1.0, abs(value)):
            raise BvpkitError(
                f"the integrand of '{expression}' is {number_text(tail, 3)} at the truncated end "
                f"{self.independent} = {b:.6g}: the integral over the infinite domain does not converge"
            )
        return value

    def table(self, *, allow_failed: bool = False) -> dict[str, np.ndarray]:
        """Columns of the mesh solution: the independent variable, then every state.

        A failed solve raises (as :meth:`evaluate` does) unless ``allow_failed=True``.
        """
        self._check_success("table", allow_failed)
        columns = {self.independent: self.x}
        for name, row in zip(self.state_names, self.y):
            columns[name] = row
        return columns

    def to_pandas(self, *, allow_failed: bool = False) -> Any:
        """:meth:`table` as a pandas DataFrame (the ``tables`` extra); a failed solve raises
        unless ``allow_failed=True``."""

        return data_frame(self.table(allow_failed=allow_failed))

    def to_csv(self, path: str | Path, *, allow_failed: bool = False) -> None:
        """Write :meth:`table` as CSV (one row per mesh node).

        Column headers carry the units the problem gives (``x [m]``). A failed solve raises
        unless ``allow_failed=True``; then every header says that the numbers are those of a
        failed solve (``y (failed: mesh_limit)``), so no reader of the file can take them for
        an answer.
        """
        self._check_success("to_csv", allow_failed)
        units = self.units
        columns = {label(name, units, self.independent): values
                   for name, values in self.table(allow_failed=True).items()}
        if not self.success:
            columns = {f"{name} (failed: {self.status.word})": values for name, values in columns.items()}
        write_columns(path, columns)

    @property
    def units(self) -> dict[str, str]:
        """The units the problem gives for its names (labels only; ``{}`` when none)."""
        return units_of(self.prepared)

    def as_dict(self) -> dict[str, Any]:
        """Plain JSON-ready data: outcome, outputs with errors (null when the solve failed),
        parameters, diagnostics."""
        outputs = self.outputs if self.success else {name: None for name in self.prepared.outputs}
        errors = self.output_errors if self.success else {name: None for name in self.prepared.outputs}
        return json_ready(
            {
                "success": self.success,
                "status": self.status.word,
                "message": self.message,
                "method": self.method,
                "outputs": outputs,
                "output_errors": errors,
                "parameters": self.parameters if self.success else {name: None for name in self._parameters},
                "parameter_errors": self.parameter_errors if self.success else {name: None for name in self._parameters},
                "state_names": list(self.state_names),
                "diagnostics": self.diagnostics.as_dict(),
            }
        )

    def summary(self) -> str:
        """A short human summary: outcome, method and why, outputs with errors, diagnostics."""
        d = self.diagnostics
        head = "solved" if self.success else f"FAILED ({self.status.word})"
        lines = [f"{head}: {self.message}", f"method: {d.selection}"]
        if self.success:
            units = self.units
            shown = [(name, value, self.parameter_errors[name]) for name, value in self.parameters.items()]
            shown += [(name, value, self.output_errors[name]) for name, value in self.outputs.items()]
            for name, value, error in shown:
                unit = f" {units[name]}" if name in units else ""
                note = "" if np.isfinite(value) else "  (not a finite number: check the expression)"
                lines.append(f"  {name} = {number_text(value, 12)}{unit}  (+/- {_fmt_err(error)}){note}")
        elif self.prepared.outputs or self._parameters:
            lines.append("  no outputs are given: the solve failed, and its numbers are not an answer")
        facts = [
            f"{d.iterations} Newton iteration{_s(d.iterations)}",
            self.interpolant.nodes_text(d.mesh_nodes),
            f"residual {d.max_residual:.2g}",
            f"boundary residual {d.bc_residual:.2g}",
            f"error estimate {_fmt_err(d.error_estimate)}",
        ]
        if d.truncation_length is not None:
            a, b = self.interpolant.ends
            facts.append(f"solved on [{a:.4g}, {b:.4g}] for its infinite domain")
        if d.condition is not None:
            facts.append(f"stability constant {d.condition:.2g}")
        facts.append(f"{d.seconds:.3g} s")
        lines.append("  " + ", ".join(facts))
        if len(d.attempts) > 1:
            tried = "; ".join(f"{a.method} on [{a.domain[0]:.4g}, {a.domain[1]:.4g}]: {a.status}" for a in d.attempts)
            lines.append(f"  tried: {tried}")
        return "\n".join(lines)

    def sensitivity(self, outputs: Any = None, wrt: Any = None, *, estimate: bool = True) -> _sensitivity.Sensitivities:
        """Exact derivatives of outputs with respect to constants.

        Parameters
        ----------
        outputs : str, list of str or dict of str to str, optional
            Expressions of the solution that give one number (``"theta(L)"``,
            ``"integral(theta)"``, ``"-k*theta'(0)"``, a parameter's or the eigenvalue's name),
            or labels mapped to them; default: the problem's outputs and unknown parameters.
        wrt : str or list of str, optional
            The constants (default: all of the problem's), a domain end written as a constant
            included.
        estimate : bool
            Estimate each derivative's error by the difference on the solution's mesh and on
            the halved mesh (default True; False costs half).

        Returns
        -------
        Sensitivities
            ``derivatives[output][constant]``, ``errors`` alike, ``matrix``, ``summary()``.

        The derivative is that of the collocation solution on the solution's mesh (fourth
        order, Newton matrix formed at the solution with exact Jacobians; one solve per
        constant), see :mod:`bvpkit.solver.sensitivity`. A failed solve raises.
        """
        if not self.success:
            raise BvpkitError(f"sensitivity(): this solve failed ({self.status.word}), so it has no derivatives; "
                              "fix the cause and solve again")
        labels = self._expressions(outputs)
        names = self._constants_named(wrt)
        indices = [self.interpolant.layout.constants.index(name) for name in names]
        quantities = {label: self.prepared.quantity(text) for label, text in labels.items()}
        for label, text in labels.items():
            if quantities[label].running:
                raise BvpkitError(f"sensitivity: output '{text}' depends on the running point "
                                  f"{self.independent}; give a point, e.g. {text}(0)")
            if quantities[label].parts != 1:
                raise BvpkitError(f"sensitivity: output '{text}' has complex values; ask for re(...) and im(...)")
        values = {label: float(self.evaluate(text)) for label, text in labels.items()}
        matrix, errors = self.derivatives([(text, None) for text in labels.values()], indices, estimate=estimate)
        return _sensitivity.Sensitivities(tuple(labels), tuple(names), values, matrix, errors)

    def propagate(self, deviations: Any, outputs: Any = None, *, covariance: Any = None, samples: int = 0,
                  seed: int | None = None) -> _sensitivity.Propagation:
        """Standard deviations of outputs from those of constants, to first order through the
        exact sensitivities; with ``samples=N``, checked by solving at ``N`` draws of the
        constants (normal, with that covariance).

        Parameters
        ----------
        deviations : mapping of str to float, or a FitResult
            Standard deviations of constants (``{"h": 2.0, "k": 5.0}``); a fit's result gives
            its constants' covariance.
        outputs : as for :meth:`sensitivity`
        covariance : array_like, shape (n, n), optional
            The constants' covariance, in the order of ``deviations`` (replaces their squares).
        samples : int
            Solves of the sampling check (0: none). They run as a sweep's points do (many
            points in one vectorised Newton system where the problem allows; the rest alone,
            each started from this solution).
        seed : int, optional
            Seed of the draws.
        """
        if hasattr(deviations, "covariance") and hasattr(deviations, "names"):  # a fit's result
            if not deviations.success:
                raise BvpkitError(f"propagate: the fit did not succeed ({deviations.status.word}): its covariance "
                                  "is not an answer")
            names, covariance = list(deviations.names), deviations.covariance
            deviations = None
        else:
            if not isinstance(deviations, dict) or not deviations:
                raise BvpkitError("propagate: give the constants' standard deviations, e.g. {\"h\": 2.0}")
            names = list(deviations)
        names = self._constants_named(names)
        c = _sensitivity.covariance_of(names, deviations, covariance)
        s = self.sensitivity(outputs, names, estimate=False)
        spread = s.matrix @ c @ s.matrix.T
        result = _sensitivity.Propagation(s.outputs, s.values,
                                          {o: float(math.sqrt(max(spread[i, i], 0.0))) for i, o in enumerate(s.outputs)},
                                          spread, s)
        if samples:
            if not isinstance(samples, int) or samples < 2:
                raise BvpkitError(f"propagate: samples must be a whole number of at least 2, got {samples!r}")
            if _SAMPLER is None:
                raise BvpkitError("propagate: sampling solves at many constants through bvpkit's sweep machinery, which is "
                                  "wired when bvpkit.solve, trace, sweep or fit is first used (import bvpkit and call those)")
            rng = np.random.default_rng(seed)
            mean = np.array([self.prepared.constants[n] for n in names], float)
            draws = rng.multivariate_normal(mean, c, size=samples, method="eigh")
            expressions = self._expressions(outputs)
            table = _SAMPLER(self, names, draws, list(expressions.values()))
            ok = np.isfinite(table).all(axis=1)
            result.samples, result.failed = table, int(samples - ok.sum())
            result.sampled = {o: float(np.std(table[ok, i], ddof=1)) for i, o in enumerate(s.outputs)}
            result.sampled_mean = {o: float(np.mean(table[ok, i])) for i, o in enumerate(s.outputs)}
        return result

    def derivatives(self, items: list, indices: list[int], *, estimate: bool = True) -> tuple[np.ndarray, np.ndarray]:
        """Derivatives of expressions ``(text, at)`` (``at`` None for one value, or points:
        one row per point) in the compiled constants ``indices``; their error estimates."""
        prepared, compiled = self.prepared, self.interpolant.compiled
        quantities = [(prepared.quantity(text), text, at) for text, at in items]

        def view_of(t, y, p, k):  # noqa: ANN001, ANN202
            return Interpolant(compiled, t, y, p, k)

        def values_of(view: Interpolant) -> np.ndarray:
            return np.concatenate([np.real(np.atleast_1d(_evaluate(view, prepared, q, text, at)))
                                   for q, text, at in quantities])

        v = self.interpolant
        return _sensitivity.derivatives(compiled, v.t, v.y, v.p, v.k, indices, view_of, values_of, estimate)

    def _expressions(self, outputs: Any) -> dict[str, str]:
        if outputs is None:
            labels = {name: name for name in self.parameters}
            labels.update(self.prepared.outputs)
        elif isinstance(outputs, str):
            labels = {outputs: outputs}
        elif isinstance(outputs, dict):
            labels = {str(k): str(v) for k, v in outputs.items()}
        else:
            labels = {str(o): str(o) for o in outputs}
        if not labels:
            raise BvpkitError("sensitivity: no outputs: name the expressions, e.g. outputs=[\"y(1)\"]")
        return labels

    def _constants_named(self, wrt: Any) -> list[str]:
        constants = self.prepared.constants
        names = list(constants) if wrt is None else [wrt] if isinstance(wrt, str) else list(wrt)
        if not names:
            raise BvpkitError("sensitivity: no constants named in wrt=[...]; the problem has none" if not constants
                              else f"sensitivity: no constants named in wrt=[...]; the problem's are {', '.join(constants)}")
        layout = self.interpolant.layout
        for name in names:
            if name not in constants:
                known = ", ".join(constants) or "none"
                raise BvpkitError(f"sensitivity: '{name}' is not a constant of the problem (its constants: {known})")
            if name not in layout.constants:
                raise BvpkitError(f"sensitivity: constant '{name}' is not a real constant of the standard form "
                                  "(complex constants and region values are not covered)")
        if len(set(names)) != len(names):
            raise BvpkitError("sensitivity: a constant is named twice in wrt=[...]")
        return names

    def __repr__(self) -> str:
        return f"<Solution {self.status.word} by {self.method}: {self.message}>"

    # -- internals ----------------------------------------------------------------------
    def _check_success(self, asked: str, allow_failed: bool) -> None:
        """The numbers of a failed solve are not an answer: refuse them unless asked for."""
        if self.success or allow_failed:
            return
        cause = self.message if len(self.message) <= 160 else self.message[:157] + "..."
        action = {"evaluate": "look at them", "integrate": "integrate them", "table": "get the table",
                  "parameter_values": "get the last iterate's values", "plot": "draw them",
                  "to_csv": "write them (every column header then says the solve failed)"}[asked]
        raise BvpkitError(
            f"{asked}(): this solve failed ({self.status.word}), so its numbers are not an answer: {cause}. "
            f"Fix the cause, or pass allow_failed=True to {action} anyway"
        )

    def _output(self, text: str) -> tuple[float | complex, float]:
        quantity = self.prepared.quantity(text)
        value = _evaluate(self.interpolant, self.prepared, quantity, text, None)
        error = 0.0 if self._reference is not None else math.nan
        for other in (self._reference, self._previous):
            if other is None:
                continue
            try:
                error += abs(value - _evaluate(other, self.prepared, quantity, text, None))
            except BvpkitError:
                error = math.nan  # e.g. a point outside the shorter truncated domain
        return value, error


def _evaluate(view: Interpolant, prepared, quantity, text: str, at: Any) -> float | np.ndarray:  # noqa: ANN001
    """A compiled quantity on a solution (see bvpkit.reduce.quantity)."""
    values = _placeholders(view, prepared, quantity)
    if at is None:
        if quantity.running:
            raise BvpkitError(
                f"'{text}' depends on the running point {prepared.independent}; pass at=[...] or evaluate "
                "at a point, e.g. f(0)"
            )
        points = np.array([view.ends[0]])
    else:
        points = np.atleast_1d(np.asarray(at, dtype=float))
        if points.ndim != 1:
            raise BvpkitError("at= must be a number or a 1-D sequence of numbers")
        _check_inside(view, prepared, points)
    r = view.region(points)
    result = _joined(_running(view, quantity, points, r, values, quantity_function))
    if at is None or not np.ndim(at):
        return result[0].item()  # a float, or a complex
    return result


def _joined(parts: np.ndarray) -> np.ndarray:
    """A quantity's value from its parts, shape ``(parts, ...)``: real, or complex from its
    real and imaginary parts."""
    return parts[0] if parts.shape[0] == 1 else parts[0] + 1j * parts[1]


def number_text(value: float | complex, digits: int) -> str:
    """A value as a summary writes it: ``0.25``, or a complex one as Python writes it, in a
    form the expression language reads back: ``0.2375+0.0037j``."""
    if isinstance(value, complex | np.complexfloating):
        return f"{value.real:.{digits}g}{value.imag:+.{digits}g}j"
    return f"{value:.{digits}g}"


def _placeholders(view: Interpolant, prepared, quantity) -> np.ndarray:  # noqa: ANN001
    """The values of a quantity's placeholders: its point values, then each integral's parts."""
    values = [_point_value(view, prepared, point) for point in quantity.points]
    for q in quantity.integrals:
        values += list(_integral(view, prepared, q)[0])
    return np.array(values, dtype=float)


def _running(view: Interpolant, quantity, points: np.ndarray, r: np.ndarray, values: np.ndarray,  # noqa: ANN001
             function_of) -> np.ndarray:  # noqa: ANN001
    """The parts of a quantity at ``points``: shape ``(parts, len(points))``."""
    layout = view.layout
    f = function_of(quantity.program)
    if quantity.running:
        states = view(points, regions=r)
        slopes = view.slopes(points, regions=r)
        highest = [slopes[layout.index(name, order - 1)] for name, order in layout.functions]
        inputs = np.vstack([states[: layout.users], *highest, view.algebraic(points, regions=r)])
    else:
        inputs = np.zeros((layout.users + len(layout.functions) + len(layout.algebraic), points.size))
    with np.errstate(all="ignore"):
        result = f(points, inputs, view.p, view.k, values)
    return np.broadcast_to(result, (quantity.parts, points.size)).astype(float)


def _point_value(view: Interpolant, prepared, point) -> float:  # noqa: ANN001
    """The value of one point-value placeholder ``(point, state, order, side)``."""
    where, state, order, side = point
    if isinstance(where, dict):  # a point that depends on the constants: its program
        with np.errstate(all="ignore"):
            where = float(quantity_function(where)(np.zeros(1), view.p, view.k)[0, 0])
    a, b = view.ends
    if math.isinf(where):
        where = b if where > 0 else a
    _check_inside(view, prepared, np.array([where]))
    side = side or (1 if where <= a else -1)
    size = view.layout.region_size
    if state >= size:  # an algebraic unknown: rows after the states
        return float(view.algebraic(np.array([where]), side=side)[state - size, 0])
    highest = view.layout.states[state][1] != order
    row = (view.slopes if highest else view)(np.array([where]), side=side)
    return float(row[state, 0])


def _integral(view: Interpolant, prepared, quantity) -> tuple[np.ndarray, np.ndarray]:  # noqa: ANN001
    """The integral of a quantity over every region, and the integrand at the far end, each
    by parts (shape ``(parts,)``: its real and imaginary parts for a complex integrand)."""
    values = _placeholders(view, prepared, quantity)
    x, r, dx = view.quadrature(_GAUSS_POINTS)
    total = np.sum(_running(view, quantity, x, r, values, quantity_function) * dx, axis=1)
    tail = _running(view, quantity, *view.far_end(), values, quantity_function)[:, 0]
    return total, tail


def _check_inside(view: Interpolant, prepared, points: np.ndarray) -> None:  # noqa: ANN001
    if view.inside(points):
        return
    a, b = view.ends
    slack = 1e-12 * max(1.0, abs(a), abs(b))
    bad = points[~((points >= a - slack) & (points <= b + slack))]
    shown = bad[0] if bad.size else float("nan")
    note = " (the infinite domain was truncated there)" if prepared.truncated else ""
    raise BvpkitError(
        f"{prepared.independent} = {shown:g} is outside the solved interval [{a:.6g}, {b:.6g}]{note}"
    )


def _s(count: int) -> str:
    return "" if count == 1 else "s"


def _fmt_err(value: float | None) -> str:
    if value is None or not math.isfinite(value):
        return "not estimated"
    return f"{value:.2g}"
