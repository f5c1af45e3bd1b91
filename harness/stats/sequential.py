"""A group-sequential comparison of a candidate with a baseline: train seeds in stages, stop early.

Every look asks up to three one-sided questions, each with its own error spent
over the looks: **worse** (``H0: drop <= shift``, Welch 1947 one-sided t;
false-alarm rate ``alpha``), **equivalent** (two one-sided tests against
``±margin``, Schuirmann 1987; by the intersection-union principle the rate of
declaring equivalence when ``|difference| >= margin`` is at most
``alpha_equivalence``) and, at the interim looks of a plan with a futility spend,
**futility** (the drop is significantly smaller than ``shift + margin``, so a
drop beyond the tolerated one can no longer be expected to be shown;
:mod:`harness.stats.sequential_design`). A futility stop is weaker than
equivalence: it bounds the drop from above by ``shift + margin``, not the
difference within ``±margin``.

Boundaries are computed on the normal scale (:mod:`harness.stats.boundaries`) and
applied to Welch's t by the *significance level approach* (Pocock 1977;
Jennison & Turnbull 2000, ch. 3, group sequential t-tests): a look rejects when
its Welch p-value, on the look's Welch–Satterthwaite df, is below the nominal
level ``1 - Phi(c_k)`` of its Z boundary ``c_k``. With 5–20 seeds per side the
Z boundaries used as-is on t inflate the false-alarm rate; the nominal levels
hold it near ``alpha`` (``benchmarks/bench_sequential.py``, ``docs/statistics.md``).
"""

from __future__ import annotations

import dataclasses
import math
from typing import Literal

import numpy as np
from scipy import special as _sp

from harness.stats._result import ConfidenceInterval, fmt, fmt_p
from harness.stats._validate import as_sample, check_finite_number, check_positive_int
from harness.stats.sequential_design import SequentialPlan, check_plan
from harness.stats.welch import welch_moments

__all__ = [
    "DECISIONS",
    "SequentialLook",
    "SequentialResult",
    "sequential_look",
    "sequential_test",
]

Decision = Literal["worse", "equivalent", "futility", "continue", "final"]

#: The outcomes of a look, in the order a look checks them.
DECISIONS: tuple[str, ...] = ("worse", "equivalent", "futility", "continue", "final")


@dataclasses.dataclass(frozen=True, slots=True)
class SequentialLook:
    """One look of a group-sequential comparison.

    Attributes
    ----------
    look
        1-based index of the look; ``final`` is True at the last planned look.
    n_baseline, n_candidate
        Seeds so far in each group.
    estimate
        ``mean(candidate) - mean(baseline)``.
    interval
        The repeated confidence interval of the difference at this look,
        ``estimate ± critical_equivalence * standard_error``: equivalence is
        declared exactly when it lies inside ``(-margin, margin)``. Its coverage
        holds simultaneously over all looks (Jennison & Turnbull 2000, ch. 9).
    standard_error, df
        Welch's standard error and Welch–Satterthwaite degrees of freedom.
    statistic
        ``(drop - shift) / standard_error``, where ``drop`` is how much worse the
        candidate is (``-estimate`` when higher is better); large means worse.
    pvalue_worse, nominal_worse, critical_worse
        One-sided Welch p-value of "worse", the look's nominal level (the
        boundary as a p-value) and the same boundary as a t critical value.
    pvalue_equivalence, nominal_equivalence, critical_equivalence
        TOST p-value (the larger of the two one-sided p-values) and the
        equivalence boundary as a nominal level and as a t critical value.
    pvalue_futility, nominal_futility
        One-sided Welch p-value of ``H0: drop >= shift + margin`` and the
        futility boundary as a nominal level; None where the plan has no
        futility boundary (no futility spend, or the last look).
    shift, margin
        The null drop of the "worse" test and the equivalence half-width; the
        futility alternative is a drop of ``shift + margin``.
    decision
        ``"worse"``, ``"equivalent"``, ``"futility"`` (a drop of ``shift + margin``
        or more is ruled out: "worse" can no longer be expected; not equivalence),
        ``"continue"`` (more seeds are planned) or ``"final"`` (the last look
        crossed neither boundary).
    reading
        One sentence.
    """

    look: int
    final: bool
    n_baseline: int
    n_candidate: int
    estimate: float
    interval: ConfidenceInterval
    standard_error: float
    df: float
    statistic: float
    pvalue_worse: float
    nominal_worse: float
    critical_worse: float
    pvalue_equivalence: float
    nominal_equivalence: float
    critical_equivalence: float
    pvalue_futility: float | None
    nominal_futility: float | None
    shift: float
    margin: float
    decision: Decision
    reading: str


