"""Budgets on symbolic work: a wall-clock cap per step, and a cap on the size of what a step made.

SymPy can run away on input that is short to write: a linear solve of a few hundred
equations, a power of a sum that gets expanded, a singular coefficient that ``cancel``
multiplies out. The parser's limits (length, nesting, exponents; :mod:`bvpkit.language.expr`) bound
the text, not what SymPy does with it afterwards. Two checks bound that:

* :func:`budget`, a context manager around one symbolic step: past ``seconds`` of wall
  time the step is stopped and one :class:`~bvpkit.errors.ProblemError` names it and says
  what to do.
* :func:`check_sizes`: after a step, each expression it made must have at most
  :data:`MAX_NODES` nodes; the error names the equation or condition.

How the cap stops a step. SymPy is pure Python, so a timer signal (``signal.setitimer``
with ``ITIMER_REAL``) interrupts it between two bytecodes, and its handler raises. The
alternative, running each step in a worker process, was rejected: the expressions would
be pickled both ways (slow for the very systems that need the cap), each step would pay
for a process and an import of SymPy (about 0.3 s, more than most steps take), and the
caller's SymPy caches would be lost. The exception the handler raises derives from
``BaseException``, so that SymPy's own ``except Exception`` clauses cannot swallow it, and
the timer repeats every :data:`_REPEAT` seconds until the step has ended, in case a bare
``except`` somewhere does. Nested budgets share the one timer: it is set to the earliest
deadline, and the budget whose deadline passed is the one that reports.

Signals can only be handled on the main thread of the main interpreter (and
``setitimer`` does not exist on Windows). Elsewhere (a problem built in a thread, a Dask
worker thread) :func:`budget` does nothing and the size checks alone apply: they stop an
expression that grew, though not a step that computes for long without growing anything.
"""

from __future__ import annotations

import os
import signal
import threading
import time
from collections.abc import Iterator, Mapping
from contextlib import contextmanager
from typing import Any

from ..errors import ProblemError

#: Wall-clock seconds one symbolic step may take. Each step of the bundled specs and the
#: test catalogue takes under 0.1 s; the slowest legitimate step measured, code generation
#: for a 12th-order system of 25 unknowns (300 states, 90,000 derivatives), takes about 3 s.
#: 10 s leaves room for a slower machine, and three such steps still end within 30 s.
#: ``BVPKIT_SYMBOLIC_SECONDS`` changes it (for a legitimately larger system).
STEP_SECONDS = 10.0
#: Name of the environment variable that overrides :data:`STEP_SECONDS`.
SECONDS_VARIABLE = "BVPKIT_SYMBOLIC_SECONDS"
#: Wall-clock seconds the preparation of a problem may take as a whole, over all its steps:
#: reading it (:class:`~bvpkit.Problem`: parsing and the reduction to the standard form),
#: preparing it (:func:`~bvpkit.prepare`: code generation, guess recipes, outputs), and the
#: continuation's own preparation (its facts and the linearised path form), which is also
#: bounded by what is left of the solve's time limit. Three steps at the cap of one still
#: fit. ``BVPKIT_PREPARATION_SECONDS`` changes it.
PREPARATION_SECONDS = 30.0
#: Name of the environment variable that overrides :data:`PREPARATION_SECONDS`.
PREPARATION_VARIABLE = "BVPKIT_PREPARATION_SECONDS"
#: Nodes (operations and atoms) allowed in one expression after a step. The largest
#: expression of the bundled specs and the test catalogue has about 120 (a singular
#: coefficient with 20 factors); a runaway expansion makes millions. 20,000 is far above
#: anything written by hand, and still cheap to differentiate and print.
MAX_NODES = 20_000
#: After the deadline the timer repeats at this interval until the step has ended.
_REPEAT = 0.2


class _Expired(BaseException):
    """Raised by the timer's handler inside a step that ran past its deadline."""

    def __init__(self, ticket: object):
        super().__init__("symbolic step past its deadline")
        self.ticket = ticket


# The budgets entered and not yet left, outermost first: [deadline, ticket]. Only the
# main thread touches it (budgets elsewhere do not register).
_ACTIVE: list[tuple[float, object]] = []
_SAVED: dict[str, Any] = {}


def step_seconds() -> float:
    """The cap on one step: :data:`STEP_SECONDS` or the environment's override."""
    return _seconds(SECONDS_VARIABLE, STEP_SECONDS)


def preparation_seconds() -> float:
    """The cap on a preparation as a whole: :data:`PREPARATION_SECONDS` or the environment's override."""
    return _seconds(PREPARATION_VARIABLE, PREPARATION_SECONDS)


