"""The staged gate end to end through ``rlharness verify``: stages, early stops, reuse, bad plans.

A small slippery-FrozenLake manifest (8 seeds x 20,000 steps, tabular Q-learning) is recorded
once per module; the staged gate then looks after 4 and after 8 seeds. The statistics of each
look are checked against scipy.stats (Welch's t-test, ``ttest_ind(equal_var=False)``) and the
first look's boundary against the Lan–DeMets O'Brien–Fleming-type spending function
(Lan & DeMets 1983: alpha*(t) = 2 - 2 Phi(z_{alpha/2} / sqrt(t)); at the first look the
nominal level is the alpha spent).
"""

from __future__ import annotations

import json
import math
import textwrap
import xml.etree.ElementTree as ET
from io import StringIO
from pathlib import Path

import numpy as np
import pytest
from rich.console import Console
from scipy import stats as sps

from harness.cli import ExitCode, main
from harness.gate.metrics import final_return
from harness.store.baseline import read_baseline

BROKEN_RULE = '''
"""Q-learning with a learning-breaking bug: the reward never enters the update."""
import numpy as np

from harness.core.curves import Checkpoint
from harness.trainers.envs import evaluate_policy, make_env
from harness.trainers.tabular import TabularQSettings, evaluation_rng, greedy_action


def train(run):
    s = TabularQSettings(**run.config)
    env, eval_env = make_env(run.task), make_env(run.task)
    streams = run.streams()
    rng = streams.explore
    q = np.full((env.observation_space.n, env.action_space.n), float(s.initial_value))
    obs, _ = env.reset(seed=streams.env_seed)
    step = 0
    for stop in run.checkpoint_steps():
        while step < stop:
            a = int(rng.integers(q.shape[1])) if rng.random() < s.epsilon(step) else greedy_action(q, obs)
            nxt, reward, terminated, truncated, _ = env.step(a)
            target = 0.0 if terminated else s.discount * q[nxt].max()  # BUG: reward dropped
            q[obs, a] += s.step_size * (target - q[obs, a])
            step += 1
            obs = env.reset()[0] if terminated or truncated else nxt
        returns = evaluate_policy(lambda o: greedy_action(q, int(o)), eval_env, run.evaluation.episode_seeds(),
                                  epsilon=run.evaluation.epsilon, rng=evaluation_rng(run, step))
        yield Checkpoint(step, returns)


train.settings_type = TabularQSettings
'''

CHECK = """
    [check]
    metrics = ["final"]
    margin = 0.3
    stages = [4, 8]
    """


def manifest_text(*, use: str = "tabular-q", count: int = 8, check: str = CHECK) -> str:
    return textwrap.dedent(f"""\
        name = "lake"
        [task]
        id = "FrozenLake-v1"
        [trainer]
        use = "{use}"
        [trainer.settings]
        step_size = 0.1
        explore_decay_steps = 10000
        [budget]
        env_steps = 20000
        [evaluation]
        every = 5000
        episodes = 50
        episode_seed = 3
        [seeds]
        count = {count}
        root = 5
        """) + textwrap.dedent(check)


def cli(*args: str) -> tuple[int, str]:
    console = Console(file=StringIO(), width=200, color_system=None)
    code = main([*args], console=console)
    return code, console.file.getvalue()


@pytest.fixture(scope="module")
def project(tmp_path_factory):
    """A project folder with the manifest, the broken trainer and the recorded 8-seed baseline."""
    root = tmp_path_factory.mktemp("staged")
    (root / "lake.toml").write_text(manifest_text())
    (root / "broken_rule.py").write_text(BROKEN_RULE)
    (root / "broken.toml").write_text(manifest_text(use="broken_rule:train"))
    with pytest.MonkeyPatch.context() as mp:
        mp.chdir(root)
        mp.setenv("RLHARNESS_CACHE_DIR", str(root / "cache"))
        code, out = cli("record", "lake.toml", "--workers", "2")
    assert code == ExitCode.OK, out
    return root


