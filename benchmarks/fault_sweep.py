"""Fault and fuzz sweep (issue 13): how the harness meets signals, malformed and crafted input.

Prints, all measured in this one run:

* **signals**: N trials of ``rlharness run`` stopped mid-run by SIGTERM or by Ctrl-C (SIGINT to
  its process group), alternately, at a random moment after the first seed file exists: the exit
  codes, how many printed a traceback, and whether the rerun's seed files equal a clean run's
  byte for byte; N more stopped 0.3-2 s after the command starts (imports, manifest, workers;
  a signal before Python reaches rl-harness's own code keeps Python's default); then N trials of SIGKILL of the whole process group mid-run: rerun equal to a
  clean run, temporary files left after the rerun; and ``verify --time-limit`` on a trainer that
  hangs (exit code, seconds);
* **malformed manifests** (default 200, ``tests/fault_generators.manifest_cases``): exit codes,
  crashes (an exception escaping ``main``, exit 70, a printed traceback, or a case still running
  after 10 s: a hang);
* **damaged or crafted baselines and results** (default 160, ``data_cases``): the same, plus
  the number of cases whose task id names a module that leaves a marker when imported, and how
  many markers appeared (imports from data).

The generators are seeded (``--seed``): the same seed gives the same cases. They use only
``harness.cli.main`` and ``harness.core.spec.sha256_of``, so the same script measures an older
tree (``PYTHONPATH=/path/to/old/tree python benchmarks/fault_sweep.py``) for before/after figures.

    nice -n 10 python benchmarks/fault_sweep.py                     # about 2-4 minutes on 2 busy cores
    nice -n 10 python benchmarks/fault_sweep.py --signals 4 --manifests 50 --data 40
"""

from __future__ import annotations

import argparse
import os
import signal
import subprocess
import sys
import tempfile
import time
from collections import Counter
from pathlib import Path

import harness

TESTS = Path(__file__).resolve().parent.parent / "tests"
HARNESS_ROOT = Path(harness.__file__).resolve().parent.parent
# The generators come from this tree's tests; the toy trainers (runner_toys) from the measured tree's.
sys.path[:0] = [str(HARNESS_ROOT / "tests"), str(TESTS)]

import numpy as np  # noqa: E402
from crafting import TOY  # noqa: E402
from fault_generators import data_cases, manifest_cases, record_toy, run_case, sweep  # noqa: E402


def _env() -> dict[str, str]:
    return {**os.environ, "PYTHONPATH": os.pathsep.join([str(HARNESS_ROOT / "tests"), str(TESTS), str(HARNESS_ROOT)])}


def _interrupt(proc, how: str) -> tuple[int, bool]:
    """Stop ``proc`` by SIGTERM or by Ctrl-C (SIGINT to its process group); its exit code and
    whether it printed a traceback."""
    if how == "SIGTERM":
        proc.send_signal(signal.SIGTERM)
    else:
        os.killpg(proc.pid, signal.SIGINT)
    out, err = proc.communicate(timeout=120)
    return proc.returncode, "Traceback" in out + err


def _seed_files(folder: Path) -> dict[str, bytes]:
    return {p.name: p.read_bytes() for p in sorted(folder.glob("seed-*.json"))}


def _start(manifest: Path, results: Path, *extra: str) -> subprocess.Popen:
    return subprocess.Popen([sys.executable, "-m", "harness", *extra[:1], str(manifest), "--results", str(results),
                             "--no-cache", "--workers", "1", *extra[1:]], cwd=manifest.parent, env=_env(),
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, start_new_session=True)


def _wait_for(path: Path, timeout: float = 120) -> bool:
    end = time.monotonic() + timeout
    while not path.exists():
        if time.monotonic() > end:
            return False
        time.sleep(0.02)
    return True


