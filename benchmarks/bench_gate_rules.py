"""Which gate rule? False alarms and detection of the drop rules, simulated on RL-shaped seed data.

Run: ``nice -n 10 python benchmarks/bench_gate_rules.py`` (the table of
docs/statistics.md: 400 baselines x 5 candidate sets per cell, 1341 s on the shared
2-core machine), ``--baselines 40`` for a quick look. Prints Markdown tables, one per margin
(in standard deviations of the metric across seeds), rows = rule x distribution
x seeds per side, columns:

* ``FA avg``: false alarms of an unchanged candidate (true difference 0) against
  one fixed baseline draw, averaged over baseline draws (``--baselines`` draws,
  ``--per-baseline`` fresh candidate sets each), with its Clopper–Pearson 95%
  interval (approximate: candidate sets against one baseline share it);
* ``FA lucky``: the same against baselines whose mean happens to sit
  1.25-1.75 standard errors above the true mean (drawn by rejection), the
  situation of the shipped baselines (issue 10: 1.4-1.6 SE);
* ``0.5m``, ``1m``, ``2m``: the share of candidates failed when the candidate
  is truly worse by 0.5, 1 and 2 margins (every value shifted down).

Each experiment is one check of one metric at alpha = 0.05 through the
statistics layer's own functions (Welch's t-test, the shifted-null Welch test,
the ``1 - 2 alpha`` interval) and :func:`harness.stats.drop_rules.drop_fails`.

Distributions (per-seed metric values):

* ``normal``: N(0, 1).
* ``lower tail``: Taxi-like final returns, N(7.88, 0.04) for 93% of seeds and
  7.88 minus an exponential of mean 0.4 for 7% (a heavy lower tail: 14 of 200
  fresh Taxi seeds ended below 7.5).
* ``solved/collapsed``: DQN-like bimodal returns, N(480, 15) with probability
  0.7, N(150, 60) otherwise.
* ``success rate``: FrozenLake-like success rates over the same 100 evaluation
  episodes: most seeds find the same policy and score exactly 0.76, the rest
  0.01-0.05 lower (six distinct values; groups are sometimes constant).
"""

from __future__ import annotations

import argparse
import sys
import time
from collections.abc import Callable
from pathlib import Path

import numpy as np
from threadpoolctl import threadpool_limits

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from harness.stats import welch_test  # noqa: E402
from harness.stats.drop_rules import DROP_RULES, drop_fails  # noqa: E402
from harness.stats.proportion import BinomialRate  # noqa: E402

ALPHA = 0.05
SIZES = (10, 20)
DROPS = (0.5, 1.0, 2.0)
LUCKY = (1.25, 1.75)


def _normal(rng: np.random.Generator, size: tuple[int, ...]) -> np.ndarray:
    return rng.normal(0.0, 1.0, size)


def _lower_tail(rng: np.random.Generator, size: tuple[int, ...]) -> np.ndarray:
    good = rng.normal(7.88, 0.04, size)
    return np.where(rng.random(size) < 0.07, 7.88 - rng.exponential(0.4, size), good)


def _solved_collapsed(rng: np.random.Generator, size: tuple[int, ...]) -> np.ndarray:
    return np.where(rng.random(size) < 0.7, rng.normal(480.0, 15.0, size), rng.normal(150.0, 60.0, size))


def _success_rate(rng: np.random.Generator, size: tuple[int, ...]) -> np.ndarray:
    lower = rng.choice(6, size=size, p=[0.55, 0.15, 0.12, 0.09, 0.05, 0.04])
    return (76 - lower) / 100.0


DISTRIBUTIONS: dict[str, Callable[[np.random.Generator, tuple[int, ...]], np.ndarray]] = {
    "normal": _normal,
    "lower tail": _lower_tail,
    "solved/collapsed": _solved_collapsed,
    "success rate": _success_rate,
}


