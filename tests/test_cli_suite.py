"""Suites through the ``rlharness`` CLI: a suite file, a folder, several manifests; one family, one verdict.

Two small slippery-FrozenLake manifests (6 seeds x 20,000 steps each, about a second on two
workers) are recorded once per module as a suite; each test then runs a variation.
"""

from __future__ import annotations

import json
import re
import textwrap
import xml.etree.ElementTree as ET
from pathlib import Path

import gymnasium
import numpy as np
import pytest
from test_cli_verify import BROKEN_RULE, at, cli, manifest_text  # noqa: F401  (`at` is a fixture: chdir into `project`)
from test_staged_gate import CHECK as STAGED  # [check] final, margin 0.3, stages [3, 6]
from test_staged_gate import _obf_first_look

from harness.cli import ExitCode


def suite_text(members: str, *, name: str = "toys", alpha: float = 0.05) -> str:
    return textwrap.dedent(f"""\
        [suite]
        name = "{name}"
        alpha = {alpha}
        members = {members}
        """)


@pytest.fixture(scope="module")
def project(tmp_path_factory):
    """A project with two manifests in tasks/, a suite file listing them, and both baselines."""
    root = tmp_path_factory.mktemp("suite-project")
    (root / "tasks").mkdir()
    (root / "tasks/a.toml").write_text(manifest_text("lake-a"))
    (root / "tasks/b.toml").write_text(manifest_text("lake-b", step_size=0.2))
    (root / "suites").mkdir()
    (root / "suites/toys.toml").write_text(suite_text('["../tasks/a.toml", "../tasks/b.toml"]'))
    (root / "broken_rule.py").write_text(BROKEN_RULE)
    with pytest.MonkeyPatch.context() as mp:
        mp.chdir(root)
        mp.setenv("RLHARNESS_CACHE_DIR", str(root / "cache"))
        code, out = cli(root, "record", "suites/toys.toml", "--workers", "2")
    assert code == ExitCode.OK, out
    assert "running 12 seeds of 2 tasks (lake-a, lake-b) in one pool" in out
    assert "recorded baseline baselines/lake-a.json: 6 seeds" in out
    assert "recorded baseline baselines/lake-b.json: 6 seeds" in out
    return root


