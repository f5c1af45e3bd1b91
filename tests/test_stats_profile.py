"""Performance profiles (Agarwal et al. 2021) and their stratified bootstrap band."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats as st

from harness.stats import bootstrap_performance_profile, performance_profile


def test_profile_is_the_share_above_each_threshold_averaged_over_tasks():
    # Agarwal et al. (2021), run-score distribution: F(tau) = 1/M sum_m 1/N_m #{x_mn > tau}
    # (strictly above). Hand-computed: task a = [0.1, 0.5, 0.9], task b = [1.0, 2.0].
    # tau = 0.5: a has 1 of 3 above (0.5 is not above 0.5), b 2 of 2 -> (1/3 + 1) / 2 = 2/3.
    # tau = 1.0: a 0, b 1 of 2 -> 1/4. Pooled (no tasks) it is 3/5 and 1/5.
    scores = [0.1, 0.5, 0.9, 1.0, 2.0]
    f = performance_profile(scores, [0.0, 0.5, 1.0, 2.0], tasks=list("aaabb"))
    assert f.tolist() == pytest.approx([1.0, 2 / 3, 0.25, 0.0])
    assert performance_profile(scores, [0.5, 1.0]).tolist() == pytest.approx([3 / 5, 1 / 5])


def test_profile_input_checks():
    with pytest.raises(ValueError, match="`thresholds` must be strictly increasing"):
        performance_profile([0.1, 0.2], [0.5, 0.5])
    with pytest.raises(ValueError, match=r"`tasks` must give one label per value \(2\)"):
        performance_profile([0.1, 0.2], [0.5], tasks=["a"])


def test_band_of_one_task_follows_the_binomial():
    # Resampling n runs with replacement, the number above tau is Binomial(n, p) with p the
    # observed share (the bootstrap distribution of a proportion; reference: scipy.stats.binom).
    # 20 runs with 6 above 0.5: the 95% band is binom.ppf(0.025 / 0.975, 20, 0.3) / 20, up to
    # one run of interpolation between neighbouring counts.
    scores = np.r_[np.full(14, 0.2), np.full(6, 0.8)]
    r = bootstrap_performance_profile(scores, [0.5], n_resamples=20000, rng=3)
    assert r.share == (0.3,)
    assert r.low[0] == pytest.approx(st.binom.ppf(0.025, 20, 0.3) / 20, abs=1 / 20)
    assert r.high[0] == pytest.approx(st.binom.ppf(0.975, 20, 0.3) / 20, abs=1 / 20)
    assert "percentile bootstrap band" in r.method and "stratified" not in r.method


def test_stratified_band_keeps_each_task_and_contains_the_profile():
    rng = np.random.default_rng(np.random.SeedSequence(8))
    scores = np.concatenate([rng.uniform(0.0, 0.4, 10), rng.uniform(0.9, 1.3, 10)])
    tasks = np.repeat(["low", "high"], 10)
    taus = np.linspace(0.0, 1.4, 15)
    r = bootstrap_performance_profile(scores, taus, tasks=tasks, n_resamples=2000, rng=rng)
    assert "stratified" in r.method
    share, low, high = map(np.asarray, (r.share, r.low, r.high))
    assert np.all(low <= share + 1e-12) and np.all(share <= high + 1e-12)
    # Between the two tasks' ranges (0.4 < tau < 0.9) every stratified resample has exactly
    # the high task above and the low one below: the share is 1/2 with a zero-width band.
    gap = (taus > 0.4) & (taus < 0.9)
    assert np.all(share[gap] == 0.5) and np.all(low[gap] == 0.5) and np.all(high[gap] == 0.5)
