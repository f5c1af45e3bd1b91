"""Group-sequential boundaries and the staged comparison (harness.stats.boundaries, harness.stats.sequential).

Sources of the check values, named beside each check:
- Pocock (1977), Table 1, and Jennison & Turnbull (2000), Table 2.1: constants C_P(K, 0.05) of the
  two-sided Pocock test. Recalled from memory (as quoted in issue 14); confirmed here from a second
  angle by an independent Monte Carlo simulation of the canonical joint distribution.
- O'Brien & Fleming (1979) and Jennison & Turnbull (2000), Table 2.3: constants C_B(K, 0.05).
  Recalled from memory; confirmed by the same simulation.
- Lan–DeMets spending boundaries: recalled from memory (no table at hand), confirmed by simulation
  and, for the first look, by the closed form Phi^-1(1 - alpha*(t_1)).
- GroupSeq package vignette "Compute bounds" (CRAN): one-sided 0.05, three looks, O'Brien–Fleming
  type spending spends 0.069% at the first look, upper bound about 3.2.
- scipy.stats (reference library): Welch p-values, t quantiles, the normal quantile; and
  scipy.stats.multivariate_normal (Genz's algorithm) for the crossing probabilities of the futility
  boundaries under the canonical joint distribution (Jennison & Turnbull 2000, §3.1), an
  integration independent of the harness's recursion (Armitage, McPherson & Rowe 1969).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats as sps

from harness.stats import (
    exit_probabilities,
    sequential_boundaries,
    sequential_look,
    sequential_plan,
    sequential_test,
    spending_function,
)

EQUAL5 = (1, 2, 3, 4, 5)
_PLAN_5_10 = sequential_plan((5, 10), alpha=0.05)


def _simulate_crossing(critical, fractions, *, sides, drift=0.0, n=200_000, seed=0):
    """Monte Carlo of the canonical joint distribution: Z_k = S_k / sqrt(t_k), S with independent
    increments N(drift * dt, dt) (Jennison & Turnbull 2000, §3.1). Independent of the recursion."""
    rng = np.random.default_rng(np.random.SeedSequence(seed))
    t = np.asarray(fractions, float)
    dt = np.diff(t, prepend=0.0)
    s = np.cumsum(rng.normal(drift * dt, np.sqrt(dt), size=(n, t.size)), axis=1)
    z = s / np.sqrt(t)
    cross = (np.abs(z) if sides == 2 else z) >= np.asarray(critical)
    return float(cross.any(axis=1).mean())


def _mc_band(p, n=200_000):
    return 4.0 * math.sqrt(p * (1 - p) / n)


# --------------------------------------------------------------------------- published constants


@pytest.mark.parametrize("looks, constant", [(2, 2.178), (3, 2.289), (4, 2.361), (5, 2.413)])
def test_pocock_constant(looks, constant):
    # Pocock (1977) Table 1 / Jennison & Turnbull (2000) Table 2.1, two-sided alpha = 0.05
    # (recalled from memory; the simulation below confirms the level independently).
    b = sequential_boundaries(range(1, looks + 1), alpha=0.05, kind="pocock", sides=2)
    assert b.critical == pytest.approx((constant,) * looks, abs=6e-4)
    assert _simulate_crossing(b.critical, b.fractions, sides=2) == pytest.approx(0.05, abs=_mc_band(0.05))


def test_obrien_fleming_boundaries_five_looks():
    # O'Brien & Fleming (1979) / Jennison & Turnbull (2000) Table 2.3: C_B(5, 0.05) = 2.040, boundaries
    # C_B sqrt(5 / k) = 4.562, 3.226, 2.634, 2.281, 2.040 (recalled from memory, issue 14).
    b = sequential_boundaries(EQUAL5, alpha=0.05, kind="obrien-fleming", sides=2)
    assert b.critical == pytest.approx((4.562, 3.226, 2.634, 2.281, 2.040), abs=6e-4)
    assert _simulate_crossing(b.critical, b.fractions, sides=2) == pytest.approx(0.05, abs=_mc_band(0.05))


@pytest.mark.parametrize("looks, constant", [(2, 1.977), (3, 2.004), (4, 2.024)])
def test_obrien_fleming_constant(looks, constant):
    # Jennison & Turnbull (2000) Table 2.3, C_B(K, 0.05), two-sided (recalled from memory).
    b = sequential_boundaries(range(1, looks + 1), alpha=0.05, kind="obrien-fleming", sides=2)
    assert b.critical[-1] == pytest.approx(constant, abs=6e-4)


def test_lan_demets_obrien_fleming_type_one_sided():
    # Lan & DeMets (1983) O'Brien–Fleming-type spending, alpha*(t) = 2 - 2 Phi(z_{alpha/2} / sqrt t),
    # one-sided 0.025, five equally spaced looks: 4.877, 3.357, 2.680, 2.290, 2.031 (recalled from
    # memory: the standard example printed by group-sequential software). Second angles: the first
    # look's closed form and the simulated level.
    b = sequential_boundaries(EQUAL5, alpha=0.025, kind="obrien-fleming-spending", sides=1)
    assert b.critical == pytest.approx((4.877, 3.357, 2.680, 2.290, 2.031), abs=6e-4)
    first = sps.norm.isf(2 - 2 * sps.norm.cdf(sps.norm.isf(0.0125) / math.sqrt(0.2)))
    assert b.critical[0] == pytest.approx(first, rel=1e-8)
    assert _simulate_crossing(b.critical, b.fractions, sides=1) == pytest.approx(0.025, abs=_mc_band(0.025))


def test_lan_demets_pocock_type_two_sided():
    # Lan & DeMets (1983) Pocock-type spending alpha ln(1 + (e - 1) t), two-sided 0.05, five equally
    # spaced looks: 2.438, 2.427, 2.410, 2.397, 2.386 (recalled from memory); level by simulation.
    b = sequential_boundaries(EQUAL5, alpha=0.05, kind="pocock-spending", sides=2)
    assert b.critical == pytest.approx((2.438, 2.427, 2.410, 2.397, 2.386), abs=6e-4)
    assert _simulate_crossing(b.critical, b.fractions, sides=2) == pytest.approx(0.05, abs=_mc_band(0.05))


def test_groupseq_vignette_three_looks():
    # GroupSeq vignette (CRAN), "Compute bounds": one-sided 0.05, K = 3, O'Brien–Fleming type:
    # "only 0.069% of alpha is spent at stage 1", "critical upper bound of 3.2".
    b = sequential_boundaries((1, 2, 3), alpha=0.05, kind="obrien-fleming-spending", sides=1)
    assert b.spent[0] == pytest.approx(0.00069, abs=5e-6)
    assert b.critical[0] == pytest.approx(3.2, abs=0.005)


def test_one_look_is_the_fixed_test():
    # With a single look every design is the fixed-sample test: z_{1 - alpha} (scipy.stats.norm).
    for kind in ("obrien-fleming-spending", "pocock-spending", "obrien-fleming", "pocock"):
        b = sequential_boundaries([20], alpha=0.05, kind=kind, sides=1)
        assert b.critical[0] == pytest.approx(sps.norm.isf(0.05), abs=1e-7)


# --------------------------------------------------------------------------- spending properties


@pytest.mark.parametrize("kind", ["obrien-fleming-spending", "pocock-spending"])
@pytest.mark.parametrize("information", [(5, 10, 15, 20), (3, 7, 20), (4, 6.7, 8.6, 10)])
def test_spent_follows_the_spending_function_and_sums_to_alpha(kind, information):
    # Lan & DeMets (1983): the cumulative crossing probability at look k is alpha*(t_k); the total is
    # alpha. The recursion's crossing probabilities are recomputed from the boundaries.
    b = sequential_boundaries(information, alpha=0.05, kind=kind, sides=1)
    target = spending_function(kind, b.fractions, 0.05)
    again = np.cumsum(exit_probabilities(b.critical, b.fractions, sides=1))
    assert again == pytest.approx(target, abs=2e-7)
    assert b.spent[-1] == pytest.approx(0.05, abs=1e-7)


def test_exit_probabilities_under_a_drift_match_simulation():
    # Power of the O'Brien–Fleming design (5 looks, two-sided 0.05) at E[Z_5] = 3: recursion vs an
    # independent simulation of the canonical joint distribution.
    b = sequential_boundaries(EQUAL5, alpha=0.05, kind="obrien-fleming", sides=2)
    power = float(exit_probabilities(b.critical, b.fractions, sides=2, drift=3.0).sum())
    simulated = _simulate_crossing(b.critical, b.fractions, sides=2, drift=3.0, seed=1)
    assert power == pytest.approx(simulated, abs=_mc_band(power))
    # The fixed test's power at the same drift is an upper bound here (common practice: about 0.85).
    assert power < sps.norm.sf(1.96 - 3.0) + sps.norm.cdf(-1.96 - 3.0)


# --------------------------------------------------------------------------- t handling


def _aa_rate(plan, rng, *, reps, use_t=True, dist="normal"):
    """A/A false-alarm rate of the "worse" boundaries alone (no equivalence stop), vectorised with
    scipy.stats.ttest_ind (the reference Welch test) on the first n_k seeds."""
    n = plan.stages[-1]
    if dist == "normal":
        b, c = rng.normal(size=(reps, n)), rng.normal(size=(reps, n))
    else:  # solved/collapsed: 85% near 500, 15% near 30
        b, c = (np.where(rng.random((reps, n)) < 0.85, 500.0, 30.0) + rng.normal(0, 5, (reps, n)) for _ in "bc")
    rejected = np.zeros(reps, bool)
    for k, m in enumerate(plan.stages):
        r = sps.ttest_ind(c[:, :m], b[:, :m], equal_var=False, alternative="less", axis=1)
        rejected |= (r.pvalue < plan.worse.nominal[k]) if use_t else (-r.statistic >= plan.worse.critical[k])
    return rejected.mean()


def test_significance_level_approach_holds_alpha_and_z_boundaries_do_not():
    # Pocock (1977) / Jennison & Turnbull (2000, ch. 3): nominal levels applied to t statistics keep the
    # level near alpha; the Z boundaries used on Welch's t with 5-20 seeds do not (checked here).
    rng = np.random.default_rng(np.random.SeedSequence(14))
    reps = 20_000
    band = 3 * math.sqrt(0.05 * 0.95 / reps)
    for kind in ("obrien-fleming-spending", "pocock-spending"):
        plan = sequential_plan((5, 10, 15, 20), alpha=0.05, kind=kind)
        assert _aa_rate(plan, rng, reps=reps) <= 0.05 + band
        assert _aa_rate(plan, rng, reps=reps, use_t=False) > 0.05 + band


def test_sequential_test_false_alarms_and_equivalence_errors_by_simulation():
    # The API end to end, seeded: A/A "worse" rate <= alpha, and "equivalent" at a true difference equal
    # to the margin <= alpha_equivalence (intersection-union; Schuirmann 1987), within 3 MC errors.
    plan = sequential_plan((5, 10, 15, 20), alpha=0.05)
    rng = np.random.default_rng(np.random.SeedSequence(15))
    reps = 1200
    band = 3 * math.sqrt(0.05 * 0.95 / reps)
    worse = sum(sequential_test(rng.normal(size=20), rng.normal(size=20), plan=plan, margin=1.0).decision == "worse"
                for _ in range(reps))  # fmt: skip
    equivalent = sum(
        sequential_test(rng.normal(size=20), rng.normal(1.0, 1.0, 20), plan=plan, margin=1.0).decision == "equivalent"
        for _ in range(reps)
    )
    assert worse / reps <= 0.05 + band
    assert equivalent / reps <= 0.05 + band


# --------------------------------------------------------------------------- looks against scipy


def test_look_statistics_match_scipy():
    # Welch p-values and t critical values of a look against scipy.stats (reference library).
    plan = sequential_plan((5, 10, 15, 20), alpha=0.05)
    rng = np.random.default_rng(np.random.SeedSequence(3))
    base, cand = rng.normal(0, 1, 10), rng.normal(-0.5, 2, 10)
    look = sequential_look(base, cand, plan=plan, look=2, margin=1.5, shift=0.2)
    ref = sps.ttest_ind(cand + 0.2, base, equal_var=False, alternative="less")
    assert look.pvalue_worse == pytest.approx(ref.pvalue, rel=1e-9)
    assert look.df == pytest.approx(ref.df, rel=1e-9)
    p_low = sps.ttest_ind(cand + 1.5, base, equal_var=False, alternative="greater").pvalue
    p_high = sps.ttest_ind(cand - 1.5, base, equal_var=False, alternative="less").pvalue
    assert look.pvalue_equivalence == pytest.approx(max(p_low, p_high), rel=1e-9)
    assert look.critical_worse == pytest.approx(sps.t.isf(plan.worse.nominal[1], ref.df), rel=1e-9)
    assert look.nominal_worse == pytest.approx(sps.norm.sf(plan.worse.critical[1]), rel=1e-12)
    half = sps.t.isf(plan.equivalence.nominal[1], ref.df) * look.standard_error
    assert (look.interval.low, look.interval.high) == pytest.approx((look.estimate - half, look.estimate + half))
    assert look.decision == "continue" and not look.final


def test_sequential_test_walks_looks_and_stops_at_the_first_decision():
    plan = sequential_plan((5, 10, 15, 20), alpha=0.05)
    rng = np.random.default_rng(np.random.SeedSequence(8))
    base, cand = rng.normal(0, 1, 20), rng.normal(-1.5, 1, 20)
    r = sequential_test(base, cand, plan=plan, margin=1.0)
    assert r.decision == "worse" and r.seeds_next is None
    assert [lk.decision for lk in r.looks[:-1]] == ["continue"] * (len(r.looks) - 1)
    for lk in r.looks:  # each look is the look of its prefix
        again = sequential_look(base[: lk.n_baseline], cand[: lk.n_candidate], plan=plan, look=lk.look, margin=1.0)
        assert again == lk
    # Fewer seeds than the next look needs: "continue", with the counts to train.
    short = sequential_test(base[:12], cand[:12], plan=plan, margin=0.01, shift=50.0)
    assert short.decision == "continue" and short.seeds_next == (15, 15) and len(short.looks) == 2
    assert sequential_test([], [], plan=plan, margin=1.0).seeds_next == (5, 5)


def test_final_when_no_boundary_is_crossed():
    plan = sequential_plan((5, 10), alpha=0.05)
    base = [0.0, 1.0, -1.0, 0.5, -0.5, 2.0, -2.0, 0.3, -0.3, 0.1]
    r = sequential_test(base, [v + 0.4 for v in base], plan=plan, margin=0.5)
    assert r.decision == "final" and r.looks[-1].final and "last look" in r.stopped_because


def test_shift_direction_and_equivalence():
    plan = sequential_plan((10,), alpha=0.05)
    base = np.linspace(99, 101, 10)
    # A drop of 2 with tiny noise is "worse" beyond shift 0 but not beyond shift 3 (then equivalent in ±5).
    assert sequential_look(base, base - 2, plan=plan, look=1, margin=5.0).decision == "worse"
    assert sequential_look(base, base - 2, plan=plan, look=1, margin=5.0, shift=3.0).decision == "equivalent"
    # When lower is better, a larger candidate is the worse one.
    assert sequential_look(base, base + 2, plan=plan, look=1, margin=5.0, higher_is_better=False).decision == "worse"
    assert sequential_look(base, base + 2, plan=plan, look=1, margin=5.0).decision == "equivalent"


def test_constant_groups_are_degenerate_not_nan():
    plan = sequential_plan((5,), alpha=0.05)
    look = sequential_look([3.0] * 5, [3.0] * 5, plan=plan, look=1, margin=1.0)
    assert look.decision == "equivalent" and look.statistic == 0.0 and look.interval.width == 0.0
    assert sequential_look([3.0] * 5, [1.0] * 5, plan=plan, look=1, margin=1.0).decision == "worse"


def test_baseline_recorded_in_full_sets_the_information_fractions():
    # Information 1 / (1/n_b + 1/n_c) (Welch's 1/se^2 with equal variances): 20 baseline seeds throughout.
    plan = sequential_plan((5, 10, 20), baseline_stages=(20, 20, 20))
    info = [1 / (1 / 20 + 1 / n) for n in (5, 10, 20)]
    assert plan.worse.fractions == pytest.approx([v / info[-1] for v in info])


# --------------------------------------------------------------------------- argument validation


@pytest.mark.parametrize(
    "kwargs, match",
    [
        (dict(stages=(5, 5, 10)), r"`stages` must be strictly increasing"),
        (dict(stages=(10, 5)), r"`stages` must be strictly increasing"),
        (dict(stages=(1, 5)), r"`stages\[0\]` must be an integer >= 2"),
        (dict(stages=()), r"`stages` must name at least one look"),
        (dict(stages="5,10"), r"`stages` must be a sequence"),
        (dict(stages=(5, 10), alpha=0.0), r"`alpha` must lie strictly between 0 and 1"),
        (dict(stages=(5, 10), alpha=0.6), r"`alpha` is a one-sided level"),
        (dict(stages=(5, 10), alpha_equivalence=1.5), r"`alpha_equivalence`"),
        (dict(stages=(5, 10), kind="haybittle"), r"`kind` must be one of"),
        (dict(stages=(5, 10), equivalence_kind="x"), r"`equivalence_kind` must be one of"),
        (dict(stages=(5, 10), baseline_stages=(20,)), r"`baseline_stages` must have one entry per look"),
        (dict(stages=(5, 10), baseline_stages=(20, 10)), r"`baseline_stages` must be non-decreasing"),
        (dict(stages=(5, 10), futility=0.5), r"`futility` is a one-sided level"),
        (dict(stages=(5, 10), futility=-0.1), r"`futility` must lie strictly between 0 and 1"),
        (dict(stages=(5, 10), futility=True), r"`futility` must be a number"),
        (dict(stages=(5,), futility=0.05), r"`futility` needs at least 2 looks"),
        (dict(stages=(5, 10), futility=0.05, futility_kind="x"), r"`futility_kind` must be one of"),
    ],
)
def test_sequential_plan_iv(kwargs, match):
    stages = kwargs.pop("stages")
    with pytest.raises((ValueError, TypeError), match=match):
        sequential_plan(stages, **kwargs)


def test_sequential_look_and_test_iv():
    plan = sequential_plan((5, 10))
    five = [1.0, 2.0, 3.0, 4.0, 5.0]
    with pytest.raises(ValueError, match=r"`look` must be between 1 and 2"):
        sequential_look(five, five, plan=plan, look=3, margin=1.0)
    with pytest.raises(ValueError, match=r"`candidate` must hold the 10 seeds planned for look 2"):
        sequential_look(five + five, five, plan=plan, look=2, margin=1.0)
    with pytest.raises(ValueError, match=r"`shift` .* must be >= 0"):
        sequential_look(five, five, plan=plan, look=1, margin=1.0, shift=-1.0)
    with pytest.raises(ValueError, match=r"`margin` must be positive"):
        sequential_test(five, five, plan=plan, margin=0.0)
    with pytest.raises(ValueError, match=r"`candidate` must hold finite numbers"):
        sequential_test(five, [1.0, math.nan], plan=plan, margin=1.0)
    with pytest.raises(TypeError, match=r"`plan` must be a SequentialPlan"):
        sequential_test(five, five, plan={"stages": (5,)}, margin=1.0)


def test_sequential_boundaries_iv():
    with pytest.raises(ValueError, match=r"`information` must be positive and strictly increasing"):
        sequential_boundaries((2, 1))
    with pytest.raises(ValueError, match=r"`sides` must be 1 or 2"):
        sequential_boundaries((1, 2), sides=3)
    with pytest.raises(ValueError, match=r"`kind` must be one of"):
        sequential_boundaries((1, 2), kind="wang-tsiatis")
    with pytest.raises(ValueError, match=r"`critical` must hold one finite boundary per fraction"):
        exit_probabilities([2.0], [0.5, 1.0])
    with pytest.raises(ValueError, match=r"`fractions` must lie in \(0, 1\]"):
        exit_probabilities([2.0, 2.0], [1.0, 2.0])


@pytest.mark.parametrize("name", ["harness.stats.boundaries", "harness.stats.sequential",
                                  "harness.stats.sequential_design"])
def test_docstring_examples(name):
    import doctest
    import importlib

    result = doctest.testmod(importlib.import_module(name), optionflags=doctest.ELLIPSIS)
    assert result.failed == 0 and result.attempted > 0


@settings(max_examples=40, deadline=None)
@given(
    st.integers(0, 2**32 - 1),
    st.floats(-1e4, 1e4),
    st.floats(0.01, 100.0),
    st.floats(0.0, 2.0),
)
def test_decisions_do_not_depend_on_units(seed, offset, scale, drop):
    # Invariance (common practice for location-scale tests): adding a constant to both groups and
    # rescaling the values, the margin and the shift leaves every look's decision and p-values as they were.
    plan = _PLAN_5_10
    rng = np.random.default_rng(np.random.SeedSequence(seed))
    base, cand = rng.normal(0, 1, 10), rng.normal(-drop, 1, 10)
    one = sequential_test(base, cand, plan=plan, margin=1.0, shift=0.25)
    two = sequential_test(offset + scale * base, offset + scale * cand, plan=plan, margin=scale, shift=0.25 * scale)
    assert [lk.decision for lk in one.looks] == [lk.decision for lk in two.looks]
    assert [lk.pvalue_worse for lk in one.looks] == pytest.approx([lk.pvalue_worse for lk in two.looks], abs=1e-6)
    assert two.estimate == pytest.approx(scale * one.estimate, rel=1e-6, abs=1e-6 * scale)


# --------------------------------------------------------------------------- futility (non-binding, beta spending)


def test_futility_with_one_interim_look_is_the_fixed_test_of_the_alternative():
    # One interim look: the futility boundary is the fixed one-sided test of "drop >= shift + margin" at
    # the spend, z_{1 - spend} (scipy.stats.norm), whatever the spending function; no futility at the last look.
    for kind in ("obrien-fleming-spending", "pocock-spending"):
        plan = sequential_plan((5, 10), futility=0.05, futility_kind=kind)
        assert plan.futility.critical == pytest.approx((sps.norm.isf(0.05),), abs=1e-7)
    look = sequential_look([0.0, 1, 2, 3, 4] * 2, [0.0, 1, 2, 3, 4] * 2, plan=plan, look=2, margin=1.0)
    assert look.pvalue_futility is None and look.nominal_futility is None
    assert sequential_plan((5, 10)).futility is None  # no spend, no futility boundary


@pytest.mark.parametrize("kind", ["obrien-fleming-spending", "pocock-spending"])
def test_futility_spend_matches_multivariate_normal(kind):
    # The futility boundaries of stages 5, 10, 15, 20 against a baseline of 20 seeds spend
    # spend * f(t_k) / f(t_3) by interim look k (Lan & DeMets 1983 spending, normalised to the interim
    # looks). Reference: the probability that the canonical joint normal (corr sqrt(t_i / t_j),
    # Jennison & Turnbull 2000, §3.1) of the interim looks stays below the boundaries, by
    # scipy.stats.multivariate_normal.cdf (Genz's algorithm), independent of the recursion.
    plan = sequential_plan((5, 10, 15, 20), baseline_stages=(20,) * 4, futility=0.05, futility_kind=kind)
    b = plan.futility
    info = np.array([1 / (1 / 20 + 1 / n) for n in (5, 10, 15)])
    assert b.fractions == pytest.approx(info / info[-1])
    t = np.array(b.fractions)
    target = spending_function(kind, t, 0.05)
    for k in range(1, 4):
        cov = np.sqrt(np.minimum.outer(t[:k], t[:k]) / np.maximum.outer(t[:k], t[:k]))
        stay = sps.multivariate_normal(mean=np.zeros(k), cov=cov).cdf(np.array(b.critical[:k]))
        assert 1.0 - stay == pytest.approx(target[k - 1], abs=2e-5)


def test_futility_look_matches_scipy():
    # The futility p-value is Welch's one-sided test of H0: drop >= shift + margin (scipy.stats.ttest_ind
    # on the candidate shifted up by shift + margin, alternative "greater"); the look stops for futility
    # when it is below the boundary's nominal level and neither "worse" nor equivalence was shown.
    plan = sequential_plan((5, 10, 15, 20), futility=0.05)
    rng = np.random.default_rng(np.random.SeedSequence(21))
    base, cand = rng.normal(0, 1, 10), rng.normal(0, 1, 10)
    look = sequential_look(base, cand, plan=plan, look=2, margin=1.0, shift=1.0)
    ref = sps.ttest_ind(cand + 2.0, base, equal_var=False, alternative="greater").pvalue
    assert look.pvalue_futility == pytest.approx(ref, rel=1e-9)
    assert look.nominal_futility == plan.futility.nominal[1]
    assert ref < plan.futility.nominal[1] < look.pvalue_equivalence  # here: futility, not equivalence
    assert look.decision == "futility" and "stop for futility (not equivalence)" in look.reading
    lower = sequential_look(base, cand, plan=plan, look=2, margin=1.0, shift=1.0, higher_is_better=False)
    assert lower.pvalue_futility == pytest.approx(
        sps.ttest_ind(cand - 2.0, base, equal_var=False, alternative="less").pvalue, rel=1e-9)


def test_futility_is_non_binding_and_bounds_the_power_lost_by_simulation():
    # Seeded, small (about two seconds). Non-binding (Pampallona, Tsiatis & Kim 2001): the "worse"
    # boundaries ignore futility, so on every simulated path a "worse" with the futility stop is also a
    # "worse" without it (exact, path by path), and at a drop equal to the tolerated one (the null's
    # edge) the false-alarm rate stays <= alpha. At a drop of shift + margin, the futility stops are at
    # most the spend and the power lost at most the spend, within 3 Monte Carlo errors; an unchanged
    # candidate stops early (at least 30% of the seeds saved).
    with_f = sequential_plan((5, 10, 15, 20), futility=0.05, futility_kind="pocock-spending")
    without = sequential_plan((5, 10, 15, 20))
    rng = np.random.default_rng(np.random.SeedSequence(22))
    reps = 400
    band = 3 * math.sqrt(0.05 * 0.95 / reps)
    for drop in (0.0, 1.0, 2.0):  # shift = margin = 1 (drop-beyond-margin): A/A, the null's edge, the alternative
        runs = [(rng.normal(0, 1, 20), rng.normal(-drop, 1, 20)) for _ in range(reps)]
        a = [sequential_test(b, c, plan=with_f, margin=1.0, shift=1.0) for b, c in runs]
        z = [sequential_test(b, c, plan=without, margin=1.0, shift=1.0) for b, c in runs]
        assert all(y.decision == "worse" for x, y in zip(a, z) if x.decision == "worse")
        worse = sum(x.decision == "worse" for x in a) / reps
        if drop == 0.0:
            assert sum(x.seeds_used[1] for x in a) / reps <= 14.0
        if drop == 1.0:
            assert worse <= 0.05 + band
        if drop == 2.0:
            assert sum(x.decision == "futility" for x in a) / reps <= 0.05 + band
            assert worse >= sum(y.decision == "worse" for y in z) / reps - 0.05 - band