def _seconds(variable: str, default: float) -> float:
    text = os.environ.get(variable)
    if text:
        try:
            value = float(text)
        except ValueError:
            value = 0.0
        if value > 0 and value == value:
            return value
    return default


def _can_alarm() -> bool:
    return hasattr(signal, "setitimer") and threading.current_thread() is threading.main_thread()


def _ring(signum: int, frame: Any) -> None:  # noqa: ARG001 - the signal handler's signature
    if not _ACTIVE:
        return
    now = time.monotonic()
    deadline, ticket = min(_ACTIVE, key=lambda entry: entry[0])
    if now >= deadline:
        raise _Expired(ticket)
    _arm()  # woken early (a timer left from a budget that has ended): wait on


def _arm() -> None:
    deadline = min(entry[0] for entry in _ACTIVE)
    signal.setitimer(signal.ITIMER_REAL, max(deadline - time.monotonic(), 1e-3), _REPEAT)


@contextmanager
def budget(what: str, *, seconds: float | None = None, advice: str = "", variable: str = "") -> Iterator[None]:
    """Stop the symbolic step run inside this block after ``seconds`` of wall time.

    Parameters
    ----------
    what : str
        The step, as the error names it ("isolating the highest derivatives").
    seconds : float, optional
        The cap (default :func:`step_seconds`).
    advice : str, optional
        What the user can do, appended to the error.
    variable : str, optional
        The environment variable that sets ``seconds``, named in the error (default: the
        step's own, :data:`SECONDS_VARIABLE`, when ``seconds`` is not given).

    Raises
    ------
    ProblemError
        When the step ran out of time: one line naming the step and the cap.
    """
    limit = step_seconds() if seconds is None else seconds
    if not _can_alarm():
        yield  # off the main thread: the size checks are the only bound (see the module docstring)
        return
    ticket = object()
    if not _ACTIVE:
        _SAVED["handler"] = signal.signal(signal.SIGALRM, _ring)
        _SAVED["timer"] = signal.setitimer(signal.ITIMER_REAL, 0)
        _SAVED["since"] = time.monotonic()
    _ACTIVE.append((time.monotonic() + limit, ticket))
    try:
        _arm()
        yield
    except _Expired as expired:
        if expired.ticket is not ticket:
            raise  # an enclosing budget's deadline: it reports
        tail = f"; {advice}" if advice else ""
        setter = SECONDS_VARIABLE if seconds is None else variable or "the time limit"
        raise ProblemError(f"{what} took longer than {limit:g} s and was stopped{tail} (the cap is set by {setter})"
                           ) from None
    finally:
        _ACTIVE[:] = [entry for entry in _ACTIVE if entry[1] is not ticket]
        if _ACTIVE:
            _arm()
        else:
            signal.setitimer(signal.ITIMER_REAL, 0)
            signal.signal(signal.SIGALRM, _SAVED.pop("handler"))
            delay, interval = _SAVED.pop("timer")
            since = _SAVED.pop("since")
            if delay > 0:  # a timer of the program's own: give back what is left of it
                signal.setitimer(signal.ITIMER_REAL, max(delay - (time.monotonic() - since), 1e-3), interval)


@contextmanager
def preparation(what: str, *, deadline: float | None = None, advice: str = "") -> Iterator[None]:
    """A :func:`budget` of :func:`preparation_seconds` around a whole preparation (its steps
    keep their own caps inside it), ended sooner by ``deadline`` (``time.perf_counter()``
    seconds: a solve's time limit)."""
    limit, variable = preparation_seconds(), PREPARATION_VARIABLE
    if deadline is not None and deadline - time.perf_counter() < limit:
        limit, variable = max(deadline - time.perf_counter(), 0.05), "the solve's time_limit"
    with budget(what, seconds=limit, advice=advice, variable=variable):
        yield


def size(expression: Any, limit: int = MAX_NODES) -> int:
    """Nodes of ``expression`` as a tree, counted up to ``limit + 1`` (so a huge one is cheap)."""
    import sympy as sp

    count = 0
    for _ in sp.preorder_traversal(expression):
        count += 1
        if count > limit:
            break
    return count


def check_sizes(items: Mapping[str, Any], *, step: str, limit: int = MAX_NODES, advice: str = "") -> None:
    """Refuse the first expression of ``items`` (name -> expression) with more than ``limit`` nodes.

    Raises
    ------
    ProblemError
        Naming the item, the step that made it and what to do.
    """
    for name, expression in items.items():
        if size(expression, limit) > limit:
            tail = advice or ("simplify it by hand, or split it with an added unknown function "
                              "or constant")
            raise ProblemError(f"{name} grew to more than {limit} operations in {step}; {tail}")
