"""`rlharness adopt`: curve files that already exist become a results folder; nothing is run.

The central check: curves of two groups, adopted from files, give exactly the verdict and
numbers through `compare` that the same values give when the harness's own runs produced
them. Also: a baseline recorded from adopted runs and verified with --no-run, the
provenance naming every file and its SHA-256, and malformed input refused (exit 2, file,
line and column named, nothing written).
"""

from __future__ import annotations

import hashlib
import json
import subprocess
from io import StringIO
from pathlib import Path

from rich.console import Console

from harness.cli import ExitCode, main
from harness.core.curvefile import curve_file_text
from harness.execute.runner import run_manifest
from harness.manifest.loader import load_manifest
from harness.store.results import read_index, read_results

from test_command import write_manifest


def _cli(*argv: str) -> tuple[int, str]:
    out = StringIO()
    code = main([str(a) for a in argv], console=Console(file=out, width=200))
    return code, out.getvalue()


def _groups(tmp_path: Path):
    """Two groups trained by the harness itself: the program's curves, the second shifted down."""
    seeds = list(range(1, 7))
    a = load_manifest(write_manifest(tmp_path / "a", seeds=seeds))
    b = load_manifest(write_manifest(tmp_path / "b", extra=["--shift", "-0.4"], seeds=seeds))
    for manifest, name in ((a, "a-run"), (b, "b-run")):
        assert run_manifest(manifest, results_dir=tmp_path / name, workers=2, use_cache=False).ok
    return a, b


def _verdict(tmp_path: Path, first: Path, second: Path, name: str) -> dict:
    report = tmp_path / f"{name}.json"
    code, out = _cli("compare", first, second, "--manifest", tmp_path / "a" / "m.toml", "--json", report)
    data = json.loads(report.read_text())
    data["exit"] = code
    return data


def test_adopted_curves_give_the_same_verdict_and_numbers_as_the_harness_own_runs(tmp_path):
    a, b = _groups(tmp_path)
    # group a: the program's own curve files, one per seed, in the manifest's seed order
    files = [tmp_path / "a-run" / "runs" / f"seed-{s.label}" / "curve.csv" for s in a.seeds]
    code, out = _cli("adopt", tmp_path / "a" / "m.toml", *files, "--results", tmp_path / "a-adopted")
    assert code == ExitCode.OK, out
    # group b: one long file with a seed column, written from the stored records
    records = read_results(tmp_path / "b-run").records
    long_file = tmp_path / "b-all.csv"
    long_file.write_text(curve_file_text({r.spec.seed.label: r.curve.checkpoints for r in records}))
    code, out = _cli("adopt", tmp_path / "b" / "m.toml", long_file, "--results", tmp_path / "b-adopted")
    assert code == ExitCode.OK, out

    ran = _verdict(tmp_path, tmp_path / "a-run", tmp_path / "b-run", "ran")
    adopted = _verdict(tmp_path, tmp_path / "a-adopted", tmp_path / "b-adopted", "adopted")
    assert ran["exit"] == adopted["exit"] == ExitCode.GATE_FAILED  # a shift of -0.4 is called worse
    for key in ("checks", "divergence", "gate", "passed", "floor", "threshold", "summary"):
        assert adopted[key] == ran[key], key
    assert len(ran["checks"]) == 2 and ran["divergence"] is not None
    assert {c["verdict"] for c in ran["checks"]} == {"worse"}


