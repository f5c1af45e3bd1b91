"""One rule for the evaluation's randomness (issue 11): every path that plays evaluation
episodes draws an episode's random actions from that episode's seed
(``harness.core.seeding.episode_action_rng``), so the one-after-the-other evaluation of the
tabular trainer, the side-by-side evaluation of DQN and the random policy that sizes a
margin meet the same random numbers in episode ``e``.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from harness.core.spec import EvaluationPlan, TaskSpec
from harness.gate.curveset import random_policy_return
from harness.trainers.envs import LeanEnv, evaluate_policy, evaluate_stacked, make_env

CARTPOLE = TaskSpec("CartPole-v1")
SEEDS = (11, 12, 13, 14)


def _lean_returns(epsilon: float, policies: int = 2) -> tuple[tuple[float, ...], ...]:
    envs = [[LeanEnv(CARTPOLE) for _ in SEEDS] for _ in range(policies)]
    obs = np.zeros((policies, len(SEEDS), 4))
    # Push the cart towards the side the pole leans to: a policy that is not constant.
    return evaluate_stacked(lambda o: (o[..., 2] > 0).astype(int), envs, SEEDS, obs=obs, epsilon=epsilon)


@pytest.mark.parametrize("epsilon", [0.0, 0.3, 1.0])
def test_sequential_and_side_by_side_evaluation_draw_the_same_random_actions(epsilon):
    env = make_env(CARTPOLE)
    try:
        one_by_one = evaluate_policy(lambda o: int(o[2] > 0), env, SEEDS, epsilon=epsilon)
    finally:
        env.close()
    stacked = _lean_returns(epsilon)
    assert stacked[0] == stacked[1] == one_by_one  # exact: the same draws, not just similar returns
    if epsilon == 1.0:
        # A uniformly random policy: short, different episodes (about 22 steps on CartPole-v1,
        # common practice), so the draws are not degenerate.
        assert len(set(one_by_one)) > 1 and max(one_by_one) < 100


def test_the_random_policy_that_sizes_a_margin_follows_the_same_rule():
    plan = EvaluationPlan(interval=1, episodes=len(SEEDS))
    assert plan.episode_seeds() != SEEDS
    floor = random_policy_return(CARTPOLE, plan)
    envs = [[LeanEnv(CARTPOLE) for _ in plan.episode_seeds()]]
    obs = np.zeros((1, len(plan.episode_seeds()), 4))
    (returns,) = evaluate_stacked(lambda o: np.zeros(o.shape[:2], dtype=int), envs, plan.episode_seeds(), obs=obs,
                                  epsilon=1.0)
    assert floor == math.fsum(returns) / len(returns)


def test_evaluation_epsilon_is_checked():
    env = make_env(CARTPOLE)
    with pytest.raises(ValueError, match=r"`epsilon` must be in \[0, 1\], got 1.5"):
        evaluate_policy(lambda o: 0, env, SEEDS, epsilon=1.5)
