"""Property-based verification of BVP models: strategies, manufactured solutions, assertions.

For downstream projects and for bvpkit's own tests::

    from hypothesis import given
    from bvpkit.testing import linear_problems, assert_solves, assert_matches_exact

    @given(linear_problems())
    def test_my_solver_setup(case):
        sol = bvpkit.solve(case.problem, tol=1e-6)
        assert_solves(case.problem, sol)
        assert_matches_exact(sol, case)

Importing this package imports neither pytest nor hypothesis; the strategies import
hypothesis when they are called (it comes with the ``test`` extra). See docs/verification.md.
"""

from __future__ import annotations

from .assertions import (
    VerificationError,
    assert_converges,
    assert_matches_exact,
    assert_methods_agree,
    assert_solves,
)
from .cases import Manufactured
from .profiles import register_profiles, scaled_examples
from .strategies import (
    index_one_problems,
    linear_problems,
    manufactured_problems,
    semi_infinite_problems,
    smooth_functions,
)

__all__ = [
    "Manufactured",
    "VerificationError",
    "assert_converges",
    "assert_matches_exact",
    "assert_methods_agree",
    "assert_solves",
    "index_one_problems",
    "linear_problems",
    "manufactured_problems",
    "register_profiles",
    "scaled_examples",
    "semi_infinite_problems",
    "smooth_functions",
]
