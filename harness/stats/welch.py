"""Welch's t-test for two groups of seeds, from raw samples or from published summary statistics."""

from __future__ import annotations

import dataclasses
import math

import numpy as np
from scipy import stats as _st

from harness.stats._result import ConfidenceInterval, fmt, fmt_p, side_phrase
from harness.stats._validate import (
    Alternative,
    as_sample,
    check_alternative,
    check_finite_number,
    check_positive_int,
    check_probability,
)
from harness.stats.resolution import rounding_tolerance

__all__ = ["WelchResult", "welch_test", "welch_test_from_stats"]


@dataclasses.dataclass(frozen=True, slots=True)
class WelchResult:
    """Outcome of Welch's t-test of ``mean(a) - mean(b)``.

    Attributes
    ----------
    statistic
        ``estimate / standard_error``. When both groups have zero variance it is
        0 for equal means and ``±inf`` otherwise (see :func:`welch_test`).
    pvalue
        The p-value for ``alternative``.
    df
        Welch–Satterthwaite degrees of freedom.
    estimate
        ``mean(a) - mean(b)``.
    standard_error
        ``sqrt(var_a / n_a + var_b / n_b)``.
    interval
        The confidence interval of the difference at ``confidence_level``
        (one-sided for a one-sided alternative).
    alternative, confidence_level, method, reading
        The alternative tested, the interval's level, the method's name and a
        one-sentence reading.
    """

    statistic: float
    pvalue: float
    df: float
    estimate: float
    standard_error: float
    interval: ConfidenceInterval
    alternative: str
    confidence_level: float
    method: str
    reading: str

    def confidence_interval(self, confidence_level: float = 0.95) -> ConfidenceInterval:
        """The interval of the difference at another level, on the same side(s) as the test."""
        level = check_probability(confidence_level, "confidence_level")
        return _interval(self.estimate, self.standard_error, self.df, self.alternative, level)


def _interval(estimate: float, se: float, df: float, alternative: str, level: float) -> ConfidenceInterval:
    if alternative == "two-sided":
        half = float(_st.t.ppf(0.5 + level / 2.0, df)) * se
        return ConfidenceInterval(estimate - half, estimate + half)
    q = float(_st.t.ppf(level, df)) * se
    if alternative == "greater":
        return ConfidenceInterval(estimate - q, math.inf)
    return ConfidenceInterval(-math.inf, estimate + q)


def welch_moments(
    mean_a: float, var_a: float, n_a: int, mean_b: float, var_b: float, n_b: int
) -> tuple[float, float, float]:
    """Difference, its standard error and the Welch–Satterthwaite df from group moments.

    Differences and standard errors within the rounding noise of the data
    (:func:`harness.stats.resolution.rounding_tolerance` of the larger absolute
    mean over ``n_a + n_b`` values) count as zero: two groups of the same
    constant, whose computed means differ in the last bit, have difference 0.
    A standard error of zero is the degenerate case: the df is then taken as
    ``n_a + n_b - 2`` (any positive df gives the same verdict).
    """
    tol = rounding_tolerance(max(abs(mean_a), abs(mean_b)), n_a + n_b)
    estimate = mean_a - mean_b
    if abs(estimate) <= tol:
        estimate = 0.0
    va, vb = var_a / n_a, var_b / n_b
    se = math.sqrt(va + vb)
    if se <= tol:
        return estimate, 0.0, float(n_a + n_b - 2)
    df = (va + vb) ** 2 / (va**2 / (n_a - 1) + vb**2 / (n_b - 1))
    return estimate, se, df


def t_pvalue(statistic: float, df: float, alternative: str) -> float:
    """p-value of a t statistic; ``statistic = ±inf`` gives 0 or 1, never NaN."""
    if alternative == "greater":
        return float(_st.t.sf(statistic, df))
    if alternative == "less":
        return float(_st.t.cdf(statistic, df))
    return float(min(1.0, 2.0 * _st.t.sf(abs(statistic), df)))


