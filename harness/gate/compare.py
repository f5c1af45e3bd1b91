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
``within_margin``. Each check also tests whether the candidate is worse by more
than the margin (the one-sided Welch test of ``H0: drop <= margin``, Holm-corrected
across checks the same way): ``beyond_margin``.

The gate (:func:`harness.gate.decision.decide`) applies the policy's ``rule``
(:mod:`harness.stats.drop_rules`) to these numbers: by default it fails only
when a drop is significantly larger than the margin; ``any-drop`` fails on any
significant drop. A check whose test cannot reach its level with the seeds at
hand (a rank or permutation test with too few seeds) says so and names the
seeds it needs, instead of reporting "no difference".

When both samples are constant (every seed scores the same, common with tabular
tasks that all seeds solve) the difference is known exactly: the statistics
layer then gives p-values 0 or 1 and a zero-width interval, so the check is
equivalent when the difference lies inside the margin, worse or better otherwise.
Differences and spreads within floating-point resolution count as zero
(:func:`harness.stats.rounding_tolerance`).

Where the curves part is located with a max-statistic permutation test over
checkpoints (Westfall & Young 1993), which controls the family-wise error over
the whole curve (:mod:`harness.gate.divergence`).
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable, Sequence

import numpy as np

from harness import stats
from harness.core.errors import BaselineError
from harness.gate.curveset import CurveSet
from harness.gate.decision import GateDecision, decide
from harness.gate.divergence import Divergence, locate_divergence
from harness.gate.margins import GateScale, gate_scale
from harness.gate.metrics import METRICS
from harness.manifest.policy import GatePolicy, PublishedReference
from harness.stats import ConfidenceInterval

__all__ = ["VERDICTS", "Family", "MetricCheck", "MetricValues", "StatisticalComparison", "compare_sets",
           "metric_values"]

VERDICTS = ("equivalent", "worse", "better", "inconclusive")

#: How one comparison's p-values are adjusted: ``family(kind, raw_pvalues)`` with ``kind``
#: ``"p_worse"``, ``"p_better"`` or ``"p_beyond"`` returns the adjusted values in the same order.
#: The default is Holm over this comparison's checks; a suite passes one that adjusts over
#: every check of every task (:mod:`harness.gate.suite`).
Family = Callable[[str, Sequence[float]], stats.AdjustedPValues]


