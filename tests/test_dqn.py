"""Tests of the NumPy DQN trainer: settings, Bellman targets, episode ends, lockstep, learning."""

from __future__ import annotations

import json
from pathlib import Path

import gymnasium as gym
import numpy as np
import pytest

from harness.core.config import resolve, to_json
from harness.core.curves import LearningCurve
from harness.core.errors import ConfigError
from harness.core.seeding import plan_seeds
from harness.core.spec import EvaluationPlan, RunSpec, TaskSpec, canonical_json
from harness.trainers import dqn
from harness.trainers.dqn import DQNSettings, bellman_targets, lockstep_size, train, train_lockstep
from harness.trainers.envs import LeanEnv, evaluate_policy, make_env
from harness.trainers.replay import ReplayMemory

CARTPOLE = TaskSpec("CartPole-v1")
SMALL = dict(hidden=(16, 16), minibatch=16, memory_size=2000, warmup_steps=50, explore_decay_steps=300,
             target_sync_every=50)


def make_runs(n, budget, config, *, every, episodes=3, task=CARTPOLE, epsilon=0.0):
    resolved = to_json(DQNSettings(**config))
    plan = EvaluationPlan(every, episodes, seed=7, epsilon=epsilon)
    return [RunSpec("test", task, "dqn", resolved, budget, plan, seed, i, "sha256:test")
            for i, seed in enumerate(plan_seeds(count=n, root=20261201))]


def curve_bytes(checkpoints) -> str:
    return canonical_json(LearningCurve(tuple(checkpoints)).to_json())


# ----------------------------------------------------------------------------- settings

def test_settings_normalise_lists_and_round_trip():
    s = DQNSettings(hidden=[32, 16], discount=1)
    assert s.hidden == (32, 16) and s.discount == 1.0 and isinstance(s.discount, float)
    config = to_json(s)
    assert json.loads(canonical_json(config))["hidden"] == [32, 16]  # JSON writes the tuple as a list
    assert DQNSettings(**config) == s


@pytest.mark.parametrize(
    ("changes", "key", "message"),
    [
        (dict(discount=1.5), "discount", r"must be a number in \[0, 1\], got 1.5"),
        (dict(hidden=[]), "hidden", "must be a non-empty list of positive integers"),
        (dict(hidden=[64, 0]), "hidden", "must be a non-empty list of positive integers"),
        (dict(minibatch=128, memory_size=64), "minibatch", "must not exceed memory_size=64"),
        (dict(memory_size=0), "memory_size", "must be a positive integer, got 0"),
        (dict(step_size=0.0), "step_size", r"must be a positive finite number, got 0.0"),
        (dict(adam_beta2=1.0), "adam_beta2", r"must be a number in \[0, 1\), got 1.0"),
        (dict(target="hrad"), "target", "unknown value 'hrad'. Did you mean 'hard'?"),
        (dict(loss="l2"), "loss", "Valid choices: 'huber', 'squared'"),
        (dict(dtype="float16"), "dtype", "Valid choices: 'float32', 'float64'"),
        (dict(double_q="yes"), "double_q", "must be true or false"),
        (dict(target="polyak", polyak_rate=0.0), "polyak_rate", "must be positive with target = 'polyak'"),
        (dict(warmup_steps=-1), "warmup_steps", "must be a non-negative integer"),
        (dict(step_size_end=0.1), "step_size_end", r"must be a number in \[0, 0.001\], got 0.1"),
    ],
)
def test_settings_iv(changes, key, message):
    with pytest.raises(ConfigError, match=message) as info:
        DQNSettings(**changes)
    assert info.value.key == key


