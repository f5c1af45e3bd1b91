"""Power and sample size of Welch's t-test against Cohen (1988) and simulation."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats as sps

from harness.stats import minimum_detectable_difference, power_of, seeds_needed


@pytest.mark.parametrize(
    ("d", "power", "table", "noncentral"),
    [
        # Cohen (1988) Table 2.4.1 / Cohen (1992) Table 2, two-sided alpha = 0.05 [published];
        # exact noncentral-t solutions [recomputed] in tests/CHECK-VALUES.md.
        (0.2, 0.80, 393, 393.41),
        (0.5, 0.80, 64, 63.77),
        (0.8, 0.80, 26, 25.52),
        (0.2, 0.90, 526, 526.33),
        (0.5, 0.90, 85, 85.03),
        (0.8, 0.90, 34, 33.83),
    ],
)
def test_seeds_needed_matches_cohen(d, power, table, noncentral):
    n = seeds_needed(d, 1.0, 1.0, alpha=0.05, power=power)
    # A correct solver rounds the noncentral-t solution up: the table value or one above it.
    assert n == int(np.ceil(noncentral))
    assert n in (table, table + 1)


@pytest.mark.parametrize(("d", "expected"), [(0.5, 0.108), (0.8, 0.201), (1.0, 0.286)])
def test_power_with_five_seeds(d, expected):
    # tests/CHECK-VALUES.md [recomputed]: power with 5 seeds per group at alpha 0.05.
    assert power_of(d, 1.0, 5, 1.0, 5) == pytest.approx(expected, abs=5e-4)


def test_minimum_detectable_difference_with_ten_seeds():
    # tests/CHECK-VALUES.md [recomputed]: minimum detectable d with 10 seeds per group at power 0.8: 1.325.
    mdd = minimum_detectable_difference(1.0, 10, 1.0, 10, alpha=0.05, power=0.8)
    assert mdd == pytest.approx(1.325, abs=5e-4)
    assert power_of(mdd, 1.0, 10, 1.0, 10) == pytest.approx(0.8, abs=1e-9)


def test_power_at_no_difference_is_alpha():
    # By definition of the level of a test.
    assert power_of(0.0, 2.0, 7, 3.0, 11, alpha=0.05) == pytest.approx(0.05, rel=1e-9)
    assert power_of(0.0, 2.0, 7, 3.0, 11, alpha=0.1, alternative="greater") == pytest.approx(0.1, rel=1e-9)


def test_power_matches_simulation_of_welch_test():
    # Monte Carlo reference: the share of simulated Welch tests (scipy.stats.ttest_ind) that reject.
    rng = np.random.default_rng(np.random.SeedSequence(13))
    reps, n_a, n_b, sd_a, sd_b, diff = 20_000, 6, 12, 1.0, 2.5, 1.5
    a = rng.normal(diff, sd_a, (reps, n_a))
    b = rng.normal(0.0, sd_b, (reps, n_b))
    p = sps.ttest_ind(a, b, equal_var=False, axis=1).pvalue
    simulated = np.mean(p < 0.05)
    assert power_of(diff, sd_a, n_a, sd_b, n_b) == pytest.approx(simulated, abs=4 * np.sqrt(0.25 / reps) + 0.01)


def test_one_sided_directions():
    up = minimum_detectable_difference(1.0, 8, 1.0, 8, alternative="greater")
    down = minimum_detectable_difference(1.0, 8, 1.0, 8, alternative="less")
    assert up == pytest.approx(down) and up < minimum_detectable_difference(1.0, 8, 1.0, 8)
    assert power_of(-up, 1.0, 8, 1.0, 8, alternative="less") == pytest.approx(0.8)
    assert seeds_needed(-0.5, 1.0, 1.0, alternative="less") == seeds_needed(0.5, 1.0, 1.0, alternative="greater")


def test_power_iv():
    with pytest.raises(ValueError, match=r"`sd_a` and `sd_b` are both 0"):
        power_of(1.0, 0.0, 5, 0.0, 5)
    with pytest.raises(ValueError, match=r"`n_a` must be an integer >= 2, got 1"):
        power_of(1.0, 1.0, 1, 1.0, 5)
    with pytest.raises(ValueError, match=r"`alpha` must lie strictly between 0 and 1, got 1.2"):
        minimum_detectable_difference(1.0, 5, 1.0, 5, alpha=1.2)
    with pytest.raises(ValueError, match=r"`power` must exceed `alpha`"):
        minimum_detectable_difference(1.0, 5, 1.0, 5, power=0.04)
    with pytest.raises(ValueError, match=r"`difference` must be positive for alternative='greater'"):
        seeds_needed(-1.0, 1.0, 1.0, alternative="greater")
    with pytest.raises(ValueError, match=r"`difference` must be non-zero"):
        seeds_needed(0.0, 1.0, 1.0)
    with pytest.raises(ValueError, match=r"more than 10000000 seeds per group"):
        seeds_needed(1e-6, 1.0, 1.0)