@dataclasses.dataclass(frozen=True, slots=True)
class MetricCheck:
    """One statistical check: a metric of the candidate against the baseline or a published reference.

    ``estimate`` is ``candidate - baseline`` in the metric's units; ``interval`` is its
    ``confidence_level`` (``1 - 2 alpha``) Welch interval; ``pvalue`` is the Holm-adjusted
    one-sided p-value of the direction of the verdict (of "worse" unless the verdict is better);
    ``pvalue_equivalence`` the TOST p-value; ``pvalue_beyond`` the Holm-adjusted p-value of
    "worse by more than the margin" and ``beyond_margin`` whether it rejects at ``alpha``.
    ``undecidable`` is the number of seeds per side the check's test needs to be able to reach
    its level, when it cannot with the seeds at hand (``None`` otherwise). For an inconclusive
    check, ``detectable`` is the smallest drop the gate's rule catches with the policy's power and
    ``seeds_needed`` the seeds per side to catch a drop of ``target`` (the margin; twice the margin
    under ``drop-beyond-margin``, which fails only beyond the margin).
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
    pvalue_beyond: float
    margin: float
    verdict: str
    within_margin: bool
    beyond_margin: bool
    undecidable: int | None
    detectable: float | None
    seeds_needed: int | None
    target: float
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
            beyond = (f"; worse by more than the margin ±{self.margin:.4g} (p = {self.pvalue_beyond:.3g})"
                      if self.beyond_margin else
                      f"; not shown to be worse by more than the margin ±{self.margin:.4g} (p = {self.pvalue_beyond:.3g})"
                      if self.verdict == "worse" else "")
            return (f"{self.title}: significantly {self.verdict}{small} — difference {diff}, "
                    f"Holm-adjusted p = {self.pvalue:.3g}{beyond}.")
        if self.undecidable is not None:
            return (f"{self.title}: cannot decide with {self.candidate_n} vs {self.baseline_n} seeds (needs "
                    f"{self.undecidable} per side): its test ({self.method.split(';')[0]}) cannot reach the level "
                    f"with fewer — difference {diff}.")
        if self.detectable is None:
            power = ("neither side varies across seeds (every value equal, e.g. no seed reaches the threshold), "
                     "so no power figure exists.")
        else:
            power = (f"with these seeds only differences of about {self.detectable:.4g} are detectable, "
                     + (f"about {self.seeds_needed} seeds per side would detect a drop of {self.target:.4g}."
                        if self.seeds_needed is not None else
                        f"no practical number of seeds would detect a drop of {self.target:.4g}."))
        return (f"{self.title}: inconclusive — difference {diff} is neither significant nor inside the margin "
                f"±{self.margin:.4g}; {power}")


@dataclasses.dataclass(frozen=True, slots=True)
class StatisticalComparison:
    """Every statistical check of one comparison, and where the curves part (if looked for)."""

    checks: tuple[MetricCheck, ...]
    divergence: Divergence | None
    alpha: float
    power: float
    gate: GateDecision
    scale: GateScale


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
    p_beyond: float
    equivalent: bool
    margin: float
    method: str
    base_values: tuple[float, ...] | None
    cand_values: tuple[float, ...]
    undecidable: int | None


def _summary(values: np.ndarray) -> tuple[float, float, int]:
    mean = float(np.mean(values))
    sd = float(np.std(values, ddof=1)) if values.size > 1 else 0.0
    return mean, 0.0 if sd <= stats.rounding_tolerance(mean, values.size) else sd, int(values.size)


def _undecidable(n_c: int, n_b: int, side: str, level: float) -> int | None:
    """Seeds per side Gehan's test needs to reach ``level``, if it cannot with ``n_c`` and ``n_b`` seeds."""
    if stats.smallest_pvalue_rank(n_c, n_b, alternative=side, ties=True) <= level:
        return None
    return stats.minimum_seeds(lambda n: stats.smallest_pvalue_rank(n, n, alternative=side, ties=True), level)


