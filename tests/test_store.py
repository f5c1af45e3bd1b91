"""Results store: versioned JSON per seed plus an index, atomic writes, clear errors on bad files."""

from __future__ import annotations

import json
import os

import struct

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from runner_toys import toy_specs

from harness.core.curves import Checkpoint, LearningCurve
from harness.core.errors import ResultsError
from harness.core.jsondata import MAX_ABS_NUMBER
from harness.store.results import (
    RECORD_SCHEMA,
    ResultSet,
    RunRecord,
    read_record,
    read_results,
    record_file_name,
    record_from_json,
    record_text,
    write_record,
    write_results,
)

VERSIONS = {"numpy": "2.0", "python": "3.11"}


def _curve(offset: float = 0.0) -> LearningCurve:
    # 0.1 + 0.2 is the classic binary-float case (common practice): its repr must survive JSON exactly.
    return LearningCurve(tuple(Checkpoint(s, (0.1 + 0.2 + offset, s / 7.0, -1e-300)) for s in (0, 25, 50, 75, 100)))


def _result_set(n: int = 3, failed: tuple[int, ...] = ()) -> ResultSet:
    records = []
    for spec in toy_specs(n):
        if spec.index in failed:
            records.append(RunRecord(spec, "failed", None, "Traceback ...\nRuntimeError: boom", VERSIONS))
        else:
            records.append(RunRecord(spec, "ok", _curve(spec.index), None, VERSIONS))
    return ResultSet("toy", records[0].spec.config_hash, tuple(records))


def test_round_trip_is_exact_and_per_seed_files_are_deterministic(tmp_path):
    rs = _result_set(3, failed=(1,))
    write_results(tmp_path / "a", rs, timings={0: 1.5, 1: 0.25, 2: 3.0})
    write_results(tmp_path / "b", rs, timings={0: 9.0, 1: 8.0, 2: 7.0})
    back = read_results(tmp_path / "a")
    assert back == rs
    # Python's float repr round-trips every double exactly (Python docs, "Floating Point Arithmetic"): bitwise equal.
    assert back.records[0].curve.checkpoints[0].returns[0] == 0.30000000000000004
    files = sorted(p.name for p in (tmp_path / "a").glob("seed-*.json"))
    assert files == ["seed-7-0.json", "seed-7-1.json", "seed-7-2.json"]
    for name in files:  # wall times differ, per-seed bytes do not
        assert (tmp_path / "a" / name).read_bytes() == (tmp_path / "b" / name).read_bytes()
    index = json.loads((tmp_path / "a" / "index.json").read_text())
    assert [r["wall_seconds"] for r in index["runs"]] == [1.5, 0.25, 3.0]
    assert "wall" not in (tmp_path / "a" / "seed-7-0.json").read_text()


def test_record_file_holds_step_mean_and_returns_per_checkpoint(tmp_path):
    path = write_record(tmp_path, _result_set(1).records[0])
    data = json.loads(path.read_text())
    assert data["schema"] == RECORD_SCHEMA and data["status"] == "ok" and data["failure"] is None
    assert data["curve"][1] == {"step": 25, "mean": pytest.approx((0.1 + 0.2 + 25 / 7.0 - 1e-300) / 3), "returns": [0.30000000000000004, 25 / 7.0, -1e-300]}
    assert data["spec"]["seed"] == {"entropy": 7, "spawn_key": [0]} and data["versions"] == VERSIONS


def test_completed_and_failed_partition_in_seed_order():
    rs = _result_set(4, failed=(0, 2))
    assert [r.spec.index for r in rs.completed()] == [1, 3]
    assert [r.spec.index for r in rs.failed()] == [0, 2]


def test_values_reject_inconsistent_input():
    spec = toy_specs(1)[0]
    with pytest.raises(ValueError, match="`status` must be one of"):
        RunRecord(spec, "done", _curve(), None, VERSIONS)
    with pytest.raises(ValueError, match="status 'ok' must have a curve"):
        RunRecord(spec, "ok", None, None, VERSIONS)
    with pytest.raises(ValueError, match="status 'failed' must give a failure reason"):
        RunRecord(spec, "failed", None, None, VERSIONS)
    recs = _result_set(2).records
    with pytest.raises(ValueError, match="seed order"):
        ResultSet("toy", recs[0].spec.config_hash, recs[::-1])
    with pytest.raises(ValueError, match="belongs to"):
        ResultSet("other", recs[0].spec.config_hash, recs)


