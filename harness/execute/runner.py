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

import dataclasses
import os
import time
from collections.abc import Mapping, Sequence
from multiprocessing.context import BaseContext
from pathlib import Path

from harness.store.cache import RunCache
from harness.core.interrupt import sigterm_as_interrupt
from harness.execute import RunEvent, make_executor
from harness.execute.dispatch import drive, longest_first
from harness.execute.plan_state import OnEvent, PlanState
from harness.execute.work import lockstep_size, run_versions
from harness.core.spec import RunSpec
from harness.store.results import ResultSet

__all__ = ["DEFAULT_RESULTS_DIR", "RunOutcome", "RunPlan", "run_manifest", "run_plans", "run_specs"]

#: Results go to ``<DEFAULT_RESULTS_DIR>/<manifest name>/`` unless told otherwise.
DEFAULT_RESULTS_DIR = "results"


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
        runs.append(PlanState(plan.specs, plan.results_dir, versions, cache, on_event, offset, plan.trainer_path))
        offset += len(plan.specs)
        runs[-1].tidy_folder()
    for run in runs:
        for spec in run.specs:
            run.emit(RunEvent("planned", spec.index, spec.seed.label, budget=spec.budget))
    for run in runs:
        for spec in run.specs:
            run.resume_or_take_cached(spec)
    todo = [(plan, run, [s for s in run.specs if s.index not in run.records])
            for plan, run in zip(plans, runs, strict=True)]
    # Resolving each trainer's lockstep size fails early on a trainer that cannot be found.
    work = [(run, plan.cost, specs, lockstep_size(specs[0], search_path=run.search_path))
            for plan, run, specs in todo if specs]
    for run, *_ in work:  # files are about to change: until the new index is written, the folder has none
        run.drop_index()
    with sigterm_as_interrupt():
        pool = make_executor(executor, workers=workers, scheduler=scheduler, context=context) if work else None
        try:
            if pool is not None:
                drive(runs, pool, longest_first(work, max(1, pool.capacity()), time_limit))
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
