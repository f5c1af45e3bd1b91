"""The staged gate end to end through ``rlharness verify``: stages, early stops, reuse, bad plans.

The small slippery-FrozenLake manifest of test_cli_verify.py (6 seeds x 20,000 steps, tabular
Q-learning) is recorded
once per module; the staged gate then looks after 3 and after 6 seeds. The statistics of each
look are checked against scipy.stats (Welch's t-test, ``ttest_ind(equal_var=False)``) and the
first look's boundary against the Lan–DeMets O'Brien–Fleming-type spending function
(Lan & DeMets 1983: alpha*(t) = 2 - 2 Phi(z_{alpha/2} / sqrt(t)); at the first look the
nominal level is the alpha spent).
"""

from __future__ import annotations

import json
import math
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pytest
from crafting import cli  # exit code and the terminal output with its line wrapping undone
from scipy import stats as sps

from harness.cli import ExitCode
from test_cli_verify import BROKEN_RULE, FLAKY, _final_values, _snapshot, manifest_text
from test_cli_verify import at  # noqa: F401 (a fixture: it uses this module's `project`)

CHECK = """
    [check]
    metrics = ["final"]
    margin = 0.3
    stages = [3, 6]
    """


def lake(*, use: str = "tabular-q", check: str = CHECK, count: int = 6) -> str:
    """The 6-seed FrozenLake manifest of test_cli_verify.py, named "lake", with a staged [check]."""
    return manifest_text("lake", use=use, extra=check).replace("count = 6", f"count = {count}")


@pytest.fixture(scope="module")
def project(tmp_path_factory):
    """A project folder with the manifest, the broken trainer and the recorded 6-seed baseline."""
    root = tmp_path_factory.mktemp("staged")
    (root / "lake.toml").write_text(lake())
    (root / "broken_rule.py").write_text(BROKEN_RULE)
    (root / "broken.toml").write_text(lake(use="broken_rule:train"))
    (root / "flaky.py").write_text(FLAKY)
    with pytest.MonkeyPatch.context() as mp:
        mp.chdir(root)
        mp.setenv("RLHARNESS_CACHE_DIR", str(root / "cache"))
        code, out = cli("record", "lake.toml", "--workers", "2")
    assert code == ExitCode.OK, out
    return root


def _sources(folder: Path) -> list[str]:
    return [run.get("source") for run in json.loads((folder / "index.json").read_text())["runs"]]


def _welch(cand: np.ndarray, base: np.ndarray, shift: float, alternative: str) -> float:
    """Welch's one-sided p-value of the candidate shifted by ``shift`` (scipy.stats.ttest_ind, equal_var=False)."""
    return float(sps.ttest_ind(cand + shift, base, equal_var=False, alternative=alternative).pvalue)


def _obf_first_look(alpha: float, information: float) -> float:
    """The nominal level of the first look: the alpha an O'Brien–Fleming-type spending function has spent
    by ``information`` (Lan & DeMets 1983: 2 - 2 Phi(z_{alpha/2} / sqrt(t))), by scipy.stats.norm."""
    return 2 - 2 * sps.norm.cdf(sps.norm.ppf(1 - alpha / 2) / math.sqrt(information))


def test_unchanged_rerun_stops_early_as_equivalent(at):
    code, out = cli("verify", "lake.toml", "--workers", "2", "--json", "out/eq.json", "--markdown", "out/eq.md",
                    "--junit", "out/eq.xml")
    assert code == ExitCode.OK, out
    assert "every metric crossed its equivalence boundaries at stage 1 of 2 (3 candidate seeds)" in out
    assert "3 of 6 seeds trained, 3 saved (50%) against the fixed gate" in out
    # A first stage under 10 seeds is flagged: Welch's t is liberal there on two-point metrics (our simulation).
    assert "caution: the first stage has 3 seeds" in out and "caution: the first stage" in (at / "out/eq.md").read_text()
    report = json.loads((at / "out/eq.json").read_text())
    assert report["schema"] == "rlharness.staged-verdict/1" and report["passed"] is True
    assert report["decision"] == "equivalent" and len(report["stages"]) == 1
    assert report["seeds"] == {"used": 3, "fixed": 6, "saved": 3, "baseline": 6, "trained_now": 0, "reused": 3}
    assert report["exact"]["status"] == "identical"  # the bitwise check ran on the 3 seeds used
    # The look against scipy.stats: Welch's one-sided test of "worse" and the two one-sided tests.
    base = np.array(_final_values(at / "baselines/lake.json"))
    cand = base[:3]  # an unchanged rerun reproduces the baseline's first seeds bitwise
    look = report["stages"][0]["metrics"]["final"]
    assert look["estimate"] == pytest.approx(cand.mean() - base.mean(), abs=1e-12)
    # The default rule (drop-beyond-margin) tests H0: drop <= margin, i.e. Welch on the candidate shifted up by it.
    assert report["plan"]["shifts"] == {"final": 0.3} and report["gate"]["rule"] == "drop-beyond-margin"
    assert look["pvalue_worse"] == pytest.approx(_welch(cand, base, 0.3, "less"), rel=1e-9)
    tost = max(_welch(cand, base, 0.3, "greater"), _welch(cand, base, -0.3, "less"))
    assert look["pvalue_equivalence"] == pytest.approx(tost, rel=1e-9)
    # Look 1, 3 vs 6 baseline seeds: information 1/(1/6 + 1/3) of the last look's 1/(1/6 + 1/6) = 2/3.
    assert look["nominal_worse"] == pytest.approx(_obf_first_look(0.05, 2 / 3), rel=1e-6)
    assert "| 1 | 3/6 | final |" in (at / "out/eq.md").read_text()
    suite = ET.parse(at / "out/eq.xml").getroot()
    assert suite.get("failures") == "0" and {c.get("name") for c in suite.iter("testcase")} >= {"stage 1", "check final"}