def test_a_baseline_recorded_from_adopted_runs_names_the_files_and_verifies_a_rerun(tmp_path, monkeypatch):
    manifest_path = write_manifest(tmp_path / "m", seeds=[1, 2, 3])
    manifest = load_manifest(manifest_path)
    assert run_manifest(manifest, results_dir=tmp_path / "old", workers=2, use_cache=False).ok
    files = [tmp_path / "old" / "runs" / f"seed-{s}" / "curve.csv" for s in (1, 2, 3)]
    monkeypatch.chdir(tmp_path / "m")
    code, out = _cli("adopt", "m.toml", *files)
    assert code == ExitCode.OK, out
    sha = hashlib.sha256(files[0].read_bytes()).hexdigest()
    assert f"sha256:{sha}" in out and "nothing was rerun" in out
    assert [r["source"] for r in read_index(tmp_path / "m" / "results" / "toy-command")["runs"]] == ["adopted"] * 3
    git = ["git", "-c", "user.name=t", "-c", "user.email=t@example.org"]
    for args in (["init", "-q"], ["add", "m.toml", "curve_writer.py"], ["commit", "-qm", "program"]):
        subprocess.run([*git, *args], cwd=tmp_path / "m", check=True)
    head = subprocess.run(["git", "rev-parse", "HEAD"], cwd=tmp_path / "m", capture_output=True, text=True).stdout
    code, out = _cli("record", "m.toml", "--no-run")
    assert code == ExitCode.OK, out
    baseline = json.loads((tmp_path / "m" / "baselines" / "toy-command.json").read_text())
    # the program folder's commit, as information; an edit of a tracked file is marked
    assert baseline["recording"]["program_git_commit"] == head.strip()
    (tmp_path / "m" / "curve_writer.py").write_text((tmp_path / "m" / "curve_writer.py").read_text() + "\n")
    assert _cli("record", "m.toml", "--no-run", "--overwrite")[0] == ExitCode.OK
    baseline = json.loads((tmp_path / "m" / "baselines" / "toy-command.json").read_text())
    assert baseline["recording"]["program_git_commit"] == head.strip() + "+changes"
    assert f"curve.csv sha256:{sha}" in baseline["versions"]["adopted_files"]
    assert baseline["versions"]["adopted"].startswith("nothing was rerun")
    code, out = _cli("verify", "m.toml", "--no-run", "--results", tmp_path / "old")
    assert code == ExitCode.OK, out
    assert "version drift in adopted, adopted_files" in out.replace("\n", " ")


def test_malformed_files_are_refused_with_file_line_and_column_and_nothing_is_written(tmp_path):
    manifest = write_manifest(tmp_path / "m", seeds=[1, 2])
    good = b"# rlharness-curve 1\nstep,episode,return\n" + b"".join(
        f"{s},{e},1.0\n".encode() for s in (0, 25, 50, 75, 100) for e in range(3))
    (tmp_path / "1.csv").write_bytes(good)
    (tmp_path / "2.csv").write_bytes(good.replace(b"50,1,1.0", b"50,1,1.O"))
    out_dir = tmp_path / "out"
    code, out = _cli("adopt", manifest, tmp_path / "1.csv", tmp_path / "2.csv", "--results", out_dir)
    assert code == ExitCode.BAD_INPUT
    assert f"{tmp_path / '2.csv'}:10:6: return must be a decimal number" in out.replace("\n", "")
    assert not out_dir.exists()
    code, out = _cli("adopt", manifest, tmp_path / "1.csv", "--results", out_dir)
    assert code == ExitCode.BAD_INPUT and "1 curve files for the manifest's 2 seeds" in out
    assert not out_dir.exists()
    code, out = _cli("adopt", manifest, tmp_path / "1.csv", tmp_path / "1.csv", "--results", out_dir)
    assert code == ExitCode.OK
    code, out = _cli("adopt", manifest, tmp_path / "1.csv", tmp_path / "1.csv", "--results", out_dir)
    assert code == ExitCode.BAD_INPUT and "already holds results" in out


def test_compare_of_a_programs_own_task_needs_the_scale_from_the_manifest_or_the_command_line(tmp_path):
    manifest = write_manifest(tmp_path / "m", seeds=[1, 2])
    rows = b"".join(f"{s},{e},{s / 100 + e}\n".encode() for s in (0, 25, 50, 75, 100) for e in range(3))
    (tmp_path / "1.csv").write_bytes(b"# rlharness-curve 1\nstep,episode,return\n" + rows)
    assert _cli("adopt", manifest, tmp_path / "1.csv", tmp_path / "1.csv", "--results", tmp_path / "a")[0] == 0
    code, out = _cli("compare", tmp_path / "a", tmp_path / "a")
    assert code == ExitCode.BAD_INPUT and "'Toy-v0' is not a gymnasium task" in out
    assert _cli("compare", tmp_path / "a", tmp_path / "a", "--manifest", manifest)[0] == ExitCode.OK
