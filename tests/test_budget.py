"""Budgets on symbolic work (bvpkit.language.budget) and the hostile problems that needed them.

Each hostile problem below is built in a child process, which must answer (a Problem, or
one bvpkit error) within 30 s of wall time and 1 GB of peak resident memory, measured in
that child with ``resource.getrusage``. Before the budgets and the number checks, the
symbolic ones ran for minutes in SymPy and the numeric ones ended in raw Python errors.
"""

import json
import signal
import subprocess
import sys
import textwrap
import threading
import time

import pytest

import bvpkit
from bvpkit.language import budget as budget_module
from bvpkit.language.budget import budget, check_sizes

SECONDS, MEGABYTES = 30.0, 1000


def _spin(seconds: float) -> None:
    """Pure-Python work, as SymPy's is, that swallows ordinary exceptions as SymPy sometimes does."""
    end = time.monotonic() + seconds
    while time.monotonic() < end:
        try:
            sum(range(1000))
        except Exception:  # noqa: BLE001, S110 - the budget must get through this
            pass


def test_a_step_past_its_cap_is_stopped_with_one_error_naming_it():
    start = time.monotonic()
    with pytest.raises(bvpkit.ProblemError, match="spinning took longer than 0.2 s and was stopped; do less"):
        with budget("spinning", seconds=0.2, advice="do less"):
            _spin(30)
    assert time.monotonic() - start < 5


def test_a_step_within_its_cap_is_untouched_and_the_timer_is_given_back():
    fired = []
    previous = signal.signal(signal.SIGALRM, lambda *a: fired.append(True))
    try:
        signal.setitimer(signal.ITIMER_REAL, 0.6)
        with budget("quick", seconds=5):
            _spin(0.05)
        assert signal.getsignal(signal.SIGALRM) is not budget_module._ring
        assert 0 < signal.getitimer(signal.ITIMER_REAL)[0] <= 0.6  # the program's own timer still runs
        time.sleep(0.8)
        assert fired == [True]
    finally:
        signal.setitimer(signal.ITIMER_REAL, 0)
        signal.signal(signal.SIGALRM, previous)


def test_nested_budgets_report_the_one_whose_deadline_passed():
    with pytest.raises(bvpkit.ProblemError, match="^inner took longer"):
        with budget("outer", seconds=20):
            with budget("inner", seconds=0.2):
                _spin(30)
    with pytest.raises(bvpkit.ProblemError, match="^outer took longer"):
        with budget("outer", seconds=0.3):
            with budget("inner", seconds=20):
                _spin(30)
    assert not budget_module._ACTIVE


def test_off_the_main_thread_the_budget_stands_aside():
    outcome = []

    def work():
        try:
            with budget("in a thread", seconds=0.05):
                _spin(0.3)
            outcome.append("finished")
        except BaseException as err:  # noqa: BLE001
            outcome.append(repr(err))

    thread = threading.Thread(target=work)
    thread.start()
    thread.join(10)
    assert outcome == ["finished"]


def test_the_cap_comes_from_the_environment(monkeypatch):
    monkeypatch.setenv(budget_module.SECONDS_VARIABLE, "0.1")
    with pytest.raises(bvpkit.ProblemError, match="longer than 0.1 s"):
        with budget("spinning"):
            _spin(30)
    monkeypatch.setenv(budget_module.SECONDS_VARIABLE, "nonsense")
    assert budget_module.step_seconds() == budget_module.STEP_SECONDS


def test_size_checks_name_the_item_and_count_cheaply():
    import sympy as sp

    x = sp.Symbol("x")
    small, big = x + 1, sp.Add(*[sp.Symbol(f"a{i}") * x**i for i in range(3000)])
    check_sizes({"the small one": small}, step="a test")
    with pytest.raises(bvpkit.ProblemError, match="the big one grew to more than 1000 operations in a test"):
        check_sizes({"the small one": small, "the big one": big}, step="a test", limit=1000)
    assert budget_module.size(big, 10) == 11  # stops counting past the limit


# -- the hostile problems of issue 17, built programmatically --------------------------------
def _chain(n=300):
    return dict(equations=[f"u{i}'' = u{(i + 1) % n} - u{i}" for i in range(n)],
                conditions=[f"u{i}(0) = 0" for i in range(n)] + [f"u{i}(1) = 1" for i in range(n)], domain=(0, 1))


def _nonlinear_tops():
    return dict(equations=["f''**3 + g''**2 + h'' = f", "g''**3 + h''**2 + f'' = g", "h''**3 + f''**2 + g'' = h"],
                conditions=[f"{n}(0) = 0" for n in "fgh"] + [f"{n}(1) = 1" for n in "fgh"], domain=(0, 1))


def _power_condition():
    return dict(equations=["u'' - (1 - u**2)*u' + u = 0"],
                conditions=["(u(0) - u(T))**1000 = 0", "u'(0) = u'(T)", "u(0) = 2"],
                domain=(0, "T"), unknown_parameters={"T": 6.0})


