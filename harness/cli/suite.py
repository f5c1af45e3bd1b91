"""``run``, ``record`` and ``verify`` over a suite: several manifests, a folder of them, or a suite file.

One manifest file keeps the single-manifest commands exactly as they were; anything
else goes through here. Every manifest and baseline is checked before anything
trains; all runs of all tasks share one worker pool (longest first) with one live
progress display; each task's results go to ``<results>/<manifest name>/`` and are
cached and resumed per seed as for one manifest.
"""

from __future__ import annotations

import argparse
import dataclasses
import os
import tempfile
import time
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

from rich.console import Console

from harness.cli import ExitCode
from harness.cli._options import execution_options, sources_line, write_report_files
from harness.core.errors import HarnessError, RunFailedError

__all__ = ["is_suite", "record_suite", "run_suite_command", "verify_suite_command"]


def is_suite(items: Sequence[str]) -> bool:
    """True unless ``items`` is a single manifest file (which keeps the single-manifest command)."""
    from harness.manifest.suite import is_suite_file

    return len(items) != 1 or Path(items[0]).is_dir() or is_suite_file(items[0])


def _refuse(args: argparse.Namespace, *options: str) -> None:
    for option in options:
        if getattr(args, option.lstrip("-").replace("-", "_"), None):
            raise HarnessError(f"{option} names one file, so it works with one manifest only; with a suite, "
                               "files go by manifest name (<baselines>/<name>.json)")


def _folders(args: argparse.Namespace, suite: Any) -> list[Path]:
    root = Path(getattr(args, "results", None) or "results")
    if getattr(args, "fresh", False):
        root.mkdir(parents=True, exist_ok=True)
        root = Path(tempfile.mkdtemp(prefix=f"{suite.name}-fresh-", dir=root))
    return [root / m.name for m in suite.manifests]


def _train(args: argparse.Namespace, suite: Any, folders: Sequence[Path], baselines: dict,
           console: Console, first: dict[str, int] | None = None) -> tuple[Any, ...]:
    """Every run of every task in one pool, with one progress display (only the ``first`` seeds of a staged task)."""
    from harness.execute.suite import run_suite
    from harness.report.progress import SuiteProgress

    options = execution_options(args)
    if getattr(args, "fresh", False):
        options["use_cache"] = False
    seeds = sum((first or {}).get(m.name, len(m.seeds)) for m in suite.manifests)
    console.print(f"running {seeds} seeds of {len(suite.manifests)} tasks ({', '.join(m.name for m in suite.manifests)}) "
                  f"in one pool; results in {folders[0].parent}/<task>/ ...", highlight=False, soft_wrap=True)
    try:
        with SuiteProgress(console) as progress:  # draws nothing when the console is not a terminal
            return run_suite(suite.manifests, folders, baselines, first=first, on_event=progress, **options)
    except ImportError as exc:  # the optional dask extra is missing: the message says how to install it
        raise HarnessError(f"cannot run suite {suite.name}: {exc}") from None


def _failures(outcomes: Sequence[Any]) -> str | None:
    from harness.gate.curveset import last_line

    lines = [f"  {o.results.manifest} seed {r.spec.seed.label}: {last_line(r.failure)}"
             for o in outcomes for r in o.results.failed()]
    if not lines:
        return None
    total = sum(len(o.results.records) for o in outcomes)
    return f"{len(lines)} of {total} runs failed:\n" + "\n".join(lines)


def _results(args: argparse.Namespace, suite: Any, baselines: dict, console: Console) -> tuple[list[Any], list[Path]]:
    """Each task's result set: read (``--no-run``) or trained in one pool. Raises RunFailedError."""
    from harness.store.results import read_results

    folders = _folders(args, suite)
    if args.no_run:
        return [read_results(f) for f in folders], folders
    outcomes = _train(args, suite, folders, baselines, console)
    failed = _failures(outcomes)
    if failed:
        raise RunFailedError(failed)
    console.print(sources_line(s for o in outcomes for s in o.sources.values()), highlight=False)
    return [o.results for o in outcomes], folders


