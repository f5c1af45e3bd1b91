"""A suite with staged members: every task's next stage in one pool, one verdict.

A member whose policy sets ``stages`` runs the staged gate (:mod:`harness.gate.staged`); the
others run the fixed gate. Training goes in rounds: round 1 trains every fixed member's seeds and
each staged member's first stage in one pool; each later round trains the next stage of every
staged member still undecided. A staged member that stopped trains nothing more.

**The family: Bonferroni over the tasks.** Each of the ``T`` tasks gets ``alpha / T``: a staged
task runs its gate at that level (split again over its metrics, as on its own), and the ``F``
fixed tasks keep Holm's step-down over all their checks together at ``alpha * F / T``
(:func:`harness.gate.suite.verify_suite`). By Boole's inequality the chance that an unchanged
configuration fails anywhere in the suite is at most ``alpha``. Holm across staged tasks is not
carried over for the reason the staged gate gives across metrics (``docs/statistics.md``): a
staged gate stops at its first crossing, while Holm orders the p-values of one analysis. The
price: Holm's first step is Bonferroni over all checks too; what is lost is its relaxing of later
thresholds once other checks were rejected.
"""

from __future__ import annotations

import dataclasses
import time
from collections.abc import Callable, Mapping, Sequence
from typing import Any

from harness.gate.staged import Stage, StagedRun, StagePlan, plan_stages
from harness.gate.suite import SuiteMember, SuiteVerdict, verify_suite
from harness.gate.suite_aggregate import suite_aggregate
from harness.manifest.policy import GatePolicy

__all__ = ["StagedMember", "TrainRound", "plan_staged_members", "verify_staged_suite"]

#: ``train(request)``: ``request`` maps a member's name to the seeds to have (its first ``n``; ``None``
#: every seed); returns, per name, the result set and where each run index came from.
TrainRound = Callable[[Mapping[str, int | None]], Mapping[str, tuple[Any, Mapping[int, str]]]]


@dataclasses.dataclass(frozen=True, slots=True)
class StagedMember:
    """One task of a suite and how to gate it; ``policy.stages`` set means staged.

    ``scale`` is the task's floor, threshold and margins
    (:func:`harness.gate.verify.check_gate_policy`); ``candidate_label`` names the rerun in reports
    and ``folder`` where its results go.
    """

    manifest: Any
    baseline: Any
    policy: GatePolicy
    scale: Any
    folder: str = ""
    candidate_label: str | None = None
    history: Any = None

    @property
    def staged(self) -> bool:
        return self.policy.stages is not None


def _round(members: Sequence[StagedMember], runs: Mapping[str, StagedRun], *, first: bool) -> dict[str, int | None]:
    """The next round's request in the suite's order: each undecided staged task's next stage, and in
    the first round every fixed task's seeds."""
    request: dict[str, int | None] = {}
    for m in members:
        name = m.manifest.name
        if name in runs:
            if (n := runs[name].next_seeds) is not None:
                request[name] = n
        elif first:
            request[name] = None
    return request


def plan_staged_members(alpha: float, members: Sequence[StagedMember]) -> list[tuple[StagePlan, GatePolicy]]:
    """Plan every staged member at its share ``alpha / len(members)``: the plan and the policy at that share.

    Raises ConfigError or BaselineError (naming the manifest and key) when a plan does not fit its
    manifest or baseline; call it before anything trains.
    """
    if not members:
        raise ValueError("a suite needs at least one member")
    out = []
    for m in members:
        if m.staged:
            policy = m.policy.with_overrides(alpha=alpha / len(members))
            out.append((plan_stages(m.manifest, policy, m.baseline, m.scale), policy))
    return out


def verify_staged_suite(name: str, alpha: float, members: Sequence[StagedMember], train: TrainRound, *,
                        on_stage: Callable[[str, StagePlan, Stage], None] | None = None,
                        rng: object = None) -> SuiteVerdict:
    """Verify a suite whose members may be staged (see the module docstring).

    Every staged member's plan is checked (:func:`plan_staged_members`) before ``train`` is
    first called, so bad input trains nothing.

    Parameters
    ----------
    name, alpha
        The suite's name and family-wise error rate.
    members
        The tasks, in the suite's order.
    train
        Trains (or reads) one round, see :data:`TrainRound`.
    on_stage
        Called with the member's name, its plan and each stage it looked at.
    rng
        Seed of the aggregate's bootstrap.

    Raises
    ------
    ConfigError, BaselineError
        A staged member's plan does not fit its manifest or baseline (before anything trains).

    References
    ----------
    .. [1] Holm, S. (1979). Scandinavian Journal of Statistics 6:65–70.
    .. [2] Jennison, C. & Turnbull, B. W. (2000). Group Sequential Methods with Applications to
       Clinical Trials. Chapman & Hall/CRC.
    """
    share = alpha / len(members) if members else alpha
    runs = {m.manifest.name: StagedRun(m.manifest, m.baseline, plan, policy=plan_policy, folder=m.folder)
            for m, (plan, plan_policy) in zip((m for m in members if m.staged), plan_staged_members(alpha, members))}
    fixed = [m for m in members if not m.staged]
    fixed_results: dict[str, Any] = {}
    while request := _round(members, runs, first=not fixed_results and bool(fixed)):
        start = time.perf_counter()
        obtained = train(request)
        seconds = time.perf_counter() - start
        for task in request:
            results, sources = obtained[task]
            if task in runs:
                stage = runs[task].look(results, sources, seconds=seconds)
                if on_stage is not None:
                    on_stage(task, runs[task].plan, stage)
            else:
                fixed_results[task] = results
    by_name: dict[str, Any] = {n: r.verdict() for n, r in runs.items()}
    family_size = sum(len(r.plan.metrics) for r in runs.values())
    if fixed:
        alpha_fixed = alpha * len(fixed) / len(members)
        verdict = verify_suite(name, alpha_fixed, [
            SuiteMember(m.manifest, fixed_results[m.manifest.name], m.baseline, m.policy, m.candidate_label, m.history,
                        m.scale) for m in fixed])
        by_name.update((v.manifest, v) for v in verdict.verdicts)
        family_size += verdict.family_size
    ordered = tuple(by_name[m.manifest.name] for m in members)
    aggregate = suite_aggregate([m.manifest for m in members], ordered, rng=rng)
    return SuiteVerdict(name, alpha, ordered, family_size, aggregate, staged_share=share)
