"""Tabular Q-learning for tasks with discrete observations and actions (gymnasium's toy-text tasks).

One-step Q-learning (Watkins 1989; Sutton & Barto 2018, section 6.5, the
"Q-learning (off-policy TD control)" box)::

    Q(s, a) <- Q(s, a) + step_size * (target - Q(s, a))
    target  = r                                  if s' is terminal (``terminated``)
              r + discount * max_a' Q(s', a')    otherwise, also when the episode was cut
                                                 by a time limit (``truncated``)

Behaviour is epsilon-greedy with epsilon falling linearly from
``explore_start`` to ``explore_end`` over ``explore_decay_steps`` environment
steps, then constant. Greedy ties during training are broken uniformly at
random from the run's exploration stream (with an all-equal initial table this
is what lets the agent wander); at evaluation they go to the lowest action
index, so the evaluated policy is a deterministic function of the table.

The table is float64: exact enough that a run is a pure function of its seed,
and small (Taxi-v4 is 500 x 6).
"""

from __future__ import annotations

import dataclasses
from collections.abc import Iterator, Sequence

import gymnasium as gym
import numpy as np

from harness.core.config import check_number
from harness.core.curves import Checkpoint
from harness.core.spec import RunSpec
from harness.trainers.envs import evaluate_policy, make_env
from harness.trainers.schedule import linear_decay

__all__ = ["TabularQSettings", "greedy_action", "learn", "train"]


@dataclasses.dataclass(frozen=True, slots=True)
class TabularQSettings:
    """The ``[trainer.settings]`` of ``use = "tabular-q"``.

    Attributes
    ----------
    discount
        Discount factor of future rewards, in [0, 1].
    step_size
        Learning rate of the update, in (0, 1].
    explore_start, explore_end
        Exploration probability at step 0 and after ``explore_decay_steps`` steps, in [0, 1].
    explore_decay_steps
        Environment steps over which exploration falls linearly (a positive integer).
    initial_value
        Value every table entry starts at (optimistic values encourage exploration).
    """

    discount: float = 0.99
    step_size: float = 0.1
    explore_start: float = 1.0
    explore_end: float = 0.05
    explore_decay_steps: int = 10_000
    initial_value: float = 0.0

    def __post_init__(self) -> None:
        for name in ("discount", "explore_start", "explore_end"):
            check_number(getattr(self, name), name, low=0, high=1)
        check_number(self.step_size, "step_size", low=0, high=1, open_low=True)
        check_number(self.explore_decay_steps, "explore_decay_steps", low=1, integer=True)
        check_number(self.initial_value, "initial_value")

    def epsilon(self, step: int) -> float:
        """Exploration probability at environment step ``step`` (linear schedule, then flat).

        Examples
        --------
        >>> s = TabularQSettings(explore_start=1.0, explore_end=0.1, explore_decay_steps=10)
        >>> [round(s.epsilon(t), 2) for t in (0, 5, 10, 20)]
        [1.0, 0.55, 0.1, 0.1]
        """
        return linear_decay(self.explore_start, self.explore_end, self.explore_decay_steps, step)


def _discrete_size(space: gym.Space, what: str, env: gym.Env) -> tuple[int, int]:
    if not isinstance(space, gym.spaces.Discrete):
        name = env.spec.id if env.spec is not None else type(env.unwrapped).__name__
        raise ValueError(
            f"tabular Q-learning needs discrete {what}, but {name!r} has {space}; "
            "use a toy-text task (FrozenLake-v1, Taxi-v4, CliffWalking-v1) or the 'dqn' trainer"
        )
    return int(space.n), int(space.start)


def greedy_action(q: np.ndarray, state: int) -> int:
    """The greedy action of ``state``; ties go to the lowest action index (``np.argmax``)."""
    return int(np.argmax(q[state]))


def learn(
    env: gym.Env,
    settings: TabularQSettings,
    *,
    stops: Sequence[int],
    explore: np.random.Generator,
    env_seed: int,
) -> Iterator[tuple[int, np.ndarray]]:
    """Run Q-learning on ``env`` and yield ``(step, q)`` when the step count reaches each stop.

    Parameters
    ----------
    env
        An environment with ``Discrete`` observation and action spaces.
    settings
        The hyperparameters.
    stops
        Non-decreasing environment step counts at which to yield (``0`` yields the initial table).
    explore
        The generator of the exploration draws (one uniform draw per step, plus the random
        action or tie-break when needed).
    env_seed
        Seed of the first ``env.reset``; later resets continue the environment's own stream.

    Yields
    ------
    The step count and a copy of the table, shape ``(n_states, n_actions)``, float64, indexed
    from 0 (the spaces' ``start`` is subtracted).

    References
    ----------
    Watkins, C. J. C. H. (1989). Learning from delayed rewards. PhD thesis, Cambridge.
    Sutton, R. S. & Barto, A. G. (2018). Reinforcement Learning: An Introduction, 2nd ed.,
    section 6.5.
    """
    n_states, obs_start = _discrete_size(env.observation_space, "observations", env)
    n_actions, act_start = _discrete_size(env.action_space, "actions", env)
    if any(b < a for a, b in zip(stops, stops[1:])) or (stops and stops[0] < 0):
        raise ValueError(f"`stops` must be non-negative and non-decreasing, got {list(stops)}")
    # Python lists of floats: the same float64 arithmetic as NumPy, without its per-call overhead
    # on rows of 4-6 entries (about twice the steps per second).
    q = [[float(settings.initial_value)] * n_actions for _ in range(n_states)]
    discount, alpha = float(settings.discount), float(settings.step_size)
    obs, _ = env.reset(seed=int(env_seed))
    state = int(obs) - obs_start
    step = 0
    for stop in stops:
        while step < stop:
            row = q[state]
            if explore.random() < settings.epsilon(step):
                action = int(explore.integers(n_actions))
            else:
                best = max(row)
                ties = row.count(best)
                action = row.index(best)
                if ties > 1:
                    pick = int(explore.integers(ties))
                    action = [a for a, value in enumerate(row) if value == best][pick]
            obs, reward, terminated, truncated, _ = env.step(action + act_start)
            following = int(obs) - obs_start
            target = float(reward) if terminated else float(reward) + discount * max(q[following])
            row[action] += alpha * (target - row[action])
            step += 1
            if terminated or truncated:
                obs, _ = env.reset()
                following = int(obs) - obs_start
            state = following
        yield step, np.array(q, dtype=np.float64)


def train(run: RunSpec) -> Iterator[Checkpoint]:
    """Train tabular Q-learning for ``run.budget`` steps; yield a checkpoint at each checkpoint step."""
    settings = TabularQSettings(**run.config)
    env, eval_env = make_env(run.task), make_env(run.task)
    try:
        _, obs_start = _discrete_size(eval_env.observation_space, "observations", eval_env)
        _, act_start = _discrete_size(eval_env.action_space, "actions", eval_env)
        seeds = run.evaluation.episode_seeds()
        streams = run.streams()
        stops = run.checkpoint_steps()
        for step, q in learn(env, settings, stops=stops, explore=streams.explore, env_seed=streams.env_seed):
            returns = evaluate_policy(
                lambda obs: greedy_action(q, int(obs) - obs_start) + act_start,
                eval_env,
                seeds,
                epsilon=run.evaluation.epsilon,
            )
            yield Checkpoint(step, returns)
    finally:
        env.close()
        eval_env.close()
