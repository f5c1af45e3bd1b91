"""Shared pieces of the result objects: the confidence interval and how readings print numbers."""

from __future__ import annotations

import dataclasses
import math
import numbers

__all__ = ["ConfidenceInterval", "fmt", "fmt_p", "side_phrase"]


@dataclasses.dataclass(frozen=True, slots=True)
class ConfidenceInterval:
    """A confidence interval ``[low, high]``; one-sided intervals have an infinite end.

    Examples
    --------
    >>> ci = ConfidenceInterval(-1.0, 2.0)
    >>> ci.contains(0.0), ci.width
    (True, 3.0)
    """

    low: float
    high: float

    def __post_init__(self) -> None:
        for name in ("low", "high"):
            value = getattr(self, name)
            if isinstance(value, bool) or not isinstance(value, numbers.Real):
                raise TypeError(f"ConfidenceInterval `{name}` must be a number, got {value!r}")
            if math.isnan(float(value)):
                raise ValueError(f"ConfidenceInterval `{name}` must not be NaN")
            object.__setattr__(self, name, float(value))
        if self.low > self.high:
            raise ValueError(
                f"ConfidenceInterval needs low <= high, got low={self.low!r}, high={self.high!r}"
            )

    @property
    def width(self) -> float:
        return self.high - self.low

    def contains(self, value: float) -> bool:
        """Whether ``low <= value <= high``."""
        return self.low <= value <= self.high

    def inside(self, low: float, high: float) -> bool:
        """Whether the interval lies strictly inside ``(low, high)``."""
        return low < self.low and self.high < high

    def __str__(self) -> str:
        return f"[{fmt(self.low)}, {fmt(self.high)}]"


def fmt(x: float) -> str:
    """Four significant digits, the way readings print numbers."""
    if math.isinf(x):
        return "inf" if x > 0 else "-inf"
    return f"{x:.4g}"


def fmt_p(p: float) -> str:
    """A p-value for a reading: ``p = 0.0312`` or ``p < 1e-300``."""
    if p < 1e-300:
        return "p < 1e-300"
    return f"p = {p:.3g}"


def side_phrase(alternative: str) -> str:
    """``"two-sided"``, ``"one-sided (a > b)"`` or ``"one-sided (a < b)"``."""
    return {
        "two-sided": "two-sided",
        "greater": "one-sided (a > b)",
        "less": "one-sided (a < b)",
    }[alternative]
