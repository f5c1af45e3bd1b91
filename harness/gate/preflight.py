"""Checks before anything runs: a gate policy that can decide, and a baseline that fits the manifest.

``record``, ``run``, ``verify``, ``suite`` and ``calibrate`` call these first, so that a gate that could never decide (too few seeds for a check, a margin
that cannot be sized, steps-to-threshold without a threshold) or a baseline of
another manifest, grid or seed count is refused with an error naming the file and
the key to change, before any training starts and before anything is written.
"""

from __future__ import annotations

import os
from collections.abc import Sequence
from pathlib import Path
from typing import Any

from harness import stats
from harness.core.errors import BaselineError, ConfigError
from harness.gate.divergence import divergence_seeds_needed
from harness.gate.margins import GateScale, task_scale
from harness.manifest.policy import GatePolicy, PublishedReference
from harness.store.baseline import Baseline, read_baseline

__all__ = ["baseline_for", "check_baseline_seeds", "check_gate_policy", "check_grid", "minimum_seeds"]


def check_grid(manifest: Any, baseline: Baseline) -> None:
    """Refuse a baseline whose checkpoint grid differs from the manifest's (before anything runs)."""
    planned = tuple(manifest.evaluation.checkpoint_steps(manifest.budget))
    recorded = tuple(int(s) for s in baseline.runs[0].curve.steps)
    if planned != recorded:
        raise BaselineError(
            f"{baseline.path}: different checkpoint grids: the baseline has steps {list(recorded)}, the manifest "
            f"{manifest.name!r} plans {list(planned)}; curves can only be compared on the same grid: restore "
            "[budget] and [evaluation].every, or record a new baseline with `rlharness record --overwrite`"
        )


def minimum_seeds(policy: GatePolicy, references: Sequence[PublishedReference] = ()) -> dict[str, int]:
    """The fewest seeds per side each check of ``policy`` needs to be able to decide at all.

    Welch's t-test (every metric, every published reference) needs 2; where the curves part
    (``locate``), the exact permutation test needs ``C(2n, n) >= 1 / alpha`` (3 at alpha 0.05);
    ``steps-to-threshold``, when seeds never reach the threshold, Gehan's test at Holm's first
    step ``alpha / k`` (:func:`harness.stats.smallest_pvalue_rank`).
    """
    checks = len(policy.metrics) + len(references)
    needs = {f"[check].metrics {m!r} (Welch's t-test)": 2 for m in policy.metrics if m != "steps-to-threshold"}
    if "steps-to-threshold" in policy.metrics:
        level = policy.alpha / checks
        needs["[check].metrics 'steps-to-threshold' (Gehan's test when seeds never reach the threshold)"] = (
            stats.minimum_seeds(lambda n: stats.smallest_pvalue_rank(n, n, ties=True), level) or 2)
    if policy.locate:
        needs["[check].locate (where the curves part: permutation test)"] = divergence_seeds_needed(1, 1, policy) or 2
    return needs


def _check_seeds(manifest: Any, policy: GatePolicy, side: str, n: int) -> None:
    path = None if manifest.path is None else str(manifest.path)
    for check, needed in minimum_seeds(policy, tuple(manifest.references)).items():
        if n < needed:
            fix = " or set `locate = false` in [check]" if "locate" in check else ""
            raise ConfigError(f"{side} has {n} seeds, but {check} cannot decide with fewer than {needed} seeds per "
                              f"side: raise [seeds].count to at least {needed}{fix}", path=path, key="seeds.count")


def check_gate_policy(manifest: Any, policy: GatePolicy | None = None, *, baseline: Baseline | None = None) -> GateScale:
    """Validate the whole gate policy of ``manifest`` before anything runs, and return its scale.

    Checks margins (each sized in its metric's units), the threshold of steps-to-threshold,
    and the seed counts of the manifest (and of ``baseline``) against :func:`minimum_seeds`.

    Raises
    ------
    ConfigError
        Naming the manifest file and the key to change.
    """
    policy = policy or manifest.check
    scale = task_scale(policy, task=manifest.task, evaluation=manifest.evaluation, budget=manifest.budget,
                       references=tuple(manifest.references),
                       path=None if manifest.path is None else str(manifest.path))
    _check_seeds(manifest, policy, "the manifest", len(manifest.seeds))
    if baseline is not None:
        check_baseline_seeds(manifest, policy, baseline)
    return scale


def check_baseline_seeds(manifest: Any, policy: GatePolicy, baseline: Baseline) -> None:
    """Refuse a baseline with fewer seeds than the policy's checks need (:func:`minimum_seeds`)."""
    _check_seeds(manifest, policy, f"the baseline {baseline.path}", len(baseline.runs))


def baseline_for(manifest: Any, path: str | os.PathLike, *, required: bool = False) -> Baseline | None:
    """Read and check the manifest's baseline at ``path`` before anything runs.

    Returns ``None`` when there is no file at ``path`` but the manifest gives published
    references (verification then uses those only), unless ``required``.

    Raises
    ------
    BaselineError
        Missing (and no references), edited, truncated, of another manifest, or another grid.
    """
    path = Path(path)
    if not path.exists() and manifest.references and not required:
        return None
    baseline = read_baseline(path, manifest_name=manifest.name)
    check_grid(manifest, baseline)
    return baseline
