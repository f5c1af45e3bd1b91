"""The staged gate: train a manifest's seeds in stages and stop at the first decision.

With ``[check] stages = [5, 10, 15, 20]`` (or ``verify --stages 5,10,15,20``) verification
trains the first 5 seeds of the manifest's seed plan, looks, and trains the next 5 only if the
look decided nothing; it stops at the first look where a metric is worse under the gate's rule
(the gate fails), where every metric is equivalent within its margin or past its futility
boundary (the gate passes), or at the last stage (the fixed gate's outcomes without its
fixed-alpha "worse" test, see below). A futility stop (``[check] stage_futility``;
:mod:`harness.stats.sequential_design`) rules out a drop one margin beyond the tolerated one: a
weaker claim than equivalence, reported apart from it. "Worse" follows ``[check] rule`` as the fixed gate does: with the default
``drop-beyond-margin`` a look tests ``H0: drop <= margin`` (the sequential test's ``shift`` is
the margin), with ``any-drop`` it tests ``H0: no drop``; the other two rules combine a test with
a point estimate or an interval and are not staged (refused before anything trains).

Each look compares the candidate's first ``n_k`` seeds with the whole recorded baseline by
:func:`harness.stats.sequential_look` (Welch's t, group-sequential boundaries of a published
design applied by the significance level approach; ``docs/statistics.md``). Across metrics the
"worse" question is one family: each of the ``m`` metrics gets its own design at ``alpha / m``
(Bonferroni at every look), so the chance that an unchanged candidate is called worse on any
metric at any look is at most ``alpha``. Stopping for equivalence needs every metric equivalent
at the same look; that is an intersection-union test (Berger 1982) and needs no split. A futility
stop needs every metric equivalent or futile at the same look; each metric's futility spend bounds
the power lost on that metric, and futility never raises the false-alarm rate (non-binding).

At the last stage a metric that crossed neither boundary is not tested for "worse" again at the
fixed ``alpha``: the design has spent that error already, and a second test would add false
alarms. It is reported ``better`` when the one-sided Welch test of improvement rejects at
``alpha / m`` (only looked for there, once), else ``inconclusive``.
"""

from __future__ import annotations

import dataclasses
import time
from collections.abc import Callable, Mapping
from typing import Any

import numpy as np

from harness import stats
from harness.core.errors import BaselineError, ConfigError, ResultsError
from harness.gate.compare import metric_values
from harness.gate.curveset import CurveSet
from harness.gate.decision import GateDecision
from harness.gate.metrics import METRICS
from harness.gate.margins import GateScale
from harness.gate.verify import (
    WHAT_A_PASS_MEANS,
    ExactCheck,
    Provenance,
    exact_check,
    provenance,
    with_exact,
)
from harness.manifest.policy import GatePolicy
from harness.stats.drop_rules import DROP_RULES
from harness.stats.sequential import SequentialLook
from harness.stats.sequential_design import SequentialPlan

__all__ = ["STAGED_RULES", "MetricOutcome", "Stage", "StagePlan", "StagedRun", "StagedVerdict", "plan_stages",
           "staged_verify"]

#: What one stage's seeds come from: ``obtain(n) -> (result set of the first n seeds, source per run index)``.
Obtain = Callable[[int], tuple[Any, Mapping[int, str]]]


