"""A new user's second walk through bvpkit: a length written once as a number and once as a
name, requested points in traces, a trace that reaches its point budget, free ends from rough
starts, powers of the independent variable written as decimals, a failed solve's parameters,
a picture of one solution, error estimates in tables, what `check` refuses, tables handed to
pandas and xarray."""

from __future__ import annotations

import numpy as np
import pytest

import bvpkit
from bvpkit.errors import ProblemError

# -- a length written once as a number and once as a name --------------------------------------
BEAM = dict(constants={"L": 4.0, "EI": 2.1e3, "q": 750.0})


def test_a_condition_at_a_named_end_of_a_numeric_domain_is_a_condition_at_that_end():
    p = bvpkit.Problem(["EI*w'''' = q"], ["w(0) = 0", "w''(0) = 0", "w(L) = 0", "w''(L) = 0"], (0, 4.0), **BEAM)
    sol = bvpkit.solve(p, tol=1e-10)
    assert sol.success, sol.message
    # analytic (Euler-Bernoulli, simply supported, uniform load q in the direction of w):
    # w(L/2) = 5 q L^4 / (384 EI)
    assert sol.evaluate("w(2)") == pytest.approx(5 * 750.0 * 4.0**4 / (384 * 2.1e3), abs=1e-7)
    # the end took the name: a change of L moves it with the conditions written there
    longer = bvpkit.solve(p.with_constants(L=5.0), tol=1e-10)
    assert longer.evaluate("w(L/2)") == pytest.approx(5 * 750.0 * 5.0**4 / (384 * 2.1e3), abs=1e-7)


def test_a_number_in_a_condition_beside_a_named_end_is_still_refused_with_the_way_out():
    # the number would not follow the name when L changes: refused, saying to write the end itself
    with pytest.raises(ProblemError, match=r"lies on an end of the domain \[0, L\] = \[0, 4\]: write a condition "
                                           r"there at the end itself \(L\)"):
        bvpkit.Problem(["EI*w'''' = q"], ["w(0) = 0", "w''(0) = 0", "w(4) = 0", "w''(L) = 0"], (0, "L"), **BEAM)