@dataclasses.dataclass(frozen=True, slots=True)
class SequentialResult:
    """The looks taken so far and why the comparison stopped (or must go on).

    Attributes
    ----------
    looks
        The looks taken, in order; the last one holds the decision.
    decision
        The last look's decision; ``"continue"`` means the data ran out before
        the next planned look (train up to ``seeds_next`` seeds and call again).
    stopped_because
        One sentence: which boundary was crossed, or that the last look was
        reached, or how many seeds the next look needs.
    seeds_next
        ``(baseline, candidate)`` seeds the next look needs when ``decision`` is
        ``"continue"``, else None.
    plan
        The plan that was followed.
    method, reading
        The method's name and a one-sentence reading.
    """

    looks: tuple[SequentialLook, ...]
    decision: Decision
    stopped_because: str
    seeds_next: tuple[int, int] | None
    plan: SequentialPlan
    method: str
    reading: str

    @property
    def estimate(self) -> float | None:
        """The last look's ``mean(candidate) - mean(baseline)`` (None before the first look)."""
        return self.looks[-1].estimate if self.looks else None

    @property
    def interval(self) -> ConfidenceInterval | None:
        """The last look's repeated confidence interval (None before the first look)."""
        return self.looks[-1].interval if self.looks else None

    @property
    def seeds_used(self) -> tuple[int, int]:
        """``(baseline, candidate)`` seeds used by the last look taken (0, 0 before the first)."""
        if not self.looks:
            return (0, 0)
        return (self.looks[-1].n_baseline, self.looks[-1].n_candidate)


def _t_sf(statistic: float, df: float) -> float:
    return float(_sp.stdtr(df, -statistic))


def _t_isf(p: float, df: float) -> float:
    return float(_sp.stdtrit(df, 1.0 - p))


def _ratio(num: float, se: float) -> float:
    if se > 0.0:
        return num / se
    return 0.0 if num == 0.0 else math.copysign(math.inf, num)


def _look(base: np.ndarray, cand: np.ndarray, plan: SequentialPlan, look: int,
          shift: float, margin: float, higher_is_better: bool) -> SequentialLook:  # fmt: skip
    k = look - 1
    estimate, se, df = welch_moments(
        float(np.mean(cand)), float(np.var(cand, ddof=1)), cand.size,
        float(np.mean(base)), float(np.var(base, ddof=1)), base.size,
    )  # fmt: skip
    drop = -estimate if higher_is_better else estimate
    statistic = _ratio(drop - shift, se)
    p_worse = _t_sf(statistic, df)
    p_low = _t_sf(_ratio(estimate + margin, se), df)  # H0: estimate <= -margin
    p_high = _t_sf(_ratio(margin - estimate, se), df)  # H0: estimate >= margin
    p_equiv = max(p_low, p_high)
    nom_w, nom_e = plan.worse.nominal[k], plan.equivalence.nominal[k]
    crit_w, crit_e = _t_isf(nom_w, df), _t_isf(nom_e, df)
    half = crit_e * se
    interval = ConfidenceInterval(estimate - half, estimate + half)
    final = look == plan.looks
    p_fut = nom_f = None
    if plan.futility is not None and not final:
        p_fut = _t_sf(_ratio(shift + margin - drop, se), df)  # H0: drop >= shift + margin
        nom_f = plan.futility.nominal[k]
    if p_worse < nom_w:
        decision = "worse"
    elif p_equiv < nom_e:
        decision = "equivalent"
    elif p_fut is not None and p_fut < nom_f:
        decision = "futility"
    else:
        decision = "final" if final else "continue"
    result = SequentialLook(
        look=look, final=final, n_baseline=int(base.size), n_candidate=int(cand.size),
        estimate=estimate, interval=interval, standard_error=se, df=df, statistic=statistic,
        pvalue_worse=p_worse, nominal_worse=nom_w, critical_worse=crit_w,
        pvalue_equivalence=p_equiv, nominal_equivalence=nom_e, critical_equivalence=crit_e,
        pvalue_futility=p_fut, nominal_futility=nom_f, shift=shift, margin=margin, decision=decision, reading="",
    )  # fmt: skip
    return dataclasses.replace(result, reading=_look_reading(result, plan))