def _raw_check(name: str, metric: str, against: str, cand: MetricValues, base: MetricValues | None,
               reference: PublishedReference | None, margin: float, alpha: float, checks: int) -> _Raw:
    higher_is_better = METRICS[metric].higher_is_better
    beyond_null = -margin if higher_is_better else margin
    c = _summary(cand.values)
    b = (reference.mean, reference.std, reference.seeds) if reference is not None else _summary(base.values)
    level = 1.0 - 2.0 * alpha
    worse_side, better_side = ("less", "greater") if higher_is_better else ("greater", "less")
    if reference is None:
        worse_t = stats.welch_test(cand.values, base.values, alternative=worse_side)
        beyond_t = stats.welch_test(cand.values, base.values, alternative=worse_side, null_difference=beyond_null)
        better_t = stats.welch_test(cand.values, base.values, alternative=better_side)
        two = stats.welch_test(cand.values, base.values, alternative="two-sided")
        equiv = stats.equivalence_test(cand.values, base.values, margin=margin, alpha=alpha)
        method = "Welch's t-test (Welch 1947) with TOST equivalence (Schuirmann 1987)"
    else:
        args = (c[0], c[1], c[2], b[0], b[1], b[2])
        worse_t = stats.welch_test_from_stats(*args, alternative=worse_side)
        beyond_t = stats.welch_test_from_stats(*args, alternative=worse_side, null_difference=beyond_null)
        better_t = stats.welch_test_from_stats(*args, alternative=better_side)
        two = stats.welch_test_from_stats(*args, alternative="two-sided")
        equiv = stats.equivalence_test_from_stats(*args, margin=margin, alpha=alpha)
        method = "Welch's t-test from summary statistics (Welch 1947) with TOST equivalence (Schuirmann 1987)"
    p_worse, p_better, p_equiv, equivalent = worse_t.pvalue, better_t.pvalue, equiv.pvalue, equiv.equivalent
    p_beyond, undecidable = beyond_t.pvalue, None
    if cand.any_censored or (base is not None and base.any_censored):
        if base is None:
            raise BaselineError(f"{name}: some seeds never reach the threshold, so a mean over seeds is not known; "
                                "a published steps-to-threshold reference cannot be checked against censored runs")
        kwargs = {"censored_a": cand.censored, "censored_b": base.censored}
        p_worse = stats.mann_whitney_censored(cand.values, base.values, alternative=worse_side, **kwargs).pvalue
        p_better = stats.mann_whitney_censored(cand.values, base.values, alternative=better_side, **kwargs).pvalue
        p_equiv, equivalent = 1.0, False
        # No shifted Gehan test: "beyond the margin" is the significant drop whose estimate exceeds the margin.
        drop = (b[0] - c[0]) if higher_is_better else (c[0] - b[0])
        p_beyond = p_worse if drop > margin else 1.0
        undecidable = _undecidable(c[2], b[2], worse_side, alpha / checks)
        method = ("Gehan's generalised Wilcoxon test for censored values (Gehan 1965); equivalence is not claimed, "
                  "'beyond the margin' is a significant drop whose estimate exceeds it, and the interval counts "
                  "seeds that never reach the threshold at their last checkpoint")
    return _Raw(name, metric, against, b, c, two.estimate, two.confidence_interval(confidence_level=level),
                float(p_worse), float(p_better), float(p_equiv), float(p_beyond), bool(equivalent), margin, method,
                None if base is None else tuple(base.values.tolist()), tuple(cand.values.tolist()), undecidable)


def _finish(raw: _Raw, p: tuple[float, float, float], reject: tuple[bool, bool, bool], policy: GatePolicy) -> MetricCheck:
    (p_worse, p_better, p_beyond), (reject_worse, reject_better, reject_beyond) = p, reject
    alpha = policy.alpha
    if reject_worse:
        verdict, shown = "worse", p_worse
    elif reject_better:
        verdict, shown = "better", p_better
    elif raw.equivalent:
        verdict, shown = "equivalent", p_worse
    else:
        verdict, shown = "inconclusive", p_worse
    # The drop the seeds-needed figure is about: under drop-beyond-margin a drop is caught once it is
    # significantly beyond the margin, so the figure is for twice the margin (the same sample size).
    beyond_rule = policy.rule == "drop-beyond-margin"
    detectable = needed = None
    sd_b, n_b = raw.base[1], raw.base[2]
    sd_c, n_c = raw.cand[1], raw.cand[2]
    # With no spread on either side (e.g. no seed ever reaches the threshold) power is not defined.
    if verdict == "inconclusive" and raw.undecidable is None and not sd_b == sd_c == 0.0:
        detectable = float(stats.minimum_detectable_difference(sd_c, n_c, sd_b, n_b, alpha=alpha, power=policy.power,
                                                               alternative="greater"))
        detectable += raw.margin if beyond_rule else 0.0
        try:
            needed = int(stats.seeds_needed(raw.margin, sd_c, sd_b, alpha=alpha, power=policy.power,
                                            alternative="greater"))
        except ValueError:  # more seeds than the power solver searches: report none rather than guess
            needed = None
    return MetricCheck(
        name=raw.name, metric=raw.metric, against=raw.against,
        baseline_mean=raw.base[0], baseline_sd=raw.base[1], baseline_n=raw.base[2],
        candidate_mean=raw.cand[0], candidate_sd=raw.cand[1], candidate_n=raw.cand[2],
        estimate=raw.estimate, interval=raw.interval, confidence_level=1.0 - 2.0 * alpha,
        pvalue=shown, pvalue_worse=p_worse, pvalue_better=p_better, pvalue_equivalence=raw.p_equivalence,
        pvalue_beyond=p_beyond, margin=raw.margin, verdict=verdict,
        within_margin=verdict in ("worse", "better") and raw.interval.inside(-raw.margin, raw.margin),
        beyond_margin=reject_beyond, undecidable=raw.undecidable,
        detectable=detectable, seeds_needed=needed, target=(2.0 if beyond_rule else 1.0) * raw.margin,
        method=raw.method, baseline_values=raw.base_values, candidate_values=raw.cand_values,
    )