def _ratio(estimate: float, se: float) -> float:
    if se > 0.0:
        return estimate / se
    return 0.0 if estimate == 0.0 else math.copysign(math.inf, estimate)


def _welch(
    mean_a: float,
    var_a: float,
    n_a: int,
    mean_b: float,
    var_b: float,
    n_b: int,
    alternative: str,
    level: float,
    null_difference: float = 0.0,
) -> WelchResult:
    estimate, se, df = welch_moments(mean_a, var_a, n_a, mean_b, var_b, n_b)
    shifted = estimate - null_difference
    if abs(shifted) <= rounding_tolerance(max(abs(mean_a), abs(mean_b), abs(null_difference)), n_a + n_b):
        shifted = 0.0
    statistic = _ratio(shifted, se)
    pvalue = t_pvalue(statistic, df, alternative)
    interval = _interval(estimate, se, df, alternative, level)
    alpha = 1.0 - level
    verdict = (
        f"a difference at the {fmt(100 * alpha)}% level"
        if pvalue < alpha
        else f"no significant difference at the {fmt(100 * alpha)}% level"
    )
    degenerate = " (both groups are constant, so the difference is exact)" if se == 0.0 else ""
    null = f" against a null difference of {fmt(null_difference)}" if null_difference else ""
    reading = (
        f"mean(a) - mean(b) = {fmt(estimate)}, {fmt(100 * level)}% CI {interval}{degenerate}; "
        f"Welch's t = {fmt(statistic)}{null} on {fmt(df)} df, {side_phrase(alternative)} "
        f"{fmt_p(pvalue)}: {verdict}."
    )
    return WelchResult(
        statistic=statistic,
        pvalue=pvalue,
        df=df,
        estimate=estimate,
        standard_error=se,
        interval=interval,
        alternative=alternative,
        confidence_level=level,
        method="Welch's t-test",
        reading=reading,
    )


def welch_test(
    a: object,
    b: object,
    *,
    alternative: Alternative = "two-sided",
    confidence_level: float = 0.95,
    null_difference: float = 0.0,
) -> WelchResult:
    """Welch's unequal-variance t-test of ``mean(a) - mean(b)``.

    Parameters
    ----------
    a, b
        Per-seed values of the two groups (at least two finite values each).
    alternative
        ``"two-sided"``, ``"greater"`` (mean of ``a`` larger) or ``"less"``.
    confidence_level
        Level of the interval stored in the result; the reading judges
        significance at ``1 - confidence_level``.
    null_difference
        The difference under the null hypothesis, ``d0``: with
        ``alternative="less"`` and ``d0 = -m`` the test rejects
        ``H0: mean(a) - mean(b) >= -m``, i.e. shows that ``a`` is lower by more
        than the margin ``m`` (the non-inferiority test with the roles of the
        hypotheses exchanged; Wellek 2010, chapter 2).

    Returns
    -------
    WelchResult

    Notes
    -----
    The statistic is ``(mean_a - mean_b - d0) / sqrt(s_a^2/n_a + s_b^2/n_b)`` with
    sample variances (``ddof=1``), referred to Student's t with the
    Welch–Satterthwaite degrees of freedom. If both groups are constant the
    standard error is zero: the result is then the documented degenerate case
    ``statistic = 0, pvalue = 1`` for equal constants and ``statistic = ±inf``,
    ``pvalue = 0`` (two-sided) for different ones, with a zero-width interval.
    Differences and spreads within floating-point resolution count as zero
    (see :func:`welch_moments`), so near-constant groups never give a huge t.

    References
    ----------
    .. [1] Welch, B. L. (1947). The generalization of "Student's" problem when
       several different population variances are involved. Biometrika 34:28–35.
    .. [2] Satterthwaite, F. E. (1946). An approximate distribution of estimates
       of variance components. Biometrics Bulletin 2:110–114.
    .. [3] Wellek, S. (2010). Testing Statistical Hypotheses of Equivalence and
       Noninferiority, 2nd ed., chapter 2. Chapman & Hall/CRC.

    Examples
    --------
    >>> r = welch_test([1.0, 2.0, 3.0, 4.0], [2.0, 3.0, 4.0, 9.0])
    >>> round(r.statistic, 4), round(r.df, 3), round(r.pvalue, 4)
    (-1.1882, 4.005, 0.3004)
    """
    x, y, alternative, level = _welch_test_iv(a, b, alternative, confidence_level)
    return _welch(
        float(np.mean(x)), float(np.var(x, ddof=1)), x.size,
        float(np.mean(y)), float(np.var(y, ddof=1)), y.size,
        alternative, level, check_finite_number(null_difference, "null_difference"),
    )  # fmt: skip


