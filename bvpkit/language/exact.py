"""Exact text of symbolic content, for keys of caches and memos.

SymPy's ordinary printers show a float to the digits of its precision (15 for a double), so
``1.0`` and ``1.0000000000000049`` print alike; a key made of that text would give the
second problem the first one's compiled code. Here every float is written as its exact
binary value (mpmath's ``(sign, mantissa, exponent, bits)``), every other node as SymPy's
``srepr`` shows it (class names, assumptions), and plain Python numbers by ``repr``
(a round trip).
"""

from __future__ import annotations

import hashlib
from typing import Any

from .._lazy import LazyModule

sp = LazyModule("sympy")

_PRINTER = None


def _printer():  # noqa: ANN202 - a ReprPrinter subclass, made on first use (SymPy is lazy)
    global _PRINTER
    if _PRINTER is None:
        from sympy.printing.repr import ReprPrinter

        class _Exact(ReprPrinter):
            def _print_Float(self, e) -> str:  # noqa: ANN001
                return f"Float{tuple(e._mpf_)!r}"

            def _print_Dummy(self, e) -> str:  # noqa: ANN001 - a name, not a per-process index
                return f"Dummy({e.name!r})"

        _PRINTER = _Exact()
    return _PRINTER


def exact_text(item: Any) -> str:
    """``item`` (SymPy objects, strings, numbers, and tuples, lists and dicts of them) as text
    that differs whenever a number in it differs in any bit."""
    if isinstance(item, str | int | float | bool | type(None)):
        return repr(item)
    if isinstance(item, tuple | list):
        inner = ", ".join(exact_text(i) for i in item)
        return f"({inner},)" if isinstance(item, tuple) else f"[{inner}]"
    if isinstance(item, dict):
        return "{" + ", ".join(f"{exact_text(k)}: {exact_text(v)}" for k, v in item.items()) + "}"
    if isinstance(item, sp.Basic):
        return _printer().doprint(item)
    return repr(item)


def exact_key(item: Any) -> str:
    """A 32-hex-digit hash of :func:`exact_text`."""
    return hashlib.sha256(exact_text(item).encode()).hexdigest()[:32]
