"""The one family of bvpkit errors.

Bad input raises a subclass of :class:`BvpkitError` (which is also a ``ValueError``),
with a message a person can act on. A solve that fails does not raise: it returns a
``Solution`` whose ``success`` is False (see :mod:`bvpkit.status`).
"""

from __future__ import annotations

import difflib
from collections.abc import Iterable


class BvpkitError(ValueError):
    """Base class of every error bvpkit raises on purpose."""

    def one_line(self) -> str:
        """The message on one line (for the command line and logs)."""
        return " ".join(part.strip() for part in str(self).splitlines() if part.strip())


class ExpressionError(BvpkitError):
    """An expression string could not be read.

    Parameters
    ----------
    reason : str
        What is wrong, in words.
    text : str, optional
        The whole expression text; quoted in the message with a caret under ``column``.
    column : int, optional
        0-based position of the offending text.
    """

    def __init__(self, reason: str, text: str | None = None, column: int | None = None):
        self.reason = reason
        self.text = text
        self.column = column
        if text is None:
            message = reason
        else:
            shown = text if len(text) <= 200 else text[:200] + "..."
            if column is not None and column <= len(shown):
                message = f"{reason} (column {column + 1})\n    {shown}\n    {' ' * column}^"
            else:
                message = f"{reason}\n    {shown}"
        super().__init__(message)

    def one_line(self) -> str:
        if self.text is None:
            return self.reason
        shown = self.text if len(self.text) <= 80 else self.text[:80] + "..."
        at = f" at column {self.column + 1}" if self.column is not None else ""
        return f"{self.reason}{at} of: {shown}"


class ProblemError(BvpkitError):
    """The problem as posed is not a well-formed boundary-value problem."""


class SpecError(BvpkitError):
    """A TOML spec file is unreadable or does not describe a valid problem."""


class OptionError(BvpkitError):
    """A solver option has a wrong value (unknown method name, negative tolerance, ...)."""


class ProgramError(BvpkitError):
    """Plain data of a generated function (a program, see :mod:`bvpkit.programs.program`) is outside
    its grammar, or an expression cannot be written in it. A cache entry that raises it is
    skipped and regenerated."""


class MissingExtraError(BvpkitError, ImportError):
    """An optional package is needed for this feature and is not installed."""


def closest(name: str, known: Iterable[str]) -> str:
    """Return ``" (did you mean 'x'?)"`` for the closest known name, or ``""``."""
    match = difflib.get_close_matches(name, sorted(set(known)), n=1, cutoff=0.5)
    return f" (did you mean '{match[0]}'?)" if match else ""
