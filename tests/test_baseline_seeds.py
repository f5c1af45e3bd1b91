"""The baseline's own noise: ``[seeds] baseline_count`` and fresh seed sets verified against the recorded baseline.

Reference values: the ``z`` of a baseline's draw is the two-sample t statistic with
both standard deviations set to the fresh seeds' (so the pooled one equals it), which
``scipy.stats.ttest_ind_from_stats`` computes independently (Student 1908's pooled form);
the interval of the false-alarm rate is Clopper & Pearson (1934), whose values for 0 of 40
and 2 of 40 are taken from ``scipy.stats.binomtest(...).proportion_ci(method="exact")``.
"""

from __future__ import annotations

import dataclasses
import json
import math

import numpy as np
import pytest
from scipy import stats

from harness.cli import ExitCode
from harness.core.curves import Checkpoint, LearningCurve
from harness.core.errors import BaselineError, ManifestError
from harness.core.seeding import plan_seeds
from harness.gate.curveset import CurveSet
from harness.gate.fresh_sets import UNLUCKY_Z, check_fresh_sets, fresh_set_indices
from harness.manifest.loader import parse_manifest
from harness.manifest.policy import GatePolicy
from harness.store.baseline import SeedCurve, read_baseline, write_baseline
from test_calibrate import MANIFEST, cli  # the toy manifest; the CLI driven in-process


def manifest_text(extra: str = "") -> str:
    """test_calibrate's toy manifest (3 seeds of root 7, a fast synthetic trainer) with ``extra`` in [seeds]."""
    return MANIFEST.format(seeds="count = 3\nroot = 7\n" + extra)


# --- the key ------------------------------------------------------------------------------------

def test_baseline_manifest_extends_the_gate_seeds_and_keeps_the_gate_hash():
    plain = parse_manifest(manifest_text(""))
    wide = parse_manifest(manifest_text("baseline_count = 8"))
    assert plain.baseline_manifest() is plain  # no key: record trains the gate's seeds
    assert wide.config_hash == plain.config_hash  # the gate run (verify) is unchanged by the key
    recorded = wide.baseline_manifest()
    assert recorded.seeds == plan_seeds(count=8, root=7)  # the gate's 3 seeds are the first 3
    assert recorded.seeds[:3] == wide.seeds
    assert recorded.name == "toy-baseline" and recorded.config_hash != wide.config_hash
    assert parse_manifest(manifest_text("baseline_count = 3")).baseline_manifest().seeds == plain.seeds


def test_baseline_count_below_the_gate_seeds_is_refused_naming_the_key():
    with pytest.raises(ManifestError, match=r"seeds\.baseline_count.*must be at least the 3 seeds of a gate run"):
        parse_manifest(manifest_text("baseline_count = 2"), path="toy.toml")


# --- fresh sets and the baseline's draw, on synthetic curves -------------------------------------

STEPS = (0, 50, 100)


def curves(values: np.ndarray, *, root: int, label: str) -> CurveSet:
    """One seed per value; every checkpoint returns that value (so final = auc-shape = the value)."""
    seeds = plan_seeds(count=len(values), root=root)
    runs = tuple(SeedCurve(s, LearningCurve(tuple(Checkpoint(st, (float(v),)) for st in STEPS)))
                 for s, v in zip(seeds, values))
    return CurveSet(label, "toy", "sha256:" + label, {}, {}, runs, STEPS[-1])


def test_fresh_set_indices_skip_the_baseline_seeds_and_drop_a_short_rest():
    assert fresh_set_indices(10, (0, 5), 3) == ((1, 2, 3), (4, 6, 7))
    assert fresh_set_indices(4, (0, 1, 2), 2) == ()


