"""Statistical comparison of two sets of learning curves, or of one set with published numbers.

This is the statistics part of verification, shared by ``rlharness verify``
(a rerun against its baseline) and ``rlharness compare`` (two stored result
sets). Per-seed metrics are the unit of analysis: seeds are the independent
samples, checkpoints of one seed are not.

For every check (a metric against the baseline, or against one published
reference) it reports the difference ``candidate - baseline`` with its
``1 - 2 alpha`` confidence interval, and one of four verdicts:

``worse`` / ``better``
    The one-sided Welch test (Welch 1947) of the candidate being worse (resp.
    better) rejects at ``alpha`` after Holm's step-down correction (Holm 1979)
    across all checks. Holm is applied separately to each direction, so the
    probability that an unchanged configuration is called worse anywhere stays
    at most ``alpha``.
``equivalent``
    Not significantly different and the two one-sided tests (Schuirmann 1987)
    reject at ``alpha``: the ``1 - 2 alpha`` interval lies inside ``(-margin,
    margin)``. Each equivalence claim is an intersection-union test and needs no
    multiplicity correction (Berger 1982).
``inconclusive``
    Neither: too few seeds for the noise. The check then gives the minimum
    detectable difference at the policy's power and the seeds per group needed
    to detect a difference as large as the margin.

A significant difference whose interval also lies inside the margin is marked
``within_margin``; a policy with ``ignore_small`` lets it pass the gate.

When both samples are constant (every seed scores the same, common with tabular
tasks that all seeds solve) the difference is known exactly: the statistics
layer then gives p-values 0 or 1 and a zero-width interval, so the check is
equivalent when the difference lies inside the margin, worse or better otherwise.

Where the curves part is located with a max-statistic permutation test over
checkpoints (Westfall & Young 1993), which controls the family-wise error over
the whole curve.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Sequence

import numpy as np

from harness import stats
from harness.gate.curveset import CurveSet
from harness.core.errors import BaselineError
from harness.gate.metrics import METRICS
from harness.manifest.policy import GatePolicy, PublishedReference
from harness.stats import ConfidenceInterval

__all__ = ["VERDICTS", "Divergence", "MetricCheck", "StatisticalComparison", "compare_sets"]

VERDICTS = ("equivalent", "worse", "better", "inconclusive")


@dataclasses.dataclass(frozen=True, slots=True)
class MetricCheck:
    """One statistical check: a metric of the candidate against the baseline or a published reference.

    ``estimate`` is ``candidate - baseline`` in the metric's units; ``interval`` is its
    ``confidence_level`` (``1 - 2 alpha``) Welch interval; ``pvalue`` is the Holm-adjusted
    one-sided p-value of the direction of the verdict (of "worse" unless the verdict is better);
    ``pvalue_equivalence`` the TOST p-value.
    """

    name: str
    metric: str
    against: str
    baseline_mean: float
    baseline_sd: float
    baseline_n: int
    candidate_mean: float
    candidate_sd: float
    candidate_n: int
    estimate: float
    interval: ConfidenceInterval
    confidence_level: float
    pvalue: float
    pvalue_worse: float
    pvalue_better: float
    pvalue_equivalence: float
    margin: float
    verdict: str
    within_margin: bool
    detectable: float | None
    seeds_needed: int | None
    method: str
    baseline_values: tuple[float, ...] | None
    candidate_values: tuple[float, ...]

    @property
    def title(self) -> str:
        """The check's name, with the reference's source when it is checked against one."""
        return self.name if self.against == "baseline" else f"{self.name} ({self.against})"

    @property
    def reading(self) -> str:
        """One sentence saying what the check found."""
        diff = f"{self.estimate:+.4g} ({self.confidence_level:.0%} interval [{self.interval.low:.4g}, {self.interval.high:.4g}])"
        if self.verdict == "equivalent":
            return f"{self.title}: equivalent — difference {diff} lies inside the margin ±{self.margin:.4g}."
        if self.verdict in ("worse", "better"):
            small = " but within the margin" if self.within_margin else ""
            return f"{self.title}: significantly {self.verdict}{small} — difference {diff}, Holm-adjusted p = {self.pvalue:.3g}."
        return (
            f"{self.title}: inconclusive — difference {diff} is neither significant nor inside the margin "
            f"±{self.margin:.4g}; with these seeds only differences of about {self.detectable:.4g} are detectable, "
            + (f"about {self.seeds_needed} seeds per side would detect one as large as the margin."
               if self.seeds_needed is not None else "no practical number of seeds would detect one as large as the margin.")
        )


@dataclasses.dataclass(frozen=True, slots=True)
class Divergence:
    """Where the candidate's curve first falls significantly below the baseline's.

    ``first_step``/``last_step`` bound the first contiguous range of checkpoints where the
    max-statistic test rejects at ``alpha`` (both ``None`` if nowhere); ``pvalue`` is the
    smallest adjusted p-value in that range (or overall when nowhere).
    """

    first_step: int | None
    last_step: int | None
    pvalue: float
    alpha: float
    method: str

    @property
    def found(self) -> bool:
        return self.first_step is not None

    @property
    def reading(self) -> str:
        if not self.found:
            return f"the curves do not part: at no checkpoint is the candidate significantly below (smallest adjusted p = {self.pvalue:.3g})."
        return (
            f"the candidate first falls significantly below between steps {self.first_step} and {self.last_step} "
            f"(family-wise adjusted p = {self.pvalue:.3g})."
        )


@dataclasses.dataclass(frozen=True, slots=True)
class StatisticalComparison:
    """Every statistical check of one comparison, and where the curves part (if looked for)."""

    checks: tuple[MetricCheck, ...]
    divergence: Divergence | None
    alpha: float
    power: float


@dataclasses.dataclass(frozen=True, slots=True)
class MetricValues:
    """Per-seed values of one metric, with censoring flags for steps-to-threshold."""

    values: np.ndarray
    censored: np.ndarray

    @property
    def any_censored(self) -> bool:
        return bool(self.censored.any())


def metric_values(metric: str, curve_set: CurveSet, policy: GatePolicy, threshold: float | None) -> MetricValues:
    spec = METRICS[metric]
    if spec.censored:
        if threshold is None:
            raise BaselineError(
                "metric 'steps-to-threshold' needs a threshold: set `threshold` in [check] (the task has no "
                "reward threshold registered with gymnasium)"
            )
        results = [spec.compute(r.curve, threshold) for r in curve_set.runs]
        return MetricValues(np.array([float(t.value) for t in results]), np.array([not t.reached for t in results]))
    options = {"fraction": policy.final_share} if metric == "final" else {}
    values = np.array([float(spec.compute(r.curve, **options)) for r in curve_set.runs])
    return MetricValues(values, np.zeros(values.size, dtype=bool))


@dataclasses.dataclass(frozen=True, slots=True)
class _Raw:
    """A check before Holm: enough to finish the verdict once all p-values are known."""

    name: str
    metric: str
    against: str
    base: tuple[float, float, int]
    cand: tuple[float, float, int]
    estimate: float
    interval: ConfidenceInterval
    p_worse: float
    p_better: float
    p_equivalence: float
    equivalent: bool
    margin: float
    method: str
    base_values: tuple[float, ...] | None
    cand_values: tuple[float, ...]


def _summary(values: np.ndarray) -> tuple[float, float, int]:
    return float(np.mean(values)), float(np.std(values, ddof=1)) if values.size > 1 else 0.0, int(values.size)


def _raw_check(name: str, metric: str, against: str, cand: MetricValues, base: MetricValues | None,
               reference: PublishedReference | None, margin: float, alpha: float) -> _Raw:
    higher_is_better = METRICS[metric].higher_is_better
    c = _summary(cand.values)
    b = (reference.mean, reference.std, reference.seeds) if reference is not None else _summary(base.values)
    level = 1.0 - 2.0 * alpha
    worse_side, better_side = ("less", "greater") if higher_is_better else ("greater", "less")
    if reference is None:
        worse_t = stats.welch_test(cand.values, base.values, alternative=worse_side)
        better_t = stats.welch_test(cand.values, base.values, alternative=better_side)
        two = stats.welch_test(cand.values, base.values, alternative="two-sided")
        equiv = stats.equivalence_test(cand.values, base.values, margin=margin, alpha=alpha)
        method = "Welch's t-test (Welch 1947) with TOST equivalence (Schuirmann 1987)"
    else:
        args = (c[0], c[1], c[2], b[0], b[1], b[2])
        worse_t = stats.welch_test_from_stats(*args, alternative=worse_side)
        better_t = stats.welch_test_from_stats(*args, alternative=better_side)
        two = stats.welch_test_from_stats(*args, alternative="two-sided")
        equiv = stats.equivalence_test_from_stats(*args, margin=margin, alpha=alpha)
        method = "Welch's t-test from summary statistics (Welch 1947) with TOST equivalence (Schuirmann 1987)"
    p_worse, p_better, p_equiv, equivalent = worse_t.pvalue, better_t.pvalue, equiv.pvalue, equiv.equivalent
    if cand.any_censored or (base is not None and base.any_censored):
        if base is None:
            raise BaselineError(f"{name}: some seeds never reach the threshold, so a mean over seeds is not known; "
                                "a published steps-to-threshold reference cannot be checked against censored runs")
        kwargs = {"censored_a": cand.censored, "censored_b": base.censored}
        p_worse = stats.mann_whitney_censored(cand.values, base.values, alternative=worse_side, **kwargs).pvalue
        p_better = stats.mann_whitney_censored(cand.values, base.values, alternative=better_side, **kwargs).pvalue
        p_equiv, equivalent = 1.0, False
        method = ("Gehan's generalised Wilcoxon test for censored values (Gehan 1965); equivalence is not claimed and "
                  "the interval counts seeds that never reach the threshold at their last checkpoint")
    return _Raw(name, metric, against, b, c, c[0] - b[0], two.confidence_interval(confidence_level=level),
                float(p_worse), float(p_better), float(p_equiv), bool(equivalent), margin, method,
                None if base is None else tuple(base.values.tolist()), tuple(cand.values.tolist()))


def _finish(raw: _Raw, p_worse: float, p_better: float, reject_worse: bool, reject_better: bool,
            alpha: float, power: float) -> MetricCheck:
    if reject_worse:
        verdict, p = "worse", p_worse
    elif reject_better:
        verdict, p = "better", p_better
    elif raw.equivalent:
        verdict, p = "equivalent", p_worse
    else:
        verdict, p = "inconclusive", p_worse
    detectable = needed = None
    if verdict == "inconclusive":
        sd_b, n_b = raw.base[1], raw.base[2]
        sd_c, n_c = raw.cand[1], raw.cand[2]
        detectable = float(stats.minimum_detectable_difference(sd_c, n_c, sd_b, n_b, alpha=alpha, power=power,
                                                               alternative="greater"))
        try:
            needed = int(stats.seeds_needed(raw.margin, sd_c, sd_b, alpha=alpha, power=power, alternative="greater"))
        except ValueError:  # more seeds than the power solver searches: report none rather than guess
            needed = None
    return MetricCheck(
        name=raw.name, metric=raw.metric, against=raw.against,
        baseline_mean=raw.base[0], baseline_sd=raw.base[1], baseline_n=raw.base[2],
        candidate_mean=raw.cand[0], candidate_sd=raw.cand[1], candidate_n=raw.cand[2],
        estimate=raw.estimate, interval=raw.interval, confidence_level=1.0 - 2.0 * alpha,
        pvalue=p, pvalue_worse=p_worse, pvalue_better=p_better, pvalue_equivalence=raw.p_equivalence,
        margin=raw.margin, verdict=verdict,
        within_margin=verdict in ("worse", "better") and raw.interval.inside(-raw.margin, raw.margin),
        detectable=detectable, seeds_needed=needed, method=raw.method,
        baseline_values=raw.base_values, candidate_values=raw.cand_values,
    )


def _divergence(baseline: CurveSet, candidate: CurveSet, policy: GatePolicy) -> Divergence | None:
    a, b = candidate.curve_matrix(), baseline.curve_matrix()
    if a.shape[0] < 2 or b.shape[0] < 2:
        return None
    steps = baseline.steps
    rng = np.random.default_rng(np.random.SeedSequence(0x4449564552))  # fixed: same data, same report
    result = stats.max_statistic_test(a, b, alternative="less", n_resamples=policy.permutations, rng=rng,
                                      alpha=policy.alpha)
    adjusted = np.asarray(result.adjusted_pvalues, dtype=np.float64)
    method = f"{result.method}; Westfall & Young (1993)"
    where = result.first_rejected_range(policy.alpha)
    if where is None:
        return Divergence(None, None, float(adjusted.min()), policy.alpha, method)
    return Divergence(steps[where.start], steps[where.stop - 1], float(adjusted[where.start:where.stop].min()),
                      policy.alpha, method)


def compare_sets(
    baseline: CurveSet | None,
    candidate: CurveSet,
    policy: GatePolicy,
    *,
    references: Sequence[PublishedReference] = (),
    floor: float | None = None,
    threshold: float | None = None,
) -> StatisticalComparison:
    """Run every statistical check of ``candidate`` against ``baseline`` and ``references``.

    Parameters
    ----------
    baseline
        The baseline curves, or ``None`` to check against published references only.
    candidate
        The new curves.
    policy
        Metrics, alpha, margins, power and the divergence search.
    references
        Published summary statistics to check the candidate against as well.
    floor, threshold
        Random-policy return and reward threshold of the task, for margins given as a share.

    Raises
    ------
    BaselineError
        If the checkpoint grids differ, or there is nothing to compare against.

    References
    ----------
    Welch, B. L. (1947). Biometrika 34:28-35. Holm, S. (1979). Scand. J. Statist. 6:65-70.
    Schuirmann, D. J. (1987). J. Pharmacokin. Biopharm. 15:657-680. Berger, R. L. (1982).
    Technometrics 24:295-300. Westfall, P. H. & Young, S. S. (1993). Resampling-Based
    Multiple Testing. Wiley.
    """
    if baseline is None and not references:
        raise BaselineError("nothing to compare against: no baseline and no [[reference]] in the manifest; "
                            "record a baseline with `rlharness record MANIFEST`")
    if baseline is not None and baseline.steps != candidate.steps:
        raise BaselineError(
            f"different checkpoint grids: {baseline.label} has steps {list(baseline.steps)}, {candidate.label} has "
            f"{list(candidate.steps)}; curves can only be compared on the same grid: keep [budget] and "
            "[evaluation].every as recorded, or record a new baseline"
        )
    for side in (baseline, candidate):
        if side is not None and len(side.runs) < 2:
            raise BaselineError(
                f"{side.label}: {len(side.runs)} seed; the statistical checks need at least 2 seeds per side "
                "(seeds are the samples): raise [seeds].count in the manifest"
            )
    threshold = policy.threshold if policy.threshold is not None else threshold
    raws = []
    for metric in policy.metrics if baseline is not None else ():
        margin = policy.margin_for(metric, floor=floor, threshold=threshold, budget=candidate.budget)
        raws.append(_raw_check(metric, metric, "baseline", metric_values(metric, candidate, policy, threshold),
                               metric_values(metric, baseline, policy, threshold), None, margin, policy.alpha))
    for number, ref in enumerate(references, start=1):
        margin = policy.margin_for(ref.metric, floor=floor, threshold=threshold, budget=candidate.budget)
        raws.append(_raw_check(f"{ref.metric} vs reference {number}", ref.metric, ref.source,
                               metric_values(ref.metric, candidate, policy, threshold), None, ref, margin,
                               policy.alpha))
    worse = stats.holm([r.p_worse for r in raws], alpha=policy.alpha)
    better = stats.holm([r.p_better for r in raws], alpha=policy.alpha)
    checks = tuple(
        _finish(raw, float(pw), float(pb), bool(rw), bool(rb), policy.alpha, policy.power)
        for raw, pw, pb, rw, rb in zip(raws, worse.adjusted, better.adjusted, worse.reject, better.reject, strict=True)
    )
    divergence = _divergence(baseline, candidate, policy) if baseline is not None and policy.locate else None
    return StatisticalComparison(checks=checks, divergence=divergence, alpha=policy.alpha, power=policy.power)