def test_futility_stop_passes_and_is_reported_apart_from_equivalence(at):
    # A margin for which the first look (3 of 6 seeds) cannot show equivalence but rules out a drop of two
    # margins (drop-beyond-margin: shift = margin). The thresholds come from scipy.stats: TOST against the
    # O'Brien–Fleming-type spending at information 2/3 (Lan & DeMets 1983), and futility at the one interim
    # look, which spends all of stage_futility = 0.05 there (a one-look design is the fixed test).
    base = np.array(_final_values(at / "baselines/lake.json"))
    cand = base[:3]  # an unchanged rerun reproduces the baseline's first seeds bitwise
    nominal_eq = _obf_first_look(0.05, 2 / 3)
    window = [m for m in np.linspace(0.005, 0.5, 200)
              if max(_welch(cand, base, m, "greater"), _welch(cand, base, -m, "less")) >= 1.05 * nominal_eq
              and _welch(cand, base, 2 * m, "greater") < 0.95 * 0.05]
    assert window, "no margin separates futility from equivalence on this baseline"
    margin = f"{window[len(window) // 2]:.6g}"
    code, out = cli("verify", "lake.toml", "--workers", "2", "--margin", margin, "--json", "out/fut.json",
                    "--markdown", "out/fut.md")
    assert code == ExitCode.OK, out
    report = json.loads((at / "out/fut.json").read_text())
    assert report["decision"] == "futility" and report["seeds"]["saved"] == 3
    assert report["outcomes"][0]["verdict"] == "not-worse"
    look = report["stages"][0]["metrics"]["final"]
    assert look["nominal_futility"] == pytest.approx(0.05, rel=1e-6)
    assert look["pvalue_futility"] == pytest.approx(_welch(cand, base, 2 * float(margin), "greater"), rel=1e-9)
    assert "crossed its futility or equivalence boundaries at stage 1 of 2 (3 candidate seeds) (futility: not " \
           "equivalence)" in out
    assert "this is not a proof of equivalence" in out and "equivalent within" not in out
    assert "| futility: p vs boundary |" in (at / "out/fut.md").read_text()
    # stage_futility = 0 turns the stop off: the same margin then runs to the last stage.
    (at / "nofut.toml").write_text(lake(check=CHECK + "stage_futility = 0\n"))
    code, out = cli("verify", "nofut.toml", "--workers", "2", "--margin", margin, "--json", "out/nofut.json")
    report = json.loads((at / "out/nofut.json").read_text())
    assert code == ExitCode.OK and report["plan"]["futility_nominal"] is None, out
    assert report["stages"][0]["decision"] == "continue"


def test_broken_trainer_stops_early_as_worse_and_a_rerun_reuses_its_seeds(at):
    code, out = cli("verify", "broken.toml", "--workers", "2", "--results", "results/broken", "--junit",
                    "out/broken.xml", "--json", "out/broken.json")
    assert code == ExitCode.GATE_FAILED, out
    assert "final crossed the 'worse' boundary at stage 1 of 2 (3 candidate seeds)" in out
    assert "exact check (seeds trained): skipped: the configuration differs" in out
    report = json.loads((at / "out/broken.json").read_text())
    assert report["seeds"]["trained_now"] == 3 and report["seeds"]["saved"] == 3
    assert "final fails rule drop-beyond-margin (the drop is significantly larger than the margin) at stage 1" in out
    assert _sources(at / "results/broken") == ["trained"] * 3  # the index lists the stage's seeds only
    failed = [c.get("name") for c in ET.parse(at / "out/broken.xml").getroot().iter("testcase")
              if c.find("failure") is not None]
    assert failed == ["check final"]
    # The same command again: the stopped gate's seeds are resumed from its folder, none trained.
    code, again = cli("verify", "broken.toml", "--workers", "2", "--results", "results/broken", "--json",
                      "out/again.json")
    assert code == ExitCode.GATE_FAILED, again
    assert "stage 1: 3 seeds (0 trained, 3 reused)" in again
    assert _sources(at / "results/broken") == ["resumed"] * 3
    # Another folder: the run cache holds them.
    code, cached = cli("verify", "broken.toml", "--workers", "2", "--results", "results/broken-2")
    assert code == ExitCode.GATE_FAILED, cached
    assert _sources(at / "results/broken-2") == ["cache"] * 3
    rerun = json.loads((at / "out/again.json").read_text())
    assert rerun["stages"][0]["metrics"] == report["stages"][0]["metrics"]


