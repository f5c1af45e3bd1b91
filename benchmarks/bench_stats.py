"""Calibration at full size and speed of the statistics layer.

Run: ``python benchmarks/bench_stats.py`` (about 3 minutes on one core), or
``--reps 300`` for a quick look. Prints Markdown tables: the false-positive
rate of each test at alpha = 0.05 under identical groups, its power against a
shift of one standard deviation, and the speed figures with their targets.
"""

from __future__ import annotations

import argparse
import math
import statistics
import sys
import time
import warnings
from pathlib import Path

import numpy as np
from threadpoolctl import threadpool_limits

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from harness.core.errors import TooFewSeedsWarning  # noqa: E402
from harness.stats import bootstrap_mean_difference, max_statistic_test, power_of  # noqa: E402
from harness.stats.calibration import CALIBRATION_METHODS, DISTRIBUTIONS, calibrate  # noqa: E402

SIZES = (5, 10, 20)
ALPHA = 0.05


def _table(cells, hypothesis: str) -> str:
    head = "false-positive rate" if hypothesis == "null" else "power (shift of 1 sd)"
    lines = [
        f"| method | distribution | {' | '.join(f'n={n}' for n in SIZES)} |",
        "|---|---|" + "---|" * len(SIZES),
    ]
    by_key = {(c.method, c.distribution, c.n): c for c in cells}
    for dist in DISTRIBUTIONS:
        for method in CALIBRATION_METHODS:
            row = []
            for n in SIZES:
                c = by_key[(method, dist, n)]
                flag = ""
                if hypothesis == "null":
                    # Beyond 3 Monte Carlo standard errors of alpha: mis-calibrated.
                    band = 3 * math.sqrt(ALPHA * (1 - ALPHA) / c.reps)
                    flag = " **liberal**" if c.rate > ALPHA + band else " (conservative)" if c.rate < ALPHA - band else ""
                row.append(f"{c.rate:.3f}{flag}")
            lines.append(f"| {method} | {dist} | {' | '.join(row)} |")
    return f"{head} at alpha = {ALPHA}\n\n" + "\n".join(lines)


def _time(fn, repeats: int) -> float:
    fn()  # warm-up
    return statistics.median(_elapsed(fn) for _ in range(repeats))


def _elapsed(fn) -> float:
    start = time.perf_counter()
    fn()
    return time.perf_counter() - start


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--reps", type=int, default=2000, help="simulated experiments per cell")
    parser.add_argument("--resamples", type=int, default=1999, help="bootstrap/permutation resamples in calibration")
    parser.add_argument("--seed", type=int, default=20261201)
    args = parser.parse_args(argv)

    root = np.random.SeedSequence(args.seed)
    null_seq, alt_seq, speed_seq = root.spawn(3)
    started = time.perf_counter()
    print(f"# Calibration: {args.reps} experiments per cell, {args.resamples} resamples, seed {args.seed}\n")
    common = dict(reps=args.reps, alpha=ALPHA, n_resamples=args.resamples)
    null = calibrate(list(CALIBRATION_METHODS), list(DISTRIBUTIONS), SIZES, hypothesis="null", rng=null_seq, **common)
    print(_table(null, "null"), "\n")
    print(f"Monte Carlo standard error at 0.05: {math.sqrt(ALPHA * (1 - ALPHA) / args.reps):.4f}; "
          "flags mark rates beyond 3 standard errors. TOST's null is a true difference at the margin.\n")
    alt = calibrate(list(CALIBRATION_METHODS), list(DISTRIBUTIONS), SIZES, hypothesis="alternative",
                    rng=alt_seq, **common)  # fmt: skip
    print(_table(alt, "alternative"), "\n")
    analytic = ", ".join(f"n={n}: {power_of(1.0, 1.0, n, 1.0, n):.3f}" for n in SIZES)
    print(f"Noncentral-t power of Welch's test for a 1 sd shift (normal): {analytic}. "
          "TOST's power is at a true difference of 0 with a margin of 1 sd.\n")
    print(f"calibration took {time.perf_counter() - started:.0f} s\n")

    rng = np.random.default_rng(speed_seq)
    a, b = rng.normal(size=20), rng.normal(size=20)
    curves_a, curves_b = rng.normal(size=(20, 100)), rng.normal(size=(20, 100))
    # BLAS on one thread, as inside the harness's workers (and steadier on a shared machine).
    with threadpool_limits(1), warnings.catch_warnings():
        warnings.simplefilter("ignore", TooFewSeedsWarning)
        bca = _time(lambda: bootstrap_mean_difference(a, b, method="bca", n_resamples=10_000, rng=rng), 7)
        maxt = _time(lambda: max_statistic_test(curves_a, curves_b, n_resamples=10_000, rng=rng), 7)
    print("# Speed (median of 7 runs, BLAS on one thread; target: well under 1 s)\n")
    print("| task | seconds | share of the 1 s target |\n|---|---|---|")
    print(f"| BCa interval, 10,000 resamples, 2 x 20 seeds | {bca:.4f} | {bca:.1%} |")
    print(f"| max-statistic test, 100 checkpoints, 10,000 permutations, 2 x 20 seeds | {maxt:.4f} | {maxt:.1%} |")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
