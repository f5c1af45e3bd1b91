"""The runner: train every seed of a manifest, keep what finished, never redo unchanged work.

For each planned run, in order of preference:

1. **resumed**: the results folder already holds its file from an earlier,
   interrupted or finished, run of the same spec with the same installed versions;
2. **cache**: the run cache holds it (see :mod:`harness.store.cache`);
3. **trained**: it is sent to an executor (local processes or dask), grouped in
   lockstep batches when the trainer offers ``train_lockstep``.

Every run's file is written the moment its result arrives, so an interruption
(Ctrl-C, SIGTERM, a killed runner) loses only the runs in flight; running the
same command again trains only what is missing. A run in flight restarts from
step zero: trainers are plain generators of checkpoints whose state (network,
optimiser, replay memory, environment and Generator states) is not exposed for
saving, and the runs this harness targets take minutes, so a restart costs at
most one run's time per worker. Failed runs are recorded with the reason
and trained again on the next invocation. The index is written last, once every
seed has a record, and removed before anything is trained: a folder with an index
is complete and consistent.

Two runners sharing a cache do not train the same run twice: a run is trained
only under its file lock in the cache (:meth:`~harness.store.cache.RunCache.claim`);
a runner that finds a run claimed trains others first, then waits for the
lock and takes the result from the cache.
"""

from __future__ import annotations

import contextlib
import dataclasses
import os
import signal
import threading
import time
from collections import deque
from collections.abc import Callable, Iterator, Mapping, Sequence
from multiprocessing.context import BaseContext
from pathlib import Path

from filelock import FileLock, Timeout

from harness.store.cache import RunCache
from harness.core.errors import ResultsError
from harness.execute import Executor, RunEvent, Task, WorkerResult, make_executor
from harness.execute.work import lockstep_size, run_versions
from harness.core.spec import RunSpec
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

__all__ = ["DEFAULT_RESULTS_DIR", "RunOutcome", "run_manifest", "run_specs"]

#: Results go to ``<DEFAULT_RESULTS_DIR>/<manifest name>/`` unless told otherwise.
DEFAULT_RESULTS_DIR = "results"
_POLL = 0.2
_LOCK_FILE = ".rlharness.lock"

OnEvent = Callable[[RunEvent], None]


@dataclasses.dataclass(frozen=True, slots=True)
class RunOutcome:
    """What :func:`run_specs` did.

    Attributes
    ----------
    results
        Every run's record, in the manifest's seed order.
    folder
        The results folder (per-seed files plus ``index.json``).
    sources
        Per run index: ``"trained"``, ``"cache"`` or ``"resumed"``.
    wall_seconds
        Per run index: training wall time in seconds (of the lockstep group it trained in;
        the original training time for cached and resumed runs is not known and not listed).
    elapsed
        Wall time of the whole call in seconds.
    """

    results: ResultSet
    folder: Path
    sources: Mapping[int, str]
    wall_seconds: Mapping[int, float]
    elapsed: float

    @property
    def ok(self) -> bool:
        """True when every planned run finished with a curve."""
        return not self.results.failed()


def _run_specs_iv(
    specs: Sequence[RunSpec], time_limit: float | None, results_dir: object, cache: object, on_event: object
) -> tuple[RunSpec, ...]:
    if not isinstance(results_dir, (str, os.PathLike)):
        raise TypeError(f"`results_dir` must be a path, got {type(results_dir).__name__} {results_dir!r}")
    if cache is not None and not isinstance(cache, (RunCache, str, os.PathLike)):
        raise TypeError(f"`cache` must be a RunCache, a folder or None, got {type(cache).__name__} {cache!r}")
    if on_event is not None and not callable(on_event):
        raise TypeError(f"`on_event` must be callable or None, got {type(on_event).__name__} {on_event!r}")
    if not specs:
        raise ValueError("`specs` must hold at least one RunSpec, got none")
    for s in specs:
        if not isinstance(s, RunSpec):
            raise TypeError(f"`specs` must hold RunSpec values, got {type(s).__name__} {s!r}")
    ordered = tuple(sorted(specs, key=lambda s: s.index))
    if [s.index for s in ordered] != list(range(len(ordered))):
        raise ValueError(
            f"`specs` must be a manifest's complete plan with indices 0..{len(ordered) - 1}, "
            f"got indices {sorted(s.index for s in ordered)}"
        )
    if len({(s.manifest, s.config_hash) for s in ordered}) != 1:
        raise ValueError("`specs` must all come from one manifest (same name and config hash)")
    if time_limit is not None and (isinstance(time_limit, bool) or not isinstance(time_limit, (int, float)) or not time_limit > 0):
        raise ValueError(f"`time_limit` must be a positive number of seconds or None, got {time_limit!r}")
    return ordered