def test_suite_file_gives_one_verdict_and_one_report(at):
    code, out = cli(at, "verify", "suites/toys.toml", "--workers", "2", "--json", "out/s.json",
                    "--junit", "out/s.xml", "--markdown", "out/s.md", "--plot", "out/profile.png")
    assert code == ExitCode.OK, out
    assert "runs: 12 resumed" in out
    assert "suite gate PASSED for toys: 2 of 2 tasks pass; 4 checks" in out
    assert "Holm (1979) over all 4 checks of the 2 tasks at alpha 0.05" in out
    assert "it does not prove the code correct" in out
    assert "1. provenance" not in out  # details only on demand
    report = json.loads((at / "out/s.json").read_text())
    assert report["schema"] == "rlharness.suite/1" and report["passed"] is True
    assert report["family"] == {**report["family"], "method": "Holm", "alpha": 0.05, "checks": 4}
    tasks = report["tasks"]
    assert [t["manifest"] for t in tasks] == ["lake-a", "lake-b"]
    assert all(t["schema"] == "rlharness.verdict/1" and t["exact"]["status"] == "identical" for t in tasks)
    # Normalised scores: 0 = the random policy's return the harness measured (the task's floor),
    # 1 = gymnasium's registered reward threshold of FrozenLake-v1 (read from gymnasium itself).
    agg = report["aggregate"]
    threshold = gymnasium.spec("FrozenLake-v1").reward_threshold
    for task, verdict in zip(agg["tasks"], tasks, strict=True):
        assert task["threshold"] == threshold and 0.0 <= task["floor"] < threshold
        final = next(c for c in verdict["checks"] if c["metric"] == "final")["candidate_values"]
        expected = (np.array(final) - task["floor"]) / (threshold - task["floor"])
        assert task["candidate"] == pytest.approx(expected.tolist())
    # Unchanged reruns: the candidate's aggregates are the baseline's.
    assert agg["candidate"]["mean"]["estimate"] == pytest.approx(agg["baseline"]["mean"]["estimate"])
    assert agg["candidate"]["mean"]["method"] == "stratified percentile"
    suites = ET.parse(at / "out/s.xml").getroot()
    assert suites.tag == "testsuites" and suites.get("failures") == "0"
    cases = {(c.get("classname"), c.get("name")) for c in suites.iter("testcase")}
    for task in ("lake-a", "lake-b"):
        assert {(f"rlharness.{task}", f"check {m}") for m in ("final", "auc")} <= cases
    md = (at / "out/s.md").read_text()
    assert md.startswith("# ✅ rl-harness: suite gate passed for `toys`")
    assert "### ✅ rl-harness: gate passed for `lake-a`" in md and "## Aggregate across tasks" in md
    assert (at / "out/profile.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_folder_and_manifest_list_are_suites_too(at):
    code, out = cli(at, "verify", "tasks", "--no-run", "--details")
    assert code == ExitCode.OK, out
    assert "suite gate PASSED for tasks: 2 of 2 tasks pass" in out
    assert out.count("1. provenance") == 2  # --details: each task's full report
    code, out = cli(at, "verify", "tasks/b.toml", "tasks/a.toml", "--no-run")
    assert code == ExitCode.OK, out
    assert "suite gate PASSED for suite: 2 of 2 tasks pass" in out
    assert out.index("lake-b") < out.index("lake-a")  # the order given


def test_broken_task_fails_the_suite_alone(at):
    (at / "broken").mkdir(exist_ok=True)
    (at / "broken/a.toml").write_text(manifest_text("lake-a"))
    (at / "broken/b.toml").write_text(manifest_text("lake-b", step_size=0.2, use="broken_rule:train"))
    (at / "broken/broken_rule.py").write_text(BROKEN_RULE)
    code, out = cli(at, "verify", "broken", "--workers", "2", "--results", "results-broken", "--json", "out/b.json")
    assert code == ExitCode.GATE_FAILED, out
    assert "failing: lake-b" in out and "lake-b: gate: final fails rule drop-beyond-margin" in out
    report = json.loads((at / "out/b.json").read_text())
    assert report["failing"] == ["lake-b"]
    # One family (Holm 1979): the smallest p-value is multiplied by the number of checks, 4 in
    # the suite against 2 when lake-b is verified alone, so the suite's is twice the single one.
    code, alone = cli(at, "verify", "broken/b.toml", "--no-run", "--results", "results-broken/lake-b",
                      "--json", "out/b1.json")
    assert code == ExitCode.GATE_FAILED, alone
    single = json.loads((at / "out/b1.json").read_text())["checks"]
    suite = next(t for t in report["tasks"] if t["manifest"] == "lake-b")["checks"]
    smallest = min(range(2), key=lambda i: single[i]["pvalue_worse"])
    assert single[smallest]["pvalue_worse"] < 0.01
    assert suite[smallest]["pvalue_worse"] == pytest.approx(2 * single[smallest]["pvalue_worse"])


def test_staged_member_runs_in_stages_inside_the_suite(at):
    # lake-a staged (3 then 6 seeds), lake-b fixed; unchanged reruns. Bonferroni over the 2 tasks: each at
    # alpha / 2 = 0.025. The staged task's first boundary is the Lan & DeMets (1983) O'Brien–Fleming-type
    # spending at 0.025 and information 2/3 (3 candidate vs 6 baseline seeds): 2 - 2 Phi(z_{0.0125} / sqrt(2/3)),
    # computed with scipy.stats.norm (test_staged_gate._obf_first_look).
    (at / "staged").mkdir(exist_ok=True)
    (at / "staged/a.toml").write_text(manifest_text("lake-a", extra=STAGED))
    (at / "staged/b.toml").write_text(manifest_text("lake-b", step_size=0.2))
    code, out = cli(at, "verify", "staged", "--workers", "2", "--results", "results-staged", "--json", "out/st.json",
                    "--junit", "out/st.xml", "--markdown", "out/st.md")
    assert code == ExitCode.OK, out
    flat = " ".join(out.split())
    assert "running 9 seeds of 2 tasks (lake-a, lake-b) in one pool" in flat  # round 1: 3 staged + 6 fixed
    assert "lake-a: stage 1: 3 seeds" in flat
    assert "Bonferroni over the 2 tasks (3 checks) at alpha 0.05: each of the 1 staged task at 0.025" in flat
    report = json.loads((at / "out/st.json").read_text())
    staged, fixed = report["tasks"]
    assert staged["schema"] == "rlharness.staged-verdict/1" and fixed["schema"] == "rlharness.verdict/1"
    assert report["family"]["alpha_per_task"] == 0.025 and report["family"]["checks"] == 3
    assert staged["plan"]["alpha"] == 0.025 and fixed["policy"]["alpha"] == 0.025
    assert staged["seeds"]["used"] == 3 and staged["decision"] in ("equivalent", "futility")
    assert staged["stages"][0]["metrics"]["final"]["nominal_worse"] == pytest.approx(_obf_first_look(0.025, 2 / 3),
                                                                                  rel=1e-6)
    assert [t["manifest"] for t in report["aggregate"]["tasks"]] == ["lake-a", "lake-b"]
    assert len(report["aggregate"]["tasks"][0]["candidate"]) == 3  # the staged task's seeds used
    assert len(json.loads((at / "results-staged/lake-a/index.json").read_text())["runs"]) == 3
    names = [s.get("name") for s in ET.parse(at / "out/st.xml").getroot()]
    assert names == ["rlharness.verify.lake-a", "rlharness.verify.lake-b"]
    assert "### 3. Stages" in (at / "out/st.md").read_text()
    # --stages off: every member fixed, Holm over all checks again.
    code, off = cli(at, "verify", "staged", "--workers", "2", "--results", "results-staged", "--stages", "off")
    assert code == ExitCode.OK and "Holm (1979) over all" in " ".join(off.split()), off


def test_broken_staged_member_stops_at_stage_one_and_fails_the_suite(at):
    (at / "staged-broken").mkdir(exist_ok=True)
    (at / "staged-broken/a.toml").write_text(manifest_text("lake-a"))
    (at / "staged-broken/b.toml").write_text(manifest_text("lake-b", step_size=0.2, use="broken_rule:train",
                                                           extra=STAGED))
    (at / "staged-broken/broken_rule.py").write_text(BROKEN_RULE)
    code, out = cli(at, "verify", "staged-broken", "--workers", "2", "--results", "results-sb", "--json", "out/sb.json")
    assert code == ExitCode.GATE_FAILED, out
    report = json.loads((at / "out/sb.json").read_text())
    assert report["failing"] == ["lake-b"]
    broken = report["tasks"][1]
    assert broken["decision"] == "worse" and broken["seeds"]["used"] == 3
    assert broken["seeds"]["trained_now"] + broken["seeds"]["reused"] == 3  # trained, or from the run cache


def test_staged_member_with_a_bad_plan_exits_2_and_trains_nothing(at):
    (at / "staged-bad").mkdir(exist_ok=True)
    (at / "staged-bad/a.toml").write_text(manifest_text("lake-a", extra=STAGED.replace("[3, 6]", "[3, 5]")))
    (at / "staged-bad/b.toml").write_text(manifest_text("lake-b", step_size=0.2))
    code, out = cli(at, "verify", "staged-bad", "--workers", "2", "--results", "results-bad", "--fresh")
    assert code == ExitCode.BAD_INPUT, out
    assert "staged-bad/a.toml [check.stages]: the last stage must be the manifest's seed count" in " ".join(out.split())
    assert not (at / "results-bad").exists()


def test_run_trains_a_suite_in_one_pool(at):
    code, out = cli(at, "run", "suites/toys.toml", "--results", "results-run", "--workers", "2")
    assert code == ExitCode.OK, out
    assert "lake-a: 6 seeds" in out and "lake-b: 6 seeds" in out
    assert (at / "results-run/lake-a/index.json").is_file() and (at / "results-run/lake-b/index.json").is_file()


@pytest.mark.parametrize(
    ("files", "args", "message"),
    [
        ({"s.toml": suite_text('["a.toml", "gone.toml"]'), "a.toml": manifest_text("x")}, ["s.toml"],
         r"s.toml \[suite.members\[1\]\]: no such manifest file or folder: gone.toml"),
        ({"s.toml": suite_text('["a.toml", "b.toml"]'), "a.toml": manifest_text("x"), "b.toml": manifest_text("x")},
         ["s.toml"], r"s.toml \[suite.members\[1\]\]: two manifests are named 'x': a.toml and b.toml"),
        ({"s.toml": suite_text("[]")}, ["s.toml"], r"s.toml \[suite.members\]: is empty"),
        ({"s.toml": suite_text('["a.toml"]', alpha=0.7), "a.toml": manifest_text("x")}, ["s.toml"],
         r"s.toml \[suite.alpha\]: must lie strictly between 0 and 0.5"),
        ({"empty/notes.txt": "no manifests here"}, ["empty"], r"empty: the folder empty holds no manifest"),
        ({"s.toml": suite_text('["a.toml"]'), "a.toml": manifest_text("x")}, ["s.toml", "a.toml"],
         r"s.toml \[suite.members\]: a suite file must be given alone"),
        ({"a.toml": manifest_text("x"), "b.toml": manifest_text("y")}, ["a.toml", "b.toml", "--baseline", "a.json"],
         r"--baseline names one file, so it works with one manifest only"),
        ({"a.toml": manifest_text("x"), "b.toml": manifest_text("y")}, ["a.toml", "b.toml"],
         r"baselines/x.json"),
        ({"a.toml": manifest_text("x"), "b.toml": manifest_text("y")}, ["a.toml", "b.toml", "--stages", "3,6"],
         r"--stages: the members of a suite have their own seed counts, so one stage list cannot fit them all"),
        ({"a.toml": manifest_text("x"), "b.toml": manifest_text("y")}, ["a.toml", "b.toml", "--baseline-ref", "main"],
         r"--baseline-ref main: .* is not inside a git repository"),
    ],
    ids=["missing-manifest", "same-name", "empty-suite", "bad-alpha", "empty-folder", "suite-not-alone",
         "one-baseline-file", "missing-baseline", "stages",
         "baseline-ref-outside-git"],
)
def test_bad_suite_exits_2_naming_file_and_key_and_trains_nothing(tmp_path, monkeypatch, files, args, message):
    for name, text in files.items():
        (tmp_path / name).parent.mkdir(parents=True, exist_ok=True)
        (tmp_path / name).write_text(text)
    monkeypatch.chdir(tmp_path)
    monkeypatch.setenv("RLHARNESS_CACHE_DIR", str(tmp_path / "cache"))
    code, out = cli(tmp_path, "verify", *args)
    assert code == ExitCode.BAD_INPUT, out
    assert re.search(message, " ".join(out.split())), out
    assert not Path("results").exists() and not Path("cache").exists()
