"""The plan of a group-sequential comparison: when to look and what each look must cross.

A plan holds the looks (seeds per side at each) and the boundaries of each question a look asks,
computed on the normal scale by :mod:`harness.stats.boundaries`; :mod:`harness.stats.sequential`
takes the looks. Information at a look is ``1 / (1/n_baseline + 1/n_candidate)``.

Three questions: **worse** (``H0: drop <= shift``) at ``alpha``; **equivalent** (two one-sided
tests against ``±margin``) at ``alpha_equivalence``; and, optionally, **futility** at the interim
looks: a non-binding futility boundary from beta spending (Pampallona, Tsiatis & Kim 2001;
Jennison & Turnbull 2000, ch. 7), designed against the alternative "the drop is one margin beyond
the tolerated drop" (``shift + margin``). Its boundaries are those of a one-sided group-sequential
test of ``H1: drop >= shift + margin`` at level ``futility`` over the interim looks: the chance
that a candidate with that drop is stopped for futility is at most ``futility``, so the power lost
against it is at most ``futility``. The exact beta-spending computation also removes the paths
that crossed "worse" first; that needs the drift ``margin / se``, hence the seeds' unknown
spread, so it is left out, which makes the futility spend an upper bound (conservative for power).
The worse boundaries are computed ignoring futility (non-binding): a futility stop only removes
chances to cross "worse", so the false-alarm rate stays at most ``alpha`` whether or not a
futility stop is obeyed.
"""

from __future__ import annotations

import dataclasses

from harness.stats._validate import check_one_sided_level, check_stage_counts
from harness.stats.boundaries import SequentialBoundaries, check_kind, sequential_boundaries

__all__ = ["SMALL_FIRST_STAGE", "SequentialPlan", "check_plan", "sequential_plan", "small_first_stage"]


@dataclasses.dataclass(frozen=True, slots=True)
class SequentialPlan:
    """When to look and what each look must cross.

    Attributes
    ----------
    stages
        Candidate seeds at each look, strictly increasing (e.g. ``(5, 10, 15, 20)``).
    baseline_stages
        Baseline seeds at each look (non-decreasing; the same as ``stages``
        unless given, or constant when the baseline is recorded in full).
    worse
        One-sided boundaries of the "worse" test at level ``alpha``.
    equivalence
        One-sided boundaries used by each of the two equivalence tests at level
        ``alpha_equivalence``.
    futility
        One-sided boundaries of the futility test at the interim looks (looks
        ``1..K-1``; its ``alpha`` is the futility spend), or None without a futility stop.
    method
        The designs' names.
    """

    stages: tuple[int, ...]
    baseline_stages: tuple[int, ...]
    worse: SequentialBoundaries
    equivalence: SequentialBoundaries
    futility: SequentialBoundaries | None
    method: str

    @property
    def looks(self) -> int:
        return len(self.stages)


def _futility_iv(futility: object, futility_kind: object, kind: str) -> tuple[float, str]:
    no_stop = isinstance(futility, (int, float)) and not isinstance(futility, bool) and futility == 0
    spend = 0.0 if no_stop else check_one_sided_level(futility, "futility")
    return spend, kind if futility_kind is None else check_kind(futility_kind, "futility_kind")


def _sequential_plan_iv(stages, baseline_stages, alpha, alpha_equivalence, kind, equivalence_kind):
    cand = check_stage_counts(stages, "stages", strict=True)
    base = cand if baseline_stages is None else check_stage_counts(baseline_stages, "baseline_stages", strict=False)
    if len(base) != len(cand):
        raise ValueError(
            f"`baseline_stages` must have one entry per look ({len(cand)}), got {len(base)}: {baseline_stages!r}"
        )
    alpha = check_one_sided_level(alpha, "alpha")
    alpha_eq = alpha if alpha_equivalence is None else check_one_sided_level(alpha_equivalence, "alpha_equivalence")
    kind = check_kind(kind, "kind")
    eq_kind = kind if equivalence_kind is None else check_kind(equivalence_kind, "equivalence_kind")
    return cand, base, alpha, alpha_eq, kind, eq_kind


