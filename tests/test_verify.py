"""Verification logic on hand-made curve sets, checked against published and recomputed values."""

from __future__ import annotations

import dataclasses

import gymnasium
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st_h
from scipy import stats as st

from harness.store.baseline import SeedCurve
from harness.core.curves import Checkpoint, LearningCurve
from harness.gate.curveset import CurveSet, random_policy_return, task_threshold
from harness.core.errors import BaselineError, ConfigError, ResultsError, RunFailedError
from harness.manifest.policy import GatePolicy, PublishedReference
from harness.core.seeding import plan_seeds
from harness.core.spec import EvaluationPlan, RunSpec, TaskSpec
from harness.store.results import TRAINER_SOURCE
from harness.store.results import ResultSet, RunRecord
from harness.gate.decision import decide
from harness.gate.verify import verify_sets

# NIST/SEMATECH e-Handbook of Statistical Methods, section 1.3.5.3, AUTO83B data (published raw data;
# see tests/CHECK-VALUES.md): miles per gallon of US and Japanese cars.
US = [18, 15, 18, 16, 17, 15, 14, 14, 14, 15, 15, 14, 15, 14, 22, 18, 21, 21, 10, 10, 11, 9, 28, 25, 19, 16, 17, 19,
      18, 14, 14, 14, 14, 12, 13, 13, 18, 22, 19, 18, 23, 26, 25, 20, 21, 13, 14, 15, 14, 17, 11, 13, 12, 13, 15, 13,
      13, 14, 22, 28, 13, 14, 13, 14, 15, 12, 13, 13, 14, 13, 12, 13, 18, 16, 18, 18, 23, 11, 12, 13, 12, 18, 21, 19,
      21, 15, 16, 15, 11, 20, 21, 19, 15, 26, 25, 16, 16, 18, 16, 13, 14, 14, 14, 28, 19, 18, 15, 15, 16, 15, 16, 14,
      17, 16, 15, 18, 21, 20, 13, 23, 20, 23, 18, 19, 25, 26, 18, 16, 16, 15, 22, 22, 24, 23, 29, 25, 20, 18, 19, 18,
      27, 13, 17, 13, 13, 13, 30, 26, 18, 17, 16, 15, 18, 21, 19, 19, 16, 16, 16, 16, 25, 26, 31, 34, 36, 20, 19, 20,
      19, 21, 20, 25, 21, 19, 21, 21, 19, 18, 19, 18, 18, 18, 30, 31, 23, 24, 22, 20, 22, 20, 21, 17, 18, 17, 18, 17,
      16, 19, 19, 36, 27, 23, 24, 34, 35, 28, 29, 27, 34, 32, 28, 26, 24, 19, 28, 24, 27, 27, 26, 24, 30, 39, 35, 34,
      30, 22, 27, 20, 18, 28, 27, 34, 31, 29, 27, 24, 23, 38, 36, 25, 38, 26, 22, 36, 27, 27, 32, 28, 31]
JP = [24, 27, 27, 25, 31, 35, 24, 19, 28, 23, 27, 20, 22, 18, 20, 31, 32, 31, 32, 24, 26, 29, 24, 24, 33, 33, 32, 28,
      19, 32, 34, 26, 30, 22, 22, 33, 39, 36, 28, 27, 21, 24, 30, 34, 32, 38, 37, 30, 31, 37, 32, 47, 41, 45, 34, 33,
      24, 32, 39, 35, 32, 37, 38, 34, 34, 32, 33, 32, 25, 24, 37, 31, 36, 36, 34, 38, 32, 38, 32]
NIST_MEAN_US, NIST_MEAN_JP, NIST_SD_JP = 20.14458, 30.48101, 6.10771  # published summary
WELCH_T, WELCH_DF, WELCH_P_TWO_SIDED = -12.946273, 136.87498, 1.5709e-25  # recomputed (tests/CHECK-VALUES.md)

POLICY = GatePolicy(metrics=("final",), margin=1.0)


