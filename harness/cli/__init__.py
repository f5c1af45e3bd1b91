"""The ``rlharness`` command: a thin layer that parses arguments, calls the library and renders.

Each subcommand lives in a module of this package (``pin`` and ``drift``, two views of
one ``[pins]`` table, share ``pins``) with a ``register(subparsers)`` function that adds
its parsers and sets ``handler`` to a function ``(args, console) -> ExitCode``. Only ``harness.cli``,
``harness.report`` and ``harness.pytest_plugin`` import rich.
"""

from __future__ import annotations

import argparse
import enum
import importlib
import sys
from collections.abc import Sequence

from rich.console import Console
from rich.markup import escape

import harness
from harness.core.errors import HarnessError

__all__ = ["COMMANDS", "ExitCode", "build_parser", "main"]


class ExitCode(enum.IntEnum):
    """Exit codes of ``rlharness``; distinct so that CI can tell them apart."""

    OK = 0  #: the gate passed (or the command succeeded)
    GATE_FAILED = 1  #: verification ran and the gate policy failed it
    BAD_INPUT = 2  #: bad manifest, baseline, results or arguments; nothing was written
    RUNS_FAILED = 3  #: one or more training runs failed (exception, NaN, time limit, dead worker)
    INTERRUPTED = 130  #: interrupted by the user; finished runs are kept


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
            "130 interrupted (finished runs kept). `rlharness COMMAND --help` for each command."
        ),
    )
    parser.add_argument("--version", action="version", version=f"rl-harness {harness.__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name in COMMANDS:
        importlib.import_module(f"harness.cli.{name}").register(sub)
    return parser


def main(argv: Sequence[str] | None = None, *, console: Console | None = None) -> int:
    """Entry point of ``rlharness``; returns the exit code."""
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
    except KeyboardInterrupt:
        console.print("interrupted: finished runs are kept; run the same command again to resume")
        return ExitCode.INTERRUPTED


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
