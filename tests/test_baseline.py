"""Baselines: recording, reading, refusing to overwrite, refusing edited or truncated files."""

from __future__ import annotations

import dataclasses
import json
from pathlib import Path

import pytest

from harness.store.baseline import (
    BASELINE_SCHEMA,
    baseline_from_results,
    default_baseline_path,
    read_baseline,
    write_baseline,
)
from harness.core.curves import Checkpoint, LearningCurve
from harness.core.errors import BaselineError
from harness.core.seeding import plan_seeds
from harness.core.spec import EvaluationPlan, RunSpec, TaskSpec, sha256_of
from harness.store.results import ResultSet, RunRecord

VERSIONS = {"python": "3.11.9", "numpy": "2.1.0"}


@dataclasses.dataclass(frozen=True)
class _Manifest:
    """The parts of ``harness.manifest.loader.Manifest`` a baseline reads."""

    name: str
    seeds: tuple
    config: dict

    @property
    def config_hash(self) -> str:
        return sha256_of(self.config)

    def resolved_config(self) -> dict:
        return self.config

    def baseline_manifest(self) -> _Manifest:
        return self  # no [seeds] baseline_count: record trains the gate's seeds


def _setup(n: int = 3, *, name: str = "toy", failed: int | None = None, grid_break: bool = False):
    seeds = plan_seeds(count=n, root=11)
    manifest = _Manifest(name, seeds, {"task": {"id": "FrozenLake-v1"}, "budget": 200, "seeds": n})
    records = []
    for i, seed in enumerate(seeds):
        spec = RunSpec(name, TaskSpec("FrozenLake-v1"), "tabular-q", {"discount": 0.9}, 200,
                       EvaluationPlan(interval=100, episodes=2), seed, i, manifest.config_hash)
        steps = (0, 100, 200) if not (grid_break and i == 1) else (0, 50, 200)
        curve = LearningCurve(tuple(Checkpoint(s, (0.1 * i + s / 1000, 0.3)) for s in steps))
        if failed == i:
            records.append(RunRecord(spec, "failed", None, "ValueError: boom", VERSIONS))
        else:
            records.append(RunRecord(spec, "ok", curve, None, VERSIONS))
    return manifest, ResultSet(name, manifest.config_hash, tuple(records))


def test_round_trip_keeps_every_float_bitwise(tmp_path):
    manifest, results = _setup()
    baseline = baseline_from_results(manifest, results, recorded="2026-12-01T00:00:00Z")
    path = write_baseline(baseline, default_baseline_path("toy", tmp_path / "baselines"))
    assert path == tmp_path / "baselines" / "toy.json"
    back = read_baseline(path, manifest_name="toy")
    assert back == baseline
    assert back.runs[2].curve.checkpoints[1].returns == (0.1 * 2 + 0.1, 0.3)
    data = json.loads(path.read_text())
    assert data["schema"] == BASELINE_SCHEMA
    assert data["checksum"] == baseline.checksum
    assert data["versions"] == VERSIONS
    assert {"system", "machine", "python"} <= set(data["platform"])


def test_file_is_reviewable_one_checkpoint_per_line(tmp_path):
    manifest, results = _setup()
    path = write_baseline(baseline_from_results(manifest, results), tmp_path / "b.json")
    lines = path.read_text().splitlines()
    assert '"steps": [0, 100, 200]' in "\n".join(lines)
    assert any(line.strip().startswith("[0.1, 0.3]") for line in lines)


def test_refuses_to_overwrite_without_flag(tmp_path):
    manifest, results = _setup()
    path = write_baseline(baseline_from_results(manifest, results, recorded="2026-01-01T00:00:00Z"), tmp_path / "b.json")
    before = path.read_bytes()
    with pytest.raises(BaselineError, match=r"already exists .*'toy' on 2026-01-01.*--overwrite"):
        write_baseline(baseline_from_results(manifest, results), path)
    assert path.read_bytes() == before
    write_baseline(baseline_from_results(manifest, results, recorded="2026-02-02T00:00:00Z"), path, overwrite=True)
    assert read_baseline(path).recorded == "2026-02-02T00:00:00Z"
    assert [p.name for p in tmp_path.iterdir()] == ["b.json"]  # no temporary files left


def test_missing_baseline_says_how_to_record(tmp_path):
    with pytest.raises(BaselineError, match=r"no baseline found; record it with `rlharness record MANIFEST`"):
        read_baseline(tmp_path / "nope.json")


def test_edited_baseline_fails_checksum(tmp_path):
    manifest, results = _setup()
    path = write_baseline(baseline_from_results(manifest, results), tmp_path / "b.json")
    text = path.read_text().replace("[0.1, 0.3]", "[0.2, 0.3]", 1)
    path.write_text(text)
    with pytest.raises(BaselineError, match=r"\[checksum\] does not match .* edited or damaged"):
        read_baseline(path)


def test_reformatted_baseline_stays_valid(tmp_path):
    manifest, results = _setup()
    path = write_baseline(baseline_from_results(manifest, results), tmp_path / "b.json")
    path.write_text(json.dumps(json.loads(path.read_text()), indent=7))
    assert read_baseline(path).manifest == "toy"


def test_truncated_baseline_is_refused(tmp_path):
    manifest, results = _setup()
    path = write_baseline(baseline_from_results(manifest, results), tmp_path / "b.json")
    path.write_bytes(path.read_bytes()[: len(path.read_bytes()) // 2])
    with pytest.raises(BaselineError, match=r"truncated or not valid JSON \(line \d+"):
        read_baseline(path)


def test_baseline_of_another_manifest_is_refused(tmp_path):
    manifest, results = _setup(name="other")
    path = write_baseline(baseline_from_results(manifest, results), tmp_path / "toy.json")
    with pytest.raises(BaselineError, match=r"\[manifest\] is 'other', but it is being used for manifest 'toy'"):
        read_baseline(path, manifest_name="toy")


def test_unknown_schema_is_refused(tmp_path):
    path = tmp_path / "b.json"
    path.write_text(json.dumps({"schema": "something/9"}))
    with pytest.raises(BaselineError, match=r"\[schema\] is 'something/9'"):
        read_baseline(path)


def test_record_needs_every_seed(tmp_path):
    manifest, results = _setup(failed=1)
    with pytest.raises(BaselineError, match=r"seeds 11/1 failed; a baseline needs every seed"):
        baseline_from_results(manifest, results)
    manifest, results = _setup()
    bigger = dataclasses.replace(manifest, seeds=plan_seeds(count=4, root=11))
    with pytest.raises(BaselineError, match=r"1 of the manifest's 4 seeds have no result \(11/3\)"):
        baseline_from_results(bigger, results)


def test_record_refuses_results_of_another_config_or_grid():
    manifest, results = _setup()
    other = dataclasses.replace(manifest, config={"changed": True})
    with pytest.raises(BaselineError, match=r"config hash .* rerun the manifest"):
        baseline_from_results(other, results)
    manifest, results = _setup(grid_break=True)
    with pytest.raises(BaselineError, match=r"different checkpoint grids"):
        baseline_from_results(manifest, results)


def test_default_path_is_under_baselines():
    assert default_baseline_path("cartpole-dqn") == Path("baselines") / "cartpole-dqn.json"