def curve_set(matrix, *, label="set", config_hash="sha256:same", config=None, versions=None, every=100):
    """A CurveSet whose seed ``i`` has mean evaluation return ``matrix[i][j]`` at checkpoint ``j``."""
    matrix = np.asarray(matrix, dtype=float)
    seeds = plan_seeds(count=matrix.shape[0], root=1)
    runs = tuple(
        SeedCurve(seed, LearningCurve(tuple(Checkpoint(j * every, (float(v),)) for j, v in enumerate(row))))
        for seed, row in zip(seeds, matrix, strict=True)
    )
    return CurveSet(label, "toy", config_hash, config or {"settings": {"step_size": 0.1}},
                    versions or {"numpy": "2.1.0"}, runs, every * (matrix.shape[1] - 1))


def flat(values, checkpoints=2):
    """Curves that sit at one value per seed, so that final and auc both equal it."""
    return np.repeat(np.asarray(values, dtype=float)[:, None], checkpoints, axis=1)


def test_welch_through_verify_matches_nist_auto83b():
    verdict = verify_sets(curve_set(flat(JP)), curve_set(flat(US)), POLICY)
    (check,) = verdict.checks
    assert check.estimate == pytest.approx(NIST_MEAN_US - NIST_MEAN_JP, rel=1e-5)
    assert check.baseline_n == 79 and check.candidate_n == 249
    se = check.estimate / WELCH_T
    half = st.t.ppf(0.95, WELCH_DF) * se  # the 90% (1 - 2 alpha) interval
    assert (check.interval.low, check.interval.high) == pytest.approx((check.estimate - half, check.estimate + half), rel=1e-5)
    assert check.verdict == "worse"
    assert check.pvalue == pytest.approx(WELCH_P_TWO_SIDED / 2, rel=1e-3)  # one-sided, one check: Holm leaves it
    assert not verdict.passed and verdict.gate.failing == ("final",)


def test_published_reference_uses_welch_from_summary_statistics():
    ref = PublishedReference(metric="final", mean=NIST_MEAN_JP, sd=NIST_SD_JP, seeds=79,
                             source="NIST/SEMATECH e-Handbook 1.3.5.3 (Japanese cars)")
    verdict = verify_sets(None, curve_set(flat(US)), POLICY, references=(ref,))
    (check,) = verdict.checks
    assert check.name == "final vs reference 1"
    assert check.title == "final vs reference 1 (NIST/SEMATECH e-Handbook 1.3.5.3 (Japanese cars))"
    assert check.estimate == pytest.approx(NIST_MEAN_US - NIST_MEAN_JP, rel=1e-5)
    assert check.pvalue == pytest.approx(WELCH_P_TWO_SIDED / 2, rel=1e-3)
    assert check.verdict == "worse" and check.baseline_values is None
    assert verdict.exact.status == "skipped" and "published summary statistics" in verdict.exact.reason
    assert verdict.divergence is None


def test_published_reference_given_as_standard_error():
    se = NIST_SD_JP / np.sqrt(79)
    ref = PublishedReference(metric="final", mean=NIST_MEAN_JP, se=se, seeds=79, source="NIST")
    (check,) = verify_sets(None, curve_set(flat(US)), POLICY, references=(ref,)).checks
    assert check.pvalue == pytest.approx(WELCH_P_TWO_SIDED / 2, rel=1e-3)


def test_holm_is_applied_across_checks():
    # Two checks with the same raw p-value p: Holm (1979) step-down adjusts both to 2p.
    refs = tuple(PublishedReference(metric=m, mean=NIST_MEAN_JP, sd=NIST_SD_JP, seeds=79, source="NIST")
                 for m in ("final", "auc"))
    checks = verify_sets(None, curve_set(flat(US)), POLICY, references=refs).checks
    assert [c.pvalue for c in checks] == pytest.approx([WELCH_P_TWO_SIDED, WELCH_P_TWO_SIDED], rel=1e-3)