@dataclasses.dataclass(frozen=True, slots=True)
class StagePlan:
    """The staged gate's plan, checked against the manifest and its baseline before anything trains.

    Attributes
    ----------
    stages
        Candidate seeds at each look (the first ``n_k`` of the manifest's seed plan).
    baseline_seeds
        Seeds of the recorded baseline, all used at every look.
    fixed_seeds
        The manifest's seed count: what the fixed gate trains.
    metrics, margins, shifts
        The metrics checked, each one's equivalence margin and the drop its "worse" test tolerates,
        in the metric's units.
    alpha, alpha_metric
        The family's one-sided false-alarm rate and each metric's share of it (``alpha / m``).
    sequential
        The group-sequential plan of one metric (boundaries of "worse" at ``alpha_metric``, of
        each equivalence half at ``alpha`` and of futility at the policy's ``stage_futility``).
    rule
        The gate rule that says what "worse" is (one of :data:`STAGED_RULES`).
    scale
        The floor, threshold and margins the plan was sized from.
    """

    stages: tuple[int, ...]
    baseline_seeds: int
    fixed_seeds: int
    metrics: tuple[str, ...]
    margins: Mapping[str, float]
    shifts: Mapping[str, float]
    alpha: float
    alpha_metric: float
    sequential: SequentialPlan
    rule: str = "drop-beyond-margin"
    scale: GateScale | None = None

    @property
    def design(self) -> str:
        return self.sequential.worse.kind

    @property
    def reading(self) -> str:
        return (f"stages {', '.join(map(str, self.stages))} candidate seeds against all {self.baseline_seeds} "
                f"baseline seeds; {self.design} boundaries; rule {self.rule} "
                f"({DROP_RULES[self.rule].fails_when}) at alpha {self.alpha:g} split over "
                f"{len(self.metrics)} metric{'s' if len(self.metrics) != 1 else ''} (Bonferroni, "
                f"{self.alpha_metric:.3g} each); equivalence needs every metric inside its margin at one look; "
                + ("no futility stop" if (fut := self.sequential.futility) is None else
                   f"futility (non-binding, {fut.kind}, spend {fut.alpha:g}) when every metric rules out a drop of "
                   "one margin beyond the tolerated one at one look"))


@dataclasses.dataclass(frozen=True, slots=True)
class Stage:
    """One look: the seeds it used, each metric's look (in ``StagePlan.metrics`` order), the decision.

    ``decision`` is ``"worse"`` (a metric crossed its "worse" boundary), ``"equivalent"`` (every
    metric crossed its equivalence boundaries), ``"futility"`` (every metric crossed its
    equivalence or its futility boundaries, not all equivalence), ``"continue"`` or ``"final"``; ``trained`` and
    ``reused`` count this stage's new seeds by where they came from; ``seconds`` is its wall time.
    """

    look: int
    n_candidate: int
    n_baseline: int
    looks: tuple[SequentialLook, ...]
    decision: str
    trained: int
    reused: int
    seconds: float


@dataclasses.dataclass(frozen=True, slots=True)
class MetricOutcome:
    """A metric's verdict when the gate stopped: ``worse``, ``equivalent``, ``not-worse`` (futility
    stop: a drop one margin beyond the tolerated one is ruled out; not equivalence), ``better``,
    ``inconclusive`` (last stage, neither boundary) or ``undecided`` (another metric stopped the gate).

    ``look`` is the metric's last look; ``pvalue_better`` the one-sided Welch p-value of
    improvement, computed only at the last stage.
    """

    metric: str
    verdict: str
    look: SequentialLook
    pvalue_better: float | None

    @property
    def reading(self) -> str:
        lk = self.look
        diff = f"difference {lk.estimate:+.4g}, repeated interval [{lk.interval.low:.4g}, {lk.interval.high:.4g}]"
        if self.verdict == "worse":
            what = (f"significantly worse at stage {lk.look} (Welch p = {lk.pvalue_worse:.3g} below the boundary "
                    f"{lk.nominal_worse:.3g})")
        elif self.verdict == "better":
            what = f"significantly better at the last stage (Welch p = {self.pvalue_better:.3g})"
        elif self.verdict == "not-worse":
            what = (f"stopped for futility at stage {lk.look}: a drop of {lk.shift + lk.margin:.4g} or more is ruled "
                    f"out (Welch p = {lk.pvalue_futility:.3g} below the futility boundary {lk.nominal_futility:.3g}), "
                    f"so a drop beyond {lk.shift:.4g} can no longer be shown; this is not a proof of equivalence")
        else:
            what = {
                "equivalent": f"equivalent within ±{lk.margin:.4g} at stage {lk.look}",
                "inconclusive": f"inconclusive: the last stage crossed neither boundary (margin ±{lk.margin:.4g})",
                "undecided": f"undecided when another metric stopped the gate at stage {lk.look}",
            }[self.verdict]
        return f"{self.metric}: {what}; {diff}."


