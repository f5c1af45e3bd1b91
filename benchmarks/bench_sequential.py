"""The group-sequential gate against the fixed 20-seed gate, by simulation.

Run: ``nice -n 10 python benchmarks/bench_sequential.py`` (about a minute of CPU), or
``--reps 2000`` for a quick look. Prints Markdown tables:

1. the sequential gate (stages 5, 10, 15, 20 seeds per side, ``harness.stats.sequential_test``)
   next to the fixed gate (one-sided Welch test on 20 vs 20 seeds, ``scipy.stats.ttest_ind``):
   false alarms under A/A, power against drops, equivalence declared, seeds per side per decision;
2. the small-sample handling: the A/A false-alarm rate of the "worse" boundaries alone with
   Welch's t judged by the nominal levels (significance level approach) and with the Z boundaries
   used as they are;
3. the designs and margins side by side.

Returns are normal (mean 0, sd 1; drops in sd) or bimodal solved/collapsed (85% of seeds at
500 ± 5, 15% at 30 ± 5; sd 167.9), the shape of RL final returns when some seeds fail.
"""

from __future__ import annotations

import argparse
import math
import sys
import time
from pathlib import Path

import numpy as np
from scipy import stats as sps

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from harness.stats import sequential_plan, sequential_test  # noqa: E402

STAGES = (5, 10, 15, 20)
N = STAGES[-1]
ALPHA = 0.05
SOLVED, COLLAPSED, SPREAD, SHARE = 500.0, 30.0, 5.0, 0.15
BIMODAL_SD = math.sqrt(SPREAD**2 + SHARE * (1 - SHARE) * (SOLVED - COLLAPSED) ** 2)


def _normal(drop):
    def draw(rng, reps):
        return rng.normal(0.0, 1.0, (reps, N)), rng.normal(-drop, 1.0, (reps, N))
    return draw


def _bimodal(collapsed_share):
    def one(rng, reps, share):
        return np.where(rng.random((reps, N)) < share, COLLAPSED, SOLVED) + rng.normal(0.0, SPREAD, (reps, N))

    def draw(rng, reps):
        return one(rng, reps, SHARE), one(rng, reps, collapsed_share)
    return draw


#: (name, drop in baseline sd, generator, unit sd for the margin, role)
SCENARIOS = (
    ("A/A normal", 0.0, _normal(0.0), 1.0, "null"),
    ("A/A bimodal", 0.0, _bimodal(SHARE), BIMODAL_SD, "null"),
    ("drop 1 sd, normal", 1.0, _normal(1.0), 1.0, "power"),
    ("drop 2 sd, normal", 2.0, _normal(2.0), 1.0, "power"),
    ("collapses 15% -> 50%, bimodal", 0.35 * (SOLVED - COLLAPSED) / BIMODAL_SD, _bimodal(0.5), BIMODAL_SD, "power"),
    ("gross: drop 3 sd, normal", 3.0, _normal(3.0), 1.0, "gross"),
    ("gross: every seed collapses, bimodal", 0.85 * (SOLVED - COLLAPSED) / BIMODAL_SD, _bimodal(1.0), BIMODAL_SD,
     "gross"),
)  # fmt: skip


def _run(plan, base, cand, margin):
    worse = equivalent = final = seeds = 0
    for b, c in zip(base, cand):
        r = sequential_test(b, c, plan=plan, margin=margin)
        worse += r.decision == "worse"
        equivalent += r.decision == "equivalent"
        final += r.decision == "final"
        seeds += r.seeds_used[1]
    n = len(base)
    return worse / n, equivalent / n, final / n, seeds / n


def _fixed(base, cand):
    return float((sps.ttest_ind(cand, base, equal_var=False, alternative="less", axis=1).pvalue < ALPHA).mean())


def _se(p, reps):
    return math.sqrt(max(p * (1 - p), 1e-12) / reps)


def main_table(reps, seq, margin_sd):
    plan = sequential_plan(STAGES, alpha=ALPHA, kind="obrien-fleming-spending")
    lines = [
        "| scenario | drop (sd) | sequential: worse | equivalent | final | seeds/side | fixed 20: worse "
        "| seeds saved |",
        "|---|---|---|---|---|---|---|---|",
    ]
    verdicts = []
    for (name, drop, draw, unit, role), child in zip(SCENARIOS, seq.spawn(len(SCENARIOS))):
        base, cand = draw(np.random.default_rng(child), reps)
        w, e, f, seeds = _run(plan, base, cand, margin_sd * unit)
        fixed = _fixed(base, cand)
        saved = 1.0 - seeds / N
        lines.append(
            f"| {name} | {drop:.2f} | {w:.4f} ± {_se(w, reps):.4f} | {e:.3f} | {f:.3f} | {seeds:.2f} "
            f"| {fixed:.4f} ± {_se(fixed, reps):.4f} | {100 * saved:.0f}% |"
        )
        if role == "null":
            ok = w <= ALPHA + 2 * _se(ALPHA, reps)
            verdicts.append(f"{name}: false alarms {w:.4f} <= alpha + 2 MC se: {'met' if ok else 'MISSED'}; "
                            f"seeds saved {100 * saved:.0f}% >= 30%: {'met' if saved >= 0.3 else 'MISSED'}")
        else:
            ok = w >= fixed - 0.05
            extra = f"; seeds saved {100 * saved:.0f}% >= 30%: {'met' if saved >= 0.3 else 'MISSED'}" if role == "gross" else ""
            verdicts.append(f"{name}: power {w:.3f} vs fixed {fixed:.3f}, within 5 points: "
                            f"{'met' if ok else 'MISSED'}{extra}")
    return "\n".join(lines), verdicts