def _pair(shift, n=12, seed=3):
    rng = np.random.default_rng(np.random.SeedSequence(seed))
    base = rng.normal(100.0, 4.0, size=n)
    cand = rng.normal(100.0, 4.0, size=n) + shift
    return curve_set(flat(base)), curve_set(flat(cand))


def test_equivalence_iff_interval_inside_margin():
    # Schuirmann (1987): the two one-sided tests at alpha reject exactly when the (1 - 2 alpha)
    # interval lies inside the margin.
    base, cand = _pair(0.0)
    (probe,) = verify_sets(base, cand, POLICY).checks
    reach = max(abs(probe.interval.low), abs(probe.interval.high))
    inside = verify_sets(base, cand, dataclasses.replace(POLICY, margin=reach * 1.001)).checks[0]
    outside = verify_sets(base, cand, dataclasses.replace(POLICY, margin=reach * 0.999)).checks[0]
    assert inside.verdict == "equivalent"
    assert outside.verdict == "inconclusive"
    assert outside.detectable > 0 and outside.seeds_needed > 12
    assert outside.pvalue_equivalence > 0.05 > inside.pvalue_equivalence


def test_inconclusive_reports_detectable_difference_and_seeds():
    base, cand = _pair(0.0, n=4)
    (check,) = verify_sets(base, cand, dataclasses.replace(POLICY, margin=0.5)).checks
    assert check.verdict == "inconclusive"
    # Under the default rule (drop-beyond-margin) a drop is caught once it is significantly beyond the
    # margin: the seeds figure is for a drop of twice the margin, the detectable drop includes the margin.
    assert "seeds per side would detect a drop of 1." in check.reading and check.target == 1.0
    assert check.detectable > check.margin and check.seeds_needed > 4


def test_gate_policies():
    base, cand = _pair(-3.0, n=40)
    worse = verify_sets(base, cand, dataclasses.replace(POLICY, margin=10.0))
    (check,) = worse.checks
    assert check.verdict == "worse" and check.within_margin and not check.beyond_margin
    # The default rule lets a significant drop inside the margin pass, and says so; any-drop fails it.
    assert worse.passed and worse.gate.rule == "drop-beyond-margin"
    assert "significantly worse but not failing rule drop-beyond-margin: final" in worse.gate.reasons[0]
    strictest = decide(worse.checks, dataclasses.replace(POLICY, margin=10.0, rule="any-drop"))
    assert not strictest.passed and strictest.rule == "any-drop" and "fails rule any-drop" in strictest.reasons[0]
    assert decide(worse.checks, dataclasses.replace(POLICY, margin=10.0, rule="interval-past-margin")).passed
    base, cand = _pair(0.0, n=4)
    unsure = verify_sets(base, cand, dataclasses.replace(POLICY, margin=0.5))
    assert unsure.checks[0].verdict == "inconclusive" and unsure.passed
    strict = decide(unsure.checks, dataclasses.replace(POLICY, margin=0.5, strict=True))
    assert not strict.passed and strict.failing == ("final",)


def test_better_is_not_a_failure():
    base, cand = _pair(+20.0)
    verdict = verify_sets(base, cand, POLICY)
    assert verdict.checks[0].verdict == "better" and verdict.passed


def test_exact_check_names_first_differing_seed_and_checkpoint():
    matrix = np.arange(12, dtype=float).reshape(4, 3)
    same = verify_sets(curve_set(matrix), curve_set(matrix.copy()), POLICY)
    assert same.exact.status == "identical"
    changed = matrix.copy()
    changed[2, 1] = np.nextafter(changed[2, 1], np.inf)  # one ulp: bitwise, not approximately
    changed[3, 0] += 1.0
    differs = verify_sets(curve_set(matrix), curve_set(changed), POLICY).exact
    assert (differs.status, differs.seed, differs.step) == ("differs", "1/2", 100)
    assert differs.baseline_returns == (7.0,) and differs.candidate_returns != (7.0,)