def _welch_test_iv(a, b, alternative, confidence_level):
    x = as_sample(a, "a")
    y = as_sample(b, "b")
    return x, y, check_alternative(alternative), check_probability(confidence_level, "confidence_level")


def summary_variance(
    sd: float | None, se: float | None, n: int, *, group: str
) -> float:
    """The sample variance of a group given either its standard deviation or its standard error."""
    if (sd is None) == (se is None):
        raise ValueError(
            f"give exactly one of `sd_{group}` and `se_{group}` for group {group}, "
            f"got sd_{group}={sd!r}, se_{group}={se!r}"
        )
    name = f"sd_{group}" if sd is not None else f"se_{group}"
    value = check_finite_number(sd if sd is not None else se, name)
    if value < 0:
        raise ValueError(f"`{name}` must be >= 0, got {value!r}")
    return value**2 if sd is not None else value**2 * n


def summary_moments(
    mean_a, sd_a, n_a, mean_b, sd_b, n_b, se_a, se_b
) -> tuple[float, float, int, float, float, int]:
    """Validate summary statistics of two groups: (mean_a, var_a, n_a, mean_b, var_b, n_b)."""
    n_a = check_positive_int(n_a, "n_a", minimum=2)
    n_b = check_positive_int(n_b, "n_b", minimum=2)
    return (
        check_finite_number(mean_a, "mean_a"),
        summary_variance(sd_a, se_a, n_a, group="a"),
        n_a,
        check_finite_number(mean_b, "mean_b"),
        summary_variance(sd_b, se_b, n_b, group="b"),
        n_b,
    )


def welch_test_from_stats(
    mean_a: float,
    sd_a: float | None,
    n_a: int,
    mean_b: float,
    sd_b: float | None,
    n_b: int,
    *,
    se_a: float | None = None,
    se_b: float | None = None,
    alternative: Alternative = "two-sided",
    confidence_level: float = 0.95,
    null_difference: float = 0.0,
) -> WelchResult:
    """Welch's t-test from summary statistics, e.g. a paper's "mean ± sd over n seeds".

    Parameters
    ----------
    mean_a, sd_a, n_a, mean_b, sd_b, n_b
        Mean, sample standard deviation (``ddof=1``) and number of seeds of each
        group. Pass ``sd_a=None`` together with ``se_a=`` when the source quotes
        a standard error of the mean instead (likewise for ``b``).
    se_a, se_b
        Standard errors of the means, in place of the standard deviations.
    alternative, confidence_level, null_difference
        As in :func:`welch_test`.

    References
    ----------
    .. [1] Welch, B. L. (1947). Biometrika 34:28–35.
    .. [2] NIST/SEMATECH e-Handbook of Statistical Methods, section 1.3.5.3,
       two-sample t-test for equal means (the AUTO83B example).

    Examples
    --------
    >>> r = welch_test_from_stats(20.14458, 6.41470, 249, 30.48101, 6.10771, 79)
    >>> round(r.statistic, 3), round(r.df, 2)
    (-12.946, 136.87)
    """
    moments = summary_moments(mean_a, sd_a, n_a, mean_b, sd_b, n_b, se_a, se_b)
    alternative = check_alternative(alternative)
    level = check_probability(confidence_level, "confidence_level")
    return _welch(*moments, alternative, level, check_finite_number(null_difference, "null_difference"))
