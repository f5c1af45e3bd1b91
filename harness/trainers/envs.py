"""Environment construction and greedy evaluation shared by the trainers."""

from __future__ import annotations

from collections.abc import Callable, Sequence

import gymnasium as gym
import numpy as np

from harness.spec import TaskSpec

__all__ = ["evaluate_policy", "make_env"]


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
    rng: np.random.Generator | None = None,
) -> tuple[float, ...]:
    """Play one episode per seed with ``act`` and return each episode's undiscounted return.

    With ``epsilon > 0`` a uniformly random action replaces the policy's with
    that probability, drawn from ``rng`` (required then).
    """
    if epsilon > 0 and rng is None:
        raise ValueError("`rng` is required when `epsilon` > 0")
    n_actions = int(env.action_space.n)
    returns = []
    for seed in seeds:
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
