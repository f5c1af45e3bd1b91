"""A run trained by other code is never reused: the trainer's source fingerprint.

The job of verification is to catch what a refactor did to the numbers, so a rerun
after an edit of the trainer must train again rather than read stale runs from the
results folder or the cache, and verification must still compare bitwise (a
refactor is where the exact check matters most).
"""

from __future__ import annotations

from pathlib import Path

from harness.store.cache import RunCache
from harness.gate.curveset import CurveSet
from harness.manifest.loader import load_manifest
from harness.manifest.policy import GatePolicy
from harness.execute.runner import run_manifest
from harness.store.results import TRAINER_SOURCE
from harness.trainers.registry import resolve_trainer, source_fingerprint
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


def test_fingerprint_covers_the_whole_package_and_changes_with_any_edit(tmp_path, monkeypatch):
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
