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
        Floating dtype of everything stored (actions are stored as exact small integers).

    Notes
    -----
    Storage is two arrays, so a minibatch is two gathers: ``pairs``
    ``(K, capacity, 2, obs_dim + 1)`` holds ``[obs, 1]`` and ``[next_obs, 1]``
    of each transition side by side (a gathered block is, viewed as rows, the
    interleaved batch ``s_0, s'_0, s_1, s'_1, ...`` that one forward pass of
    the online network can take), and ``scalars`` ``(K, capacity, 3)`` holds
    action, reward and terminated. ``terminated`` is 1.0 when the episode
    reached a terminal state (no bootstrapping from ``next_obs``); a time-limit
    truncation is stored as 0.0: the value of ``next_obs`` still counts
    (Pardo et al. 2018, Time Limits in Reinforcement Learning, ICML).
    """

    #: Columns of :attr:`scalars`.
    ACTION, REWARD, TERMINATED = 0, 1, 2

    def __init__(self, *, k: int, capacity: int, obs_dim: int, dtype: np.dtype | str):
        for name, value in (("k", k), ("capacity", capacity), ("obs_dim", obs_dim)):
            if isinstance(value, bool) or not isinstance(value, int) or value < 1:
                raise ValueError(f"`{name}` must be a positive integer, got {value!r}")
        self.k, self.capacity, self.obs_dim = k, capacity, obs_dim
        dt = np.dtype(dtype)
        self.pairs = np.ones((k, capacity, 2, obs_dim + 1), dtype=dt)
        self.scalars = np.zeros((k, capacity, 3), dtype=dt)
        self.size = 0
        self._pos = 0
        self._seed_offset = (np.arange(k, dtype=np.intp) * capacity)[:, None]

    def put(self, seed: int, obs: np.ndarray, action: int, reward: float, terminated: bool, next_obs: np.ndarray) -> None:
        """Write seed ``seed``'s transition of the current step (then call :meth:`advance` once for all seeds)."""
        row = self.pairs[seed, self._pos]
        row[0, :-1] = obs
        row[1, :-1] = next_obs
        self.scalars[seed, self._pos] = (action, reward, terminated)

    def advance(self) -> None:
        """Close the current step: every seed has written its transition."""
        self._pos = (self._pos + 1) % self.capacity
        self.size = min(self.size + 1, self.capacity)

    def sample(self, rngs: Sequence[np.random.Generator], *, index: np.ndarray, pairs: np.ndarray,
               scalars: np.ndarray) -> None:
        """Draw a minibatch uniformly (with replacement) for each seed, from that seed's Generator.

        Parameters
        ----------
        rngs
            One Generator per seed; seed ``k`` draws ``n`` indices from ``rngs[k]``.
        index
            Scratch ``(K, n)`` integer buffer (``n`` is the minibatch size).
        pairs, scalars
            Contiguous output buffers ``(K, n, 2, obs_dim + 1)`` and ``(K, n, 3)``.
        """
        if self.size == 0:
            raise ValueError("cannot sample from an empty replay memory")
        if len(rngs) != self.k:
            raise ValueError(f"`rngs` must hold one Generator per seed ({self.k}), got {len(rngs)}")
        if not (pairs.flags.c_contiguous and scalars.flags.c_contiguous):
            raise ValueError("`pairs` and `scalars` must be C-contiguous output buffers")
        n = index.shape[1]
        for k, rng in enumerate(rngs):
            index[k] = rng.integers(0, self.size, size=n)
        np.add(index, self._seed_offset, out=index)
        flat = index.reshape(-1)
        np.take(self.pairs.reshape(-1, 2, self.obs_dim + 1), flat, axis=0, out=pairs.reshape(-1, 2, self.obs_dim + 1),
                mode="clip")
        np.take(self.scalars.reshape(-1, 3), flat, axis=0, out=scalars.reshape(-1, 3), mode="clip")
