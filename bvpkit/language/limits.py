"""The range of numbers bvpkit accepts, checked where each number is read (no SymPy here).

Constants, unknown-parameter guesses, domain ends and the numbers an expression builds
(literals, and products, powers and functions of numbers) must be zero or have a magnitude
from :data:`SMALLEST` to :data:`LARGEST`:

* ``LARGEST = 1e300`` and not the float maximum 1.8e308: a value at the very edge of the
  range leaves no room for the arithmetic of a solve (a product with a mesh step, a
  Jacobian entry, a squared residual) before it overflows to ``inf``; eight decades of
  headroom keep such intermediate values finite, and no physical input comes near 1e300.
* ``SMALLEST = 1e-300``: below about 2.2e-308 floats are subnormal (5e-324 holds one
  significant bit), and a reciprocal of anything below 1e-300 is already beyond
  ``LARGEST``. A value that small is a typing error or an underflow, not a datum.

Each refusal is one :class:`~bvpkit.errors.ProblemError` naming the item. This module is
imported on the cached path (``Problem.with_constants``), so it stays free of SymPy.
"""

from __future__ import annotations

import math
import numbers

from ..errors import ProblemError

#: Largest magnitude accepted for any number (see the module docstring for why not 1.8e308).
LARGEST = 1e300
#: Smallest non-zero magnitude accepted (below it floats lose their precision).
SMALLEST = 1e-300

_LOG10_LARGEST = 300
_LOG10_SMALLEST = -300


def in_range(value: float) -> bool:
    """Whether a finite float lies in the accepted range (zero included)."""
    magnitude = abs(value)
    return magnitude == 0.0 or SMALLEST <= magnitude <= LARGEST


def integer_in_range(numerator: int, denominator: int = 1) -> bool:
    """Whether the exact rational ``numerator / denominator`` lies in the accepted range.

    Decided on bit lengths first, so a huge integer is never converted to text or float
    (Python refuses ``str`` of an integer above 4300 digits, and ``float`` above 1e308).
    """
    p, q = abs(int(numerator)), abs(int(denominator))
    if p == 0:
        return True
    # log10(p/q) lies within one bit (0.31 decades) of (bits(p) - bits(q)) * log10(2)
    estimate = (p.bit_length() - q.bit_length()) * math.log10(2)
    if estimate > _LOG10_LARGEST + 1 or estimate < _LOG10_SMALLEST - 1:
        return False
    return 10**-_LOG10_SMALLEST * p >= q and p <= 10**_LOG10_LARGEST * q


def describe(value: object) -> str:
    """A short text of a number for messages (a huge integer by its size, not its digits)."""
    if isinstance(value, numbers.Integral) and not isinstance(value, bool) and int(value).bit_length() > 64:
        return f"an integer of about {int(int(value).bit_length() * math.log10(2)) + 1} digits"
    try:
        text = repr(value) if isinstance(value, str | float) else str(value)
    except ValueError:  # an expression holding an integer beyond Python's limit on digits
        return "a number with too many digits"
    return text if len(text) <= 40 else text[:37] + "..."


def check_value(value: object, what: str) -> float:
    """``value`` as a float in the accepted range, or one :class:`ProblemError` naming ``what``.

    Parameters
    ----------
    value : int, float, or anything with ``__float__`` (NumPy and SymPy numbers)
    what : str
        The item, as the message names it (``"constant 'k'"``).
    """
    if isinstance(value, bool):
        raise ProblemError(f"{what}: expected a number, got {value!r}")
    outside = (f"{what}: {describe(value)} is outside the accepted range "
               f"(zero, or magnitudes from {SMALLEST:g} to {LARGEST:g})")
    if isinstance(value, numbers.Rational):  # int, Fraction, NumPy and SymPy integers: exactly
        if not integer_in_range(value.numerator, value.denominator):
            raise ProblemError(outside)
        return float(value)
    try:
        number = float(value)  # type: ignore[arg-type]  # numpy scalars, sympy numbers
    except OverflowError:
        raise ProblemError(outside) from None
    except (TypeError, ValueError):
        raise ProblemError(f"{what}: expected a real number, got {describe(value)}") from None
    if math.isnan(number) or number in (math.inf, -math.inf) and not _is_big(value):
        raise ProblemError(f"{what}: expected a finite number, got {describe(value)}")
    if not in_range(number):  # also a finite expression whose value overflowed (Float('1e600'))
        raise ProblemError(outside)
    return number


def check_end(value: object, what: str) -> float:
    """A domain end: like :func:`check_value`, but ``-inf`` and ``inf`` are ends too."""
    try:
        number = float(value)  # type: ignore[arg-type]
    except (TypeError, ValueError, OverflowError):
        number = math.nan
    if number in (math.inf, -math.inf) and not isinstance(value, numbers.Rational) and not _is_big(value):
        return number
    return check_value(value, what)


def _is_big(value: object) -> bool:
    """A float-like number that overflowed on conversion (a SymPy ``Float('1e600')``), not ``inf``."""
    try:
        return bool(abs(value) != math.inf)  # type: ignore[arg-type]
    except (TypeError, ValueError, OverflowError):
        return False
