"""Aggregates across a suite's tasks on normalised scores (Agarwal et al. 2021).

A run's score is its final return (the ``final`` metric: the mean evaluation return
over the last ``final_share`` of checkpoints) normalised by the task's span,

    score = (final return - floor) / (threshold - floor),

with ``floor`` the mean return of a uniformly random policy on the task's
evaluation episodes (as the harness measures it for margins) and ``threshold``
the task's solved return (``[check] threshold``, else gymnasium's registered
reward threshold); ``[check] floor`` overrides the measured floor. So 0 is the
random policy and 1 is solved, on every task.

Across tasks, for the candidate (the rerun) and the baseline:

- the **mean** of the task means (every task weighs the same) and the
  **interquartile mean** of all runs pooled, each with a 95% stratified
  percentile bootstrap interval (runs resampled within each task);
- the **probability of improvement** ``P(candidate run > baseline run)``, ties
  counted one half, computed per task and averaged, with its stratified interval;
- the **performance profile** (share of runs above each normalised score, tasks
  weighed equally) with a pointwise stratified bootstrap band.

These describe; they decide nothing (the gate is the family of checks). Tasks
without a baseline (published references only) or without a span (no threshold,
or a threshold equal to the floor) are left out, and said so.
"""

from __future__ import annotations

import dataclasses
import warnings
from collections.abc import Sequence

import numpy as np

from harness import stats
from harness.core.errors import ResultsError, TooFewSeedsWarning
from harness.gate.compare import metric_values
from harness.gate.curveset import CurveSet, random_policy_return
from harness.gate.staged import StagedVerdict
from harness.gate.verify import Verdict

__all__ = ["SuiteAggregate", "TaskScores", "normalised_scores", "suite_aggregate"]

#: Fixed seed of the aggregate's bootstrap: the same data give the same report.
_SEED = 0x5355495445
_RESAMPLES = 10000
_PROFILE_POINTS = 121


@dataclasses.dataclass(frozen=True, slots=True)
class TaskScores:
    """One task's normalised final scores, per run, and the span they were normalised by."""

    manifest: str
    floor: float
    threshold: float
    baseline: tuple[float, ...]
    candidate: tuple[float, ...]


@dataclasses.dataclass(frozen=True, slots=True)
class SuiteAggregate:
    """Normalised-score aggregates of the candidate and the baseline across tasks.

    Attributes
    ----------
    tasks
        The tasks aggregated, with their scores.
    left_out
        ``(manifest, reason)`` for each task not aggregated.
    candidate_mean, baseline_mean, candidate_iqm, baseline_iqm
        Mean of task means and pooled interquartile mean, with stratified bootstrap intervals.
    improvement
        Probability that a candidate run beats a baseline run of the same task, averaged over tasks.
    candidate_profile, baseline_profile
        Performance profiles with pointwise bands, on the same thresholds.
    """

    tasks: tuple[TaskScores, ...]
    left_out: tuple[tuple[str, str], ...]
    candidate_mean: stats.BootstrapResult
    baseline_mean: stats.BootstrapResult
    candidate_iqm: stats.BootstrapResult
    baseline_iqm: stats.BootstrapResult
    improvement: stats.BootstrapResult
    candidate_profile: stats.PerformanceProfile
    baseline_profile: stats.PerformanceProfile

    def rows(self) -> list[tuple[str, stats.BootstrapResult, stats.BootstrapResult | None]]:
        """``(statistic, candidate, baseline)`` rows of the aggregate table."""
        return [("mean (of task means)", self.candidate_mean, self.baseline_mean),
                ("interquartile mean", self.candidate_iqm, self.baseline_iqm),
                ("P(candidate > baseline)", self.improvement, None)]

    def readings(self) -> list[str]:
        """One sentence per statistic, and one per task left out."""
        level = self.candidate_mean.confidence_level
        out = [f"normalised final scores over {len(self.tasks)} tasks (0 = random policy, 1 = threshold), "
               f"{level:.0%} stratified bootstrap intervals:"]
        for name, cand, base in self.rows():
            text = f"  {name}: candidate {cand.estimate:.3f} [{cand.interval.low:.3f}, {cand.interval.high:.3f}]"
            if base is not None:
                text += f", baseline {base.estimate:.3f} [{base.interval.low:.3f}, {base.interval.high:.3f}]"
            out.append(text)
        out += [f"  left out: {name} ({reason})" for name, reason in self.left_out]
        return out


