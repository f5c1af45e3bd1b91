"""The local executor: long-lived worker processes on this machine, one task each at a time.

Each worker is a :mod:`multiprocessing` process with its own pipe (the model is
gymnasium's ``AsyncVectorEnv`` worker loop). The parent knows which task every
worker holds, so it can tell exactly which runs a dead worker (killed, out of
memory) or an over-time worker took with it: those runs are reported failed
with the reason, the worker is replaced, and the other workers carry on. A
worker sends a checkpoint event after every evaluation and its result at the
end; it ignores SIGINT so that Ctrl-C is handled once, by the parent, which
stops the workers.

Every stop of a busy worker (the time limit, Ctrl-C or SIGTERM of the command, the end
of a run) goes through :func:`stop_processes`: SIGTERM first, which the worker turns into
an exception inside the trainer so that its ``finally`` blocks and context managers run
(a trainer that started programs of its own stops them there), then SIGKILL for a worker
still alive after :data:`STOP_GRACE_SECONDS`.

The ``context`` is explicit: ``"forkserver"`` by default where available (safe
with the threads of a live progress display, and cheap per worker), else
``"spawn"``.
"""

from __future__ import annotations

import multiprocessing as mp
import multiprocessing.connection as mpc
import os
import signal
import time
import traceback
from collections.abc import Sequence
from multiprocessing.context import BaseContext

from harness.execute.base import RunEvent, Task, WorkerResult
from harness.execute.work import run_task
from harness.trainers.command import stop_programs

__all__ = ["STOP_GRACE_SECONDS", "LocalExecutor", "default_context", "stop_processes", "worker_main"]

#: Seconds a worker has between SIGTERM and SIGKILL to clean up (a trainer's ``finally`` blocks).
STOP_GRACE_SECONDS = 3.0


class _Stopped(BaseException):
    """Raised in a worker by SIGTERM: not an ``Exception``, so no trainer's ``except Exception`` swallows it."""


def _stop_on_sigterm(signum: int, frame: object) -> None:
    stop_programs()  # the process groups of programs a command trainer started: none outlives its worker
    raise _Stopped()


def stop_processes(processes: Sequence[mp.process.BaseProcess], *, grace: float = STOP_GRACE_SECONDS) -> None:
    """Stop worker processes: SIGTERM to each, then SIGKILL to any still alive after ``grace`` seconds.

    The one stop path of this executor (time limit, interruption, close). A worker turns
    SIGTERM into an exception inside the trainer, so the trainer's cleanup runs; a trainer
    that starts programs in their own process group must stop them in that cleanup.
    """
    alive = [p for p in processes if p.is_alive()]
    for p in alive:
        p.terminate()
    deadline = time.monotonic() + grace
    for p in alive:
        p.join(max(0.0, deadline - time.monotonic()))
    for p in alive:
        if p.is_alive():
            p.kill()
            p.join()


def default_context() -> str:
    """``"forkserver"`` where the platform offers it, else ``"spawn"``."""
    return "forkserver" if "forkserver" in mp.get_all_start_methods() else "spawn"


def worker_main(conn: mpc.Connection) -> None:
    """Loop of a worker process: receive a task payload, train it, send events and the result.

    Messages to the parent: ``("started", None)``, ``("checkpoint", (index, seed, step, mean))``, then
    ``("done", run_task's reply)`` or ``("error", traceback)``. If the parent dies, the
    next checkpoint event fails to send, which ends the task, and the worker exits. SIGTERM (how
    the parent stops a worker, :func:`stop_processes`) first stops the process groups of the
    programs a command trainer started, then unwinds the trainer so that its cleanup runs.
    """
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    signal.signal(signal.SIGTERM, _stop_on_sigterm)

    def emit(index: int, seed: str, step: int, mean: float) -> None:
        conn.send(("checkpoint", (index, seed, step, mean)))

    try:
        while True:
            try:
                payload = conn.recv()
            except EOFError:
                return
            if payload is None:
                return
            conn.send(("started", None))  # the time limit counts from here, not from the process start
            try:
                reply = ("done", run_task(payload, emit))
            except Exception:  # a fault outside the trainer (run_task catches the trainer's own)
                reply = ("error", traceback.format_exc())
            try:
                conn.send(reply)
            except OSError:  # the parent is gone (killed): nobody wants the result
                return
    except _Stopped:  # SIGTERM from stop_processes: the trainer's cleanup has run on the way out
        return
    finally:  # leaving: a SIGTERM from now on (during interpreter exit) just ends the process, quietly
        signal.signal(signal.SIGTERM, signal.SIG_DFL)


def _death_reason(exitcode: int | None) -> str:
    if exitcode is not None and exitcode < 0:
        try:
            how = f"killed by signal {signal.Signals(-exitcode).name}"
        except ValueError:
            how = f"killed by signal {-exitcode}"
    else:
        how = f"exit code {exitcode}"
    return (
        f"worker process died ({how}) while training this run; "
        "a kill or the out-of-memory killer are the usual causes"
    )


