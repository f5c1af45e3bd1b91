"""Verify every shipped manifest against its shipped baseline, from scratch, and time it.

This is the long check of issue 7 ("every shipped manifest verifies against its baseline on a
fresh checkout"): each manifest is rerun with ``--fresh`` (no run cache, no resumed files) and
verified; the table gives each one's wall time, exit code and verdict line. It trains every DQN
manifest in full, so it takes many minutes; it is not part of the unit tests.

Usage::

    python benchmarks/verify_shipped.py [--workers 2] [manifests/x.toml ...]
"""

from __future__ import annotations

import argparse
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("manifests", nargs="*", help="default: every manifests/*.toml")
    parser.add_argument("--workers", type=int, default=2)
    args = parser.parse_args()
    manifests = [Path(m) for m in args.manifests] or sorted((ROOT / "manifests").glob("*.toml"))
    rows, worst = [], 0
    for manifest in manifests:
        start = time.perf_counter()
        proc = subprocess.run(
            [sys.executable, "-m", "harness", "verify", str(manifest), "--fresh", "--workers", str(args.workers)],
            cwd=ROOT, capture_output=True, text=True,
        )
        seconds = time.perf_counter() - start
        verdict = next((line for line in proc.stdout.splitlines() if line.startswith(("PASSED", "FAILED"))),
                       (proc.stdout + proc.stderr).strip().splitlines()[-1] if (proc.stdout + proc.stderr).strip() else "")
        exact = next((line for line in proc.stdout.splitlines() if line.startswith("2. exact check")), "")
        rows.append((manifest.name, f"{seconds:.0f} s", str(proc.returncode), verdict, exact))
        worst = max(worst, proc.returncode)
        print(f"{manifest.name}: exit {proc.returncode} in {seconds:.0f} s\n  {verdict}\n  {exact}", flush=True)
    print("\n| manifest | wall time | exit | verdict | exact check |\n|---|---|---|---|---|")
    for row in rows:
        print("| " + " | ".join(row) + " |")
    return worst


if __name__ == "__main__":
    sys.exit(main())
