"""Run cache: content keys, marker files, keys that cannot escape, misses on anything doubtful."""

from __future__ import annotations

import dataclasses

import pytest
from filelock import Timeout
from runner_toys import toy_specs

import harness.store.cache
from harness.store.cache import RunCache, cache_key
from harness.core.curves import Checkpoint, LearningCurve
from harness.store.results import RunRecord, record_text

VERSIONS = {"numpy": "2.0", "python": "3.11"}


def _record(spec, versions=VERSIONS) -> RunRecord:
    curve = LearningCurve(tuple(Checkpoint(s, (float(s), 1.0)) for s in spec.checkpoint_steps()))
    return RunRecord(spec, "ok", curve, None, versions)


def test_put_then_get_gives_the_same_record_and_bytes(tmp_path):
    cache = RunCache(tmp_path / "c")
    spec = toy_specs(2)[1]
    path = cache.put(_record(spec))
    assert path.read_text() == record_text(_record(spec))
    assert cache.get(spec, VERSIONS) == _record(spec)


def test_misses_for_another_seed_config_or_versions(tmp_path):
    cache = RunCache(tmp_path)
    a, b = toy_specs(2)
    cache.put(_record(a))
    assert cache.get(b, VERSIONS) is None
    assert cache.get(a, {**VERSIONS, "numpy": "2.1"}) is None
    assert cache.get(dataclasses.replace(a, config={"pause": 0.0}), VERSIONS) is None


def test_key_covers_spec_versions_and_harness_version(monkeypatch):
    a, b = toy_specs(2)
    key = cache_key(a, VERSIONS)
    assert len(key) == 64 and int(key, 16) >= 0
    assert key == cache_key(a, dict(reversed(list(VERSIONS.items()))))  # canonical JSON: key order does not matter
    assert key != cache_key(b, VERSIONS)
    assert key != cache_key(a, {**VERSIONS, "python": "3.12"})
    monkeypatch.setattr(harness.store.cache, "__version__", "99.0")
    assert key != cache_key(a, VERSIONS)


def test_failed_runs_are_not_cached(tmp_path):
    spec = toy_specs(1)[0]
    assert RunCache(tmp_path).put(RunRecord(spec, "failed", None, "boom", VERSIONS)) is None
    assert not (tmp_path / "runs").exists()


def test_folder_is_marked_as_a_cache(tmp_path):
    RunCache(tmp_path).put(_record(toy_specs(1)[0]))
    # Cache Directory Tagging Specification (B. Ford, bford.info/cachedir): the file starts with this signature.
    assert (tmp_path / "CACHEDIR.TAG").read_text().startswith("Signature: 8a477f597d28d172789f06886806bc55")
    # gitignore(5): a lone "*" pattern ignores every file in the folder.
    assert (tmp_path / ".gitignore").read_text().splitlines()[-1] == "*"
    assert "deleted at any time" in (tmp_path / "README.md").read_text()


def test_damaged_or_foreign_entry_is_a_miss(tmp_path):
    cache = RunCache(tmp_path)
    a, b = toy_specs(2)
    path = cache.put(_record(a))
    path.write_text(path.read_text()[:50])
    assert cache.get(a, VERSIONS) is None
    path.write_text(record_text(_record(b)))  # another run's record under a's key
    assert cache.get(a, VERSIONS) is None


@pytest.mark.parametrize("key", ["../../etc/passwd", "AB" * 32, "0" * 63, "/" + "0" * 63, 5])
def test_keys_cannot_escape_the_folder(tmp_path, key):
    with pytest.raises(ValueError, match="`key` must be 64 lowercase hexadecimal digits"):
        RunCache(tmp_path)._entry(key)


def test_symlinked_subfolder_pointing_outside_is_refused(tmp_path):
    outside = tmp_path / "outside"
    outside.mkdir()
    cache = RunCache(tmp_path / "c")
    cache.folder.mkdir()
    (cache.folder / "runs").symlink_to(outside)
    with pytest.raises(ValueError, match="escapes the cache folder"):
        cache.put(_record(toy_specs(1)[0]))
    assert not any(outside.iterdir())


def test_claim_is_exclusive_between_holders(tmp_path):
    cache = RunCache(tmp_path)
    spec = toy_specs(1)[0]
    first, second = cache.claim(spec, VERSIONS), cache.claim(spec, VERSIONS)
    first.acquire(timeout=0)
    try:
        with pytest.raises(Timeout):
            second.acquire(timeout=0)
    finally:
        first.release()
    second.acquire(timeout=0)
    second.release()


def test_folder_argument_is_checked():
    with pytest.raises(TypeError, match="`folder` must be a path, got int 3"):
        RunCache(3)
