"""A run trained by other code is never reused: the trainer's source fingerprint.

The job of verification is to catch what a refactor did to the numbers, so a rerun
after an edit of the trainer must train again rather than read stale runs from the
results folder or the cache, and verification must still compare bitwise (a
refactor is where the exact check matters most).
"""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest

import harness

from harness.store.cache import RunCache
from harness.gate.curveset import CurveSet
from harness.manifest.loader import load_manifest
from harness.manifest.policy import GatePolicy
from harness.execute.runner import run_manifest
from harness.store.results import TRAINER_SOURCE
from harness.trainers import fingerprint
from harness.trainers.fingerprint import source_files, source_fingerprint
from harness.trainers.registry import BUILTIN_TRAINERS, resolve_trainer
from harness.gate.verify import exact_check, provenance

MANIFEST = """
name = "edited"
[task]
id = "FrozenLake-v1"
[trainer]
use = "my_q:train"
[budget]
env_steps = 600
[evaluation]
every = 300
episodes = 3
[seeds]
count = 2
root = 4
"""

TRAINER = '''
"""A user trainer that delegates to the built-in tabular Q-learning."""
from harness.trainers.tabular import TabularQSettings, train as _train


def train(run):
    {body}


train.settings_type = TabularQSettings
'''


def _write(folder: Path, body: str) -> Path:
    (folder / "my_q.py").write_text(TRAINER.format(body=body), encoding="utf-8")
    path = folder / "edited.toml"
    path.write_text(MANIFEST, encoding="utf-8")
    return path


def test_user_fingerprint_covers_the_whole_package_and_changes_with_any_edit(tmp_path, monkeypatch):
    monkeypatch.syspath_prepend(str(tmp_path))
    pkg = tmp_path / "fp_pkg"
    pkg.mkdir()
    (pkg / "__init__.py").write_text("")
    (pkg / "helper.py").write_text("SCALE = 1\n")
    (pkg / "core.py").write_text("def train(run):\n    return []\n")
    train = resolve_trainer("fp_pkg.core:train").train
    before = source_fingerprint(train)
    assert before == source_fingerprint(train)  # a pure function of the files
    (pkg / "helper.py").write_text("SCALE = 2\n")  # not the trainer's own file: still counts
    assert source_fingerprint(train) != before


def test_user_fingerprint_follows_its_harness_imports_and_no_others(tmp_path, monkeypatch):
    monkeypatch.syspath_prepend(str(tmp_path))
    (tmp_path / "fp_single.py").write_text(
        "def train(run):\n    from harness.trainers.tabular import train as inner\n    return inner(run)\n"
    )
    names = [name for name, _ in source_files(resolve_trainer("fp_single:train").train)]
    assert names[0] == "fp_single.py"
    # Imported inside a function, read from the source: the built-in it delegates to counts.
    assert {"harness/trainers/tabular.py", "harness/trainers/envs.py", "harness/core/spec.py"} <= set(names)
    assert not [n for n in names if n.startswith(("harness/report/", "harness/cli/", "harness/stats/"))]


@pytest.fixture
def harness_copy(tmp_path, monkeypatch):
    """A copy of the ``harness`` package that the fingerprint reads instead of the real tree."""
    copy = tmp_path / "harness"
    shutil.copytree(Path(harness.__file__).parent, copy, ignore=shutil.ignore_patterns("__pycache__"))
    real_roots = fingerprint._roots
    monkeypatch.setattr(fingerprint, "_roots", lambda top: [copy] if top == "harness" else real_roots(top))
    return copy


def _edit(file: Path) -> None:
    file.write_text(file.read_text(encoding="utf-8") + "\n# edited\n", encoding="utf-8")


def test_builtin_fingerprint_is_the_modules_the_trainer_uses(harness_copy):
    """An edit to a report or the CLI keeps the DQN fingerprint; one to a module DQN imports changes it."""
    train = resolve_trainer("dqn").train
    assert [name for name, _ in source_files(train)] == [
        "harness/__init__.py", "harness/core/__init__.py", "harness/core/config.py",
        "harness/core/curves.py", "harness/core/errors.py", "harness/core/jsondata.py", "harness/core/seeding.py",
        "harness/core/spec.py", "harness/trainers/__init__.py", "harness/trainers/dqn.py",
        "harness/trainers/envs.py", "harness/trainers/nn.py", "harness/trainers/replay.py",
        "harness/trainers/schedule.py",
    ]
    before = source_fingerprint(train)
    for unused in ("report/terminal.py", "cli/__init__.py", "stats/welch.py", "trainers/tabular.py"):
        _edit(harness_copy / unused)
    assert source_fingerprint(train) == before
    _edit(harness_copy / "trainers" / "nn.py")
    after_nn = source_fingerprint(train)
    assert after_nn != before
    _edit(harness_copy / "core" / "seeding.py")  # imported by core/spec.py: transitively
    assert source_fingerprint(train) != after_nn


def test_builtin_fingerprint_reads_relative_imports(harness_copy):
    dqn = harness_copy / "trainers" / "dqn.py"
    names = source_files(resolve_trainer("dqn").train)
    dqn.write_text(dqn.read_text(encoding="utf-8").replace("from harness.trainers.nn import", "from .nn import")
                   .replace("from harness.trainers.schedule import linear_decay", "from . import schedule")
                   .replace("from harness.core.spec import", "from ..core.spec import"), encoding="utf-8")
    assert [n for n, _ in source_files(resolve_trainer("dqn").train)] == [n for n, _ in names]


@pytest.mark.parametrize("name", sorted(BUILTIN_TRAINERS))
def test_every_piece_of_a_builtin_trainer_is_in_its_fingerprint(name):
    spec = BUILTIN_TRAINERS[name]
    names = {n for n, _ in source_files(resolve_trainer(name).train)}
    for entry in filter(None, (spec.train, spec.settings, spec.lockstep, spec.lockstep_size)):
        assert entry.split(":")[0].replace(".", "/") + ".py" in names


def test_edited_trainer_is_retrained_not_resumed_or_cached_and_the_exact_check_still_runs(tmp_path):
    path = _write(tmp_path, "return _train(run)")
    cache = RunCache(tmp_path / "cache")
    results = tmp_path / "results"
    first = run_manifest(load_manifest(path), results_dir=results, workers=1, cache=cache)
    assert set(first.sources.values()) == {"trained"}
    again = run_manifest(load_manifest(path), results_dir=results, workers=1, cache=cache)
    assert set(again.sources.values()) == {"resumed"}  # unchanged code: nothing trains

    # A refactor that keeps the numbers: same config hash, other source.
    _write(tmp_path, "yield from _train(run)  # refactored")
    import importlib
    import sys
    sys.modules.pop("my_q", None)
    importlib.invalidate_caches()
    edited = run_manifest(load_manifest(path), results_dir=results, workers=1, cache=cache)
    assert set(edited.sources.values()) == {"trained"}
    old_source = first.results.records[0].versions[TRAINER_SOURCE]
    assert edited.results.records[0].versions[TRAINER_SOURCE] != old_source

    base = CurveSet.from_results(first.results, label="before")
    cand = CurveSet.from_results(edited.results, label="after")
    prov = provenance(base, cand)
    assert prov.same_config and not prov.drift and prov.source_changed
    assert "source code changed" in prov.reading
    assert exact_check(base, cand, prov, GatePolicy()).status == "identical"
