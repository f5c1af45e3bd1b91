"""The group-sequential gate against the fixed 20-seed gate, by simulation.

Run: ``nice -n 10 python benchmarks/bench_sequential.py`` (4,000 simulated gates per row, about
two minutes of CPU), or ``--reps 1000`` for a quick look. Prints Markdown tables:

1. the sequential comparison (stages 5, 10, 15, 20 seeds per side, ``harness.stats.sequential_test``
   with the futility stop) next to the fixed gate (one-sided Welch test on 20 vs 20 seeds,
   ``scipy.stats.ttest_ind``), under the default rule ``drop-beyond-margin`` (``H0: drop <= margin``)
   and under ``any-drop`` (``H0: no drop``): false alarms, power, how each gate stopped, seeds per
   side per decision, seeds saved;
2. the staged gate's own shape: the baseline recorded in full (20 seeds at every look), only the
   candidate staged;
3. the price of the futility stop: its spend and design against seeds, power, and the rate of
   futility stops at the design alternative (which the spend bounds);
4. the small-sample handling: the A/A false-alarm rate of the "worse" boundaries alone with
   Welch's t judged by the nominal levels (significance level approach) and with the Z boundaries
   used as they are.

Returns are normal (mean 0, sd 1; drops in sd) or bimodal solved/collapsed (85% of seeds at
500 ± 5, 15% at 30 ± 5; sd 167.9), the shape of RL final returns when some seeds fail. The margin
is 1 sd of the baseline's returns throughout.
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
FUTILITY, FUTILITY_KIND = 0.05, "pocock-spending"  # the staged gate's defaults ([check] stage_futility)
SOLVED, COLLAPSED, SPREAD, SHARE = 500.0, 30.0, 5.0, 0.15
BIMODAL_SD = math.sqrt(SPREAD**2 + SHARE * (1 - SHARE) * (SOLVED - COLLAPSED) ** 2)
RULES = (("drop-beyond-margin", 1.0), ("any-drop", 0.0))  # (rule, shift in margins)


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


#: (name, drop in baseline sd, generator, unit sd for the margin, A/A or gross breakage)
SCENARIOS = (
    ("A/A normal", 0.0, _normal(0.0), 1.0, "A/A"),
    ("A/A bimodal", 0.0, _bimodal(SHARE), BIMODAL_SD, "A/A"),
    ("drop 1 sd, normal", 1.0, _normal(1.0), 1.0, ""),
    ("drop 2 sd, normal", 2.0, _normal(2.0), 1.0, ""),
    ("collapses 15% -> 50%, bimodal", 0.35 * (SOLVED - COLLAPSED) / BIMODAL_SD, _bimodal(0.5), BIMODAL_SD, ""),
    ("gross: drop 4 sd, normal", 4.0, _normal(4.0), 1.0, "gross"),
    ("gross: every seed collapses, bimodal", 0.85 * (SOLVED - COLLAPSED) / BIMODAL_SD, _bimodal(1.0), BIMODAL_SD,
     "gross"),
)  # fmt: skip


def _run(plan, base, cand, margin, shift):
    counts = dict.fromkeys(("worse", "equivalent", "futility", "final"), 0)
    seeds = 0
    for b, c in zip(base, cand):
        r = sequential_test(b, c, plan=plan, margin=margin, shift=shift)
        counts[r.decision] += 1
        seeds += r.seeds_used[1]
    n = len(base)
    return {k: v / n for k, v in counts.items()}, seeds / n


def _fixed(base, cand, shift):
    test = sps.ttest_ind(cand + shift, base, equal_var=False, alternative="less", axis=1)  # H0: drop <= shift
    return float((test.pvalue < ALPHA).mean())


def _se(p, reps):
    return math.sqrt(max(p * (1 - p), 1e-12) / reps)


def _plan(full_baseline, spend=FUTILITY, kind=FUTILITY_KIND):
    base = (N,) * len(STAGES) if full_baseline else None
    return sequential_plan(STAGES, baseline_stages=base, alpha=ALPHA, kind="obrien-fleming-spending",
                           futility=spend, futility_kind=kind)


def _role(drop_sd, shift_sd):
    if drop_sd <= shift_sd + 1e-9:
        return "null"  # a drop up to the tolerated one: any "worse" is a false alarm
    return "power"


def comparison_table(reps, seq, *, rules, full_baseline):
    plan = _plan(full_baseline)
    lines = ["| rule | scenario | drop (sd) | sequential: worse | equivalent | futility | final | seeds/side "
             "| fixed 20: worse | power − fixed | seeds saved |", "|---|---|---|---|---|---|---|---|---|---|---|"]
    verdicts = []
    children = iter(seq.spawn(len(rules) * len(SCENARIOS)))
    for rule, shift_m in rules:
        for name, drop, draw, unit, kind in SCENARIOS:
            base, cand = draw(np.random.default_rng(next(children)), reps)
            rates, seeds = _run(plan, base, cand, unit, shift_m * unit)
            fixed = _fixed(base, cand, shift_m * unit)
            w, saved = rates["worse"], 1.0 - seeds / N
            lines.append(
                f"| {rule} | {name} | {drop:.2f} | {w:.4f} ± {_se(w, reps):.4f} | {rates['equivalent']:.3f} "
                f"| {rates['futility']:.3f} | {rates['final']:.3f} | {seeds:.2f} | {fixed:.4f} ± {_se(fixed, reps):.4f} "
                f"| {100 * (w - fixed):+.1f} | {100 * saved:.0f}% |")
            what = f"{rule}, {name}"
            if _role(drop, shift_m) == "null":
                ok = w <= ALPHA + 2 * _se(ALPHA, reps)
                verdicts.append(f"{what}: false alarms {w:.4f} <= alpha + 2 MC se: {'met' if ok else 'MISSED'}")
            else:
                ok = w >= fixed - 0.05
                verdicts.append(f"{what}: power {w:.3f} vs fixed {fixed:.3f}, within 5 points: "
                                f"{'met' if ok else 'MISSED'}")
            if kind:
                verdicts[-1] += f"; seeds saved {100 * saved:.0f}% >= 30%: {'met' if saved >= 0.3 else 'MISSED'}"
    return "\n".join(lines), verdicts


def futility_table(reps, seq):
    """Default rule, margin 1 sd: the futility spend and design against the gate's cost and power."""
    lines = ["| futility spend | futility design | A/A: seeds/side | drop = margin: worse | drop 2 margins: power "
             "| futility stops at 2 margins | drop 2 margins: seeds/side |", "|---|---|---|---|---|---|---|"]
    data = [_normal(d)(np.random.default_rng(c), reps) for d, c in zip((0.0, 1.0, 2.0), seq.spawn(3))]
    designs = [(0.0, "-")] + [(s, k) for s in (0.02, 0.05, 0.10) for k in ("obrien-fleming-spending", "pocock-spending")]
    for spend, kind in designs:
        plan = _plan(False, spend, None if kind == "-" else kind)
        (aa, aa_seeds), (at_m, _), (at_2m, seeds_2m) = (_run(plan, b, c, 1.0, 1.0) for b, c in data)
        lines.append(f"| {spend:g} | {kind} | {aa_seeds:.2f} | {at_m['worse']:.4f} | {at_2m['worse']:.3f} "
                     f"| {at_2m['futility']:.3f} | {seeds_2m:.2f} |")
    fixed = [_fixed(b, c, 1.0) for b, c in data]
    lines.append(f"| fixed 20 seeds (Welch, one-sided) | - | 20 | {fixed[1]:.4f} | {fixed[2]:.3f} | - | 20 |")
    return "\n".join(lines) + f"\n\nMonte Carlo standard error at 0.05: {_se(ALPHA, reps):.4f}; at 0.93: {_se(0.93, reps):.4f}."


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
            lines.append(f"| {kind} | {returns} | {by_t.mean():.4f} | {by_z.mean():.4f} "
                         f"| {_fixed(base, cand, 0.0):.4f} |")
    return "\n".join(lines) + f"\n\nMonte Carlo standard error at 0.05: {_se(ALPHA, reps):.4f}."


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--reps", type=int, default=4_000, help="simulated gates per row (tables 1 and 2)")
    parser.add_argument("--seed", type=int, default=20261203)
    args = parser.parse_args(argv)
    main_seq, gate_seq, fut_seq, t_seq = np.random.SeedSequence(args.seed).spawn(4)
    started = time.process_time()
    print(f"# Sequential gate: stages {STAGES} seeds per side, one-sided alpha = {ALPHA}, seed {args.seed}\n")
    design = (f"'worse': O'Brien–Fleming-type Lan–DeMets spending at alpha {ALPHA}; equivalence (TOST against "
              f"±margin): the same design at {ALPHA} per half; futility: non-binding, {FUTILITY_KIND} spending of "
              f"{FUTILITY} over the interim looks against a drop of shift + margin. Margin 1 sd of the baseline's "
              "returns (bimodal: 167.9); shift = the margin under drop-beyond-margin, 0 under any-drop. "
              "'seeds/side' is the mean candidate seeds when the gate decided; the fixed gate always uses 20. "
              "'±' is one Monte Carlo standard error.")
    print(f"## 1. Sequential vs fixed, both sides staged ({args.reps} simulated gates per row)\n")
    print(design, "\n")
    table, verdicts = comparison_table(args.reps, main_seq, rules=RULES, full_baseline=False)
    print(table, "\n")
    print("Targets (issue 14):\n")
    print("\n".join(f"- {v}" for v in verdicts), "\n")
    print(f"## 2. The staged gate's shape: baseline recorded in full, candidate staged ({args.reps} per row)\n")
    table, verdicts = comparison_table(args.reps, gate_seq, rules=RULES[:1], full_baseline=True)
    print(table, "\n")
    print("\n".join(f"- {v}" for v in verdicts), "\n")
    f_reps = max(args.reps // 2, 200)
    print(f"## 3. The price of the futility stop, drop-beyond-margin, normal returns ({f_reps} per cell)\n")
    print(futility_table(f_reps, fut_seq), "\n")
    t_reps = 4 * args.reps
    print(f"## 4. Small samples: A/A false alarms of the 'worse' boundaries alone ({t_reps} simulations)\n")
    print(t_handling_table(t_reps, t_seq), "\n")
    print(f"CPU time: {time.process_time() - started:.0f} s")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
