"""Version pins: what is installed, drift, and rewriting [pins] in place."""

from __future__ import annotations

import dataclasses
import importlib.metadata
import os
import platform
from io import StringIO

import numpy as np
import pytest
import threadpoolctl
from rich.console import Console

import harness
from harness.cli import ExitCode, main
from harness.core.errors import ManifestError
from harness.manifest.loader import load_manifest
from harness.manifest.pins import Pins, drift, installed_pins, write_pins

MANIFEST = """\
# a comment at the top
name = "pinned"   # trailing comment

[task]
id = "FrozenLake-v1"

[trainer]
use = "tabular-q"

[budget]
env_steps = 100

[evaluation]
every = 50
episodes = 2

[seeds]
values = [1, 2]
"""


def test_installed_pins_report_the_running_environment():
    pins = installed_pins(config_hash="sha256:abc")
    # Each value read here from its own source: the interpreter, the packages' metadata, threadpoolctl.
    assert pins.python == platform.python_version()
    assert pins.numpy == np.__version__ == importlib.metadata.version("numpy")
    assert pins.scipy == importlib.metadata.version("scipy")
    assert pins.gymnasium == importlib.metadata.version("gymnasium")
    assert pins.rl_harness == harness.__version__
    blas = [lib for lib in threadpoolctl.threadpool_info() if lib["user_api"] == "blas"]
    assert any(pins.blas == f"{lib['internal_api']} {lib['version']}" for lib in blas)
    assert any(pins.blas_kernel == str(lib.get("architecture") or "unknown") for lib in blas)
    assert pins.config_hash == "sha256:abc"
    assert "config_hash" not in pins.versions and pins.versions["numpy"] == pins.numpy


def test_drift_marks_exactly_the_items_that_differ():
    pinned = installed_pins(config_hash="sha256:a")
    rows = drift(pinned, dataclasses.replace(pinned, numpy="0.0.1", config_hash="sha256:b"))
    assert [r.key for r in rows] == [f.name for f in dataclasses.fields(Pins)]
    assert [r.key for r in rows if not r.matches] == ["numpy", "config_hash"]
    assert all(r.matches for r in drift(pinned, pinned))


def test_write_pins_appends_then_refreshes_in_place_keeping_comments(tmp_path):
    path = tmp_path / "m.toml"
    path.write_text(MANIFEST, encoding="utf-8")
    manifest = load_manifest(path)
    pins = installed_pins(config_hash=manifest.config_hash)
    write_pins(path, pins)
    text = path.read_text(encoding="utf-8")
    assert text.startswith(MANIFEST)  # everything before the new table is byte for byte the same
    assert load_manifest(path).pins == pins
    assert load_manifest(path).config_hash == manifest.config_hash  # pins do not enter the hash
    # Hand-edit the table: a comment, a changed value, a stale key; then refresh.
    edited = text.replace(f'numpy = "{pins.numpy}"', 'numpy = "1.0"   # keep me') + "\n[check]\nalpha = 0.01\n"
    edited = edited.replace('python = "', 'stale = 1\npython = "')
    path.write_text(edited, encoding="utf-8")
    write_pins(path, pins)
    refreshed = path.read_text(encoding="utf-8")
    assert f'numpy = "{pins.numpy}"   # keep me' in refreshed
    assert "stale" not in refreshed
    assert refreshed.endswith("[check]\nalpha = 0.01\n")
    assert load_manifest(path).pins == pins
    assert sorted(p.name for p in tmp_path.iterdir()) == ["m.toml"]


def test_write_pins_is_atomic(tmp_path, monkeypatch):
    path = tmp_path / "m.toml"
    path.write_text(MANIFEST, encoding="utf-8")

    def failing_replace(src, dst):
        raise OSError("disk full")

    monkeypatch.setattr(os, "replace", failing_replace)
    with pytest.raises(OSError, match="disk full"):
        write_pins(path, installed_pins(config_hash="sha256:x"))
    assert path.read_text(encoding="utf-8") == MANIFEST
    assert sorted(p.name for p in tmp_path.iterdir()) == ["m.toml"]  # no temporary file left


def _cli(*argv: str) -> tuple[int, str]:
    out = StringIO()
    code = main(list(argv), console=Console(file=out, width=200))
    return code, out.getvalue()


def test_pin_and_drift_commands(tmp_path):
    path = tmp_path / "m.toml"
    path.write_text(MANIFEST, encoding="utf-8")
    code, out = _cli("drift", str(path))
    assert code == ExitCode.BAD_INPUT and "run `rlharness pin" in out
    assert _cli("pin", str(path))[0] == ExitCode.OK
    code, out = _cli("drift", str(path), "--fail-on-drift")
    assert code == ExitCode.OK and "no drift" in out
    # A changed setting changes the config hash, which drift reports next to any version change.
    text = path.read_text(encoding="utf-8").replace('use = "tabular-q"', 'use = "tabular-q"\nsettings = { discount = 0.5 }')
    path.write_text(text.replace(f'numpy = "{np.__version__}"', 'numpy = "1.0"'), encoding="utf-8")
    code, out = _cli("drift", str(path), "--fail-on-drift")
    assert code == ExitCode.GATE_FAILED
    assert "drift in numpy, config_hash" in out and "DRIFT" in out
    assert _cli("drift", str(path))[0] == ExitCode.OK  # informational without --fail-on-drift
    code, out = _cli("pin", str(path))
    assert code == ExitCode.OK and "1.0" in out  # the table shows the value it replaced
    assert load_manifest(path).pins == installed_pins(config_hash=load_manifest(path).config_hash)


@pytest.mark.parametrize(("text", "pattern"), [("a = [1,\n", r"is not valid TOML"), ("pins = 3\n", r"\[pins\]: must be a table")])
def test_write_pins_refuses_what_it_cannot_rewrite(tmp_path, text, pattern):
    path = tmp_path / "m.toml"
    path.write_text(text, encoding="utf-8")
    with pytest.raises(ManifestError, match=pattern):
        write_pins(path, installed_pins(config_hash="sha256:x"))
    assert path.read_text(encoding="utf-8") == text
