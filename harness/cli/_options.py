"""Command-line pieces shared by several commands: where and how runs execute, and the report files."""

from __future__ import annotations

import argparse
import tempfile
from collections import Counter
from collections.abc import Callable, Iterable
from pathlib import Path
from typing import Any

from harness.core.errors import HarnessError
from harness.execute import EXECUTORS

__all__ = ["add_execution_arguments", "execution_options", "finish_verdict", "positive_float", "positive_int",
           "prepare_rerun", "sources_line", "train_rerun", "write_report_files"]


def positive_int(text: str) -> int:
    """argparse type: a whole number of at least 1."""
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"must be a whole number, got {text!r}") from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"must be at least 1, got {text!r}")
    return value


def positive_float(text: str) -> float:
    """argparse type: a positive number of seconds."""
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"must be a number of seconds, got {text!r}") from None
    if not value > 0:
        raise argparse.ArgumentTypeError(f"must be a positive number of seconds, got {text!r}")
    return value


def add_execution_arguments(group: Any) -> None:
    """``--workers``, ``--executor``, ``--scheduler`` (with ``--tls-*``), ``--cache-dir``, ``--no-cache``, ``--time-limit``."""
    group.add_argument("--workers", type=positive_int, metavar="N",
                       help="worker processes, or local dask workers (default: one per core)")
    group.add_argument("--executor", choices=EXECUTORS, default="local",
                       help="local worker processes (default) or a dask distributed cluster")
    group.add_argument("--scheduler", metavar="ADDRESS",
                       help="dask scheduler address, e.g. tcp://scheduler-host:8786 (default: start a local cluster)")
    group.add_argument("--tls-ca-file", metavar="FILE",
                       help="with --scheduler tls://...: the CA certificate (PEM) that signed the scheduler's")
    group.add_argument("--tls-cert", metavar="FILE", help="with --scheduler tls://...: this client's certificate (PEM)")
    group.add_argument("--tls-key", metavar="FILE", help="with --scheduler tls://...: this client's private key (PEM)")
    group.add_argument("--cache-dir", metavar="DIR",
                       help="run cache folder (default: $RLHARNESS_CACHE_DIR or .rlharness-cache)")
    group.add_argument("--no-cache", action="store_true", help="neither read nor write the run cache")
    group.add_argument("--time-limit", type=positive_float, metavar="SECONDS",
                       help="stop a run that trains longer than this and record it failed (exit 3; default: no limit)")


def execution_options(args: argparse.Namespace) -> dict[str, Any]:
    """The runner's keyword arguments for the options of :func:`add_execution_arguments`.

    Raises
    ------
    HarnessError
        ``--scheduler`` without ``--executor dask``.
    """
    from harness.store.cache import RunCache

    if args.scheduler is not None and args.executor != "dask":
        raise HarnessError("--scheduler needs --executor dask")
    scheduler = args.scheduler
    tls = (args.tls_ca_file, args.tls_cert, args.tls_key)
    if any(tls):
        from harness.execute.dask_cluster import TlsScheduler

        if not all(tls) or scheduler is None:
            raise HarnessError("TLS needs all of --tls-ca-file, --tls-cert and --tls-key, and --scheduler tls://HOST:PORT")
        try:
            scheduler = TlsScheduler(scheduler, *tls)
        except ValueError as exc:
            raise HarnessError(f"--scheduler with TLS: {exc}") from None
    return {
        "workers": args.workers,
        "executor": args.executor,
        "scheduler": scheduler,
        "cache": RunCache(args.cache_dir),
        "use_cache": not args.no_cache,
        "time_limit": args.time_limit,
    }


