"""One verdict over a suite of tasks: every task's checks in one family, one gate.

Each task (manifest) is verified as on its own (:func:`harness.gate.verify.verify_manifest`:
provenance, exact check, statistical checks, where the curves part), with two
differences that make the suite one decision:

- **one family**: the one-sided p-values of every check of every task (each metric
  against the baseline, each published reference) are adjusted together with Holm's
  step-down procedure at the suite's ``alpha`` (Holm 1979), separately for each kind
  of p-value as within one manifest (worse, better, and the drop beyond the margin that
  the default rule fails on). The chance that the gate fails an unchanged configuration
  anywhere in the suite stays at most ``alpha`` whatever the dependence between checks,
  however many tasks there are;
- **one alpha**: every task's policy takes the suite's ``alpha``, so each task's
  intervals (``1 - 2 alpha``) and equivalence tests use the same level. Equivalence
  is an intersection-union test and needs no multiplicity correction (Berger 1982).

Each task's gate then applies that task's own policy (rule, margins, ``strict``) to its
family-adjusted checks; the suite passes when every task
passes. A pass is no proof that the code is correct, and an inconclusive check is
not evidence of equivalence.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Sequence

from harness import stats
from harness.gate.compare import Family
from harness.gate.staged import StagedVerdict
from harness.gate.suite_aggregate import SuiteAggregate, suite_aggregate
from harness.gate.verify import WHAT_A_PASS_MEANS, Verdict, verify_manifest, verify_sets
from harness.manifest.policy import GatePolicy

__all__ = ["SuiteMember", "SuiteVerdict", "verify_suite"]

@dataclasses.dataclass(frozen=True, slots=True)
class SuiteMember:
    """One task of a suite, ready to verify: its manifest, rerun, baseline and policy.

    ``policy`` ``None`` takes the manifest's ``[check]``; either way its ``alpha`` is
    replaced by the suite's. ``history`` is how the baseline changed since a git ref
    (:func:`harness.store.history.baseline_history`), shown in the task's report; ``scale``
    the floor, threshold and margins if already resolved
    (:func:`harness.gate.preflight.check_gate_policy`).
    """

    manifest: object
    results: object
    baseline: object | None
    policy: GatePolicy | None = None
    candidate_label: str | None = None
    history: object | None = None
    scale: object | None = None


@dataclasses.dataclass(frozen=True, slots=True)
class SuiteVerdict:
    """The suite's verdict: each task's verdict (checks adjusted over the family) and the aggregate.

    Attributes
    ----------
    name, alpha
        The suite's name and family-wise error rate.
    verdicts
        One per task, in the suite's order: a :class:`~harness.gate.verify.Verdict`, or a
        :class:`~harness.gate.staged.StagedVerdict` for a task gated in stages.
    family_size
        Checks in the family (every check of every task).
    aggregate
        Normalised-score aggregates across tasks, or ``None`` when no task has both a
        baseline and a known score span.
    staged_share
        With staged tasks, each task's share of ``alpha`` (Bonferroni over the tasks,
        :mod:`harness.gate.suite_staged`); ``None`` when every task ran the fixed gate.
    """

    name: str
    alpha: float
    verdicts: tuple[Verdict | StagedVerdict, ...]
    family_size: int
    aggregate: SuiteAggregate | None
    staged_share: float | None = None

    @property
    def passed(self) -> bool:
        return all(v.passed for v in self.verdicts)

    @property
    def failing(self) -> tuple[str, ...]:
        """Names of the tasks whose gate failed."""
        return tuple(v.manifest for v in self.verdicts if not v.passed)

    @property
    def family(self) -> str:
        """How the checks were adjusted, in words."""
        if self.staged_share is None:
            return (f"Holm (1979) over all {self.family_size} checks of the {len(self.verdicts)} tasks at "
                    f"alpha {self.alpha:g}, each kind of p-value separately")
        staged = sum(isinstance(v, StagedVerdict) for v in self.verdicts)
        fixed = len(self.verdicts) - staged
        text = (f"Bonferroni over the {len(self.verdicts)} tasks ({self.family_size} checks) at alpha {self.alpha:g}: "
                f"each of the {staged} staged task{'s' if staged != 1 else ''} at {self.staged_share:.3g} (split "
                "over its metrics)")
        if fixed:
            text += (f", the {fixed} fixed task{'s' if fixed != 1 else ''} together at "
                     f"{self.staged_share * fixed:.3g} with Holm (1979) over their checks")
        return text

    @property
    def summary(self) -> str:
        """One line: the suite gate's outcome, task and verdict counts."""
        counts: dict[str, int] = {}
        for v in self.verdicts:
            for c in (v.outcomes if isinstance(v, StagedVerdict) else v.checks):
                counts[c.verdict] = counts.get(c.verdict, 0) + 1
        listed = ", ".join(f"{n} {k}" for k in ("equivalent", "not-worse", "better", "worse", "inconclusive",
                                                "undecided") if (n := counts.get(k)))
        failing = f"; failing: {', '.join(self.failing)}" if self.failing else ""
        family = "Holm over all" if self.staged_share is None else "Bonferroni over the tasks"
        return (f"suite gate {'PASSED' if self.passed else 'FAILED'} for {self.name}: "
                f"{len(self.verdicts) - len(self.failing)} of {len(self.verdicts)} tasks pass; "
                f"{self.family_size} checks ({listed or 'none'}), {family} at {self.alpha:g}{failing}.")

    def explain(self) -> str:
        """Plain text: the summary, the family, each task's summary and gate reasons."""
        lines = [self.summary, f"family: {self.family}."]
        for v in self.verdicts:
            lines.append(v.summary)
            lines += [f"  gate: {r}" for r in v.gate.reasons]
        if self.aggregate is not None:
            lines += self.aggregate.readings()
        lines.append(WHAT_A_PASS_MEANS)
        return "\n".join(lines)


