"""Environment construction and evaluation shared by the trainers.

:func:`make_env` builds a task's environment the gymnasium way;
:class:`LeanEnv` steps the same environment without per-step wrapper overhead
(the episode step limit is counted here, exactly as gymnasium's ``TimeLimit``
counts it); :func:`evaluate_policy` plays episodes one after the other and
:func:`evaluate_stacked` plays the episodes of K policies side by side so that
each step needs one batched action computation.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence

import gymnasium as gym
import numpy as np
from gymnasium.wrappers import OrderEnforcing, PassiveEnvChecker, TimeLimit

from harness.core.seeding import episode_action_rng
from harness.core.spec import TaskSpec

__all__ = ["LeanEnv", "evaluate_policy", "evaluate_stacked", "make_env"]


def make_env(task: TaskSpec) -> gym.Env:
    """Make the task's environment with its registered (or the manifest's) episode step limit.

    The passive environment checker is disabled: it only validates on the first
    steps and costs time on every step; the time limit, which is part of the
    task's semantics, stays.
    """
    kwargs = dict(task.kwargs)
    if task.max_episode_steps is not None:
        kwargs["max_episode_steps"] = task.max_episode_steps
    return gym.make(task.id, disable_env_checker=True, **kwargs)


def evaluate_policy(
    act: Callable[[np.ndarray], int],
    env: gym.Env,
    seeds: Sequence[int],
    *,
    epsilon: float = 0.0,
) -> tuple[float, ...]:
    """Play one episode per seed with ``act`` and return each episode's undiscounted return.

    With ``epsilon > 0`` a uniformly random action replaces the policy's with
    that probability, drawn from the episode's own Generator
    (:func:`harness.core.seeding.episode_action_rng`), as :func:`evaluate_stacked` draws it.
    """
    if not 0.0 <= epsilon <= 1.0:
        raise ValueError(f"`epsilon` must be in [0, 1], got {epsilon!r}")
    n_actions = int(env.action_space.n)
    returns = []
    for seed in seeds:
        rng = episode_action_rng(int(seed)) if epsilon > 0 else None
        obs, _ = env.reset(seed=int(seed))
        total = 0.0
        while True:
            if epsilon > 0 and rng.random() < epsilon:
                action = int(rng.integers(n_actions))
            else:
                action = int(act(obs))
            obs, reward, terminated, truncated, _ = env.step(action)
            total += float(reward)
            if terminated or truncated:
                break
        returns.append(total)
    return tuple(returns)


#: Wrappers whose per-step work :class:`LeanEnv` may skip: two checks that do not
#: change any value, and the time limit, which LeanEnv counts itself.
_SKIPPABLE = (OrderEnforcing, PassiveEnvChecker, TimeLimit)


class LeanEnv:
    """A task's environment stepped without wrapper overhead.

    When every wrapper :func:`make_env` put around the environment is an
    order/API check or the ``TimeLimit``, steps go straight to the unwrapped
    environment and the step limit is counted here with ``TimeLimit``'s rule
    (``truncated`` once the episode's step count reaches the limit), so
    episodes are exactly those of the wrapped environment. With any other
    wrapper the wrapped environment is stepped as is. Observations come back
    flattened to one dimension.
    """

    def __init__(self, task: TaskSpec):
        self.wrapped = make_env(task)
        self.action_space = self.wrapped.action_space
        self.observation_space = self.wrapped.observation_space
        limit, env = None, self.wrapped
        while isinstance(env, gym.Wrapper) and isinstance(env, _SKIPPABLE):
            if isinstance(env, TimeLimit):
                limit = env._max_episode_steps
            env = env.env
        if isinstance(env, gym.Wrapper):  # an unknown wrapper: keep the whole stack
            limit, env = None, self.wrapped
        self._env, self._limit, self._elapsed = env, limit, 0
        self._flatten = len(self.observation_space.shape or ()) != 1

    @property
    def limit(self) -> int | None:
        """The episode step limit counted here (None when the wrapped stack is stepped as is)."""
        return self._limit

    def reset(self, seed: int | None = None) -> np.ndarray:
        """Start an episode (seeding the environment's generator when ``seed`` is given)."""
        self._elapsed = 0
        obs, _ = self._env.reset(seed=seed)
        return np.ravel(obs) if self._flatten else obs

    def step(self, action: int) -> tuple[np.ndarray, float, bool, bool]:
        """``(observation, reward, terminated, truncated)`` of one step; the info dict is dropped."""
        obs, reward, terminated, truncated, _ = self._env.step(action)
        if self._limit is not None:
            self._elapsed += 1
            if self._elapsed >= self._limit:
                truncated = True
        return (np.ravel(obs) if self._flatten else obs), reward, terminated, truncated


def evaluate_stacked(
    act: Callable[[np.ndarray], np.ndarray],
    envs: Sequence[Sequence[LeanEnv]],
    seeds: Sequence[int],
    *,
    obs: np.ndarray,
    epsilon: float = 0.0,
) -> tuple[tuple[float, ...], ...]:
    """Play episode ``e`` (seeded ``seeds[e]``) of each of K policies side by side.

    Parameters
    ----------
    act
        Maps the observations ``obs`` ``(K, E, obs_dim)`` to action indices
        ``(K, E)``. Rows of finished episodes keep their last observation and
        their actions are ignored, so policy ``k`` always sees an ``(E, obs_dim)``
        block whatever the other policies do.
    envs
        ``envs[k][e]``: one evaluation environment per policy and episode.
    seeds
        The E episode seeds, the same for every policy.
    obs
        The ``(K, E, obs_dim)`` buffer ``act`` reads (e.g. a view of a network's input buffer).
    epsilon
        Probability of replacing the policy's action with a uniformly random
        one. The draws of episode ``e`` come from its own Generator
        (:func:`harness.core.seeding.episode_action_rng` of ``seeds[e]``), so
        every policy and every checkpoint meets the same random numbers.

    Returns
    -------
    returns
        ``returns[k][e]``: the undiscounted return of policy ``k`` in episode ``e``.
    """
    if not 0.0 <= epsilon <= 1.0:
        raise ValueError(f"`epsilon` must be in [0, 1], got {epsilon!r}")
    n_k, n_e = len(envs), len(seeds)
    if obs.shape[:2] != (n_k, n_e):
        raise ValueError(f"`obs` must have shape ({n_k}, {n_e}, obs_dim), got {obs.shape}")
    totals = [[0.0] * n_e for _ in range(n_k)]
    rngs = {}
    if epsilon > 0:
        rngs = {(k, e): episode_action_rng(int(s)) for k in range(n_k) for e, s in enumerate(seeds)}
    for k in range(n_k):
        for e, s in enumerate(seeds):
            obs[k, e] = envs[k][e].reset(seed=int(s))
    active = [(k, e) for k in range(n_k) for e in range(n_e)]
    while active:
        actions = act(obs)
        still = []
        for k, e in active:
            env = envs[k][e]
            a = int(actions[k, e])
            if epsilon > 0:
                rng = rngs[k, e]
                if rng.random() < epsilon:
                    a = int(rng.integers(env.action_space.n))
            o, reward, terminated, truncated = env.step(a + int(env.action_space.start))
            totals[k][e] += float(reward)
            if terminated or truncated:
                continue
            obs[k, e] = o
            still.append((k, e))
        active = still
    return tuple(tuple(t) for t in totals)