def _unexplained_pair(*, candidate_source="sha256:trainer-a"):
    """Same config and versions; the candidate's curve differs by one ulp at seed 1/2, step 100."""
    matrix = np.arange(12, dtype=float).reshape(4, 3)
    changed = matrix.copy()
    changed[2, 1] = np.nextafter(changed[2, 1], np.inf)
    base = curve_set(matrix, versions={"numpy": "2.1.0", TRAINER_SOURCE: "sha256:trainer-a"})
    return base, curve_set(changed, versions={"numpy": "2.1.0", TRAINER_SOURCE: candidate_source})


def test_nondeterminism_fails_the_gate_by_default():
    # Configuration, installed versions and trainer source all unchanged: the curves must be
    # bitwise identical, and one ulp of difference is a reproducibility failure even though no
    # statistical check finds the candidate worse.
    base, cand = _unexplained_pair()
    verdict = verify_sets(base, cand, POLICY)
    assert verdict.checks[0].verdict != "worse"
    assert (verdict.exact.status, verdict.exact.seed, verdict.exact.step) == ("differs", "1/2", 100)
    assert verdict.exact.nondeterministic
    assert "nondeterminism" in verdict.exact.reading and "reproducibility failure" in verdict.exact.reading
    assert not verdict.passed and verdict.gate.failing == ("exact",)
    assert "allow_nondeterminism" in verdict.gate.reasons[0]


def test_nondeterminism_can_be_allowed_by_the_policy():
    base, cand = _unexplained_pair()
    verdict = verify_sets(base, cand, dataclasses.replace(POLICY, allow_nondeterminism=True))
    assert verdict.exact.nondeterministic and verdict.passed
    assert any("allowed by the policy" in r for r in verdict.gate.reasons)


def test_a_changed_source_explains_a_difference():
    base, cand = _unexplained_pair(candidate_source="sha256:trainer-b")
    verdict = verify_sets(base, cand, POLICY)
    assert verdict.exact.status == "differs" and not verdict.exact.nondeterministic
    assert "the trainer's source changed" in verdict.exact.reading
    assert "nondeterminism" not in verdict.exact.reading
    assert verdict.passed


def test_an_unrecorded_source_is_not_called_nondeterminism():
    # Without a source fingerprint on both sides "unchanged" cannot be established.
    base, cand = _unexplained_pair()
    cand = dataclasses.replace(cand, versions={"numpy": "2.1.0"})
    verdict = verify_sets(base, cand, POLICY)
    assert verdict.exact.status == "differs" and not verdict.exact.nondeterministic and verdict.passed


def test_version_drift_skips_exact_check_but_not_statistics():
    matrix = np.arange(12, dtype=float).reshape(4, 3)
    verdict = verify_sets(curve_set(matrix), curve_set(matrix, versions={"numpy": "2.2.0"}), POLICY)
    assert verdict.exact.status == "skipped"
    assert verdict.exact.reason.startswith("installed versions differ (numpy 2.1.0 -> 2.2.0)")
    assert [(d.name, d.baseline, d.candidate) for d in verdict.provenance.drift] == [("numpy", "2.1.0", "2.2.0")]
    assert len(verdict.checks) == 1


def test_config_change_names_the_key():
    old = {"settings": {"step_size": 0.1, "discount": 0.99}, "budget": 200}
    new = {"settings": {"step_size": 0.3, "discount": 0.99}, "budget": 200}
    matrix = np.arange(12, dtype=float).reshape(4, 3)
    verdict = verify_sets(curve_set(matrix, config=old), curve_set(matrix, config=new, config_hash="sha256:other"), POLICY)
    assert [(c.key, c.baseline, c.candidate) for c in verdict.provenance.changes] == [("settings.step_size", 0.1, 0.3)]
    assert "1 key changed: settings.step_size" in verdict.provenance.reading
    assert verdict.exact.status == "skipped"