def write_report_files(verdict: Any, args: argparse.Namespace, console: Any,
                       renderers: tuple[Callable[[Any], str], Callable[[Any], str], Callable[[Any], str]]) -> None:
    """Write the ``--markdown``, ``--json`` and ``--junit`` files that were asked for, each atomically.

    ``renderers`` are the Markdown, JSON and JUnit renderers of ``verdict``'s kind (one manifest, a
    staged gate or a suite); each file is written only when its option names a path.
    """
    from harness.core.atomic import atomic_write_text

    for target, render in zip((args.markdown, args.json, args.junit), renderers, strict=True):
        if target:
            path = Path(target)
            path.parent.mkdir(parents=True, exist_ok=True)
            atomic_write_text(path, render(verdict))
            console.print(f"wrote {path}", highlight=False)



def prepare_rerun(args: argparse.Namespace, manifest: Any) -> tuple[Path, dict[str, Any] | None]:
    """The rerun's results folder and the runner's options (``None`` with ``--no-run``).

    The folder is ``--results``, else ``results/<manifest name>/``; with ``--fresh`` a new folder
    beside it, created only after the execution options checked out, and the cache is off.

    Raises
    ------
    HarnessError
        Bad execution options (see :func:`execution_options`); nothing is created.
    """
    folder = Path(args.results) if args.results else Path("results") / manifest.name
    if args.no_run:
        return folder, None
    options = execution_options(args)
    if args.fresh:  # a new folder and no cache: every seed really trains
        options["use_cache"] = False
        folder.parent.mkdir(parents=True, exist_ok=True)
        folder = Path(tempfile.mkdtemp(prefix=f"{manifest.name}-fresh-", dir=folder.parent))
    return folder, options


def train_rerun(manifest: Any, folder: Path, options: dict[str, Any], console: Any, *, first: int | None = None) -> Any:
    """Train (resume, or take from the cache) the manifest's seeds into ``folder`` with a live display.

    ``options`` come from :func:`prepare_rerun`; ``first`` trains only the first that many seeds
    (a stage of the staged gate). Returns the runner's ``RunOutcome``.

    Raises
    ------
    RunFailedError
        If any run failed (the message lists the seeds and reasons).
    """
    from harness.core.errors import RunFailedError
    from harness.execute.runner import run_manifest
    from harness.gate.curveset import last_line
    from harness.report.progress import RunProgress

    try:
        with RunProgress(console) as progress:  # draws nothing when the console is not a terminal
            outcome = run_manifest(manifest, results_dir=folder, first=first, on_event=progress, **options)
    except ImportError as exc:  # the optional dask extra is missing: the message says how to install it
        raise HarnessError(f"cannot run {manifest.name}: {exc}") from None
    failed = outcome.results.failed()
    if failed:
        lines = "\n".join(f"  seed {r.spec.seed.label}: {last_line(r.failure)}" for r in failed)
        raise RunFailedError(f"{len(failed)} of {len(outcome.results.records)} runs failed (results in {folder}):\n{lines}")
    return outcome


def sources_line(sources: Iterable[str]) -> str:
    """``runs: 3 trained, 7 resumed``: how many runs came from where (the runner's ``sources`` values)."""
    counts = Counter(sources)
    return "runs: " + ", ".join(f"{counts[s]} {s}" for s in ("trained", "cache", "resumed") if counts[s])


def finish_verdict(verdict: Any, args: argparse.Namespace, console: Any, report: Any,
                   renderers: tuple[Callable[[Any], str], Callable[[Any], str], Callable[[Any], str]]) -> int:
    """Print ``report`` (the terminal renderable), write the report files and ``--plot``; return the exit code.

    For a verdict of one manifest (fixed or staged): the plot shows its baseline's and candidate's curves.
    """
    from harness.cli import ExitCode

    console.print(report)
    write_report_files(verdict, args, console, renderers)
    if args.plot:
        from harness.report.plot import PlotUnavailableError, plot_curves

        try:
            console.print(f"wrote {plot_curves(verdict.baseline_set, verdict.candidate_set, args.plot)}", highlight=False)
        except PlotUnavailableError as exc:
            console.print(f"plot skipped: {exc}", highlight=False)
    return ExitCode.OK if verdict.passed else ExitCode.GATE_FAILED