@dataclasses.dataclass(frozen=True, slots=True)
class StagedVerdict:
    """What the staged gate found: every stage, why it stopped, the per-metric verdicts and the gate."""

    manifest: str
    plan: StagePlan
    stages: tuple[Stage, ...]
    outcomes: tuple[MetricOutcome, ...]
    provenance: Provenance
    exact: ExactCheck
    gate: GateDecision
    policy: GatePolicy
    folder: str
    baseline_set: CurveSet | None = dataclasses.field(default=None, repr=False)
    candidate_set: CurveSet | None = dataclasses.field(default=None, repr=False)

    @property
    def passed(self) -> bool:
        return self.gate.passed

    @property
    def decision(self) -> str:
        return self.stages[-1].decision

    @property
    def seeds_used(self) -> int:
        return self.stages[-1].n_candidate

    @property
    def floor(self) -> float | None:  # the floor and threshold of the margins, as Verdict has them
        return getattr(self.plan.scale, "floor", None)

    @property
    def threshold(self) -> float | None:
        return getattr(self.plan.scale, "threshold", None)

    @property
    def seeds_saved(self) -> int:
        """Candidate seeds not trained compared with the fixed gate (the manifest's seed count)."""
        return self.plan.fixed_seeds - self.seeds_used

    @property
    def seconds(self) -> float:
        return sum(s.seconds for s in self.stages)

    @property
    def stopped_because(self) -> str:
        last, k = self.stages[-1], len(self.plan.stages)
        where = f"stage {last.look} of {k} ({last.n_candidate} candidate seeds)"
        if last.decision == "worse":
            names = [o.metric for o in self.outcomes if o.verdict == "worse"]
            return f"{', '.join(names)} crossed the 'worse' boundary at {where}"
        if last.decision == "equivalent":
            return f"every metric crossed its equivalence boundaries at {where}"
        if last.decision == "futility":
            return f"every metric crossed its futility or equivalence boundaries at {where} (futility: not equivalence)"
        return f"the last stage was reached without a decision at {where}"

    @property
    def summary(self) -> str:
        saved = self.seeds_saved
        share = f" ({saved / self.plan.fixed_seeds:.0%})" if saved else ""
        exact = {"identical": "; curves bitwise identical", "differs": "; curves not bitwise identical"}
        return (f"gate {'PASSED' if self.passed else 'FAILED'} for {self.manifest} (staged): stopped because "
                f"{self.stopped_because}; {self.seeds_used} of {self.plan.fixed_seeds} seeds trained, "
                f"{saved} saved{share} against the fixed gate{exact.get(self.exact.status, '')}.")

    def explain(self) -> str:
        """A plain-text explanation: the summary, each stage, each metric and the gate's reasons."""
        lines = [self.summary, "plan: " + self.plan.reading, "provenance: " + self.provenance.reading,
                 self.exact.reading]
        lines += [lk.reading for s in self.stages for lk in s.looks]
        lines += [o.reading for o in self.outcomes]
        lines += [f"gate: {r}" for r in self.gate.reasons]
        lines.append(WHAT_A_PASS_MEANS)
        return "\n".join(lines)


def _stage_error(message: str, manifest: Any, key: str) -> ConfigError:
    path = None if manifest.path is None else str(manifest.path)
    return ConfigError(message, path=path, key=key) if not key.startswith("--") else ConfigError(f"{key}: {message}")


#: The gate rules the staged gate applies, and the drop each one's "worse" test tolerates (``shift``):
#: drop-beyond-margin tests ``H0: drop <= margin`` at every look, any-drop ``H0: drop <= 0``.
STAGED_RULES = ("drop-beyond-margin", "any-drop")