class _FamilyAdjustment:
    """Collects every task's raw p-values, then hands back Holm over all of them, task by task."""

    def __init__(self, alpha: float, tasks: int):
        self.alpha = alpha
        self.tasks = tasks
        self.raw: dict[tuple[int, str], tuple[float, ...]] = {}
        self.adjusted: dict[tuple[int, str], stats.AdjustedPValues] = {}

    def collecting(self, task: int) -> Family:
        def family(kind: str, pvalues: Sequence[float]) -> stats.AdjustedPValues:
            self.raw[(task, kind)] = tuple(float(p) for p in pvalues)
            return stats.holm(pvalues, alpha=self.alpha)

        return family

    @property
    def size(self) -> int:
        """Checks in the family: one p-value of each kind per check."""
        first = next(iter(self.raw))[1]
        return sum(len(self.raw[(t, first)]) for t in range(self.tasks))

    def adjust(self) -> None:
        """Holm over all tasks' p-values of each kind, at the suite's alpha."""
        for kind in dict.fromkeys(k for _, k in self.raw):
            keys = [(t, kind) for t in range(self.tasks)]
            joint = stats.holm([p for k in keys for p in self.raw[k]], alpha=self.alpha)
            start = 0
            for k in keys:
                stop = start + len(self.raw[k])
                self.adjusted[k] = stats.AdjustedPValues(joint.adjusted[start:stop], joint.reject[start:stop],
                                                         self.alpha, f"Holm over the suite's {len(joint.reject)} checks")
                start = stop

    def applying(self, task: int) -> Family:
        def family(kind: str, pvalues: Sequence[float]) -> stats.AdjustedPValues:
            if tuple(float(p) for p in pvalues) != self.raw[(task, kind)]:
                raise RuntimeError(f"task {task}: the {kind} p-values changed between the two passes")
            return self.adjusted[(task, kind)]

        return family


def verify_suite(name: str, alpha: float, members: Sequence[SuiteMember], *, rng: object = None) -> SuiteVerdict:
    """Verify every task of a suite with one family of checks, then aggregate across tasks.

    Parameters
    ----------
    name, alpha
        The suite's name and family-wise error rate.
    members
        The tasks, in order.
    rng
        Seed of the aggregate's bootstrap (``None``: a fixed seed, so the same data give the same report).

    Raises
    ------
    BaselineError, ResultsError
        As :func:`~harness.gate.verify.verify_manifest`, for any task.

    References
    ----------
    .. [1] Holm, S. (1979). A simple sequentially rejective multiple test procedure.
       Scandinavian Journal of Statistics 6:65–70.
    .. [2] Berger, R. L. (1982). Multiparameter hypothesis testing and acceptance sampling.
       Technometrics 24:295–300.
    """
    if not members:
        raise ValueError("a suite needs at least one member")
    family = _FamilyAdjustment(alpha, len(members))
    first: list[Verdict] = []
    policies: list[GatePolicy] = []
    for task, m in enumerate(members):
        policy = (m.policy or m.manifest.check).with_overrides(alpha=alpha)
        policies.append(policy)
        # First pass: every check's raw p-values (the curve search waits for the second pass).
        first.append(verify_manifest(m.manifest, m.results, baseline=m.baseline,
                                     policy=dataclasses.replace(policy, locate=False),
                                     candidate_label=m.candidate_label, scale=m.scale,
                                     family=family.collecting(task)))
    family.adjust()
    verdicts = tuple(
        dataclasses.replace(
            verify_sets(v.baseline_set, v.candidate_set, policy, references=tuple(m.manifest.references),
                        scale=v.scale, family=family.applying(task)),
            history=m.history)
        for task, (m, v, policy) in enumerate(zip(members, first, policies, strict=True))
    )
    aggregate = suite_aggregate([m.manifest for m in members], verdicts, rng=rng)
    return SuiteVerdict(name, alpha, verdicts, family.size, aggregate)
