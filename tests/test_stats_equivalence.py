"""Equivalence by two one-sided tests (Schuirmann 1987)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st
from scipy import stats as sps

from harness.stats import (
    equivalence_test,
    equivalence_test_from_stats,
    ratio_margin,
    relative_margin,
    welch_test,
)


def test_fda_average_bioequivalence_limits():
    # US FDA (2001) guidance: 80.00%–125.00% of the geometric-mean ratio, ±0.2231436 on the log scale.
    low, high = ratio_margin(0.8, 1.25)
    assert low == pytest.approx(-0.2231436, abs=1e-7)
    assert high == pytest.approx(0.2231436, abs=1e-7)


def test_tost_pvalue_is_the_larger_one_sided_welch_pvalue():
    # Schuirmann (1987): p = max of the one-sided tests of H0: diff <= low and H0: diff >= high.
    # Reference: scipy.stats.ttest_ind(equal_var=False) on the shifted samples.
    rng = np.random.default_rng(np.random.SeedSequence(6))
    for _ in range(15):
        a = rng.normal(0.1, 1.0, rng.integers(3, 25))
        b = rng.normal(0.0, 1.5, rng.integers(3, 25))
        low, high = -rng.uniform(0.2, 2), rng.uniform(0.2, 2)
        p_low = sps.ttest_ind(a - low, b, equal_var=False, alternative="greater").pvalue
        p_high = sps.ttest_ind(a - high, b, equal_var=False, alternative="less").pvalue
        r = equivalence_test(a, b, margin=(low, high), alpha=0.05)
        assert r.pvalue == pytest.approx(max(p_low, p_high), rel=1e-8)
        # The (1 - 2 alpha) interval is Welch's 90% interval (Schuirmann 1987).
        ci = sps.ttest_ind(a, b, equal_var=False).confidence_interval(0.90)
        assert (r.interval.low, r.interval.high) == pytest.approx((ci.low, ci.high), rel=1e-8)
        assert r.equivalent == (max(p_low, p_high) < 0.05)


def test_from_stats_matches_raw_samples():
    a = [10.0, 11.0, 9.5, 10.5, 10.2]
    b = [10.1, 9.9, 10.4, 10.0]
    raw = equivalence_test(a, b, margin=1.0)
    summ = equivalence_test_from_stats(
        np.mean(a), np.std(a, ddof=1), 5, np.mean(b), None, 4, se_b=np.std(b, ddof=1) / 2.0, margin=1.0
    )
    assert summ.pvalue == pytest.approx(raw.pvalue, rel=1e-10)
    assert summ.equivalent == raw.equivalent


def test_relative_margin():
    # A relative margin of 5% of a baseline mean of -200 is ±10 (definition).
    assert relative_margin(-200.0, 0.05) == (-10.0, 10.0)
    with pytest.raises(ValueError, match=r"`reference` is 0"):
        relative_margin(0.0, 0.05)
    with pytest.raises(ValueError, match=r"`fraction` must be positive, got -0.1"):
        relative_margin(10.0, -0.1)


def test_constant_groups_are_a_documented_degenerate_result():
    inside = equivalence_test([5.0, 5.0, 5.0], [5.5, 5.5], margin=1.0)
    assert inside.equivalent and inside.pvalue == 0.0 and inside.interval.width == 0.0
    outside = equivalence_test([5.0, 5.0, 5.0], [7.0, 7.0], margin=1.0)
    assert not outside.equivalent and outside.pvalue == 1.0
    assert not math.isnan(outside.df)


@pytest.mark.parametrize(
    ("margin", "alpha", "error", "match"),
    [
        (0.0, 0.05, ValueError, r"`margin` must be positive .*got 0.0"),
        (-1.0, 0.05, ValueError, r"`margin` must be positive"),
        ((0.5, 1.0), 0.05, ValueError, r"needs low < 0 < high, got \(0.5, 1.0\)"),
        ("wide", 0.05, TypeError, r"`margin` must be a positive number or a \(low, high\) pair"),
        (1.0, 0.0, ValueError, r"`alpha` must lie strictly between 0 and 1, got 0.0"),
        (1.0, 1.5, ValueError, r"`alpha` must lie strictly between 0 and 1"),
        (1.0, 0.6, ValueError, r"`alpha` must be below 0.5"),
        (float("nan"), 0.05, ValueError, r"`margin` must be finite"),
    ],
)
def test_equivalence_test_iv(margin, alpha, error, match):
    with pytest.raises(error, match=match):
        equivalence_test([1.0, 2.0, 3.0], [1.0, 2.5], margin=margin, alpha=alpha)


samples = st.lists(st.floats(-100, 100, allow_nan=False), min_size=2, max_size=12).filter(
    lambda xs: max(xs) - min(xs) > 1e-2
)


@settings(max_examples=80, deadline=None)
@given(samples, samples, st.floats(0.05, 80.0), st.sampled_from([0.01, 0.05, 0.1]))
def test_tost_rejects_iff_interval_inside_margin(a, b, m, alpha):
    # Schuirmann (1987): TOST at alpha rejects exactly when the (1 - 2 alpha) interval lies in the margin.
    r = equivalence_test(a, b, margin=m, alpha=alpha)
    ci = r.interval
    assume(min(abs(ci.low + m), abs(ci.high - m)) > 1e-9 * (1 + m))  # not on the boundary in floating point
    assert r.equivalent == ci.inside(-m, m)
    assert ci.contains(r.estimate)
    # Swapping the groups mirrors the estimate and keeps the verdict for a symmetric margin.
    s = equivalence_test(b, a, margin=m, alpha=alpha)
    assert s.estimate == pytest.approx(-r.estimate, abs=1e-9) and s.equivalent == r.equivalent
    # The same (1 - 2 alpha) interval is Welch's interval at that level.
    w = welch_test(a, b).confidence_interval(1 - 2 * alpha)
    assert (w.low, w.high) == pytest.approx((ci.low, ci.high), rel=1e-9, abs=1e-9)


def test_same_constant_over_different_counts_is_equivalent_at_difference_zero():
    # Issue 10 item 3: ten and twenty-four seeds all at 0.74 differ only by rounding of the means
    # (exact arithmetic, common practice): difference 0, inside any margin.
    r = equivalence_test([0.74] * 10, [0.74] * 24, margin=0.01)
    assert r.estimate == 0.0 and r.standard_error == 0.0 and r.equivalent
