"""One plan's state while the runner trains it: its records so far, the cache claims it holds, its folder.

A :class:`PlanState` decides where each run's record comes from (resumed from the
results folder, taken from the cache, or accepted from a worker), writes each record's
file the moment it arrives, stores trained runs in the cache, and reports each
outcome as a :class:`~harness.execute.RunEvent`. Every change to the results folder
that a concurrent runner could see (the index, stale files) happens under the
folder's file lock; the cache locks that keep two runners from training one run twice
(:mod:`harness.execute.runner`) are taken by :meth:`PlanState.claim`.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable, Mapping
from pathlib import Path

from filelock import FileLock, Timeout

from harness.core.atomic import sweep_stale_temporaries
from harness.core.errors import ResultsError
from harness.core.spec import RunSpec
from harness.execute import RunEvent, Task, WorkerResult
from harness.store.cache import RunCache
from harness.store.results import (
    INDEX_FILE,
    TRAINER_SOURCE,
    ResultSet,
    RunRecord,
    read_index,
    read_record,
    record_file_name,
    same_spec,
    write_index,
    write_record,
)

__all__ = ["OnEvent", "PlanState"]

_LOCK_FILE = ".rlharness.lock"

OnEvent = Callable[[RunEvent], None]


def _drop_stale_index(folder: Path, manifest: str, config_hash: str) -> None:
    """Remove an index describing another configuration: the folder is about to be rewritten."""
    if not (folder / INDEX_FILE).exists():
        return
    try:
        index = read_index(folder)
        stale = index.get("config_hash") != config_hash or index.get("manifest") != manifest
    except ResultsError:
        stale = True
    if stale:
        (folder / INDEX_FILE).unlink(missing_ok=True)


def _resumable(folder: Path, spec: RunSpec, versions: Mapping[str, str]) -> RunRecord | None:
    path = folder / record_file_name(spec)
    if not path.is_file():
        return None
    try:
        record = read_record(path)
    except ResultsError:
        return None
    if record.ok and same_spec(record.spec, spec) and dict(record.versions) == dict(versions):
        return dataclasses.replace(record, spec=spec)
    return None


class PlanState:
    """One plan's state in a :func:`~harness.execute.runner.run_plans` call: records, claims, where results go.

    ``offset`` turns the plan's run indices into indices unique across the plans of the call:
    the executor reports ``offset + index`` (the RunSpec itself keeps its index).
    """

    def __init__(
        self,
        specs: tuple[RunSpec, ...],
        folder: Path,
        versions: dict[str, str],
        cache: RunCache | None,
        on_event: OnEvent | None,
        offset: int = 0,
        search_path: str | None = None,
    ):
        self.specs: tuple[RunSpec, ...] = specs
        self.folder: Path = folder
        self.versions: dict[str, str] = versions
        self.cache: RunCache | None = cache
        self.on_event: OnEvent | None = on_event
        self.offset: int = offset
        self.search_path: str | None = search_path
        self.records: dict[int, RunRecord] = {}
        self.sources: dict[int, str] = {}
        self.wall: dict[int, float] = {}
        self.claims: dict[int, FileLock] = {}

    def emit(self, event: RunEvent) -> None:
        if self.on_event is not None:
            self.on_event(dataclasses.replace(event, manifest=self.specs[0].manifest))

    def outgoing(self, task: Task) -> Task:
        """The task as the executor sees it: reporting run indices unique across the call's plans."""
        return dataclasses.replace(task, index_offset=self.offset) if self.offset else task

    def tidy_folder(self) -> None:
        """Drop an index of another configuration and temporaries left by a runner killed mid-write."""
        with FileLock(str(self.folder / _LOCK_FILE)):
            _drop_stale_index(self.folder, self.specs[0].manifest, self.specs[0].config_hash)
            sweep_stale_temporaries(self.folder)

    def drop_index(self) -> None:
        """Remove the index before files change: until the new one is written, the folder has none."""
        with FileLock(str(self.folder / _LOCK_FILE)):
            (self.folder / INDEX_FILE).unlink(missing_ok=True)

    def write_index(self) -> ResultSet:
        """Write the index of a plan whose every run has a record; return its result set."""
        results = ResultSet(self.specs[0].manifest, self.specs[0].config_hash,
                            tuple(self.records[s.index] for s in self.specs))
        with FileLock(str(self.folder / _LOCK_FILE)):
            write_index(self.folder, results, timings=self.wall, sources=self.sources)
        return results

    def keep(self, record: RunRecord, source: str, wall: float | None = None) -> None:
        index = record.spec.index
        if source != "resumed":  # a resumed record is read from its file, which stays as it is
            write_record(self.folder, record)
        if source == "trained" and self.cache is not None:
            self.cache.put(record)
        self.records[index], self.sources[index] = record, source
        if wall is not None:
            self.wall[index] = wall
        lock = self.claims.pop(index, None)
        if lock is not None:
            lock.release()
        label = record.spec.seed.label
        if record.ok:
            self.emit(RunEvent("finished", index, label, mean_return=record.curve.checkpoints[-1].mean, source=source))
        else:
            self.emit(RunEvent("failed", index, label, source=source, message=record.failure.strip().splitlines()[-1]))

    def resume_or_take_cached(self, spec: RunSpec) -> None:
        """Keep the run's finished file in the folder if it matches, else its cached record if any."""
        record = _resumable(self.folder, spec, self.versions)
        if record is not None:
            self.keep(record, "resumed")
        else:
            self.from_cache(spec)

    def from_cache(self, spec: RunSpec) -> bool:
        record = self.cache.get(spec, self.versions) if self.cache is not None else None
        if record is not None:
            self.keep(record, "cache")
        return record is not None

    def claim(self, task: Task, *, wait: bool) -> Task | None:
        """Lock the task's runs in the cache; drop those another runner finished meanwhile.

        Returns the task still to train, or ``None`` when nothing is left or (``wait=False``)
        another runner holds one of its locks.
        """
        if self.cache is None:
            return task
        locks = []
        for spec in task.specs:
            lock = self.cache.claim(spec, self.versions)
            try:
                lock.acquire(timeout=-1 if wait else 0)
            except Timeout:
                for held in locks:
                    held.release()
                return None
            locks.append(lock)
        todo = []
        for spec, lock in zip(task.specs, locks, strict=True):
            self.claims[spec.index] = lock
            if not self.from_cache(spec):
                todo.append(spec)
        return dataclasses.replace(task, specs=tuple(todo)) if todo else None

    def accept(self, result: WorkerResult) -> None:
        spec = self.specs[result.index]
        versions = self.versions
        if result.versions is not None:  # the worker's installed versions; the source is the parent's
            versions = {**result.versions, TRAINER_SOURCE: self.versions[TRAINER_SOURCE]}
        if result.curve is not None:
            record = RunRecord(spec, "ok", result.curve, None, versions)
        else:
            record = RunRecord(spec, "failed", None, result.failure, versions)
        self.keep(record, "trained", result.wall_seconds)

    def release_all(self) -> None:
        for lock in self.claims.values():
            lock.release()
        self.claims.clear()
