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

import bisect
import dataclasses
import os
import time
from collections import deque
from collections.abc import Callable, Mapping, Sequence
from multiprocessing.context import BaseContext
from pathlib import Path

from filelock import FileLock, Timeout

from harness.store.cache import RunCache
from harness.core.errors import ResultsError
from harness.core.atomic import sweep_stale_temporaries
from harness.core.interrupt import sigterm_as_interrupt
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

__all__ = ["DEFAULT_RESULTS_DIR", "RunOutcome", "RunPlan", "run_manifest", "run_plans", "run_specs"]

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


def _plan_iv(specs: Sequence[RunSpec], results_dir: object) -> tuple[RunSpec, ...]:
    if not isinstance(results_dir, (str, os.PathLike)):
        raise TypeError(f"`results_dir` must be a path, got {type(results_dir).__name__} {results_dir!r}")
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
    return ordered


def _options_iv(time_limit: float | None, cache: object, on_event: object) -> None:
    if cache is not None and not isinstance(cache, (RunCache, str, os.PathLike)):
        raise TypeError(f"`cache` must be a RunCache, a folder or None, got {type(cache).__name__} {cache!r}")
    if on_event is not None and not callable(on_event):
        raise TypeError(f"`on_event` must be callable or None, got {type(on_event).__name__} {on_event!r}")
    if time_limit is not None and (isinstance(time_limit, bool) or not isinstance(time_limit, (int, float)) or not time_limit > 0):
        raise ValueError(f"`time_limit` must be a positive number of seconds or None, got {time_limit!r}")


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
    """One plan's state in a :func:`run_plans` call: records so far, claims held, where results go.

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
    executor.submit(run.outgoing(claimed))
    for spec in claimed.specs:
        run.emit(RunEvent("started", spec.index, spec.seed.label))
    return True


def _owner(runs: Sequence[_Run], index: int) -> tuple[_Run, int]:
    """The plan a run index of the executor belongs to, and the run's index in that plan."""
    run = runs[bisect.bisect_right([r.offset for r in runs], index) - 1]
    return run, index - run.offset


def _drive(runs: Sequence[_Run], executor: Executor, jobs: list[tuple[_Run, Task]]) -> None:
    """Submit tasks as workers free up, claiming each first; collect events and results."""
    queue: deque[tuple[_Run, Task]] = deque(jobs)
    while queue or executor.pending():
        skipped: list[tuple[_Run, Task]] = []
        while queue and executor.capacity() > 0:
            run, task = queue.popleft()
            if not _start(run, executor, task, wait=False):
                skipped.append((run, task))
        queue.extendleft(reversed(skipped))
        if queue and not executor.pending():
            # Every remaining run is being trained by another runner: wait for the first.
            run, task = queue.popleft()
            _start(run, executor, task, wait=True)
        for item in executor.poll(_POLL):
            run, local = _owner(runs, item.index)
            if isinstance(item, RunEvent):
                run.emit(dataclasses.replace(item, index=local))
            else:
                run.accept(dataclasses.replace(item, index=local))


@dataclasses.dataclass(frozen=True, slots=True)
class RunPlan:
    """One manifest's runs for :func:`run_plans`.

    Attributes
    ----------
    specs
        The manifest's complete plan (indices 0..n-1, any order; stored in index order).
    results_dir
        Folder for the per-seed files and the index; created if missing.
    trainer_path
        A folder where workers also look for a user trainer's module (the manifest's folder).
    run_cost
        Estimated cost of one run in any unit shared by the plans of a call (seconds, say);
        only the order of training depends on it. ``None``: the run's budget in steps.
    """

    specs: tuple[RunSpec, ...]
    results_dir: Path
    trainer_path: str | None = None
    run_cost: float | None = None

    def __post_init__(self) -> None:
        object.__setattr__(self, "specs", _plan_iv(self.specs, self.results_dir))
        object.__setattr__(self, "results_dir", Path(self.results_dir))
        if self.trainer_path is not None:
            object.__setattr__(self, "trainer_path", str(Path(self.trainer_path).absolute()))
        if self.run_cost is not None and not (isinstance(self.run_cost, (int, float)) and self.run_cost > 0):
            raise ValueError(f"`run_cost` must be a positive number or None, got {self.run_cost!r}")

    @property
    def cost(self) -> float:
        """Estimated cost of one run (:attr:`run_cost`, else the budget in steps)."""
        return float(self.run_cost if self.run_cost is not None else self.specs[0].budget)


