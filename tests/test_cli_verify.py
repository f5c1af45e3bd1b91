"""End to end on tabular Q-learning: record, verify, compare through the ``rlharness`` CLI.

One small slippery-FrozenLake manifest (6 seeds x 20,000 steps, about a second on
two workers) is recorded once per module; each test then verifies a variation of it.
The user trainers are written into the project folder by the tests themselves and
named as ``"module:function"``, exactly as a user would inject one.
"""

from __future__ import annotations

import dataclasses
import json
import shutil
import textwrap
import xml.etree.ElementTree as ET
from io import StringIO
from pathlib import Path

import pytest
from rich.console import Console

from harness.store.baseline import read_baseline, write_baseline
from harness.cli import ExitCode, main

BROKEN_RULE = '''
"""Q-learning with a deliberately broken learning rule: the reward never enters the update."""
import numpy as np

from harness.core.curves import Checkpoint
from harness.trainers.envs import evaluate_policy, make_env
from harness.trainers.tabular import TabularQSettings, greedy_action


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
                                  epsilon=run.evaluation.epsilon)
        yield Checkpoint(step, returns)


train.settings_type = TabularQSettings
'''

FLAKY = '''
"""The built-in tabular trainer, except that the second seed crashes."""
from harness.trainers.tabular import TabularQSettings
from harness.trainers.tabular import train as tabular_train


def train(run):
    if run.index == 1:
        raise RuntimeError("injected failure for the second seed")
    yield from tabular_train(run)


train.settings_type = TabularQSettings
'''

NONDETERMINISTIC = '''
"""The built-in tabular trainer with unseeded noise of 1e-9 on every return: nondeterministic on purpose."""
import numpy as np

from harness.core.curves import Checkpoint
from harness.trainers.tabular import TabularQSettings
from harness.trainers.tabular import train as tabular_train


def train(run):
    noise = np.random.default_rng()  # no seed: every run differs in the last digits
    for point in tabular_train(run):
        yield Checkpoint(point.step, tuple(r + noise.uniform(0.0, 1e-9) for r in point.returns))


train.settings_type = TabularQSettings
'''


def manifest_text(name: str, *, use: str = "tabular-q", step_size: float = 0.1, every: int = 5000,
                  extra: str = "") -> str:
    return textwrap.dedent(f"""\
        name = "{name}"
        [task]
        id = "FrozenLake-v1"
        [trainer]
        use = "{use}"
        [trainer.settings]
        step_size = {step_size}
        explore_decay_steps = 10000
        [budget]
        env_steps = 20000
        [evaluation]
        every = {every}
        episodes = 50
        episode_seed = 3
        [seeds]
        count = 6
        root = 5
        """) + textwrap.dedent(extra)


def cli(project: Path, *args: str) -> tuple[int, str]:
    console = Console(file=StringIO(), width=160, color_system=None)
    code = main([*args], console=console)
    return code, console.file.getvalue()


@pytest.fixture(scope="module")
def project(tmp_path_factory):
    """A project folder with the toy manifest, its results and its recorded baseline."""
    root = tmp_path_factory.mktemp("project")
    (root / "toy.toml").write_text(manifest_text("toy"))
    (root / "broken_rule.py").write_text(BROKEN_RULE)
    (root / "flaky.py").write_text(FLAKY)
    (root / "nondeterministic.py").write_text(NONDETERMINISTIC)
    with pytest.MonkeyPatch.context() as mp:
        mp.chdir(root)
        mp.setenv("RLHARNESS_CACHE_DIR", str(root / "cache"))
        code, out = cli(root, "record", "toy.toml", "--workers", "2")
    assert code == ExitCode.OK, out
    assert "recorded baseline baselines/toy.json: 6 seeds" in out
    return root


@pytest.fixture
def at(project, monkeypatch):
    monkeypatch.chdir(project)
    monkeypatch.setenv("RLHARNESS_CACHE_DIR", str(project / "cache"))
    return project


