"""Where a solo DQN training step spends its time: cProfile's top lines (issue 6).

    python benchmarks/profile_dqn.py                 # 4-128-128-2, 4,000 steps
    python benchmarks/profile_dqn.py --hidden 64 64 --steps 8000

BLAS is pinned to one thread. cProfile adds a fixed cost per Python-level call,
so small calls look more expensive here than they are; use bench_dqn.py for rates.
"""

from __future__ import annotations

import argparse
import cProfile
import pstats

from threadpoolctl import threadpool_limits

from harness.core.config import to_json
from harness.core.seeding import plan_seeds
from harness.core.spec import EvaluationPlan, RunSpec, TaskSpec
from harness.trainers import dqn


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--hidden", type=int, nargs="+", default=[128, 128])
    parser.add_argument("--steps", type=int, default=4_000)
    parser.add_argument("--top", type=int, default=15)
    args = parser.parse_args()
    config = to_json(dqn.DQNSettings(hidden=tuple(args.hidden), warmup_steps=64))
    (seed,) = plan_seeds(count=1, root=20261201)
    run = RunSpec("profile", TaskSpec("CartPole-v1"), "dqn", config, args.steps,
                  EvaluationPlan(args.steps, 1, 7), seed, 0, "profile")
    with threadpool_limits(1):
        profile = cProfile.Profile()
        profile.enable()
        for _ in dqn.train(run):
            pass
        profile.disable()
    pstats.Stats(profile).strip_dirs().sort_stats("tottime").print_stats(args.top)


if __name__ == "__main__":
    main()
