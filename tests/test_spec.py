"""Run specs and evaluation plans: JSON round trips and the checkpoint grid."""

from __future__ import annotations

import json

from harness.core.seeding import plan_seeds
from harness.core.spec import EvaluationPlan, RunSpec, TaskSpec


def test_a_spec_read_back_from_json_equals_the_one_written():
    spec = RunSpec(
        manifest="m", task=TaskSpec("CartPole-v1", {}, 500), trainer="dqn",
        config={"hidden": [64, 64], "nested": {"sizes": [1, [2, 3]]}, "discount": 0.99},
        budget=1000, evaluation=EvaluationPlan(interval=400, episodes=3, seed=7),
        seed=plan_seeds(count=2, root=5)[1], index=1, config_hash="sha256:0",
    )
    assert spec.config["hidden"] == (64, 64)
    again = RunSpec.from_json(json.loads(json.dumps(spec.to_json())))
    assert again == spec


def test_checkpoints_at_zero_every_interval_and_the_end():
    # Common practice: evaluate the untrained policy, then at a fixed interval, and at the end.
    assert EvaluationPlan(interval=500, episodes=1).checkpoint_steps(1500) == (0, 500, 1000, 1500)
    assert EvaluationPlan(interval=400, episodes=1).checkpoint_steps(1000) == (0, 400, 800, 1000)