def run_suite_command(args: argparse.Namespace, console: Console) -> ExitCode:
    """``rlharness run`` over a suite: train, then one summary table per task."""
    from harness.manifest.suite import load_suite
    from harness.report.progress import RunSummary
    from harness.store.baseline import default_baseline_path, read_baseline

    from harness.gate.preflight import check_gate_policy

    suite = load_suite(args.manifest)
    for m in suite.manifests:  # a gate that could never decide is refused before any training
        check_gate_policy(m)
    baselines = {}
    for m in suite.manifests:  # only to order the runs by their recorded cost; a bad baseline is not an error here
        path = default_baseline_path(m.name)
        try:
            baselines[m.name] = read_baseline(path, manifest_name=m.name) if path.exists() else None
        except HarnessError:
            baselines[m.name] = None
    outcomes = _train(args, suite, _folders(args, suite), baselines, console)
    for outcome in outcomes:
        console.print(RunSummary(outcome))
    return ExitCode.OK if all(o.ok for o in outcomes) else ExitCode.RUNS_FAILED


def record_suite(args: argparse.Namespace, console: Console) -> ExitCode:
    """``rlharness record`` over a suite: one pool, then one baseline per task; none if any run failed."""
    from harness.cli.record import store_baseline
    from harness.gate.preflight import check_gate_policy
    from harness.manifest.suite import load_suite
    from harness.store.baseline import check_overwrite, default_baseline_path

    _refuse(args, "--output")
    suite = load_suite(args.manifest)
    paths = [default_baseline_path(m.name, args.baselines) for m in suite.manifests]
    for manifest, path in zip(suite.manifests, paths, strict=True):  # refused before any training
        check_overwrite(path, overwrite=args.overwrite)
        check_gate_policy(manifest)
    start = time.perf_counter()
    try:
        results, _ = _results(args, suite, dict.fromkeys(m.name for m in suite.manifests), console)
    except RunFailedError as exc:
        console.print(f"runs failed, no baseline written: {exc}", highlight=False, soft_wrap=True)
        return ExitCode.RUNS_FAILED
    recording = {"wall_seconds": f"{time.perf_counter() - start:.1f}", "workers": str(args.workers or os.cpu_count()),
                 "suite": f"{suite.name} ({len(suite.manifests)} tasks in one pool: the wall time is the suite's)"}
    for manifest, result, path in zip(suite.manifests, results, paths, strict=True):
        store_baseline(args, manifest, result, path, recording, console, verify_hint=" ".join(args.manifest))
    return ExitCode.OK


def verify_suite_command(args: argparse.Namespace, console: Console,
                         policy_from_args: Callable[[Any, argparse.Namespace], Any]) -> ExitCode:
    """``rlharness verify`` over a suite: one family of checks, one verdict, one exit code."""
    from harness.cli.staged import stage_policy
    from harness.gate.suite import SuiteMember, verify_suite
    from harness.gate.preflight import baseline_for, check_gate_policy
    from harness.manifest.suite import load_suite
    from harness.store.baseline import default_baseline_path

    _refuse(args, "--baseline")
    if getattr(args, "stages", None) is not None and args.stages.strip().lower() != "off":
        raise HarnessError("--stages: the members of a suite have their own seed counts, so one stage list cannot "
                           "fit them all; set [check] stages in each manifest to stage it, or pass --stages off to "
                           "run every member with the fixed gate")
    suite = load_suite(args.manifest, alpha=args.alpha)
    policies = [stage_policy(policy_from_args(m.check, args), args).with_overrides(alpha=suite.alpha)
                for m in suite.manifests]
    baselines, histories, scales = {}, {}, {}
    for m in suite.manifests:  # every baseline is checked before anything trains
        path = default_baseline_path(m.name, args.baselines)
        if args.baseline_ref:
            from harness.store.history import baseline_history

            histories[m.name] = baseline_history(path, args.baseline_ref)
        baselines[m.name] = baseline_for(m, path)
        if baselines[m.name] is None:
            console.print(f"{m.name}: no baseline at {path}: checking against its published references only",
                          highlight=False)
    for m, policy in zip(suite.manifests, policies, strict=True):  # a gate that could never decide: refused now
        scales[m.name] = check_gate_policy(m, policy, baseline=baselines[m.name])
    if any(p.stages is not None for p in policies):
        return _verify_staged_suite(args, suite, policies, baselines, histories, scales, console)
    try:
        results, folders = _results(args, suite, baselines, console)
    except RunFailedError as exc:
        console.print(f"runs failed: {exc}", highlight=False, soft_wrap=True)
        return ExitCode.RUNS_FAILED
    members = [SuiteMember(m, r, baselines[m.name], p, f"rerun of {m.name} (results in {f})", histories.get(m.name),
                           scales[m.name])
               for m, r, p, f in zip(suite.manifests, results, policies, folders, strict=True)]
    verdict = verify_suite(suite.name, suite.alpha, members)
    return _finish(verdict, args, console)