def test_unchanged_rerun_is_identical_and_passes(at):
    code, out = cli(at, "verify", "toy.toml", "--workers", "2", "--markdown", "out/v.md", "--json", "out/v.json",
                    "--junit", "out/v.xml")
    assert code == ExitCode.OK, out
    assert "config hash equal; same installed versions" in out
    assert "every seed's curve is bitwise identical to the baseline" in out
    assert "PASSED  toy: " in out
    assert "it does not prove the code correct" in out
    report = json.loads((at / "out/v.json").read_text())
    assert report["schema"] == "rlharness.verdict/1" and report["passed"] is True
    assert report["exact"]["status"] == "identical"
    assert [c["estimate"] for c in report["checks"]] == [0.0, 0.0]
    assert {c["verdict"] for c in report["checks"]} <= {"equivalent", "inconclusive"}
    assert len(report["checks"][0]["candidate_values"]) == 6
    suite = ET.parse(at / "out/v.xml").getroot()
    assert suite.get("failures") == "0"
    assert "gate passed" in (at / "out/v.md").read_text()


def test_broken_learning_rule_is_worse_and_fails(at):
    (at / "broken.toml").write_text(manifest_text("toy", use="broken_rule:train"))
    code, out = cli(at, "verify", "broken.toml", "--workers", "2", "--junit", "out/broken.xml",
                    "--results", "results/broken")
    assert code == ExitCode.GATE_FAILED, out
    assert "config hash differs (1 key changed: trainer)" in out
    assert '"tabular-q"' in out and '"broken_rule:train"' in out
    assert "final fails rule drop-beyond-margin" in out
    assert "exact check: skipped: the configuration differs" in out
    assert "the candidate first falls significantly below between steps" in out
    suite = ET.parse(at / "out/broken.xml").getroot()
    failed = [c.get("name") for c in suite.iter("testcase") if c.find("failure") is not None]
    assert "check final" in failed


def test_changed_hyperparameter_names_the_key(at):
    # A step size 100 times smaller barely moves the table in 20,000 steps, so the rerun stays
    # near the random policy (a success rate of a few percent on slippery FrozenLake): the gate
    # must fail, and the report must name the key that changed.
    (at / "changed.toml").write_text(manifest_text("toy", step_size=0.001))
    code, out = cli(at, "verify", "changed.toml", "--workers", "2", "--results", "results/changed")
    assert code == ExitCode.GATE_FAILED, out
    assert "config hash differs (1 key changed: settings.step_size)" in out
    row = next(line for line in out.splitlines() if "settings.step_size" in line and "0.001" in line)
    assert "0.1" in row
    assert "final fails rule drop-beyond-margin" in out


def test_dependency_upgrade_is_verified_statistically(at, tmp_path):
    old = read_baseline(at / "baselines/toy.json")
    pinned = dataclasses.replace(old, versions={**old.versions, "numpy": "1.26.0", "gymnasium": "0.29.1"})
    path = write_baseline(pinned, tmp_path / "old-libs.json")
    code, out = cli(at, "verify", "toy.toml", "--baseline", str(path), "--no-run")
    assert code == ExitCode.OK, out
    assert "exact check: skipped: installed versions differ (gymnasium 0.29.1 ->" in out
    assert "version drift" in out and "numpy" in out
    assert "final" in out.split("3. statistical checks")[1]


def test_published_reference_checked_against_rerun(at):
    # The reference numbers are this baseline's own summary of "final" (so a correct rerun must not
    # come out worse) and, second, a deliberately unreachable mean (so it must): the method itself is
    # checked against NIST's published Welch example in test_verify.py.
    values = _final_values(at / "baselines/toy.json")
    mean, sd = sum(values) / len(values), _sd(values)
    extra = f"""
        [[reference]]
        metric = "final"
        mean = {mean!r}
        sd = {sd!r}
        seeds = 6
        source = "this test: summary of the recorded baseline"
        """
    (at / "refs.toml").write_text(manifest_text("toy-refs", extra=extra))
    code, out = cli(at, "verify", "refs.toml", "--workers", "2", "--results", "results/refs")
    assert code == ExitCode.OK, out
    assert "checking against the manifest's published references only" in out
    assert "final vs reference 1: this test: summary of the recorded baseline" in out
    impossible = extra.replace(f"mean = {mean!r}", "mean = 0.99").replace(f"sd = {sd!r}", "se = 0.005")
    (at / "refs.toml").write_text(manifest_text("toy-refs", extra=impossible))
    code, out = cli(at, "verify", "refs.toml", "--results", "results/refs", "--no-run")
    assert code == ExitCode.GATE_FAILED, out
    assert "significantly worse" in out or "fails rule drop-beyond-margin" in out