def test_the_draw_z_is_the_two_sample_t_with_the_fresh_sd():
    rng = np.random.default_rng(3)
    pool = curves(rng.normal(0.0, 1.0, 60), root=1, label="pool")
    base = curves(rng.normal(0.4, 1.0, 10), root=2, label="base")
    policy = GatePolicy(margin=0.5, metrics=("final",))
    check = check_fresh_sets(base, pool, group_size=10, policy=policy)
    draw = check.draws[0]
    b = np.array([r.curve.checkpoints[-1].returns[0] for r in base.runs])
    f = np.array([r.curve.checkpoints[-1].returns[0] for r in pool.runs])
    sd = f.std(ddof=1)
    reference = stats.ttest_ind_from_stats(b.mean(), sd, 10, f.mean(), sd, 60, equal_var=True).statistic
    assert draw.z == pytest.approx(reference, rel=1e-12)
    set_means = sorted(f[i:i + 10].mean() for i in range(0, 60, 10))
    assert draw.set_means == pytest.approx(set_means)
    assert draw.percentile == pytest.approx(100 * sum(m < b.mean() for m in set_means) / 6)
    assert check.false_alarms.trials == 6  # none of the pool's seeds is the baseline's: all 60 are fresh


def test_a_high_baseline_is_flagged_and_fails_every_fresh_set():
    rng = np.random.default_rng(5)
    pool = curves(rng.normal(0.0, 0.1, 40), root=1, label="pool")
    base = curves(rng.normal(3.0, 0.1, 10), root=2, label="base")  # a wildly lucky draw
    check = check_fresh_sets(base, pool, group_size=10, policy=GatePolicy(margin=0.5, metrics=("final",)))
    assert check.false_alarms.count == check.false_alarms.trials == 4
    assert check.unlucky == ("final",) and check.draws[0].z > UNLUCKY_Z
    assert check.verdicts == {"final": {"worse": 4}} and check.failing == {"final": 4}
    assert "the baseline is high, so unchanged reruns look worse" in check.draws[0].reading
    ci = stats.binomtest(4, 4).proportion_ci(method="exact")
    assert (check.false_alarms.interval.low, check.false_alarms.interval.high) == pytest.approx((ci.low, ci.high))


def test_an_honest_baseline_keeps_false_alarms_near_alpha():
    """A baseline drawn like the pool: the gate fails about alpha of the fresh sets or fewer."""
    rng = np.random.default_rng(11)
    pool = curves(rng.normal(0.0, 1.0, 410), root=1, label="pool")
    base = first_runs(pool, slice(0, 10))  # the baseline is the pool's first 10 seeds
    check = check_fresh_sets(base, pool, group_size=10, policy=GatePolicy(margin=0.5, metrics=("final",)))
    assert check.false_alarms.trials == 40  # the baseline's own seeds are left out
    assert abs(check.draws[0].z) < UNLUCKY_Z and not check.unlucky
    # At alpha 0.05, P(X >= 7 | n=40) = 0.0034 (binomial tail, scipy.stats.binom.sf(6, 40, 0.05)).
    assert check.false_alarms.count <= 6


def first_runs(cs: CurveSet, part: slice) -> CurveSet:
    return dataclasses.replace(cs, runs=cs.runs[part])


def test_no_fresh_set_is_a_clear_error():
    pool = curves(np.zeros(12), root=1, label="pool")
    with pytest.raises(ValueError, match="holds 2 seeds besides the baseline's 10, fewer than one fresh set of 10"):
        check_fresh_sets(first_runs(pool, slice(0, 10)), pool, group_size=10,
                         policy=GatePolicy(margin=0.5))


# --- end to end through the CLI -------------------------------------------------------------------

