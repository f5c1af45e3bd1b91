"""Scaling of the runner (issue 5): wall time for N seeds by executor, cache hits, executor overhead.

Prints, all measured in this one run:

* wall time for N tabular Q-learning seeds (FrozenLake-v1, slippery) with 1 and 2 local
  worker processes and through a local dask cluster of 2 single-threaded worker processes,
  and the speed-up over 1 worker;
* the rerun time when every seed is answered from the run cache (a fresh results folder)
  and when every seed is already in the results folder (resume);
* the overhead per run that an executor adds: the wall-time slope between M and 3M runs
  of a trainer that does almost nothing (so starting workers is left out), next to the
  same run called in-process; the start-up and shut-down cost is shown apart.

The machine's cores are shared, so the defaults are short; ``--seeds``/``--budget`` scale it.

    python benchmarks/bench_runner.py                 # well under a minute
    python benchmarks/bench_runner.py --seeds 16 --budget 100000
"""

from __future__ import annotations

import argparse
import os
import shutil
import sys
import tempfile
import time
from pathlib import Path

from harness.store.cache import RunCache
from harness.core.curves import Checkpoint
from harness.execute import Task
from harness.execute.work import run_task
from harness.manifest.loader import parse_manifest
from harness.execute.runner import run_manifest, run_specs
from harness.core.spec import RunSpec

MANIFEST = """
name = "bench-frozenlake"
[task]
id = "FrozenLake-v1"
[trainer]
use = "tabular-q"
[trainer.settings]
step_size = 0.02
explore_decay_steps = {decay}
[budget]
env_steps = {budget}
[evaluation]
every = {every}
episodes = 100
[seeds]
count = {seeds}
root = 2026
"""


def instant(run: RunSpec):
    """A trainer that does almost nothing: what is left of a run's wall time is the executor's."""
    for step in run.checkpoint_steps():
        yield Checkpoint(step, (float(step),))


def _timed(fn):
    start = time.perf_counter()
    out = fn()
    return time.perf_counter() - start, out


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seeds", type=int, default=8, help="seeds of the tabular manifest (default 8)")
    parser.add_argument("--budget", type=int, default=30_000, help="environment steps per seed (default 30000)")
    parser.add_argument("--overhead-runs", type=int, default=40, help="runs of the do-nothing trainer (default 40)")
    args = parser.parse_args()

    work = Path(tempfile.mkdtemp(prefix="bench-runner-"))
    try:
        text = MANIFEST.format(seeds=args.seeds, budget=args.budget, every=args.budget // 5, decay=args.budget // 2)
        manifest = parse_manifest(text, path=work / "bench.toml")
        print(f"load average at start: {os.getloadavg()[0]:.2f} (other processes share the cores; "
              "scaling figures need an idle machine)")
        print(f"cores: {os.cpu_count()}; {args.seeds} seeds of tabular Q-learning on FrozenLake-v1, "
              f"{args.budget} env steps each, 6 checkpoints of 100 episodes")
        walls = {}
        for label, options in (
            ("local, 1 worker", {"workers": 1}),
            ("local, 2 workers", {"workers": 2}),
            ("dask LocalCluster, 2 workers", {"executor": "dask", "workers": 2}),
        ):
            folder = work / label.replace(" ", "").replace(",", "-")
            wall, out = _timed(lambda: run_manifest(manifest, results_dir=folder, use_cache=False, **options))
            assert out.ok, out.results.failed()
            walls[label] = wall
            speedup = walls["local, 1 worker"] / wall
            print(f"  {label:<30} {wall:7.2f} s   speed-up over 1 worker {speedup:4.2f}x")
        cache = RunCache(work / "cache")
        fill, _ = _timed(lambda: run_manifest(manifest, results_dir=work / "fill", workers=2, cache=cache))
        hit, out = _timed(lambda: run_manifest(manifest, results_dir=work / "hit", workers=2, cache=cache))
        assert set(out.sources.values()) == {"cache"}
        again, out = _timed(lambda: run_manifest(manifest, results_dir=work / "hit", workers=2, cache=cache))
        assert set(out.sources.values()) == {"resumed"}
        print(f"  cache fill run (2 workers)     {fill:7.2f} s")
        print(f"  cache-hit rerun, new folder    {hit:7.3f} s   ({hit / fill:.1%} of training)")
        print(f"  rerun, all seeds in folder     {again:7.3f} s")

        m = args.overhead_runs
        seeds = parse_manifest(text.replace(f"count = {args.seeds}", f"count = {3 * m}")).seeds

        def plan(n: int) -> tuple[RunSpec, ...]:
            return tuple(
                RunSpec("overhead", manifest.task, "bench_runner:instant", {}, 1000, manifest.evaluation, seed, i, f"n{n}")
                for i, seed in enumerate(seeds[:n])
            )

        inproc, _ = _timed(lambda: [run_task(Task((s,)).payload()) for s in plan(m)])
        print(f"executor overhead per run (a do-nothing trainer; called in-process it takes "
              f"{inproc / m * 1e3:.2f} ms per run). Per run = (wall of {3 * m} runs - wall of {m} runs) / {2 * m}, "
              "so starting the workers is left out and shown apart:")
        for label, options in (
            ("local, 1 worker", {"workers": 1}),
            ("local, 2 workers", {"workers": 2}),
            ("dask LocalCluster, 2 workers", {"executor": "dask", "workers": 2}),
        ):
            walls = []
            for n in (m, 3 * m):
                folder = work / f"overhead-{n}-" / label.replace(" ", "").replace(",", "-")
                wall, out = _timed(lambda: run_specs(plan(n), results_dir=folder, use_cache=False, **options))
                assert out.ok, out.results.failed()[0].failure
                walls.append(wall)
            per_run = (walls[1] - walls[0]) / (2 * m)
            fixed = walls[0] - m * per_run
            print(f"  {label:<30} {per_run * 1e3:7.2f} ms per run (in-process {inproc / m * 1e3:.2f} ms), "
                  f"start-up and shut-down {fixed:5.2f} s")
        print(f"load average at end: {os.getloadavg()[0]:.2f}")
    finally:
        shutil.rmtree(work, ignore_errors=True)


if __name__ == "__main__":
    sys.path.insert(0, str(Path(__file__).resolve().parent))
    main()