@contextlib.contextmanager
def _sigterm_as_interrupt() -> Iterator[None]:
    """Turn SIGTERM into KeyboardInterrupt while running, so both stop the same clean way."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return

    def handler(signum, frame):
        raise KeyboardInterrupt(f"received signal {signal.Signals(signum).name}")

    previous = signal.signal(signal.SIGTERM, handler)
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, previous)


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


def _tasks(specs: Sequence[RunSpec], k: int, slots: int, time_limit: float | None, search_path: str | None,
           results_dir: str | None = None) -> list[Task]:
    """Split the runs, in seed order, into lockstep groups of at most ``k`` seeds.

    The number of groups is rounded up to a multiple of the executor's ``slots`` (while
    there are seeds enough) and the sizes are balanced, so the workers finish together:
    10 seeds with K = 4 on 2 workers become 3, 3, 2, 2 rather than 4, 4, 2. A seed's numbers
    do not depend on its group (the trainer interface's lockstep contract).
    """
    n = len(specs)
    groups = -(-n // k)
    if groups % slots:
        groups = min(n, groups + slots - groups % slots)
    size, extra = divmod(n, groups)
    tasks, start = [], 0
    for g in range(groups):
        end = start + size + (g < extra)
        tasks.append(Task(tuple(specs[start:end]), time_limit, search_path, results_dir))
        start = end
    return tasks


class _Run:
    """State of one :func:`run_specs` call: records so far, claims held, where results go."""

    def __init__(
        self,
        specs: tuple[RunSpec, ...],
        folder: Path,
        versions: dict[str, str],
        cache: RunCache | None,
        on_event: OnEvent | None,
    ):
        self.specs: tuple[RunSpec, ...] = specs
        self.folder: Path = folder
        self.versions: dict[str, str] = versions
        self.cache: RunCache | None = cache
        self.on_event: OnEvent | None = on_event
        self.records: dict[int, RunRecord] = {}
        self.sources: dict[int, str] = {}
        self.wall: dict[int, float] = {}
        self.claims: dict[int, FileLock] = {}

    def emit(self, event: RunEvent) -> None:
        if self.on_event is not None:
            self.on_event(event)

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


def _start(run: _Run, executor: Executor, task: Task, *, wait: bool) -> bool:
    """Claim and submit a task; False when another runner holds one of its runs (``wait=False``)."""
    claimed = run.claim(task, wait=wait)
    if claimed is None:
        return all(s.index in run.records for s in task.specs)
    executor.submit(claimed)
    for spec in claimed.specs:
        run.emit(RunEvent("started", spec.index, spec.seed.label))
    return True


def _drive(run: _Run, executor: Executor, tasks: list[Task]) -> None:
    """Submit tasks as workers free up, claiming each first; collect events and results."""
    queue: deque[Task] = deque(tasks)
    while queue or executor.pending():
        skipped: list[Task] = []
        while queue and executor.capacity() > 0:
            task = queue.popleft()
            if not _start(run, executor, task, wait=False):
                skipped.append(task)
        queue.extendleft(reversed(skipped))
        if queue and not executor.pending():
            # Every remaining run is being trained by another runner: wait for the first.
            _start(run, executor, queue.popleft(), wait=True)
        for item in executor.poll(_POLL):
            if isinstance(item, RunEvent):
                run.emit(item)
            else:
                run.accept(item)


def run_specs(
    specs: Sequence[RunSpec],
    *,
    results_dir: str | os.PathLike,
    workers: int | None = None,
    executor: str = "local",
    scheduler: object = None,
    context: str | BaseContext | None = None,
    cache: RunCache | str | os.PathLike | None = None,
    use_cache: bool = True,
    time_limit: float | None = None,
    on_event: OnEvent | None = None,
    trainer_path: str | os.PathLike | None = None,
) -> RunOutcome:
    """Train (or resume, or take from the cache) every run of one manifest's plan.

    Parameters
    ----------
    specs
        The complete plan (indices 0..n-1, any order); one manifest, one config hash.
    results_dir
        Folder for the per-seed files and the index; created if missing.
    workers
        Worker processes (local) or local-cluster workers (dask); ``None``: one per core / 2.
    executor
        ``"local"`` or ``"dask"``.
    scheduler
        dask scheduler address or ``distributed.Client``; ``None`` starts a local cluster.
    context
        multiprocessing start method for the local executor (default ``"forkserver"``).
    cache
        A :class:`RunCache` or its folder; ``None`` is the default cache folder.
    use_cache
        ``False`` neither reads nor writes the cache (``--no-cache``).
    time_limit
        Seconds a run may train before it is stopped and recorded failed; ``None``: no limit.
    on_event
        Called with each :class:`RunEvent` (for progress displays), in the calling thread.
    trainer_path
        A folder where workers also look for a user trainer's module (the manifest's folder).

    Returns
    -------
    RunOutcome
        Records in seed order, their sources, wall times; ``.ok`` is False if any run failed.

    Raises
    ------
    KeyboardInterrupt
        On Ctrl-C or SIGTERM, after stopping the workers; finished runs are on disk.
    """
    start = time.perf_counter()
    specs = _run_specs_iv(specs, time_limit, results_dir, cache, on_event)
    folder = Path(results_dir)
    folder.mkdir(parents=True, exist_ok=True)
    if use_cache:
        cache = cache if isinstance(cache, RunCache) else RunCache(cache)
    else:
        cache = None
    search_path = None if trainer_path is None else str(Path(trainer_path).absolute())
    run = _Run(specs, folder, run_versions(specs[0], search_path=search_path), cache, on_event)
    manifest, config_hash = specs[0].manifest, specs[0].config_hash
    with FileLock(str(folder / _LOCK_FILE)):
        _drop_stale_index(folder, manifest, config_hash)
    for spec in specs:
        run.emit(RunEvent("planned", spec.index, spec.seed.label, budget=spec.budget))
    for spec in specs:
        record = _resumable(folder, spec, run.versions)
        if record is not None:
            run.keep(record, "resumed")
        else:
            run.from_cache(spec)
    todo = [s for s in specs if s.index not in run.records]
    k = lockstep_size(todo[0], search_path=search_path) if todo else 1  # resolves the trainer: fails early
    if todo:  # files are about to change: until the new index is written, the folder has none
        with FileLock(str(folder / _LOCK_FILE)):
            (folder / INDEX_FILE).unlink(missing_ok=True)
    with _sigterm_as_interrupt():
        pool = make_executor(executor, workers=workers, scheduler=scheduler, context=context) if todo else None
        try:
            if pool is not None:
                _drive(run, pool, _tasks(todo, k, max(1, pool.capacity()), time_limit, search_path,
                                         str(folder.absolute())))
        finally:
            if pool is not None:
                pool.close()
            run.release_all()
    results = ResultSet(manifest, config_hash, tuple(run.records[s.index] for s in specs))
    with FileLock(str(folder / _LOCK_FILE)):
        write_index(folder, results, timings=run.wall, sources=run.sources)
    return RunOutcome(results, folder, dict(sorted(run.sources.items())), dict(sorted(run.wall.items())), time.perf_counter() - start)


def run_manifest(manifest, *, results_dir: str | os.PathLike | None = None, **options) -> RunOutcome:
    """Train every seed of ``manifest`` (a ``harness.manifest.loader.Manifest``); see :func:`run_specs`.

    ``results_dir`` defaults to ``results/<manifest name>/``; a user trainer's module is also
    looked for in the manifest's folder, as when the manifest was loaded. A ``time_limit`` of
    ``None`` takes the manifest's (``[trainer] time_limit`` of a command trainer), if any.
    """
    if results_dir is None:
        results_dir = Path(DEFAULT_RESULTS_DIR) / manifest.name
    if options.get("time_limit") is None and manifest.time_limit is not None:
        options["time_limit"] = manifest.time_limit
    if manifest.path is not None:
        options.setdefault("trainer_path", Path(manifest.path).resolve().parent)
    return run_specs(manifest.runs(), results_dir=results_dir, **options)
