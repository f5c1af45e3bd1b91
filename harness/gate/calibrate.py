"""Calibration for the user's own task: how well can the gate work on this task's seed noise?

``rlharness calibrate MANIFEST`` trains (or reuses) a large set of seeds of one
unchanged configuration, the manifest's, splits them many times at random into
two disjoint groups of the manifest's seed count and applies the manifest's own
gate policy to each pair exactly as ``verify`` does (its statistical layer:
:func:`harness.gate.compare.compare_sets` and its gate decision). Both
groups come from the same configuration, so every failed gate is a false alarm
(an A/A comparison). It reports

* the observed false-alarm rate of the gate with an exact binomial interval
  (approximate: the splits share seeds, so they are not independent) against
  the nominal ``alpha``;
* per metric the mean and standard deviation across all seeds, the minimum
  detectable difference at the manifest's seed count, and the seeds per group
  needed to detect the margin (or a given target difference), from the power of
  Welch's t-test (:mod:`harness.stats.power`) at the gate's ``alpha``, power and
  sidedness (one-sided, as the gate tests "worse");
* a recommendation: the metric whose minimum detectable difference is smallest
  relative to its target difference;
* when a recorded baseline is given, the false-alarm rate of fresh seed sets
  verified against that baseline itself, and whether the baseline's means look
  like an unlucky draw (:mod:`harness.gate.fresh_sets`).

The calibration set (which seeds, the derived manifest ``<name>-calibration``,
which stored runs are reused) is :mod:`harness.gate.calibration_set`; checking a
request and training it is :mod:`harness.gate.calibration_run`.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from harness import stats
from harness.gate.compare import compare_sets, metric_values
from harness.gate.curveset import CurveSet
from harness.gate.fresh_sets import FreshSetCheck, check_fresh_sets
from harness.gate.margins import GateScale, gate_scale
from harness.manifest.policy import GatePolicy
from harness.stats._validate import check_positive_int
from harness.stats.proportion import BinomialRate

__all__ = [
    "DEFAULT_SPLITS",
    "DEFAULT_SPLIT_SEED",
    "WHAT_CALIBRATION_SHOWS",
    "Calibration",
    "MetricNoise",
    "Recommendation",
    "calibrate_curves",
    "check_targets",
    "split_groups",
]

#: Default number of A/A splits.
DEFAULT_SPLITS = 1000
#: Default entropy of the Generator that draws the splits (recorded in every report).
DEFAULT_SPLIT_SEED = 20261202

#: What an A/A calibration does and does not show; every report carries it.
WHAT_CALIBRATION_SHOWS = (
    "Calibration compares groups of seeds of one unchanged configuration: a false-alarm rate near or below alpha "
    "says the gate is not trigger-happy on this task's seed noise. It says nothing about the gate's power against "
    "real regressions beyond the power analysis, which assumes Welch's t-test and the spread measured here; the "
    "interval of the rate is approximate because overlapping splits are not independent."
)


@dataclasses.dataclass(frozen=True, slots=True)
class MetricNoise:
    """The seed noise of one metric and what it lets the gate detect.

    Attributes
    ----------
    metric
        The metric's name.
    mean, sd
        Mean and standard deviation (``ddof=1``) across every calibration seed.
    seeds
        Calibration seeds the two are over.
    censored
        Seeds that never reached the threshold (``steps-to-threshold`` only; their value is
        the last checkpoint step, and the gate then uses Gehan's test, not Welch's).
    margin
        The policy's equivalence margin for the metric.
    target
        The difference to detect: the margin, or the target difference given.
    group_size
        Seeds per group of the gate (the manifest's seed count).
    detectable
        Minimum detectable difference at ``group_size`` seeds per group (0 when every seed
        scores the same: any difference is then detected).
    seeds_needed
        Seeds per group to detect ``target``; ``None`` when more than the power solver searches.
    verdicts
        How often each verdict came out for this metric across the A/A splits.
    method
        How ``detectable`` and ``seeds_needed`` were computed.
    """

    metric: str
    mean: float
    sd: float
    seeds: int
    censored: int
    margin: float
    target: float
    group_size: int
    detectable: float
    seeds_needed: int | None
    verdicts: Mapping[str, int]
    method: str

    @property
    def ratio(self) -> float:
        """``detectable / target``: below 1 the manifest's seeds detect the target difference."""
        return self.detectable / self.target


@dataclasses.dataclass(frozen=True, slots=True)
class Recommendation:
    """The metric with the best signal-to-noise for the task, and why in one sentence."""

    metric: str
    reason: str


@dataclasses.dataclass(frozen=True, slots=True)
class Calibration:
    """Everything a calibration found.

    Attributes
    ----------
    manifest
        The calibrated manifest's name (the curve set's, without its ``-calibration`` suffix).
    source
        Where the curves came from (the calibration results folder).
    seeds, group_size, splits, split_seed
        Calibration seeds, seeds per group, A/A splits drawn and the entropy they were drawn from.
    policy
        The gate policy applied to every split.
    false_alarms
        Splits in which the gate failed (every one a false alarm).
    called_worse
        Splits in which some check came out significantly worse (differs from ``false_alarms``
        under ``strict`` and under every rule but ``any-drop``); at most about ``alpha`` when the
        gate is calibrated.
    metrics
        Noise and power per metric, in the policy's order.
    recommendation
        The metric with the best signal-to-noise.
    floor, threshold
        Random-policy return and reward threshold the margins were sized from.
    sources
        How many runs were trained, taken from the cache, resumed or reused.
    against_baseline
        Fresh seed sets verified against the recorded baseline and the baseline's draw, or
        ``None`` when no baseline was given.
    """

    manifest: str
    source: str
    seeds: int
    group_size: int
    splits: int
    split_seed: int
    policy: GatePolicy
    false_alarms: BinomialRate
    called_worse: BinomialRate
    metrics: tuple[MetricNoise, ...]
    recommendation: Recommendation
    floor: float | None
    threshold: float | None
    sources: Mapping[str, int] = dataclasses.field(default_factory=dict)
    against_baseline: FreshSetCheck | None = None

    @property
    def reading(self) -> str:
        """One sentence: the false-alarm rate against alpha."""
        fa = self.false_alarms
        return (f"the gate failed {fa.count} of {fa.trials} A/A splits: false-alarm rate {fa.estimate:.3g} "
                f"({fa.confidence_level:.0%} interval [{fa.interval.low:.3g}, {fa.interval.high:.3g}], approximate) "
                f"against nominal alpha {self.policy.alpha:g}.")


Split = tuple[tuple[int, ...], tuple[int, ...]]


def split_groups(n_seeds: int, group_size: int, *, splits: int, seed: int) -> tuple[Split, ...]:
    """Random pairs of disjoint groups of seed indices: the A/A splits.

    Each split is a random permutation of ``range(n_seeds)`` from
    ``default_rng(SeedSequence(seed))`` whose first ``group_size`` indices form the
    first group and the next ``group_size`` the second (each sorted). The same
    ``seed`` gives the same splits.

    Examples
    --------
    >>> pairs = split_groups(6, 3, splits=2, seed=1)
    >>> all(not set(a) & set(b) and len(a) == len(b) == 3 for a, b in pairs)
    True
    >>> pairs == split_groups(6, 3, splits=2, seed=1)
    True
    """
    n = check_positive_int(n_seeds, "n_seeds", minimum=2)
    g = check_positive_int(group_size, "group_size")
    if 2 * g > n:
        raise ValueError(f"`n_seeds` must be at least twice `group_size` ({g}), got {n_seeds!r}")
    m = check_positive_int(splits, "splits")
    rng = np.random.default_rng(np.random.SeedSequence(check_positive_int(seed, "seed", minimum=0)))
    out = []
    for _ in range(m):
        order = rng.permutation(n)
        out.append((tuple(sorted(int(i) for i in order[:g])), tuple(sorted(int(i) for i in order[g:2 * g]))))
    return tuple(out)


def check_targets(targets: Mapping[str, float] | None, metrics: Sequence[str]) -> dict[str, float]:
    """The differences to detect per metric, checked: positive, finite, for metrics the gate checks."""
    if targets is None:
        return {}
    if not isinstance(targets, Mapping):
        raise TypeError(f"`targets` must map metric names to differences, got {type(targets).__name__}")
    out = {}
    for name, value in targets.items():
        if name not in metrics:
            known = ", ".join(metrics)
            raise ValueError(f"`targets` names metric {name!r}, which the gate does not check (it checks {known}); "
                             f"use one of those or add it to the policy's metrics")
        if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value) or value <= 0:
            raise ValueError(f"`targets[{name!r}]` must be a positive finite difference, got {value!r}")
        out[name] = float(value)
    return out


