"""Trainers that misbehave in ways the signal and exit-code tests need (named ``"fault_toys:<function>"``).

Like ``runner_toys`` they follow the trainer interface and draw only from the run's own seed
streams; worker processes import this module by name (``tests/`` is on ``sys.path``).
"""

from __future__ import annotations

import time
from pathlib import Path

from harness.core.curves import Checkpoint
from harness.core.spec import RunSpec


def hang_then_clean_up(run: RunSpec):
    """Yield the first checkpoint, then hang; on the way out (any stop) write ``config["marker"]``.

    Stands for a trainer that started a program of its own and must stop it when told to.
    """
    try:
        yield Checkpoint(0, (0.0,) * run.evaluation.episodes)
        time.sleep(3600)
    finally:
        Path(run.config["marker"]).write_text(f"cleaned up seed {run.seed.label}\n")