def t_handling_table(reps, seq):
    lines = ["| design | returns | significance level approach | Z boundaries on Welch's t | fixed 20, Welch |",
             "|---|---|---|---|---|"]
    children = iter(seq.spawn(8))
    for kind in ("obrien-fleming-spending", "pocock-spending", "obrien-fleming", "pocock"):
        plan = sequential_plan(STAGES, alpha=ALPHA, kind=kind)
        for returns, draw in (("normal", _normal(0.0)), ("bimodal", _bimodal(SHARE))):
            base, cand = draw(np.random.default_rng(next(children)), reps)
            by_t = np.zeros(reps, bool)
            by_z = np.zeros(reps, bool)
            for k, n in enumerate(STAGES):
                r = sps.ttest_ind(cand[:, :n], base[:, :n], equal_var=False, alternative="less", axis=1)
                by_t |= r.pvalue < plan.worse.nominal[k]
                by_z |= -r.statistic >= plan.worse.critical[k]
            lines.append(f"| {kind} | {returns} | {by_t.mean():.4f} | {by_z.mean():.4f} | {_fixed(base, cand):.4f} |")
    return "\n".join(lines) + f"\n\nMonte Carlo standard error at 0.05: {_se(ALPHA, reps):.4f}."


def design_table(reps, seq):
    lines = ["| worse design | equivalence design | margin | A/A: worse | A/A: seeds | 1 sd: power | 1 sd: seeds "
             "| 2 sd: power | 2 sd: seeds |", "|---|---|---|---|---|---|---|---|---|"]
    data = [_normal(d)(np.random.default_rng(c), reps) for d, c in zip((0.0, 1.0, 2.0), seq.spawn(3))]
    designs = (
        ("obrien-fleming-spending", "obrien-fleming-spending"),
        ("obrien-fleming-spending", "pocock-spending"),
        ("pocock-spending", "pocock-spending"),
        ("obrien-fleming", "obrien-fleming"),
        ("pocock", "pocock"),
    )
    for kind, eq_kind in designs:
        plan = sequential_plan(STAGES, alpha=ALPHA, kind=kind, equivalence_kind=eq_kind)
        for margin in (1.0, 1.5):
            cells = [_run(plan, b, c, margin) for b, c in data]
            row = " | ".join(f"{w:.3f} | {s:.1f}" for w, _, _, s in cells)
            lines.append(f"| {kind} | {eq_kind} | {margin:g} sd | {row} |")
    fixed = " | ".join(f"{_fixed(b, c):.3f} | 20" for b, c in data)
    lines.append(f"| fixed 20 seeds (Welch, one-sided) | - | - | {fixed} |")
    return "\n".join(lines)


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--reps", type=int, default=10_000, help="simulated gates per scenario (main table)")
    parser.add_argument("--seed", type=int, default=20261203)
    args = parser.parse_args(argv)
    main_seq, t_seq, design_seq = np.random.SeedSequence(args.seed).spawn(3)
    started = time.process_time()
    print(f"# Sequential gate: stages {STAGES} seeds per side, one-sided alpha = {ALPHA}, seed {args.seed}\n")
    print(f"## 1. Sequential vs fixed ({args.reps} simulated gates per row)\n")
    print("Design: O'Brien–Fleming-type Lan–DeMets spending for 'worse' (alpha 0.05) and for each half of the "
          "equivalence test (alpha 0.05); shift 0; margin 1 sd of the baseline's returns (bimodal: 167.9). "
          "'seeds/side' is the mean number of seeds per side when the gate decided; the fixed gate always "
          "uses 20. '±' is one Monte Carlo standard error.\n")
    table, verdicts = main_table(args.reps, main_seq, 1.0)
    print(table, "\n")
    print("Targets (issue 14):\n")
    print("\n".join(f"- {v}" for v in verdicts), "\n")
    t_reps = 4 * args.reps
    print(f"## 2. Small samples: A/A false alarms of the 'worse' boundaries alone ({t_reps} simulations)\n")
    print(t_handling_table(t_reps, t_seq), "\n")
    d_reps = max(args.reps // 3, 200)
    print(f"## 3. Designs and margins, normal returns ({d_reps} simulations per cell)\n")
    print(design_table(d_reps, design_seq), "\n")
    print(f"CPU time: {time.process_time() - started:.0f} s")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
