"""Issue 13 "must show": seeded fuzzing of manifests, baselines and results finds no crash and no import.

A fast sample of the generators in ``tests/fault_generators.py``; ``benchmarks/fault_sweep.py``
runs the full counts (200 manifests, 160 baselines and results, signal trials) and prints the
before/after figures. A crash is an exception escaping ``main``, exit 70 or a printed traceback;
an import is a marker file left by a module that a crafted file names as its task. On the code
before issue 13 this sample crashed (exit 1 with a traceback) on several cases of each kind.
"""

from __future__ import annotations

from fault_generators import data_cases, manifest_cases, record_toy, sweep


def test_malformed_manifests_are_refused_without_a_crash(tmp_path):
    result = sweep(manifest_cases(7, 40, tmp_path / "manifests"))
    assert result.cases == 40
    assert result.crashes == []
    assert set(result.codes) <= {0, 1, 2, 3}


def test_damaged_and_crafted_data_never_crashes_and_never_imports(tmp_path):
    recorded = record_toy(tmp_path / "recorded")
    result = sweep(data_cases(7, 40, recorded, tmp_path / "data", evil_share=0.25))
    assert result.cases == 40
    assert result.crashes == []
    assert result.import_attempts >= 5 and result.imports == 0
    assert result.codes[2] >= 20  # most crafted files are refused as bad input
