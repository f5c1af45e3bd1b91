"""The ``rlharness`` command: a thin layer that parses arguments, calls the library and renders.

Each subcommand lives in a module of this package (``pin`` and ``drift``, two views of
one ``[pins]`` table, share ``pins``) with a ``register(subparsers)`` function that adds
its parsers and sets ``handler`` to a function ``(args, console) -> ExitCode``. Only ``harness.cli``,
``harness.report`` and ``harness.pytest_plugin`` import rich.
"""

from __future__ import annotations

import argparse
import datetime
import enum
import importlib
import os
import sys
import tempfile
import traceback
from collections.abc import Sequence
from pathlib import Path
from typing import TYPE_CHECKING

import harness
from harness.core.interrupt import INTERRUPTED, sigterm_as_interrupt

if TYPE_CHECKING:  # rich is imported inside main(): a Ctrl-C during that import is an interruption too
    from rich.console import Console

__all__ = ["COMMANDS", "CRASH_DIR_ENV", "ExitCode", "build_parser", "crash_folder", "main"]

#: Environment variable naming the folder crash reports go to (default: the system's temp folder).
CRASH_DIR_ENV = "RLHARNESS_CRASH_DIR"


class ExitCode(enum.IntEnum):
    """Exit codes of ``rlharness``; distinct so that CI can tell them apart."""

    OK = 0  #: the gate passed (or the command succeeded)
    GATE_FAILED = 1  #: verification ran and the gate policy failed it
    BAD_INPUT = 2  #: bad manifest, baseline, results or arguments; nothing was written
    RUNS_FAILED = 3  #: one or more training runs failed (exception, NaN, time limit, dead worker)
    INTERRUPTED = 130  #: interrupted (Ctrl-C or SIGTERM); finished runs are kept
    #: a bug in rl-harness (an unexpected exception), never a verdict; the traceback is written to a
    #: file under :func:`crash_folder`. 70 is ``EX_SOFTWARE`` of BSD's sysexits.h (``os.EX_SOFTWARE``).
    INTERNAL_ERROR = 70


#: Subcommand modules under ``harness.cli``, in the order ``--help`` lists their commands.
COMMANDS: tuple[str, ...] = ("run", "record", "verify", "compare", "adopt", "pins", "calibrate")


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="rlharness",
        description=(
            "Rerun reinforcement-learning training from a manifest and decide, with statistics, "
            "whether the new learning curves match a stored baseline."
        ),
        epilog=(
            "typical use: `rlharness record MANIFEST` once, commit the baseline; then "
            "`rlharness verify MANIFEST` on every change. "
            "Exit codes: 0 passed, 1 gate failed, 2 bad input (nothing written), 3 runs failed, "
            "70 internal error (a bug; the traceback file is named), 130 interrupted (finished runs kept). `rlharness COMMAND --help` for each command."
        ),
    )
    parser.add_argument("--version", action="version", version=f"rl-harness {harness.__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name in COMMANDS:
        importlib.import_module(f"harness.cli.{name}").register(sub)
    return parser


def crash_folder() -> Path:
    """Where crash reports are written: ``$RLHARNESS_CRASH_DIR``, else ``<temp folder>/rlharness-crashes``."""
    return Path(os.environ.get(CRASH_DIR_ENV) or Path(tempfile.gettempdir()) / "rlharness-crashes")


def _write_crash_report(argv: Sequence[str] | None) -> Path:
    """Write the traceback being handled, the command line and the versions to a new file; return it."""
    folder = crash_folder()
    folder.mkdir(parents=True, exist_ok=True)
    stamp = datetime.datetime.now(datetime.UTC).strftime("%Y%m%dT%H%M%SZ")
    handle, name = tempfile.mkstemp(dir=folder, prefix=f"crash-{stamp}-", suffix=".txt")
    command = " ".join(["rlharness", *(sys.argv[1:] if argv is None else argv)])
    with os.fdopen(handle, "w", encoding="utf-8") as stream:
        stream.write(f"command: {command}\nrl-harness {harness.__version__}, Python {sys.version.split()[0]}\n\n")
        stream.write(traceback.format_exc())
    return Path(name)


def main(argv: Sequence[str] | None = None, *, console: Console | None = None) -> int:
    """Entry point of ``rlharness``; returns the exit code (see :class:`ExitCode`).

    A :class:`~harness.core.errors.HarnessError` is bad input (2); Ctrl-C or SIGTERM end the
    command with 130 and no traceback; any other exception is a bug in rl-harness (70): its
    traceback goes to a file under :func:`crash_folder` and one line names that file.
    """
    try:
        with sigterm_as_interrupt():
            return _main(argv, console)
    except KeyboardInterrupt:
        print(INTERRUPTED, file=sys.stderr)
        return ExitCode.INTERRUPTED


def _main(argv: Sequence[str] | None, console: Console | None) -> int:
    from rich.console import Console
    from rich.markup import escape

    from harness.core.errors import HarnessError

    console = console or Console(highlight=False)
    parser = build_parser()
    args = parser.parse_args(argv)
    if getattr(args, "handler", None) is None:
        parser.print_help()
        return ExitCode.BAD_INPUT
    try:
        return int(args.handler(args, console))
    except HarnessError as exc:
        console.print(f"[bold red]error:[/] {escape(str(exc))}", markup=True, highlight=False, soft_wrap=True)
        return ExitCode.BAD_INPUT
    except Exception as exc:  # a bug, not a verdict: CI must not read it as "the gate failed"
        try:
            where = f"traceback written to {_write_crash_report(argv)}"
        except OSError as report_error:
            where = f"the traceback could not be written ({report_error}); it follows:\n{traceback.format_exc()}"
        console.print(f"internal error (a bug in rl-harness, not a verdict): {type(exc).__name__}: {exc}; "
                      f"{where}; please report it. Exit code {int(ExitCode.INTERNAL_ERROR)}.",
                      markup=False, highlight=False, soft_wrap=True)
        return ExitCode.INTERNAL_ERROR


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
