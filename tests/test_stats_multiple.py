"""Holm, Benjamini–Hochberg and the max-statistic permutation test over checkpoints."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats as sps

from harness.stats import benjamini_hochberg, holm, max_statistic_test

# Benjamini & Hochberg (1995), JRSS-B 57:289–300, section 3: the 15 p-values [published].
BH_PVALUES = [0.0001, 0.0004, 0.0019, 0.0095, 0.0201, 0.0278, 0.0298, 0.0344, 0.0459,
              0.3240, 0.4262, 0.5719, 0.6528, 0.7590, 1.0000]  # fmt: skip


def test_holm_textbook_example():
    # Holm (1979) step-down, standard worked example (tests/CHECK-VALUES.md): p = (0.01, 0.03, 0.04, 0.005)
    # at 0.05 rejects H1 and H4 only; adjusted p = (0.03, 0.06, 0.06, 0.02).
    r = holm([0.01, 0.03, 0.04, 0.005], alpha=0.05)
    assert r.adjusted == pytest.approx((0.03, 0.06, 0.06, 0.02))
    assert r.reject == (True, False, False, True)
    assert r.alpha == 0.05 and r.method == "Holm"
    assert "2 of 4" in r.reading


def test_benjamini_hochberg_paper_example():
    # Benjamini & Hochberg (1995) section 3: at q = 0.05 BH rejects 4, Holm rejects 3 [recomputed].
    assert sum(benjamini_hochberg(BH_PVALUES, alpha=0.05).reject) == 4
    assert sum(holm(BH_PVALUES, alpha=0.05).reject) == 3
    assert benjamini_hochberg(BH_PVALUES).reject[:4] == (True,) * 4


def test_holm_adjusted_values_are_capped_and_monotone():
    r = holm([0.9, 0.5, 0.8])
    assert max(r.adjusted) <= 1.0
    assert r.adjusted == pytest.approx((1.0, 1.0, 1.0))


def test_multiple_iv():
    with pytest.raises(ValueError, match=r"`pvalues` must lie in \[0, 1\], got 1.5 at index 1"):
        holm([0.1, 1.5])
    with pytest.raises(ValueError, match=r"`pvalues` must be a non-empty 1-D sequence"):
        holm([])
    with pytest.raises(ValueError, match=r"`pvalues` must lie in \[0, 1\], got nan"):
        benjamini_hochberg([0.1, float("nan")])
    with pytest.raises(ValueError, match=r"`alpha` must lie strictly between 0 and 1, got 0"):
        holm([0.1], alpha=0)


def test_max_statistic_statistics_are_welch_t_per_checkpoint():
    # Reference: scipy.stats.ttest_ind(equal_var=False) column by column.
    rng = np.random.default_rng(1)
    a = rng.normal(100.0, 1.0, size=(7, 12)) + 5e6  # large offset, small spread: precision check
    b = rng.normal(100.0, 2.0, size=(9, 12)) + 5e6
    r = max_statistic_test(a, b, n_resamples=199, rng=2)
    ref = sps.ttest_ind(a, b, equal_var=False).statistic
    assert r.statistics == pytest.approx(tuple(ref), rel=1e-6, abs=1e-6)
    assert r.differences == pytest.approx(tuple(a.mean(0) - b.mean(0)), abs=1e-6)


def test_max_statistic_finds_where_curves_differ():
    rng = np.random.default_rng(np.random.SeedSequence(4))
    a = rng.normal(size=(10, 30))
    b = rng.normal(size=(10, 30))
    a[:, 20:25] -= 4.0
    r = max_statistic_test(a, b, alternative="less", n_resamples=999, rng=5)
    assert r.first_rejected_range() == range(20, 25)
    assert all(p > 0.05 for p in r.adjusted_pvalues[:20])
    assert "first at checkpoints 20..24" in r.reading


def test_max_statistic_exact_enumeration_at_tiny_n():
    # With 3 vs 3 seeds there are C(6, 3) = 20 relabellings; p-values are multiples of 1/20 and the
    # smallest two-sided one is 2/20 = 0.1 (the same bound as Mann–Whitney, tests/CHECK-VALUES.md).
    a = np.array([[10.0, 1.0], [11.0, 2.0], [12.0, 3.0]])
    b = np.array([[0.0, 1.5], [1.0, 2.5], [2.0, 1.0]])
    r = max_statistic_test(a, b, n_resamples=9999, rng=0)
    assert r.exact and r.n_resamples == 20
    assert r.adjusted_pvalues[0] == pytest.approx(0.1)
    assert r.first_rejected_range() is None


def test_max_statistic_controls_the_family_wise_error():
    # Westfall & Young (1993): under identical groups the chance of any false rejection over all
    # checkpoints is at most alpha (and close to it: the test is not trivially conservative).
    # 1000 simulated experiments of 6 vs 6 seeds, 20 correlated checkpoints: the rejection rate
    # must lie in a 3-sigma binomial band around 0.05 (upper side) and above 0.025.
    rng = np.random.default_rng(np.random.SeedSequence(99))
    hits = 0
    for _ in range(1000):
        walk = np.cumsum(rng.normal(size=(12, 20)), axis=1)  # random-walk curves: strong correlation
        r = max_statistic_test(walk[:6], walk[6:], n_resamples=199, rng=rng)
        hits += r.first_rejected_range() is not None
    assert 0.025 <= hits / 1000 <= 0.05 + 3 * np.sqrt(0.05 * 0.95 / 1000)


def test_max_statistic_constant_checkpoint_is_not_nan():
    a = np.array([[0.0, 1.0], [0.0, 2.0], [0.0, 3.0]])
    b = np.array([[0.0, 1.0], [0.0, 5.0], [0.0, 4.0]])
    r = max_statistic_test(a, b, rng=0)
    assert r.statistics[0] == 0.0 and r.adjusted_pvalues[0] == 1.0


def test_max_statistic_iv():
    with pytest.raises(ValueError, match=r"`curves_a` needs at least 2 seeds \(rows\), got 1"):
        max_statistic_test(np.zeros((1, 3)), np.zeros((2, 3)))
    with pytest.raises(ValueError, match=r"same checkpoints, got 3 and 4 columns"):
        max_statistic_test(np.zeros((2, 3)), np.zeros((2, 4)))
    with pytest.raises(ValueError, match=r"`curves_b` must be finite, got nan at seed 1, checkpoint 2"):
        b = np.zeros((2, 3))
        b[1, 2] = np.nan
        max_statistic_test(np.zeros((2, 3)), b)
    with pytest.raises(ValueError, match=r"`curves_a` must be 2-D"):
        max_statistic_test(np.zeros(3), np.zeros((2, 3)))


def test_max_statistic_rounding_noise_is_not_a_difference():
    # Issue 10 item 3: curves that are the same constants, computed so that the float values differ
    # in the last bit (0.1 * 3 vs 0.3), have t = 0, not a t of 1e15 (exact arithmetic, common practice).
    a = np.full((10, 3), 0.1 * 3)
    b = np.full((12, 3), 0.3)
    assert a[0, 0] != b[0, 0]
    r = max_statistic_test(a, b, alternative="less", n_resamples=199, rng=3)
    assert r.statistics == (0.0, 0.0, 0.0) and min(r.adjusted_pvalues) == 1.0
