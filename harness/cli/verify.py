"""``rlharness verify MANIFEST``: rerun a manifest and verify it against its baseline.

Exit codes (:class:`harness.cli.ExitCode`): 0 gate passed, 1 gate failed,
2 bad input (manifest, baseline, results or arguments; nothing written),
3 runs failed (never verified on fewer seeds than the manifest asks).
"""

from __future__ import annotations

import argparse
from pathlib import Path
from typing import Any

from rich.console import Console

from harness.cli import ExitCode
from harness.cli._options import add_execution_arguments, finish_verdict, prepare_rerun, sources_line, train_rerun
from harness.cli.staged import add_stage_arguments, stage_policy, verify_staged
from harness.core.errors import ConfigError, RunFailedError
from harness.manifest.policy import KNOWN_METRICS, GatePolicy
from harness.stats.drop_rules import DEFAULT_RULE, DROP_RULES
from harness.gate.verify import Verdict

__all__ = ["add_policy_arguments", "add_report_arguments", "add_run_arguments", "finish", "obtain_results",
           "policy_from_args", "register"]


def add_run_arguments(parser: argparse.ArgumentParser) -> None:
    """Options that say where results come from: run (cached and resumed) or read stored ones."""
    group = parser.add_argument_group("running")
    group.add_argument("--results", metavar="DIR",
                       help="results folder (default: results/<manifest name>/; for a suite, DIR/<manifest name>/)")
    group.add_argument("--no-run", action="store_true",
                       help="use the results already stored in the results folder; train nothing")
    group.add_argument("--fresh", action="store_true",
                       help="train every seed again: no run cache, no resumed files (a new results folder)")
    add_execution_arguments(group)
    group.add_argument("--baselines", metavar="DIR", default="baselines",
                       help="folder of baselines (default: baselines/); the file is <manifest name>.json")


def obtain_results(args: argparse.Namespace, manifest: Any, console: Console) -> tuple[Any, Path]:
    """The manifest's :class:`~harness.store.results.ResultSet` and its folder: read (``--no-run``) or run.

    Running reuses cached and resumed runs unless ``--fresh``.

    Raises
    ------
    RunFailedError
        If any run failed (the message lists the seeds and reasons).
    """
    from harness.store.results import read_results

    folder, options = prepare_rerun(args, manifest)
    if options is None:  # --no-run
        return read_results(folder), folder
    console.print(f"running {len(manifest.seeds)} seeds of {manifest.name} into {folder} ...", highlight=False)
    outcome = train_rerun(manifest, folder, options, console)
    console.print(sources_line(outcome.sources.values()), highlight=False)
    return outcome.results, folder


def add_policy_arguments(parser: argparse.ArgumentParser) -> None:
    """Command-line overrides of the manifest's ``[check]`` policy."""
    group = parser.add_argument_group("gate policy (overrides [check] in the manifest)")
    group.add_argument("--metrics", metavar="LIST", help=f"comma-separated metrics from {', '.join(KNOWN_METRICS)}")
    group.add_argument("--alpha", type=float, help="family-wise error rate of the checks (default: the manifest's [check] alpha, else 0.05)")
    margin = group.add_mutually_exclusive_group()
    margin.add_argument("--margin", type=float, help="absolute equivalence margin in the metric's units")
    margin.add_argument("--margin-share", type=float, metavar="SHARE",
                        help="margin as a share of the span from random-policy return to reward threshold")
    group.add_argument("--rule", choices=tuple(DROP_RULES), metavar="NAME",
                       help="when a drop fails the gate: " + "; ".join(f"{r.name}: {r.fails_when}"
                                                                        for r in DROP_RULES.values())
                       + f" (default {DEFAULT_RULE}, or [check].rule)")
    group.add_argument("--strict", action="store_true", default=None, help="also fail on inconclusive checks")
    group.add_argument("--ignore-small", action="store_true", default=None, help=argparse.SUPPRESS)


def policy_from_args(base: GatePolicy, args: argparse.Namespace) -> GatePolicy:
    """The policy with the command line's overrides applied (a ConfigError names a bad value)."""
    if args.ignore_small:
        raise ConfigError("--ignore-small was replaced by --rule: `--rule interval-past-margin` does the same; the "
                          "default rule drop-beyond-margin already lets drops inside the margin pass")
    metrics = tuple(m.strip() for m in args.metrics.split(",")) if args.metrics else None
    return base.with_overrides(metrics=metrics, alpha=args.alpha, rule=args.rule, margin=args.margin,
                               margin_share=args.margin_share, strict=args.strict)


