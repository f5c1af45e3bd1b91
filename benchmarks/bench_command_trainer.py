"""Overhead of the command trainer per seed (issue 12): target under 0.2 s beyond the program's own run.

The work is the orchard example (examples/orchard/irrigate.py, tabular Q-learning on an
invented task). Measured per seed, all in this one run, medians over the seeds:

* **program alone**: the script run as a subprocess with the same arguments, nothing else
  (its own interpreter start, NumPy import, training and curve writing);
* **command trainer**: the same seed through ``harness.execute.work.run_task`` (what a
  worker runs): placeholders, environment, log file, own process group, the curve file
  read while it grows and checked against the plan, process-group clean-up;
* **same work in-process**: the script's ``main()`` called inside this process (the
  shape of a built-in trainer: no process start, no NumPy import);
* **through the runner**: ``run_manifest`` with 1 worker and no cache, wall time / seeds
  (includes starting the worker process once).

The overhead is the median over seeds of (command trainer - program alone), the two run
back to back for each seed, so that a busy machine moves both alike; the harness's own CPU
time per seed (this process only, not the program) is shown too, as a load-free figure.
The process boundary itself (program alone - in-process) is the program's own start-up.

    nice -n 10 python benchmarks/bench_command_trainer.py            # about half a minute
    nice -n 10 python benchmarks/bench_command_trainer.py --seeds 16
"""

from __future__ import annotations

import argparse
import json
import resource
import runpy
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from harness.execute import Task
from harness.execute.runner import run_manifest
from harness.execute.work import run_task
from harness.manifest.loader import load_manifest
from harness.trainers.command import expand, program_seed, run_folder

ORCHARD = Path(__file__).resolve().parents[1] / "examples" / "orchard"


def _argv(spec, results: Path) -> list[str]:
    folder = run_folder(results, spec)
    folder.mkdir(parents=True, exist_ok=True)
    values = {"python": sys.executable, "seed": str(program_seed(spec.seed)), "env_steps": str(spec.budget),
              "eval_every": str(spec.evaluation.interval), "eval_episodes": str(spec.evaluation.episodes),
              "eval_seed": str(spec.evaluation.seed), "curve_file": str(folder / "alone.csv")}
    return [expand(a, values) for a in spec.config["command"]]


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seeds", type=int, default=8)
    args = parser.parse_args()
    manifest = load_manifest(ORCHARD / "orchard.toml")
    specs = manifest.runs()[: args.seeds]
    alone, command, inproc, cpu = [], [], [], []
    with tempfile.TemporaryDirectory() as tmp:
        results = Path(tmp)
        for spec in specs:
            argv = _argv(spec, results)
            start = time.perf_counter()
            subprocess.run(argv, cwd=ORCHARD, check=True)
            alone.append(time.perf_counter() - start)

            payload = Task((spec,), None, str(ORCHARD), str(results)).payload()
            start, used = time.perf_counter(), resource.getrusage(resource.RUSAGE_SELF)
            reply = run_task(payload)
            command.append(time.perf_counter() - start)
            after = resource.getrusage(resource.RUSAGE_SELF)
            cpu.append(after.ru_utime + after.ru_stime - used.ru_utime - used.ru_stime)
            assert reply["runs"][0]["failure"] is None, reply["runs"][0]["failure"]
            written = (run_folder(results, spec) / "alone.csv").read_bytes()
            assert written == (run_folder(results, spec) / "curve.csv").read_bytes()  # the same work

            saved = sys.argv
            sys.argv = argv[1:]  # without the interpreter
            start = time.perf_counter()
            try:
                runpy.run_path(str(ORCHARD / "irrigate.py"), run_name="__main__")
            finally:
                sys.argv = saved
            inproc.append(time.perf_counter() - start)
        start = time.perf_counter()
        outcome = run_manifest(manifest, results_dir=results / "runner", workers=1, use_cache=False)
        runner = (time.perf_counter() - start) / len(manifest.seeds)
        assert outcome.ok
    med = {name: statistics.median(xs) for name, xs in
           (("alone", alone), ("command", command), ("inproc", inproc))}
    overhead = statistics.median(c - a for c, a in zip(command, alone, strict=True))
    harness_cpu = statistics.median(cpu)
    print(f"orchard example, {len(specs)} seeds, medians per seed")
    print(f"  program alone (subprocess)      {med['alone']:.3f} s")
    print(f"  command trainer (run_task)      {med['command']:.3f} s")
    print(f"  same work in-process            {med['inproc']:.3f} s")
    print(f"  through the runner, 1 worker    {runner:.3f} s  ({len(manifest.seeds)} seeds, worker start included)")
    print(f"  overhead of the command trainer {overhead:+.3f} s per seed, paired median (target < 0.2 s): "
          f"{'met' if overhead < 0.2 else 'MISSED'}")
    print(f"  harness CPU time per seed       {harness_cpu:.3f} s (this process only, not the program)")
    print(f"  process boundary (the program's own start-up) {med['alone'] - med['inproc']:+.3f} s per seed")
    print(json.dumps({"seeds": len(specs), **{k: round(v, 4) for k, v in med.items()},
                      "runner_per_seed": round(runner, 4), "overhead": round(overhead, 4),
                      "harness_cpu": round(harness_cpu, 4)}))


if __name__ == "__main__":
    main()
