"""Issue 13 items 1 and 5: damaged or crafted baselines and results are bad input (exit 2), never a crash.

A checksum proves nothing against an edit (anyone can recompute it), so each crafted file here
carries a valid checksum and must still be refused, naming the field: duplicated seeds,
non-integer steps, boolean or non-numeric returns, negative seeds, a config whose hash is not the
recorded one, fewer runs than the config plans, an empty runs list; and, before any checksum,
NaN/Infinity literals, huge integers and deep nesting. Every case crashed (exit 1 with a
traceback) or was accepted on the code before the fix.
"""

from __future__ import annotations

import copy
import json
from pathlib import Path

import pytest

from crafting import cli as _cli
from crafting import copy_results, record, resign_baseline, resign_results

from harness.cli import ExitCode
from harness.core.spec import sha256_of


@pytest.fixture(scope="module")
def recorded(tmp_path_factory):
    """The toy manifest, its results folder and its baseline (3 seeds)."""
    return record(tmp_path_factory.mktemp("recorded"))


def _baseline(recorded: Path) -> dict:
    return json.loads((recorded / "bl" / "fuzz.json").read_text())


def _verify_with(recorded: Path, tmp_path: Path, text: str) -> tuple[int, str]:
    path = tmp_path / "fuzz.json"
    path.write_text(text)
    return _cli("verify", recorded / "m.toml", "--no-run", "--results", recorded / "res", "--baseline", path)


def _edit(data, edit):
    data = copy.deepcopy(data)
    edit(data)
    return data


BASELINE_EDITS = {
    "duplicated seed": (lambda d: d["runs"].__setitem__(1, copy.deepcopy(d["runs"][0])), "more than once"),
    "non-integer step": (lambda d: d["runs"][0]["curve"]["steps"].__setitem__(1, 25.5), "[curve.steps[1]] must be an integer"),
    "string step": (lambda d: d["runs"][0]["curve"]["steps"].__setitem__(1, "25"), "[curve.steps[1]] must be an integer"),
    "boolean return": (lambda d: d["runs"][0]["curve"]["returns"][1].__setitem__(0, True), "[curve.returns[1]] must be a number"),
    "string return": (lambda d: d["runs"][0]["curve"]["returns"][1].__setitem__(0, "1.5"), "[curve.returns[1]] must be a number"),
    "negative seed": (lambda d: d["runs"][0]["seed"].__setitem__("entropy", -7), "[seed.entropy] must be at least 0"),
    "config edited": (lambda d: d["config"].__setitem__("budget", 90), "[config_hash]"),
    "run dropped": (lambda d: d["runs"].pop(), "[runs] holds 2 seeds"),
    "runs empty": (lambda d: d.__setitem__("runs", []), "[runs] is empty"),
    "huge integer return": (lambda d: d["runs"][0]["curve"]["returns"][1].__setitem__(0, 10**400), "too large for a float"),
    "return near the float limit": (lambda d: d["runs"][0]["curve"]["returns"][1].__setitem__(0, 1e300),
                                    "[curve.returns[1]] must be finite and within"),
}


@pytest.mark.parametrize("case", sorted(BASELINE_EDITS))
def test_a_crafted_baseline_with_a_valid_checksum_is_refused_naming_the_field(recorded, tmp_path, case):
    edit, field = BASELINE_EDITS[case]
    crafted = resign_baseline(_edit(_baseline(recorded), edit), rehash_config=False)  # checksum valid again
    code, text = _verify_with(recorded, tmp_path, crafted)
    assert code == ExitCode.BAD_INPUT, text
    assert field in text and "Traceback" not in text


@pytest.mark.parametrize(
    ("case", "literal", "reason"),
    [("NaN", "NaN", "the literal NaN"), ("Infinity", "-Infinity", "the literal -Infinity"),
     ("overflowing float", "1e999", "overflows a float"), ("huge integer", "9" * 5000, "4300 digits"),
     ("deep nesting", "[" * 100_000 + "]" * 100_000, "nested more than")],
)
def test_non_standard_numbers_and_deep_nesting_are_refused_before_anything_else(recorded, tmp_path, case, literal, reason):
    text = (recorded / "bl" / "fuzz.json").read_text()
    crafted = text.replace('"steps": [0, 25', f'"steps": [{literal}, 25', 1)
    assert crafted != text
    code, out = _verify_with(recorded, tmp_path, crafted)
    assert code == ExitCode.BAD_INPUT, out
    assert reason in out and "Traceback" not in out
    # The same in a results file: compare refuses it naming the file.
    folder = copy_results(recorded / "res", tmp_path / "res")
    seed = folder / "seed-7-0.json"
    seed.write_text(seed.read_text().replace('"step": 25', f'"step": {literal}', 1))
    code, out = _cli("compare", recorded / "res", folder)
    assert code == ExitCode.BAD_INPUT, out
    assert "seed-7-0.json" in out and "Traceback" not in out


