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
from harness.executors import EXECUTORS

__all__ = ["register"]


def _positive_float(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"must be a number of seconds, got {text!r}") from None
    if not value > 0:
        raise argparse.ArgumentTypeError(f"must be a positive number of seconds, got {text!r}")
    return value


def _positive_int(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"must be a whole number, got {text!r}") from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"must be at least 1, got {text!r}")
    return value


def _handle(args: argparse.Namespace, console: Console) -> ExitCode:
    from harness.cache import RunCache
    from harness.manifest import load_manifest
    from harness.report.progress import RunProgress, RunSummary
    from harness.runner import run_manifest

    manifest = load_manifest(args.manifest)
    if args.scheduler is not None and args.executor != "dask":
        console.print("error: --scheduler needs --executor dask", highlight=False)
        return ExitCode.BAD_INPUT
    try:
        with RunProgress(console) as progress:
            outcome = run_manifest(
                manifest,
                results_dir=Path(args.results) if args.results else None,
                workers=args.workers,
                executor=args.executor,
                scheduler=args.scheduler,
                cache=RunCache(args.cache_dir),
                use_cache=not args.no_cache,
                time_limit=args.time_limit,
                on_event=progress,
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
    parser.add_argument("manifest", metavar="MANIFEST", help="the manifest (TOML)")
    parser.add_argument("--results", metavar="DIR", help="results folder (default: results/<manifest name>/)")
    parser.add_argument("--workers", type=_positive_int, metavar="N",
                        help="worker processes, or local dask workers (default: one per core)")
    parser.add_argument("--executor", choices=EXECUTORS, default="local",
                        help="local worker processes (default) or a dask distributed cluster")
    parser.add_argument("--scheduler", metavar="ADDRESS",
                        help="dask scheduler address, e.g. tcp://10.0.0.5:8786 (default: start a local cluster)")
    parser.add_argument("--cache-dir", metavar="DIR",
                        help="run cache folder (default: $RLHARNESS_CACHE_DIR or .rlharness-cache)")
    parser.add_argument("--no-cache", action="store_true", help="neither read nor write the run cache")
    parser.add_argument("--time-limit", type=_positive_float, metavar="SECONDS",
                        help="stop a run that trains longer than this and record it failed (default: no limit)")
    parser.set_defaults(handler=_handle)
