"""A calibration request: checked before anything runs, then trained (or reused) and calibrated.

:func:`plan_calibration` checks the gate policy, the targets, the seed count and the
baseline and derives the calibration manifest (:mod:`harness.gate.calibration_set`)
before anything runs or is written; :func:`run_calibration` reuses stored runs,
trains the rest through the runner and calibrates the gate on the whole set
(:func:`harness.gate.calibrate.calibrate_curves`).
"""

from __future__ import annotations

import dataclasses
import os
from collections.abc import Mapping
from pathlib import Path
from typing import Any

from harness.gate.calibrate import DEFAULT_SPLIT_SEED, DEFAULT_SPLITS, Calibration, calibrate_curves, check_targets
from harness.gate.calibration_set import SEED_FACTOR, calibration_manifest, reuse_stored_runs
from harness.gate.curveset import CurveSet
from harness.gate.fresh_sets import check_pool_baseline
from harness.gate.margins import GateScale
from harness.gate.preflight import check_gate_policy
from harness.manifest.policy import GatePolicy
from harness.stats._validate import check_positive_int
from harness.store.cache import RunCache

__all__ = ["CalibrationPlan", "plan_calibration", "run_calibration"]


@dataclasses.dataclass(frozen=True, slots=True)
class CalibrationPlan:
    """A checked calibration request: what :func:`run_calibration` trains and how it splits.

    Attributes
    ----------
    manifest
        The calibrated manifest.
    derived
        The calibration manifest ``<name>-calibration`` (:func:`calibration_manifest`).
    policy
        The gate policy applied to every split.
    splits, split_seed
        Number of A/A splits and the entropy they are drawn from.
    targets
        Differences to detect per metric (the margin for the others).
    scale
        Floor, threshold and margins, resolved before anything runs.
    baseline
        The recorded baseline the fresh sets are verified against, or ``None``.
    """

    manifest: Any
    derived: Any
    policy: GatePolicy
    splits: int
    split_seed: int
    targets: Mapping[str, float]
    scale: GateScale
    baseline: Any = None


def plan_calibration(
    manifest: Any,
    *,
    seeds: int | None = None,
    splits: int = DEFAULT_SPLITS,
    split_seed: int = DEFAULT_SPLIT_SEED,
    targets: Mapping[str, float] | None = None,
    policy: GatePolicy | None = None,
    baseline: Any = None,
) -> CalibrationPlan:
    """Check a calibration request before anything runs or is written.

    Parameters
    ----------
    manifest
        A ``harness.manifest.loader.Manifest``.
    seeds
        Calibration seeds (default :data:`SEED_FACTOR` times the manifest's, plus the baseline's
        seeds when a baseline is given; at least twice the manifest's).
    splits, split_seed, targets
        As :func:`calibrate_curves`.
    policy
        The gate policy; the manifest's ``[check]`` by default.
    baseline
        The manifest's recorded ``harness.store.baseline.Baseline`` to verify fresh seed sets
        against, or ``None``.

    Raises
    ------
    ValueError
        Too few seeds, a bad split count or seed, a target for a metric the gate does not
        check, or an invalid gate policy (a ``ConfigError`` naming the file and key,
        :func:`harness.gate.preflight.check_gate_policy`).
    BaselineError
        The baseline belongs to another manifest, grid or configuration, or leaves no fresh set.
    """
    policy = policy or manifest.check
    scale = check_gate_policy(manifest, policy)
    if seeds is None and baseline is not None:  # the baseline's seeds, then the default number of fresh ones
        seeds = len(baseline.runs) + SEED_FACTOR * len(manifest.seeds)
    derived = calibration_manifest(manifest, seeds=seeds)
    goals = check_targets(targets, policy.metrics)
    if baseline is not None:
        check_pool_baseline(manifest, derived, baseline)
    return CalibrationPlan(manifest, derived, policy, check_positive_int(splits, "splits"),
                           check_positive_int(split_seed, "split_seed", minimum=0), goals, scale, baseline)


def run_calibration(
    plan: CalibrationPlan,
    *,
    results_dir: str | os.PathLike | None = None,
    stored_dir: str | os.PathLike | None = None,
    cache: RunCache | str | os.PathLike | None = None,
    use_cache: bool = True,
    **run_options: Any,
) -> Calibration:
    """Run (or reuse) the calibration seeds of a plan and calibrate the gate on them.

    Parameters
    ----------
    plan
        From :func:`plan_calibration`.
    results_dir
        The calibration's results folder (default ``results/<name>-calibration/``).
    stored_dir
        The manifest's own results folder, whose runs are reused (default ``results/<name>/``).
    cache, use_cache, run_options
        As :func:`harness.execute.runner.run_specs` (``workers``, ``executor``, ``on_event``, ...).

    Raises
    ------
    RunFailedError
        If any calibration run failed (never calibrated on fewer seeds than asked).
    """
    from harness.execute.work import run_versions
    from harness.execute.runner import DEFAULT_RESULTS_DIR, run_manifest

    manifest, derived = plan.manifest, plan.derived
    folder = Path(results_dir) if results_dir is not None else Path(DEFAULT_RESULTS_DIR) / derived.name
    stored = Path(stored_dir) if stored_dir is not None else Path(DEFAULT_RESULTS_DIR) / manifest.name
    run_cache = (cache if isinstance(cache, RunCache) else RunCache(cache)) if use_cache else None
    search_path = None if manifest.path is None else str(Path(manifest.path).resolve().parent)
    versions = run_versions(derived.runs()[0], search_path=search_path)  # installed versions and trainer source
    folder.mkdir(parents=True, exist_ok=True)
    reused = reuse_stored_runs(manifest, derived, folder=folder, stored=(stored,), cache=run_cache, versions=versions)
    outcome = run_manifest(derived, results_dir=folder, cache=run_cache, use_cache=use_cache, **run_options)
    tally = {s: sum(v == s for v in outcome.sources.values()) for s in ("trained", "cache", "resumed")}
    tally["resumed"] -= reused
    tally["reused"] = reused
    curves = CurveSet.from_results(outcome.results, label=f"calibration results in {folder}",
                                   config=derived.resolved_config(), expected=len(derived.seeds))
    base = None if plan.baseline is None else CurveSet.from_baseline(plan.baseline)
    return calibrate_curves(curves, group_size=len(manifest.seeds), policy=plan.policy, splits=plan.splits,
                            split_seed=plan.split_seed, scale=plan.scale, targets=plan.targets, sources=tally,
                            baseline=base, references=manifest.references)
