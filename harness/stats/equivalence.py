"""Equivalence of two groups within a margin: two one-sided tests (TOST) on Welch's statistic."""

from __future__ import annotations

import dataclasses
import math
import numbers

import numpy as np
from scipy import stats as _st

from harness.stats._result import ConfidenceInterval, fmt, fmt_p
from harness.stats._validate import as_sample, check_finite_number, check_probability
from harness.stats.welch import summary_moments, t_pvalue, welch_moments

__all__ = [
    "EquivalenceResult",
    "equivalence_test",
    "equivalence_test_from_stats",
    "ratio_margin",
    "relative_margin",
]


@dataclasses.dataclass(frozen=True, slots=True)
class EquivalenceResult:
    """Outcome of an equivalence test of ``mean(a) - mean(b)`` against a margin.

    Attributes
    ----------
    estimate
        ``mean(a) - mean(b)``.
    interval
        The ``(1 - 2 alpha)`` Welch interval of the difference.
    pvalue
        The TOST p-value: the larger of the two one-sided p-values.
    margin
        ``(low, high)``: the differences deemed negligible, ``low < 0 < high``.
    equivalent
        True when both one-sided tests reject at ``alpha``, i.e. when
        ``interval`` lies strictly inside ``margin``.
    alpha, df, standard_error, method, reading
        The level, Welch–Satterthwaite df, standard error, method name and a
        one-sentence reading.
    """

    estimate: float
    interval: ConfidenceInterval
    pvalue: float
    margin: tuple[float, float]
    equivalent: bool
    alpha: float
    df: float
    standard_error: float
    method: str
    reading: str


def _margin_iv(margin: object) -> tuple[float, float]:
    if isinstance(margin, numbers.Real) and not isinstance(margin, bool):
        m = check_finite_number(margin, "margin")
        if m <= 0:
            raise ValueError(
                f"`margin` must be positive (the half-width of the equivalence region), got {margin!r}"
            )
        return (-m, m)
    if isinstance(margin, (tuple, list)) and len(margin) == 2:
        low = check_finite_number(margin[0], "margin[0]")
        high = check_finite_number(margin[1], "margin[1]")
        if not low < 0.0 < high:
            raise ValueError(
                f"`margin` as (low, high) needs low < 0 < high, got ({margin[0]!r}, {margin[1]!r})"
            )
        return (low, high)
    raise TypeError(f"`margin` must be a positive number or a (low, high) pair, got {margin!r}")


def _tost(mean_a, var_a, n_a, mean_b, var_b, n_b, margin, alpha) -> EquivalenceResult:
    estimate, se, df = welch_moments(mean_a, var_a, n_a, mean_b, var_b, n_b)
    low, high = margin
    if se == 0.0:
        inside = low < estimate < high
        pvalue = 0.0 if inside else 1.0
        interval = ConfidenceInterval(estimate, estimate)
    else:
        p_low = t_pvalue((estimate - low) / se, df, "greater")
        p_high = t_pvalue((estimate - high) / se, df, "less")
        pvalue = max(p_low, p_high)
        half = float(_st.t.ppf(1.0 - alpha, df)) * se
        interval = ConfidenceInterval(estimate - half, estimate + half)
    equivalent = pvalue < alpha
    level = 100 * (1 - 2 * alpha)
    verdict = (
        "equivalent within the margin"
        if equivalent
        else "equivalence not shown (the interval reaches past the margin)"
    )
    degenerate = " (both groups are constant)" if se == 0.0 else ""
    reading = (
        f"mean(a) - mean(b) = {fmt(estimate)}, {fmt(level)}% CI {interval}{degenerate} against the "
        f"margin ({fmt(low)}, {fmt(high)}); TOST {fmt_p(pvalue)}: {verdict} at alpha = {fmt(alpha)}."
    )
    return EquivalenceResult(
        estimate=estimate,
        interval=interval,
        pvalue=pvalue,
        margin=(low, high),
        equivalent=bool(equivalent),
        alpha=alpha,
        df=df,
        standard_error=se,
        method="two one-sided Welch t-tests (TOST)",
        reading=reading,
    )


def _alpha_iv(alpha: object) -> float:
    a = check_probability(alpha, "alpha")
    if a >= 0.5:
        raise ValueError(f"`alpha` must be below 0.5 for a (1 - 2 alpha) interval, got {alpha!r}")
    return a