def test_tuples_and_lists_are_the_same_config():
    # A resolved config holds tuples; the same config read back from a baseline file holds lists.
    matrix = np.arange(12, dtype=float).reshape(4, 3)
    resolved = curve_set(matrix, config={"settings": {"hidden": (64, 64)}})
    stored = curve_set(matrix, config={"settings": {"hidden": [64, 64]}})
    assert verify_sets(stored, resolved, POLICY).provenance.changes == ()


def test_divergence_finds_where_the_curves_part():
    rng = np.random.default_rng(np.random.SeedSequence(11))
    base = rng.normal(0.0, 1.0, size=(8, 6)).cumsum(axis=1) + np.arange(6) * 10
    cand = base + rng.normal(0.0, 0.5, size=(8, 6))
    cand[:, 3:] -= 40.0
    verdict = verify_sets(curve_set(base), curve_set(cand), POLICY)
    assert (verdict.divergence.first_step, verdict.divergence.last_step) == (300, 500)
    assert verdict.divergence.pvalue <= 0.05
    calm = verify_sets(curve_set(base), curve_set(base + rng.normal(0.0, 0.5, size=(8, 6))), POLICY)
    assert not calm.divergence.found


def test_different_checkpoint_grids_are_refused():
    with pytest.raises(BaselineError, match=r"different checkpoint grids: .* has steps \[0, 100, 200\]"):
        verify_sets(curve_set(flat([1, 2, 3], 3)), curve_set(flat([1, 2, 3], 3), every=50), POLICY)


def test_one_seed_is_not_enough():
    with pytest.raises(BaselineError, match=r"1 seed; the statistical checks need at least 2 seeds per side"):
        verify_sets(curve_set(flat([1, 2, 3])), curve_set(flat([1])), POLICY)


def test_nothing_to_compare_against():
    with pytest.raises(BaselineError, match=r"no baseline and no \[\[reference\]\]"):
        verify_sets(None, curve_set(flat([1, 2, 3])), POLICY)


def test_steps_to_threshold_uses_censored_comparison():
    # Baseline seeds reach 50 at step 100; candidate seeds reach it at step 300 or never (censored).
    base = [[0, 60, 70, 80, 90]] * 5
    cand = [[0, 10, 20, 60, 70]] * 3 + [[0, 10, 20, 30, 40]] * 2
    policy = GatePolicy(metrics=("steps-to-threshold",), threshold=50.0, margin_share=0.1)
    (check,) = verify_sets(curve_set(base), curve_set(cand), policy).checks
    assert check.verdict == "worse" and "Gehan" in check.method
    assert check.margin == pytest.approx(0.1 * 400)  # share of the budget
    assert check.pvalue_equivalence == 1.0  # equivalence is never claimed with censored seeds


def _records(n, *, fail=()):
    seeds = plan_seeds(count=n, root=2)
    out = []
    for i, s in enumerate(seeds):
        spec = RunSpec("toy", TaskSpec("FrozenLake-v1"), "tabular-q", {}, 100, EvaluationPlan(interval=50, episodes=1),
                       s, i, "sha256:h")
        if i in fail:
            out.append(RunRecord(spec, "failed", None, "Traceback ...\nRuntimeError: boom", {}))
        else:
            curve = LearningCurve((Checkpoint(0, (0.0,)), Checkpoint(50, (0.5,)), Checkpoint(100, (1.0,))))
            out.append(RunRecord(spec, "ok", curve, None, {}))
    return ResultSet("toy", "sha256:h", tuple(out))


def test_never_verified_on_fewer_seeds():
    with pytest.raises(RunFailedError, match=r"1 of 3 seeds failed.*never verified on fewer seeds.*RuntimeError: boom"):
        CurveSet.from_results(_records(3, fail=(1,)), label="rerun", expected=3)
    with pytest.raises(ResultsError, match=r"3 completed seeds, but the manifest asks for 5"):
        CurveSet.from_results(_records(3), label="rerun", expected=5)
    assert len(CurveSet.from_results(_records(3), label="rerun", expected=3).runs) == 3


