"""Mann–Whitney U, Gehan's censored version and the permutation test of means."""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from scipy import stats as sps

from harness.stats import mann_whitney, mann_whitney_censored, permutation_test_means

# Efron & Tibshirani (1993), An Introduction to the Bootstrap, Table 2.1: mouse survival data.
MICE_TREATMENT = [94, 197, 16, 38, 99, 141, 23]
MICE_CONTROL = [52, 104, 146, 10, 51, 30, 40, 27, 46]


def test_exact_smallest_pvalues_at_tiny_n():
    # tests/CHECK-VALUES.md [recomputed]: with 3 vs 3 seeds the smallest two-sided Mann–Whitney p is 0.1
    # (2 / C(6, 3)); 5 vs 5: 0.0079 (2 / C(10, 5)).
    r3 = mann_whitney([1, 2, 3], [4, 5, 6])
    assert r3.pvalue == pytest.approx(0.1) and r3.statistic == 0.0
    assert "exact" in r3.method
    r5 = mann_whitney([6, 7, 8, 9, 10], [1, 2, 3, 4, 5])
    assert r5.pvalue == pytest.approx(0.0079, abs=5e-5) and r5.estimate == 1.0


def test_estimate_is_the_probability_of_superiority():
    # U / (n_a n_b) = P(A > B) + P(A = B)/2 (Mann & Whitney 1947; Agarwal et al. 2021's
    # probability of improvement): x = [1, 2, 3] vs y = [2, 2, 4] gives 1/3 (tests/CHECK-VALUES.md).
    r = mann_whitney([1, 2, 3], [2, 2, 4])
    assert r.estimate == pytest.approx(1 / 3)
    assert "normal approximation" in r.method  # ties: scipy's 'auto' does not use the exact law


@pytest.mark.parametrize("alternative", ["two-sided", "less", "greater"])
def test_against_scipy_mannwhitneyu(alternative):
    # Reference: scipy.stats.mannwhitneyu on random data with and without ties.
    rng = np.random.default_rng(np.random.SeedSequence(8))
    for _ in range(10):
        a = rng.integers(0, 6, size=rng.integers(3, 15)).astype(float)
        b = rng.normal(2.5, 2.0, size=rng.integers(3, 15)).round(0)
        ref = sps.mannwhitneyu(a, b, alternative=alternative)
        r = mann_whitney(a, b, alternative=alternative)
        assert r.statistic == ref.statistic and r.pvalue == pytest.approx(ref.pvalue)


def test_all_values_tied_is_a_documented_degenerate_result():
    r = mann_whitney([2.0, 2.0, 2.0], [2.0, 2.0])
    assert (r.statistic, r.pvalue, r.estimate) == (3.0, 1.0, 0.5)
    assert "all values tied" in r.method


def gehan_score(x, cx, y, cy):
    """Gehan (1965) pair scores, written from the definition: +1 when x is certainly larger."""
    total = 0.0
    for (xi, ci), (yj, dj) in itertools.product(zip(x, cx), zip(y, cy)):
        if (not dj and xi > yj) or (not dj and ci and xi >= yj):
            total += 1.0  # y observed and x certainly later
        elif (not ci and yj > xi) or (not ci and dj and yj >= xi):
            total -= 1.0
    return total


def test_censored_statistic_matches_gehans_pair_scores():
    # Gehan (1965): W = sum of pair scores; the Mann–Whitney U with censored values tied on top
    # satisfies W = 2U - n_a n_b when censoring is at a common end (Mantel 1967).
    rng = np.random.default_rng(np.random.SeedSequence(2))
    budget = 10_000.0
    for _ in range(20):
        na, nb = rng.integers(3, 12, size=2)
        a = rng.integers(1, 100, size=na) * 100.0
        b = rng.integers(1, 100, size=nb) * 100.0
        ca, cb = rng.random(na) < 0.3, rng.random(nb) < 0.4
        a[ca], b[cb] = budget, budget
        r = mann_whitney_censored(a, b, censored_a=ca, censored_b=cb)
        assert 2 * r.statistic - na * nb == gehan_score(a, ca, b, cb)
        assert "Gehan" in r.method


