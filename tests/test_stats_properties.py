"""Hypothesis property tests of invariants of the statistics, and the docstring examples."""

from __future__ import annotations

import doctest
import importlib
import warnings

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from harness.core.errors import TooFewSeedsWarning
from harness.stats import bootstrap_mean, holm, max_statistic_test, probability_of_improvement

MODULES = [
    "harness.gate.metrics",
    "harness.stats._result",
    "harness.stats.aggregate",
    "harness.stats.bootstrap",
    "harness.stats.equivalence",
    "harness.stats.max_statistic",
    "harness.stats.multiple",
    "harness.stats.power",
    "harness.stats.rank",
    "harness.stats.welch",
]


@pytest.mark.parametrize("name", MODULES)
def test_docstring_examples(name):
    result = doctest.testmod(importlib.import_module(name), optionflags=doctest.ELLIPSIS)
    assert result.failed == 0 and result.attempted > 0


pvalue_lists = st.lists(st.floats(0.0, 1.0, allow_nan=False), min_size=1, max_size=30)


@settings(max_examples=100, deadline=None)
@given(pvalue_lists, st.sampled_from([0.01, 0.05, 0.2]))
def test_holm_between_bonferroni_and_raw(pvalues, alpha):
    # Holm (1979): never less powerful than Bonferroni, never rejects a check with p > alpha,
    # adjusted p-values are at least the raw ones and keep their order.
    r = holm(pvalues, alpha=alpha)
    m = len(pvalues)
    for p, adj, rej in zip(pvalues, r.adjusted, r.reject, strict=True):
        assert adj >= p - 1e-15 and adj <= min(1.0, m * p) + 1e-12
        if p * m <= alpha:
            assert rej
        if p > alpha:
            assert not rej
    order = np.argsort(pvalues, kind="stable")
    assert np.all(np.diff(np.asarray(r.adjusted)[order]) >= -1e-15)


samples = st.lists(st.floats(-1e3, 1e3, allow_nan=False), min_size=10, max_size=25).filter(
    lambda xs: max(xs) - min(xs) > 1e-3
)


@settings(max_examples=40, deadline=None)
@given(samples, st.floats(-1e3, 1e3), st.integers(0, 2**32 - 1))
def test_bootstrap_interval_is_translation_equivariant_and_nested(x, shift, seed):
    # Percentile intervals are equivariant under a shift of the data (Efron & Tibshirani 1993,
    # section 13.3) and, from the same resamples, a higher level gives a wider interval.
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", TooFewSeedsWarning)
        base = bootstrap_mean(x, method="percentile", n_resamples=500, rng=seed)
        moved = bootstrap_mean(np.asarray(x) + shift, method="percentile", n_resamples=500, rng=seed)
        wide = bootstrap_mean(x, method="percentile", confidence_level=0.99, n_resamples=500, rng=seed)
    tol = 1e-9 * (1 + abs(shift) + max(abs(v) for v in x))
    assert moved.interval.low == pytest.approx(base.interval.low + shift, abs=tol)
    assert moved.interval.high == pytest.approx(base.interval.high + shift, abs=tol)
    assert wide.interval.low <= base.interval.low + tol and base.interval.high <= wide.interval.high + tol


@settings(max_examples=60, deadline=None)
@given(st.lists(st.integers(0, 5), min_size=1, max_size=12), st.lists(st.integers(0, 5), min_size=1, max_size=12))
def test_probability_of_improvement_is_complementary(x, y):
    # P(X > Y) + P(Y > X) + P(X = Y) = 1 with ties counted one half each way (Agarwal et al. 2021).
    assert probability_of_improvement(x, y) + probability_of_improvement(y, x) == pytest.approx(1.0)


@settings(max_examples=25, deadline=None)
@given(st.integers(0, 2**32 - 1))
def test_max_statistic_swap_negates_statistics(seed):
    # Swapping the groups negates Welch's t at every checkpoint (common practice).
    rng = np.random.default_rng(seed)
    a, b = rng.normal(size=(4, 6)), rng.normal(size=(5, 6))
    ab = max_statistic_test(a, b, n_resamples=50, rng=1)
    ba = max_statistic_test(b, a, n_resamples=50, rng=1)
    assert ab.statistics == pytest.approx(tuple(-t for t in ba.statistics))
    # 126 relabellings > 50 resamples: random; p-values are valid probabilities in (0, 1].
    assert all(0.0 < p <= 1.0 for p in ab.adjusted_pvalues)
