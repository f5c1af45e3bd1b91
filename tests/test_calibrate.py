"""``rlharness calibrate``: A/A splits, false-alarm rate, power figures, recommendation, CLI.

The library tests build curve sets directly (no training); the CLI tests train the fast toy
trainer of ``tests/runner_toys.py`` (a noisy rising curve per seed) through the runner.
The power formula itself is checked against Cohen (1988) in test_stats_power.py; here the
power figures are only checked to be that function's values for the measured spread.
"""

from __future__ import annotations

import dataclasses

import doctest
import importlib
import json
import textwrap
from io import StringIO

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from rich.console import Console

from harness import stats
from harness.store.baseline import SeedCurve
from harness.gate.calibrate import calibrate_curves, split_groups
from harness.gate.calibration_run import plan_calibration
from harness.gate.calibration_set import calibration_manifest
from harness.cli import ExitCode, main
from harness.core.curves import Checkpoint, LearningCurve
from harness.gate.curveset import CurveSet
from harness.manifest.loader import parse_manifest
from harness.gate.metrics import area_under_curve, final_return
from harness.manifest.policy import GatePolicy
from harness.report.calibration import CalibrationReport, render_calibration_markdown
from harness.core.seeding import extend_seeds, plan_seeds

STEPS = (0, 25, 50, 75, 100)


def curve_set(means: np.ndarray, *, noise_last: float = 0.0, rng: np.random.Generator | None = None) -> CurveSet:
    """One seed per row of ``means`` (shape seeds x checkpoints), one return per checkpoint.

    ``noise_last`` adds independent N(0, noise_last) noise to the last checkpoint only, which
    makes "final" noisier than "auc".
    """
    rows = np.array(means, dtype=float)
    if noise_last:
        rows[:, -1] += rng.normal(0.0, noise_last, rows.shape[0])
    seeds = plan_seeds(count=rows.shape[0], root=11)
    runs = tuple(SeedCurve(s, LearningCurve(tuple(Checkpoint(st_, (float(v),)) for st_, v in zip(STEPS, row))))
                 for s, row in zip(seeds, rows))
    return CurveSet("synthetic", "toy-calibration", "sha256:synthetic", {}, {}, runs, STEPS[-1])


def normal_pool(n: int, seed: int) -> np.ndarray:
    rng = np.random.default_rng(np.random.SeedSequence(seed))
    return np.linspace(0.0, 1.0, len(STEPS)) + rng.normal(0.0, 1.0, (n, len(STEPS)))


POLICY = GatePolicy(margin=0.5)


# --- the splits -------------------------------------------------------------------------------

