"""Issue 13 item 2: signals end a command as documented, stops let workers clean up, reruns are clean.

SIGTERM and Ctrl-C (SIGINT to the terminal's process group) end ``run``/``verify`` with exit 130
and no traceback; a trainer that hangs past ``--time-limit`` ends ``verify`` with exit 3 and gets
SIGTERM (its cleanup runs) before SIGKILL; a writer killed mid-write leaves no temporary file
after the rerun; after a SIGKILL of the runner and a rerun the seed files equal a clean run's
byte for byte, and the index equals it except ``wall_seconds`` and ``source``. Each test failed
on the code before the fix (exit -15/-2 with a KeyboardInterrupt traceback; no ``--time-limit``
on verify and SIGKILL at once; temporary files left; ...). Exit 130 is 128 + SIGINT's number, the
status shells such as bash give a command ended by Ctrl-C (common practice).
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
from pathlib import Path

import pytest
from crafting import TOY, cli
from runner_toys import folder_bytes, toy_specs
from test_faults import _wait_for

from harness.core.atomic import sweep_stale_temporaries
from harness.execute import Task, WorkerResult
from harness.execute.local import LocalExecutor
from harness.execute.runner import run_specs

TESTS = Path(__file__).parent
ROOT = TESTS.parent


def _env() -> dict[str, str]:
    return {**os.environ, "PYTHONPATH": os.pathsep.join([str(TESTS), str(ROOT), os.environ.get("PYTHONPATH", "")])}


def _start(tmp_path: Path, command: str, settings: str = "pause = 0.3", *extra: str) -> subprocess.Popen:
    manifest = tmp_path / "m.toml"
    manifest.write_text(TOY.replace("pause = 0.0", settings).replace("count = 3", "count = 4"))
    argv = [sys.executable, "-m", "harness", command, str(manifest), "--results", str(tmp_path / "res"),
            "--no-cache", "--workers", "1", *extra]
    return subprocess.Popen(argv, cwd=tmp_path, env=_env(), stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            text=True, start_new_session=True)


@pytest.mark.parametrize(("command", "how"), [("run", "SIGTERM"), ("verify", "ctrl-c")])
def test_sigterm_and_ctrl_c_end_the_command_with_130_and_no_traceback(tmp_path, command, how):
    proc = _start(tmp_path, command)
    try:
        _wait_for(lambda: (tmp_path / "res" / "seed-7-0.json").exists())
    finally:
        if how == "SIGTERM":
            proc.send_signal(signal.SIGTERM)
        else:  # a terminal's Ctrl-C reaches the whole foreground process group
            os.killpg(proc.pid, signal.SIGINT)
    out, err = proc.communicate(timeout=60)
    assert proc.returncode == 130, (out, err)
    assert "Traceback" not in out + err and "interrupted" in err
    assert not list((tmp_path / "res").glob(".*.tmp"))


_SLOW_IMPORT = """
from pathlib import Path
import time
Path({marker!r}).touch()
time.sleep(120)
def train(run):
    yield from ()
