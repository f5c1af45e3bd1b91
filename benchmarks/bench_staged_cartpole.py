"""The staged gate on the shipped CartPole manifest, next to the fixed gate: seeds, wall time, verdict.

Four verifications of ``manifests/cartpole-dqn.toml`` (20 seeds x 100,000 steps) against the
shipped baseline, each training every seed it uses afresh (``--fresh``: a new results folder,
no run cache):

* unchanged, staged gate (``--stages 5,10,15,20``) and fixed gate (``--stages off``);
* broken, the same two: a user trainer (``broken_dqn:train``, written next to a copy of the
  manifest in a temporary folder) that runs the built-in DQN with a learning-breaking bug: its
  replay warm-up never ends (``warmup_steps`` set to the whole budget, as if steps were counted
  in the wrong unit), so the network is never updated and the policy stays the initial one.
  It is also cheap to run, which matters: a user trainer trains its seeds one by one (no
  lockstep batching), and this machine's two cores are shared.

Usage::

    nice -n 10 python benchmarks/bench_staged_cartpole.py [--workers 2] [--only staged|fixed]
        [--cases unchanged,broken] [--keep DIR]

Prints one row per verification (wall time of the whole command, seeds trained, where the gate
stopped, the verdict) and writes the JSON reports into ``DIR`` (default: a temporary folder).
Wall times depend on the machine's load: they are only comparable within one invocation.
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent

BROKEN_DQN = '''
"""The built-in DQN with a learning-breaking bug: the replay warm-up lasts the whole budget."""
import dataclasses

from harness.trainers.dqn import DQNSettings
from harness.trainers.dqn import train as dqn_train


def train(run):
    yield from dqn_train(dataclasses.replace(run, config={**run.config, "warmup_steps": run.budget}))


train.settings_type = DQNSettings
'''


def _project(folder: Path) -> dict[str, Path]:
    text = (ROOT / "manifests" / "cartpole-dqn.toml").read_text()
    (folder / "broken_dqn.py").write_text(BROKEN_DQN)
    unchanged = folder / "unchanged.toml"
    unchanged.write_text(text)
    broken = folder / "broken.toml"
    broken.write_text(text.replace('use = "dqn"', 'use = "broken_dqn:train"', 1))
    return {"unchanged": unchanged, "broken": broken}


def _verify(manifest: Path, mode: str, out: Path, workers: int) -> dict:
    report = out / f"{manifest.stem}-{mode}.json"
    stages = "5,10,15,20" if mode == "staged" else "off"
    cmd = [sys.executable, "-m", "harness", "verify", str(manifest), "--baseline",
           str(ROOT / "baselines" / "cartpole-dqn.json"), "--fresh", "--results",
           str(out / "results" / f"{manifest.stem}-{mode}"), "--workers", str(workers), "--stages", stages,
           "--json", str(report)]
    start = time.perf_counter()
    proc = subprocess.run(cmd, capture_output=True, text=True, cwd=out)
    wall = time.perf_counter() - start
    (out / f"{manifest.stem}-{mode}.txt").write_text(proc.stdout + proc.stderr)
    if not report.exists():
        raise SystemExit(f"{' '.join(cmd)} exited {proc.returncode} without a report:\n{proc.stdout}{proc.stderr}")
    data = json.loads(report.read_text())
    if mode == "staged":
        seeds, stopped = data["seeds"]["used"], data["stopped_because"]
        verdicts = ", ".join(f"{o['metric']} {o['verdict']}" for o in data["outcomes"])
    else:
        seeds, stopped = len(data["checks"][0]["candidate_values"]), "fixed design: every seed"
        verdicts = ", ".join(f"{c['name']} {c['verdict']}" for c in data["checks"])
    return {"case": manifest.stem, "mode": mode, "exit": proc.returncode, "wall": wall, "seeds": seeds,
            "stopped": stopped, "verdicts": verdicts, "passed": data["passed"]}


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--only", choices=("staged", "fixed"))
    parser.add_argument("--cases", default="broken,unchanged")
    parser.add_argument("--keep", metavar="DIR")
    args = parser.parse_args(argv)
    out = Path(args.keep) if args.keep else Path(tempfile.mkdtemp(prefix="bench-staged-"))
    out.mkdir(parents=True, exist_ok=True)
    manifests = _project(out)
    modes = (args.only,) if args.only else ("staged", "fixed")
    print(f"reports in {out}", flush=True)
    print("| case | gate | seeds trained | wall time | stopped because | verdicts | exit |", flush=True)
    print("|---|---|---|---|---|---|---|", flush=True)
    for case in args.cases.split(","):
        for mode in modes:
            r = _verify(manifests[case], mode, out, args.workers)
            print(f"| {r['case']} | {r['mode']} | {r['seeds']} of 20 | {r['wall']:.0f} s | {r['stopped']} | "
                  f"{r['verdicts']} | {r['exit']} ({'passed' if r['passed'] else 'failed'}) |", flush=True)


if __name__ == "__main__":
    main()
