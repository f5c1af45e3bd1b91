"""Issue 13 item 4: a results or baseline file never makes rl-harness import code.

A task id ``"module:Env-v0"`` makes gymnasium import ``module``. Read from a file (a pull request
can carry one), it would run that module's code in CI. Here the module writes a marker file when
imported; the marker must never appear, whatever command reads the file. Before the fix
``compare`` imported it (and passed options read from the file to the environment).
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

import pytest
from crafting import TOY, copy_results, evil_module, record, resign_baseline, resign_results
from crafting import cli as _cli

from harness.cli import ExitCode

@pytest.fixture(scope="module")
def recorded(tmp_path_factory):
    return record(tmp_path_factory.mktemp("recorded"))


@pytest.fixture
def evil(tmp_path, monkeypatch):
    """A module on sys.path that leaves a marker when imported; its task id."""
    monkeypatch.syspath_prepend(str(tmp_path))
    marker = tmp_path / "MARKER"
    name = f"evil_{tmp_path.name.replace('-', '_')}"
    yield evil_module(tmp_path, name, marker), marker
    sys.modules.pop(name, None)


def _set_task(records, index, task_id):
    for r in records:
        r["spec"]["task"]["id"] = task_id


def test_compare_never_imports_a_task_module_named_in_results(recorded, tmp_path, evil):
    task_id, marker = evil
    folder = copy_results(recorded / "res", tmp_path / "crafted")
    resign_results(folder, lambda records, index: _set_task(records, index, task_id))
    # A manifest whose [check] sets the threshold: before the fix the random-policy floor was then
    # measured on gymnasium.make(<id from the file>), which imports the module.
    (tmp_path / "threshold.toml").write_text(TOY.replace("[check]\n", "[check]\nthreshold = 400.0\n"))
    for extra in ((), ("--margin", "1.0"), ("--manifest", recorded / "m.toml"), ("--manifest", tmp_path / "threshold.toml")):
        code, text = _cli("compare", recorded / "res", folder, *extra)
        assert code == ExitCode.BAD_INPUT, text
        assert "[task.id]" in text and "Traceback" not in text
        assert not marker.exists()  # before: compare imported the module (marker written)


def test_compare_never_passes_options_read_from_results_to_an_environment(recorded, tmp_path):
    folder = copy_results(recorded / "res", tmp_path / "crafted")

    def options(records, index):
        for r in records:
            r["spec"]["task"]["kwargs"] = {"render_mode": "human"}

    resign_results(folder, options)
    code, text = _cli("compare", recorded / "res", folder)
    assert code == ExitCode.BAD_INPUT, text
    assert "[task.kwargs]" in text and "never passed to an environment" in text
    code, text = _cli("compare", recorded / "res", folder, "--manifest", recorded / "m.toml")
    assert code == ExitCode.OK, text  # the manifest's own task (no options) is used; the curves are the same


def test_verify_never_imports_a_task_module_named_in_a_baseline_or_results(recorded, tmp_path, evil):
    task_id, marker = evil
    data = json.loads((recorded / "bl" / "fuzz.json").read_text())
    data["config"]["task"]["id"] = task_id
    (tmp_path / "fuzz.json").write_text(resign_baseline(data))
    code, text = _cli("verify", recorded / "m.toml", "--no-run", "--results", recorded / "res",
                      "--baseline", tmp_path / "fuzz.json")
    assert code == ExitCode.OK and "Traceback" not in text, text  # same curves; provenance shows task.id changed
    assert "task.id" in text
    folder = copy_results(recorded / "res", tmp_path / "crafted")
    resign_results(folder, lambda records, index: _set_task(records, index, task_id), rehash_config=False)
    code, text = _cli("verify", recorded / "m.toml", "--no-run", "--results", folder, "--baselines", recorded / "bl")
    assert code == ExitCode.BAD_INPUT and "Traceback" not in text
    assert not marker.exists()
