"""Calibration by simulation at a size that runs in seconds (full size: benchmarks/bench_stats.py)."""

from __future__ import annotations

import math

import pytest

from harness.stats import power_of
from harness.stats.calibration import CALIBRATION_METHODS, DISTRIBUTIONS, calibrate


def band(p: float, reps: int, k: float = 3.0) -> float:
    """k binomial standard errors of a rate p over reps experiments."""
    return k * math.sqrt(p * (1 - p) / reps)


def test_welch_holds_its_level_on_normal_data():
    # Welch (1947): for normal data the t approximation with Welch–Satterthwaite df keeps the level.
    for cell in calibrate(["Welch t"], ["normal"], [5, 10, 20], reps=1000, rng=1):
        assert abs(cell.rate - 0.05) <= band(0.05, cell.reps), cell


def test_permutation_and_rank_tests_hold_their_level_on_skewed_data():
    # Exact permutation and rank tests are valid at any n for exchangeable groups (Fisher 1935;
    # Mann & Whitney 1947): at most alpha, up to Monte Carlo error, even for solved/failed mixtures.
    for cell in calibrate(["permutation (means)", "Mann–Whitney U"], ["solved/failed mixture"], [5],
                          reps=400, n_resamples=999, rng=2):  # fmt: skip
        assert cell.rate <= 0.05 + band(0.05, cell.reps), cell


def test_percentile_bootstrap_is_too_liberal_with_five_seeds():
    # Colas, Sigaud & Oudeyer (2018): bootstrap tests with few seeds have inflated false positives.
    # (With 5 vs 5 the percentile interval ignores the t correction: theory puts the rate near 0.1.)
    (cell,) = calibrate(["bootstrap percentile"], ["normal"], [5], reps=400, n_resamples=999, rng=3)
    assert cell.rate > 0.05 + band(0.05, cell.reps, k=2.0), cell


def test_tost_at_the_margin_rarely_declares_equivalence():
    # Schuirmann (1987): TOST's size is at most alpha when the true difference is on the margin.
    for cell in calibrate(["TOST, margin 1 sd"], list(DISTRIBUTIONS), [10], reps=600, rng=4):
        assert cell.rate <= 0.05 + band(0.05, cell.reps), cell


@pytest.mark.parametrize("n", [5, 10])
def test_simulated_power_matches_the_noncentral_t(n):
    # Cohen (1988): the power of the t-test is a noncentral-t probability; simulation must agree.
    (cell,) = calibrate(["Welch t"], ["normal"], [n], hypothesis="alternative", reps=1000, rng=5 + n)
    expected = power_of(CALIBRATION_METHODS["Welch t"].alt_shift, 1.0, n, 1.0, n)
    assert abs(cell.rate - expected) <= band(expected, cell.reps) + 0.01, (cell, expected)


def test_calibrate_iv():
    with pytest.raises(ValueError, match=r"unknown methods or distributions: \['t-test'\]"):
        calibrate(["t-test"], ["normal"], [5], reps=10)
    with pytest.raises(ValueError, match=r"`hypothesis` must be 'null' or 'alternative'"):
        calibrate(["Welch t"], ["normal"], [5], hypothesis="h1", reps=10)
