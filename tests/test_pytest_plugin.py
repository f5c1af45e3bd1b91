"""The pytest plugin, tested with pytest's own ``pytester``."""

from __future__ import annotations

import os
import shutil
import textwrap
import tomllib
from importlib.metadata import entry_points
from io import StringIO
from pathlib import Path

import pytest
from rich.console import Console

from harness.cli import ExitCode, main

pytest_plugins = ["pytester"]

#: With rl-harness installed, pytest loads the plugin through its entry point; otherwise name it.
INSTALLED = not os.environ.get("PYTEST_DISABLE_PLUGIN_AUTOLOAD") and any(
    e.name == "rlharness" and e.value == "harness.pytest_plugin" for e in entry_points(group="pytest11"))
LOAD = () if INSTALLED else ("-p", "harness.pytest_plugin")

MANIFEST = """\
name = "{name}"
[task]
id = "FrozenLake-v1"
[trainer]
use = "tabular-q"
[trainer.settings]
step_size = 0.1
explore_decay_steps = 3000
[budget]
env_steps = 6000
[evaluation]
every = 3000
episodes = 20
[seeds]
count = 4
root = 9
"""

# A reference no rerun of this manifest can meet: the check must come out significantly worse.
UNREACHABLE = """
[[reference]]
metric = "final"
mean = 0.99
se = 0.005
seeds = 10
source = "a deliberately unreachable number (this test)"
"""


@pytest.fixture(scope="module")
def recorded(tmp_path_factory):
    """A folder with the manifest, its results, run cache and recorded baseline."""
    root = tmp_path_factory.mktemp("plugin-project")
    (root / "lake.toml").write_text(MANIFEST.format(name="lake"))
    with pytest.MonkeyPatch.context() as mp:
        mp.chdir(root)
        mp.setenv("RLHARNESS_CACHE_DIR", str(root / "cache"))
        console = Console(file=StringIO(), width=120)
        code = main(["record", "lake.toml", "--workers", "1"], console=console)
    assert code == ExitCode.OK, console.file.getvalue()
    return root


@pytest.fixture
def project(recorded, pytester, monkeypatch):
    for name in ("lake.toml", "baselines", "results", "cache"):
        source = recorded / name
        (shutil.copytree if source.is_dir() else shutil.copy)(source, pytester.path / name)
    monkeypatch.setenv("RLHARNESS_CACHE_DIR", str(pytester.path / "cache"))
    return pytester


def run(pytester, *args):
    return pytester.runpytest(*LOAD, "--rlharness-workers", "1", *args)


def test_marker_passes_and_summary_says_what_a_pass_means(project):
    project.makepyfile(test_gate=textwrap.dedent("""
        import pytest

        @pytest.mark.rlharness("lake.toml")
        def test_lake(rlharness_verdict):
            assert rlharness_verdict.exact.status == "identical"

        def test_lake_strict(rlharness_verify):
            verdict = rlharness_verify("lake.toml", metrics=["final"])
            assert [c.metric for c in verdict.checks] == ["final"]
        """))
    result = run(project)
    result.assert_outcomes(passed=2)
    result.stdout.fnmatch_lines([
        "*rl-harness verdicts*",
        "*test_gate.py::test_lake: gate PASSED for lake*curves bitwise identical.",
        "A pass means no check found the candidate worse than its reference under the gate's rule*",
    ])


def test_failed_gate_fails_the_test_with_the_explanation(project):
    (project.path / "lake-ref.toml").write_text(MANIFEST.format(name="lake-ref") + UNREACHABLE)
    project.makepyfile(test_gate=textwrap.dedent("""
        import pytest

        @pytest.mark.rlharness("lake-ref.toml")
        def test_reference(rlharness_verdict):
            pass
        """))
    result = run(project)
    result.assert_outcomes(failed=1)
    result.stdout.fnmatch_lines([
        "*gate FAILED for lake-ref: 1 worse.",
        "*final vs reference 1 (a deliberately unreachable number (this test)): significantly worse*",
        "*gate: final vs reference 1 (a deliberately unreachable number (this test)) fails rule drop-beyond-margin*",
    ])


def test_bad_input_fails_with_the_fix(project):
    (project.path / "other.toml").write_text(MANIFEST.format(name="other"))
    project.makepyfile(test_gate=textwrap.dedent("""
        import pytest

        @pytest.mark.rlharness("other.toml")
        def test_unrecorded():
            pass

        def test_no_marker(rlharness_verdict):
            pass
        """))
    result = run(project)
    result.assert_outcomes(failed=1, errors=1)
    result.stdout.fnmatch_lines([
        "*ERROR at setup of test_no_marker*",
        "*the rlharness_verdict fixture needs a marker naming the manifest*",
        "*FAILURES*",
        "rl-harness could not verify *other.toml: *baselines/other.json: no baseline found; record it with "
        "`rlharness record MANIFEST`*",
    ])
    assert "During handling of the above exception" not in result.stdout.str()
    assert not (project.path / "results" / "other").exists()  # refused before anything ran


def test_options_and_marker_are_registered(pytester):
    result = pytester.runpytest(*LOAD, "--help")
    result.stdout.fnmatch_lines(["*rl-harness learning-performance gates*", "*--rlharness-baselines=DIR*"])
    result = pytester.runpytest(*LOAD, "--markers")
    result.stdout.fnmatch_lines(["@pytest.mark.rlharness(manifest, **policy):*"])


def test_entry_point_is_declared(pytester):
    pyproject = tomllib.loads((Path(__file__).parents[1] / "pyproject.toml").read_text())
    assert pyproject["project"]["entry-points"]["pytest11"]["rlharness"] == "harness.pytest_plugin"
    if INSTALLED:  # then pytest must find the plugin by itself, without -p
        pytester.runpytest("--help").stdout.fnmatch_lines(["*--rlharness-baselines=DIR*"])
