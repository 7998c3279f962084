"""The one list of outcomes: status word, exit code of the command line, and what to try.

Defined once here; the CLI's exit codes and the table in ``docs/failures.md`` come from
this list (a test checks the page against it).
"""

from __future__ import annotations

import enum


class Status(enum.Enum):
    """Outcome of a solve, or a class of command-line failure.

    Each member carries ``(word, exit_code, meaning, what_to_try)``. :attr:`success` is True
    for ``solved`` and for the one warning status, ``nearly_singular``: an answer that meets
    the tolerance, given with a warning about the problem itself.
    """

    SOLVED = ("solved", 0, "the solve converged and its error estimate meets the tolerance", "")
    NEARLY_SINGULAR = (
        "nearly_singular",
        11,
        "solved to the tolerance, with a warning: the linearised problem is nearly singular here "
        "(its stability constant times the tolerance exceeds one), so the answer may not be the "
        "only one, or small changes of the data may change it a lot",
        "a homogeneous problem (zero conditions, zero forcing) has every multiple of a solution as "
        "a solution: add a normalisation, or state it as an eigenvalue problem; near a fold or "
        "branch point, trace the constant (bvpkit trace) to see the family of solutions; near a "
        "resonance, check the constants",
    )
    NOT_CONVERGED = (
        "not_converged",
        3,
        "Newton's method did not converge",
        "give a better guess (guess = ... per function), or trace the solution from an easier "
        "parameter value",
    )
    MESH_LIMIT = (
        "mesh_limit",
        4,
        "the mesh reached its node limit before the residual met the tolerance",
        "raise max_nodes, loosen tol, or give a guess closer to the solution",
    )
    SINGULAR = (
        "singular_jacobian",
        5,
        "the Newton matrix is singular: the conditions do not fix the solution",
        "check that the conditions are independent, and that the guess is not a point "
        "where the problem degenerates (for eigenvalue problems: a non-zero guess)",
    )
    NON_FINITE = (
        "non_finite",
        6,
        "the equations produced NaN or inf",
        "check the guess against the domain of functions such as log and sqrt, or shrink "
        "the domain",
    )
    INTEGRATION_FAILED = (
        "integration_failed",
        7,
        "an initial-value integration blew up or its step size collapsed",
        "use method = \"multiple_shooting\" or \"collocation\"",
    )
    ERROR_TOO_LARGE = (
        "error_too_large",
        8,
        "the solve converged but its error estimate is above the tolerance",
        "raise max_nodes or loosen tol",
    )
    PRECISION_LIMIT = (
        "precision_limit",
        12,
        "the tolerance asked is below what double precision allows for this problem on this "
        "mesh; the accuracy reached is reported",
        "loosen tol to about the accuracy reported (diagnostics.error_estimate), or rescale the "
        "problem so that its values and derivatives are of similar size",
    )
    TRUNCATION = (
        "truncation_not_converged",
        9,
        "the solution kept changing as the infinite domain was truncated further out",
        "check that the conditions at infinity are ones the solution approaches",
    )
    OTHER_MODE = (
        "other_mode",
        10,
        "an eigenvalue was found, but of another mode than the one asked for",
        "give a guess with mode - 1 interior zeros (guess = ...) or ask for a neighbouring mode",
    )
    POINT_LIMIT = (
        "point_limit",
        13,
        "a trace or fold curve spent its budget of points (max_points) before it reached the end of "
        "its range; every point it kept meets the tolerance, and the message says where it stopped",
        "raise max_points (--max-points, or max_points under [trace] or [fold_curve]), or trace a "
        "narrower range",
    )
    NOT_IDENTIFIABLE = (
        "not_identifiable",
        14,
        "a fit converged, but the data do not determine the constants varied one by one: some of "
        "them enter only in a combination (the message names the one the data determine), so "
        "their separate values and errors are not an answer",
        "vary the combination the message names (or one of the constants, the others held), or add "
        "data that tell them apart (another quantity, other points)",
    )
    BAD_INPUT = (
        "bad_input",
        2,
        "the problem, the spec or an option is invalid (nothing was solved)",
        "correct the item the message names",
    )
    INTERRUPTED = ("interrupted", 130, "stopped by Ctrl-C; what was finished is kept", "")
    INTERNAL = (
        "internal_error",
        70,
        "an unexpected error inside bvpkit",
        "report it with the spec that triggers it",
    )

    def __init__(self, word: str, exit_code: int, meaning: str, hint: str):
        self.word = word
        self.exit_code = exit_code
        self.meaning = meaning
        self.hint = hint

    def __str__(self) -> str:
        return self.word

    @property
    def success(self) -> bool:
        """Whether an answer of this status is a success (``solved``, or the warning status)."""
        return self in (Status.SOLVED, Status.NEARLY_SINGULAR)


def failures_table() -> str:
    """The Markdown table of every status, its exit code, meaning and what to try."""
    rows = ["| status | exit code | meaning | what to try |", "| --- | --- | --- | --- |"]
    for s in Status:
        rows.append(f"| `{s.word}` | {s.exit_code} | {s.meaning} | {s.hint or '-'} |")
    return "\n".join(rows) + "\n"


def failures_page() -> str:
    """The whole of ``docs/failures.md`` (regenerate with ``python -m bvpkit.status``)."""
    return (
        "# Failure classes, exit codes and messages\n\n"
        "Every outcome of `bvpkit.solve` has a status word (`Solution.status.word`), and every\n"
        "outcome of the `bvpkit` command an exit code. This page is generated from\n"
        "`bvpkit/status.py` by `python -m bvpkit.status > docs/failures.md`; a test checks that\n"
        "it matches the code.\n\n"
        + failures_table()
        + "\nA bad input (`bad_input`, exit 2) also covers command-line usage errors reported by the\n"
        "argument parser. With `--json`, every failure prints one JSON object\n"
        '`{"success": false, "status": ..., "message": ...}` on standard output.\n'
    )


if __name__ == "__main__":  # pragma: no cover
    print(failures_page(), end="")
