"""The dask executor: the same tasks on a ``dask.distributed`` cluster.

Each task is one call of :func:`harness.execute.work.run_task` on a cluster
worker, with JSON text in and plain data out, so the results are the bytes the
local executor produces. Without a scheduler address a
:class:`distributed.LocalCluster` is started (one single-threaded worker process
per requested worker) and stopped at the end. With an address, the cluster is
whatever that scheduler serves: one started by ``dask-jobqueue`` on SLURM or by
``dask-kubernetes`` reaches the harness this way, unchanged.

Differences from the local executor, stated plainly:

* a worker that dies is handled by dask, which retries its task elsewhere and
  gives up with ``KilledWorker`` after ``distributed.scheduler.allowed-failures``
  attempts; the run is then recorded failed with that reason;
* a task over its time limit is recorded failed and released, but dask cannot
  stop Python code running in a worker thread: the thread stays busy until the
  trainer returns (restart the cluster's workers to reclaim it);
* checkpoint-by-checkpoint progress is not streamed back; runs report when they finish.

**Trust.** dask moves Python objects between the harness, the scheduler and the workers with
pickle, and a pickle runs code when it is loaded. The tasks rl-harness sends are JSON text and
the replies plain data, but the channel itself is pickle: the scheduler and every worker must be
machines and people you trust, exactly as you trust the machine that runs ``rlharness``. Reach a
remote scheduler over TLS with client certificates (:class:`TlsScheduler`, ``--tls-ca-file``,
``--tls-cert``, ``--tls-key``), so that nobody else can connect, listen or pose as it.
"""

from __future__ import annotations

import asyncio
import dataclasses
import time
from collections.abc import Sequence
from pathlib import Path

from harness.execute.base import RunEvent, Task, WorkerResult
from harness.execute.work import run_task

__all__ = ["DaskExecutor", "MISSING_DASK", "TlsScheduler"]

MISSING_DASK = (
    "the dask executor needs dask.distributed, which is not installed; "
    "add it with: pip install 'rl-harness[dask]'"
)


def _import_distributed():
    try:
        import distributed
    except ImportError as exc:
        raise ImportError(MISSING_DASK) from exc
    return distributed


@dataclasses.dataclass(frozen=True, slots=True)
class TlsScheduler:
    """A remote dask scheduler reached over TLS with a client certificate.

    Attributes
    ----------
    address
        ``"tls://host:port"``.
    ca_file, cert_file, key_file
        PEM files: the certificate authority that signed the scheduler's certificate, and
        this client's certificate and private key (dask's ``tls_ca_file``, ``tls_client_cert``,
        ``tls_client_key``).
    """

    address: str
    ca_file: str
    cert_file: str
    key_file: str

    def __post_init__(self) -> None:
        if not self.address.startswith("tls://"):
            raise ValueError(f"a TLS scheduler address starts with tls://, got {self.address!r}")
        for name in ("ca_file", "cert_file", "key_file"):
            if not Path(getattr(self, name)).is_file():
                raise ValueError(f"`{name}` {getattr(self, name)!r} is not a file")

    def security(self):
        """The ``distributed.security.Security`` that requires encryption with these files."""
        from distributed.security import Security

        return Security(tls_ca_file=self.ca_file, tls_client_cert=self.cert_file, tls_client_key=self.key_file,
                        require_encryption=True)


class DaskExecutor:
    """Run tasks on a dask distributed cluster.

    Parameters
    ----------
    scheduler
        Address of a running scheduler (``"tcp://host:8786"``), a :class:`TlsScheduler`, or a
        ``distributed.Client``; ``None`` starts a local cluster on loopback.
    workers
        Worker processes of the local cluster (ignored with a scheduler); ``None`` means 2.
    """

    def __init__(self, scheduler: object = None, *, workers: int | None = None):
        distributed = _import_distributed()
        self._distributed = distributed
        self._cluster = None
        self._own_client = True
        if workers is not None and (isinstance(workers, bool) or not isinstance(workers, int) or workers < 1):
            raise ValueError(f"`workers` must be a positive integer, got {workers!r}")
        if isinstance(scheduler, distributed.Client):
            self._client, self._own_client = scheduler, False
        elif scheduler is None:
            self._cluster = distributed.LocalCluster(
                n_workers=workers or 2, threads_per_worker=1, processes=True,
                host="127.0.0.1", dashboard_address=None,
            )
            self._client = distributed.Client(self._cluster)
        elif isinstance(scheduler, str):
            self._client = distributed.Client(scheduler)
        elif isinstance(scheduler, TlsScheduler):
            self._client = distributed.Client(scheduler.address, security=scheduler.security())
        else:
            raise TypeError(f"`scheduler` must be an address string, a TlsScheduler or a distributed.Client, got {scheduler!r}")
        self._futures: dict = {}

    def _threads(self) -> int:
        return max(1, sum(self._client.nthreads().values()))

    def capacity(self) -> int:
        return self._threads() - len(self._futures)

    def pending(self) -> int:
        return len(self._futures)

    def submit(self, task: Task) -> None:
        future = self._client.submit(run_task, task.payload(), pure=False)
        self._futures[future] = (task, time.monotonic())

    def poll(self, timeout: float) -> Sequence[RunEvent | WorkerResult]:
        if not self._futures:
            return []
        now = time.monotonic()
        limits = [t0 + t.deadline_seconds - now for t, t0 in self._futures.values() if t.deadline_seconds is not None]
        wait_for = max(0.0, min([timeout, *limits]))
        try:
            done, _ = self._distributed.wait(list(self._futures), timeout=wait_for, return_when="FIRST_COMPLETED")
        except TimeoutError:
            done = set()
        out: list[RunEvent | WorkerResult] = []
        for future in done:
            task, t0 = self._futures.pop(future)
            if future.status == "finished":
                out.extend(WorkerResult.from_plain(future.result()))
            else:
                try:
                    exc = future.exception()
                except (Exception, asyncio.CancelledError) as error:  # cancelled by the cluster
                    exc = error
                reason = f"dask task failed ({type(exc).__name__}: {exc}); a dask worker running it died or was lost"
                out.extend(WorkerResult.failed_all(task, reason, wall_seconds=time.monotonic() - t0))
        now = time.monotonic()
        for future, (task, t0) in list(self._futures.items()):
            limit = task.deadline_seconds
            if limit is not None and now - t0 >= limit:
                del self._futures[future]
                future.cancel()
                reason = (
                    f"exceeded the time limit of {task.time_limit:g} s per run "
                    f"({limit:g} s for this task of {len(task.specs)} run(s)); released on the dask cluster"
                )
                out.extend(WorkerResult.failed_all(task, reason, wall_seconds=now - t0))
        return out

    def close(self) -> None:
        for future in self._futures:
            future.cancel()
        self._futures.clear()
        if self._own_client:
            self._client.close()
        if self._cluster is not None:
            self._cluster.close()