def _decisions(candidate: np.ndarray, baseline: np.ndarray, margin: float) -> dict[str, bool]:
    """Each rule's decision on one check, from the statistics layer's tests (higher is better)."""
    worse = welch_test(candidate, baseline, alternative="less")
    beyond = welch_test(candidate, baseline, alternative="less", null_difference=-margin)
    interval = welch_test(candidate, baseline, confidence_level=1.0 - 2.0 * ALPHA).interval
    drop_interval = type(interval)(-interval.high, -interval.low)
    return {rule: drop_fails(rule, significant=worse.pvalue < ALPHA, beyond_margin=beyond.pvalue < ALPHA,
                             drop=-worse.estimate, drop_interval=drop_interval, margin=margin)
            for rule in DROP_RULES}


def _lucky_baselines(draw, rng, n: int, count: int, mean: float, sd: float) -> np.ndarray:
    se = sd / np.sqrt(n)
    found: list[np.ndarray] = []
    while sum(len(f) for f in found) < count:
        pool = draw(rng, (20_000, n))
        z = (pool.mean(axis=1) - mean) / se
        found.append(pool[(z >= LUCKY[0]) & (z <= LUCKY[1])])
    return np.concatenate(found)[:count]


def _rates(draw, rng, n: int, margin_sd: float, baselines: int, per: int) -> dict[str, dict[str, BinomialRate]]:
    big = draw(rng, (400_000,))
    mean, sd = float(big.mean()), float(big.std())
    margin = margin_sd * sd
    scenarios = {
        "FA avg": (draw(rng, (baselines, n)), 0.0),
        "FA lucky": (_lucky_baselines(draw, rng, n, baselines, mean, sd), 0.0),
        **{f"{k:g}m": (draw(rng, (baselines, n)), k * margin) for k in DROPS},
    }
    out: dict[str, dict[str, BinomialRate]] = {}
    for name, (bases, shift) in scenarios.items():
        counts = dict.fromkeys(DROP_RULES, 0)
        for base in bases:
            for cand in draw(rng, (per, n)) - shift:
                for rule, failed in _decisions(cand, base, margin).items():
                    counts[rule] += failed
        out[name] = {rule: BinomialRate.of(c, len(bases) * per) for rule, c in counts.items()}
    return out


def _cell(rate: BinomialRate, flag: bool) -> str:
    text = f"{rate.estimate:.3f}"
    if flag:
        text += f" [{rate.interval.low:.3f}, {rate.interval.high:.3f}]"
    return text


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--baselines", type=int, default=400, help="baseline draws per cell (default 400)")
    parser.add_argument("--per-baseline", type=int, default=5, help="candidate sets per baseline (default 5)")
    parser.add_argument("--margins", default="0.5,1,2", help="margins in sd of the metric (default 0.5,1,2)")
    parser.add_argument("--seed", type=int, default=20261203)
    args = parser.parse_args(argv)
    start = time.perf_counter()
    root = np.random.SeedSequence(args.seed)
    margins = [float(m) for m in args.margins.split(",")]
    cells = root.spawn(len(margins) * len(DISTRIBUTIONS) * len(SIZES))
    columns = ["FA avg", "FA lucky", *(f"{k:g}m" for k in DROPS)]
    with threadpool_limits(1):
        for mi, margin_sd in enumerate(margins):
            print(f"\n### margin = {margin_sd:g} sd; alpha = {ALPHA}; {args.baselines} baselines x "
                  f"{args.per_baseline} candidate sets per cell\n")
            print("| rule | distribution | n | " + " | ".join(columns) + " |")
            print("|---|---|---|" + "---|" * len(columns))
            results = {}
            for di, (dist, draw) in enumerate(DISTRIBUTIONS.items()):
                for si, n in enumerate(SIZES):
                    seq = cells[(mi * len(DISTRIBUTIONS) + di) * len(SIZES) + si]
                    results[dist, n] = _rates(draw, np.random.default_rng(seq), n, margin_sd,
                                              args.baselines, args.per_baseline)
            for rule in DROP_RULES:
                for dist in DISTRIBUTIONS:
                    for n in SIZES:
                        row = results[dist, n]
                        cells_text = [_cell(row[c][rule], c.startswith("FA")) for c in columns]
                        print(f"| {rule} | {dist} | {n} | " + " | ".join(cells_text) + " |")
    print(f"\n{time.perf_counter() - start:.0f} s")


if __name__ == "__main__":
    main()
