"""Toy trainers and plans for the runner, store, cache, fault and dask tests.

The trainers follow the trainer interface (``harness.trainers``) and are named
``"runner_toys:<function>"`` in a RunSpec; worker processes import this module
by that name (pytest puts ``tests/`` on ``sys.path``, and multiprocessing passes
``sys.path`` on to its children). Their numbers come only from the run's own
seed streams, so a run is a pure function of its spec. Misbehaviour is chosen
per seed through the config: ``{"bad": [labels], "mode": ...}``.
"""

from __future__ import annotations

import dataclasses
import os
import signal
import time
from pathlib import Path

from harness.core.curves import Checkpoint
from harness.core.seeding import plan_seeds
from harness.core.spec import EvaluationPlan, RunSpec, TaskSpec, plan_config, sha256_of


def toy(run: RunSpec):
    """A noisy rising curve; misbehaves for the seeds listed in ``config["bad"]``.

    ``mode``: ``"raise"`` (an exception at the second checkpoint), ``"nan"`` (a NaN return),
    ``"hang"`` (sleeps for an hour), ``"die"`` (SIGKILLs its own worker process unless the file
    ``config["marker"]`` exists; it creates it first, so only the first attempt dies).
    ``pause`` seconds are slept before every checkpoint.
    """
    cfg = run.config
    rng = run.streams().explore
    bad = run.seed.label in cfg.get("bad", ())
    for n, step in enumerate(run.checkpoint_steps()):
        time.sleep(cfg.get("pause", 0.0))
        returns = rng.normal(step / run.budget, 1.0, size=run.evaluation.episodes)
        if bad and n == 1:
            mode = cfg["mode"]
            if mode == "raise":
                raise RuntimeError(f"toy trainer broke on purpose at step {step}")
            if mode == "nan":
                returns[0] = float("nan")
            if mode == "hang":
                time.sleep(3600)
            if mode == "die":
                marker = Path(cfg["marker"])
                if not marker.exists():
                    marker.touch()
                    os.kill(os.getpid(), signal.SIGKILL)
        yield Checkpoint(step, tuple(float(r) for r in returns))


def skipping(run: RunSpec):
    """A broken trainer: it leaves out the second planned checkpoint."""
    for n, step in enumerate(run.checkpoint_steps()):
        if n != 1:
            yield Checkpoint(step, (0.0,))


def indexed(run: RunSpec):
    """Returns equal to the run's index: shows which index a trainer was handed."""
    for step in run.checkpoint_steps():
        yield Checkpoint(step, (float(run.index),))


def toy_specs(
    n: int = 4, *, config: dict | None = None, budget: int = 100, trainer: str = "runner_toys:toy", name: str = "toy"
) -> tuple[RunSpec, ...]:
    """The plan of a toy manifest: ``n`` seeds spawned from root 7, checkpoints every 25 steps."""
    config = dict(config or {})
    task = TaskSpec("CartPole-v1", {}, 500)
    evaluation = EvaluationPlan(interval=25, episodes=3, seed=1)
    seeds = plan_seeds(count=n, root=7)
    specs = [RunSpec(name, task, trainer, config, budget, evaluation, seed, i, "") for i, seed in enumerate(seeds)]
    config_hash = sha256_of(plan_config(specs))  # as a manifest's loader computes it
    return tuple(dataclasses.replace(s, config_hash=config_hash) for s in specs)


def folder_bytes(folder: Path) -> dict[str, bytes]:
    """Every per-seed file of a results folder, by name (the index holds wall times, so it is left out)."""
    return {p.name: p.read_bytes() for p in sorted(Path(folder).glob("seed-*.json"))}