def test_margin_for_negative_return_tasks_from_the_registry():
    # Reward thresholds from gymnasium's registry; random-policy returns measured here. MountainCar's
    # random policy never reaches the flag within the 200-step limit (common practice), so its
    # return is exactly -200; Acrobot's almost never swings up within 500 steps (recalled from
    # memory: about -500), so its measured mean lies close to the limit.
    evaluation = EvaluationPlan(interval=1, episodes=5, seed=0)
    car = TaskSpec("MountainCar-v0")
    assert task_threshold(car) == gymnasium.spec("MountainCar-v0").reward_threshold == -110.0
    floor = random_policy_return(car, evaluation)
    assert floor == -float(gymnasium.spec("MountainCar-v0").max_episode_steps)
    assert GatePolicy().margin_for("final", floor=floor, threshold=-110.0, budget=1) == pytest.approx(9.0)
    acrobot = TaskSpec("Acrobot-v1")
    low = random_policy_return(acrobot, evaluation)
    assert -500.0 <= low <= -400.0
    assert GatePolicy().margin_for("auc", floor=low, threshold=task_threshold(acrobot), budget=1) == pytest.approx(
        0.1 * (-100.0 - low))
    assert random_policy_return(acrobot, evaluation) == low  # deterministic


@settings(max_examples=25, deadline=None)
@given(shift=st_h.floats(-6.0, 6.0), seed=st_h.integers(0, 2**16))
def test_swapping_sides_swaps_worse_and_better(shift, seed):
    # Invariant of the one-sided tests: what is worse one way round is better the other way round,
    # with the same Holm-adjusted p-value; equivalent and inconclusive are symmetric.
    base, cand = _pair(shift, n=6, seed=seed)
    policy = GatePolicy(metrics=("final", "auc"), margin=2.0, locate=False)
    forward = verify_sets(base, cand, policy).checks
    backward = verify_sets(cand, base, policy).checks
    mirror = {"worse": "better", "better": "worse", "equivalent": "equivalent", "inconclusive": "inconclusive"}
    for f, b in zip(forward, backward, strict=True):
        assert b.verdict == mirror[f.verdict]
        assert b.estimate == pytest.approx(-f.estimate)
        assert (b.pvalue_worse, b.pvalue_better) == pytest.approx((f.pvalue_better, f.pvalue_worse))


# --- issue 10: rounding noise, too few seeds, margins in each metric's units -------------------


def test_same_constant_success_rate_is_not_worse_at_the_gate():
    # Issue 10 item 3: 10 and 24 seeds that all score 0.74 differ only in the rounding of their
    # means (exact arithmetic: no difference; common practice). Today's code called it worse (p ~ 8e-5).
    for rule in ("any-drop", "drop-beyond-margin"):
        policy = dataclasses.replace(POLICY, margin=0.05, rule=rule)
        verdict = verify_sets(curve_set(np.full((10, 3), 0.74)), curve_set(np.full((24, 3), 0.74)), policy)
        assert verdict.checks and all(c.verdict == "equivalent" for c in verdict.checks)
        assert all(c.estimate == 0.0 for c in verdict.checks) and verdict.passed


def test_two_seeds_per_side_cannot_tell_where_curves_part():
    # Issue 10 item 4: with 2 vs 2 seeds the exact permutation test's smallest p-value is 1/C(4, 2) = 1/6
    # (Fisher 1935), so "the curves do not part" would be a false reassurance.
    base = curve_set([[0.0, 10.0, 20.0], [0.0, 11.0, 21.0]])
    cand = curve_set([[0.0, 0.0, 0.0], [0.0, 1.0, 1.0]])
    div = verify_sets(base, cand, dataclasses.replace(POLICY, margin=1.0)).divergence
    assert div.seeds_needed == 3 and not div.found
    assert "cannot tell where the curves part with 2 vs 2 seeds (needs 3 per side)" in div.reading
    assert "do not part" not in div.reading
    three = verify_sets(curve_set(np.vstack([base.curve_matrix(), [[0.0, 12.0, 22.0]]])),
                        curve_set(np.vstack([cand.curve_matrix(), [[0.0, 2.0, 2.0]]])),
                        dataclasses.replace(POLICY, margin=1.0)).divergence
    assert three.seeds_needed is None and three.found  # 1/C(6, 3) = 0.05 can reach alpha