def test_undecided_look_trains_only_the_next_seeds_and_ends_without_the_fixed_worse_test(at):
    # A margin too narrow for 3 or 6 seeds: no stop, the last stage reports inconclusive and passes
    # (not strict); --fresh trains every seed it uses, stage 2 only the 3 new ones.
    code, out = cli("verify", "lake.toml", "--workers", "2", "--fresh", "--no-cache", "--margin", "0.001",
                    "--json", "out/final.json")
    assert code == ExitCode.OK, out
    report = json.loads((at / "out/final.json").read_text())
    assert [s["trained"] for s in report["stages"]] == [3, 3]
    assert [s["decision"] for s in report["stages"]] == ["continue", "final"]
    assert report["outcomes"][0]["verdict"] == "inconclusive" and report["seeds"]["saved"] == 0
    assert "the last stage was reached without a decision at stage 2 of 2" in out
    code, out = cli("verify", "lake.toml", "--margin", "0.001", "--strict", "--rule", "any-drop", "--json",
                    "out/strict.json")
    assert code == ExitCode.GATE_FAILED and "final is inconclusive at the last stage and the policy is strict" in out
    assert json.loads((at / "out/strict.json").read_text())["plan"]["shifts"] == {"final": 0.0}  # any-drop: H0 no drop


def test_failed_seed_stops_the_stage_with_runs_failed(at):
    (at / "flaky.toml").write_text(lake(use="flaky:train"))
    code, out = cli("verify", "flaky.toml", "--workers", "2", "--results", "results/flaky", "--json", "out/flaky.json")
    assert code == ExitCode.RUNS_FAILED, out
    assert "1 of 3 runs failed" in out and "injected failure for the second seed" in out
    assert not (at / "out/flaky.json").exists()


@pytest.mark.parametrize(("manifest", "args", "message"), [
    (lake(check=CHECK.replace("[3, 6]", "[3, 3]")), (),
     "bad.toml [check.stages]: must be strictly increasing, got [3, 3]"),
    (lake(check=CHECK.replace("[3, 6]", "[3, 5]")), (),
     "bad.toml [check.stages]: the last stage must be the manifest's seed count ([seeds] count = 6), got [3, 5]"),
    (lake(check=CHECK.replace("[3, 6]", "[6]")), (), "bad.toml [check.stages]: needs at least 2 stages"),
    (lake(check=CHECK + 'stage_design = "pocok"\n'), (), "[check.stage_design]: unknown design 'pocok'"),
    (lake(check=CHECK + 'stage_futility = 0.7\n'), (), "[check.stage_futility]: must be a number in [0, 0.5), got 0.7"),
    (lake(check=CHECK + 'stage_futility_design = "pocok"\n'), (),
     "[check.stage_futility_design]: unknown design 'pocok'"),
    (lake(), ("--stages", "6,3"), "--stages: must be strictly increasing, got [6, 3]"),
    (lake(), ("--stages", "3,six"), "--stages: must be comma-separated seed counts"),
    (lake(), ("--stages", "2,4"), "--stages: the last stage must be the manifest's seed count"),
    (lake(count=10, check=CHECK.replace("[3, 6]", "[5, 10]")), (),
     "[check.stages]: the baseline baselines/lake.json holds 6 seeds, fewer than the last stage (10)"),
    (lake(check=CHECK.replace('["final"]', '["steps-to-threshold"]')), (),
     "bad.toml [check.metrics]: the staged gate cannot check steps-to-threshold"),
    (lake(check=CHECK + 'rule = "interval-past-margin"\n'), (),
     "bad.toml [check.rule]: the staged gate applies rule drop-beyond-margin"),
])
def test_bad_stage_plan_is_bad_input_and_trains_nothing(at, manifest, args, message):
    (at / "bad.toml").write_text(manifest)
    before = _snapshot(at)
    code, out = cli("verify", "bad.toml", "--workers", "2", "--json", "out/bad.json", *args)
    assert code == ExitCode.BAD_INPUT, out
    assert message in out
    (at / "bad.toml").unlink()
    before.pop("bad.toml")
    assert _snapshot(at) == before


def test_stages_off_runs_the_fixed_gate(at):
    code, out = cli("verify", "lake.toml", "--stages", "off", "--workers", "2")
    assert code == ExitCode.OK, out  # an unchanged rerun: every seed identical to the baseline
    assert "3. statistical checks" in out and "(staged)" not in out


def test_first_stage_of_ten_seeds_or_more_carries_no_caution():
    from harness.stats.sequential_design import small_first_stage

    assert small_first_stage(10) == [] and small_first_stage(20) == []
    assert "first stage has 9 seeds" in small_first_stage(9)[0]