def test_censoring_below_an_observed_value_is_refused():
    with pytest.raises(ValueError, match=r"a censored value \(50.0\) lies below an observed value \(80.0\)"):
        mann_whitney_censored([50.0, 80.0], [10.0, 20.0], censored_a=[True, False], censored_b=[False, False])
    with pytest.raises(ValueError, match=r"`censored_b` must be a boolean array with one flag per value"):
        mann_whitney_censored([1.0, 2.0], [1.0, 2.0], censored_a=[False, False], censored_b=[0, 1])


def test_all_censored_in_both_groups_is_no_evidence():
    r = mann_whitney_censored([9.0, 9.0, 9.0], [9.0, 9.0], censored_a=[True] * 3, censored_b=[True] * 2)
    assert r.pvalue == 1.0 and r.estimate == 0.5


def test_permutation_exact_on_efron_tibshirani_mouse_data():
    # Efron & Tibshirani (1993), chapter 15: treatment minus control mean = 30.63 [published].
    # Reference p-value: all C(16, 7) = 11440 relabellings enumerated here from the definition
    # (Fisher 1935); the book's Monte Carlo ASL from 1000 permutations is about 0.13 (recalled
    # from memory; loose check).
    r = permutation_test_means(MICE_TREATMENT, MICE_CONTROL, alternative="greater", n_resamples=20_000, rng=0)
    assert r.estimate == pytest.approx(30.63, abs=0.01)
    pooled = np.array(MICE_TREATMENT + MICE_CONTROL, dtype=float)
    idx = np.array(list(itertools.combinations(range(16), 7)))
    mask = np.zeros((idx.shape[0], 16), dtype=bool)
    mask[np.arange(idx.shape[0])[:, None], idx] = True
    diffs = pooled @ mask.T / 7 - pooled @ (~mask).T / 9
    exact = np.mean(diffs >= r.estimate - 1e-9)
    assert r.exact and r.n_resamples == 11440
    assert r.pvalue == pytest.approx(exact, rel=1e-9)
    assert 0.10 < r.pvalue < 0.17


def test_permutation_random_relabellings_p_value_is_never_zero():
    # Phipson & Smyth (2010): p = (1 + #) / (1 + B).
    a = np.arange(20.0) + 100.0
    b = np.arange(20.0)
    r = permutation_test_means(a, b, alternative="greater", n_resamples=999, rng=1)
    assert not r.exact and r.pvalue == pytest.approx(1 / 1000)


def test_permutation_agrees_with_welch_on_normal_data():
    # For normal data the permutation test and the t-test give close p-values (Fisher 1935, section 21;
    # common practice). Reference: scipy.stats.ttest_ind(equal_var=False).
    rng = np.random.default_rng(4)
    a, b = rng.normal(0.6, 1, 30), rng.normal(0, 1, 30)
    r = permutation_test_means(a, b, n_resamples=20_000, rng=5)
    assert r.pvalue == pytest.approx(sps.ttest_ind(a, b, equal_var=False).pvalue, abs=0.01)


def test_rank_iv():
    with pytest.raises(ValueError, match=r"`b` needs at least 2 values"):
        mann_whitney([1.0, 2.0], [1.0])
    with pytest.raises(ValueError, match=r"`method` must be one of 'auto', 'exact', 'asymptotic'"):
        mann_whitney([1.0, 2.0], [1.0, 3.0], method="permutation")
    with pytest.raises(ValueError, match=r"`n_resamples` must be an integer >= 1, got 0"):
        permutation_test_means([1.0, 2.0], [1.0, 3.0], n_resamples=0)
    with pytest.raises(ValueError, match=r"`a` must hold finite numbers"):
        permutation_test_means([1.0, np.inf], [1.0, 3.0])
