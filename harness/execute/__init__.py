"""Execute: the runner and the executors where its tasks train.

``"local"`` (:class:`~harness.execute.local.LocalExecutor`, worker processes on
this machine) is the default; ``"dask"``
(:class:`~harness.execute.dask_cluster.DaskExecutor`) runs the same tasks on a
dask distributed cluster and needs the optional ``dask`` extra. Both call
:func:`harness.execute.work.run_task`, so they produce the same bytes.
"""

from __future__ import annotations

from multiprocessing.context import BaseContext

from harness.core.errors import did_you_mean
from harness.execute.base import EVENT_KINDS, Executor, RunEvent, Task, WorkerResult

__all__ = ["EVENT_KINDS", "EXECUTORS", "Executor", "RunEvent", "Task", "WorkerResult", "make_executor"]

#: Names accepted by :func:`make_executor` (and ``rlharness run --executor``).
EXECUTORS = ("dask", "local")


def make_executor(
    name: str,
    *,
    workers: int | None = None,
    scheduler: object = None,
    context: str | BaseContext | None = None,
) -> Executor:
    """Create the executor called ``name`` (one of :data:`EXECUTORS`).

    ``scheduler`` is only for ``"dask"``; ``context`` (a multiprocessing start method) only for ``"local"``.
    """
    if name == "local":
        if scheduler is not None:
            raise ValueError("`scheduler` is only for executor='dask'; drop it or pass executor='dask'")
        from harness.execute.local import LocalExecutor

        return LocalExecutor(workers, context=context)
    if name == "dask":
        from harness.execute.dask_cluster import DaskExecutor

        return DaskExecutor(scheduler, workers=workers)
    raise ValueError(f"`executor` must be one of {EXECUTORS}, got {name!r}.{did_you_mean(str(name), EXECUTORS)}")