def _shift(rule: str, margin: float) -> float:
    return margin if rule == "drop-beyond-margin" else 0.0


def plan_stages(manifest: Any, policy: GatePolicy, baseline: Any, scale: GateScale, *,
                key: str = "check.stages") -> StagePlan:
    """Check the staged gate against the manifest and its baseline, and plan it (nothing trains).

    Parameters
    ----------
    manifest
        The ``harness.manifest.loader.Manifest``.
    policy
        The gate policy with ``stages`` set.
    baseline
        The recorded baseline (``harness.store.baseline.Baseline``) or None.
    scale
        The metrics' margins (``harness.gate.preflight.check_gate_policy``).
    key
        Where the stages were given, for messages: ``"check.stages"`` or a command-line option.

    Raises
    ------
    ConfigError
        The last stage is not the manifest's seed count, a metric is censored
        (``steps-to-threshold``), the rule is not one of :data:`STAGED_RULES`, or the baseline
        has fewer seeds than the last stage; the message names the manifest file and the key.
    BaselineError
        There is no baseline (published references alone cannot be staged).
    """
    if policy.stages is None:
        raise ValueError("`policy.stages` is None: this is the fixed gate")
    stages, count = tuple(policy.stages), len(manifest.seeds)
    if stages[-1] != count:
        raise _stage_error(
            f"the last stage must be the manifest's seed count ([seeds] count = {count}), got {list(stages)}: the "
            f"staged gate stops the fixed gate early and never trains more; end the stages at {count} or change "
            "[seeds]", manifest, key)
    censored = [m for m in policy.metrics if METRICS[m].censored]
    if censored:
        raise _stage_error(
            f"the staged gate cannot check {', '.join(censored)} (seeds that never reach the threshold have no value "
            "for a t-test); list only final and auc in [check] metrics, or leave `stages` out", manifest,
            "check.metrics" if not key.startswith("--") else key)
    if policy.rule not in STAGED_RULES:
        raise _stage_error(
            f"the staged gate applies rule drop-beyond-margin (the default: H0 drop <= margin at every stage) or "
            f"any-drop (H0 no drop), not {policy.rule!r} ({DROP_RULES[policy.rule].fails_when}): set `rule` to one "
            "of them, or leave `stages` out", manifest, "check.rule" if not key.startswith("--") else key)
    if baseline is None:
        raise BaselineError(f"the staged gate needs a recorded baseline of {manifest.name!r} (published references "
                            "cannot be staged): record one with `rlharness record MANIFEST`")
    n_base = len(baseline.runs)
    if n_base < stages[-1]:
        where = baseline.path if baseline.path is not None else "the baseline"
        raise _stage_error(
            f"the baseline {where} holds {n_base} seeds, fewer than the last stage ({stages[-1]}): every seed "
            "trained needs its baseline seed for the exact check and the last look must be the fixed gate's "
            "comparison; record the baseline with all the manifest's seeds", manifest, key)
    metrics = tuple(policy.metrics)
    margins = {m: scale.margin(m) for m in metrics}
    alpha_metric = policy.alpha / len(metrics)
    plan = stats.sequential_plan(stages, baseline_stages=(n_base,) * len(stages), alpha=alpha_metric,
                                 alpha_equivalence=policy.alpha, kind=policy.stage_design,
                                 futility=policy.stage_futility, futility_kind=policy.stage_futility_design)
    return StagePlan(stages=stages, baseline_seeds=n_base, fixed_seeds=count, metrics=metrics, margins=margins,
                     shifts={m: _shift(policy.rule, margins[m]) for m in metrics}, alpha=policy.alpha,
                     alpha_metric=alpha_metric, sequential=plan, rule=policy.rule, scale=scale)


def _stage_decision(looks: tuple[SequentialLook, ...]) -> str:
    decisions = [lk.decision for lk in looks]
    if "worse" in decisions:
        return "worse"
    if all(d == "equivalent" for d in decisions):
        return "equivalent"
    if all(d in ("equivalent", "futility") for d in decisions):
        return "futility"
    return "final" if looks[0].final else "continue"