def run_plans(
    plans: Sequence[RunPlan],
    *,
    workers: int | None = None,
    executor: str = "local",
    scheduler: object = None,
    context: str | BaseContext | None = None,
    cache: RunCache | str | os.PathLike | None = None,
    use_cache: bool = True,
    time_limit: float | None = None,
    on_event: OnEvent | None = None,
) -> tuple[RunOutcome, ...]:
    """Train (or resume, or take from the cache) every run of several manifests in one worker pool.

    Each plan is resumed, cached and written exactly as by :func:`run_specs`, into its own
    results folder. The tasks (lockstep groups) of all plans share one executor and start
    longest first (by :attr:`RunPlan.cost` times the runs in the task), so that the slowest
    runs do not start last and leave workers idle at the end (longest-processing-time-first
    scheduling; Graham 1969).

    Parameters
    ----------
    plans
        One :class:`RunPlan` per manifest; manifest names and results folders must differ.
    workers, executor, scheduler, context, cache, use_cache, time_limit
        As in :func:`run_specs`.
    on_event
        Called with each :class:`RunEvent` (its ``manifest`` set), in the calling thread.

    Returns
    -------
    tuple of RunOutcome
        One per plan, in the order given.

    Raises
    ------
    KeyboardInterrupt
        On Ctrl-C or SIGTERM, after stopping the workers; finished runs are on disk.

    References
    ----------
    .. [1] Graham, R. L. (1969). Bounds on multiprocessing timing anomalies.
       SIAM Journal on Applied Mathematics 17(2):416–429.
    """
    start = time.perf_counter()
    _options_iv(time_limit, cache, on_event)
    plans = tuple(plans)
    if not plans or not all(isinstance(p, RunPlan) for p in plans):
        raise TypeError(f"`plans` must be a non-empty sequence of RunPlan values, got {plans!r}")
    for what, values in (("manifest names", [p.specs[0].manifest for p in plans]),
                         ("results folders", [p.results_dir.absolute() for p in plans])):
        if len(set(values)) != len(values):
            raise ValueError(f"the plans' {what} must differ, got {[str(v) for v in values]}")
    if use_cache:
        cache = cache if isinstance(cache, RunCache) else RunCache(cache)
    else:
        cache = None
    runs, offset = [], 0
    for plan in plans:
        plan.results_dir.mkdir(parents=True, exist_ok=True)
        versions = run_versions(plan.specs[0], search_path=plan.trainer_path)
        runs.append(_Run(plan.specs, plan.results_dir, versions, cache, on_event, offset, plan.trainer_path))
        offset += len(plan.specs)
        with FileLock(str(plan.results_dir / _LOCK_FILE)):
            _drop_stale_index(plan.results_dir, plan.specs[0].manifest, plan.specs[0].config_hash)
            sweep_stale_temporaries(plan.results_dir)  # left by a runner killed mid-write
    for run in runs:
        for spec in run.specs:
            run.emit(RunEvent("planned", spec.index, spec.seed.label, budget=spec.budget))
    for run in runs:
        for spec in run.specs:
            record = _resumable(run.folder, spec, run.versions)
            if record is not None:
                run.keep(record, "resumed")
            else:
                run.from_cache(spec)
    todo = {id(run): [s for s in run.specs if s.index not in run.records] for run in runs}
    # Resolving each trainer's lockstep size fails early on a trainer that cannot be found.
    sizes = {id(run): lockstep_size(todo[id(run)][0], search_path=run.search_path) for run in runs if todo[id(run)]}
    for run in runs:
        if todo[id(run)]:  # files are about to change: until the new index is written, the folder has none
            with FileLock(str(run.folder / _LOCK_FILE)):
                (run.folder / INDEX_FILE).unlink(missing_ok=True)
    with sigterm_as_interrupt():
        pool = make_executor(executor, workers=workers, scheduler=scheduler, context=context) if sizes else None
        try:
            if pool is not None:
                slots = max(1, pool.capacity())
                jobs = [(plan.cost * len(task.specs), n, run, task)
                        for n, (plan, run) in enumerate(zip(plans, runs, strict=True)) if todo[id(run)]
                        for task in _tasks(todo[id(run)], sizes[id(run)], slots, time_limit, run.search_path,
                                           str(run.folder.absolute()))]
                jobs.sort(key=lambda job: (-job[0], job[1]))  # longest first; stable within a plan
                _drive(runs, pool, [(run, task) for _, _, run, task in jobs])
        finally:
            if pool is not None:
                pool.close()
            for run in runs:
                run.release_all()
    elapsed = time.perf_counter() - start
    return tuple(RunOutcome(run.write_index(), run.folder, dict(sorted(run.sources.items())),
                            dict(sorted(run.wall.items())), elapsed) for run in runs)


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
    plan = RunPlan(tuple(specs), results_dir, trainer_path)
    return run_plans([plan], workers=workers, executor=executor, scheduler=scheduler, context=context, cache=cache,
                     use_cache=use_cache, time_limit=time_limit, on_event=on_event)[0]


def run_manifest(manifest, *, results_dir: str | os.PathLike | None = None, first: int | None = None,
                 **options) -> RunOutcome:
    """Train every seed of ``manifest`` (a ``harness.manifest.loader.Manifest``); see :func:`run_specs`.

    ``results_dir`` defaults to ``results/<manifest name>/``; a user trainer's module is also
    looked for in the manifest's folder, as when the manifest was loaded. A ``time_limit`` of
    ``None`` takes the manifest's (``[trainer] time_limit`` of a command trainer), if any.
    ``first`` trains only the first that many seeds of the plan (a stage of the staged gate);
    the index then lists those.
    """
    if results_dir is None:
        results_dir = Path(DEFAULT_RESULTS_DIR) / manifest.name
    if options.get("time_limit") is None and manifest.time_limit is not None:
        options["time_limit"] = manifest.time_limit
    if manifest.path is not None:
        options.setdefault("trainer_path", Path(manifest.path).resolve().parent)
    specs = manifest.runs()
    if first is not None:
        if isinstance(first, bool) or not isinstance(first, int) or not 1 <= first <= len(specs):
            raise ValueError(f"`first` must be a whole number from 1 to {len(specs)} (the manifest's seeds), got {first!r}")
        specs = specs[:first]
    return run_specs(specs, results_dir=results_dir, **options)