def normalised_scores(curve_set: CurveSet, policy: object, *, floor: float, threshold: float) -> np.ndarray:
    """Per-run final return of ``curve_set`` normalised to ``(x - floor) / (threshold - floor)``."""
    values = metric_values("final", curve_set, policy, threshold).values
    return (values - floor) / (threshold - floor)


def _span(manifest: object, verdict: Verdict | StagedVerdict) -> tuple[float, float] | str:
    """The task's (floor, threshold) as its gate resolved them (:mod:`harness.gate.margins`), or why there is none."""
    threshold = verdict.threshold
    if threshold is None:
        return "no reward threshold: set `threshold` in [check]"
    floor = verdict.floor
    if floor is None:  # the margins did not need it: measure it as they would have
        try:
            floor = random_policy_return(manifest.task, manifest.evaluation)
        except ResultsError:
            return "no random-policy return to measure (not a gymnasium task): set `floor` in [check]"
    if floor == threshold:
        return f"the threshold equals the random policy's return ({floor:g})"
    return float(floor), float(threshold)


def _profile_thresholds(scores: np.ndarray) -> np.ndarray:
    low, high = min(0.0, float(scores.min())), max(1.0, float(scores.max()))
    pad = 0.02 * (high - low)
    return np.linspace(low - pad, high + pad, _PROFILE_POINTS)


def suite_aggregate(manifests: Sequence[object], verdicts: Sequence[Verdict | StagedVerdict], *,
                    rng: object = None) -> SuiteAggregate | None:
    """Normalise every task's runs and aggregate them across tasks (see the module docstring).

    Returns ``None`` when no task has both a baseline and a span.

    References
    ----------
    .. [1] Agarwal, R., Schwarzer, M., Castro, P. S., Courville, A. & Bellemare, M. G.
       (2021). Deep reinforcement learning at the edge of the statistical precipice. NeurIPS 34.
    """
    tasks, left_out = [], []
    for manifest, verdict in zip(manifests, verdicts, strict=True):
        if verdict.baseline_set is None:
            left_out.append((verdict.manifest, "no baseline: checked against published references only"))
            continue
        span = _span(manifest, verdict)
        if isinstance(span, str):
            left_out.append((verdict.manifest, span))
            continue
        floor, threshold = span
        scores = [tuple(normalised_scores(s, verdict.policy, floor=floor, threshold=threshold).tolist())
                  for s in (verdict.baseline_set, verdict.candidate_set)]
        tasks.append(TaskScores(verdict.manifest, floor, threshold, *scores))
    if not tasks:
        return None
    gen = np.random.default_rng(np.random.SeedSequence(_SEED) if rng is None else rng)
    cand = np.concatenate([t.candidate for t in tasks])
    base = np.concatenate([t.baseline for t in tasks])
    cand_tasks = np.repeat([t.manifest for t in tasks], [len(t.candidate) for t in tasks])
    base_tasks = np.repeat([t.manifest for t in tasks], [len(t.baseline) for t in tasks])
    taus = _profile_thresholds(np.concatenate([cand, base]))
    options = {"n_resamples": _RESAMPLES, "rng": gen}
    with warnings.catch_warnings():  # few runs in all: the intervals' reading says how many there are
        warnings.simplefilter("ignore", TooFewSeedsWarning)
        return SuiteAggregate(
            tasks=tuple(tasks),
            left_out=tuple(left_out),
            candidate_mean=stats.bootstrap_task_mean(cand, tasks=cand_tasks, **options),
            baseline_mean=stats.bootstrap_task_mean(base, tasks=base_tasks, **options),
            candidate_iqm=stats.bootstrap_iqm(cand, tasks=cand_tasks, **options),
            baseline_iqm=stats.bootstrap_iqm(base, tasks=base_tasks, **options),
            improvement=stats.bootstrap_probability_of_improvement(cand, base, tasks_x=cand_tasks,
                                                                   tasks_y=base_tasks, **options),
            candidate_profile=stats.bootstrap_performance_profile(cand, taus, tasks=cand_tasks, rng=gen),
            baseline_profile=stats.bootstrap_performance_profile(base, taus, tasks=base_tasks, rng=gen),
        )