def _look_reading(r: SequentialLook, plan: SequentialPlan) -> str:
    if r.decision == "continue":
        outcome = f"continue to {plan.stages[r.look]} candidate seeds"
    else:
        outcome = {
            "worse": "the candidate is worse: stop",
            "equivalent": "equivalent within the margin: stop",
            "futility": f"a drop of {fmt(r.shift + r.margin)} or more is ruled out, so a drop beyond "
                        f"{fmt(r.shift)} can no longer be expected to be shown: stop for futility (not equivalence)",
            "final": "neither boundary crossed at the last look",
        }[r.decision]
    futility = "" if r.pvalue_futility is None else (
        f"; drop below {fmt(r.shift + r.margin)}: Welch {fmt_p(r.pvalue_futility)} vs futility boundary "
        f"{fmt(r.nominal_futility)}")
    return (
        f"Look {r.look} of {plan.looks} ({r.n_candidate} candidate vs {r.n_baseline} baseline seeds): "
        f"candidate - baseline = {fmt(r.estimate)}, repeated {fmt(100 * (1 - 2 * r.nominal_equivalence))}% "
        f"CI {r.interval}; worse beyond {fmt(r.shift)}: Welch {fmt_p(r.pvalue_worse)} vs boundary "
        f"{fmt(r.nominal_worse)} (t >= {fmt(r.critical_worse)}); within ±{fmt(r.margin)}: TOST "
        f"{fmt_p(r.pvalue_equivalence)} vs {fmt(r.nominal_equivalence)}{futility}: {outcome}."
    )


def _margins_iv(shift: object, margin: object) -> tuple[float, float]:
    s = check_finite_number(shift, "shift")
    if s < 0:
        raise ValueError(f"`shift` is the drop tolerated before 'worse' and must be >= 0, got {shift!r}")
    m = check_finite_number(margin, "margin")
    if m <= 0:
        raise ValueError(f"`margin` must be positive (the half-width of the equivalence region), got {margin!r}")
    return s, m


def _sequential_look_iv(baseline, candidate, plan, look, shift, margin):
    plan = check_plan(plan)
    look = check_positive_int(look, "look")
    if look > plan.looks:
        raise ValueError(f"`look` must be between 1 and {plan.looks} for this plan, got {look}")
    base, cand = as_sample(baseline, "baseline"), as_sample(candidate, "candidate")
    for name, arr, want in (("baseline", base, plan.baseline_stages), ("candidate", cand, plan.stages)):
        if arr.size != want[look - 1]:
            raise ValueError(
                f"`{name}` must hold the {want[look - 1]} seeds planned for look {look}, got {arr.size}; "
                "pass the first seeds in seed order, or plan again with the counts you have"
            )
    return base, cand, plan, look, *_margins_iv(shift, margin)


def sequential_look(
    baseline: object,
    candidate: object,
    *,
    plan: SequentialPlan,
    look: int,
    margin: float,
    shift: float = 0.0,
    higher_is_better: bool = True,
) -> SequentialLook:
    """Take one look of a group-sequential comparison.

    Parameters
    ----------
    baseline, candidate
        Per-seed values, exactly as many as ``plan`` gives for this look.
    plan
        From :func:`sequential_plan`.
    look
        1-based look number.
    margin
        Half-width of the equivalence region, in the metric's units.
    shift
        Drop tolerated before "worse" (``H0: drop <= shift``); 0 tests any drop.
    higher_is_better
        Direction of the metric: when False, "worse" means a larger candidate mean.

    Returns
    -------
    SequentialLook

    Notes
    -----
    "worse" is checked first, then equivalence, then futility (interim looks of
    a plan with a futility spend), each by the significance level approach (see
    the module notes). Constant groups give the degenerate result
    of :func:`~harness.stats.welch_test` (standard error 0, the difference exact).

    References
    ----------
    .. [1] Pocock, S. J. (1977). Biometrika 64:191–199.
    .. [2] Jennison, C. & Turnbull, B. W. (2000). Group Sequential Methods with
       Applications to Clinical Trials. Chapman & Hall/CRC, ch. 3, 6 and 9.
    .. [3] Schuirmann, D. J. (1987). J. Pharmacokinetics and Biopharmaceutics 15:657–680.

    Examples
    --------
    >>> from harness.stats import sequential_plan
    >>> plan = sequential_plan((5, 10), alpha=0.05)
    >>> r = sequential_look([10.0, 11, 9, 10, 10.5], [1.0, 2, 1.5, 0.5, 1], plan=plan, look=1, margin=2.0)
    >>> r.decision
    'worse'
    """
    base, cand, plan, look, shift, margin = _sequential_look_iv(baseline, candidate, plan, look, shift, margin)
    return _look(base, cand, plan, look, shift, margin, bool(higher_is_better))


