"""IQM and probability of improvement (Agarwal et al. 2021), with stratified bootstrap intervals."""

from __future__ import annotations

import numpy as np
import pytest

from harness.core.errors import TooFewSeedsWarning

from harness.stats import (
    bootstrap_iqm,
    bootstrap_probability_of_improvement,
    bootstrap_task_mean,
    iqm,
    probability_of_improvement,
    task_mean,
)


def test_iqm_values():
    # Agarwal et al. (2021): IQM is the 25% trimmed mean; tests/CHECK-VALUES.md [recomputed]:
    # trim_mean(1..10, 0.25) = 5.5; trim_mean([1, 2, 3, 4, 100], 0.25) = 3.0.
    assert iqm(range(1, 11)) == pytest.approx(5.5)
    assert iqm([1, 2, 3, 4, 100]) == pytest.approx(3.0)
    # Robust: one exploding seed barely moves it (common practice).
    assert iqm([1, 2, 3, 4, 5, 6, 7, 1e9]) == pytest.approx(iqm([1, 2, 3, 4, 5, 6, 7, 8]))


def test_probability_of_improvement_values():
    # Agarwal et al. (2021), ties count one half; tests/CHECK-VALUES.md: [1, 2, 3] vs [2, 2, 4] -> 1/3.
    assert probability_of_improvement([1, 2, 3], [2, 2, 4]) == pytest.approx(1 / 3)
    assert probability_of_improvement([2, 2, 4], [1, 2, 3]) == pytest.approx(2 / 3)


def test_probability_of_improvement_averages_over_tasks():
    # Agarwal et al. (2021): computed per task and averaged over tasks (not pooled).
    x = [1, 2, 3, 10, 10]
    y = [2, 2, 4, 0, 0]
    p = probability_of_improvement(x, y, tasks_x=list("aaabb"), tasks_y=list("aaabb"))
    assert p == pytest.approx((1 / 3 + 1.0) / 2)
    with pytest.raises(ValueError, match=r"must name the same tasks; only in one of them: \['b', 'c'\]"):
        probability_of_improvement(x, y, tasks_x=list("aaabb"), tasks_y=list("aaacc")[:5])
    with pytest.raises(ValueError, match=r"give both `tasks_x` and `tasks_y`"):
        probability_of_improvement(x, y, tasks_x=list("aaabb"))


def test_stratified_iqm_interval_across_tasks():
    # Stratified bootstrap (Agarwal et al. 2021): runs resampled within each task.
    rng = np.random.default_rng(np.random.SeedSequence(21))
    scores = np.concatenate([rng.normal(m, 0.1, 10) for m in (0.2, 0.5, 0.9)])
    tasks = np.repeat(["t1", "t2", "t3"], 10)
    r = bootstrap_iqm(scores, tasks=tasks, n_resamples=4000, rng=rng)
    assert r.method == "stratified percentile"
    assert r.interval.contains(r.estimate)
    # Stratification removes the between-task share of the spread: narrower than unstratified.
    plain = bootstrap_iqm(scores, n_resamples=4000, rng=rng)
    assert r.interval.width < plain.interval.width
    # Stratified BCa: each task is its own sample in the acceleration (Davison & Hinkley 1997, ch. 5);
    # for a near-symmetric statistic it stays close to the percentile interval.
    bca = bootstrap_iqm(scores, tasks=tasks, method="bca", n_resamples=4000, rng=rng)
    assert bca.method == "stratified bca" and abs(bca.acceleration) < 0.1
    assert bca.interval.width == pytest.approx(r.interval.width, rel=0.3)