def test_minimum_seeds_per_check_of_a_policy():
    from harness.gate.preflight import minimum_seeds

    needs = minimum_seeds(GatePolicy(margin=1.0))
    assert sorted(needs.values()) == [2, 2, 3]  # Welch, Welch, permutation (1/C(6, 3) = 0.05)
    assert sorted(minimum_seeds(GatePolicy(margin=1.0, locate=False)).values()) == [2, 2]
    # Gehan with two censored seeds tied, normal approximation (scipy.stats.mannwhitneyu, see
    # tests/test_stats_resolution.py), at Holm's first step 0.05 / 2: 3 per side reach 0.038, 4 reach 0.0147.
    steps = minimum_seeds(GatePolicy(metrics=("final", "steps-to-threshold"), locate=False, threshold=1.0))
    assert max(steps.values()) == 4


def test_absolute_margin_is_in_units_of_return_not_env_steps():
    # Issue 10 item 5: a return margin of 20 must not allow 20 env steps for steps-to-threshold;
    # its default is a share of the budget (docs/manifest.md).
    from harness.gate.margins import gate_scale

    policy = GatePolicy(metrics=("final", "steps-to-threshold"), margin=20.0, threshold=0.5)
    assert policy.margin_for("steps-to-threshold", floor=None, threshold=0.5, budget=50_000) == 5_000.0
    scale = gate_scale(policy, budget=50_000)
    assert [m.text for m in scale.margins] == ["final ±20 return (margin)",
                                               "steps-to-threshold ±5000 env steps (0.1 of the budget)"]
    own = GatePolicy(metrics=("steps-to-threshold",), margins={"steps-to-threshold": 800.0}, threshold=0.5)
    assert gate_scale(own, budget=50_000).margin("steps-to-threshold") == 800.0


def test_policy_line_names_the_rule_and_each_margin_in_its_units():
    from harness.report._rows import policy_line

    base, cand = _pair(0.0)
    verdict = verify_sets(base, cand, GatePolicy(margins={"final": 0.5, "auc": 2.0}, rule="any-drop"))
    line = policy_line(verdict)
    assert line.startswith("rule any-drop (fails when the drop is significant, however small)")
    assert "margins final ±0.5 return (margins.final), auc ±2 return (margins.auc)" in line


def test_unsizable_margin_names_the_key():
    from harness.gate.margins import gate_scale

    with pytest.raises(ConfigError, match=r"m\.toml \[check\.margin\]: cannot size the margin of 'final'"):
        gate_scale(GatePolicy(), budget=100, path="m.toml")
    with pytest.raises(ConfigError, match=r"\[check\.threshold\]: metric 'steps-to-threshold' needs a threshold"):
        gate_scale(GatePolicy(metrics=("steps-to-threshold",)), budget=100)


def test_rule_names_are_checked_and_ignore_small_is_retired():
    from harness.core.config import resolve

    assert resolve(GatePolicy, {"rule": "any-drop"}, key="check").rule == "any-drop"
    with pytest.raises(ConfigError, match=r"unknown rule 'any_drop'\. Did you mean 'any-drop'\?"):
        resolve(GatePolicy, {"rule": "any_drop"}, key="check")
    with pytest.raises(ConfigError, match=r'\[check\.ignore_small\]: was replaced by `rule`: write `rule = "interval-past-margin"`'):
        GatePolicy.check_retired({"ignore_small": True})