RESULT_EDITS = {
    "duplicated seed": ("seed-7-1.json", lambda d: d["spec"].__setitem__("seed", {"entropy": 7, "spawn_key": [0]}),
                        "[runs[1].seed] is '7/1', but"),
    "boolean return": ("seed-7-0.json", lambda d: d["curve"][1]["returns"].__setitem__(0, False), "[curve[1].returns] must be a number"),
    "non-integer step": ("seed-7-0.json", lambda d: d["curve"][1].__setitem__("step", 25.0), "[curve[1].step] must be an integer"),
    "negative seed": ("seed-7-0.json", lambda d: d["spec"]["seed"].__setitem__("entropy", -1), "[seed.entropy] must be at least 0"),
    "config edited": ("seed-7-0.json", lambda d: d["spec"]["config"].__setitem__("pause", 1), "[spec] differs"),
    "index seed relabelled": ("index.json", lambda d: d["runs"][1].__setitem__("seed", "7/9"), "[runs[1].seed]"),
}


@pytest.mark.parametrize("case", sorted(RESULT_EDITS))
def test_a_crafted_results_folder_with_valid_hashes_is_refused_naming_the_field(recorded, tmp_path, case):
    name, edit, field = RESULT_EDITS[case]
    folder = copy_results(recorded / "res", tmp_path / "res")
    data = json.loads((folder / name).read_text())
    (folder / name).write_text(json.dumps(_edit(data, edit)))
    resign_results(folder, rehash_config=False)
    code, text = _cli("compare", recorded / "res", folder)
    assert code == ExitCode.BAD_INPUT, text
    assert field in text and "Traceback" not in text


def test_a_results_folder_that_drops_a_run_says_so(recorded, tmp_path):
    folder = copy_results(recorded / "res", tmp_path / "res")
    index = json.loads((folder / "index.json").read_text())
    index["runs"].pop()
    (folder / "index.json").write_text(json.dumps(index))
    code, text = _cli("compare", recorded / "res", folder)
    assert code == ExitCode.BAD_INPUT, text
    assert "[config_hash]" in text and "2 runs" in text


def test_verify_no_run_refuses_stored_runs_that_differ_from_the_manifests_despite_the_hash(recorded, tmp_path):
    folder = copy_results(recorded / "res", tmp_path / "res")

    def budget(records, index):
        for r in records:
            r["spec"]["budget"] = 99  # every run alike; the recorded config_hash is left as it was

    resign_results(folder, budget, rehash_config=False)
    code, text = _cli("verify", recorded / "m.toml", "--no-run", "--results", folder, "--baselines", recorded / "bl")
    assert code == ExitCode.BAD_INPUT, text
    assert "[config_hash]" in text and "is not the hash of the configuration its 3 runs describe" in text


def test_the_hash_readers_recompute_is_the_manifests_config_hash():
    from harness.core.spec import plan_config
    from harness.manifest.loader import load_manifest

    for path in sorted((Path(__file__).parent.parent / "manifests").glob("*.toml")):
        manifest = load_manifest(path)
        assert sha256_of(plan_config(manifest.runs())) == manifest.config_hash == sha256_of(manifest.resolved_config())


def test_a_duplicated_seed_is_refused_even_with_the_index_relabelled(recorded, tmp_path):
    folder = copy_results(recorded / "res", tmp_path / "res")

    def duplicate(records, index):
        records[1]["spec"]["seed"] = records[0]["spec"]["seed"]
        index["runs"][1]["seed"] = index["runs"][0]["seed"]

    resign_results(folder, duplicate)  # config hash recomputed too: it now plans seed 7/0 twice
    code, text = _cli("compare", recorded / "res", folder)
    assert code == ExitCode.BAD_INPUT, text
    assert "[spec.seed] 7/0 is also the seed of an earlier run" in text