@pytest.fixture
def at(project, monkeypatch):
    monkeypatch.chdir(project)
    monkeypatch.setenv("RLHARNESS_CACHE_DIR", str(project / "cache"))
    return project


def _sources(folder: Path) -> list[str]:
    return [run.get("source") for run in json.loads((folder / "index.json").read_text())["runs"]]


def test_unchanged_rerun_stops_early_as_equivalent(at):
    code, out = cli("verify", "lake.toml", "--workers", "2", "--json", "out/eq.json", "--markdown", "out/eq.md",
                    "--junit", "out/eq.xml")
    assert code == ExitCode.OK, out
    assert "every metric crossed its equivalence boundaries at stage 1 of 2 (4 candidate seeds)" in out
    assert "4 of 8 seeds trained, 4 saved (50%) against the fixed gate" in out
    report = json.loads((at / "out/eq.json").read_text())
    assert report["schema"] == "rlharness.staged-verdict/1" and report["passed"] is True
    assert report["decision"] == "equivalent" and len(report["stages"]) == 1
    assert report["seeds"] == {"used": 4, "fixed": 8, "saved": 4, "baseline": 8, "trained_now": 0, "reused": 4}
    assert report["exact"]["status"] == "identical"  # the bitwise check ran on the 4 seeds trained
    # The look against scipy.stats: Welch's one-sided test of "worse" and the two one-sided tests.
    base = np.array([final_return(r.curve, fraction=0.1) for r in read_baseline(at / "baselines/lake.json").runs])
    cand = base[:4]  # an unchanged rerun reproduces the baseline's first seeds bitwise
    look = report["stages"][0]["metrics"]["final"]
    assert look["estimate"] == pytest.approx(cand.mean() - base.mean(), abs=1e-12)
    assert look["pvalue_worse"] == pytest.approx(sps.ttest_ind(cand, base, equal_var=False,
                                                               alternative="less").pvalue, rel=1e-9)
    tost = max(sps.ttest_ind(cand + 0.3, base, equal_var=False, alternative="greater").pvalue,
               sps.ttest_ind(cand - 0.3, base, equal_var=False, alternative="less").pvalue)
    assert look["pvalue_equivalence"] == pytest.approx(tost, rel=1e-9)
    # Look 1 of 4 vs 8 baseline seeds: information 1/(1/8 + 1/4) of the last look's 1/(1/8 + 1/8) = 2/3.
    spent = 2 - 2 * sps.norm.cdf(sps.norm.ppf(1 - 0.05 / 2) / math.sqrt(2 / 3))
    assert look["nominal_worse"] == pytest.approx(spent, rel=1e-6)
    assert "| 1 | 4/8 | final |" in (at / "out/eq.md").read_text()
    suite = ET.parse(at / "out/eq.xml").getroot()
    assert suite.get("failures") == "0" and {c.get("name") for c in suite.iter("testcase")} >= {"stage 1", "check final"}


def test_broken_trainer_stops_early_as_worse_and_a_rerun_reuses_its_seeds(at):
    code, out = cli("verify", "broken.toml", "--workers", "2", "--results", "results/broken", "--junit",
                    "out/broken.xml", "--json", "out/broken.json")
    assert code == ExitCode.GATE_FAILED, out
    assert "final crossed the 'worse' boundary at stage 1 of 2 (4 candidate seeds)" in out
    assert "exact check skipped: the configuration differs" in out
    report = json.loads((at / "out/broken.json").read_text())
    assert report["seeds"]["trained_now"] == 4 and report["seeds"]["saved"] == 4
    assert _sources(at / "results/broken") == ["trained"] * 4  # the index lists the stage's seeds only
    failed = [c.get("name") for c in ET.parse(at / "out/broken.xml").getroot().iter("testcase")
              if c.find("failure") is not None]
    assert failed == ["check final"]
    # The same command again: the stopped gate's seeds are resumed from its folder, none trained.
    code, again = cli("verify", "broken.toml", "--workers", "2", "--results", "results/broken", "--json",
                      "out/again.json")
    assert code == ExitCode.GATE_FAILED, again
    assert "stage 1: 4 seeds (0 trained, 4 reused)" in again
    assert _sources(at / "results/broken") == ["resumed"] * 4
    # Another folder: the run cache holds them.
    code, cached = cli("verify", "broken.toml", "--workers", "2", "--results", "results/broken-2")
    assert code == ExitCode.GATE_FAILED, cached
    assert _sources(at / "results/broken-2") == ["cache"] * 4
    rerun = json.loads((at / "out/again.json").read_text())
    assert rerun["stages"][0]["metrics"] == report["stages"][0]["metrics"]


