"""``rlharness calibrate MANIFEST``: how well can the gate work on this task's seed noise?

Trains (or reuses) many seeds of the manifest's unchanged configuration, applies
the gate to many random pairs of disjoint groups of them (A/A comparisons) and
reports the false-alarm rate, each metric's spread and power, and the metric
with the best signal-to-noise (:mod:`harness.gate.calibrate`). Exit codes: 0 done,
2 bad input (nothing written), 3 runs failed.
"""

from __future__ import annotations

import argparse
import math
from pathlib import Path
from typing import Any

from rich.console import Console

from harness.gate.calibrate import DEFAULT_SPLIT_SEED, DEFAULT_SPLITS
from harness.gate.calibration_set import SEED_FACTOR
from harness.cli import ExitCode
from harness.cli.verify import add_policy_arguments, policy_from_args
from harness.core.errors import HarnessError, RunFailedError
from harness.cli._options import add_execution_arguments, execution_options

__all__ = ["parse_targets", "register"]

#: Library parameter names as the command line spells them, for error messages.
_OPTIONS = {"seeds": "--seeds", "splits": "--splits", "split_seed": "--split-seed"}


def parse_targets(text: str | None, metrics: tuple[str, ...]) -> dict[str, float] | None:
    """``--target-difference``: one number for every checked metric, or ``metric=number,...``.

    Raises
    ------
    ValueError
        A value that is not a positive number, or a metric the gate does not check.
    """
    if text is None:
        return None
    items = [p.strip() for p in text.split(",") if p.strip()]
    pairs = [p.split("=", 1) if "=" in p else (None, p) for p in items]
    if not pairs or (len(pairs) > 1 and any(name is None for name, _ in pairs)):
        raise ValueError(f"--target-difference must be one number or metric=number pairs "
                         f"(e.g. final=20,auc=10), got {text!r}")
    out = {}
    for name, raw in pairs:
        try:
            value = float(raw)
        except ValueError:
            value = math.nan
        if not math.isfinite(value) or value <= 0:
            raise ValueError(f"--target-difference needs positive numbers (in the metric's units), got {raw.strip()!r}")
        for metric in metrics if name is None else (name.strip(),):
            if metric not in metrics:
                raise ValueError(f"--target-difference names {metric!r}, which the gate does not check (it checks "
                                 f"{', '.join(metrics)}); use one of those, or add it with --metrics")
            out[metric] = value
    return out


def _baseline(args: argparse.Namespace, manifest: Any) -> Any:
    """The recorded baseline to verify fresh sets against: ``--baseline``, else the default file if it exists."""
    from harness.store.baseline import default_baseline_path, read_baseline

    if args.no_baseline:
        return None
    path = Path(args.baseline) if args.baseline else default_baseline_path(manifest.name, args.baselines)
    if not args.baseline and not path.exists():
        return None
    return read_baseline(path, manifest_name=manifest.name)