def test_missing_folder_names_the_fix(tmp_path):
    with pytest.raises(ResultsError, match=r"index.json: file not found; run the manifest"):
        read_results(tmp_path)


def test_unknown_schema_is_refused(tmp_path):
    write_results(tmp_path, _result_set(1))
    index = json.loads((tmp_path / "index.json").read_text())
    index["schema"] = "rl-harness/results/99"
    (tmp_path / "index.json").write_text(json.dumps(index))
    with pytest.raises(ResultsError, match="unknown results schema 'rl-harness/results/99'"):
        read_results(tmp_path)


def test_edited_run_file_fails_its_checksum(tmp_path):
    write_results(tmp_path, _result_set(2))
    path = tmp_path / "seed-7-1.json"
    path.write_text(path.read_text().replace('"step": 25', '"step": 26'))
    with pytest.raises(ResultsError, match="seed-7-1.json: content does not match its SHA-256"):
        read_results(tmp_path)


def test_truncated_run_file_is_reported(tmp_path):
    path = write_record(tmp_path, _result_set(1).records[0])
    path.write_text(path.read_text()[:40])
    with pytest.raises(ResultsError, match="not valid JSON"):
        read_record(path)


def test_record_with_inconsistent_mean_is_refused(tmp_path):
    path = write_record(tmp_path, _result_set(1).records[0])
    data = json.loads(path.read_text())
    data["curve"][0]["mean"] = 123.0
    path.write_text(json.dumps(data))
    with pytest.raises(ResultsError, match="stored mean 123.0 != mean of returns"):
        read_record(path)


def test_index_pointing_outside_the_folder_is_refused(tmp_path):
    write_results(tmp_path, _result_set(1))
    index = json.loads((tmp_path / "index.json").read_text())
    index["runs"][0]["file"] = "../seed-7-0.json"
    (tmp_path / "index.json").write_text(json.dumps(index))
    with pytest.raises(ResultsError, match="leaves the results folder"):
        read_results(tmp_path)


def test_failed_write_leaves_the_old_file_and_no_temporary(tmp_path, monkeypatch):
    good = _result_set(1).records[0]
    path = write_record(tmp_path, good)
    before = path.read_bytes()
    nan_curve = LearningCurve((Checkpoint(0, (float("nan"),)),))
    with pytest.raises(ValueError, match="must have finite evaluation returns; record it as failed"):
        write_record(tmp_path, RunRecord(good.spec, "ok", nan_curve, None, VERSIONS))

    def broken_replace(src, dst):
        raise OSError("disk full")

    monkeypatch.setattr(os, "replace", broken_replace)
    with pytest.raises(OSError, match="disk full"):
        write_record(tmp_path, RunRecord(good.spec, "ok", _curve(5.0), None, VERSIONS))
    assert path.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == [record_file_name(good.spec)]


@settings(max_examples=60, deadline=None)
@given(st.lists(st.lists(st.floats(-MAX_ABS_NUMBER, MAX_ABS_NUMBER), min_size=1, max_size=4), min_size=1, max_size=6))
def test_any_finite_returns_survive_the_file_bit_for_bit(returns):
    # Any return within the bound data may hold (larger ones are refused: sums of squares would overflow).
    # Python's repr of a float is the shortest string that reads back to the same double
    # (Python docs, "Floating Point Arithmetic"; Steele & White 1990 / Gay 1990 shortest round trip).
    spec = toy_specs(1)[0]
    curve = LearningCurve(tuple(Checkpoint(25 * i, tuple(r)) for i, r in enumerate(returns)))
    back = record_from_json(json.loads(record_text(RunRecord(spec, "ok", curve, None, VERSIONS))), where="memory")
    bits = [struct.pack("<d", r) for c in curve.checkpoints for r in c.returns]
    assert [struct.pack("<d", r) for c in back.curve.checkpoints for r in c.returns] == bits