def test_probability_of_improvement_interval():
    rng = np.random.default_rng(np.random.SeedSequence(22))
    x = np.concatenate([rng.normal(1.0, 1, 12), rng.normal(5.0, 1, 12)])
    y = np.concatenate([rng.normal(0.0, 1, 12), rng.normal(5.0, 1, 12)])
    tasks = np.repeat(["a", "b"], 12)
    r = bootstrap_probability_of_improvement(x, y, tasks_x=tasks, tasks_y=tasks, n_resamples=3000, rng=rng)
    assert r.estimate == pytest.approx(probability_of_improvement(x, y, tasks_x=tasks, tasks_y=tasks))
    assert 0.0 <= r.interval.low < r.estimate < r.interval.high <= 1.0
    one_task = bootstrap_probability_of_improvement(x[:12], y[:12], method="bca", n_resamples=3000, rng=rng)
    assert one_task.acceleration is not None
    with pytest.raises(ValueError, match=r"`method` must be 'percentile' when tasks are given"):
        bootstrap_probability_of_improvement(x, y, tasks_x=tasks, tasks_y=tasks, method="bca")


def test_aggregate_iv():
    with pytest.raises(ValueError, match=r"`x` must hold finite numbers"):
        iqm([1.0, float("nan")])
    with pytest.raises(ValueError, match=r"`x` needs at least 1 values, got 0"):
        iqm([])
    with pytest.raises(ValueError, match=r"`tasks_x` must give one task per value of `x` \(3\)"):
        probability_of_improvement([1, 2, 3], [1, 2], tasks_x=["a"], tasks_y=["a", "a"])


def test_task_mean_weighs_tasks_equally():
    # Agarwal et al. (2021): the mean aggregate averages each task's mean (hand-computed):
    # task a = (0 + 1)/2 = 0.5, task b = (1 + 4 + 7)/3 = 4 -> (0.5 + 4)/2 = 2.25, while the pooled
    # mean of the five runs would be 13/5 = 2.6.
    assert task_mean([0, 1, 1, 4, 7], tasks=list("aabbb")) == pytest.approx(2.25)
    assert task_mean([0, 1, 1, 4, 7]) == pytest.approx(2.6)
    with pytest.raises(ValueError, match=r"`tasks` must give one label per value \(5\)"):
        task_mean([0, 1, 1, 4, 7], tasks=list("aab"))


def test_stratified_task_mean_standard_error_matches_the_ideal_bootstrap():
    # The ideal bootstrap standard error of a mean of n values is sqrt(sum (x - xbar)^2) / n
    # (Efron & Tibshirani 1993, chapter 6: the plug-in sd over sqrt(n); recalled from memory,
    # it is the variance of the mean of n draws with replacement). Tasks are resampled
    # independently, so the mean of M task means has variance sum_m se_m^2 / M^2.
    rng = np.random.default_rng(np.random.SeedSequence(5))
    a, b = rng.normal(0.0, 1.0, 12), rng.normal(10.0, 3.0, 8)
    scores = np.concatenate([a, b])
    tasks = ["a"] * 12 + ["b"] * 8
    ideal = np.sqrt(np.sum((a - a.mean()) ** 2) / 12**2 + np.sum((b - b.mean()) ** 2) / 8**2) / 2
    r = bootstrap_task_mean(scores, tasks=tasks, n_resamples=20000, rng=rng)
    assert r.method == "stratified percentile"
    assert r.estimate == pytest.approx((a.mean() + b.mean()) / 2)
    assert r.standard_error == pytest.approx(ideal, rel=0.03)
    # Unstratified resampling mixes the tasks (the share of runs from task b varies), so its
    # spread is far larger here: the reason Agarwal et al. stratify.
    plain = bootstrap_task_mean(scores, n_resamples=4000, rng=rng)
    assert plain.standard_error > 2 * r.standard_error
    with pytest.raises(ValueError, match="`method` must be 'percentile' when tasks are given"):
        bootstrap_task_mean(scores, tasks=tasks, method="bca")


def test_stratified_interval_of_constant_tasks_is_a_point():
    # Runs constant within each task: every stratified resample is the data itself (hand-computed).
    scores = [0.0, 0.0, 0.0, 1.0, 1.0, 1.0]
    with pytest.warns(TooFewSeedsWarning, match="6 seeds"):  # Colas et al. (2018): too few for a bootstrap
        r = bootstrap_task_mean(scores, tasks=list("aaabbb"), n_resamples=500, rng=1)
    assert (r.interval.low, r.interval.high) == (0.5, 0.5)
