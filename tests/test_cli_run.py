"""Acceptance tests of ``rlharness run``: summary table, progress, exit codes, cache and resume, dask."""

from __future__ import annotations

from io import StringIO

import pytest
from rich.console import Console
from runner_toys import folder_bytes

from harness.cli import ExitCode, main
from harness.execute import RunEvent
from harness.report.progress import RunProgress

TINY = """
name = "tiny-frozenlake"
[task]
id = "FrozenLake-v1"
options = {{ is_slippery = false }}
[trainer]
use = "{use}"
[trainer.settings]
{settings}
[budget]
env_steps = 2000
[evaluation]
every = 500
episodes = 3
[seeds]
count = 3
root = 4
"""
TABULAR = TINY.format(use="tabular-q", settings="explore_decay_steps = 1000")
TOY_RAISING = TINY.format(use="runner_toys:toy", settings='bad = ["4/1"]\nmode = "raise"')


def _cli(tmp_path, text, *extra, terminal=False):
    manifest = tmp_path / "m.toml"
    manifest.write_text(text)
    out = StringIO()
    console = Console(file=out, width=120, force_terminal=terminal, color_system=None)
    argv = ["run", str(manifest), "--results", str(tmp_path / "res"), "--cache-dir", str(tmp_path / "cache"), *extra]
    return main(argv, console=console), " ".join(out.getvalue().split())  # rich wraps long lines


def test_run_prints_a_summary_and_a_rerun_trains_nothing(tmp_path):
    code, text = _cli(tmp_path, TABULAR, "--workers", "2")
    assert code == ExitCode.OK
    for heading in ("seed", "status", "final return", "area under curve", "wall time"):
        assert heading in text
    assert "4/0" in text and "4/2" in text and "3 of 3 seeds finished (3 trained)" in text
    assert "all seeds" not in text  # not a terminal: no live progress
    first = folder_bytes(tmp_path / "res")
    code, text = _cli(tmp_path, TABULAR)
    assert code == ExitCode.OK and "(3 resumed)" in text
    (tmp_path / "res" / "seed-4-1.json").unlink()
    code, text = _cli(tmp_path, TABULAR)
    assert "(1 cache, 2 resumed)" in text
    code, text = _cli(tmp_path, TABULAR, "--no-cache")
    assert "(3 resumed)" in text
    assert folder_bytes(tmp_path / "res") == first


def test_failed_seed_gives_exit_code_3_and_names_the_reason(tmp_path):
    code, text = _cli(tmp_path, TOY_RAISING)
    assert code == ExitCode.RUNS_FAILED
    assert "FAILED" in text
    assert "seed 4/1 failed: RuntimeError: toy trainer broke on purpose at step 500" in text
    assert "2 of 3 seeds finished" in text and "fewer seeds than the manifest asks" in text


def test_bad_manifest_exits_2_and_writes_nothing(tmp_path):
    code, text = _cli(tmp_path, TABULAR.replace("env_steps = 2000", "env_steps = -5"))
    assert code == ExitCode.BAD_INPUT
    assert "budget.env_steps" in text
    assert not (tmp_path / "res").exists()


def test_bad_arguments_are_refused(tmp_path, capsys):
    for extra in (["--time-limit", "0"], ["--workers", "zero"], ["--executor", "slurm"]):
        with pytest.raises(SystemExit) as exc:
            _cli(tmp_path, TABULAR, *extra)
        assert exc.value.code == 2
    assert "must be a positive number of seconds, got '0'" in capsys.readouterr().err
    code, text = _cli(tmp_path, TABULAR, "--scheduler", "tcp://127.0.0.1:1")
    assert code == ExitCode.BAD_INPUT and "--scheduler needs --executor dask" in text


def test_live_progress_shows_seeds_steps_return_and_overall_row():
    out = StringIO()
    console = Console(file=out, width=120, force_terminal=True, color_system=None)
    with RunProgress(console) as progress:
        for i, label in enumerate(("9/0", "9/1")):
            progress(RunEvent("planned", i, label, budget=1000))
        progress(RunEvent("started", 0, "9/0"))
        progress(RunEvent("checkpoint", 0, "9/0", step=500, mean_return=12.5))
        progress(RunEvent("finished", 1, "9/1", mean_return=3.0, source="cache"))
        rows = {t.description: t for t in progress.progress.tasks}
    assert rows["seed 9/0"].completed == 500 and rows["seed 9/0"].fields["ret"] == "12.5"
    assert rows["seed 9/1"].fields["ret"] == "cache"
    assert rows["all seeds (1/2 done)"].completed == 1500 and rows["all seeds (1/2 done)"].total == 2000
    text = out.getvalue()
    assert "seed 9/0" in text and "500/1000" in text


@pytest.mark.slow
def test_dask_local_cluster_gives_the_same_files(tmp_path):
    code, _ = _cli(tmp_path, TABULAR, "--no-cache")
    assert code == ExitCode.OK
    local = folder_bytes(tmp_path / "res")
    code, text = _cli(tmp_path / "..", TABULAR, "--no-cache", "--executor", "dask", "--workers", "1",
                      "--results", str(tmp_path / "dask"))
    assert code == ExitCode.OK, text
    assert folder_bytes(tmp_path / "dask") == local