def signal_trials(n: int, folder: Path, rng: np.random.Generator) -> None:
    folder.mkdir(parents=True, exist_ok=True)
    manifest = folder / "slow.toml"
    manifest.write_text(TOY.replace("pause = 0.0", "pause = 0.15").replace("count = 3", "count = 4"))
    clean = folder / "clean"
    code, text, _ = run_case(["run", manifest, "--results", clean, "--no-cache", "--workers", "1"])
    assert code == 0, text
    reference = _seed_files(clean)
    codes, tracebacks, equal = Counter(), 0, 0
    for trial in range(n):
        results = folder / f"stop-{trial}"
        how = ("SIGTERM", "Ctrl-C")[trial % 2]
        proc = _start(manifest, results, "run")
        _wait_for(results / "seed-7-0.json")
        time.sleep(float(rng.uniform(0.0, 0.5)))
        returncode, traceback = _interrupt(proc, how)
        codes[(how, returncode)] += 1
        tracebacks += traceback
        rerun = _start(manifest, results, "run")
        rerun.communicate(timeout=300)
        equal += _seed_files(results) == reference
    print(f"signals: {n} trials (SIGTERM / Ctrl-C alternately, mid-run)")
    print(f"  exit codes          {dict(sorted(codes.items()))}")
    print(f"  tracebacks printed  {tracebacks}")
    print(f"  rerun seed files equal to a clean run's: {equal} of {n}")
    codes, tracebacks = Counter(), 0
    for trial in range(n):
        how = ("SIGTERM", "Ctrl-C")[trial % 2]
        proc = _start(manifest, folder / f"early-{trial}", "run")
        time.sleep(float(rng.uniform(0.3, 2.0)))  # while the command starts: imports, manifest, workers
        returncode, traceback = _interrupt(proc, how)
        codes[(how, returncode)] += 1
        tracebacks += traceback
    print(f"signals early: {n} trials 0.3-2 s after the command starts (SIGTERM / Ctrl-C alternately)")
    print(f"  exit codes          {dict(sorted(codes.items()))}")
    print(f"  tracebacks printed  {tracebacks}")
    kill_equal, leftovers = 0, 0
    for trial in range(n):
        results = folder / f"kill-{trial}"
        proc = _start(manifest, results, "run")
        _wait_for(results / "seed-7-0.json")
        time.sleep(float(rng.uniform(0.0, 0.5)))
        os.killpg(proc.pid, signal.SIGKILL)
        proc.communicate(timeout=60)
        rerun = _start(manifest, results, "run")
        rerun.communicate(timeout=300)
        kill_equal += _seed_files(results) == reference
        leftovers += len(list(results.glob(".*.tmp")))
    print(f"SIGKILL of the runner's process group: {n} trials")
    print(f"  rerun seed files equal to a clean run's: {kill_equal} of {n}; temporary files left: {leftovers}")
    hang = folder / "hang.toml"
    hang.write_text(TOY.replace("pause = 0.0", 'bad = ["7/1"]\nmode = "hang"'))
    start = time.monotonic()
    proc = _start(hang, folder / "hang", "verify", "--time-limit", "2")
    try:
        proc.communicate(timeout=120)
        outcome = f"exit {proc.returncode} after {time.monotonic() - start:.1f} s"
    except subprocess.TimeoutExpired:
        os.killpg(proc.pid, signal.SIGKILL)
        proc.communicate()
        outcome = "still running after 120 s (killed)"
    print(f"verify --time-limit 2 on a trainer that hangs: {outcome}")


def _report(title: str, result) -> None:
    print(f"{title}: {result.cases} cases")
    print(f"  exit codes          {dict(sorted(result.codes.items(), key=str))}")
    print(f"  tracebacks          {len(result.crashes)}" + (f"  (first: {', '.join(result.crashes[:5])})" if result.crashes else ""))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--signals", type=int, default=6, help="trials per signal kind (default 6)")
    parser.add_argument("--manifests", type=int, default=200, help="malformed manifests (default 200)")
    parser.add_argument("--data", type=int, default=160, help="damaged or crafted baselines and results (default 160)")
    parser.add_argument("--seed", type=int, default=20261203, help="seed of the generators")
    args = parser.parse_args()
    print(f"rl-harness {harness.__version__} from {HARNESS_ROOT}; seed {args.seed}")
    rng = np.random.default_rng(np.random.SeedSequence(args.seed))
    with tempfile.TemporaryDirectory(prefix="fault-sweep-") as tmp:
        folder = Path(tmp)
        os.environ.setdefault("RLHARNESS_CRASH_DIR", str(folder / "crashes"))
        start = time.monotonic()
        _report("malformed manifests", sweep(manifest_cases(args.seed, args.manifests, folder / "manifests"), limit=10.0))
        recorded = record_toy(folder / "recorded")
        data = sweep(data_cases(args.seed, args.data, recorded, folder / "data"))
        _report("damaged or crafted baselines and results", data)
        print(f"  import-from-data attempts {data.import_attempts}, imports {data.imports}")
        print(f"  ({time.monotonic() - start:.0f} s)")
        if args.signals:
            signal_trials(args.signals, folder / "signals", rng)


if __name__ == "__main__":
    main()
