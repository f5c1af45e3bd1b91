"""Distribution-free two-group tests: Mann–Whitney U (also for censored values) and a permutation test."""

from __future__ import annotations

import dataclasses
import math

import numpy as np
from scipy import stats as _st

from harness.stats._result import fmt, fmt_p, side_phrase
from harness.stats._validate import (
    Alternative,
    as_sample,
    check_alternative,
    check_positive_int,
    make_rng,
)
from harness.stats.bootstrap import mean_difference

__all__ = [
    "MannWhitneyResult",
    "PermutationResult",
    "mann_whitney",
    "mann_whitney_censored",
    "permutation_test_means",
]

_MW_METHODS = ("auto", "exact", "asymptotic")


@dataclasses.dataclass(frozen=True, slots=True)
class MannWhitneyResult:
    """Outcome of a Mann–Whitney U test of ``a`` against ``b``.

    Attributes
    ----------
    statistic
        U of ``a``: the number of pairs with ``a > b``, ties counted one half.
    pvalue
        The p-value for ``alternative``.
    estimate
        ``U / (n_a n_b)``, the probability that a value of ``a`` exceeds one of
        ``b`` (ties counted one half); 0.5 means no shift.
    alternative, method, reading
        The alternative, the method's name (with how the p-value was computed)
        and a one-sentence reading.
    """

    statistic: float
    pvalue: float
    estimate: float
    alternative: str
    method: str
    reading: str


@dataclasses.dataclass(frozen=True, slots=True)
class PermutationResult:
    """Outcome of a permutation test of ``mean(a) - mean(b)``.

    ``exact`` is True when every distinct relabelling was enumerated.
    """

    estimate: float
    pvalue: float
    n_resamples: int
    exact: bool
    alternative: str
    method: str
    reading: str


def _mw_reading(estimate: float, pvalue: float, alternative: str, what: str) -> str:
    return (
        f"P(a > b) = {fmt(estimate)} (0.5 = no shift); {what} "
        f"{side_phrase(alternative)} {fmt_p(pvalue)}."
    )


def _mann_whitney(
    x: np.ndarray, y: np.ndarray, alternative: str, method: str, label: str
) -> MannWhitneyResult:
    pooled = np.concatenate([x, y])
    if np.ptp(pooled) == 0.0:
        u, p, how = x.size * y.size / 2.0, 1.0, "all values tied"
    else:
        res = _st.mannwhitneyu(x, y, alternative=alternative, method=method)
        u, p = float(res.statistic), float(res.pvalue)
        ties = np.unique(pooled).size < pooled.size
        if method == "auto":
            how = "exact" if min(x.size, y.size) <= 8 and not ties else "normal approximation"
        else:
            how = "exact" if method == "exact" else "normal approximation"
    estimate = u / (x.size * y.size)
    return MannWhitneyResult(
        statistic=u,
        pvalue=p,
        estimate=estimate,
        alternative=alternative,
        method=f"{label} ({how})",
        reading=_mw_reading(estimate, p, alternative, f"{label},"),
    )


def mann_whitney(
    a: object,
    b: object,
    *,
    alternative: Alternative = "two-sided",
    method: str = "auto",
) -> MannWhitneyResult:
    """Mann–Whitney U (Wilcoxon rank-sum) test: do values of ``a`` tend to exceed those of ``b``?

    Parameters
    ----------
    a, b
        Per-seed values of the two groups.
    alternative
        ``"two-sided"``, ``"greater"`` (``a`` stochastically larger) or ``"less"``.
    method
        ``"auto"`` (exact null distribution when one group has at most 8 values
        and there are no ties, else the normal approximation with tie and
        continuity corrections), ``"exact"`` or ``"asymptotic"``.

    Notes
    -----
    Wraps :func:`scipy.stats.mannwhitneyu`. With very few seeds the test
    cannot reject at all: with 3 against 3 the smallest two-sided p-value is
    0.1. If all values of both groups are equal, the documented degenerate
    result is ``U = n_a n_b / 2``, ``pvalue = 1``.

    References
    ----------
    .. [1] Mann, H. B. & Whitney, D. R. (1947). On a test of whether one of two
       random variables is stochastically larger than the other. Annals of
       Mathematical Statistics 18:50–60.

    Examples
    --------
    >>> r = mann_whitney([1, 2, 3, 4, 5], [6, 7, 8, 9, 10])
    >>> r.statistic, round(r.pvalue, 4)
    (0.0, 0.0079)
    """
    x = as_sample(a, "a")
    y = as_sample(b, "b")
    alternative = check_alternative(alternative)
    if method not in _MW_METHODS:
        listed = ", ".join(repr(m) for m in _MW_METHODS)
        raise ValueError(f"`method` must be one of {listed}, got {method!r}")
    return _mann_whitney(x, y, alternative, method, "Mann–Whitney U")


def _censored_iv(values, censored, name):
    x = as_sample(values, name)
    flags = np.asarray(censored)
    if flags.shape != x.shape or flags.dtype != bool:
        raise ValueError(
            f"`censored_{name}` must be a boolean array with one flag per value of `{name}` "
            f"({x.size}), got {flags.dtype} of shape {flags.shape}"
        )
    return x, flags


