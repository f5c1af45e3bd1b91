"""What the runner and its executors exchange: tasks in, progress events and outcomes out.

A :class:`Task` is one unit of work for one worker: a single run, or a group of
runs that the trainer trains in lockstep. Tasks travel as JSON text (the
RunSpecs' ``to_json``), outcomes come back as :class:`WorkerResult` values built
from plain data, so nothing but primitives crosses a process or network
boundary.

An executor implements the small :class:`Executor` protocol the runner drives:
``capacity`` free slots, ``submit`` a task, ``poll`` for what happened, ``close``.
"""

from __future__ import annotations

import dataclasses
import json
from collections.abc import Sequence
from typing import Protocol

from harness.core.curves import LearningCurve
from harness.core.spec import RunSpec
from harness.trainers.command import COMMAND_TRAINER

#: Seconds the executor waits beyond a command run's time limit before stopping its worker.
COMMAND_GRACE = 5.0

__all__ = ["EVENT_KINDS", "Executor", "RunEvent", "WorkerResult", "Task"]

#: Kinds of :class:`RunEvent`, in the order a run meets them.
EVENT_KINDS = ("planned", "started", "checkpoint", "finished", "failed")


@dataclasses.dataclass(frozen=True, slots=True)
class RunEvent:
    """Something that happened to one run, for progress displays.

    Attributes
    ----------
    kind
        One of :data:`EVENT_KINDS`.
    index
        The run's position in the manifest's seed list.
    seed
        The run's seed label.
    step, mean_return
        For ``"checkpoint"``: the environment step and the mean evaluation return.
    source
        For ``"finished"``/``"failed"``: ``"trained"``, ``"cache"`` or ``"resumed"``.
    budget
        The run's budget in environment steps (for ``"planned"``).
    message
        For ``"failed"``: the first line of the reason.
    manifest
        The run's manifest name (set by the runner; ``None`` in an executor's own events).
    """

    kind: str
    index: int
    seed: str
    step: int | None = None
    mean_return: float | None = None
    source: str | None = None
    budget: int | None = None
    message: str | None = None
    manifest: str | None = None

    def __post_init__(self) -> None:
        if self.kind not in EVENT_KINDS:
            raise ValueError(f"`kind` must be one of {EVENT_KINDS}, got {self.kind!r}")


@dataclasses.dataclass(frozen=True, slots=True)
class Task:
    """Runs trained together by one worker (several only when the trainer offers lockstep).

    ``search_path`` is a folder where the worker may also look for a user trainer's module (the
    manifest's folder); ``results_dir`` is the results folder, where a command trainer's runs
    keep their curve file and output log. ``index_offset`` is added to every run index the task
    reports (events and results), so that the runs of several manifests sharing one executor
    (:func:`harness.execute.runner.run_plans`) report distinct indices; the RunSpecs keep theirs.
    """

    specs: tuple[RunSpec, ...]
    time_limit: float | None = None
    search_path: str | None = None
    results_dir: str | None = None
    index_offset: int = 0

    def __post_init__(self) -> None:
        if not self.specs:
            raise ValueError("a task needs at least one run")
        if len({s.trainer for s in self.specs}) != 1:
            raise ValueError("runs of one task must share a trainer")
        if self.time_limit is not None and not self.time_limit > 0:
            raise ValueError(f"`time_limit` must be a positive number of seconds, got {self.time_limit!r}")

    @property
    def deadline_seconds(self) -> float | None:
        """The task's time budget: the per-run limit times the runs trained together.

        A command trainer's worker enforces the limit itself (stopping the program's process
        group and keeping its log), so the executor's deadline is only a backstop a little later.
        """
        if self.time_limit is None:
            return None
        grace = COMMAND_GRACE if self.specs[0].trainer == COMMAND_TRAINER else 0.0
        return self.time_limit * len(self.specs) + grace

    def payload(self) -> str:
        runs = [s.to_json() for s in self.specs]
        return json.dumps({"runs": runs, "search_path": self.search_path, "results_dir": self.results_dir,
                           "time_limit": self.time_limit, "index_offset": self.index_offset}, allow_nan=False)


@dataclasses.dataclass(frozen=True, slots=True)
class WorkerResult:
    """What a worker reports for one run: a curve, or why there is none.

    ``versions`` is ``None`` when the worker could not report them (it died or was stopped).
    """

    index: int
    curve: LearningCurve | None
    failure: str | None
    versions: dict[str, str] | None
    wall_seconds: float

    @classmethod
    def failed_all(cls, task: Task, reason: str, *, wall_seconds: float) -> tuple[WorkerResult, ...]:
        """The same failure for every run of a task (time limit, dead worker); versions unknown."""
        return tuple(cls(task.index_offset + s.index, None, reason, None, wall_seconds) for s in task.specs)

    @classmethod
    def from_plain(cls, data: dict) -> tuple[WorkerResult, ...]:
        """Decode a worker's reply (see :func:`harness.execute.work.run_task`)."""
        return tuple(
            cls(
                index=int(r["index"]),
                curve=None if r["curve"] is None else LearningCurve.from_json(r["curve"]),
                failure=r["failure"],
                versions=dict(data["versions"]),
                wall_seconds=float(data["wall_seconds"]),
            )
            for r in data["runs"]
        )


class Executor(Protocol):
    """How the runner drives an executor (local process pool, dask cluster)."""

    def capacity(self) -> int:
        """How many more tasks can start now."""

    def submit(self, task: Task) -> None:
        """Start a task; it must not block on the task's work."""

    def poll(self, timeout: float) -> Sequence[RunEvent | WorkerResult]:
        """Wait up to ``timeout`` seconds; return checkpoint events and finished outcomes."""

    def pending(self) -> int:
        """Tasks submitted and not yet reported."""

    def close(self) -> None:
        """Stop every worker this executor started (cancelling unfinished tasks)."""
