"""Replay memory: a ring buffer of transitions over a leading axis of K seeds, sampled uniformly.

Seeds in lockstep advance together, so all K rings hold the same number of
transitions; each seed draws its own minibatch indices from its own Generator,
so a seed's samples do not depend on the others. Observations are stored with
a trailing column of ones (the bias input of :class:`harness.trainers.nn.MLP`),
so sampled rows go straight into the network's input buffer.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

__all__ = ["ReplayMemory"]


class ReplayMemory:
    """K ring buffers of ``(obs, action, reward, terminated, next_obs)`` transitions.

    Parameters
    ----------
    k
        Number of seeds.
    capacity
        Transitions kept per seed; the oldest is overwritten when full.
    obs_dim
        Length of a (flattened) observation.
    dtype
        Floating dtype of observations and rewards.

    Notes
    -----
    ``terminated`` is stored as 1.0/0.0 and means the episode reached a
    terminal state (no bootstrapping from ``next_obs``). A time-limit
    truncation is stored as not terminated: the value of ``next_obs`` still
    counts (common practice; Pardo et al. 2018, Time Limits in Reinforcement
    Learning, ICML).
    """

    def __init__(self, *, k: int, capacity: int, obs_dim: int, dtype: np.dtype | str):
        for name, value in (("k", k), ("capacity", capacity), ("obs_dim", obs_dim)):
            if isinstance(value, bool) or not isinstance(value, int) or value < 1:
                raise ValueError(f"`{name}` must be a positive integer, got {value!r}")
        self.k, self.capacity, self.obs_dim = k, capacity, obs_dim
        dt = np.dtype(dtype)
        self.obs = np.ones((k, capacity, obs_dim + 1), dtype=dt)
        self.next_obs = np.ones((k, capacity, obs_dim + 1), dtype=dt)
        self.action = np.zeros((k, capacity), dtype=np.intp)
        self.reward = np.zeros((k, capacity), dtype=dt)
        self.terminated = np.zeros((k, capacity), dtype=dt)
        self.size = 0
        self._pos = 0
        self._seed_offset = (np.arange(k, dtype=np.intp) * capacity)[:, None]

    def put(self, seed: int, obs: np.ndarray, action: int, reward: float, terminated: bool, next_obs: np.ndarray) -> None:
        """Write seed ``seed``'s transition of the current step (then call :meth:`advance` once for all seeds)."""
        p = self._pos
        self.obs[seed, p, :-1] = obs
        self.next_obs[seed, p, :-1] = next_obs
        self.action[seed, p] = action
        self.reward[seed, p] = reward
        self.terminated[seed, p] = terminated

    def advance(self) -> None:
        """Close the current step: every seed has written its transition."""
        self._pos = (self._pos + 1) % self.capacity
        self.size = min(self.size + 1, self.capacity)

    def sample_indices(self, rngs: Sequence[np.random.Generator], n: int, out: np.ndarray) -> np.ndarray:
        """Draw ``n`` uniform indices per seed, each from that seed's Generator, into ``out`` ``(K, n)``.

        Returns flat indices into the ``(K * capacity)`` rows, ready for :meth:`gather`.
        """
        if self.size == 0:
            raise ValueError("cannot sample from an empty replay memory")
        if len(rngs) != self.k:
            raise ValueError(f"`rngs` must hold one Generator per seed ({self.k}), got {len(rngs)}")
        for k, rng in enumerate(rngs):
            out[k] = rng.integers(0, self.size, size=n)
        np.add(out, self._seed_offset, out=out)
        return out

    def gather(self, flat_index: np.ndarray, *, obs: np.ndarray, next_obs: np.ndarray,
               action: np.ndarray, reward: np.ndarray, terminated: np.ndarray) -> None:
        """Copy the sampled transitions into the given ``(K, n, ...)`` buffers."""
        idx = flat_index.reshape(-1)
        d = self.obs_dim + 1
        _take_into(self.obs.reshape(-1, d), idx, obs)
        _take_into(self.next_obs.reshape(-1, d), idx, next_obs)
        _take_into(self.action.reshape(-1), idx, action)
        _take_into(self.reward.reshape(-1), idx, reward)
        _take_into(self.terminated.reshape(-1), idx, terminated)


def _take_into(source: np.ndarray, idx: np.ndarray, out: np.ndarray) -> None:
    """``out[...] = source[idx]`` reshaped to ``out``: straight into ``out`` when it is contiguous."""
    if out.flags.c_contiguous:
        np.take(source, idx, axis=0, out=out.reshape((-1, *source.shape[1:])), mode="clip")
    else:
        out[...] = np.take(source, idx, axis=0, mode="clip").reshape(out.shape)
