"""Input validation shared by the statistics modules (one ``_<func>_iv`` per public function).

Each helper normalises one kind of argument and raises ``ValueError`` or
``TypeError`` naming the parameter and the bad value, so that a bad call fails
with a message that says what to fix and never produces a silent NaN.
"""

from __future__ import annotations

import math
import numbers
import warnings
from typing import Literal

import numpy as np

from harness.core.errors import TooFewSeedsWarning

__all__ = [
    "ALTERNATIVES",
    "Alternative",
    "as_sample",
    "check_alternative",
    "check_finite_number",
    "check_one_sided_level",
    "check_positive_int",
    "check_probability",
    "check_stage_counts",
    "make_rng",
    "warn_few",
]

Alternative = Literal["two-sided", "less", "greater"]

#: Valid values of every ``alternative`` parameter, in a stable order for messages.
ALTERNATIVES: tuple[str, ...] = ("two-sided", "less", "greater")


def as_sample(x: object, name: str, *, min_size: int = 2) -> np.ndarray:
    """Return ``x`` as a 1-D float64 array of at least ``min_size`` finite values.

    Raises
    ------
    TypeError
        If ``x`` is not a sequence of real numbers.
    ValueError
        If ``x`` is not one-dimensional, is too short, or holds NaN or infinity.
    """
    if isinstance(x, (str, bytes)) or x is None:
        raise TypeError(f"`{name}` must be a sequence of numbers, got {type(x).__name__}")
    try:
        arr = np.asarray(x, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise TypeError(f"`{name}` must be a sequence of real numbers ({exc})") from None
    if arr.ndim != 1:
        raise ValueError(f"`{name}` must be one-dimensional, got an array of shape {arr.shape}")
    if arr.size < min_size:
        raise ValueError(
            f"`{name}` needs at least {min_size} values, got {arr.size}; run more seeds"
        )
    bad = np.flatnonzero(~np.isfinite(arr))
    if bad.size:
        i = int(bad[0])
        raise ValueError(
            f"`{name}` must hold finite numbers, got {arr[i]} at index {i}"
            f" ({bad.size} non-finite value{'s' if bad.size > 1 else ''}); "
            "drop or fix the failed runs first"
        )
    return arr


def check_alternative(alternative: object) -> str:
    """Return ``alternative`` if it is one of :data:`ALTERNATIVES`."""
    if alternative not in ALTERNATIVES:
        listed = ", ".join(repr(a) for a in ALTERNATIVES)
        raise ValueError(f"`alternative` must be one of {listed}, got {alternative!r}")
    return str(alternative)


def check_probability(value: object, name: str) -> float:
    """Return ``value`` as a float strictly between 0 and 1 (alpha, a confidence level, power)."""
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise TypeError(f"`{name}` must be a number in (0, 1), got {value!r}")
    v = float(value)
    if not 0.0 < v < 1.0:
        raise ValueError(f"`{name}` must lie strictly between 0 and 1, got {value!r}")
    return v


def check_finite_number(value: object, name: str) -> float:
    """Return ``value`` as a finite float."""
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise TypeError(f"`{name}` must be a real number, got {value!r}")
    v = float(value)
    if not math.isfinite(v):
        raise ValueError(f"`{name}` must be finite, got {value!r}")
    return v


def check_positive_int(value: object, name: str, *, minimum: int = 1) -> int:
    """Return ``value`` as an int no smaller than ``minimum``."""
    if isinstance(value, bool) or not isinstance(value, numbers.Integral):
        raise TypeError(f"`{name}` must be an integer >= {minimum}, got {value!r}")
    if value < minimum:
        raise ValueError(f"`{name}` must be an integer >= {minimum}, got {value!r}")
    return int(value)


def check_one_sided_level(value: object, name: str) -> float:
    """Return ``value`` as a one-sided significance level, strictly between 0 and 0.5."""
    a = check_probability(value, name)
    if a >= 0.5:
        raise ValueError(f"`{name}` is a one-sided level and must be below 0.5, got {value!r}")
    return a


def check_stage_counts(stages: object, name: str, *, strict: bool) -> tuple[int, ...]:
    """Return seed counts per look (at least 2 each), strictly increasing or (``strict=False``) non-decreasing."""
    if isinstance(stages, (str, bytes)) or not hasattr(stages, "__iter__"):
        raise TypeError(f"`{name}` must be a sequence of seed counts, got {stages!r}")
    values = tuple(check_positive_int(v, f"{name}[{i}]", minimum=2) for i, v in enumerate(stages))
    if not values:
        raise ValueError(f"`{name}` must name at least one look, got {stages!r}")
    for i in range(1, len(values)):
        if values[i] < values[i - 1] or (strict and values[i] == values[i - 1]):
            kind = "strictly increasing" if strict else "non-decreasing"
            raise ValueError(
                f"`{name}` must be {kind} seed counts (at least 2 each), got {stages!r}; "
                f"look {i + 1} has {values[i]} after {values[i - 1]}"
            )
    return values


def make_rng(rng: object) -> np.random.Generator:
    """A Generator from ``rng``: ``None`` (fresh entropy), an int, a SeedSequence or a Generator.

    Integers and ``None`` go through :class:`numpy.random.SeedSequence`; the
    global ``np.random`` state is never used.
    """
    if isinstance(rng, np.random.Generator):
        return rng
    if rng is None or isinstance(rng, np.random.SeedSequence):
        return np.random.default_rng(rng if rng is not None else np.random.SeedSequence())
    if isinstance(rng, numbers.Integral) and not isinstance(rng, bool) and rng >= 0:
        return np.random.default_rng(np.random.SeedSequence(int(rng)))
    raise TypeError(
        "`rng` must be None, a non-negative int, a numpy SeedSequence or a numpy Generator, "
        f"got {rng!r}"
    )


def warn_few(n: int, minimum: int, what: str) -> None:
    """Emit :class:`~harness.core.errors.TooFewSeedsWarning` when ``n < minimum``."""
    if n < minimum:
        warnings.warn(
            TooFewSeedsWarning(
                f"{what} with {n} seeds per group is unreliable (use at least {minimum})"
            ),
            stacklevel=3,
        )