def compare_sets(
    baseline: CurveSet | None,
    candidate: CurveSet,
    policy: GatePolicy,
    *,
    references: Sequence[PublishedReference] = (),
    scale: GateScale | None = None,
    family: Family | None = None,
) -> StatisticalComparison:
    """Run every statistical check of ``candidate`` against ``baseline`` and ``references``, and the gate.

    Parameters
    ----------
    baseline
        The baseline curves, or ``None`` to check against published references only.
    candidate
        The new curves.
    policy
        Metrics, alpha, rule, margins, power and the divergence search.
    references
        Published summary statistics to check the candidate against as well.
    scale
        The floor, threshold and margins (:func:`harness.gate.margins.task_scale`); by default
        sized from the policy alone (its ``floor``, ``threshold`` and margins).
    family
        Adjusts each kind of raw one-sided p-value (``"p_worse"``, ``"p_better"``,
        ``"p_beyond"``) over the checks; ``None``: Holm over these checks at ``policy.alpha``.

    Raises
    ------
    BaselineError
        If the checkpoint grids differ, or there is nothing to compare against.
    ConfigError
        If ``scale`` is not given and a margin cannot be sized from the policy alone.

    References
    ----------
    Welch, B. L. (1947). Biometrika 34:28-35. Holm, S. (1979). Scand. J. Statist. 6:65-70.
    Schuirmann, D. J. (1987). J. Pharmacokin. Biopharm. 15:657-680. Berger, R. L. (1982).
    Technometrics 24:295-300. Westfall, P. H. & Young, S. S. (1993). Resampling-Based
    Multiple Testing. Wiley. Wellek, S. (2010). Testing Statistical Hypotheses of Equivalence
    and Noninferiority, 2nd ed. Chapman & Hall/CRC.
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
    scale = scale or gate_scale(policy, budget=candidate.budget, references=references)
    threshold = scale.threshold
    plan = [(metric, metric, "baseline", None) for metric in (policy.metrics if baseline is not None else ())]
    plan += [(f"{ref.metric} vs reference {number}", ref.metric, ref.source, ref)
             for number, ref in enumerate(references, start=1)]
    raws = [
        _raw_check(name, metric, against, metric_values(metric, candidate, policy, threshold),
                   None if ref is not None else metric_values(metric, baseline, policy, threshold), ref,
                   scale.margin(metric), policy.alpha, len(plan))
        for name, metric, against, ref in plan
    ]
    if family is None:
        def family(kind: str, pvalues: Sequence[float]) -> stats.AdjustedPValues:
            return stats.holm(pvalues, alpha=policy.alpha)
    holm = [family(key, [getattr(r, key) for r in raws]) for key in ("p_worse", "p_better", "p_beyond")]
    checks = tuple(
        _finish(raw, tuple(float(h.adjusted[i]) for h in holm), tuple(bool(h.reject[i]) for h in holm), policy)
        for i, raw in enumerate(raws)
    )
    divergence = locate_divergence(baseline, candidate, policy) if baseline is not None and policy.locate else None
    return StatisticalComparison(checks=checks, divergence=divergence, alpha=policy.alpha, power=policy.power,
                                 gate=decide(checks, policy), scale=scale)