def sequential_plan(
    stages: object,
    *,
    baseline_stages: object | None = None,
    alpha: float = 0.05,
    alpha_equivalence: float | None = None,
    kind: str = "obrien-fleming-spending",
    equivalence_kind: str | None = None,
    futility: float = 0.0,
    futility_kind: str | None = None,
) -> SequentialPlan:
    """Plan a group-sequential comparison: the looks and the boundaries of each question.

    Parameters
    ----------
    stages
        Candidate seeds at each look, strictly increasing, at least 2 each.
    baseline_stages
        Baseline seeds at each look, non-decreasing; defaults to ``stages``.
        Pass the recorded count at every look (e.g. ``(20, 20, 20, 20)``) when
        the baseline already holds all its seeds.
    alpha
        Overall one-sided false-alarm rate of "worse".
    alpha_equivalence
        Overall level of each one-sided half of the equivalence test (the rate of
        declaring equivalence when ``|difference| >= margin``); defaults to ``alpha``.
    kind, equivalence_kind
        The design of each question, one of :data:`~harness.stats.boundaries.BOUNDARY_KINDS`
        (``equivalence_kind`` defaults to ``kind``).
    futility
        The futility spend: the largest chance that a candidate whose drop is
        ``shift + margin`` is stopped for futility at an interim look (the power
        a futility stop may cost against that drop). 0 (the default) plans no
        futility stop; it needs at least 2 looks.
    futility_kind
        The futility design, one of :data:`~harness.stats.boundaries.BOUNDARY_KINDS`
        (defaults to ``kind``); it spends ``futility`` over the interim looks
        (their information divided by that of look ``K - 1``).

    Returns
    -------
    SequentialPlan

    Notes
    -----
    The information at a look is taken as ``1 / (1/n_baseline + 1/n_candidate)``
    (Welch's information ``1 / se^2`` with the unknown variances equal), so that
    with equal groups the information fraction is ``n_k / n_K``. If a look ends
    up with other seed counts (a failed run), plan again with the counts
    observed: for a spending design that is the Lan & DeMets (1983) way of
    handling unplanned information. The futility boundary is described in the
    module notes: non-binding, and conservative for power because the unknown
    spread of the seeds keeps the "worse" boundary out of its computation.

    References
    ----------
    .. [1] Lan, K. K. G. & DeMets, D. L. (1983). Biometrika 70:659–663.
    .. [2] Jennison, C. & Turnbull, B. W. (2000). Group Sequential Methods with
       Applications to Clinical Trials. Chapman & Hall/CRC, ch. 4 (one-sided
       tests), ch. 6 (equivalence tests) and ch. 7 (early stopping to accept H0).
    .. [3] Pampallona, S., Tsiatis, A. A. & Kim, K. (2001). Interim monitoring of
       group sequential trials using spending functions for the type I and type II
       error probabilities. Drug Information Journal 35:1113–1121.

    Examples
    --------
    >>> plan = sequential_plan((5, 10, 15, 20), alpha=0.05)
    >>> [round(c, 3) for c in plan.worse.critical]
    [3.75, 2.54, 2.016, 1.72]
    """
    cand, base, alpha, alpha_eq, kind, eq_kind = _sequential_plan_iv(
        stages, baseline_stages, alpha, alpha_equivalence, kind, equivalence_kind
    )
    spend, fut_kind = _futility_iv(futility, futility_kind, kind)
    if spend > 0.0 and len(cand) < 2:
        raise ValueError("`futility` needs at least 2 looks (the last look never stops for futility), got 1")
    information = [1.0 / (1.0 / b + 1.0 / c) for b, c in zip(base, cand)]
    worse = sequential_boundaries(information, alpha=alpha, kind=kind, sides=1)
    equivalence = worse if (eq_kind, alpha_eq) == (kind, alpha) else sequential_boundaries(
        information, alpha=alpha_eq, kind=eq_kind, sides=1
    )
    method = f"worse: {worse.method}; equivalence: two one-sided tests (Schuirmann 1987), {equivalence.method}"
    fut = None
    if spend > 0.0:
        fut = sequential_boundaries(information[:-1], alpha=spend, kind=fut_kind, sides=1)
        method += (f"; non-binding futility against a drop of shift + margin (Pampallona, Tsiatis & Kim 2001), "
                   f"{fut.method}, spend {spend:g} over the interim looks")
    return SequentialPlan(stages=cand, baseline_stages=base, worse=worse, equivalence=equivalence, futility=fut,
                          method=method)


def check_plan(plan: object) -> SequentialPlan:
    if not isinstance(plan, SequentialPlan):
        raise TypeError(f"`plan` must be a SequentialPlan from sequential_plan(), got {type(plan).__name__}")
    return plan


#: The first stage below which Welch's t is liberal on two-point (solved/collapsed) metrics.
SMALL_FIRST_STAGE = 10


def small_first_stage(seeds: int) -> list[str]:
    """A caution when the first stage has fewer than :data:`SMALL_FIRST_STAGE` seeds, else nothing.

    On solved/collapsed returns Welch's t with 5 seeds per side rejects more often than its level;
    the staged gate's simulation (``benchmarks/bench_sequential.py``, docs/statistics.md) measured
    0.080 false alarms at alpha 0.05 for a drop of one margin with a first stage of 5 seeds.
    """
    if seeds >= SMALL_FIRST_STAGE:
        return []
    return [f"caution: the first stage has {seeds} seeds; on two-point metrics (solved or collapsed returns) "
            f"Welch's t with fewer than {SMALL_FIRST_STAGE} seeds fails more often than alpha (0.080 at alpha 0.05 "
            f"for a drop of one margin in the simulation of docs/statistics.md): start such metrics at "
            f"{SMALL_FIRST_STAGE} seeds."]
