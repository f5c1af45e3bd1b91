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
from io import StringIO
from pathlib import Path

import pytest
from rich.console import Console

from harness.cli import ExitCode, main
from harness.core.spec import sha256_of

MANIFEST = """
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
[seeds]
count = 3
root = 7
"""


def _cli(*argv: str) -> tuple[int, str]:
    out = StringIO()
    code = main([str(a) for a in argv], console=Console(file=out, width=400, color_system=None))
    return code, " ".join(out.getvalue().split())


@pytest.fixture(scope="module")
def recorded(tmp_path_factory):
    """A manifest, its results folder and its baseline (toy trainer, 3 seeds)."""
    root = tmp_path_factory.mktemp("recorded")
    (root / "m.toml").write_text(MANIFEST)
    code, text = _cli("record", root / "m.toml", "--results", root / "res", "--baselines", root / "bl", "--no-cache")
    assert code == ExitCode.OK, text
    return root


def _resign(data: dict) -> dict:
    data = {k: v for k, v in data.items() if k != "checksum"}
    return {**data, "checksum": sha256_of(data)}


def _baseline(recorded: Path) -> dict:
    return json.loads((recorded / "bl" / "toy.json").read_text())


def _verify_with(recorded: Path, tmp_path: Path, text: str) -> tuple[int, str]:
    path = tmp_path / "toy.json"
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
}


@pytest.mark.parametrize("case", sorted(BASELINE_EDITS))
def test_a_crafted_baseline_with_a_valid_checksum_is_refused_naming_the_field(recorded, tmp_path, case):
    edit, field = BASELINE_EDITS[case]
    code, text = _verify_with(recorded, tmp_path, json.dumps(_resign(_edit(_baseline(recorded), edit))))
    assert code == ExitCode.BAD_INPUT, text
    assert field in text and "Traceback" not in text


@pytest.mark.parametrize(
    ("case", "literal", "reason"),
    [("NaN", "NaN", "the literal NaN"), ("Infinity", "-Infinity", "the literal -Infinity"),
     ("overflowing float", "1e999", "overflows a float"), ("huge integer", "9" * 5000, "4300 digits"),
     ("deep nesting", "[" * 100_000 + "]" * 100_000, "nested more than")],
)
def test_non_standard_numbers_and_deep_nesting_are_refused_before_anything_else(recorded, tmp_path, case, literal, reason):
    text = (recorded / "bl" / "toy.json").read_text()
    crafted = text.replace('"steps": [0, 25', f'"steps": [{literal}, 25', 1)
    assert crafted != text
    code, out = _verify_with(recorded, tmp_path, crafted)
    assert code == ExitCode.BAD_INPUT, out
    assert reason in out and "Traceback" not in out
    # The same in a results file: compare refuses it naming the file.
    folder = tmp_path / "res"
    folder.mkdir()
    for f in (recorded / "res").glob("*.json"):
        (folder / f.name).write_text(f.read_text())
    seed = folder / "seed-7-0.json"
    seed.write_text(seed.read_text().replace('"step": 25', f'"step": {literal}', 1))
    code, out = _cli("compare", recorded / "res", folder)
    assert code == ExitCode.BAD_INPUT, out
    assert "seed-7-0.json" in out and "Traceback" not in out


def _resign_results(folder: Path) -> None:
    """Recompute the index's SHA-256 of every seed file, as anyone editing the folder can."""
    import hashlib

    index = json.loads((folder / "index.json").read_text())
    for run in index["runs"]:
        run["sha256"] = hashlib.sha256((folder / run["file"]).read_bytes()).hexdigest()
    (folder / "index.json").write_text(json.dumps(index))


RESULT_EDITS = {
    "duplicated seed": ("seed-7-1.json", lambda d: d["spec"].__setitem__("seed", {"entropy": 7, "spawn_key": [0]}),
                        "[spec.seed] 7/0 is also the seed"),
    "boolean return": ("seed-7-0.json", lambda d: d["curve"][1]["returns"].__setitem__(0, False), "[curve[1].returns] must be a number"),
    "non-integer step": ("seed-7-0.json", lambda d: d["curve"][1].__setitem__("step", 25.0), "[curve[1].step] must be an integer"),
    "negative seed": ("seed-7-0.json", lambda d: d["spec"]["seed"].__setitem__("entropy", -1), "[seed.entropy] must be at least 0"),
    "config edited": ("seed-7-0.json", lambda d: d["spec"]["config"].__setitem__("pause", 1), "[config_hash]"),
}


@pytest.mark.parametrize("case", sorted(RESULT_EDITS))
def test_a_crafted_results_folder_with_valid_hashes_is_refused_naming_the_field(recorded, tmp_path, case):
    name, edit, field = RESULT_EDITS[case]
    folder = tmp_path / "res"
    folder.mkdir()
    for f in (recorded / "res").glob("*.json"):
        (folder / f.name).write_text(f.read_text())
    data = json.loads((folder / name).read_text())
    (folder / name).write_text(json.dumps(_edit(data, edit)))
    _resign_results(folder)
    code, text = _cli("compare", recorded / "res", folder)
    assert code == ExitCode.BAD_INPUT, text
    assert field in text and "Traceback" not in text


def test_a_results_folder_that_drops_a_run_says_so(recorded, tmp_path):
    folder = tmp_path / "res"
    folder.mkdir()
    for f in (recorded / "res").glob("*.json"):
        (folder / f.name).write_text(f.read_text())
    index = json.loads((folder / "index.json").read_text())
    index["runs"].pop()
    (folder / "index.json").write_text(json.dumps(index))
    code, text = _cli("compare", recorded / "res", folder)
    assert code == ExitCode.BAD_INPUT, text
    assert "[config_hash]" in text and "2 runs" in text


def test_verify_no_run_refuses_stored_runs_that_differ_from_the_manifests_despite_the_hash(recorded, tmp_path):
    folder = tmp_path / "res"
    folder.mkdir()
    for f in (recorded / "res").glob("*.json"):
        (folder / f.name).write_text(f.read_text())
    data = json.loads((folder / "seed-7-2.json").read_text())
    data["spec"]["budget"] = 99  # the recorded config_hash is left as it was
    (folder / "seed-7-2.json").write_text(json.dumps(data))
    _resign_results(folder)
    code, text = _cli("verify", recorded / "m.toml", "--no-run", "--results", folder, "--baselines", recorded / "bl")
    assert code == ExitCode.BAD_INPUT, text
    assert "seed 7/2 is not the manifest's run #2" in text


def test_the_hash_readers_recompute_is_the_manifests_config_hash():
    from harness.core.spec import plan_config
    from harness.manifest.loader import load_manifest

    for path in sorted((Path(__file__).parent.parent / "manifests").glob("*.toml")):
        manifest = load_manifest(path)
        assert sha256_of(plan_config(manifest.runs())) == manifest.config_hash == sha256_of(manifest.resolved_config())