def sequential_test(
    baseline: object,
    candidate: object,
    *,
    plan: SequentialPlan,
    margin: float,
    shift: float = 0.0,
    higher_is_better: bool = True,
) -> SequentialResult:
    """Walk the planned looks over the seeds available and stop at the first decision.

    Parameters
    ----------
    baseline, candidate
        Per-seed values in seed order; look ``k`` uses the first
        ``plan.baseline_stages[k]`` and ``plan.stages[k]`` of them. Extra values
        beyond the look that decides are ignored. Looks whose seeds are not all
        there yet are not taken: the result then says ``"continue"`` and how
        many seeds the next look needs, so a caller trains them and calls again
        (earlier looks are recomputed identically).
    plan, margin, shift, higher_is_better
        As in :func:`sequential_look`.

    Returns
    -------
    SequentialResult

    Notes
    -----
    The false-alarm rate of "worse" is at most ``plan.worse.alpha`` because the
    looks follow a group-sequential design and stopping for equivalence or
    futility only removes chances to cross (the futility boundary is
    non-binding: "worse" boundaries are computed without it); likewise for
    equivalence. A ``"final"`` decision
    means neither boundary was crossed at the last look: a caller that then
    applies a fixed-sample verdict must not turn it into "worse" at the
    fixed ``alpha`` (that would add to the false alarms already spent).

    References
    ----------
    .. [1] Lan, K. K. G. & DeMets, D. L. (1983). Biometrika 70:659–663.
    .. [2] Jennison, C. & Turnbull, B. W. (2000). Group Sequential Methods with
       Applications to Clinical Trials. Chapman & Hall/CRC.

    Examples
    --------
    >>> from harness.stats import sequential_plan
    >>> rng = np.random.default_rng(np.random.SeedSequence(7))
    >>> base, cand = rng.normal(100, 10, 20), rng.normal(60, 10, 20)
    >>> r = sequential_test(base, cand, plan=sequential_plan((5, 10, 15, 20)), margin=10.0)
    >>> r.decision, r.seeds_used
    ('worse', (5, 5))
    """
    plan = check_plan(plan)
    base_all, cand_all = _available_iv(baseline, "baseline"), _available_iv(candidate, "candidate")
    shift, margin = _margins_iv(shift, margin)
    looks: list[SequentialLook] = []
    for k in range(plan.looks):
        nb, nc = plan.baseline_stages[k], plan.stages[k]
        if base_all.size < nb or cand_all.size < nc:
            return _result(looks, plan, (nb, nc), base_all.size, cand_all.size)
        look = _look(base_all[:nb], cand_all[:nc], plan, k + 1, shift, margin, bool(higher_is_better))
        looks.append(look)
        if look.decision != "continue":
            break
    return _result(looks, plan, None, base_all.size, cand_all.size)


def _available_iv(values: object, name: str) -> np.ndarray:
    return as_sample(values, name, min_size=0)  # fewer seeds than a look needs means "not yet"


def _result(looks, plan, needed, have_b, have_c) -> SequentialResult:
    method = f"group-sequential Welch comparison ({plan.method}); significance level approach for t"
    if needed is not None:
        nb, nc = needed
        because = (
            f"look {len(looks) + 1} needs {nc} candidate and {nb} baseline seeds, "
            f"and {have_c} and {have_b} are available"
        )
        decision = "continue"
    else:
        last = looks[-1]
        decision = last.decision
        because = {
            "worse": f"the 'worse' boundary was crossed at look {last.look}",
            "equivalent": f"the equivalence boundaries were crossed at look {last.look}",
            "futility": f"the futility boundary was crossed at look {last.look} (a drop of "
                        f"{fmt(last.shift + last.margin)} or more is ruled out; this is not equivalence)",
            "final": f"the last look ({last.look}) was reached without crossing a boundary",
        }[decision]
    reading = (
        f"{because.capitalize()} ({len(looks)} of {plan.looks} looks taken)"
        + (f": {looks[-1].reading}" if looks else ".")
    )
    return SequentialResult(
        looks=tuple(looks),
        decision=decision,
        stopped_because=because,
        seeds_next=needed,
        plan=plan,
        method=method,
        reading=reading,
    )