def equivalence_test(
    a: object,
    b: object,
    *,
    margin: float | tuple[float, float],
    alpha: float = 0.05,
) -> EquivalenceResult:
    """Test that ``mean(a) - mean(b)`` lies within ``margin`` (two one-sided tests).

    Parameters
    ----------
    a, b
        Per-seed values of the two groups.
    margin
        A positive number ``m`` for the region ``(-m, m)``, or a ``(low, high)``
        pair with ``low < 0 < high``. See :func:`relative_margin` and
        :func:`ratio_margin` for margins given as a fraction or a ratio.
    alpha
        Level of each one-sided test, in ``(0, 0.5)``.

    Returns
    -------
    EquivalenceResult

    Notes
    -----
    Equivalence is shown when both ``H0: diff <= low`` and ``H0: diff >= high``
    are rejected by one-sided Welch t-tests at level ``alpha``; this is the same
    as the ``(1 - 2 alpha)`` Welch interval lying inside the margin. If both
    groups are constant, the documented degenerate result has a zero-width
    interval, ``pvalue = 0`` when the difference is inside the margin and 1
    otherwise.

    References
    ----------
    .. [1] Schuirmann, D. J. (1987). A comparison of the two one-sided tests
       procedure and the power approach for assessing the equivalence of average
       bioavailability. J. Pharmacokinetics and Biopharmaceutics 15:657–680.
    .. [2] Welch, B. L. (1947). Biometrika 34:28–35.

    Examples
    --------
    >>> r = equivalence_test([10.0, 11.0, 9.0, 10.5], [10.2, 9.8, 10.1, 10.4], margin=2.0)
    >>> r.equivalent, r.margin
    (True, (-2.0, 2.0))
    """
    x = as_sample(a, "a")
    y = as_sample(b, "b")
    m = _margin_iv(margin)
    alpha = _alpha_iv(alpha)
    return _tost(
        float(np.mean(x)), float(np.var(x, ddof=1)), x.size,
        float(np.mean(y)), float(np.var(y, ddof=1)), y.size,
        m, alpha,
    )  # fmt: skip


def equivalence_test_from_stats(
    mean_a: float,
    sd_a: float | None,
    n_a: int,
    mean_b: float,
    sd_b: float | None,
    n_b: int,
    *,
    margin: float | tuple[float, float],
    alpha: float = 0.05,
    se_a: float | None = None,
    se_b: float | None = None,
) -> EquivalenceResult:
    """:func:`equivalence_test` from summary statistics (mean, sd or standard error, n per group).

    References
    ----------
    .. [1] Schuirmann, D. J. (1987). J. Pharmacokinetics and Biopharmaceutics 15:657–680.
    """
    moments = summary_moments(mean_a, sd_a, n_a, mean_b, sd_b, n_b, se_a, se_b)
    return _tost(*moments, _margin_iv(margin), _alpha_iv(alpha))


def relative_margin(reference: float, fraction: float) -> tuple[float, float]:
    """A symmetric margin of ``fraction`` times ``|reference|``, e.g. 5% of the baseline mean.

    Examples
    --------
    >>> relative_margin(200.0, 0.05)
    (-10.0, 10.0)
    """
    ref = check_finite_number(reference, "reference")
    frac = check_finite_number(fraction, "fraction")
    if frac <= 0:
        raise ValueError(f"`fraction` must be positive, got {fraction!r}")
    if ref == 0:
        raise ValueError("`reference` is 0, so a relative margin would be empty; give an absolute margin")
    half = frac * abs(ref)
    return (-half, half)


def ratio_margin(low_ratio: float = 0.8, high_ratio: float = 1.25) -> tuple[float, float]:
    """A margin for the ratio of (geometric) means, on the log scale: ``(log low, log high)``.

    Test ``log``-transformed positive values with it. The defaults are the
    average-bioequivalence limits 80%–125% (US FDA 2001).

    References
    ----------
    .. [1] US Food and Drug Administration (2001). Guidance for Industry:
       Statistical Approaches to Establishing Bioequivalence.

    Examples
    --------
    >>> [round(v, 7) for v in ratio_margin()]
    [-0.2231436, 0.2231436]
    """
    lo = check_finite_number(low_ratio, "low_ratio")
    hi = check_finite_number(high_ratio, "high_ratio")
    if not 0 < lo < 1 < hi:
        raise ValueError(
            f"ratio limits need 0 < low_ratio < 1 < high_ratio, got {low_ratio!r}, {high_ratio!r}"
        )
    return (math.log(lo), math.log(hi))