@settings(max_examples=40, deadline=None)
@given(n=st.integers(2, 40), data=st.data(), seed=st.integers(0, 2**32))
def test_split_groups_are_disjoint_and_reproducible(n, data, seed):
    g = data.draw(st.integers(1, n // 2))
    pairs = split_groups(n, g, splits=5, seed=seed)
    assert pairs == split_groups(n, g, splits=5, seed=seed)  # the recorded seed reproduces them
    for a, b in pairs:
        assert len(a) == len(b) == g
        assert not set(a) & set(b)
        assert set(a) | set(b) <= set(range(n))
        assert list(a) == sorted(a) and list(b) == sorted(b)


def test_split_groups_depend_on_the_seed():
    assert split_groups(40, 10, splits=5, seed=1) != split_groups(40, 10, splits=5, seed=2)


@pytest.mark.parametrize(("args", "match"), [
    ((5, 3), "`n_seeds` must be at least twice `group_size` \\(3\\), got 5"),
    ((10, 0), "`group_size` must be an integer >= 1, got 0"),
    ((10, 2, 0), "`splits` must be an integer >= 1, got 0"),
])
def test_split_groups_iv(args, match):
    n, g, *m = args
    with pytest.raises(ValueError, match=match):
        split_groups(n, g, splits=m[0] if m else 3, seed=0)


# --- the calibration set ----------------------------------------------------------------------

MANIFEST = """\
name = "toy"
[task]
id = "CartPole-v1"
[trainer]
use = "runner_toys:toy"
[budget]
env_steps = 100
[evaluation]
every = 25
episodes = 3
episode_seed = 1
[seeds]
{seeds}
[check]
margin = 0.5
"""


def test_calibration_seeds_extend_count_and_root():
    manifest = parse_manifest(MANIFEST.format(seeds="count = 3\nroot = 7"))
    derived = calibration_manifest(manifest, seeds=10)
    assert derived.seeds == plan_seeds(count=10, root=7)  # the manifest's 3 seeds are the first 3
    assert derived.name == "toy-calibration" and derived.settings == manifest.settings
    assert derived.config_hash != manifest.config_hash
    assert len(calibration_manifest(manifest).seeds) == 12  # default: 4 times the manifest's


def test_calibration_seeds_extend_an_explicit_list():
    own = plan_seeds(seeds=[5, 2, 9])
    seeds = extend_seeds(own, 8)
    assert seeds[:3] == own and len(set(seeds)) == 8
    assert all(s.spawn_key for s in seeds[3:])


@pytest.mark.parametrize(("seeds", "count", "match"), [
    (5, 3, "`seeds` must be an integer of at least 6 \\(twice the manifest's 3 seeds"),
    (None, 1, "has 1 seed; the gate's checks need at least 2 seeds per group: raise \\[seeds\\] count"),
])
def test_calibration_manifest_iv(seeds, count, match):
    manifest = parse_manifest(MANIFEST.format(seeds=f"count = {count}\nroot = 7"))
    with pytest.raises(ValueError, match=match):
        calibration_manifest(manifest, seeds=seeds)


def test_plan_refuses_a_target_for_an_unchecked_metric():
    manifest = parse_manifest(MANIFEST.format(seeds="count = 3\nroot = 7"))
    with pytest.raises(ValueError, match="names metric 'steps-to-threshold', which the gate does not check"):
        plan_calibration(manifest, targets={"steps-to-threshold": 100.0})


def test_plan_needs_a_threshold_for_steps_to_threshold():
    # CliffWalking-v1 registers no reward threshold (gymnasium's registry, read by the manifest loader).
    text = MANIFEST.format(seeds="count = 3\nroot = 7")
    text = text.replace('"CartPole-v1"', '"CliffWalking-v1"\nepisode_step_limit = 50')
    manifest = parse_manifest(text.replace("margin = 0.5", 'margin = 0.5\nmetrics = ["steps-to-threshold"]'))
    with pytest.raises(ValueError, match=r"\[check.threshold\]: metric 'steps-to-threshold' needs a threshold"):
        plan_calibration(manifest)


# --- the analysis -----------------------------------------------------------------------------

def test_false_alarm_rate_is_near_alpha_on_exchangeable_seeds():
    # Normal per-seed noise: each one-sided Welch test has size close to alpha (Welch 1947) and Holm
    # keeps the family-wise rate at most alpha (Holm 1979). The rate of one pool of 60 seeds varies
    # around that; a band from alpha/5 to 2 alpha is the sane band (common practice).
    # Under rule any-drop the gate fails exactly on "worse", so its rate is the size of Welch + Holm.
    any_drop = dataclasses.replace(POLICY, rule="any-drop")
    cal = calibrate_curves(curve_set(normal_pool(60, 1)), group_size=5, policy=any_drop, splits=500, split_seed=3)
    assert 0.01 <= cal.false_alarms.estimate <= 0.10
    assert cal.false_alarms.interval.contains(cal.false_alarms.estimate)
    assert cal.called_worse.count == cal.false_alarms.count
    assert sum(cal.metrics[0].verdicts.values()) == 500
    assert "Clopper" in cal.false_alarms.method and "not independent" in cal.false_alarms.method
    # The default rule (drop-beyond-margin) fails only on some of those same splits (Wellek 2010: the
    # shifted null is harder to reject than the null of no difference).
    default = calibrate_curves(curve_set(normal_pool(60, 1)), group_size=5, policy=POLICY, splits=500, split_seed=3)
    assert default.called_worse.count == cal.called_worse.count
    assert default.false_alarms.count <= cal.false_alarms.count


def test_strict_gate_fails_on_inconclusive_splits_not_only_on_worse_ones():
    # Under `strict` an inconclusive check fails the gate (docs/verdicts.md, Gate): with 3 seeds per
    # group and a margin of a tenth of the noise's sd almost every A/A split is inconclusive, so the
    # gate's failure rate is far above alpha while "worse" stays rare.
    policy = GatePolicy(margin=0.1, strict=True)
    cal = calibrate_curves(curve_set(normal_pool(30, 2)), group_size=3, policy=policy, splits=200, split_seed=3)
    assert cal.false_alarms.estimate > 0.8
    assert cal.called_worse.estimate <= 0.10
    lines = " ".join(render_calibration_markdown(cal).split())
    assert "the policy is strict: an inconclusive check fails the gate" in lines
    assert "gate rule drop-beyond-margin;" in lines  # every report names the rule


def test_power_figures_are_those_of_stats_power_for_the_measured_spread():
    curves = curve_set(normal_pool(30, 4))
    cal = calibrate_curves(curves, group_size=6, policy=POLICY, splits=20, split_seed=0, targets={"auc": 0.8})
    final, auc = cal.metrics
    finals = [final_return(r.curve, fraction=POLICY.final_share) for r in curves.runs]
    assert final.sd == pytest.approx(np.std(finals, ddof=1), rel=1e-12)
    assert auc.mean == pytest.approx(np.mean([area_under_curve(r.curve) for r in curves.runs]), rel=1e-12)
    kw = {"alpha": 0.05, "power": 0.8, "alternative": "greater"}
    assert final.detectable == pytest.approx(stats.minimum_detectable_difference(final.sd, 6, final.sd, 6, **kw))
    assert final.seeds_needed == stats.seeds_needed(0.5, final.sd, final.sd, **kw)  # the margin by default
    assert (auc.target, auc.margin) == (0.8, 0.5)
    assert auc.seeds_needed == stats.seeds_needed(0.8, auc.sd, auc.sd, **kw)


def test_recommends_the_metric_with_the_smallest_detectable_share_of_its_target():
    rng = np.random.default_rng(5)
    curves = curve_set(normal_pool(30, 6) * 0.1, noise_last=3.0, rng=rng)  # "final" is the noisy one
    cal = calibrate_curves(curves, group_size=5, policy=POLICY, splits=20, split_seed=0)
    assert cal.recommendation.metric == "auc"
    assert "final" in cal.recommendation.reason
    # A much smaller target for auc than for final turns the recommendation around.
    cal = calibrate_curves(curves, group_size=5, policy=POLICY, splits=20, split_seed=0,
                           targets={"auc": 0.001, "final": 100.0})
    assert cal.recommendation.metric == "final"


def test_constant_metric_detects_any_difference():
    curves = curve_set(np.tile(np.linspace(0.0, 1.0, len(STEPS)), (12, 1)))
    cal = calibrate_curves(curves, group_size=4, policy=POLICY, splits=30, split_seed=0)
    assert [(m.sd, m.detectable, m.seeds_needed) for m in cal.metrics] == [(0.0, 0.0, 2), (0.0, 0.0, 2)]
    assert cal.false_alarms.count == 0 and cal.metrics[0].verdicts["equivalent"] == 30
    assert "every seed scores the same" in cal.recommendation.reason


def test_report_renders_in_80_columns_and_as_markdown():
    cal = calibrate_curves(curve_set(normal_pool(20, 7)), group_size=5, policy=POLICY, splits=50, split_seed=9)
    console = Console(file=StringIO(), width=80, record=True, color_system=None)
    console.print(CalibrationReport(cal))
    text = console.export_text()
    flat = " ".join(text.split())
    assert "50 A/A splits into two disjoint groups of 5 (split seed 9)" in flat
    assert "detectable, 5 seeds per group" in text  # a table row, unbroken
    assert "says nothing about the gate's power against real regressions" in flat
    assert max(len(line) for line in text.splitlines()) <= 80
    md = render_calibration_markdown(cal)
    assert md.startswith("## rl-harness calibration of `toy`")
    assert "| detectable / target |" in md and f"**recommended metric: {cal.recommendation.metric}" in md


# --- the command ------------------------------------------------------------------------------

def cli(*args: str) -> tuple[int, str]:
    console = Console(file=StringIO(), width=200, color_system=None)
    code = main([*args], console=console)
    return code, console.file.getvalue()


@pytest.fixture
def project(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    monkeypatch.setenv("RLHARNESS_CACHE_DIR", str(tmp_path / "cache"))
    (tmp_path / "toy.toml").write_text(MANIFEST.format(seeds="count = 3\nroot = 7"))
    return tmp_path


def test_cli_calibrates_reuses_stored_runs_and_resumes(project):
    code, out = cli("run", "toy.toml", "--workers", "2")
    assert code == ExitCode.OK, out
    code, out = cli("calibrate", "toy.toml", "--seeds", "12", "--splits", "200", "--workers", "2",
                    "--markdown", "out/cal.md")
    assert code == ExitCode.OK, out
    assert "runs: 9 trained, 3 reused" in out  # the manifest's own 3 seeds come from results/toy/
    assert "the gate failed" in out and "recommended metric:" in out
    index = json.loads((project / "results/toy-calibration/index.json").read_text())
    assert [r["seed"] for r in index["runs"]] == [s.label for s in plan_seeds(count=12, root=7)]
    assert "rl-harness calibration of `toy`" in (project / "out/cal.md").read_text()
    code, again = cli("calibrate", "toy.toml", "--seeds", "12", "--splits", "200", "--workers", "2")
    assert code == ExitCode.OK and "runs: 12 resumed" in again
    assert again.split("false alarms:")[1].split("\n")[0] == out.split("false alarms:")[1].split("\n")[0]


@pytest.mark.parametrize(("args", "expected"), [
    (("--seeds", "5"), "--seeds must be an integer of at least 6 (twice the manifest's 3 seeds"),
    (("--splits", "0"), "--splits must be an integer >= 1, got 0"),
    (("--target-difference", "fnal=3"), "--target-difference names 'fnal', which the gate does not check"),
    (("--target-difference", "-1"), "--target-difference needs positive numbers"),
    (("--metrics", "fnal"), "unknown metric 'fnal'. Did you mean 'final'?"),
])
def test_cli_bad_input_names_the_option_and_writes_nothing(project, args, expected):
    code, out = cli("calibrate", "toy.toml", *args)
    assert code == ExitCode.BAD_INPUT, out
    assert expected in " ".join(out.split())
    assert not (project / "results").exists()


def test_cli_failed_runs_exit_3(project):
    (project / "bad.toml").write_text(
        MANIFEST.format(seeds="count = 3\nroot = 7").replace("[budget]", textwrap.dedent("""\
            [trainer.settings]
            bad = ["7/4"]
            mode = "raise"
            [budget]""")))
    code, out = cli("calibrate", "bad.toml", "--seeds", "6", "--splits", "10", "--workers", "2")
    assert code == ExitCode.RUNS_FAILED, out
    assert "seed 7/4" in out and "toy trainer broke on purpose" in out


@pytest.mark.parametrize("module", ["harness.gate.calibrate", "harness.gate.fresh_sets"])
def test_docstring_examples(module):
    result = doctest.testmod(importlib.import_module(module))
    assert result.attempted > 0 and result.failed == 0


def test_cli_reuses_the_run_cache_and_an_earlier_calibration(project):
    code, out = cli("run", "toy.toml", "--workers", "2", "--results", "elsewhere")
    assert code == ExitCode.OK, out
    code, out = cli("calibrate", "toy.toml", "--seeds", "6", "--splits", "20", "--workers", "2")
    assert code == ExitCode.OK and "runs: 3 trained, 3 reused" in out  # the manifest's seeds from the cache
    first = (project / "results/toy-calibration/seed-7-4.json").read_text()
    code, out = cli("calibrate", "toy.toml", "--seeds", "8", "--splits", "20", "--workers", "2")
    assert code == ExitCode.OK and "runs: 2 trained, 6 reused" in out  # another seed count: another config hash
    again = json.loads((project / "results/toy-calibration/seed-7-4.json").read_text())
    assert again["curve"] == json.loads(first)["curve"]
    assert again["spec"]["config_hash"] != json.loads(first)["spec"]["config_hash"]
