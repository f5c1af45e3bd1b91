"""Welch's t-test against the NIST/SEMATECH handbook and scipy.stats."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats as sps

from harness.stats import ConfidenceInterval, welch_test, welch_test_from_stats

# NIST/SEMATECH e-Handbook of Statistical Methods, section 1.3.5.3, AUTO83B data
# (sample 1: US cars, sample 2: Japanese cars), as listed in tests/CHECK-VALUES.md.
US = [18,15,18,16,17,15,14,14,14,15,15,14,15,14,22,18,21,21,10,10,11,9,28,25,19,16,17,19,18,14,14,14,14,12,13,13,18,22,19,18,23,26,25,20,21,13,14,15,14,17,11,13,12,13,15,13,13,14,22,28,13,14,13,14,15,12,13,13,14,13,12,13,18,16,18,18,23,11,12,13,12,18,21,19,21,15,16,15,11,20,21,19,15,26,25,16,16,18,16,13,14,14,14,28,19,18,15,15,16,15,16,14,17,16,15,18,21,20,13,23,20,23,18,19,25,26,18,16,16,15,22,22,24,23,29,25,20,18,19,18,27,13,17,13,13,13,30,26,18,17,16,15,18,21,19,19,16,16,16,16,25,26,31,34,36,20,19,20,19,21,20,25,21,19,21,21,19,18,19,18,18,18,30,31,23,24,22,20,22,20,21,17,18,17,18,17,16,19,19,36,27,23,24,34,35,28,29,27,34,32,28,26,24,19,28,24,27,27,26,24,30,39,35,34,30,22,27,20,18,28,27,34,31,29,27,24,23,38,36,25,38,26,22,36,27,27,32,28,31]  # fmt: skip
JP = [24,27,27,25,31,35,24,19,28,23,27,20,22,18,20,31,32,31,32,24,26,29,24,24,33,33,32,28,19,32,34,26,30,22,22,33,39,36,28,27,21,24,30,34,32,38,37,30,31,37,32,47,41,45,34,33,24,32,39,35,32,37,38,34,34,32,33,32,25,24,37,31,36,36,34,38,32,38,32]  # fmt: skip


def test_nist_auto83b_raw_data():
    # NIST/SEMATECH e-Handbook 1.3.5.3; Welch values [recomputed] in tests/CHECK-VALUES.md:
    # T = -12.946273, Welch–Satterthwaite df = 136.87498, two-sided p = 1.5709e-25.
    assert len(US) == 249 and len(JP) == 79
    r = welch_test(US, JP)
    assert r.statistic == pytest.approx(-12.946273, rel=1e-7)
    assert r.df == pytest.approx(136.87498, rel=1e-6)
    assert r.pvalue == pytest.approx(1.5709e-25, rel=1e-3)
    # Handbook summary [published]: mean1 = 20.14458, mean2 = 30.48101.
    assert r.estimate == pytest.approx(20.14458 - 30.48101, abs=2e-5)
    assert r.interval.contains(r.estimate) and r.interval.high < 0
    assert "Welch" in r.method and "a difference at the 5% level" in r.reading


def test_nist_auto83b_summary_statistics():
    # NIST/SEMATECH summaries [published]; from rounded summaries T = -12.946268 (rtol 1e-5).
    r = welch_test_from_stats(20.14458, 6.41470, 249, 30.48101, 6.10771, 79)
    assert r.statistic == pytest.approx(-12.946268, rel=1e-5)
    assert r.df == pytest.approx(136.87498, rel=1e-5)


def test_from_stats_accepts_standard_errors():
    # A paper quoting mean ± standard error: se = sd / sqrt(n) (definition of the standard error).
    sd_r = welch_test_from_stats(20.14458, 6.41470, 249, 30.48101, 6.10771, 79)
    se_r = welch_test_from_stats(
        20.14458, None, 249, 30.48101, None, 79,
        se_a=6.41470 / math.sqrt(249), se_b=6.10771 / math.sqrt(79),
    )  # fmt: skip
    assert se_r.statistic == pytest.approx(sd_r.statistic, rel=1e-12)
    assert se_r.df == pytest.approx(sd_r.df, rel=1e-12)


@pytest.mark.parametrize("alternative", ["two-sided", "less", "greater"])
def test_against_scipy_ttest_ind_on_random_data(alternative):
    # Reference: scipy.stats.ttest_ind(equal_var=False) and its confidence_interval.
    rng = np.random.default_rng(np.random.SeedSequence(11))
    for _ in range(20):
        n_a, n_b = rng.integers(2, 30, size=2)
        a = rng.normal(rng.normal(), rng.uniform(0.1, 3), n_a)
        b = rng.normal(rng.normal(), rng.uniform(0.1, 3), n_b)
        ref = sps.ttest_ind(a, b, equal_var=False, alternative=alternative)
        r = welch_test(a, b, alternative=alternative, confidence_level=0.9)
        assert r.statistic == pytest.approx(ref.statistic, rel=1e-10)
        assert r.df == pytest.approx(ref.df, rel=1e-10)
        assert r.pvalue == pytest.approx(ref.pvalue, rel=1e-8, abs=1e-300)
        lo, hi = ref.confidence_interval(0.9)
        assert (r.interval.low, r.interval.high) == pytest.approx((lo, hi), rel=1e-8)
        ci = r.confidence_interval(0.99)
        lo, hi = ref.confidence_interval(0.99)
        assert (ci.low, ci.high) == pytest.approx((lo, hi), rel=1e-8)


def test_against_scipy_ttest_ind_from_stats():
    # Reference: scipy.stats.ttest_ind_from_stats(equal_var=False).
    ref = sps.ttest_ind_from_stats(1.0, 2.0, 7, 3.5, 0.5, 12, equal_var=False, alternative="less")
    r = welch_test_from_stats(1.0, 2.0, 7, 3.5, 0.5, 12, alternative="less")
    assert r.statistic == pytest.approx(ref.statistic, rel=1e-12)
    assert r.pvalue == pytest.approx(ref.pvalue, rel=1e-10)


def test_both_groups_constant_is_a_documented_degenerate_result():
    same = welch_test([3.0, 3.0, 3.0], [3.0, 3.0])
    assert (same.statistic, same.pvalue, same.standard_error) == (0.0, 1.0, 0.0)
    assert same.interval == ConfidenceInterval(0.0, 0.0)
    apart = welch_test([5.0, 5.0, 5.0], [3.0, 3.0])
    assert apart.statistic == math.inf and apart.pvalue == 0.0
    assert apart.interval == ConfidenceInterval(2.0, 2.0)
    assert "constant" in apart.reading
    assert not any(math.isnan(v) for v in (apart.statistic, apart.pvalue, apart.df))


def test_one_constant_group_is_an_ordinary_test():
    # Welch–Satterthwaite df reduces to n_b - 1 when var_a = 0 (Satterthwaite 1946 formula).
    r = welch_test([1.0, 1.0, 1.0], [0.0, 1.0, 2.0, 3.0])
    assert r.df == pytest.approx(3.0)


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        ({"a": [1.0], "b": [1.0, 2.0]}, r"`a` needs at least 2 values, got 1"),
        ({"a": [1.0, float("nan")], "b": [1.0, 2.0]}, r"`a` must hold finite numbers, got nan at index 1"),
        ({"a": [1.0, 2.0], "b": [1.0, float("inf")]}, r"`b` must hold finite numbers, got inf"),
        ({"a": [1.0, 2.0], "b": [1.0, 2.0], "alternative": "bigger"}, r"`alternative` must be one of"),
        ({"a": [1.0, 2.0], "b": [1.0, 2.0], "confidence_level": 1.0}, r"`confidence_level` must lie strictly"),
        ({"a": [[1.0, 2.0]], "b": [1.0, 2.0]}, r"`a` must be one-dimensional"),
    ],
)
def test_welch_test_iv(kwargs, match):
    a, b = kwargs.pop("a"), kwargs.pop("b")
    with pytest.raises(ValueError, match=match):
        welch_test(a, b, **kwargs)


def test_welch_test_from_stats_iv():
    with pytest.raises(ValueError, match=r"give exactly one of `sd_a` and `se_a`"):
        welch_test_from_stats(1.0, 1.0, 5, 2.0, 1.0, 5, se_a=0.3)
    with pytest.raises(ValueError, match=r"`n_b` must be an integer >= 2, got 1"):
        welch_test_from_stats(1.0, 1.0, 5, 2.0, 1.0, 1)
    with pytest.raises(ValueError, match=r"`sd_b` must be >= 0"):
        welch_test_from_stats(1.0, 1.0, 5, 2.0, -1.0, 5)
    with pytest.raises(ValueError, match=r"`mean_a` must be finite"):
        welch_test_from_stats(float("nan"), 1.0, 5, 2.0, 1.0, 5)


samples = st.lists(st.floats(-1e3, 1e3, allow_nan=False), min_size=2, max_size=15).filter(
    lambda xs: max(xs) - min(xs) > 1e-3
)


@settings(max_examples=60, deadline=None)
@given(samples, samples)
def test_swapping_groups_negates_the_estimate(a, b):
    # Property of any two-sample location test (common practice).
    ab, ba = welch_test(a, b), welch_test(b, a)
    assert ab.estimate == pytest.approx(-ba.estimate, abs=1e-9)
    assert ab.statistic == pytest.approx(-ba.statistic, rel=1e-9, abs=1e-9)
    assert ab.pvalue == pytest.approx(ba.pvalue, rel=1e-9, abs=1e-12)
    assert ab.interval.contains(ab.estimate)
    g = welch_test(a, b, alternative="greater")
    assert g.pvalue == pytest.approx(welch_test(b, a, alternative="less").pvalue, rel=1e-9, abs=1e-12)


# --- rounding noise (issue 10, item 3) -------------------------------------------------------
# The same constant averaged over 10 and over 24 values: the two float means differ in the last
# bit (sum of ten 0.74 != 10 * 0.74). Exact arithmetic (common practice) says the groups are
# identical: difference 0, no evidence of any difference.


def test_same_constant_over_different_counts_is_not_a_difference():
    a, b = [0.74] * 10, [0.74] * 24
    assert float(np.mean(a)) != float(np.mean(b))  # the rounding this test is about
    for alternative in ("two-sided", "less", "greater"):
        r = welch_test(a, b, alternative=alternative)
        assert r.estimate == 0.0 and r.statistic == 0.0 and r.standard_error == 0.0
    assert welch_test(a, b).pvalue == 1.0
    assert welch_test(a, b, alternative="less").pvalue >= 0.5


def test_near_constant_data_never_gives_a_huge_t():
    # One value one ulp above the rest: a spread of 1e-17 next to values of 0.74 is rounding.
    a = [0.74] * 9 + [float(np.nextafter(0.74, 1.0))]
    r = welch_test(a, [0.74] * 24)
    assert abs(r.statistic) < 10.0 and r.pvalue == 1.0


def test_rounding_tolerance_does_not_hide_a_real_small_difference():
    # 1e-9 on values near 0.74 is 6 million ulps: a real difference (both groups constant).
    r = welch_test([0.74 + 1e-9] * 10, [0.74] * 24, alternative="greater")
    assert r.estimate == pytest.approx(1e-9, rel=1e-6) and r.pvalue == 0.0


# --- shifted null (the test behind the drop-beyond-margin rule) ----------------------------


@pytest.mark.parametrize("alternative", ["less", "greater", "two-sided"])
def test_null_difference_matches_scipy_on_shifted_data(alternative):
    # H0: mean(a) - mean(b) = d0 is H0: mean(a - d0) - mean(b) = 0: scipy.stats.ttest_ind
    # (equal_var=False) on a - d0 is the reference.
    rng = np.random.default_rng(11)
    a, b = rng.normal(0.0, 1.0, 12), rng.normal(0.5, 2.0, 9)
    ours = welch_test(a, b, alternative=alternative, null_difference=-0.8)
    ref = sps.ttest_ind(a + 0.8, b, equal_var=False, alternative=alternative)
    assert ours.statistic == pytest.approx(ref.statistic, rel=1e-12)
    assert ours.pvalue == pytest.approx(ref.pvalue, rel=1e-10)
    assert ours.estimate == pytest.approx(a.mean() - b.mean(), rel=1e-12)
    assert "null difference of -0.8" in ours.reading
    summary = welch_test_from_stats(a.mean(), a.std(ddof=1), 12, b.mean(), b.std(ddof=1), 9,
                                    alternative=alternative, null_difference=-0.8)
    assert summary.pvalue == pytest.approx(ref.pvalue, rel=1e-9)


def test_null_difference_iv():
    with pytest.raises(ValueError, match="`null_difference` must be finite"):
        welch_test([1.0, 2.0], [3.0, 4.0], null_difference=float("nan"))