def add_report_arguments(parser: argparse.ArgumentParser) -> None:
    """Report files written after the verdict (Markdown, JSON, JUnit XML, plot)."""
    group = parser.add_argument_group("reports")
    group.add_argument("--markdown", metavar="FILE", help="write the Markdown report (CI summary, PR comment)")
    group.add_argument("--json", metavar="FILE", help="write the JSON report (versioned schema)")
    group.add_argument("--junit", metavar="FILE", help="write a JUnit XML report (one test case per check)")
    group.add_argument("--plot", metavar="FILE",
                       help="write a plot of both sets of curves (.png or .svg); for a suite, the performance profiles")


def _check_report_paths(args: argparse.Namespace) -> None:
    if args.plot and Path(args.plot).suffix.lower() not in (".png", ".svg"):
        raise ValueError(f"--plot must end in .png or .svg, got {args.plot!r}")


def finish(verdict: Verdict, args: argparse.Namespace, console: Console) -> ExitCode:
    """Print the terminal report, write the requested report files, and map the gate to an exit code."""
    from harness.report.jsonreport import verdict_text
    from harness.report.junit import render_junit
    from harness.report.markdown import render_markdown
    from harness.report.terminal import VerdictReport

    return finish_verdict(verdict, args, console, VerdictReport(verdict), (render_markdown, verdict_text, render_junit))


def _handle(args: argparse.Namespace, console: Console) -> ExitCode:
    from harness.cli.suite import is_suite, verify_suite_command
    from harness.store.baseline import default_baseline_path
    from harness.manifest.loader import load_manifest
    from harness.gate.preflight import baseline_for, check_baseline_seeds, check_gate_policy
    from harness.gate.verify import verify_manifest

    try:
        _check_report_paths(args)
    except ValueError as exc:
        console.print(f"error: {exc}", highlight=False)
        return ExitCode.BAD_INPUT
    if is_suite(args.manifest):
        return verify_suite_command(args, console, policy_from_args)
    args.manifest = args.manifest[0]
    manifest = load_manifest(args.manifest)
    policy = stage_policy(policy_from_args(manifest.check, args), args)
    scale = check_gate_policy(manifest, policy)  # before anything runs
    path = Path(args.baseline) if args.baseline else default_baseline_path(manifest.name, args.baselines)
    history = None
    if args.baseline_ref:
        from harness.store.history import baseline_history

        history = baseline_history(path, args.baseline_ref)
    baseline = baseline_for(manifest, path, required=bool(args.baseline))
    if baseline is not None:
        check_baseline_seeds(manifest, policy, baseline)
    if baseline is None:
        console.print(f"no baseline at {path}: checking against the manifest's published references only",
                      highlight=False)
    if policy.stages is not None:
        return verify_staged(args, manifest, policy, baseline, scale, console)
    try:
        results, folder = obtain_results(args, manifest, console)
        verdict = verify_manifest(manifest, results, baseline=baseline, policy=policy, scale=scale, history=history,
                                  candidate_label=f"rerun of {manifest.name} (results in {folder})")
    except RunFailedError as exc:
        console.print(f"runs failed: {exc}", highlight=False, soft_wrap=True)
        return ExitCode.RUNS_FAILED
    return finish(verdict, args, console)


def register(subparsers: Any) -> None:
    parser = subparsers.add_parser(
        "verify", help="rerun a manifest (or a suite of them) and verify it against its baseline",
        description=(
            "Rerun MANIFEST (reusing results that match) and verify it against its baseline: provenance, exact "
            "check, statistical checks, where the curves part, and the gate. Several manifests, a folder of them "
            "or a suite file make a suite: all runs in one pool, every check of every task in one Holm family, "
            "one verdict and an aggregate across tasks. Exit 0 gate passed, 1 gate failed, 2 bad input, "
            "3 runs failed."
        ),
    )
    parser.add_argument("manifest", metavar="MANIFEST", nargs="+",
                        help="the manifest (TOML); or several, a folder of them, or a suite file")
    parser.add_argument("--details", action="store_true",
                        help="suite: print every task's full report, not only its line")
    parser.add_argument("--baseline", metavar="FILE", help="the baseline file (default: <baselines>/<name>.json)")
    parser.add_argument("--baseline-ref", metavar="REF",
                        help="git ref (branch, tag, commit; in a pull request the merge base) to compare the baseline "
                             "file with: a re-recorded, new or removed baseline is said first in every report")
    add_run_arguments(parser)
    add_policy_arguments(parser)
    add_stage_arguments(parser)
    add_report_arguments(parser)
    parser.set_defaults(handler=_handle)
