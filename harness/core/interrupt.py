"""Stopping cleanly: SIGTERM handled the way Ctrl-C is, so both end a command the same way.

A command that is told to stop (Ctrl-C in a terminal, SIGTERM from CI, ``timeout`` or a
cluster's job manager) raises :class:`KeyboardInterrupt` where it is; the runner then stops
its workers (see ``harness.execute.local.stop_process``), keeps what finished, and the CLI
exits with 130 and no traceback.

An exception raised by a signal handler can be lost: Python runs the handler at whatever
bytecode the main thread is at, and if that is inside a ``__del__`` method or a weakref
callback (the garbage collector's), the interpreter prints "Exception ignored in ..." and
carries on. A stop signal would then be ignored and the command would finish as if nothing
happened (exit 0). So the handler also records the signal, and the record is kept until the
:class:`KeyboardInterrupt` leaves a :func:`sigterm_as_interrupt` block: the runner's loop
calls :func:`raise_if_interrupted` between polls, and a block that ends without the exception
raises it then.
"""

from __future__ import annotations

import contextlib
import signal
import threading
from collections.abc import Iterator

__all__ = ["INTERRUPTED", "raise_if_interrupted", "sigterm_as_interrupt"]

#: What a command stopped by Ctrl-C or SIGTERM prints on stderr before it exits with 130.
INTERRUPTED = "interrupted: finished runs are kept; run the same command again to resume"

#: Stop signals received inside a block whose KeyboardInterrupt has not yet left it.
_received: list[int] = []
#: How many sigterm_as_interrupt blocks are open (they nest: the CLI's holds the runner's).
_depth = 0


def _interrupt(signum: int) -> KeyboardInterrupt:
    return KeyboardInterrupt(f"received signal {signal.Signals(signum).name}")


def _handler(signum: int, frame: object) -> None:
    _received.append(signum)
    raise _interrupt(signum)


def raise_if_interrupted() -> None:
    """Raise KeyboardInterrupt if a stop signal arrived whose exception was lost on the way.

    Call it at points where stopping is safe (the runner calls it between polls). Outside a
    :func:`sigterm_as_interrupt` block, or when no signal is pending, it does nothing.
    """
    if _received:
        signum = _received[-1]
        _received.clear()
        raise _interrupt(signum)


@contextlib.contextmanager
def sigterm_as_interrupt() -> Iterator[None]:
    """Turn SIGTERM (and a default-handled SIGINT) into KeyboardInterrupt inside the block.

    Main thread only; the previous handlers are restored after. A stop signal whose
    exception was swallowed inside the block (see the module's docstring) is raised when
    the block ends.
    """
    global _depth
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    if _depth == 0:
        _received.clear()  # a record left by code that caught and kept a KeyboardInterrupt
    previous = {signal.SIGTERM: signal.signal(signal.SIGTERM, _handler)}
    if signal.getsignal(signal.SIGINT) is signal.default_int_handler:  # leave a caller's own handler alone
        previous[signal.SIGINT] = signal.signal(signal.SIGINT, _handler)
    _depth += 1
    try:
        yield
    except KeyboardInterrupt:
        _received.clear()  # delivered
        raise
    else:
        raise_if_interrupted()
    finally:
        _depth -= 1
        for signum, handler in previous.items():
            signal.signal(signum, handler)