def _final_values(path: Path) -> list[float]:
    from harness.gate.metrics import final_return

    return [final_return(r.curve, fraction=0.1) for r in read_baseline(path).runs]


def _sd(values: list[float]) -> float:
    m = sum(values) / len(values)
    return (sum((v - m) ** 2 for v in values) / (len(values) - 1)) ** 0.5


def _snapshot(folder: Path) -> dict[str, bytes]:
    return {str(p.relative_to(folder)): p.read_bytes() for p in sorted(folder.rglob("*")) if p.is_file()
            and "cache" not in p.parts}


def test_missing_baseline_is_bad_input_and_writes_nothing(at):
    (at / "fresh.toml").write_text(manifest_text("never-recorded"))
    before = _snapshot(at)
    code, out = cli(at, "verify", "fresh.toml", "--json", "out/missing.json")
    assert code == ExitCode.BAD_INPUT
    assert "baselines/never-recorded.json: no baseline found; record it with `rlharness record MANIFEST`" in out
    assert _snapshot(at) == before


@pytest.mark.parametrize("damage", ["edit", "truncate"])
def test_damaged_baseline_is_refused_and_kept(at, tmp_path, damage):
    path = tmp_path / "toy.json"
    shutil.copy(at / "baselines/toy.json", path)
    text = path.read_text()
    path.write_text(text.replace('"steps": [0, 5000,', '"steps": [0, 5001,') if damage == "edit"
                    else text[: len(text) // 3])
    damaged = path.read_bytes()
    code, out = cli(at, "verify", "toy.toml", "--baseline", str(path), "--no-run")
    assert code == ExitCode.BAD_INPUT
    assert ("[checksum] does not match" if damage == "edit" else "is truncated or not valid JSON") in out
    assert path.read_bytes() == damaged


def test_baseline_of_another_manifest_is_refused(at, tmp_path):
    (at / "other.toml").write_text(manifest_text("other"))
    code, out = cli(at, "verify", "other.toml", "--baseline", "baselines/toy.json", "--no-run")
    assert code == ExitCode.BAD_INPUT
    assert "[manifest] is 'toy', but it is being used for manifest 'other'" in out


def test_different_checkpoint_grid_is_refused_before_running(at):
    (at / "grid.toml").write_text(manifest_text("toy", every=4000))
    before = _snapshot(at)
    code, out = cli(at, "verify", "grid.toml")
    assert code == ExitCode.BAD_INPUT
    assert "different checkpoint grids: the baseline has steps [0, 5000, 10000, 15000, 20000]" in out
    assert _snapshot(at) == before


def test_failed_seed_is_never_verified_on_fewer_seeds(at):
    (at / "flaky.toml").write_text(manifest_text("toy", use="flaky:train"))
    code, out = cli(at, "verify", "flaky.toml", "--workers", "2", "--json", "out/flaky.json",
                    "--results", "results/flaky")
    assert code == ExitCode.RUNS_FAILED, out
    assert "1 of 6 runs failed" in out and "injected failure for the second seed" in out
    assert not (at / "out/flaky.json").exists()


def test_record_refuses_to_overwrite(at):
    before = (at / "baselines/toy.json").read_bytes()
    code, out = cli(at, "record", "toy.toml")
    assert code == ExitCode.BAD_INPUT
    assert "a baseline already exists (recorded for 'toy' on" in out and "--overwrite" in out
    assert (at / "baselines/toy.json").read_bytes() == before


def test_compare_two_stored_result_sets(at):
    code, out = cli(at, "compare", "results/toy", "results/toy")
    assert code == ExitCode.OK, out
    assert "every seed's curve is bitwise identical" in out
    # Six seeds cannot show the noisier area under the curve equivalent within the default margin:
    # inconclusive passes by default and fails a strict gate, with the seeds that would settle it.
    assert "auc: inconclusive" in out
    code, out = cli(at, "compare", "results/toy", "results/toy", "--strict")
    assert code == ExitCode.GATE_FAILED, out
    assert "auc is inconclusive and the policy is strict (about" in out
    code, out = cli(at, "compare", "results/toy", "results/toy", "--strict", "--metrics", "final")
    assert code == ExitCode.OK, out
    code, out = cli(at, "compare", "results/toy", "results/toy", "--alpha", "0.9")
    assert code == ExitCode.BAD_INPUT and "[alpha]: must be a number strictly between 0 and 0.5, got 0.9" in out
    code, out = cli(at, "compare", "results/toy", "results/nowhere")
    assert code == ExitCode.BAD_INPUT and "results/nowhere/index.json: file not found" in out


def test_nondeterministic_trainer_fails_the_gate(at):
    # Record and rerun the same code, configuration and versions: curves must be bitwise identical.
    (at / "nondet.toml").write_text(manifest_text("nondet", use="nondeterministic:train"))
    code, out = cli(at, "record", "nondet.toml", "--workers", "2", "--results", "results/nondet", "--overwrite")
    assert code == ExitCode.OK, out
    code, out = cli(at, "verify", "nondet.toml", "--workers", "2", "--fresh", "--results", "results/nondet",
                    "--junit", "out/nondet.xml")
    assert code == ExitCode.GATE_FAILED, out
    assert "config hash equal; same installed versions" in out
    assert "nondeterminism" in out and "reproducibility failure" in out
    suite = ET.parse(at / "out/nondet.xml").getroot()
    assert [c.get("name") for c in suite.iter("testcase") if c.find("failure") is not None] == ["exact"]
    (at / "relaxed.toml").write_text(manifest_text("nondet", use="nondeterministic:train",
                                                   extra="[check]\nallow_nondeterminism = true\n"))
    code, out = cli(at, "verify", "relaxed.toml", "--workers", "2", "--fresh", "--results", "results/nondet")
    assert code == ExitCode.OK, out
    assert "nondeterminism" in out and "allowed by the policy" in out


# --- issue 10: the gate policy is validated before anything runs; the rule is reported ---------


def test_record_refuses_a_baseline_too_small_for_its_checks(at):
    # Issue 10 item 4: 2 seeds per side can never reach alpha = 0.05 in the where-the-curves-part
    # permutation test (smallest p = 1/C(4, 2) = 1/6; Fisher 1935): refused at record, not at verify.
    (at / "two.toml").write_text(manifest_text("two").replace("count = 6", "count = 2"))
    code, out = cli(at, "record", "two.toml")
    assert code == ExitCode.BAD_INPUT, out
    assert "two.toml [seeds.count]: the manifest has 2 seeds" in out and "at least 3" in out
    assert "locate = false" in out
    assert not (at / "results" / "two").exists() and not (at / "baselines" / "two.json").exists()


@pytest.mark.parametrize("command", ["run", "record", "verify", "calibrate"])
def test_every_training_command_validates_the_gate_policy_first(at, command):
    # A margin that cannot be sized (floor equal to threshold) is a bad manifest before any training.
    text = manifest_text("flat").replace("count = 6", "count = 4") + "[check]\nfloor = 0.7\nthreshold = 0.7\n"
    (at / "flat.toml").write_text(text)
    code, out = cli(at, command, "flat.toml")
    assert code == ExitCode.BAD_INPUT, out
    assert "flat.toml [check.margin]: cannot size the margin of 'final'" in " ".join(out.split())
    assert not (at / "results" / "flat").exists() and not (at / "results" / "flat-calibration").exists()


def test_rule_is_selectable_and_reported(at):
    code, out = cli(at, "verify", "toy.toml", "--no-run", "--results", "results/toy", "--rule", "any-drop",
                    "--json", "out/rule.json", "--junit", "out/rule.xml")
    assert code == ExitCode.OK, out
    assert "policy: rule any-drop (fails when the drop is significant, however small)" in " ".join(out.split())
    data = json.loads((at / "out" / "rule.json").read_text())
    assert data["gate"]["rule"] == "any-drop" and data["policy"]["rule"] == "any-drop"
    assert [m["unit"] for m in data["margins"]] == ["return", "return"]
    props = {p.get("name"): p.get("value") for p in ET.parse(at / "out" / "rule.xml").getroot().iter("property")}
    assert props["rule"] == "any-drop"
    code, out = cli(at, "verify", "toy.toml", "--no-run", "--results", "results/toy", "--ignore-small")
    assert code == ExitCode.BAD_INPUT and "--ignore-small was replaced by --rule" in out
