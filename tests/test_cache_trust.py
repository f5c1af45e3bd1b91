"""Issue 13 item 7: the run cache is not a way in.

Anyone who can write into the cache folder can make an edited entry self-consistent (a record
that parses, matches its key and whose means agree with its returns). Entries therefore carry an
HMAC under a secret kept outside the folder; an entry without a valid one is a miss and is
trained again. A cache folder that leads out of itself (a symlink) or a file where the folder
should be is refused with exit 2 naming the path. Each test failed on the code before the fix
(the edited entry was served; the others crashed with a traceback).
"""

from __future__ import annotations

import dataclasses
import json
import stat

import pytest
from crafting import TOY, cli
from runner_toys import folder_bytes, toy_specs

from harness.cli import ExitCode
from harness.core.curves import Checkpoint, LearningCurve
from harness.store.cache import CACHE_KEY_ENV, RunCache, cache_secret
from harness.store.results import RunRecord, record_text

VERSIONS = {"python": "3.11.9", "numpy": "2.1.0"}


def _record(spec, shift=0.0):
    curve = LearningCurve(tuple(Checkpoint(s, (0.5 + shift, 1.0 + shift)) for s in spec.checkpoint_steps()))
    return RunRecord(spec, "ok", curve, None, VERSIONS)


def test_an_entry_edited_but_self_consistent_is_a_miss(tmp_path, monkeypatch):
    monkeypatch.setenv(CACHE_KEY_ENV, "secret held by the runner")
    cache = RunCache(tmp_path / "c")
    spec = toy_specs(1)[0]
    path = cache.put(_record(spec))
    assert cache.get(spec, VERSIONS) == _record(spec)
    path.write_text(record_text(_record(spec, shift=100.0)))  # better curves, every field consistent
    assert json.loads(path.read_text())["curve"][0]["mean"] == 100.75
    assert cache.get(spec, VERSIONS) is None  # before: the edited record was served
    monkeypatch.setenv(CACHE_KEY_ENV, "another secret")  # written under another secret: not trusted either
    cache2 = RunCache(tmp_path / "c")
    cache2.put(_record(spec))
    monkeypatch.setenv(CACHE_KEY_ENV, "secret held by the runner")
    assert RunCache(tmp_path / "c").get(spec, VERSIONS) is None


def test_the_secret_file_is_created_private_outside_the_cache(tmp_path, monkeypatch):
    monkeypatch.delenv(CACHE_KEY_ENV, raising=False)
    monkeypatch.setenv("XDG_CONFIG_HOME", str(tmp_path / "config"))
    secret = cache_secret()
    key_file = tmp_path / "config" / "rl-harness" / "cache-key"
    assert key_file.read_bytes().strip() == secret and len(secret) == 64
    assert stat.S_IMODE(key_file.stat().st_mode) == 0o600
    assert cache_secret() == secret  # read back, not replaced


def _run(tmp_path, cache_dir):
    (tmp_path / "m.toml").write_text(TOY)
    return cli("run", tmp_path / "m.toml", "--results", tmp_path / "res", "--cache-dir", cache_dir, "--workers", "1")


def test_a_file_where_the_cache_folder_should_be_is_bad_input(tmp_path):
    (tmp_path / "cache").write_text("not a folder")
    code, text = _run(tmp_path, tmp_path / "cache")
    assert code == ExitCode.BAD_INPUT, text
    assert f"{tmp_path / 'cache'}: the run cache folder is a file" in text and "Traceback" not in text


@pytest.mark.parametrize("inside", ["runs", "locks"])
def test_a_cache_subfolder_leading_out_of_the_cache_is_bad_input(tmp_path, inside):
    outside = tmp_path / "outside"
    outside.mkdir()
    (tmp_path / "cache").mkdir()
    (tmp_path / "cache" / inside).symlink_to(outside)
    code, text = _run(tmp_path, tmp_path / "cache")
    assert code == ExitCode.BAD_INPUT, text
    assert "escapes the cache folder" in text and "Traceback" not in text
    assert not any(outside.iterdir())


def test_a_file_where_a_cache_subfolder_should_be_is_bad_input(tmp_path):
    (tmp_path / "cache").mkdir()
    (tmp_path / "cache" / "locks").write_text("not a folder")
    code, text = _run(tmp_path, tmp_path / "cache")
    assert code == ExitCode.BAD_INPUT, text
    assert "locks" in text and "Traceback" not in text


def test_a_cache_hit_still_gives_the_same_bytes(tmp_path):
    first = _run(tmp_path, tmp_path / "cache")
    assert first[0] == ExitCode.OK
    before = folder_bytes(tmp_path / "res")
    for p in (tmp_path / "res").glob("seed-*.json"):
        p.unlink()
    code, text = _run(tmp_path, tmp_path / "cache")
    assert code == ExitCode.OK and "(3 cache)" in text
    assert folder_bytes(tmp_path / "res") == before
    assert dataclasses.is_dataclass(RunRecord)
