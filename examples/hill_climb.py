"""A complete user trainer for rl-harness: hill climbing on a linear policy.

Point a manifest at it with ``use = "hill_climb:train"`` (the manifest's folder is
on the import path) and the harness trains, stores, and verifies it exactly as
it does its built-in trainers. The whole interface is one function::

    train(run: harness.RunSpec) -> Iterable[harness.Checkpoint]

yielding one checkpoint per ``run.checkpoint_steps()``. All randomness must come
from ``run.streams()`` (per-run generators) and ``run.evaluation.episode_seeds()``
(the evaluation episodes, identical for every run), which is what makes a rerun
bitwise reproducible.

The method: keep the best weight matrix found so far; each episode tries the
best weights plus Gaussian noise and keeps them if the episode's return is at
least as good (random-search hill climbing, common practice).
"""

from __future__ import annotations

import dataclasses
from collections.abc import Iterator

import numpy as np

from harness import Checkpoint, RunSpec
from harness.core.errors import ConfigError
from harness.trainers.envs import evaluate_policy, make_env


@dataclasses.dataclass(frozen=True, slots=True)
class HillClimbSettings:
    """The ``[trainer.settings]`` of this trainer; the harness validates the manifest against it."""

    noise_scale: float = 0.5

    def __post_init__(self) -> None:
        if not self.noise_scale > 0:
            raise ConfigError(f"must be > 0, got {self.noise_scale!r}", key="noise_scale")


def train(run: RunSpec) -> Iterator[Checkpoint]:
    settings = HillClimbSettings(**run.config)
    streams = run.streams()
    env, eval_env = make_env(run.task), make_env(run.task)
    n_obs, n_act = env.observation_space.shape[0], int(env.action_space.n)
    best_w = streams.init.normal(0.0, 0.1, size=(n_obs, n_act))
    best_return = -np.inf

    def evaluate(step: int) -> Checkpoint:
        returns = evaluate_policy(lambda obs: int(np.argmax(obs @ best_w)), eval_env,
                                  run.evaluation.episode_seeds())
        return Checkpoint(step, returns)

    targets = iter(run.checkpoint_steps())
    next_eval = next(targets)
    step = 0
    obs, _ = env.reset(seed=streams.env_seed)
    trial_w = best_w + settings.noise_scale * streams.explore.normal(size=best_w.shape)
    episode_return = 0.0
    while True:
        if step == next_eval:
            yield evaluate(step)
            next_eval = next(targets, None)
            if next_eval is None:
                return
        obs, reward, terminated, truncated, _ = env.step(int(np.argmax(obs @ trial_w)))
        step += 1
        episode_return += float(reward)
        if terminated or truncated:
            if episode_return >= best_return:
                best_w, best_return = trial_w, episode_return
            trial_w = best_w + settings.noise_scale * streams.explore.normal(size=best_w.shape)
            episode_return = 0.0
            obs, _ = env.reset()


train.settings_type = HillClimbSettings
