"""Rounding tolerance and the fewest seeds a test can decide with (harness.stats.resolution)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats as sps

from harness.stats import max_statistic_test
from harness.stats.resolution import (
    minimum_seeds,
    rounding_tolerance,
    smallest_pvalue_permutation,
    smallest_pvalue_rank,
)


def test_rounding_tolerance_covers_the_rounding_of_a_mean():
    # Higham (2002), section 4.2: recursive summation of n values errs by at most about (n-1) eps sum|x|.
    for value in (0.74, 7.93, 500.0, -137.01):
        for n_a, n_b in ((10, 24), (3, 97), (20, 20)):
            gap = abs(float(np.mean([value] * n_a)) - float(np.mean([value] * n_b)))
            assert gap <= rounding_tolerance(value, n_a + n_b)
    assert rounding_tolerance(500.0, 20) < 1e-9  # far below any return difference that matters


def test_smallest_permutation_pvalue_is_one_over_the_relabellings():
    # Exact permutation test (Fisher 1935): the observed labelling is one of C(n_a + n_b, n_a).
    assert smallest_pvalue_permutation(2, 2, n_resamples=2000) == pytest.approx(1 / 6)
    assert smallest_pvalue_permutation(3, 3, n_resamples=2000) == pytest.approx(1 / 20)
    assert smallest_pvalue_permutation(3, 3, n_resamples=2000, alternative="two-sided") == pytest.approx(0.1)
    # Random relabellings (Phipson & Smyth 2010): at least 1 / (1 + B).
    assert smallest_pvalue_permutation(10, 10, n_resamples=999) == pytest.approx(1e-3)


def test_smallest_permutation_pvalue_is_what_the_max_statistic_test_gives():
    # Two curves completely separated at every checkpoint: the most extreme data there is.
    for n in (2, 3):
        low, high = np.zeros((n, 4)) + np.arange(n)[:, None], 10 + np.zeros((n, 4)) + np.arange(n)[:, None]
        r = max_statistic_test(low, high, alternative="less", n_resamples=2000, rng=0)
        assert min(r.adjusted_pvalues) == pytest.approx(smallest_pvalue_permutation(n, n, n_resamples=2000))


def test_smallest_rank_pvalue_against_scipy():
    # scipy.stats.mannwhitneyu as reference: exact law without ties (3 vs 3: 1/20), and the
    # normal approximation with a tie as used by Gehan's test for censored seeds.
    assert smallest_pvalue_rank(3, 3) == pytest.approx(
        sps.mannwhitneyu([0, 1, 2], [3, 4, 5], alternative="less", method="exact").pvalue)
    assert smallest_pvalue_rank(2, 2, ties=True) == pytest.approx(
        sps.mannwhitneyu([0, 1], [2, 2], alternative="less", method="asymptotic").pvalue)


def test_minimum_seeds_per_check():
    # Exact permutation test at 0.05: C(6, 3) = 20 is the first with 1/C <= 0.05; at 0.05 / 2
    # (Holm's first step with two checks) C(8, 4) = 70 is needed.
    perm = lambda n: smallest_pvalue_permutation(n, n, n_resamples=2000)  # noqa: E731
    assert minimum_seeds(perm, 0.05) == 3
    assert minimum_seeds(perm, 0.025) == 4
    gehan = lambda n: smallest_pvalue_rank(n, n, ties=True)  # noqa: E731
    assert minimum_seeds(gehan, 0.05) == 3
    assert minimum_seeds(lambda n: 1.0, 0.05) is None
    assert math.comb(4, 2) == 6  # 2 vs 2: never below 1/6
