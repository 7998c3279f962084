"""``solve``: options, infinite domains, and assembling the ``Solution``.

Infinite ends are truncated: the solve starts at a length ``L0`` and the domain is
lengthened by ``_GROWTH`` (each solve started from the previous one) until the states on
the common interval change by less than half the tolerance. Each truncated solve is
error-controlled to an eighth of the tolerance, so the change measures truncation rather
than discretisation noise, and the reported error estimate (the sum of both) meets the
tolerance when ``success`` is True.
"""

from __future__ import annotations

import math
import time
from collections.abc import Mapping
from typing import Any

import numpy as np

from . import guess as _guess
from . import methods
from . import strategy
from .diagnostics import Diagnostics, condition_estimate, hermite, residuals
from .errors import OptionError
from .methods.base import Outcome, Trial
from .problem import Problem
from .solution import Solution
from .status import Status

DEFAULT_TOL = 1e-6
DEFAULT_MAX_NODES = 20_000
DEFAULT_TRUNCATION = 10.0  # first placement of an infinite end, measured from the finite one
_GROWTH = 1.5  # lengthening factor of a truncated domain
_MAX_LENGTHENINGS = 12  # 1.5**12 ~ 130: from 10 to ~1300 units before giving up
_SHARE_TRUNCATION = 0.5  # part of the tolerance allowed to truncation
_SHARE_DISCRETISATION = 0.125  # each truncated solve's error target: two of them stay below tol/4

_OPTIONS = {"method", "tol", "max_nodes", "verify", "truncation"}


def _options(problem: Problem, given: Mapping[str, Any]) -> dict[str, Any]:
    settings = {k: v for k, v in problem.settings.items() if k in _OPTIONS}
    settings.update({k: v for k, v in given.items() if v is not None})
    method = settings.get("method", "auto")
    if method != "auto":
        methods.get(method)
    tol = settings.get("tol", DEFAULT_TOL)
    if isinstance(tol, bool) or not isinstance(tol, int | float) or not (1e-13 <= tol <= 0.1):
        raise OptionError(f"tol must be a number between 1e-13 and 0.1, got {tol!r}")
    max_nodes = settings.get("max_nodes", DEFAULT_MAX_NODES)
    if isinstance(max_nodes, bool) or not isinstance(max_nodes, int) or not 10 <= max_nodes <= 10**7:
        raise OptionError(f"max_nodes must be a whole number from 10 to 10**7, got {max_nodes!r}")
    verify = settings.get("verify", True)
    if not isinstance(verify, bool):
        raise OptionError(f"verify must be true or false, got {verify!r}")
    truncation = settings.get("truncation", DEFAULT_TRUNCATION)
    if isinstance(truncation, bool) or not isinstance(truncation, int | float) or not 0 < truncation < 1e8:
        raise OptionError(f"truncation must be a positive length, got {truncation!r}")
    return {
        "method": method,
        "tol": float(tol),
        "max_nodes": max_nodes,
        "verify": verify,
        "truncation": float(truncation),
    }