"""


@pytest.mark.parametrize("how", ["SIGTERM", "ctrl-c"])
def test_a_signal_while_the_manifest_loads_ends_with_130_and_no_traceback(tmp_path, how):
    """Outside the runner (here: importing the trainer's module) SIGTERM used to kill with -15."""
    marker = tmp_path / "importing"
    (tmp_path / "slow_import.py").write_text(_SLOW_IMPORT.format(marker=str(marker)))
    manifest = tmp_path / "m.toml"
    manifest.write_text(TOY.replace('use = "runner_toys:toy"', 'use = "slow_import:train"'))
    proc = subprocess.Popen([sys.executable, "-m", "harness", "run", str(manifest), "--no-cache"], cwd=tmp_path,
                            env=_env(), stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            start_new_session=True)
    try:
        _wait_for(marker.exists)
    finally:
        if how == "SIGTERM":
            proc.send_signal(signal.SIGTERM)
        else:
            os.killpg(proc.pid, signal.SIGINT)
    out, err = proc.communicate(timeout=60)
    assert proc.returncode == 130, (out, err)
    assert "Traceback" not in out + err


@pytest.mark.parametrize("signum", [signal.SIGINT, signal.SIGTERM])
@pytest.mark.parametrize("entry", ["rlharness", "python -m harness"])
def test_a_signal_while_the_command_starts_ends_with_130_and_no_traceback(tmp_path, entry, signum):
    """During the import of the command line layer (made slow by tests/programs/slow_start, which
    stands in for argparse). Before the entry point installed its handler first: SIGINT gave a
    KeyboardInterrupt traceback and exit -2, SIGTERM exit -15."""
    script = Path(sys.executable).with_name("rlharness")
    if entry == "rlharness" and not script.is_file():
        pytest.skip("the rlharness console script is not installed beside this Python")
    argv = [str(script)] if entry == "rlharness" else [sys.executable, "-m", "harness"]
    marker = tmp_path / "importing"
    env = {**_env(), "SLOW_START_MARKER": str(marker)}
    env["PYTHONPATH"] = os.pathsep.join([str(TESTS / "programs" / "slow_start"), env["PYTHONPATH"]])
    proc = subprocess.Popen([*argv, "--version"], cwd=tmp_path, env=env, stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True)
    try:
        _wait_for(marker.exists)
    finally:
        proc.send_signal(signum)
    out, err = proc.communicate(timeout=60)
    assert proc.returncode == 130, (out, err)
    assert "Traceback" not in out + err and err.startswith("interrupted")


def test_a_trainer_hanging_past_the_time_limit_ends_verify_with_exit_3(tmp_path):
    proc = _start(tmp_path, "verify", 'bad = ["7/1"]\nmode = "hang"', "--time-limit", "2")
    out, err = proc.communicate(timeout=120)
    assert proc.returncode == 3, (out, err)
    assert "seed 7/1: exceeded the time limit of 2 s per run" in " ".join(out.split())


def test_the_time_limit_stops_a_worker_with_sigterm_first_so_the_trainer_cleans_up(tmp_path):
    marker = tmp_path / "cleaned"
    [spec] = toy_specs(1, trainer="fault_toys:hang_then_clean_up", config={"marker": str(marker)})
    pool = LocalExecutor(1)
    try:
        pool.submit(Task((spec,), time_limit=1.0))
        results = []
        while pool.pending():
            results += [r for r in pool.poll(0.5) if isinstance(r, WorkerResult)]
    finally:
        pool.close()
    assert results[0].failure.startswith("exceeded the time limit of 1 s per run")
    assert marker.read_text() == "cleaned up seed 7/0\n"  # before: SIGKILL at once, no cleanup ran


def test_close_during_a_run_also_lets_the_trainer_clean_up(tmp_path):
    marker = tmp_path / "cleaned"
    [spec] = toy_specs(1, trainer="fault_toys:hang_then_clean_up", config={"marker": str(marker)})
    pool = LocalExecutor(1)
    try:
        pool.submit(Task((spec,)))
        _wait_for(lambda: any(getattr(e, "kind", None) == "checkpoint" for e in pool.poll(0.2)))
    finally:
        pool.close()  # what Ctrl-C and SIGTERM of the command end in
    assert marker.read_text() == "cleaned up seed 7/0\n"


_KILLED_MID_WRITE = """
import os, signal, sys
from harness.core.atomic import atomic_path
with atomic_path(sys.argv[1]) as temporary:
    temporary.write_text("half a fi")
    os.kill(os.getpid(), signal.SIGKILL)
"""


def test_no_temporary_file_survives_a_rerun_after_sigkill_mid_write(tmp_path):
    folder = tmp_path / "res"
    folder.mkdir()
    target = folder / "seed-7-0.json"
    proc = subprocess.run([sys.executable, "-c", _KILLED_MID_WRITE, str(target)], env=_env(), capture_output=True)
    assert proc.returncode == -signal.SIGKILL
    [left] = folder.glob(".*.tmp")
    assert not target.exists()
    with open(folder / f".seed-7-1.json.{os.getpid()}.live.tmp", "w"):  # a live writer's file is left alone
        run_specs(toy_specs(2), results_dir=folder, workers=1, use_cache=False)
        assert [p.name for p in folder.glob(".*.tmp")] == [f".seed-7-1.json.{os.getpid()}.live.tmp"]
    assert not left.exists()
    assert sweep_stale_temporaries(folder) == 0


def test_after_sigkill_of_the_runner_a_rerun_equals_a_clean_run(tmp_path):
    """Seed files: byte-identical. Index: identical except per run ``wall_seconds`` and ``source``."""
    proc = _start(tmp_path, "run", "pause = 0.2")
    try:
        _wait_for(lambda: (tmp_path / "res" / "seed-7-1.json").exists())
    finally:
        os.killpg(proc.pid, signal.SIGKILL)  # the runner and its workers, mid-run
    proc.communicate(timeout=30)
    assert 2 <= len(folder_bytes(tmp_path / "res")) < 4 and not (tmp_path / "res" / "index.json").exists()
    rerun = _start(tmp_path, "run", "pause = 0.2")
    out, err = rerun.communicate(timeout=120)
    assert rerun.returncode == 0, (out, err)
    code, text = cli("run", tmp_path / "m.toml", "--results", tmp_path / "clean", "--no-cache", "--workers", "1")
    assert code == 0, text
    assert folder_bytes(tmp_path / "res") == folder_bytes(tmp_path / "clean")

    def comparable(folder: Path) -> dict:
        index = json.loads((folder / "index.json").read_text())
        for run in index["runs"]:
            run.pop("wall_seconds", None), run.pop("source", None)
        return index

    assert comparable(tmp_path / "res") == comparable(tmp_path / "clean")
    assert not list((tmp_path / "res").glob(".*.tmp"))
