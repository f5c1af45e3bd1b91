"""The package's public names resolve, lazily."""

from __future__ import annotations

import subprocess
import sys

import harness


def test_every_public_name_resolves():
    for name in harness.__all__:
        assert getattr(harness, name) is not None


def test_importing_the_package_does_not_import_the_statistics_layer():
    code = "import sys, harness; print('scipy' in sys.modules, 'harness.gate.verify' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert out.split() == ["False", "False"]


def test_a_manifest_is_what_a_baseline_reads_of_it():
    # The store layer types its manifest parameter with a protocol (it cannot import the manifest
    # layer beside it); the manifest class must keep providing it.
    from pathlib import Path

    from harness.store.baseline import RecordedManifest

    manifest = harness.load_manifest(Path(__file__).resolve().parents[1] / "manifests" / "frozenlake-q.toml")
    assert isinstance(manifest, RecordedManifest)
    assert isinstance(manifest.resolved_config(), dict) and manifest.seeds and manifest.config_hash.startswith("sha256:")