@pytest.fixture
def project(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    monkeypatch.setenv("RLHARNESS_CACHE_DIR", str(tmp_path / "cache"))
    (tmp_path / "toy.toml").write_text(manifest_text("baseline_count = 6"))
    return tmp_path


def test_record_trains_the_baseline_count_and_verify_checks_the_shared_seeds(project):
    code, out = cli("record", "toy.toml", "--workers", "2")
    assert code == ExitCode.OK, out
    assert "running 6 seeds of toy-baseline" in out and "6 seeds" in out
    baseline = read_baseline(project / "baselines/toy.json")
    manifest = parse_manifest((project / "toy.toml").read_text())
    assert [r.seed for r in baseline.runs] == list(plan_seeds(count=6, root=7))
    assert baseline.config_hash == manifest.config_hash  # the gate's hash: the exact check runs
    code, out = cli("verify", "toy.toml", "--workers", "2", "--json", "v.json")
    assert code == ExitCode.OK, out
    assert "every seed's curve is bitwise identical to the baseline" in out  # the 3 shared seeds
    report = json.loads((project / "v.json").read_text())
    assert {len(c["candidate_values"]) for c in report["checks"]} == {3}
    assert {len(c["baseline_values"]) for c in report["checks"]} == {6}


def test_calibrate_verifies_fresh_sets_against_the_recorded_baseline(project):
    code, out = cli("record", "toy.toml", "--workers", "2")
    assert code == ExitCode.OK, out
    code, out = cli("calibrate", "toy.toml", "--seeds", "12", "--splits", "50", "--workers", "2",
                    "--markdown", "cal.md")
    assert code == ExitCode.OK, out
    text = " ".join(out.split())
    assert "against the recorded baseline (6 seeds)" in text and "of 2 fresh sets of 3 seeds" in text
    assert "baseline draw, final: baseline mean" in text and "z = " in text
    assert "fresh sets of 3 seeds failed the gate" in (project / "cal.md").read_text()
    code, out = cli("calibrate", "toy.toml", "--splits", "50", "--workers", "2")  # default: 6 + 4 x 3 seeds
    assert code == ExitCode.OK, out
    assert "of 4 fresh sets of 3 seeds" in " ".join(out.split())
    code, out = cli("calibrate", "toy.toml", "--seeds", "8", "--splits", "50", "--workers", "2")
    assert code == ExitCode.BAD_INPUT, out
    assert "ask for at least 9 seeds (--seeds)" in " ".join(out.split())
    code, out = cli("calibrate", "toy.toml", "--seeds", "8", "--splits", "50", "--workers", "2", "--no-baseline")
    assert code == ExitCode.OK and "no recorded baseline was given" in " ".join(out.split())


def test_calibrate_refuses_a_baseline_of_another_configuration(project):
    code, out = cli("record", "toy.toml", "--workers", "2")
    assert code == ExitCode.OK, out
    (project / "other.toml").write_text(manifest_text("").replace("episodes = 3", "episodes = 4"))
    code, out = cli("calibrate", "other.toml", "--baseline", "baselines/toy.json", "--seeds", "12")
    assert code == ExitCode.BAD_INPUT, out
    assert "recorded with another configuration (evaluation differ)" in " ".join(out.split())
    assert not (project / "results/toy-calibration").exists()


def test_a_constant_pool_and_an_equal_baseline_give_z_zero():
    pool = curves(np.full(20, 0.5), root=1, label="pool")
    base = curves(np.full(10, 0.5), root=2, label="base")
    draw = check_fresh_sets(base, pool, group_size=10, policy=GatePolicy(margin=0.5, metrics=("final",))).draws[0]
    assert draw.z == 0.0 and math.isfinite(draw.z)


def test_a_baseline_may_extend_its_config_seeds_only_as_baseline_count_does(project):
    code, out = cli("record", "toy.toml", "--workers", "2")
    assert code == ExitCode.OK, out
    baseline = read_baseline(project / "baselines/toy.json")  # 3 gate seeds of root 7, then 7/3-7/5: accepted
    stray = SeedCurve(plan_seeds(count=1, root=8)[0], baseline.runs[-1].curve)  # a seed of another root
    write_baseline(dataclasses.replace(baseline, runs=(*baseline.runs[:-1], stray)), project / "stray.json")
    with pytest.raises(BaselineError, match=r"\[runs\] holds 6 seeds .* but \[config.seeds\] plans 6 .* dropped, added"):
        read_baseline(project / "stray.json")
