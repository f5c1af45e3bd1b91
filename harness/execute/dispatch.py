"""How the runner feeds one executor: lockstep groups, longest first, submitted as workers free up.

The runs still to train are cut into lockstep groups (:func:`lockstep_tasks`) sized so
that the workers finish together; the groups of every plan of a call share one
executor and start longest first (:func:`longest_first`: longest-processing-time-first
scheduling, Graham 1969), so that the slowest runs do not start last and leave
workers idle at the end. :func:`drive` submits them as workers free up, claiming
each group's runs in the cache first, and routes every event and result back to the
plan it belongs to.

References
----------
.. [1] Graham, R. L. (1969). Bounds on multiprocessing timing anomalies.
   SIAM Journal on Applied Mathematics 17(2):416–429.
"""

from __future__ import annotations

import bisect
import dataclasses
from collections import deque
from collections.abc import Sequence

from harness.core.interrupt import raise_if_interrupted
from harness.core.spec import RunSpec
from harness.execute import Executor, RunEvent, Task
from harness.execute.plan_state import PlanState

__all__ = ["drive", "lockstep_tasks", "longest_first"]

_POLL = 0.2


def lockstep_tasks(specs: Sequence[RunSpec], k: int, slots: int, time_limit: float | None, search_path: str | None,
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


def longest_first(work: Sequence[tuple[PlanState, float, Sequence[RunSpec], int]], slots: int,
                  time_limit: float | None) -> list[tuple[PlanState, Task]]:
    """Every plan's lockstep groups, longest first (cost of one run times the runs in the group).

    ``work`` holds, per plan with runs to train, its state, the estimated cost of one of its
    runs, the runs to train and its lockstep size. Groups of equal cost keep the plans' order
    and, within a plan, seed order.
    """
    jobs = [(cost * len(task.specs), n, run, task)
            for n, (run, cost, specs, size) in enumerate(work)
            for task in lockstep_tasks(specs, size, slots, time_limit, run.search_path, str(run.folder.absolute()))]
    jobs.sort(key=lambda job: (-job[0], job[1]))  # longest first; stable within a plan
    return [(run, task) for _, _, run, task in jobs]


def _start(run: PlanState, executor: Executor, task: Task, *, wait: bool) -> bool:
    """Claim and submit a task; False when another runner holds one of its runs (``wait=False``)."""
    claimed = run.claim(task, wait=wait)
    if claimed is None:
        return all(s.index in run.records for s in task.specs)
    executor.submit(run.outgoing(claimed))
    for spec in claimed.specs:
        run.emit(RunEvent("started", spec.index, spec.seed.label))
    return True


def _owner(runs: Sequence[PlanState], index: int) -> tuple[PlanState, int]:
    """The plan a run index of the executor belongs to, and the run's index in that plan."""
    run = runs[bisect.bisect_right([r.offset for r in runs], index) - 1]
    return run, index - run.offset


def drive(runs: Sequence[PlanState], executor: Executor, jobs: list[tuple[PlanState, Task]]) -> None:
    """Submit tasks as workers free up, claiming each first; collect events and results."""
    queue: deque[tuple[PlanState, Task]] = deque(jobs)
    while queue or executor.pending():
        skipped: list[tuple[PlanState, Task]] = []
        while queue and executor.capacity() > 0:
            run, task = queue.popleft()
            if not _start(run, executor, task, wait=False):
                skipped.append((run, task))
        queue.extendleft(reversed(skipped))
        if queue and not executor.pending():
            # Every remaining run is being trained by another runner: wait for the first.
            run, task = queue.popleft()
            _start(run, executor, task, wait=True)
        raise_if_interrupted()  # a stop signal whose KeyboardInterrupt was swallowed (core.interrupt)
        for item in executor.poll(_POLL):
            run, local = _owner(runs, item.index)
            if isinstance(item, RunEvent):
                run.emit(dataclasses.replace(item, index=local))
            else:
                run.accept(dataclasses.replace(item, index=local))
