"""``rlharness record MANIFEST``: run a manifest (or reuse its results) and store its baseline.

Refuses to replace an existing baseline unless ``--overwrite`` is given, and a
manifest whose gate policy is invalid or whose seeds are too few for its own
checks (:func:`harness.gate.preflight.check_gate_policy`); both checks happen
before anything is run. Exit codes: 0 recorded, 2 bad input
(nothing written), 3 runs failed (no baseline written).
"""

from __future__ import annotations

import argparse
import os
import time
from collections import Counter
from pathlib import Path
from typing import Any

from rich.console import Console

from harness.cli import ExitCode
from harness.cli.verify import add_run_arguments, obtain_results
from harness.core.errors import RunFailedError

__all__ = ["register"]


def _program_commit(manifest: Any) -> str | None:
    """The git commit of a training program's folder (``command = [...]``), if it is a checkout."""
    from harness.trainers.command import COMMAND_TRAINER, git_commit

    if manifest.trainer != COMMAND_TRAINER or manifest.path is None:
        return None
    return git_commit((Path(manifest.path).resolve().parent / manifest.settings["folder"]).resolve())


def _handle(args: argparse.Namespace, console: Console) -> ExitCode:
    from harness.cli.suite import is_suite, record_suite
    from harness.store.baseline import check_overwrite, default_baseline_path
    from harness.gate.preflight import check_gate_policy
    from harness.manifest.loader import load_manifest
    from harness.store.results import read_index

    if is_suite(args.manifest):
        return record_suite(args, console)
    args.manifest = args.manifest[0]
    manifest = load_manifest(args.manifest)
    path = Path(args.output) if args.output else default_baseline_path(manifest.name, args.baselines)
    check_overwrite(path, overwrite=args.overwrite)
    check_gate_policy(manifest)  # a baseline too small for its own checks is refused before any training
    start = time.perf_counter()
    try:  # the gate's seeds, or more with [seeds] baseline_count (results/<name>-baseline/)
        results, folder = obtain_results(args, manifest.baseline_manifest(), console)
    except RunFailedError as exc:
        console.print(f"runs failed, no baseline written: {exc}", highlight=False, soft_wrap=True)
        return ExitCode.RUNS_FAILED
    sources = Counter(run.get("source", "stored") for run in read_index(folder)["runs"])
    recording = {
        "wall_seconds": f"{time.perf_counter() - start:.1f}",
        "workers": str(args.workers or os.cpu_count()),
        "runs": ", ".join(f"{n} {source}" for source, n in sorted(sources.items())),
    }
    store_baseline(args, manifest, results, path, recording, console, verify_hint=args.manifest)
    return ExitCode.OK


def store_baseline(args: argparse.Namespace, manifest: Any, results: Any, path: Path, recording: dict[str, str],
                   console: Console, *, verify_hint: str) -> None:
    """Write ``manifest``'s baseline from ``results`` with its recording notes (and the training
    program's git commit, and who recorded it), and say so."""
    from harness.store.baseline import baseline_from_results, write_baseline
    from harness.store.history import recorder_name

    commit = _program_commit(manifest)
    if commit is not None:  # information only: the trainer's fingerprint is its files' content
        recording = {**recording, "program_git_commit": commit}
    baseline = baseline_from_results(manifest, results, recording=recording,
                                     recorder=args.recorder or recorder_name())
    written = write_baseline(baseline, path, overwrite=args.overwrite)
    console.print(
        f"recorded baseline {written}: {len(baseline.runs)} seeds, {manifest.config_hash}, checksum "
        f"{baseline.checksum}. Commit it; `rlharness verify {verify_hint}` checks reruns against it.",
        highlight=False, soft_wrap=True,
    )


def register(subparsers: Any) -> None:
    parser = subparsers.add_parser(
        "record", help="run a manifest and store its baseline",
        description="Run MANIFEST (reusing results that match) and store its baseline under baselines/.",
    )
    parser.add_argument("manifest", metavar="MANIFEST", nargs="+",
                        help="the manifest (TOML); or several, a folder of them, or a suite file (one worker pool)")
    parser.add_argument("--output", metavar="FILE", help="baseline file (default: <baselines>/<name>.json)")
    parser.add_argument("--overwrite", action="store_true", help="replace an existing baseline")
    parser.add_argument("--recorder", metavar="NAME",
                        help="who records it, stored in the baseline (default: git config user.name, else the login name)")
    add_run_arguments(parser)
    parser.set_defaults(handler=_handle)
