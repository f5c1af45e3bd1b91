"""Tabular Q-learning: fixed point on a hand-built MDP, terminated vs truncated, determinism, tasks."""

from __future__ import annotations

import dataclasses
from pathlib import Path

import gymnasium as gym
import numpy as np
import pytest

from harness.core.curves import Checkpoint
from harness.core.errors import ConfigError
from harness.manifest.loader import Manifest, load_manifest
from harness.core.seeding import RunSeed
from harness.core.spec import EvaluationPlan, RunSpec, TaskSpec
from harness.trainers.envs import evaluate_policy, make_env
from harness.trainers.tabular import TabularQSettings, greedy_action, learn, train

MANIFESTS = Path(__file__).resolve().parent.parent / "manifests"

START = 10  # the observation space starts at 10, so the trainer's offset handling is exercised


class ChainMDP(gym.Env):
    """Four states, two actions, deterministic; state 3 is terminal.

    action 0 ("stay"):    s0 -> s0 reward 0.5 (a loop that never terminates); s1 -> s0; s2 -> s2
    action 1 ("advance"): s0 -> s1, s1 -> s2, s2 -> s3 (terminal) with reward 10
    """

    observation_space = gym.spaces.Discrete(4, start=START)
    action_space = gym.spaces.Discrete(2)
    NEXT = {(0, 0): (0, 0.5), (0, 1): (1, 0.0), (1, 0): (0, 0.0), (1, 1): (2, 0.0),
            (2, 0): (2, 0.0), (2, 1): (3, 10.0)}

    def reset(self, *, seed=None, options=None):
        super().reset(seed=seed)
        self.state = 0
        return START, {}

    def step(self, action):
        self.state, reward = self.NEXT[(self.state, int(action))]
        return START + self.state, reward, self.state == 3, False, {}


def value_iteration(gamma: float, sweeps: int = 2000) -> np.ndarray:
    """Q* of ChainMDP by value iteration (Sutton & Barto 2018, section 4.4), terminal row 0."""
    q = np.zeros((4, 2))
    for _ in range(sweeps):
        v = q.max(axis=1)
        v[3] = 0.0
        for (s, a), (s2, r) in ChainMDP.NEXT.items():
            q[s, a] = r + (0.0 if s2 == 3 else gamma * v[s2])
    return q


def test_q_learning_reaches_the_value_iteration_fixed_point():
    # Q-learning converges to Q* for every state-action pair visited infinitely often, whatever the
    # behaviour policy (Watkins & Dayan 1992; Sutton & Barto 2018, section 6.5); on a deterministic
    # MDP a constant step size suffices. The behaviour here is uniformly random (epsilon = 1).
    # Hand-worked Q* with gamma = 0.9: Q(2,adv) = 10, Q(2,stay) = 0.9*10 = 9, Q(1,adv) = 9,
    # Q(0,adv) = 0.9*9 = 8.1, Q(0,stay) = 0.5 + 0.9*8.1 = 7.79, Q(1,stay) = 0.9*8.1 = 7.29.
    hand = np.array([[7.79, 8.1], [7.29, 9.0], [9.0, 10.0]])
    np.testing.assert_allclose(value_iteration(0.9)[:3], hand, rtol=1e-12)
    # A time limit of 4 steps cuts most episodes before the goal: the update must bootstrap through
    # those cuts (truncated) and only not through the goal (terminated), or Q stays below Q*.
    env = gym.wrappers.TimeLimit(ChainMDP(), max_episode_steps=4)
    settings = TabularQSettings(discount=0.9, step_size=0.5, explore_start=1.0, explore_end=1.0)
    (step, q), = learn(env, settings, stops=(20_000,), explore=np.random.default_rng(1), env_seed=0)
    assert step == 20_000
    np.testing.assert_allclose(q[:3], hand, atol=1e-9)
    assert q[3].tolist() == [0.0, 0.0]  # the terminal state is never updated


def test_treating_truncation_as_terminal_would_miss_the_fixed_point():
    # The control for the test above: the same run with a step limit of 1 makes every transition
    # out of s0 end its episode by truncation only. Because the learner bootstraps through it,
    # Q(0, stay) still reaches 7.79; had truncation been treated as terminal it would stay at 0.5.
    env = gym.wrappers.TimeLimit(ChainMDP(), max_episode_steps=1)
    settings = TabularQSettings(discount=0.9, step_size=0.5, explore_start=1.0, explore_end=1.0)
    (_, q), = learn(env, settings, stops=(20_000,), explore=np.random.default_rng(2), env_seed=0)
    # From s0 with one step per episode only s0's own actions are ever updated: Q(0,adv) bootstraps
    # from the never-visited s1 (initial value 0), so Q(0,adv) = 0 and Q(0,stay) = 0.5/(1-0.9) = 5.
    np.testing.assert_allclose(q[0], [5.0, 0.0], atol=1e-9)


def test_epsilon_schedule_is_linear_then_flat():
    s = TabularQSettings(explore_start=0.9, explore_end=0.1, explore_decay_steps=100)
    assert [s.epsilon(t) for t in (0, 50, 100, 1000)] == pytest.approx([0.9, 0.5, 0.1, 0.1])


def test_greedy_ties_go_to_the_lowest_action():
    q = np.array([[1.0, 3.0, 3.0, 0.0], [2.0, 2.0, 2.0, 2.0]])
    assert greedy_action(q, 0) == 1
    assert greedy_action(q, 1) == 0


@pytest.mark.parametrize(
    ("field", "value"),
    [("discount", 1.5), ("discount", -0.1), ("step_size", 0.0), ("explore_end", 2.0),
     ("explore_decay_steps", 0), ("initial_value", float("nan"))],
)
def test_settings_reject_out_of_range_values(field, value):
    with pytest.raises(ConfigError, match=rf"\[{field}\]: must be"):
        TabularQSettings(**{field: value})


