"""Stopping cleanly: SIGTERM handled the way Ctrl-C is, so both end a command the same way.

A command that is told to stop (Ctrl-C in a terminal, SIGTERM from CI, ``timeout`` or a
cluster's job manager) raises :class:`KeyboardInterrupt` where it is; the runner then stops
its workers (see ``harness.execute.local.stop_process``), keeps what finished, and the CLI
exits with 130 and no traceback.
"""

from __future__ import annotations

import contextlib
import signal
import threading
from collections.abc import Iterator

__all__ = ["INTERRUPTED", "sigterm_as_interrupt"]

#: What a command stopped by Ctrl-C or SIGTERM prints on stderr before it exits with 130.
INTERRUPTED = "interrupted: finished runs are kept; run the same command again to resume"


@contextlib.contextmanager
def sigterm_as_interrupt() -> Iterator[None]:
    """Turn SIGTERM into KeyboardInterrupt inside the block (main thread only; restored after)."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return

    def handler(signum: int, frame: object) -> None:
        raise KeyboardInterrupt(f"received signal {signal.Signals(signum).name}")

    previous = signal.signal(signal.SIGTERM, handler)
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, previous)
