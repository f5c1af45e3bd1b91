"""Reading JSON that arrives as data (results, baselines, cache entries): strict parsing and typed fields.

Anyone can recompute a checksum, so a file that passes it is still only data: these helpers
make every reader refuse, with a ``ValueError`` naming the field, what Python's ``json`` module
would let through or turn into a crash further on: ``NaN``/``Infinity`` literals, numbers that
overflow a float, integers of thousands of digits, nesting deep enough to exhaust the stack,
booleans where numbers belong (``true`` is 1 to Python), strings or fractions where integers
belong. Callers wrap the ``ValueError`` into their own error naming the file and the fix.
"""

from __future__ import annotations

import json
import math
from collections.abc import Mapping
from typing import Any

__all__ = ["MAX_ABS_NUMBER", "MAX_DEPTH", "as_int", "as_mapping", "as_number", "as_str", "loads_strict"]

#: Deepest nesting of arrays and objects accepted; rl-harness files nest fewer than 10 levels.
MAX_DEPTH = 64

#: Largest magnitude of a number read as data (a return, a mean). Far beyond any episode return,
#: and small enough that sums of squares of thousands of them stay finite in float64 (about 1.8e308).
MAX_ABS_NUMBER = 1e100


def _refuse_constant(name: str) -> Any:
    raise ValueError(f"the literal {name} is not a number JSON allows; the file was not written by rl-harness")


def _finite_float(text: str) -> float:
    value = float(text)
    if not math.isfinite(value):
        raise ValueError(f"the number {text[:40]} overflows a float")
    return value


def _depth(value: Any) -> int:
    """Nesting depth, iteratively (a recursive walk is what deep nesting is meant to break)."""
    deepest, stack = 0, [(value, 1)]
    while stack:
        item, level = stack.pop()
        if isinstance(item, (dict, list)):
            deepest = max(deepest, level)
            if level > MAX_DEPTH:
                return level
            stack.extend((v, level + 1) for v in (item.values() if isinstance(item, dict) else item))
    return deepest


def loads_strict(text: str) -> Any:
    """``json.loads`` that raises ``ValueError`` for non-standard constants, overflowing or huge
    numbers (Python's 4300-digit integer limit) and nesting deeper than :data:`MAX_DEPTH`.

    ``json.JSONDecodeError`` (a ``ValueError``) keeps its line and column for syntax errors.
    """
    try:
        data = json.loads(text, parse_constant=_refuse_constant, parse_float=_finite_float)
    except RecursionError:
        raise ValueError(f"nested more than {MAX_DEPTH} levels deep") from None
    if _depth(data) > MAX_DEPTH:
        raise ValueError(f"nested more than {MAX_DEPTH} levels deep")
    return data


def as_int(value: Any, key: str, *, minimum: int | None = None) -> int:
    """``value`` if it is a JSON integer (not a boolean, fraction or string) of at least ``minimum``."""
    if isinstance(value, bool) or not isinstance(value, int):
        raise ValueError(f"[{key}] must be an integer, got {_show(value)}")
    if minimum is not None and value < minimum:
        raise ValueError(f"[{key}] must be at least {minimum}, got {value}")
    return value


def as_number(value: Any, key: str) -> float:
    """``value`` as a float if it is a JSON number (not a boolean or string) within :data:`MAX_ABS_NUMBER`."""
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise ValueError(f"[{key}] must be a number, got {_show(value)}")
    try:
        number = float(value)
    except OverflowError:
        raise ValueError(f"[{key}] is too large for a float: {_show(value)}") from None
    if not math.isfinite(number) or abs(number) > MAX_ABS_NUMBER:
        raise ValueError(f"[{key}] must be finite and within ±{MAX_ABS_NUMBER:g}, got {number:g}")
    return number


def as_str(value: Any, key: str) -> str:
    """``value`` if it is a JSON string."""
    if not isinstance(value, str):
        raise ValueError(f"[{key}] must be a string, got {_show(value)}")
    return value


def as_mapping(value: Any, key: str) -> Mapping[str, Any]:
    """``value`` if it is a JSON object."""
    if not isinstance(value, Mapping):
        raise ValueError(f"[{key}] must be an object, got {_show(value)}")
    return value


def _show(value: Any) -> str:
    text = repr(value) if not isinstance(value, int) or value.bit_length() < 200 else f"an integer of {value.bit_length()} bits"
    return f"{type(value).__name__} {text[:60]}"
