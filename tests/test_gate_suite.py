"""The suite's family of checks (Holm over every task) and the cost estimate that orders its runs."""

from __future__ import annotations

import dataclasses
from pathlib import Path

import pytest

from harness.execute.suite import recorded_run_seconds, suite_plans
from harness.gate.suite import _FamilyAdjustment
from harness.manifest.loader import load_manifest
from harness.store.baseline import read_baseline

ROOT = Path(__file__).resolve().parent.parent


def test_family_is_holm_over_every_task():
    # Holm (1979), the textbook example (CHECK-VALUES.md, "Multiple comparisons"):
    # p = (0.01, 0.03, 0.04, 0.005) at alpha 0.05 -> adjusted (0.03, 0.06, 0.06, 0.02), rejecting
    # the first and the last. Split over two tasks, the suite must give each task its share.
    family = _FamilyAdjustment(0.05, 2)
    for task, ps in enumerate([(0.01, 0.03), (0.04, 0.005)]):
        for kind in ("p_worse", "p_better"):
            family.collecting(task)(kind, ps)
    family.adjust()
    first = family.applying(0)("p_worse", (0.01, 0.03))
    second = family.applying(1)("p_worse", (0.04, 0.005))
    assert first.adjusted == pytest.approx((0.03, 0.06)) and first.reject == (True, False)
    assert second.adjusted == pytest.approx((0.06, 0.02)) and second.reject == (False, True)
    assert family.size == 4 and first.method == "Holm over the suite's 4 checks"
    with pytest.raises(RuntimeError, match="changed between the two passes"):
        family.applying(0)("p_worse", (0.02, 0.03))


def test_run_cost_comes_from_the_recorded_wall_time():
    # The shipped baselines record wall seconds and worker processes: one seed's CPU seconds are
    # wall x workers / seeds (hand-computed from the file's own fields).
    baseline = read_baseline(ROOT / "baselines/cartpole-dqn.json")
    rec = baseline.recording
    assert recorded_run_seconds(baseline) == pytest.approx(
        float(rec["wall_seconds"]) * int(rec["workers"]) / len(baseline.runs))
    assert recorded_run_seconds(dataclasses.replace(baseline, recording={})) is None
    assert recorded_run_seconds(dataclasses.replace(baseline, recording={"wall_seconds": "x", "workers": "2"})) is None


def test_suite_plans_order_by_recorded_cost_and_fill_unknown_by_trainer(tmp_path):
    names = ("cartpole-dqn", "acrobot-dqn", "taxi-q")
    manifests = [load_manifest(ROOT / f"manifests/{n}.toml") for n in names]
    baselines = {n: read_baseline(ROOT / f"baselines/{n}.json") for n in names}
    plans = suite_plans(manifests, [tmp_path / n for n in names], baselines)
    assert [p.cost for p in plans] == pytest.approx([recorded_run_seconds(baselines[n]) for n in names])
    # Without acrobot's recording, its cost is cartpole's seconds per step (same trainer) x its budget.
    unknown = {**baselines, "acrobot-dqn": None}
    plans = suite_plans(manifests, [tmp_path / n for n in names], unknown)
    per_step = recorded_run_seconds(baselines["cartpole-dqn"]) / manifests[0].budget
    assert plans[1].cost == pytest.approx(per_step * manifests[1].budget)
    # Nothing recorded anywhere: every run costs its budget in steps.
    plans = suite_plans(manifests, [tmp_path / n for n in names], dict.fromkeys(names))
    assert [p.cost for p in plans] == [float(m.budget) for m in manifests]


def test_shipped_suite_lists_every_shipped_manifest_once():
    from harness.manifest.suite import load_suite

    suite = load_suite([ROOT / "suites/shipped.toml"])
    assert (suite.name, suite.alpha) == ("shipped", 0.05)
    shipped = sorted(p.stem for p in (ROOT / "manifests").glob("*.toml"))
    assert sorted(m.name for m in suite.manifests) == shipped
    assert all((ROOT / "baselines" / f"{m.name}.json").is_file() for m in suite.manifests)