def solve(
    problem: Problem,
    *,
    method: str | None = None,
    tol: float | None = None,
    guess: Any = None,
    max_nodes: int | None = None,
    verify: bool | None = None,
    truncation: float | None = None,
) -> Solution:
    """Solve a boundary-value problem.

    Parameters
    ----------
    problem : Problem
    method : {"auto", "collocation", ...}, optional
        ``"auto"`` (default) lets the selector choose and fall back; a name from
        ``bvpkit.methods.REGISTRY`` runs that method alone.
    tol : float, optional
        Tolerance on the estimated relative error of the states, ``|dy| / (1 + |y|)``
        (default 1e-6, or the problem's settings).
    guess : Solution or mapping of str to expression, optional
        Start from a previous solution, or from expressions per unknown function (these
        replace the problem's own guesses).
    max_nodes : int, optional
        Mesh limit (default 20000).
    verify : bool, optional
        Estimate the error (collocation: by deferred correction; shooting: by a re-solve with
        a tighter integrator) and the stability constant of the problem (default True).
        Without it, the solve is faster (see ``benchmarks/``) and ``error_estimate`` and
        ``condition`` are not computed (NaN and None).
    truncation : float, optional
        First placement of an infinite end, measured from the finite end (default 10). The
        domain is lengthened from there until the solution stops changing.

    Returns
    -------
    Solution
        ``success`` is False (and ``message`` says why) when the solve failed; bad input
        raises a :class:`~bvpkit.BvpkitError` instead.
    """
    if not isinstance(problem, Problem):
        raise OptionError(f"solve() takes a bvpkit.Problem, got {type(problem).__name__}")
    options = _options(
        problem,
        {"method": method, "tol": tol, "max_nodes": max_nodes, "verify": verify, "truncation": truncation},
    )
    start = time.perf_counter()
    compiled = problem.compiled()
    system = compiled.layout
    k = np.array([problem.constants[c] for c in system.constants], dtype=float)
    a, b = problem.ends()
    if math.isinf(a) or math.isinf(b):
        if system.eigenvalue is not None:
            raise OptionError("eigenvalue problems on infinite domains are not supported; truncate the domain")
        return _solve_infinite(problem, compiled, k, a, b, guess, options, start)
    if system.rescaled and isinstance(guess, Solution | _guess.Start):
        a, b = float(guess.x[0]), float(guess.x[-1])
    x = _guess.initial_mesh(a, b, min(_guess.INITIAL_NODES, options["max_nodes"] // 2))
    if isinstance(guess, Solution | _guess.Start) and np.isclose(guess.x[0], a) and np.isclose(guess.x[-1], b):
        x = guess.x.copy()  # its mesh already fits the solution
    y, p = _start(problem, compiled, x, k, guess)
    method_x = (x - a) / (b - a) if system.rescaled else x
    if system.eigenvalue is not None and not isinstance(guess, Solution | _guess.Start):
        vectors, lam = _guess.eigen_guess(compiled, method_x, k, system.mode)
        if not guess:
            y[: system.users] = vectors
        p[system.eigenvalue] = lam
        _guess.fill_integrals(compiled, x, y, p, k)
    trial = Trial(compiled, method_x, y, p, k, options["tol"], options["max_nodes"], options["verify"],
                  singular=compiled.singular(p, k))
    outcome, attempts, selection = strategy.run(trial, options["method"])
    return _assemble(problem, compiled, k, outcome, attempts, selection, start, None, None, tol=options["tol"])


def _start(problem, compiled, x, k, guess) -> tuple[np.ndarray, np.ndarray]:  # noqa: ANN001
    if isinstance(guess, Solution | _guess.Start):
        if guess.state_names != compiled.layout.state_names:
            raise OptionError(
                f"the guess solution has states {guess.state_names}, this problem "
                f"{compiled.layout.state_names}"
            )
        return _guess.from_solution(guess, x)
    if guess is not None and not isinstance(guess, Mapping):
        raise OptionError(
            f"guess must be a Solution or a mapping of function name to expression, got "
            f"{type(guess).__name__}"
        )
    return _guess.initial_guess(problem, compiled, x, k, guess)


def _truncated(a: float, b: float, length: float) -> tuple[float, float]:
    if math.isinf(a) and math.isinf(b):
        return -length, length
    if math.isinf(b):
        return a, a + length
    return b - length, b


def _solve_infinite(problem, compiled, k, a, b, guess, options, start) -> Solution:  # noqa: ANN001
    tol = options["tol"]
    # Every truncated solve is error-controlled to a fraction of the tolerance, so that the
    # change between two lengths measures truncation, not the noise of two discretisations.
    inner_tol = tol * _SHARE_DISCRETISATION
    length = options["truncation"]
    if isinstance(guess, Solution | _guess.Start):
        # a previous solution already knows a good length: start there (continuation, sweeps)
        known = float(guess.x[-1] - guess.x[0]) if not (math.isinf(a) and math.isinf(b)) else float(guess.x[-1])
        length = max(length, known)
    attempts = []
    previous: Outcome | None = None
    change = math.inf
    selection = ""
    outcome: Outcome | None = None
    for _ in range(_MAX_LENGTHENINGS):
        lo, hi = _truncated(a, b, length)
        if previous is None:
            x = _guess.initial_mesh(lo, hi, min(_guess.INITIAL_NODES, options["max_nodes"] // 2))
            y, p = _start(problem, compiled, x, k, guess)
        else:
            x, y, p = _extend(compiled, previous, k, lo, hi)
        trial = Trial(compiled, x, y, p, k, inner_tol, options["max_nodes"], verify=options["verify"])
        outcome, tried, chosen = strategy.run(trial, options["method"])
        attempts += tried
        selection = selection or chosen
        if not outcome.ok:
            if previous is None:
                return _assemble(problem, compiled, k, outcome, attempts, selection, start, length, None, tol=tol)
            break
        if previous is not None:
            change = _change(compiled, previous, outcome, k)
            if change <= _SHARE_TRUNCATION * tol:
                return _assemble(problem, compiled, k, outcome, attempts, selection, start, length,
                                 change, previous, tol=tol)
        previous = outcome
        length *= _GROWTH
    assert outcome is not None and previous is not None
    if outcome.ok:
        outcome.status = Status.TRUNCATION
        outcome.message = (
            f"the solution still changed by {change:.2g} when infinity was moved out to "
            f"{length / _GROWTH:.4g}; " + Status.TRUNCATION.hint
        )
        return _assemble(problem, compiled, k, outcome, attempts, selection, start, length / _GROWTH, change, tol=tol)
    # A longer domain failed: hand back the last converged one, marked as not settled.
    previous.status = Status.TRUNCATION
    previous.message = (
        f"the solve failed when infinity was moved out to {length:.4g} ({outcome.message}); "
        f"the solution shown stops at {previous.x[-1]:.4g} and had not settled "
        f"(last change {change:.2g})"
    )
    return _assemble(problem, compiled, k, previous, attempts, selection, start, float(previous.x[-1]), change, tol=tol)


def _extend(compiled, previous: Outcome, k, lo: float, hi: float):  # noqa: ANN001, ANN202
    """Mesh and states on a longer interval, continuing ``previous`` along its end slopes."""
    x0 = previous.x
    h = max(float(np.diff(x0[-5:]).mean()), (hi - lo) / 400)
    pieces = [x0]
    if hi > x0[-1]:
        pieces.append(np.linspace(x0[-1], hi, max(2, int(math.ceil((hi - x0[-1]) / h)) + 1))[1:])
    if lo < x0[0]:
        pieces.insert(0, np.linspace(lo, x0[0], max(2, int(math.ceil((x0[0] - lo) / h)) + 1))[:-1])
    x = np.concatenate(pieces)
    spline = hermite(compiled, x0, previous.y, previous.p, k)
    y = spline(np.clip(x, x0[0], x0[-1]))
    with np.errstate(all="ignore"):
        slopes = compiled.rhs(x0[[0, -1]], previous.y[:, [0, -1]], previous.p, k)
    right, left = x > x0[-1], x < x0[0]
    y[:, right] += slopes[:, 1:2] * (x[right] - x0[-1])
    y[:, left] += slopes[:, 0:1] * (x[left] - x0[0])
    return x, y, previous.p.copy()


def _change(compiled, old: Outcome, new: Outcome, k) -> float:  # noqa: ANN001
    """Max relative change of the states on the shorter interval, and of the parameters."""
    points = old.x
    a = hermite(compiled, old.x, old.y, old.p, k)(points)
    b = hermite(compiled, new.x, new.y, new.p, k)(points)
    change = float(np.max(np.abs(a - b) / (1.0 + np.abs(b))))
    if old.p.size:
        change = max(change, float(np.max(np.abs(old.p - new.p) / (1.0 + np.abs(new.p)))))
    return change


def _assemble(problem, compiled, k, outcome, attempts, selection, start, length, change,  # noqa: ANN001
              previous: Outcome | None = None, tol: float | None = None) -> Solution:
    residual, bc_residual = residuals(compiled, outcome.x, outcome.y, outcome.p, k)
    verified = outcome.error_estimate is not None  # verify=False skips the condition estimate too
    discretisation = outcome.error_estimate
    estimate = math.nan
    if discretisation is not None:
        estimate = discretisation + (change if change is not None and math.isfinite(change) else 0.0)
    status, message = outcome.status, outcome.message
    if status is Status.SOLVED and length is not None:
        ends = [f"{outcome.x[i]:.4g}" for i, inf in zip((0, -1), problem.infinite) if inf]
        message += (
            f"; infinity placed at {problem.independent} = {' and '.join(ends)} (the solution "
            f"changed by {change:.2g} from the last shorter domain)"
        )
    diagnostics = Diagnostics(
        method=getattr(outcome, "method", attempts[-1].method if attempts else ""),
        iterations=outcome.iterations,
        mesh_nodes=int(outcome.x.size),
        max_residual=residual,
        bc_residual=bc_residual,
        error_estimate=estimate,
        discretisation_error=discretisation,
        truncation_error=change if length is not None else None,
        truncation_length=length,
        condition=(outcome.condition if outcome.condition is not None
                   else condition_estimate(compiled, outcome.x, outcome.y, outcome.p, k))
        if verified and status in (Status.SOLVED, Status.ERROR_TOO_LARGE) and np.isfinite(outcome.y).all()
        else None,
        seconds=time.perf_counter() - start,
        attempts=attempts,
        selection=selection,
        tol=tol,
    )
    # The last guard: success never comes with non-finite values or an estimate above tol.
    if status is Status.SOLVED and not (np.isfinite(outcome.y).all() and np.isfinite(outcome.p).all()):
        status, message = Status.NON_FINITE, "the solution holds NaN or inf; " + Status.NON_FINITE.hint
    if status is Status.SOLVED and tol is not None and math.isfinite(estimate) and estimate > tol * (1 + 1e-9):
        status = Status.ERROR_TOO_LARGE
        message = f"converged, but the estimated error {estimate:.2g} is above the tolerance {tol:.2g}"
    system = compiled.layout
    if system.eigenvalue is not None and status is Status.SOLVED:
        found = _guess.interior_zeros(outcome.y[system.index(system.states[0][0], 0)])
        if found != system.mode - 1:
            status = Status.OTHER_MODE
            message = (
                f"asked for mode {system.mode} ({system.mode - 1} interior zeros of "
                f"{system.states[0][0]}), but the solution found has {found} interior zeros "
                f"(mode {found + 1}); " + Status.OTHER_MODE.hint
            )
    reference = _physical(compiled, k, outcome.reference) if outcome.reference is not None else None
    shorter = _physical(compiled, k, previous) if previous is not None else None
    x, y, p = _physical(compiled, k, outcome)
    return Solution(
        problem, compiled, k, status, message, diagnostics.method, x, y, p,
        diagnostics, outcome.parameter_errors, reference, shorter,
    )


def _physical(compiled, k, outcome: Outcome) -> tuple[np.ndarray, np.ndarray, np.ndarray]:  # noqa: ANN001
    """Mesh, states and parameters with the mesh in the physical variable."""
    x = outcome.x
    if compiled.layout.rescaled:
        a, b = compiled.domain_ends(outcome.p, k)
        x = a + (b - a) * x
    return x, outcome.y, outcome.p