def _power_of(sd: float, n: int, target: float, policy: GatePolicy) -> tuple[float, int | None]:
    """Minimum detectable difference at ``n`` per group and seeds per group for ``target``, as compare.py does."""
    if sd == 0.0:  # no spread: any difference is detected, by the fewest seeds the checks accept
        return 0.0, 2
    kw = {"alpha": policy.alpha, "power": policy.power, "alternative": "greater"}
    detectable = float(stats.minimum_detectable_difference(sd, n, sd, n, **kw))
    try:
        needed = int(stats.seeds_needed(target, sd, sd, **kw))
    except ValueError:  # more than the solver searches
        needed = None
    return detectable, needed


def _recommend(noise: Sequence[MetricNoise]) -> Recommendation:
    uncensored = [m for m in noise if not m.censored] or list(noise)
    best = min(uncensored, key=lambda m: m.ratio)
    others = [m for m in noise if m is not best]
    if best.sd == 0.0:
        reason = (f"every seed scores the same on {best.metric} ({best.mean:.4g}), so any change of it is detected "
                  "with the fewest seeds.")
    else:
        compared = "; ".join(f"{m.metric} {m.ratio:.2f}" for m in others)
        reason = (f"with {best.group_size} seeds per group it detects {best.ratio:.2f} times its target difference "
                  f"({best.detectable:.4g} of {best.target:.4g}), the smallest share of all checked metrics"
                  + (f" ({compared})" if compared else "") + ".")
    if best.censored == 0 and len(uncensored) < len(noise):
        reason = reason[:-1] + "; metrics with seeds that never reach the threshold were not preferred."
    return Recommendation(best.metric, reason)


