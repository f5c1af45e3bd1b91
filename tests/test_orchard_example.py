"""The command-trainer example (examples/orchard/): a standalone script verified unchanged.

Its baseline was recorded with `rlharness record orchard.toml` in that folder; here it is
verified from scratch (exit 0, every curve bitwise identical), and the copy of the script
with a planted bug must fail the gate (exit 1) with the metrics named.
"""

from __future__ import annotations

import shutil
from io import StringIO
from pathlib import Path

from rich.console import Console

from harness.cli import ExitCode, main
from harness.execute.work import installed_versions
from harness.store.baseline import read_baseline
from harness.store.results import TRAINER_SOURCE

ORCHARD = Path(__file__).resolve().parents[1] / "examples" / "orchard"


def _cli(*argv: str) -> tuple[int, str]:
    out = StringIO()
    code = main(list(argv), console=Console(file=out, width=120))
    return code, out.getvalue()


def _copy(tmp_path: Path, monkeypatch) -> Path:
    folder = tmp_path / "orchard"
    shutil.copytree(ORCHARD, folder, ignore=shutil.ignore_patterns("results", ".rlharness-cache", "__pycache__"))
    monkeypatch.chdir(folder)
    monkeypatch.setenv("RLHARNESS_CACHE_DIR", str(tmp_path / "cache"))
    return folder


def test_the_recorded_example_verifies_from_scratch_bitwise_identical(tmp_path, monkeypatch):
    folder = _copy(tmp_path, monkeypatch)
    code, out = _cli("verify", "orchard.toml", "--fresh", "--workers", "2")
    assert code == ExitCode.OK, out
    recorded = read_baseline(folder / "baselines" / "orchard-irrigation.json").versions
    if all(installed_versions().get(k) == v for k, v in recorded.items() if k != TRAINER_SOURCE):
        assert "every seed's curve is bitwise identical to the baseline" in out
    else:  # other NumPy/BLAS than at recording (CI's minimum-versions run): the statistics decide alone
        assert "installed versions differ" in out


def test_the_planted_bug_fails_the_gate_with_the_metric_named(tmp_path, monkeypatch):
    folder = _copy(tmp_path, monkeypatch)
    shutil.copy(folder / "irrigate_buggy.py", folder / "irrigate.py")
    code, out = _cli("verify", "orchard.toml", "--workers", "2")
    assert code == ExitCode.GATE_FAILED, out
    assert "gate: final fails rule drop-beyond-margin" in out and "gate: auc fails rule drop-beyond-margin" in out
    assert "the trainer's source code changed since the baseline" in out.replace("\n", " ")
