"""Bootstrap intervals against Efron & Tibshirani (1993) and scipy.stats.bootstrap."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from scipy import stats as sps

from harness.core.errors import TooFewSeedsWarning
from harness.stats import bootstrap_ci, bootstrap_mean, bootstrap_mean_difference

# Efron & Tibshirani (1993), An Introduction to the Bootstrap, Table 14.1: the A scores (n = 26).
ET_A = [48, 36, 20, 29, 42, 42, 20, 42, 22, 41, 45, 14, 6, 0, 33, 28, 34, 4, 32, 24, 47, 41, 24, 26, 30, 41]


def plug_in_variance(x, axis=-1):
    return np.var(x, axis=axis)


def test_efron_tibshirani_table_14_2_bca():
    # Efron & Tibshirani (1993) Table 14.2 [published]: theta_hat = 171.534, 90% BCa (115.8, 259.6).
    # The jackknife acceleration is deterministic: a_hat = 0.061240 [recomputed, tests/CHECK-VALUES.md];
    # Martinez & Martinez, Computational Statistics Handbook with MATLAB, Example 7.8: z0 = 0.16
    # [published]; z0 is Monte Carlo (theirs from fewer resamples), so the check is loose.
    r = bootstrap_ci(ET_A, plug_in_variance, confidence_level=0.90, n_resamples=100_000, rng=20261201)
    assert r.estimate == pytest.approx(171.534, abs=5e-4)
    assert r.acceleration == pytest.approx(0.061240, abs=5e-7)
    assert r.bias_correction == pytest.approx(0.16, abs=0.04)
    assert r.interval.low == pytest.approx(115.8, rel=0.03)
    assert r.interval.high == pytest.approx(259.6, rel=0.03)
    assert r.method == "bca" and r.n_resamples == 100_000


def test_efron_tibshirani_table_14_2_percentile():
    # Efron & Tibshirani (1993) Table 14.2 [published]: 90% percentile (100.8, 233.9);
    # scipy with 100,000 resamples gives (97.56, 235.56): lower end within about 5%.
    r = bootstrap_ci(ET_A, plug_in_variance, method="percentile", confidence_level=0.90,
                     n_resamples=100_000, rng=7)  # fmt: skip
    assert r.interval.low == pytest.approx(100.8, rel=0.05)
    assert r.interval.high == pytest.approx(233.9, rel=0.03)
    assert r.bias_correction is None and r.acceleration is None


@pytest.mark.parametrize("method", ["bca", "percentile"])
def test_two_sample_against_scipy_bootstrap(method):
    # Reference: scipy.stats.bootstrap (independent resampling of each sample, BCa with jackknife).
    # Both are Monte Carlo: endpoints agree within a few hundredths of the interval width.
    rng = np.random.default_rng(np.random.SeedSequence(3))
    for _ in range(3):
        a = rng.gamma(2.0, 2.0, size=25)
        b = rng.gamma(2.0, 1.5, size=30)
        ref = sps.bootstrap((a, b), lambda x, y, axis=-1: x.mean(axis) - y.mean(axis),
                            method=method, n_resamples=40_000, rng=rng).confidence_interval  # fmt: skip
        r = bootstrap_mean_difference(a, b, method=method, n_resamples=40_000, rng=rng)
        width = ref.high - ref.low
        assert r.interval.low == pytest.approx(ref.low, abs=0.04 * width)
        assert r.interval.high == pytest.approx(ref.high, abs=0.04 * width)
        assert r.estimate == pytest.approx(a.mean() - b.mean())


def test_bootstrap_mean_standard_error_matches_theory():
    # The bootstrap standard error of a mean is close to sqrt(plug-in variance / n)
    # (Efron & Tibshirani 1993, section 6.2).
    x = np.random.default_rng(5).normal(size=40)
    r = bootstrap_mean(x, n_resamples=20_000, rng=1)
    assert r.standard_error == pytest.approx(np.std(x) / np.sqrt(x.size), rel=0.03)


def test_resampling_is_vectorised():
    calls = []

    def mean(x, axis=-1):
        calls.append(np.shape(x))
        return np.mean(x, axis=axis)

    bootstrap_ci(np.arange(30.0), mean, n_resamples=5000, rng=0)
    # One call on the data, one per batch of resamples, one per jackknife group: not one per resample.
    assert len(calls) <= 3
    assert (5000, 30) in calls and (30, 29) in calls


def test_stratified_resampling_keeps_strata_sizes():
    # Stratified bootstrap (Agarwal et al. 2021): runs are resampled within each task.
    values = np.array([0.0] * 6 + [100.0] * 4)
    labels = ["a"] * 6 + ["b"] * 4
    # The sum of a resample is fixed when each stratum keeps its size and is constant inside.
    r = bootstrap_ci(values, np.sum, strata=labels, method="percentile", n_resamples=500, rng=0)
    assert r.interval.low == r.interval.high == 400.0
    unstratified = bootstrap_ci(values, np.sum, method="percentile", n_resamples=500, rng=0)
    assert unstratified.interval.width > 0
    assert r.method == "stratified percentile"
    # One sample: the labels may be any sequence, a tuple included.
    as_tuple = bootstrap_ci(values, np.sum, strata=tuple(labels), method="percentile", n_resamples=50, rng=0)
    assert as_tuple.interval.width == 0.0
    with pytest.raises(ValueError, match=r"`strata` must be a tuple of one label array per sample \(2\)"):
        bootstrap_ci((values, values), lambda a, b, axis=-1: a.sum(axis) - b.sum(axis), strata=labels)


def test_constant_data_gives_a_point_interval():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", TooFewSeedsWarning)
        r = bootstrap_mean([2.0, 2.0, 2.0, 2.0], n_resamples=100, rng=0)
    assert (r.interval.low, r.interval.high, r.standard_error) == (2.0, 2.0, 0.0)
    assert "every resample gave the same value" in r.reading


def test_few_seeds_warn():
    # Colas, Sigaud & Oudeyer (2018): bootstrap intervals are too narrow with few seeds.
    with pytest.warns(TooFewSeedsWarning, match="5 seeds"):
        bootstrap_mean([1.0, 2.0, 3.0, 4.0, 6.0], n_resamples=100, rng=0)


def test_same_rng_seed_same_interval():
    x = np.random.default_rng(1).normal(size=20)
    assert bootstrap_mean(x, rng=42).interval == bootstrap_mean(x, rng=42).interval


@pytest.mark.parametrize(
    ("data", "kwargs", "error", "match"),
    [
        ([1.0], {}, ValueError, r"`data` needs at least 2 values, got 1"),
        ((1.0, 2.0, 3.0), {}, ValueError, r"`data` is a tuple, which means several samples"),
        ([1.0, np.nan, 2.0], {}, ValueError, r"`data` must hold finite numbers, got nan at index 1"),
        (list(range(12)), {"method": "basic"}, ValueError, r"`method` must be one of 'bca', 'percentile'"),
        (list(range(12)), {"n_resamples": 1}, ValueError, r"`n_resamples` must be an integer >= 2"),
        (list(range(12)), {"confidence_level": 0.0}, ValueError, r"`confidence_level` must lie strictly"),
        (list(range(12)), {"strata": [0, 1]}, ValueError, r"`strata` must give one label per value \(12\)"),
        (list(range(12)), {"rng": "seed"}, TypeError, r"`rng` must be None"),
    ],
)
def test_bootstrap_ci_iv(data, kwargs, error, match):
    with pytest.raises(error, match=match):
        bootstrap_ci(data, np.mean, n_resamples=kwargs.pop("n_resamples", 50), **kwargs)


def test_statistic_must_reduce_the_last_axis():
    with pytest.raises(ValueError, match=r"`statistic` must reduce along `axis=-1`"):
        bootstrap_ci(np.arange(12.0), lambda x, axis=-1: np.mean(x), n_resamples=50, rng=0)