def _high_order(n=25, order=12):
    names = [f"w{i}" for i in range(n)]
    conditions = []
    for name in names:
        conditions += [f"{name}{chr(39) * k}(0) = 0" for k in range(order // 2)]
        conditions += [f"{name}{chr(39) * k}(1) = 1" for k in range(order // 2)]
    equations = [f"{names[i]}{chr(39) * order} = {names[(i + 1) % n]}*{names[i]}" for i in range(n)]
    equations[0] += " - " + "*".join(f"(x + {i})" for i in range(1, 21)) + f"/x*{names[0]}'"
    return dict(equations=equations, conditions=conditions, domain=(0, 1))


def _singular_product():
    product = "*".join(f"(x + k{i})" for i in range(1, 21))
    return dict(equations=[f"y'' + {product}/x*y' = y"], conditions=["y'(0) = 0", "y(1) = 1"], domain=(0, 1),
                constants={f"k{i}": float(i) for i in range(1, 21)})


def _big_numbers():
    return dict(equations=["y'' = " + "*".join(["2**1000"] * 20) + "*y"], conditions=["y(0) = 0", "y(1) = 1"],
                domain=(0, 1))


def _end_towers():
    return dict(equations=["y'' = -y"], conditions=["y(0) = 0", "y(1) = 1"], domain=(0, "exp(exp(exp(exp(10))))"))


HOSTILE = {name: make for name, make in globals().items() if name.startswith("_") and callable(make)
           and name in ("_chain", "_nonlinear_tops", "_power_condition", "_high_order", "_singular_product",
                        "_big_numbers", "_end_towers")}

CHILD = textwrap.dedent(
    """
    import json, resource, sys, time
    sys.path.insert(0, sys.argv[2])
    import bvpkit, test_budget
    start = time.perf_counter()
    try:
        problem = bvpkit.Problem(**test_budget.HOSTILE[sys.argv[1]]())
        bvpkit.prepare(problem)
        outcome = "built"
    except bvpkit.BvpkitError as err:
        outcome = err.one_line()
    print(json.dumps({"outcome": outcome, "seconds": time.perf_counter() - start,
                      "megabytes": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024}))
    """
)


#: The two cases that take 10 s or more run with the slow tests; the default run keeps the rest.
_SLOW_CASES = {"_chain", "_singular_product"}


@pytest.mark.parametrize("name", [pytest.param(n, marks=pytest.mark.slow) if n in _SLOW_CASES else n
                                  for n in sorted(HOSTILE)])
def test_hostile_problems_are_answered_within_30_s_and_1_gb(name, tmp_path):
    import os
    from pathlib import Path

    env = {**os.environ, "BVPKIT_CACHE_DIR": "off"}
    out = subprocess.run([sys.executable, "-c", CHILD, name, str(Path(__file__).parent)], capture_output=True,
                         text=True, timeout=120, env=env)
    assert out.returncode == 0, out.stderr[-2000:]
    report = json.loads(out.stdout.strip().splitlines()[-1])
    assert report["seconds"] < SECONDS, report
    assert report["megabytes"] < MEGABYTES, report
    assert "\n" not in report["outcome"] and report["outcome"], report


# -- the preparation as a whole, and the continuation's inside the solve's time limit --------
def _small_chain(n=30):
    # a small constant multiplying each highest derivative: the continuation's facts look for it
    return bvpkit.Problem([f"eps*u{i}'' = u{(i + 1) % n} - u{i}" for i in range(n)],
                          [f"u{i}(0) = 0" for i in range(n)] + [f"u{i}(1) = 1" for i in range(n)], (0, 1),
                          constants={"eps": 1e-3})


def test_the_continuations_facts_differentiate_each_equation_once_not_by_every_unknown(monkeypatch):
    import sympy as sp

    from bvpkit.solver import homotopy

    prepared = bvpkit.prepare(_small_chain())
    calls = []
    diff = sp.diff
    monkeypatch.setattr(sp, "diff", lambda *args, **kwargs: calls.append(1) or diff(*args, **kwargs))
    found = homotopy._facts(prepared)
    assert found.small == {"eps": 1e-3}
    # once per equation for its highest derivative, and once per state in each row of the
    # first-order form (60 rows, two states each at most): not 30 x 30 for the first part
    assert len(calls) <= 30 + 2 * 60


def test_the_continuations_preparation_stops_at_the_solves_time_limit(monkeypatch):
    from bvpkit.solver import homotopy

    prepared = bvpkit.prepare(_small_chain(3))
    homotopy._FACTS.clear()
    monkeypatch.setattr(homotopy, "_facts", lambda p: _spin(30))  # symbolic work that would run on
    with pytest.raises(bvpkit.ProblemError, match="continuation's paths took longer than .* time_limit"):
        homotopy.facts(prepared, deadline=time.perf_counter() + 0.2)


def test_a_preparation_as_a_whole_is_bounded_and_says_how_to_raise_the_bound(monkeypatch):
    from bvpkit.programs import codegen
    from bvpkit.reduce import prepared

    monkeypatch.setenv(budget_module.PREPARATION_VARIABLE, "0.3")
    monkeypatch.setattr(codegen, "_system_programs", lambda form: _spin(30))
    codegen._MEMORY.clear()
    prepared._PREPARED.clear()
    monkeypatch.setenv("BVPKIT_CACHE_DIR", "off")
    with pytest.raises(bvpkit.ProblemError, match="preparing the problem .* took longer than 0.3 s .*"
                                                  "BVPKIT_PREPARATION_SECONDS"):
        bvpkit.prepare(bvpkit.Problem(["y'' = -y*y + x"], ["y(0) = 0", "y(1) = 1"], (0, 1)))