def _handle(args: argparse.Namespace, console: Console) -> ExitCode:
    from harness.gate.calibration_run import plan_calibration, run_calibration
    from harness.manifest.loader import load_manifest
    from harness.report.calibration import CalibrationReport, render_calibration_markdown
    from harness.report.progress import RunProgress
    from harness.core.atomic import atomic_write_text

    manifest = load_manifest(args.manifest)
    policy = policy_from_args(manifest.check, args)
    baseline = _baseline(args, manifest)
    try:
        options = execution_options(args)
        targets = parse_targets(args.target_difference, policy.metrics)
        plan = plan_calibration(manifest, seeds=args.seeds, splits=args.splits, split_seed=args.split_seed,
                                targets=targets, policy=policy, baseline=baseline)
    except HarnessError:
        raise
    except (ValueError, TypeError) as exc:
        message = str(exc)
        for name, option in _OPTIONS.items():
            message = message.replace(f"`{name}`", option)
        console.print(f"error: {args.manifest}: {message}", highlight=False, soft_wrap=True)
        return ExitCode.BAD_INPUT
    console.print(f"calibrating {manifest.name}: {len(plan.derived.seeds)} seeds ...", highlight=False)
    try:
        with RunProgress(console) as progress:
            calibration = run_calibration(
                plan, results_dir=args.results, stored_dir=args.stored, on_event=progress, **options,
            )
    except ImportError as exc:  # the optional dask extra is missing: the message says how to install it
        console.print(f"error: {exc}", highlight=False, soft_wrap=True)
        return ExitCode.BAD_INPUT
    except RunFailedError as exc:
        console.print(f"runs failed: {exc}", highlight=False, soft_wrap=True)
        return ExitCode.RUNS_FAILED
    console.print(CalibrationReport(calibration))
    if args.markdown:
        path = Path(args.markdown)
        path.parent.mkdir(parents=True, exist_ok=True)
        atomic_write_text(path, render_calibration_markdown(calibration))
        console.print(f"wrote {path}", highlight=False)
    return ExitCode.OK


def register(subparsers: Any) -> None:
    parser = subparsers.add_parser(
        "calibrate", help="measure the gate's false-alarm rate and each metric's power on this task",
        description=(
            "Train (or reuse) many seeds of MANIFEST's unchanged configuration, apply its gate to many random pairs "
            "of disjoint groups of the manifest's seed count (A/A comparisons) and report the gate's false-alarm "
            "rate against alpha, each metric's spread, the smallest difference the manifest's seeds detect, the "
            "seeds needed for a target difference, and the metric with the best signal-to-noise. With a recorded "
            "baseline (baselines/<name>.json by default), also verify disjoint fresh seed sets against it, as verify "
            "does, and say whether its means look like an unlucky draw. Results go to "
            "results/<name>-calibration/. Exit 0 done, 2 bad input, 3 runs failed."
        ),
    )
    parser.add_argument("manifest", metavar="MANIFEST", help="the manifest (TOML)")
    group = parser.add_argument_group("calibration")
    group.add_argument("--seeds", type=int, metavar="N",
                       help=f"seeds to train, at least twice the manifest's (default {SEED_FACTOR}x, plus the baseline's "
                            "seeds when a baseline is used); the manifest's "
                            "own seeds are among them")
    group.add_argument("--splits", type=int, default=DEFAULT_SPLITS, metavar="M",
                       help=f"random A/A splits into two disjoint groups (default {DEFAULT_SPLITS})")
    group.add_argument("--split-seed", type=int, default=DEFAULT_SPLIT_SEED, metavar="S",
                       help=f"entropy of the random splits, recorded in the report (default {DEFAULT_SPLIT_SEED})")
    group.add_argument("--target-difference", metavar="D",
                       help="difference to detect, in the metric's units: one number for every metric, or "
                            "metric=number pairs (default: each metric's margin)")
    group.add_argument("--markdown", metavar="FILE", help="also write the report as Markdown")
    group.add_argument("--baseline", metavar="FILE",
                       help="recorded baseline to verify fresh seed sets against (default: <baselines>/<name>.json "
                            "when it exists); the calibration seeds it does not hold are cut into disjoint sets of "
                            "the manifest's seed count")
    group.add_argument("--baselines", metavar="DIR", default="baselines", help="folder of baselines (default: baselines/)")
    group.add_argument("--no-baseline", action="store_true", help="only the A/A splits: no recorded baseline")
    running = parser.add_argument_group("running")
    running.add_argument("--results", metavar="DIR", help="calibration results folder "
                         "(default: results/<manifest name>-calibration/)")
    running.add_argument("--stored", metavar="DIR", help="the manifest's own results, reused where they match "
                         "(default: results/<manifest name>/)")
    add_execution_arguments(running)
    add_policy_arguments(parser)
    parser.set_defaults(handler=_handle)