def _split_rate(count: int, splits: int) -> BinomialRate:
    rate = BinomialRate.of(count, splits)
    return dataclasses.replace(rate, method=rate.method + "; approximate here, because overlapping splits are "
                               "not independent trials")


def calibrate_curves(
    curves: CurveSet,
    *,
    group_size: int,
    policy: GatePolicy,
    splits: int = DEFAULT_SPLITS,
    split_seed: int = DEFAULT_SPLIT_SEED,
    scale: GateScale | None = None,
    targets: Mapping[str, float] | None = None,
    sources: Mapping[str, int] | None = None,
    baseline: CurveSet | None = None,
    references: Sequence[Any] = (),
) -> Calibration:
    """A/A calibration of the gate on a set of curves of one unchanged configuration.

    Parameters
    ----------
    curves
        Every calibration seed's curve.
    group_size
        Seeds per group (the manifest's seed count); ``curves`` needs at least twice as many.
    policy
        The gate policy, applied to every split as ``verify`` does (``locate`` is turned off:
        where the curves part does not enter the gate).
    splits, split_seed
        Number of A/A splits and the entropy of the Generator that draws them.
    scale
        Floor, threshold and margins (:func:`harness.gate.preflight.check_gate_policy`); by default
        sized from the policy alone.
    targets
        Differences to detect per metric (default: each metric's margin).
    sources
        How the runs were obtained, for the report.
    baseline, references
        The recorded baseline and the manifest's published references: when a baseline is
        given, the seeds of ``curves`` it does not hold are cut into disjoint fresh sets of
        ``group_size`` and each is verified against it as ``verify`` does
        (:func:`harness.gate.fresh_sets.check_fresh_sets`).

    Returns
    -------
    Calibration

    References
    ----------
    .. [1] Welch, B. L. (1947). Biometrika 34:28–35 (the checks); Holm, S. (1979). Scand. J.
       Statist. 6:65–70 (across metrics); Cohen, J. (1988). Statistical Power Analysis for the
       Behavioral Sciences, 2nd ed. (power); Clopper, C. J. & Pearson, E. S. (1934).
       Biometrika 26:404–413 (the interval of the rate).
    """
    if not isinstance(curves, CurveSet):
        raise TypeError(f"`curves` must be a harness.gate.curveset.CurveSet, got {type(curves).__name__}")
    if not isinstance(policy, GatePolicy):
        raise TypeError(f"`policy` must be a harness.manifest.policy.GatePolicy, got {type(policy).__name__}")
    g = check_positive_int(group_size, "group_size", minimum=2)
    pairs = split_groups(len(curves.runs), g, splits=splits, seed=split_seed)
    goals = check_targets(targets, policy.metrics)
    gate = dataclasses.replace(policy, locate=False)
    scale = scale or gate_scale(policy, budget=curves.budget)
    threshold = scale.threshold
    counts = {m: dict.fromkeys(("equivalent", "better", "worse", "inconclusive"), 0) for m in policy.metrics}
    failed = worse = 0
    for a, b in pairs:
        base = dataclasses.replace(curves, runs=tuple(curves.runs[i] for i in a))
        cand = dataclasses.replace(curves, runs=tuple(curves.runs[i] for i in b))
        comparison = compare_sets(base, cand, gate, scale=scale)
        checks = comparison.checks
        failed += not comparison.gate.passed
        worse += any(c.verdict == "worse" for c in checks)
        for c in checks:
            counts[c.metric][c.verdict] += 1
    noise = []
    for metric in policy.metrics:
        values = metric_values(metric, curves, policy, threshold)
        sd = float(np.std(values.values, ddof=1))
        margin = scale.margin(metric)
        target = goals.get(metric, margin)
        detectable, needed = _power_of(sd, g, target, policy)
        noise.append(MetricNoise(
            metric=metric, mean=float(np.mean(values.values)), sd=sd, seeds=len(curves.runs),
            censored=int(values.censored.sum()), margin=margin, target=target, group_size=g,
            detectable=detectable, seeds_needed=needed, verdicts=counts[metric],
            method=(f"power of one-sided Welch's t-test (noncentral t; Cohen 1988) at alpha {policy.alpha:g}, "
                    f"power {policy.power:g}, for the sd across all {len(curves.runs)} seeds"),
        ))
    m = len(pairs)
    return Calibration(
        manifest=curves.manifest.removesuffix("-calibration"), source=curves.label, seeds=len(curves.runs),
        group_size=g, splits=m, split_seed=int(split_seed), policy=policy,
        false_alarms=_split_rate(failed, m), called_worse=_split_rate(worse, m),
        metrics=tuple(noise), recommendation=_recommend(noise), floor=scale.floor, threshold=threshold,
        sources=dict(sources or {}),
        against_baseline=None if baseline is None else check_fresh_sets(
            baseline, curves, group_size=g, policy=policy, references=references, scale=scale),
    )