def _verify_staged_suite(args: argparse.Namespace, suite: Any, policies: Sequence[Any], baselines: dict,
                         histories: dict, scales: dict, console: Console) -> ExitCode:
    """A suite with staged members: each round trains the next stage of every undecided member in one pool."""
    from harness.cli.staged import first_seeds, stage_line
    from harness.gate.suite_staged import StagedMember, plan_staged_members, verify_staged_suite
    from harness.store.results import read_results

    members = [StagedMember(m, baselines[m.name], p, scales[m.name], history=histories.get(m.name))
               for m, p in zip(suite.manifests, policies, strict=True)]
    plan_staged_members(suite.alpha, members)  # a stage plan that does not fit: refused before any folder or run
    folders = dict(zip((m.name for m in suite.manifests), _folders(args, suite), strict=True))
    by_name = {m.name: m for m in suite.manifests}
    members = [dataclasses.replace(m, folder=str(folders[m.manifest.name]),
                                   candidate_label=f"rerun of {m.manifest.name} (results in {folders[m.manifest.name]})")
               for m in members]
    for m in members:
        if m.staged and m.manifest.references:
            console.print(f"{m.manifest.name}: the staged gate checks the baseline only; its [[reference]] tables are "
                          "checked by the fixed gate (--stages off)", highlight=False)

    def train(request: Any) -> dict[str, tuple[Any, dict[int, str]]]:
        names = list(request)
        if args.no_run:
            stored = {n: read_results(folders[n]) for n in names}
            return {n: (first_seeds(stored[n], request[n]), {}) for n in names}
        manifests = [by_name[n] for n in names]
        outcomes = _train(args, dataclasses.replace(suite, manifests=tuple(manifests)), [folders[n] for n in names],
                          baselines, console, first={n: k for n, k in request.items() if k is not None})
        failed = _failures(outcomes)
        if failed:
            raise RunFailedError(failed)
        return {n: (o.results, dict(o.sources)) for n, o in zip(names, outcomes, strict=True)}

    def on_stage(task: str, plan: Any, stage: Any) -> None:
        console.print(f"{task}: {stage_line(plan, stage)}", highlight=False)

    try:
        verdict = verify_staged_suite(suite.name, suite.alpha, members, train, on_stage=on_stage)
    except RunFailedError as exc:
        console.print(f"runs failed: {exc}", highlight=False, soft_wrap=True)
        return ExitCode.RUNS_FAILED
    return _finish(verdict, args, console)


def _finish(verdict: Any, args: argparse.Namespace, console: Console) -> ExitCode:
    from harness.report.plot import PlotUnavailableError, plot_profiles
    from harness.report.suite import SuiteReport, render_suite_junit, render_suite_markdown, suite_text

    console.print(SuiteReport(verdict, details=args.details))
    write_report_files(verdict, args, console, (render_suite_markdown, suite_text, render_suite_junit))
    if args.plot:
        if verdict.aggregate is None:
            console.print("plot skipped: no task has both a baseline and a score span to plot", highlight=False)
        else:
            try:
                console.print(f"wrote {plot_profiles(verdict.aggregate, args.plot)}", highlight=False)
            except PlotUnavailableError as exc:
                console.print(f"plot skipped: {exc}", highlight=False)
    return ExitCode.OK if verdict.passed else ExitCode.GATE_FAILED
