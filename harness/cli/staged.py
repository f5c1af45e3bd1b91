"""``rlharness verify --stages 5,10,15,20``: the staged gate's options, its runs and its reports.

The stages come from ``[check] stages`` or ``--stages`` (``--stages off`` runs the fixed gate).
Each stage trains the manifest's first ``n`` seeds into one results folder, so a later stage,
and a rerun of a stopped gate, reuses the seeds already trained (resumed or from the cache).
"""

from __future__ import annotations

import argparse
import dataclasses
from collections.abc import Callable
from pathlib import Path
from typing import Any

from rich.console import Console

from harness.cli import ExitCode
from harness.cli._options import finish_verdict, prepare_rerun, train_rerun
from harness.core.errors import ConfigError, RunFailedError
from harness.gate.staged import Stage, plan_stages, staged_verify
from harness.manifest.policy import GatePolicy
from harness.stats.boundaries import BOUNDARY_KINDS

__all__ = ["add_stage_arguments", "first_seeds", "stage_line", "stage_policy", "verify_staged"]


def add_stage_arguments(parser: argparse.ArgumentParser) -> None:
    """``--stages`` and ``--stage-design`` (override ``[check] stages`` and ``stage_design``)."""
    group = parser.add_argument_group("staged gate (overrides [check] stages and stage_design)")
    group.add_argument("--stages", metavar="LIST",
                       help="train the seeds in stages and stop at the first decision, e.g. 5,10,15,20 (the last is "
                            "the manifest's seed count); 'off' runs the fixed gate on every seed")
    group.add_argument("--stage-design", choices=BOUNDARY_KINDS,
                       help="group-sequential boundaries (default obrien-fleming-spending)")


def stage_policy(policy: GatePolicy, args: argparse.Namespace) -> GatePolicy:
    """The policy with ``--stages``/``--stage-design`` applied (a ConfigError names a bad value)."""
    changes: dict[str, Any] = {}
    if args.stage_design is not None:
        changes["stage_design"] = args.stage_design
    if args.stages is not None:
        text = args.stages.strip()
        if text.lower() == "off":
            changes["stages"] = None
        else:
            try:
                changes["stages"] = tuple(int(part) for part in text.split(","))
            except ValueError:
                raise ConfigError(f"--stages: must be comma-separated seed counts such as 5,10,15,20 or 'off', "
                                  f"got {args.stages!r}") from None
    try:
        return dataclasses.replace(policy, **changes)
    except ConfigError as exc:
        raise ConfigError(f"--{exc.key.replace('_', '-')}: " + str(exc).split(": ", 1)[-1]) from None


def _obtain(args: argparse.Namespace, manifest: Any, console: Console) -> tuple[Callable, Path]:
    """``obtain(n)`` of :func:`staged_verify`: each stage trains into one folder, or reads it (``--no-run``)."""
    from harness.store.results import read_results

    folder, options = prepare_rerun(args, manifest)
    if options is None:  # --no-run
        results = read_results(folder)
        return (lambda n: (first_seeds(results, n), {i: "resumed" for i in range(n)})), folder

    def obtain(n: int) -> tuple[Any, dict[int, str]]:
        console.print(f"stage: the first {n} of {len(manifest.seeds)} seeds of {manifest.name} into {folder} ...",
                      highlight=False)
        outcome = train_rerun(manifest, folder, options, console, first=n)
        return outcome.results, dict(outcome.sources)

    return obtain, folder


def first_seeds(results: Any, n: int | None) -> Any:
    """A stored result set cut to its first ``n`` seeds in seed order (``None``: all), as a stage reads them."""
    records = tuple(sorted(results.records, key=lambda r: r.spec.index))
    return dataclasses.replace(results, records=records if n is None else records[:n])


def stage_line(verdict_plan: Any, stage: Stage) -> str:
    """One line of the live display: a stage's seeds, each metric's difference and decision."""
    parts = [f"{m} {lk.estimate:+.4g} [{lk.interval.low:.4g}, {lk.interval.high:.4g}] {lk.decision}"
             for m, lk in zip(verdict_plan.metrics, stage.looks, strict=True)]
    return (f"stage {stage.look}: {stage.n_candidate} seeds ({stage.trained} trained, {stage.reused} reused), "
            f"{stage.seconds:.1f} s: " + "; ".join(parts) + f" -> {stage.decision}")


def verify_staged(args: argparse.Namespace, manifest: Any, policy: GatePolicy, baseline: Any, scale: Any,
                  console: Console) -> ExitCode:
    """Check the plan (nothing trains on bad input), run the stages, report, and map the gate to an exit code."""
    plan = plan_stages(manifest, policy, baseline, scale, key="--stages" if args.stages else "check.stages")
    if manifest.references:
        console.print("note: the staged gate checks the baseline only; the manifest's [[reference]] tables are "
                      "checked by the fixed gate (--stages off)", highlight=False)
    obtain, folder = _obtain(args, manifest, console)
    try:
        verdict = staged_verify(manifest, baseline, obtain, plan=plan, policy=policy, folder=str(folder),
                                on_stage=lambda s: console.print(stage_line(plan, s), highlight=False))
    except RunFailedError as exc:
        console.print(f"runs failed: {exc}", highlight=False, soft_wrap=True)
        return ExitCode.RUNS_FAILED
    from harness.report.staged import StagedReport, render_staged_junit, render_staged_markdown, staged_text

    return finish_verdict(verdict, args, console, StagedReport(verdict),
                          (render_staged_markdown, staged_text, render_staged_junit))

