"""``rlharness compare A B``: two stored result sets, the same statistics as verify, no rerun.

A is the reference (for example the main branch or the old library version),
B the candidate. The gate policy is the defaults, the ``[check]`` table of
``--manifest`` if given, and the command line's overrides. Exit codes as for
``verify``, except that nothing is trained: 0 gate passed, 1 gate failed, 2 bad input, 3 a results
folder holds failed runs.
"""

from __future__ import annotations

import argparse
from pathlib import Path
from typing import Any

from rich.console import Console

from harness.cli import ExitCode
from harness.cli.verify import add_policy_arguments, add_report_arguments, finish, policy_from_args
from harness.core.errors import RunFailedError

__all__ = ["register"]


def _handle(args: argparse.Namespace, console: Console) -> ExitCode:
    from harness.gate.verify import compare_results
    from harness.manifest.policy import GatePolicy
    from harness.store.results import read_results

    base_policy, manifest_task = GatePolicy(), None
    if args.manifest:
        from harness.manifest.loader import load_manifest

        manifest = load_manifest(args.manifest)
        base_policy, manifest_task = manifest.check, manifest.task
    policy = policy_from_args(base_policy, args)
    stored = [read_results(folder) for folder in (args.a, args.b)]
    try:
        verdict = compare_results(*stored, policy, labels=(f"results {Path(args.a)}", f"results {Path(args.b)}"),
                                  manifest_task=manifest_task)
    except RunFailedError as exc:
        console.print(f"runs failed: {exc}", highlight=False, soft_wrap=True)
        return ExitCode.RUNS_FAILED
    return finish(verdict, args, console)


def register(subparsers: Any) -> None:
    parser = subparsers.add_parser(
        "compare", help="compare two stored result sets (no rerun)",
        description=(
            "Compare two stored result folders with the statistics of verify: A is the reference, B the candidate. "
            "It trains nothing. Exit 0 gate passed, 1 gate failed, 2 bad input, 3 a results folder holds failed runs."
        ),
    )
    parser.add_argument("a", metavar="A", help="results folder of the reference (e.g. results/<name>/ on main)")
    parser.add_argument("b", metavar="B", help="results folder of the candidate")
    parser.add_argument("--manifest", metavar="FILE", help="take the gate policy from this manifest's [check]")
    add_policy_arguments(parser)
    add_report_arguments(parser)
    parser.set_defaults(handler=_handle)
