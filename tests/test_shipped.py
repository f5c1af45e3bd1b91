"""Every shipped manifest is valid, pinned, and has a baseline of its own (issue 7).

Verifying them all from scratch trains every DQN manifest in full, so that lives in
``benchmarks/verify_shipped.py``; here the files are checked for consistency.
"""

from __future__ import annotations

from pathlib import Path

import gymnasium
import pytest

from harness.store.baseline import read_baseline
from harness.manifest.loader import load_manifest

ROOT = Path(__file__).resolve().parents[1]
MANIFESTS = sorted((ROOT / "manifests").glob("*.toml"))


def test_the_shipped_set_covers_the_tasks_the_project_promises():
    tasks = {load_manifest(p).task.id for p in MANIFESTS}
    assert {"CartPole-v1", "FrozenLake-v1"} <= tasks
    assert any(t.startswith("Taxi-") for t in tasks)


@pytest.mark.parametrize("path", MANIFESTS, ids=lambda p: p.stem)
def test_manifest_has_a_matching_baseline_and_pins(path):
    manifest = load_manifest(path)
    assert manifest.pins is not None and manifest.pins.config_hash == manifest.config_hash, \
        f"{path.name}: run `rlharness pin {path.relative_to(ROOT)}`"
    baseline = read_baseline(ROOT / "baselines" / f"{manifest.name}.json", manifest_name=manifest.name)
    assert baseline.config_hash == manifest.config_hash
    assert [r.seed for r in baseline.runs] == list(manifest.baseline_manifest().seeds)  # [seeds] baseline_count
    # The step limit filled in is gymnasium's registered one unless the manifest sets its own
    # (gymnasium's registry, read here).
    registered = gymnasium.spec(manifest.task.id).max_episode_steps
    assert manifest.task.max_episode_steps == registered or registered is None or \
        "episode_step_limit" in path.read_text()


@pytest.mark.parametrize("path", MANIFESTS, ids=lambda p: p.stem)
def test_shipped_gate_policy_is_valid_and_passes_its_own_baseline(path):
    # The whole gate policy validates before any run (margins in each metric's unit, seed counts of
    # manifest and baseline), and the baseline's own curves against themselves pass the gate under
    # every rule: identical data is no evidence of a drop.
    import dataclasses

    from harness.gate.curveset import CurveSet
    from harness.gate.preflight import check_gate_policy
    from harness.gate.verify import verify_sets
    from harness.stats import DROP_RULES

    manifest = load_manifest(path)
    baseline = read_baseline(ROOT / "baselines" / f"{manifest.name}.json", manifest_name=manifest.name)
    scale = check_gate_policy(manifest, baseline=baseline)
    assert [m.metric for m in scale.margins] == list(manifest.check.metrics)
    curves = CurveSet.from_baseline(baseline)
    for rule in DROP_RULES:
        verdict = verify_sets(curves, curves, dataclasses.replace(manifest.check, rule=rule), scale=scale)
        assert verdict.passed and verdict.gate.rule == rule
        assert all(c.estimate == 0.0 for c in verdict.checks)
