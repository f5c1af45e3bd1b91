"""The guard that stops a worker's training programs when the worker dies without stopping them.

The command trainer (:mod:`harness.trainers.command`) runs every program in a process group of
its own and stops that group itself, on every way out it gets to run code for. A worker killed by
SIGKILL (the out-of-memory killer, ``kill -9``) runs no code at all, so its programs would keep
running. This small process outlives the worker to close that gap.

The command trainer starts it once per worker process, as ``python -I -S orphan_guard.py`` in a
session of its own, with a pipe on its standard input whose write end only that worker holds.
The worker writes ``+PGID`` when it has started a program in process group ``PGID`` and ``-PGID``
before it reaps a program it stopped. When the pipe reaches end of file (the worker has exited,
however it exited: the kernel closes its end), the guard sends SIGTERM to every group still
registered, waits :data:`GRACE` seconds, sends SIGKILL to them, and exits.

Standard library only, and nothing of the harness is imported: it starts in a few milliseconds.
It runs on any POSIX system (pipes and ``killpg``); the command trainer runs programs only there.
"""

from __future__ import annotations

import os
import signal
import sys
import time

#: Seconds between the SIGTERM and the SIGKILL the guard sends to the groups a dead worker left.
GRACE = 0.5


def _signal_groups(groups: set[int], signum: int) -> None:
    for pgid in groups:
        try:
            os.killpg(pgid, signum)
        except (ProcessLookupError, PermissionError):
            pass


def main() -> None:
    """Read ``+PGID``/``-PGID`` lines from standard input until end of file, then stop what is left."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # only the end of the pipe ends the guard
    signal.signal(signal.SIGTERM, signal.SIG_IGN)
    groups: set[int] = set()
    for line in sys.stdin.buffer:
        sign, number = line[:1], line[1:].strip()
        if sign in (b"+", b"-") and number.isdigit():
            (groups.add if sign == b"+" else groups.discard)(int(number))
    if groups:
        _signal_groups(groups, signal.SIGTERM)
        time.sleep(GRACE)
        _signal_groups(groups, signal.SIGKILL)


if __name__ == "__main__":
    main()
