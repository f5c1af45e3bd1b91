"""A suite's runs: the cost estimate that orders them in one pool."""

from __future__ import annotations

import dataclasses
from pathlib import Path

import pytest

from harness.execute.suite import recorded_run_seconds, suite_plans
from harness.manifest.loader import load_manifest
from harness.store.baseline import read_baseline

ROOT = Path(__file__).resolve().parent.parent


def test_run_cost_comes_from_the_recorded_wall_time():
    # The shipped baselines record wall seconds and worker processes: one seed's CPU seconds are
    # wall x workers / seeds (hand-computed from the file's own fields).
    baseline = read_baseline(ROOT / "baselines/cartpole-dqn.json")
    rec = baseline.recording
    assert recorded_run_seconds(baseline) == pytest.approx(
        float(rec["wall_seconds"]) * int(rec["workers"]) / len(baseline.runs))
    assert recorded_run_seconds(dataclasses.replace(baseline, recording={})) is None
    assert recorded_run_seconds(dataclasses.replace(baseline, recording={"wall_seconds": "x", "workers": "2"})) is None
    in_suite = {**rec, "suite": "shipped (5 tasks in one pool: the wall time is the suite's)"}
    assert recorded_run_seconds(dataclasses.replace(baseline, recording=in_suite)) is None


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

