"""Tests of harness.trainers.replay: ring buffer, uniform sampling, per-seed independence."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from harness.trainers.replay import ReplayMemory


def _fill(memory: ReplayMemory, steps: int, *, start: int = 0) -> None:
    """Transition number t of seed k has obs = [t, k], action t % 2, reward t, terminated t % 3 == 0."""
    for t in range(start, start + steps):
        for k in range(memory.k):
            memory.put(k, [t, k], t % 2, float(t), t % 3 == 0, [t + 1, k])
        memory.advance()


def _buffers(k: int, n: int, dtype="float64", obs_dim: int = 2):
    return (np.empty((k, n), np.intp), np.empty((k, n, 2, obs_dim + 1), dtype), np.empty((k, n, 3), dtype))


def test_ring_keeps_the_newest_transitions():
    memory = ReplayMemory(k=2, capacity=4, obs_dim=2, dtype="float64")
    _fill(memory, 6)
    assert memory.size == 4
    # Slots 0, 1 were overwritten by transitions 4, 5; slots 2, 3 hold 2, 3.
    np.testing.assert_array_equal(memory.pairs[1, :, 0, 0], [4, 5, 2, 3])
    np.testing.assert_array_equal(memory.pairs[1, :, 0, 1], [1, 1, 1, 1])  # seed index stored
    np.testing.assert_array_equal(memory.pairs[0, :, 1, 0], [5, 6, 3, 4])  # next_obs
    np.testing.assert_array_equal(memory.pairs[..., -1], 1.0)  # the bias column of ones
    np.testing.assert_array_equal(memory.scalars[0, :, ReplayMemory.TERMINATED], [0, 0, 0, 1])


def test_sample_returns_stored_transitions_intact():
    memory = ReplayMemory(k=3, capacity=10, obs_dim=2, dtype="float64")
    _fill(memory, 7)
    index, pairs, scalars = _buffers(3, 50)
    memory.sample([np.random.default_rng(i) for i in range(3)], index=index, pairs=pairs, scalars=scalars)
    t = pairs[..., 0, 0]
    assert np.all((0 <= t) & (t < 7))
    np.testing.assert_array_equal(pairs[..., 0, 1], np.arange(3)[:, None] * np.ones(50))  # own seed's rows
    np.testing.assert_array_equal(pairs[..., 1, 0], t + 1)
    np.testing.assert_array_equal(scalars[..., ReplayMemory.ACTION], t % 2)
    np.testing.assert_array_equal(scalars[..., ReplayMemory.REWARD], t)
    np.testing.assert_array_equal(scalars[..., ReplayMemory.TERMINATED], t % 3 == 0)


def test_a_seeds_samples_do_not_depend_on_the_others():
    # The lockstep contract at the memory level: seed k's minibatch comes from its own Generator.
    many = ReplayMemory(k=4, capacity=16, obs_dim=2, dtype="float32")
    alone = ReplayMemory(k=1, capacity=16, obs_dim=2, dtype="float32")
    _fill(many, 20)
    _fill(alone, 20)
    index, pairs, scalars = _buffers(4, 32, "float32")
    many.sample([np.random.default_rng(s) for s in (9, 8, 7, 6)], index=index, pairs=pairs, scalars=scalars)
    index1, pairs1, scalars1 = _buffers(1, 32, "float32")
    alone.sample([np.random.default_rng(7)], index=index1, pairs=pairs1, scalars=scalars1)
    np.testing.assert_array_equal(pairs[2, ..., 0], pairs1[0, ..., 0])
    np.testing.assert_array_equal(scalars[2], scalars1[0])


def test_sampling_is_uniform_over_the_filled_part():
    # Pearson's chi-square goodness of fit against the uniform distribution on the 7 filled slots
    # (scipy.stats.chisquare); a fixed seed makes the test deterministic.
    memory = ReplayMemory(k=1, capacity=10, obs_dim=2, dtype="float64")
    _fill(memory, 7)
    index, pairs, scalars = _buffers(1, 7000)
    memory.sample([np.random.default_rng(2026)], index=index, pairs=pairs, scalars=scalars)
    counts = np.bincount(pairs[0, :, 0, 0].astype(int), minlength=10)
    assert counts[7:].sum() == 0  # never the unfilled slots
    assert stats.chisquare(counts[:7]).pvalue > 0.001


def test_replay_iv():
    with pytest.raises(ValueError, match="`capacity` must be a positive integer, got 0"):
        ReplayMemory(k=1, capacity=0, obs_dim=2, dtype="float32")
    memory = ReplayMemory(k=2, capacity=4, obs_dim=2, dtype="float32")
    index, pairs, scalars = _buffers(2, 3, "float32")
    with pytest.raises(ValueError, match="empty replay memory"):
        memory.sample([np.random.default_rng(0)] * 2, index=index, pairs=pairs, scalars=scalars)
    _fill(memory, 2)
    with pytest.raises(ValueError, match=r"one Generator per seed \(2\), got 1"):
        memory.sample([np.random.default_rng(0)], index=index, pairs=pairs, scalars=scalars)
    with pytest.raises(ValueError, match="C-contiguous"):
        memory.sample([np.random.default_rng(0)] * 2, index=index, pairs=pairs[:, ::2], scalars=scalars)
