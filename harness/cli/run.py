"""``rlharness run MANIFEST``: train every seed with live progress, then print the summary table.

Seeds already in the results folder (an interrupted or earlier run) and in the
run cache are not trained again. Exit codes: 0 every seed finished, 2 bad input
(nothing written), 3 some seeds failed (the others are kept), 130 interrupted
(finished seeds are kept; the same command resumes).
"""

from __future__ import annotations

import argparse
from pathlib import Path
from typing import Any

from rich.console import Console

from harness.cli import ExitCode
from harness.cli._options import add_execution_arguments, execution_options

__all__ = ["register"]


def _handle(args: argparse.Namespace, console: Console) -> ExitCode:
    from harness.gate.preflight import check_gate_policy
    from harness.cli.suite import is_suite, run_suite_command
    from harness.manifest.loader import load_manifest
    from harness.report.progress import RunProgress, RunSummary
    from harness.execute.runner import run_manifest

    if is_suite(args.manifest):
        return run_suite_command(args, console)
    manifest = load_manifest(args.manifest[0])
    check_gate_policy(manifest)  # a gate that could never decide is refused before any training
    options = execution_options(args)
    try:
        with RunProgress(console) as progress:
            outcome = run_manifest(
                manifest,
                results_dir=Path(args.results) if args.results else None,
                on_event=progress,
                **options,
            )
    except ImportError as exc:  # the optional dask extra is missing
        console.print(f"error: {exc}", highlight=False, soft_wrap=True)
        return ExitCode.BAD_INPUT
    console.print(RunSummary(outcome))
    return ExitCode.OK if outcome.ok else ExitCode.RUNS_FAILED


def register(subparsers: Any) -> None:
    parser = subparsers.add_parser(
        "run", help="train every seed of a manifest and store the learning curves",
        description="Train every seed of MANIFEST in parallel worker processes (or on a dask cluster), "
        "showing live progress, and store one result file per seed plus an index. Seeds already in the "
        "results folder or in the run cache are not trained again.",
    )
    parser.add_argument("manifest", metavar="MANIFEST", nargs="+",
                        help="the manifest (TOML); or several, a folder of them, or a suite file (one worker pool)")
    parser.add_argument("--results", metavar="DIR",
                        help="results folder (default: results/<manifest name>/; for a suite, DIR/<manifest name>/)")
    add_execution_arguments(parser)
    parser.set_defaults(handler=_handle)
