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
