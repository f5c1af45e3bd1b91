"""Trainers: RunSpec in, evaluation checkpoints out.

The interface every trainer implements, built-in or user-written, is a plain
function ``train(run: RunSpec) -> Iterable[Checkpoint]`` that yields one
:class:`~harness.core.curves.Checkpoint` per step of ``run.checkpoint_steps()``, in
order. Trainers know nothing of statistics or storage. All randomness must come
from ``run.streams()`` and ``run.evaluation.episode_seeds()``.

A trainer may also offer lockstep training of several seeds in one process:
``train_lockstep(runs: Sequence[RunSpec]) -> Iterable[tuple[Checkpoint, ...]]``
yielding, at each checkpoint step, one checkpoint per run. Seed ``k``'s
checkpoints must not depend on which other runs share its batch.
"""