def _outcome(plan: StagePlan, metric: str, look: SequentialLook, stage_decision: str,
             cand: np.ndarray, base: np.ndarray) -> MetricOutcome:
    if look.decision == "worse":
        return MetricOutcome(metric, "worse", look, None)
    if look.decision == "equivalent" and stage_decision in ("equivalent", "futility", "final"):
        return MetricOutcome(metric, "equivalent", look, None)
    if look.decision == "futility" and stage_decision == "futility":
        return MetricOutcome(metric, "not-worse", look, None)
    if stage_decision != "final":
        return MetricOutcome(metric, "undecided", look, None)
    better_side = "greater" if METRICS[metric].higher_is_better else "less"
    p = float(stats.welch_test(cand, base, alternative=better_side).pvalue)
    return MetricOutcome(metric, "better" if p < plan.alpha_metric else "inconclusive", look, p)


def _gate(outcomes: tuple[MetricOutcome, ...], policy: GatePolicy, exact: ExactCheck) -> GateDecision:
    reasons, failing = [], []
    rule = DROP_RULES[policy.rule]
    for o in outcomes:
        lk = o.look
        if o.verdict == "worse":
            reasons.append(f"{o.metric} fails rule {rule.name} ({rule.fails_when}) at stage {lk.look} "
                           f"({lk.n_candidate} seeds): {lk.estimate:+.4g}, margin ±{lk.margin:.4g}, Welch p = "
                           f"{lk.pvalue_worse:.3g} below the boundary {lk.nominal_worse:.3g}")
            failing.append(o.metric)
        elif o.verdict == "inconclusive" and policy.strict:
            reasons.append(f"{o.metric} is inconclusive at the last stage and the policy is strict")
            failing.append(o.metric)
    gate = (GateDecision(False, tuple(reasons), tuple(failing), rule.name) if reasons else
            GateDecision(True, (f"no metric crossed its 'worse' boundary ({rule.fails_when}) at any stage",), (),
                         rule.name))
    return with_exact(gate, exact, policy)  # nondeterminism fails the staged gate as it fails the fixed one


def _metric_arrays(curves: CurveSet, policy: GatePolicy, metrics: tuple[str, ...]) -> dict[str, np.ndarray]:
    return {m: metric_values(m, curves, policy, None).values for m in metrics}


