"""A re-recorded baseline is visible (issue 13 item 6).

``verify --baseline-ref REF`` compares the baseline with its version at a git ref (say the
merge base of a pull request) and, when it changed, says so first in every report. Tested in
temporary git repositories: commit a baseline, lower it, re-record it, and look.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import textwrap
import xml.etree.ElementTree as ET
from io import StringIO
from pathlib import Path

import pytest
from rich.console import Console

from harness.cli import ExitCode, main
from harness.core.curves import Checkpoint, LearningCurve
from harness.core.errors import BaselineError
from harness.core.seeding import plan_seeds
from harness.core.spec import sha256_of
from harness.store.baseline import Baseline, SeedCurve, read_baseline, write_baseline
from harness.store.history import baseline_history

pytestmark = pytest.mark.skipif(shutil.which("git") is None, reason="needs the git command")


def git(repo: Path, *args: str) -> str:
    done = subprocess.run(["git", "-c", "user.name=Alice", "-c", "user.email=alice@example.org",
                           "-c", "commit.gpgsign=false", *args], cwd=repo, check=True, capture_output=True, text=True)
    return done.stdout


def make_baseline(level: float, *, root: int = 5, recorder: str | None = None, numpy: str = "2.1.0") -> Baseline:
    """Four seeds whose final returns are ``level + 0.01 i`` (mean ``level + 0.015``)."""
    seeds = plan_seeds(count=4, root=root)
    runs = tuple(SeedCurve(s, LearningCurve((Checkpoint(0, (0.0,)), Checkpoint(100, (level + 0.01 * i,)))))
                 for i, s in enumerate(seeds))
    config = {"seeds": [s.to_json() for s in seeds]}
    return Baseline(manifest="toy", config_hash=sha256_of(config), config=config,  # readers check the hash
                    versions={"numpy": numpy}, platform={}, recorded="2026-12-01T00:00:00Z", harness_version="0.1",
                    runs=runs, recorder=recorder)


@pytest.fixture
def repo(tmp_path):
    git(tmp_path, "init", "-q")
    path = write_baseline(make_baseline(0.8, recorder="alice"), tmp_path / "baselines" / "toy.json")
    git(tmp_path, "add", ".")
    git(tmp_path, "commit", "-qm", "record the baseline")
    return path


def test_unchanged_baseline_says_so(repo):
    history = baseline_history(repo, "HEAD")
    assert history.status == "unchanged" and not history.changed
    assert history.reading == "the baseline is unchanged since HEAD."


def test_lowered_and_rerecorded_baseline_is_flagged(repo):
    write_baseline(make_baseline(0.3, root=9, recorder="mallory", numpy="2.2.0"), repo, overwrite=True)
    history = baseline_history(repo, "HEAD")
    assert history.status == "changed" and history.changed
    text = history.reading
    assert text.startswith("the baseline changed since HEAD:")
    assert "final mean return 0.815 -> 0.315" in text
    assert "seeds: root 5 -> 9, 4 seeds, 0 shared" in text
    assert "numpy 2.1.0 -> 2.2.0" in text
    assert "recorded by alice" in text and "by mallory" in text
    # A merge base given as a commit id works as well as a branch name.
    assert baseline_history(repo, git(repo.parent.parent, "rev-parse", "HEAD").strip()).changed


def test_metadata_only_rerecording_says_the_curves_are_identical(repo):
    old = read_baseline(repo)
    write_baseline(Baseline(**{**{f: getattr(old, f) for f in ("manifest", "config_hash", "config", "versions",
                                                               "platform", "harness_version", "runs")},
                               "recorded": "2026-12-02T00:00:00Z", "recorder": "bob"}), repo, overwrite=True)
    history = baseline_history(repo, "HEAD")
    assert history.changed and "curves bitwise identical" in history.reading


def test_new_and_removed_baselines(repo):
    new = write_baseline(make_baseline(0.5), repo.parent / "other.json")
    history = baseline_history(new, "HEAD")
    assert history.status == "new" and "is new since HEAD" in history.reading
    repo.unlink()
    history = baseline_history(repo, "HEAD")
    assert history.status == "removed" and "was removed since HEAD" in history.reading


def test_git_problems_are_clear_errors(repo, tmp_path_factory):
    with pytest.raises(BaselineError, match="unknown git ref 'no-such-branch'"):
        baseline_history(repo, "no-such-branch")
    with pytest.raises(BaselineError, match="not a git ref"):
        baseline_history(repo, "--output=/tmp/x")
    elsewhere = tmp_path_factory.mktemp("plain")
    path = write_baseline(make_baseline(0.5), elsewhere / "toy.json")
    with pytest.raises(BaselineError, match="not inside a git repository"):
        baseline_history(path, "HEAD")


def test_existing_baselines_stay_valid_without_a_recorder(tmp_path):
    # The recorder field is additive: a baseline recorded without one has no such key, so the
    # files recorded before it existed keep their checksums.
    baseline = make_baseline(0.5)
    assert "recorder" not in baseline.content()
    assert read_baseline(write_baseline(baseline, tmp_path / "b.json")).recorder is None
    # Shipped baselines recorded before the field (FrozenLake, Taxi, CartPole) still read, with no
    # recorder; those re-recorded since (Acrobot, MountainCar) name one.
    shipped = {p.stem: read_baseline(p) for p in (Path(__file__).resolve().parents[1] / "baselines").glob("*.json")}
    assert [name for name, b in sorted(shipped.items()) if b.recorder is None] == [
        "cartpole-dqn", "frozenlake-q", "taxi-q"]


MANIFEST = """\
    name = "toy"
    [task]
    id = "FrozenLake-v1"
    [trainer]
    use = "tabular-q"
    [trainer.settings]
    step_size = {step_size}
    explore_decay_steps = 5000
    [budget]
    env_steps = 10000
    [evaluation]
    every = 5000
    episodes = 50
    episode_seed = 3
    [seeds]
    count = 4
    root = 5
    """


def cli(*args: str) -> tuple[int, str]:
    console = Console(file=StringIO(), width=160, color_system=None)
    code = main([*args], console=console)
    return code, console.file.getvalue()


def test_verify_flags_a_lowered_rerecorded_baseline_first_in_every_report(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    monkeypatch.setenv("RLHARNESS_CACHE_DIR", str(tmp_path / "cache"))
    git(tmp_path, "init", "-q")
    git(tmp_path, "config", "user.name", "Alice")
    (tmp_path / "toy.toml").write_text(textwrap.dedent(MANIFEST.format(step_size=0.1)))
    code, out = cli("record", "toy.toml", "--workers", "2", "--results", "results/good")
    assert code == ExitCode.OK, out
    assert read_baseline(tmp_path / "baselines/toy.json").recorder == "Alice"
    git(tmp_path, "add", "toy.toml", "baselines")
    git(tmp_path, "commit", "-qm", "baseline")
    base = git(tmp_path, "rev-parse", "HEAD").strip()
    # The pull request: a learning rate that learns far less, and the baseline re-recorded with it.
    git(tmp_path, "config", "user.name", "Mallory")
    (tmp_path / "toy.toml").write_text(textwrap.dedent(MANIFEST.format(step_size=0.001)))
    code, out = cli("record", "toy.toml", "--workers", "2", "--results", "results/low", "--overwrite")
    assert code == ExitCode.OK, out
    code, out = cli("verify", "toy.toml", "--no-run", "--results", "results/low", "--baseline-ref", base,
                    "--markdown", "v.md", "--json", "v.json", "--junit", "v.xml")
    assert code == ExitCode.OK, out  # the gate alone cannot see it: the rerun matches the new baseline
    first = out.splitlines()[0]
    assert first.startswith(f"BASELINE CHANGED since {base}"), out
    assert "by Alice" in out and "by Mallory" in out and "settings.step_size" in out
    assert "final mean return" in out
    md = (tmp_path / "v.md").read_text()
    assert md.splitlines()[0].startswith(f"> **The baseline changed since `{base}`**"), md
    report = json.loads((tmp_path / "v.json").read_text())
    assert list(report)[:2] == ["schema", "baseline_history"]
    assert report["baseline_history"]["status"] == "changed" and report["baseline_history"]["ref"] == base
    suite = ET.parse(tmp_path / "v.xml").getroot()
    case = next(iter(suite.iter("testcase")))
    assert case.get("name") == "baseline history" and case.find("skipped") is not None
    assert case.find("skipped").get("message").startswith(f"BASELINE CHANGED since {base}")


def test_verify_baseline_ref_errors_exit_2(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "toy.toml").write_text(textwrap.dedent(MANIFEST.format(step_size=0.1)))
    write_baseline(make_baseline(0.5), tmp_path / "baselines" / "toy.json")
    code, out = cli("verify", "toy.toml", "--no-run", "--baseline-ref", "HEAD")
    assert code == ExitCode.BAD_INPUT, out
    assert "not inside a git repository" in out and "--baseline-ref" in out
