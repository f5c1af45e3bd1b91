"""The command trainer: a training program run per seed, read through its curve file.

The program is tests/programs/curve_writer.py, a script that knows nothing of rl-harness.
Checked here: the manifest keys and their errors, every failure mode failing only its own
seed (exit 3) with the program's last output lines, the time limit killing the whole
process group, and Ctrl-C / SIGTERM mid-run (exit 130, no process left, a rerun trains
only the unfinished seeds).
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import psutil
import pytest
from command_toys import write_manifest

from harness.cli import main
from harness.core.curvefile import parse_curve_text
from harness.core.errors import ManifestError
from harness.execute.runner import run_manifest
from harness.manifest.loader import load_manifest, parse_manifest
from harness.store.results import read_results
from harness.trainers.command import program_seed
from harness.core.seeding import RunSeed


def alive(pid: int) -> bool:
    try:
        return psutil.Process(pid).status() != psutil.STATUS_ZOMBIE
    except psutil.NoSuchProcess:
        return False


def all_gone(pids: list[int], within: float = 5.0) -> bool:
    """Whether every process is gone within ``within`` seconds: a SIGKILLed process ends when the
    kernel next schedules it, a moment after the signal, not at once (on a loaded machine, later)."""
    deadline = time.monotonic() + within
    while any(alive(pid) for pid in pids):
        if time.monotonic() > deadline:
            return False
        time.sleep(0.05)
    return True


def pids_of(results: Path) -> list[int]:
    return [int(p) for f in sorted(results.glob("runs/*/pids")) for p in f.read_text().split()]


def test_a_program_trains_every_seed_and_the_records_hold_its_curve_file_exactly(tmp_path):
    manifest = load_manifest(write_manifest(tmp_path / "m"))
    outcome = run_manifest(manifest, results_dir=tmp_path / "r", workers=2, use_cache=False)
    assert outcome.ok
    plan = manifest.evaluation.checkpoint_steps(manifest.budget)
    for record in outcome.results.records:
        folder = tmp_path / "r" / "runs" / f"seed-{record.spec.seed.label}"
        written = parse_curve_text((folder / "curve.csv").read_bytes(), "curve", steps=plan, episodes=3)[None]
        assert record.curve.checkpoints == written  # the program's numbers, bit for bit
        log = (folder / "output.log").read_text()
        assert f"training seed {record.spec.seed.label} for 100 steps" in log and log.rstrip().endswith("done")
    assert outcome.results.records[0].versions["trainer_source"].startswith("sha256:")


def test_failure_modes_fail_only_their_own_seed_with_the_reason_and_the_program_output(tmp_path):
    modes = {2: "exit1", 3: "nan", 4: "offplan", 5: "nofile", 6: "fewer", 7: "hang", 8: "replace"}
    extra = [a for seed, mode in modes.items() for a in ("--fail", f"{seed}={mode}")]
    path = write_manifest(tmp_path / "m", extra=extra, keys="time_limit = 3", seeds=[1, *modes])
    code = main(["run", str(path), "--results", str(tmp_path / "r"), "--workers", "2", "--no-cache"])
    assert code == 3
    records = {r.spec.seed.label: r for r in read_results(tmp_path / "r").records}
    assert records["1"].ok
    last = {label: r.failure.strip().splitlines()[-1] for label, r in records.items() if not r.ok}
    assert "exited with code 1" in last["2"] and "something broke in the update" in records["2"].failure
    assert "non-finite evaluation return (nan)" in last["3"] and "curve.csv:6:" in last["3"]
    assert "step 26 is not the next planned checkpoint 25" in last["4"]
    assert "without writing its curve file" in last["5"]
    assert "step 25 has 2 evaluation episodes, the manifest declares 3" in last["6"]
    assert "ran past the time limit of 3 s" in last["7"]
    assert "the curve file was replaced, truncated or removed while the program ran" in last["8"]
    hung = pids_of(tmp_path / "r")
    assert len(hung) == 2  # the hanging program and its grandchild: both gone with the process group
    assert all_gone(hung)


def test_manifest_keys_are_checked_with_the_key_named(tmp_path):
    good = write_manifest(tmp_path / "m")
    text = good.read_text()
    cases = {
        '"{curve_file}"]': ('"{curve_fle}"]', "trainer.command[11]", "Did you mean 'curve_file'"),
        "[budget]": ('use = "dqn"\n[budget]', "trainer.use", "not both"),
        "gymnasium = false": ("gymnasium = false\noptions = {a = 1}", "task.options", "takes none"),
        "threshold = 1.0": ("", "check.threshold", "threshold"),
    }
    for old, (new, key, words) in cases.items():
        with pytest.raises(ManifestError, match=words) as err:
            parse_manifest(text.replace(old, new, 1), path=good)
        assert err.value.key == key
    for keys, key in (('folder = "nowhere"', "trainer.folder"), ('sources = ["trian.py"]', "trainer.sources[0]"),
                      ('environment = { RLHARNESS_SEED = "1" }', "trainer.environment.RLHARNESS_SEED"),
                      ("time_limit = 0", "trainer.time_limit")):
        with pytest.raises(ManifestError) as err:
            parse_manifest(text.replace("[budget]", keys + "\n[budget]"), path=good)
        assert err.value.key == key, err.value


def test_the_time_limit_is_not_part_of_the_configuration(tmp_path):
    a = load_manifest(write_manifest(tmp_path / "a"))
    b = load_manifest(write_manifest(tmp_path / "b", keys="time_limit = 9"))
    assert a.config_hash == b.config_hash and b.time_limit == 9 and a.time_limit is None


def test_program_seed_is_the_listed_value_or_the_first_word_of_the_seed_sequence():
    import numpy as np

    assert program_seed(RunSeed(12)) == 12
    # numpy's documented SeedSequence.generate_state (numpy reference, "SeedSequence")
    assert program_seed(RunSeed(2026, (3,))) == int(np.random.SeedSequence(2026, spawn_key=(3,)).generate_state(1)[0])


def _stragglers(tmp_path: Path, results: Path, wait: float) -> list[int]:
    """Processes still alive that belong to the run: workers and programs (by command line), grandchildren (pid files)."""
    deadline = time.monotonic() + wait
    while True:
        mine = [p.pid for p in psutil.process_iter(["cmdline"]) if str(tmp_path) in " ".join(p.info["cmdline"] or [])]
        left = sorted({*mine, *(pid for pid in pids_of(results) if alive(pid))})
        if not left or time.monotonic() > deadline:
            return left
        time.sleep(0.1)


@pytest.mark.parametrize("signum", [signal.SIGINT, signal.SIGTERM, signal.SIGKILL])
def test_interrupted_run_leaves_no_process_and_a_rerun_trains_only_the_unfinished_seeds(tmp_path, signum):
    """Ctrl-C (SIGINT to the terminal's process group) and SIGTERM: exit 130 after stopping every
    program. SIGKILL of rl-harness itself: the workers notice their parent is gone and stop their
    programs within moments."""
    path = write_manifest(tmp_path / "m", extra=["--index", "{seed_index}"], seeds=[1, 2, 3])
    (tmp_path / "m" / "slow").write_text("1")
    results = tmp_path / "r"
    argv = [sys.executable, "-m", "harness", "run", str(path), "--results", str(results), "--workers", "2",
            "--no-cache"]
    cli = subprocess.Popen(argv, start_new_session=True, stdout=subprocess.PIPE, stderr=subprocess.STDOUT)
    deadline = time.monotonic() + 60
    # seed 1 (index 0, no pause) finishes at once; seeds 2 and 3 pause 1 and 2 s per checkpoint
    while not ((results / "seed-1.json").exists() and len(pids_of(results)) == 4):
        assert time.monotonic() < deadline and cli.poll() is None, cli.stdout.read().decode()
        time.sleep(0.05)
    if signum == signal.SIGINT:
        os.killpg(cli.pid, signum)  # what Ctrl-C does: the whole foreground process group gets it
    else:
        cli.send_signal(signum)
    output = cli.communicate(timeout=60)[0].decode()
    assert cli.returncode == (-9 if signum == signal.SIGKILL else 130), output
    assert _stragglers(tmp_path, results, wait=0 if signum != signal.SIGKILL else 10) == []
    assert sorted(p.name for p in results.glob("seed-*.json")) == ["seed-1.json"]
    (tmp_path / "m" / "slow").unlink()
    code = main(["run", str(path), "--results", str(results), "--workers", "2", "--no-cache"])
    assert code == 0
    index = json.loads((results / "index.json").read_text())
    assert [r["source"] for r in index["runs"]] == ["resumed", "trained", "trained"]


def test_a_worker_stopped_between_checkpoints_still_stops_its_program(tmp_path):
    """A stop that arrives outside the trainer's own code (here: while a checkpoint is being
    reported) is a BaseException; the worker closes the trainer, whose cleanup stops the program."""
    from harness.execute import Task
    from harness.execute.work import run_task

    manifest = load_manifest(write_manifest(tmp_path / "m", extra=["--index", "1"], seeds=[1]))
    (tmp_path / "m" / "slow").write_text("0.5")

    def stop_here(*checkpoint):
        raise KeyboardInterrupt("the worker is being stopped")

    payload = Task(manifest.runs(), None, str(tmp_path / "m"), str(tmp_path / "r")).payload()
    try:
        run_task(payload, stop_here)
    except KeyboardInterrupt as exc:
        held = exc  # a worker on its way out keeps the frames, and so the trainer, alive like this
    else:
        pytest.fail("the stop did not reach the caller")
    pids = pids_of(tmp_path / "r")
    assert len(pids) == 2 and all_gone(pids)
    assert held.__traceback__ is not None


def test_a_worker_killed_by_sigkill_takes_its_program_and_the_programs_child_with_it(tmp_path):
    """kill -9 of a worker (what the out-of-memory killer does) runs no code in it; the program and
    its child, in their own process group, used to keep running. The worker's guard process
    (harness.trainers.orphan_guard) sees the worker's end of its pipe close and stops the group."""
    from harness.execute import Task, WorkerResult
    from harness.execute.local import LocalExecutor

    manifest = load_manifest(write_manifest(tmp_path / "m", extra=["--index", "1"], seeds=[1]))
    (tmp_path / "m" / "slow").write_text("600")  # the program pauses 600 s before its first checkpoint
    results = tmp_path / "r"
    pool = LocalExecutor(1)
    pids: list[int] = []
    try:
        pool.submit(Task(manifest.runs(), None, str(tmp_path / "m"), str(results)))
        deadline = time.monotonic() + 60
        while len(pids) < 2:
            assert time.monotonic() < deadline, "the program did not start"
            pool.poll(0.05)
            pids = pids_of(results)
        worker = psutil.Process(pids[0]).ppid()
        assert worker == pool._pool[0].process.pid  # the program is the worker's child
        os.kill(worker, signal.SIGKILL)
        deadline = time.monotonic() + 60
        outcome = []
        while not outcome:
            assert time.monotonic() < deadline, "the dead worker was not reported"
            outcome = [r for r in pool.poll(0.2) if isinstance(r, WorkerResult)]
        assert all_gone(pids), "the program outlived its worker"
        assert "killed by signal SIGKILL" in outcome[0].failure
    finally:
        pool.close()
        for pid in pids:  # a failure above must not leave the 600 s program behind
            if alive(pid):
                os.kill(pid, signal.SIGKILL)