class StagedRun:
    """The staged gate one stage at a time, for a caller that trains the seeds itself.

    ``next_seeds`` is the candidate seed count the next look needs (None once the gate has
    stopped); ``look(results, sources)`` takes it on the first ``next_seeds`` seeds; ``verdict()``
    gives the :class:`StagedVerdict` once stopped. :func:`staged_verify` is the loop over it for
    one manifest; a suite interleaves several (``harness.gate.suite_staged``).
    """

    def __init__(self, manifest: Any, baseline: Any, plan: StagePlan, *, policy: GatePolicy | None = None,
                 folder: str = "") -> None:
        self.manifest, self.plan, self.folder = manifest, plan, folder
        self.policy = policy or manifest.check
        self.base_set = CurveSet.from_baseline(baseline)
        self.base = _metric_arrays(self.base_set, self.policy, plan.metrics)
        self.stages: list[Stage] = []
        self._seen: set[int] = set()
        self._cand_set: CurveSet | None = None
        self._cand: dict[str, np.ndarray] = {}

    @property
    def next_seeds(self) -> int | None:
        if self.stages and self.stages[-1].decision != "continue":
            return None
        return self.plan.stages[len(self.stages)]

    def look(self, results: Any, sources: Mapping[int, str], *, seconds: float = 0.0) -> Stage:
        """Take the next look on ``results`` (the manifest's first ``next_seeds`` seeds)."""
        n, k, manifest, plan = self.next_seeds, len(self.stages) + 1, self.manifest, self.plan
        if n is None:
            raise RuntimeError(f"the staged gate of {manifest.name} has stopped; take its verdict()")
        if results.config_hash != manifest.config_hash:
            raise ResultsError(f"the results in {self.folder or 'the results folder'} have config hash "
                               f"{results.config_hash}, not the manifest's {manifest.config_hash}")
        self._cand_set = CurveSet.from_results(results, label=f"rerun of {manifest.name} (results in {self.folder})",
                                               config=manifest.resolved_config(), expected=n)
        self._cand = _metric_arrays(self._cand_set, self.policy, plan.metrics)
        looks = tuple(
            stats.sequential_look(self.base[m], self._cand[m], plan=plan.sequential, look=k, margin=plan.margins[m],
                                  shift=plan.shifts[m], higher_is_better=METRICS[m].higher_is_better)
            for m in plan.metrics
        )
        new = [i for i in range(n) if i not in self._seen]
        self._seen.update(new)
        trained = sum(1 for i in new if sources.get(i) == "trained")
        stage = Stage(k, n, plan.baseline_seeds, looks, _stage_decision(looks), trained, len(new) - trained, seconds)
        self.stages.append(stage)
        return stage

    def verdict(self) -> StagedVerdict:
        """The verdict of the stages taken (the gate must have stopped)."""
        if self.next_seeds is not None or self._cand_set is None:
            raise RuntimeError(f"the staged gate of {self.manifest.name} has not stopped yet")
        last, plan, policy = self.stages[-1], self.plan, self.policy
        outcomes = tuple(_outcome(plan, m, lk, last.decision, self._cand[m], self.base[m])
                         for m, lk in zip(plan.metrics, last.looks, strict=True))
        prov = provenance(self.base_set, self._cand_set)
        exact = exact_check(self.base_set, self._cand_set, prov, policy)
        return StagedVerdict(manifest=self.manifest.name, plan=plan, stages=tuple(self.stages), outcomes=outcomes,
                             provenance=prov, exact=exact, gate=_gate(outcomes, policy, exact), policy=policy,
                             folder=self.folder, baseline_set=self.base_set, candidate_set=self._cand_set)


def staged_verify(
    manifest: Any,
    baseline: Any,
    obtain: Obtain,
    *,
    plan: StagePlan,
    policy: GatePolicy | None = None,
    on_stage: Callable[[Stage], None] | None = None,
    folder: str = "",
) -> StagedVerdict:
    """Run the staged gate: obtain each stage's seeds, look, and stop at the first decision.

    Parameters
    ----------
    manifest
        The ``harness.manifest.loader.Manifest``.
    baseline
        Its recorded baseline.
    obtain
        ``obtain(n)`` returns the result set of the manifest's first ``n`` seeds and, per run
        index, where each came from (``"trained"``, ``"cache"``, ``"resumed"``): e.g. the runner
        on the first ``n`` specs into one results folder, so a later stage (or a rerun) reuses
        the seeds an earlier one trained.
    plan
        From :func:`plan_stages`.
    policy
        The gate policy (the manifest's ``[check]`` by default).
    on_stage
        Called after each look (for a live display).
    folder
        Where the results are, for reports.

    Raises
    ------
    RunFailedError
        A seed failed: never verified on fewer seeds than the stage asks.
    ResultsError
        The results are not of this manifest's configuration.

    References
    ----------
    .. [1] Jennison, C. & Turnbull, B. W. (2000). Group Sequential Methods with Applications
       to Clinical Trials. Chapman & Hall/CRC.
    .. [2] Berger, R. L. (1982). Technometrics 24:295-300 (intersection-union tests).
    """
    run = StagedRun(manifest, baseline, plan, policy=policy, folder=folder)
    while (n := run.next_seeds) is not None:
        start = time.perf_counter()
        results, sources = obtain(n)
        stage = run.look(results, sources, seconds=time.perf_counter() - start)
        if on_stage is not None:
            on_stage(stage)
    return run.verdict()