def _run(task: TaskSpec, settings: TabularQSettings, *, budget: int, every: int, seed: RunSeed,
         episodes: int = 20) -> RunSpec:
    return RunSpec("test", task, "tabular-q", dataclasses.asdict(settings), budget,
                   EvaluationPlan(interval=every, episodes=episodes, seed=3), seed, 0, "sha256:test")


def test_same_spec_twice_gives_identical_checkpoints():
    run = _run(TaskSpec("FrozenLake-v1", {"is_slippery": True}, 100), TabularQSettings(),
               budget=6000, every=2000, seed=RunSeed(5, (1,)))
    first, second = list(train(run)), list(train(run))
    assert first == second
    assert tuple(c.step for c in first) == run.checkpoint_steps() == (0, 2000, 4000, 6000)
    other = list(train(dataclasses.replace(run, seed=RunSeed(5, (2,)))))
    assert [c.returns for c in other] != [c.returns for c in first]  # the seed matters


def test_learns_deterministic_frozenlake_above_the_registered_threshold():
    # Read from gymnasium's registry (FrozenLake-v1: reward_threshold 0.70, 100 steps).
    registered = gym.spec("FrozenLake-v1")
    task = TaskSpec("FrozenLake-v1", {"is_slippery": False}, registered.max_episode_steps)
    settings = TabularQSettings(step_size=0.5, explore_decay_steps=3000)
    curve = list(train(_run(task, settings, budget=5000, every=5000, seed=RunSeed(1))))
    assert curve[0].mean < registered.reward_threshold  # the untrained greedy policy fails
    assert curve[-1].mean >= registered.reward_threshold
    assert curve[-1].returns == (1.0,) * 20  # deterministic lake: the greedy policy always succeeds


def test_cliffwalking_learns_the_short_risky_path():
    # CliffWalking-v1 (Sutton & Barto 2018, Example 6.6): the shortest path along the cliff takes
    # 13 steps, so its return is -13; greedy Q-learning finds it (the example's "optimal path").
    task = TaskSpec("CliffWalking-v1", {}, 100)
    settings = TabularQSettings(discount=1.0, step_size=0.5, explore_decay_steps=2000)
    curve = list(train(_run(task, settings, budget=5000, every=5000, seed=RunSeed(4), episodes=3)))
    assert curve[-1].returns == (-13.0, -13.0, -13.0)


def test_rejects_tasks_without_discrete_spaces():
    run = _run(TaskSpec("CartPole-v1", {}, 500), TabularQSettings(), budget=10, every=10, seed=RunSeed(0))
    with pytest.raises(ValueError, match=r"needs discrete observations.*'dqn' trainer"):
        next(iter(train(run)))



def optimal_q(env: gym.Env, gamma: float) -> np.ndarray:
    """Q* by value iteration (Sutton & Barto 2018, section 4.4) on a toy-text task's own table P[s][a]."""
    table = env.unwrapped.P
    n_states, n_actions = env.observation_space.n, env.action_space.n
    width = max(len(table[s][a]) for s in range(n_states) for a in range(n_actions))
    prob, nxt, rew, live = (np.zeros((n_states, n_actions, width)) for _ in range(4))
    for s in range(n_states):
        for a in range(n_actions):
            for k, (p, s2, r, done) in enumerate(table[s][a]):
                prob[s, a, k], nxt[s, a, k], rew[s, a, k], live[s, a, k] = p, s2, r, not done
    nxt = nxt.astype(int)
    q = np.zeros((n_states, n_actions))
    for _ in range(10_000):
        updated = (prob * (rew + gamma * live * q.max(axis=1)[nxt])).sum(axis=2)
        if np.max(np.abs(updated - q)) < 1e-12:
            return updated
        q = updated
    raise AssertionError("value iteration did not converge")


def _first_seed_final(manifest: Manifest) -> tuple[Checkpoint, float]:
    """Final checkpoint of the manifest's first seed, and the optimal greedy policy's mean on the same episodes."""
    run = manifest.runs()[0]
    final = list(train(run))[-1]
    env = make_env(manifest.task)
    q = optimal_q(env, manifest.settings["discount"])
    best = evaluate_policy(lambda obs: int(np.argmax(q[int(obs)])), env, manifest.evaluation.episode_seeds())
    return final, float(np.mean(best))


@pytest.mark.slow  # about 3-5 s: one seed of the shipped manifest
def test_shipped_frozenlake_manifest_solves_the_slippery_lake():
    manifest = load_manifest(MANIFESTS / "frozenlake-q.toml")
    assert manifest.task.kwargs == {"is_slippery": True}
    final, optimum = _first_seed_final(manifest)
    threshold = gym.spec("FrozenLake-v1").reward_threshold  # 0.70, read from gymnasium's registry
    assert optimum >= threshold  # the task is solvable on these evaluation episodes
    assert final.mean >= threshold
    assert final.mean >= optimum - 0.05


@pytest.mark.slow  # about 3-5 s: one seed of the shipped manifest
def test_shipped_taxi_manifest_reaches_the_optimum():
    manifest = load_manifest(MANIFESTS / "taxi-q.toml")
    final, optimum = _first_seed_final(manifest)
    # gymnasium registers 8 as Taxi's reward threshold, above the optimal policy's mean on these
    # episodes: hence the manifest's own [check] threshold, which the optimum must clear.
    assert optimum < gym.spec("Taxi-v4").reward_threshold
    assert manifest.check.threshold <= optimum
    assert final.mean >= manifest.check.threshold
    assert final.mean >= optimum - 0.5