def test_undecided_look_trains_only_the_next_seeds_and_ends_without_the_fixed_worse_test(at):
    # A margin too narrow for 4 or 8 seeds: no stop, the last stage reports inconclusive and passes
    # (not strict); --fresh trains every seed it uses, stage 2 only the 4 new ones.
    code, out = cli("verify", "lake.toml", "--workers", "2", "--fresh", "--no-cache", "--margin", "0.001",
                    "--json", "out/final.json")
    assert code == ExitCode.OK, out
    report = json.loads((at / "out/final.json").read_text())
    assert [s["trained"] for s in report["stages"]] == [4, 4]
    assert [s["decision"] for s in report["stages"]] == ["continue", "final"]
    assert report["outcomes"][0]["verdict"] == "inconclusive" and report["seeds"]["saved"] == 0
    assert "the last stage was reached without a decision at stage 2 of 2" in out
    code, out = cli("verify", "lake.toml", "--margin", "0.001", "--strict")
    assert code == ExitCode.GATE_FAILED and "final is inconclusive at the last stage and the policy is strict" in out


def _snapshot(folder: Path) -> dict[str, bytes]:
    return {str(p.relative_to(folder)): p.read_bytes() for p in sorted(folder.rglob("*")) if p.is_file()
            and "cache" not in p.parts}


@pytest.mark.parametrize(("manifest", "args", "message"), [
    (manifest_text(check=CHECK.replace("[4, 8]", "[4, 4]")), (),
     "bad.toml [check.stages]: must be strictly increasing, got [4, 4]"),
    (manifest_text(check=CHECK.replace("[4, 8]", "[4, 6]")), (),
     "bad.toml [check.stages]: the last stage must be the manifest's seed count ([seeds] count = 8), got [4, 6]"),
    (manifest_text(check=CHECK.replace("[4, 8]", "[8]")), (), "bad.toml [check.stages]: needs at least 2 stages"),
    (manifest_text(check=CHECK + 'stage_design = "pocok"\n'), (), "[check.stage_design]: unknown design 'pocok'"),
    (manifest_text(), ("--stages", "8,4"), "--stages: must be strictly increasing, got [8, 4]"),
    (manifest_text(), ("--stages", "4,eight"), "--stages: must be comma-separated seed counts"),
    (manifest_text(), ("--stages", "2,4"), "--stages: the last stage must be the manifest's seed count"),
    (manifest_text(count=10, check=CHECK.replace("[4, 8]", "[5, 10]")), (),
     "[check.stages]: the baseline baselines/lake.json holds 8 seeds, fewer than the last stage (10)"),
    (manifest_text(check=CHECK.replace('["final"]', '["steps-to-threshold"]')), (),
     "bad.toml [check.metrics]: the staged gate cannot check steps-to-threshold"),
])
def test_bad_stage_plan_is_bad_input_and_trains_nothing(at, manifest, args, message):
    (at / "bad.toml").write_text(manifest)
    before = _snapshot(at)
    code, out = cli("verify", "bad.toml", "--workers", "2", "--json", "out/bad.json", *args)
    assert code == ExitCode.BAD_INPUT, out
    assert message in out.replace("\n", "")
    (at / "bad.toml").unlink()
    before.pop("bad.toml")
    assert _snapshot(at) == before


def test_stages_off_runs_the_fixed_gate(at):
    code, out = cli("verify", "lake.toml", "--stages", "off", "--workers", "2")
    assert code in (ExitCode.OK, ExitCode.GATE_FAILED), out
    assert "3. statistical checks" in out and "(staged)" not in out