def mann_whitney_censored(
    a: object,
    b: object,
    *,
    censored_a: object,
    censored_b: object,
    alternative: Alternative = "two-sided",
) -> MannWhitneyResult:
    """Gehan's generalised Wilcoxon test for values right-censored at the end of the observation.

    Use it for times to an event that some seeds never reach within the budget
    (steps to a return threshold): such a seed's value is only known to exceed
    its censoring time. Gehan scores each pair ``+1`` when ``a`` is certainly
    larger, ``-1`` when certainly smaller and ``0`` when the order is unknown
    (both censored, or equal observed values). When every censoring time is at
    or above every observed value (censoring at a common budget, as in RL
    training), this is exactly the Mann–Whitney test with all censored values
    tied above every observed one, which is how it is computed. With censored
    values present the p-value comes from the normal approximation with the
    tie correction (two or more censored seeds are ties).

    Parameters
    ----------
    a, b
        Observed values, or the censoring time where ``censored_*`` is True.
    censored_a, censored_b
        Boolean arrays: True where the value is censored (event not reached).
    alternative
        ``"greater"``: ``a`` tends to be larger (for steps to threshold, slower).

    Raises
    ------
    ValueError
        If a censoring time lies below an observed value (Gehan's general
        scoring is not a rank test then and is not implemented).

    References
    ----------
    .. [1] Gehan, E. A. (1965). A generalized Wilcoxon test for comparing
       arbitrarily singly-censored samples. Biometrika 52:203–223.
    .. [2] Mantel, N. (1967). Ranking procedures for arbitrarily restricted
       observation. Biometrics 23:65–78.

    Examples
    --------
    >>> r = mann_whitney_censored([100, 200, 500, 500], [300, 400, 450, 500],
    ...     censored_a=[False, False, True, True], censored_b=[False, False, False, True])
    >>> r.statistic
    7.0
    """
    x, cx = _censored_iv(a, np.asarray(censored_a), "a")
    y, cy = _censored_iv(b, np.asarray(censored_b), "b")
    alternative = check_alternative(alternative)
    observed = np.concatenate([x[~cx], y[~cy]])
    limits = np.concatenate([x[cx], y[cy]])
    if observed.size and limits.size and limits.min() < observed.max():
        raise ValueError(
            f"a censored value ({limits.min()}) lies below an observed value ({observed.max()}); "
            "this test assumes censoring at a common end of observation (the budget)"
        )
    top = (observed.max() if observed.size else 0.0) + 1.0
    x = np.where(cx, top, x)
    y = np.where(cy, top, y)
    return _mann_whitney(x, y, alternative, "asymptotic" if (cx.any() or cy.any()) else "auto",
                         "Gehan's generalised Wilcoxon")  # fmt: skip


def permutation_test_means(
    a: object,
    b: object,
    *,
    alternative: Alternative = "two-sided",
    n_resamples: int = 9999,
    rng: object = None,
) -> PermutationResult:
    """Permutation test of ``mean(a) - mean(b)``: relabel seeds between the groups at random.

    Parameters
    ----------
    a, b
        Per-seed values of the two groups.
    alternative
        ``"two-sided"``, ``"greater"`` or ``"less"``.
    n_resamples
        Random relabellings; when it is at least the number of distinct
        relabellings, all of them are enumerated and the p-value is exact.
    rng
        A numpy Generator, SeedSequence, non-negative int or None.

    Notes
    -----
    Wraps :func:`scipy.stats.permutation_test`, whose randomised p-value counts
    the observed labelling among the resamples, ``(1 + #{≥ observed}) / (1 + B)``
    (Phipson & Smyth 2010), so it is never zero.

    References
    ----------
    .. [1] Fisher, R. A. (1935). The Design of Experiments, section 21.
    .. [2] Efron, B. & Tibshirani, R. J. (1993). An Introduction to the Bootstrap,
       chapter 15 (permutation tests).
    .. [3] Phipson, B. & Smyth, G. K. (2010). Permutation p-values should never
       be zero. Statistical Applications in Genetics and Molecular Biology 9(1).

    Examples
    --------
    >>> r = permutation_test_means([1.0, 2.0, 3.0], [4.0, 5.0, 6.0], alternative="less")
    >>> r.estimate, r.exact, r.pvalue
    (-3.0, True, 0.05)
    """
    x = as_sample(a, "a")
    y = as_sample(b, "b")
    alternative = check_alternative(alternative)
    n_resamples = check_positive_int(n_resamples, "n_resamples", minimum=1)
    gen = make_rng(rng)
    distinct = math.comb(x.size + y.size, x.size)
    res = _st.permutation_test(
        (x, y),
        mean_difference,
        permutation_type="independent",
        vectorized=True,
        n_resamples=n_resamples,
        alternative=alternative,
        rng=gen,
    )
    exact = n_resamples >= distinct
    estimate = float(mean_difference(x, y))
    pvalue = float(res.pvalue)
    used = distinct if exact else n_resamples
    how = f"all {distinct} relabellings" if exact else f"{n_resamples} random relabellings"
    return PermutationResult(
        estimate=estimate,
        pvalue=pvalue,
        n_resamples=used,
        exact=exact,
        alternative=alternative,
        method="permutation test of the difference of means",
        reading=(
            f"mean(a) - mean(b) = {fmt(estimate)}; permutation test over {how}, "
            f"{side_phrase(alternative)} {fmt_p(pvalue)}."
        ),
    )