class _Worker:
    __slots__ = ("conn", "process", "started", "submitted", "task")

    def __init__(self, ctx: BaseContext):
        self.conn, child = ctx.Pipe(duplex=True)
        self.process = ctx.Process(target=worker_main, args=(child,), daemon=True, name="rlharness-worker")
        self.process.start()
        child.close()
        self.task: Task | None = None
        self.submitted = 0.0
        self.started: float | None = None  # when the worker took the task: the time limit counts from here

    def ask_to_exit(self) -> None:
        """Tell an idle worker to leave its loop (it exits by itself; :func:`stop_processes` makes sure)."""
        try:
            self.conn.send(None)
        except OSError:
            pass


class LocalExecutor:
    """Run tasks in ``workers`` local processes.

    Parameters
    ----------
    workers
        Number of worker processes; ``None`` means one per core (``os.cpu_count()``).
    context
        A :mod:`multiprocessing` start method name or context; ``None`` means :func:`default_context`.
    """

    def __init__(self, workers: int | None = None, *, context: str | BaseContext | None = None):
        if workers is None:
            workers = os.cpu_count() or 1
        if isinstance(workers, bool) or not isinstance(workers, int) or workers < 1:
            raise ValueError(f"`workers` must be a positive integer, got {workers!r}")
        if context is None or isinstance(context, str):
            name = context or default_context()
            if name not in mp.get_all_start_methods():
                raise ValueError(f"`context` must be one of {tuple(mp.get_all_start_methods())}, got {name!r}")
            context = mp.get_context(name)
            if name == "forkserver":  # workers fork from a server that has imported the worker code once
                context.set_forkserver_preload(["harness.execute.local"])
        self.workers = workers
        self._ctx = context
        self._pool: list[_Worker] = []

    def capacity(self) -> int:
        return self.workers - self.pending()

    def pending(self) -> int:
        return sum(1 for w in self._pool if w.task is not None)

    def submit(self, task: Task) -> None:
        if self.capacity() < 1:
            raise RuntimeError("no free worker: check capacity() before submit()")
        self._retire([w for w in self._pool if w.task is None and not w.process.is_alive()])  # died while idle
        worker = next((w for w in self._pool if w.task is None), None)
        if worker is None:
            worker = _Worker(self._ctx)
            self._pool.append(worker)
        worker.task, worker.submitted, worker.started = task, time.monotonic(), None
        try:
            worker.conn.send(task.payload())
        except OSError:
            pass  # the worker died just now: poll() sees its sentinel and reports the task failed

    def poll(self, timeout: float) -> Sequence[RunEvent | WorkerResult]:
        busy = [w for w in self._pool if w.task is not None]
        if not busy:
            return []
        deadlines = [w.started + w.task.deadline_seconds for w in busy
                     if w.task.deadline_seconds is not None and w.started is not None]
        if deadlines:
            timeout = max(0.0, min(timeout, min(deadlines) - time.monotonic()))
        ready = set(mpc.wait([w.conn for w in busy] + [w.process.sentinel for w in busy], timeout))
        out: list[RunEvent | WorkerResult] = []
        for w in busy:
            if w.conn in ready or w.process.sentinel in ready:
                out.extend(self._drain(w))
        now = time.monotonic()
        for w in busy:
            limit = w.task.deadline_seconds if w.task is not None else None
            if limit is not None and w.started is not None and now - w.started >= limit:
                reason = (
                    f"exceeded the time limit of {w.task.time_limit:g} s per run "
                    f"({limit:g} s for this task of {len(w.task.specs)} run(s)); the worker was stopped"
                )
                out.extend(WorkerResult.failed_all(w.task, reason, wall_seconds=now - w.submitted))
                self._retire([w])
        return out

    def _drain(self, w: _Worker) -> list[RunEvent | WorkerResult]:
        out: list[RunEvent | WorkerResult] = []
        try:
            while w.task is not None and w.conn.poll():
                kind, data = w.conn.recv()
                if kind == "started":
                    w.started = time.monotonic()
                elif kind == "checkpoint":
                    index, seed, step, mean = data
                    out.append(RunEvent("checkpoint", index, seed, step=step, mean_return=mean))
                elif kind == "done":
                    out.extend(WorkerResult.from_plain(data))
                    w.task = None
                else:
                    out.extend(WorkerResult.failed_all(w.task, data, wall_seconds=time.monotonic() - w.submitted))
                    w.task = None
        except (EOFError, OSError):
            pass
        if w.task is not None and not w.process.is_alive():
            w.process.join()
            reason = _death_reason(w.process.exitcode)
            out.extend(WorkerResult.failed_all(w.task, reason, wall_seconds=time.monotonic() - w.submitted))
            self._retire([w])
        return out

    def _retire(self, workers: Sequence[_Worker]) -> None:
        """Stop workers (idle ones are asked to exit first) and drop them from the pool."""
        for w in workers:
            if w.task is None:
                w.ask_to_exit()
        stop_processes([w.process for w in workers], grace=STOP_GRACE_SECONDS)
        for w in workers:
            w.task = None
            w.conn.close()
            self._pool.remove(w)

    def close(self) -> None:
        self._retire(list(self._pool))