def test_step_size_schedule_runs_from_step_size_to_step_size_end():
    (run,) = make_runs(1, 1000, dict(SMALL, step_size=1e-3, step_size_end=1e-4), every=1000)
    loop = dqn._Lockstep((run,), DQNSettings(**run.config))
    first = SMALL["warmup_steps"]
    assert loop.step_size(first, 1000) == 1e-3
    assert loop.step_size(1000, 1000) == pytest.approx(1e-4, rel=1e-12)
    assert loop.step_size((first + 1000) // 2, 1000) == pytest.approx(5.5e-4, rel=1e-12)


def test_settings_resolver_rejects_unknown_keys():
    with pytest.raises(ConfigError, match="Did you mean 'minibatch'"):
        resolve(DQNSettings, {"minibach": 32}, key="trainer.settings")


# ----------------------------------------------------------------------------- targets

def test_bellman_targets_hand_worked_batch():
    # Hand-worked batch (common practice; the target of Mnih et al. 2015, Methods, eq. for y_j):
    # y = r + gamma * (1 - terminated) * max_a' Q_target(s', a'), gamma = 0.9.
    #   0: r=1,   not terminal,        max(2, 3) = 3   -> 1 + 0.9 * 3 = 3.7
    #   1: r=1,   terminated           (no bootstrap)  -> 1
    #   2: r=0.5, truncated by the time limit: stored as NOT terminated, so it bootstraps
    #             max(-1, -2) = -1                     -> 0.5 - 0.9 = -0.4
    reward = np.array([1.0, 1.0, 0.5])
    terminated = np.array([0.0, 1.0, 0.0])
    q_target = np.array([[2.0, 3.0], [5.0, 4.0], [-1.0, -2.0]])
    np.testing.assert_allclose(bellman_targets(reward, terminated, q_target, discount=0.9), [3.7, 1.0, -0.4],
                               rtol=1e-15)
    # Double DQN (van Hasselt et al. 2016, eq. 4): a* = argmax of the ONLINE values, evaluated by
    # the target network. Online picks a* = 0, 1, 1 -> target values 2, 4, -2:
    #   0: 1 + 0.9 * 2 = 2.8;  1: terminal -> 1;  2: 0.5 + 0.9 * (-2) = -1.3
    q_online = np.array([[1.0, 0.0], [0.0, 1.0], [0.0, 7.0]])
    np.testing.assert_allclose(
        bellman_targets(reward, terminated, q_target, discount=0.9, q_next_select=q_online), [2.8, 1.0, -1.3],
        rtol=1e-15)
    # Stacked over a leading seed axis, each seed's targets are its own.
    stacked = bellman_targets(np.stack([reward, reward]), np.stack([terminated, terminated]),
                              np.stack([q_target, q_online]), discount=0.9)
    np.testing.assert_allclose(stacked[0], [3.7, 1.0, -0.4], rtol=1e-15)


@pytest.mark.parametrize("limit", [5, None])
def test_replay_records_gymnasiums_terminated_and_truncated(limit):
    # Reference: gymnasium's own wrapped environment (gymnasium.make with its TimeLimit) replaying
    # the actions the trainer took. Terminal states must be stored as terminated; time-limit
    # truncations must not (they are bootstrapped through), and the next observation of a
    # transition is the step's own observation, not the reset one.
    task = TaskSpec("CartPole-v1", max_episode_steps=limit)
    budget = 300
    (run,) = make_runs(1, budget, dict(SMALL, warmup_steps=budget + 1, explore_end=1.0), every=budget, task=task)
    loop = dqn._Lockstep((run,), DQNSettings(**run.config))
    for _ in loop.run():
        pass
    pairs, scalars = loop.memory.pairs[0, :budget], loop.memory.scalars[0, :budget]
    env = make_env(task)
    obs, _ = env.reset(seed=run.streams().env_seed)
    ends = {"terminated": 0, "truncated": 0}
    for t in range(budget):
        np.testing.assert_array_equal(pairs[t, 0, :-1], obs)
        obs, reward, terminated, truncated, _ = env.step(int(scalars[t, ReplayMemory.ACTION]))
        np.testing.assert_array_equal(pairs[t, 1, :-1], obs)
        assert scalars[t, ReplayMemory.REWARD] == reward
        assert scalars[t, ReplayMemory.TERMINATED] == float(terminated)
        ends["terminated"] += terminated
        ends["truncated"] += truncated and not terminated
        if terminated or truncated:
            obs, _ = env.reset()
    if limit == 5:
        assert ends["truncated"] >= 50 and ends["terminated"] == 0  # CartPole cannot fall in 5 steps
    else:
        assert ends["terminated"] >= 5


def test_lean_env_keeps_the_registered_step_limit():
    # gymnasium's registry: CartPole-v1 is registered with max_episode_steps=500.
    assert LeanEnv(CARTPOLE).limit == gym.spec("CartPole-v1").max_episode_steps == 500
    assert LeanEnv(TaskSpec("CartPole-v1", max_episode_steps=7)).limit == 7


# ----------------------------------------------------------------------------- lockstep, determinism

@pytest.mark.parametrize(
    "variant",
    [
        dict(),  # hard target sync, Double DQN, Huber
        dict(target="polyak", double_q=False, loss="squared", max_grad_norm=0.5),  # some seeds clip
        dict(target="none", update_every=2),
    ],
)
def test_a_seeds_curve_does_not_depend_on_its_batch(variant):
    # Issue 6: seed k trained alone, in a batch of 4 and in a batch of 16 gives byte-identical curves.
    config = dict(SMALL, **variant)
    runs = make_runs(16, 400, config, every=200, epsilon=0.05 if variant else 0.0)
    sizes = (1, 4, 16) if not variant else (1, 4)
    curves = {}
    for size in sizes:
        for start in range(0, 4 if size < 16 else 16, size):
            batch = list(train_lockstep(runs[start : start + size]))
            for j in range(size):
                curves.setdefault(start + j, []).append(curve_bytes(cps[j] for cps in batch))
    for k, versions in curves.items():
        assert len(set(versions)) == 1, f"seed {k}: curve depends on the batch"
    assert len({v[0] for v in curves.values()}) > 1  # the seeds differ from each other
    assert [cp.step for cp in train(runs[0])] == list(runs[0].checkpoint_steps())


def test_same_run_twice_is_identical():
    (run,) = make_runs(1, 300, SMALL, every=100)
    assert curve_bytes(train(run)) == curve_bytes(train(run))


def test_train_lockstep_rejects_runs_that_differ_in_more_than_the_seed():
    a = make_runs(2, 300, SMALL, every=100)
    b = make_runs(2, 300, dict(SMALL, discount=0.5), every=100)
    with pytest.raises(ValueError, match="must differ only in their seeds"):
        list(train_lockstep([a[0], b[1]]))


def test_rejects_tasks_without_box_observations():
    (run,) = make_runs(1, 100, SMALL, every=100, task=TaskSpec("FrozenLake-v1"))
    with pytest.raises(ValueError, match="use the 'tabular-q' trainer"):
        list(train(run))


def test_lockstep_size_prefers_stacking_narrow_networks():
    assert lockstep_size(DQNSettings(hidden=(256, 256))) == 1
    assert lockstep_size(DQNSettings(hidden=(64, 64))) >= 2
    assert lockstep_size(DQNSettings(hidden=(32,))) >= lockstep_size(DQNSettings(hidden=(64, 64)))


# ----------------------------------------------------------------------------- learning

def test_learns_cartpole_well_above_a_random_policy():
    # A short budget: returns must rise clearly above a uniformly random policy's on the same
    # evaluation episodes (a random policy scores about 22 on CartPole-v1: common practice).
    config = dict(hidden=(64, 64), warmup_steps=500, explore_decay_steps=3000, target_sync_every=250)
    runs = make_runs(2, 6000, config, every=3000, episodes=5)
    env = make_env(CARTPOLE)
    random_returns = evaluate_policy(lambda obs: 0, env, runs[0].evaluation.episode_seeds(), epsilon=1.0)
    random_mean = float(np.mean(random_returns))
    assert random_mean < 40
    *_, last = train_lockstep(runs)
    finals = [cp.mean for cp in last]
    assert min(finals) > 4 * random_mean, f"final means {finals} vs random {random_mean}"


def test_shipped_cartpole_manifest_is_valid():
    from harness.manifest.loader import load_manifest

    path = Path(__file__).resolve().parents[1] / "manifests" / "cartpole-dqn.toml"
    manifest = load_manifest(path)
    runs = manifest.runs()
    assert len(runs) == 20 and runs[0].task.id == "CartPole-v1" and runs[0].trainer == "dqn"
    DQNSettings(**runs[0].config)
