"""Power of Welch's t-test: the power for a difference, the smallest detectable difference, seeds needed."""

from __future__ import annotations

from scipy import optimize as _opt
from scipy import stats as _st

from harness.stats._validate import (
    Alternative,
    check_alternative,
    check_finite_number,
    check_positive_int,
    check_probability,
)
from harness.stats.welch import welch_moments

__all__ = ["minimum_detectable_difference", "power_of", "seeds_needed"]

#: seeds_needed gives up above this many seeds per group.
_MAX_SEEDS = 10_000_000


def _sd_iv(sd: object, name: str) -> float:
    v = check_finite_number(sd, name)
    if v < 0:
        raise ValueError(f"`{name}` must be >= 0, got {sd!r}")
    return v


def _spread(sd_a: float, n_a: int, sd_b: float, n_b: int) -> tuple[float, float]:
    _, se, df = welch_moments(0.0, sd_a**2, n_a, 0.0, sd_b**2, n_b)
    if se == 0.0:
        raise ValueError(
            "`sd_a` and `sd_b` are both 0: with no spread any difference is detected with "
            "certainty, so power is not defined; give the observed standard deviations"
        )
    return se, df


def _power(difference: float, se: float, df: float, alpha: float, alternative: str) -> float:
    nc = difference / se
    if alternative == "two-sided":
        q = float(_st.t.ppf(1.0 - alpha / 2.0, df))
        return float(_st.nct.sf(q, df, nc) + _st.nct.cdf(-q, df, nc))
    q = float(_st.t.ppf(1.0 - alpha, df))
    if alternative == "greater":
        return float(_st.nct.sf(q, df, nc))
    return float(_st.nct.cdf(-q, df, nc))


def power_of(
    difference: float,
    sd_a: float,
    n_a: int,
    sd_b: float,
    n_b: int,
    *,
    alpha: float = 0.05,
    alternative: Alternative = "two-sided",
) -> float:
    """Probability that Welch's t-test at level ``alpha`` detects a true ``mean(a) - mean(b)``.

    Parameters
    ----------
    difference
        The true difference of means (negative for a decrease).
    sd_a, n_a, sd_b, n_b
        Standard deviation and number of seeds of each group.
    alpha, alternative
        Level and alternative of the test.

    Notes
    -----
    Under the alternative, ``t`` follows a noncentral t with noncentrality
    ``difference / sqrt(sd_a^2/n_a + sd_b^2/n_b)`` and the Welch–Satterthwaite
    degrees of freedom (``n_a + n_b - 2`` when the spreads and sizes are equal,
    which is Cohen's setting).

    References
    ----------
    .. [1] Cohen, J. (1988). Statistical Power Analysis for the Behavioral
       Sciences, 2nd ed., chapter 2. Erlbaum.
    .. [2] Welch, B. L. (1947). Biometrika 34:28–35.

    Examples
    --------
    >>> round(power_of(0.5, 1.0, 5, 1.0, 5), 3)
    0.108
    """
    d = check_finite_number(difference, "difference")
    se, df = _spread(
        _sd_iv(sd_a, "sd_a"), check_positive_int(n_a, "n_a", minimum=2),
        _sd_iv(sd_b, "sd_b"), check_positive_int(n_b, "n_b", minimum=2),
    )  # fmt: skip
    return _power(d, se, df, check_probability(alpha, "alpha"), check_alternative(alternative))


def _power_target_iv(power: object, alpha: float) -> float:
    target = check_probability(power, "power")
    if target <= alpha:
        raise ValueError(f"`power` must exceed `alpha` ({alpha}), got {power!r}")
    return target


def minimum_detectable_difference(
    sd_a: float,
    n_a: int,
    sd_b: float,
    n_b: int,
    *,
    alpha: float = 0.05,
    power: float = 0.8,
    alternative: Alternative = "two-sided",
) -> float:
    """The smallest true difference Welch's t-test detects with probability ``power``.

    Returns the magnitude (a positive number); for ``alternative="less"`` it is
    the size of a decrease.

    References
    ----------
    .. [1] Cohen, J. (1988). Statistical Power Analysis for the Behavioral Sciences, 2nd ed.

    Examples
    --------
    >>> round(minimum_detectable_difference(1.0, 10, 1.0, 10), 3)
    1.325
    """
    se, df = _spread(
        _sd_iv(sd_a, "sd_a"), check_positive_int(n_a, "n_a", minimum=2),
        _sd_iv(sd_b, "sd_b"), check_positive_int(n_b, "n_b", minimum=2),
    )  # fmt: skip
    alpha = check_probability(alpha, "alpha")
    target = _power_target_iv(power, alpha)
    alternative = check_alternative(alternative)
    sign = -1.0 if alternative == "less" else 1.0

    def gap(delta: float) -> float:
        return _power(sign * delta, se, df, alpha, alternative) - target

    high = se
    while gap(high) < 0:
        high *= 2.0
    return float(_opt.brentq(gap, 0.0, high, xtol=1e-12 * high, rtol=1e-12))


def seeds_needed(
    difference: float,
    sd_a: float,
    sd_b: float,
    *,
    alpha: float = 0.05,
    power: float = 0.8,
    alternative: Alternative = "two-sided",
) -> int:
    """Seeds per group (equal groups) for Welch's t-test to detect ``difference`` with ``power``.

    ``difference`` must point the way of a one-sided ``alternative``
    (positive for ``"greater"``, negative for ``"less"``).

    References
    ----------
    .. [1] Cohen, J. (1988). Statistical Power Analysis for the Behavioral
       Sciences, 2nd ed., Table 2.4.1. Erlbaum.

    Examples
    --------
    >>> seeds_needed(0.5, 1.0, 1.0)
    64
    """
    d = check_finite_number(difference, "difference")
    sa, sb = _sd_iv(sd_a, "sd_a"), _sd_iv(sd_b, "sd_b")
    alpha = check_probability(alpha, "alpha")
    target = _power_target_iv(power, alpha)
    alternative = check_alternative(alternative)
    if d == 0 or (alternative == "greater" and d < 0) or (alternative == "less" and d > 0):
        need = {"greater": "positive", "less": "negative"}.get(alternative, "non-zero")
        raise ValueError(
            f"`difference` must be {need} for alternative={alternative!r}, got {difference!r}"
        )

    def enough(n: int) -> bool:
        se, df = _spread(sa, n, sb, n)
        return _power(d, se, df, alpha, alternative) >= target

    high = 2
    while not enough(high):
        if high >= _MAX_SEEDS:
            raise ValueError(
                f"more than {_MAX_SEEDS} seeds per group would be needed to detect {difference!r}; "
                "the difference is negligible against the spread"
            )
        high *= 2
    low = max(2, high // 2)
    if enough(low):
        return low
    while high - low > 1:
        mid = (low + high) // 2
        if enough(mid):
            high = mid
        else:
            low = mid
    return high
