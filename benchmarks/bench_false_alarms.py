"""False alarms and detection against the shipped baselines, on fresh seeds (issue 10, "Must show").

For each shipped manifest named, a large **pool** of fresh seeds of the unchanged
configuration is trained (or read back): the calibration set of the manifest
(``harness.gate.calibration_set.calibration_manifest``: the manifest's seeds, then more
children of its root), whose first seeds are the shipped baseline's. The seeds the
baseline does not hold are cut in order into disjoint **fresh sets** of the manifest's
seed count, and each set is verified against the shipped baseline file exactly as
``rlharness verify`` does (``harness.gate.fresh_sets.check_fresh_sets``), under the
default rule and under ``"any-drop"``. Every failed gate is a false alarm.

The same is done for a **weakened** configuration: one trainer setting changed so that
the final return drops by about twice the manifest's margin (the evaluation's exploration
rate, found by a quick search on 4 seeds of root 990001, never used elsewhere; see ``WEAKENED``). Every
failed gate there is a detection.

When the pool holds fewer disjoint fresh sets than asked for (``SETS``; training is slow on a
shared machine), a second column adds random re-partitions of the same fresh seeds until that
many sets are reached; its interval is approximate, since sets of different partitions share
seeds. The first column (disjoint sets only) has the exact interval.

Also printed: each baseline's mean next to the pool's distribution of set means (z and
percentile, ``BaselineDraw``), the pool's spread and range per metric (the figures the
manifest headers and README's table quote), and the same false alarms against a baseline
cut to the gate's seed count (what the baseline would have been without ``[seeds]
baseline_count``).

Stored runs are reused whenever a run of the same training (seed, configuration,
budget, evaluation; whatever the pool's size or the run's index) is in the pool folder, so a rerun takes
minutes; only missing seeds are trained (``--no-train``: none). Runs are reused whatever
trainer source fingerprint they were recorded with (the table says which); that the
numbers did not change is checked where pool and baseline share seeds (the baseline's
own seeds, retrained by ``record``: bitwise equal or not, printed).

Usage::

    python benchmarks/bench_false_alarms.py --pools /work/pools [--workers 2] [--no-train] \
        [--sets frozenlake-q=40 taxi-q=40 cartpole-dqn=10]
"""

from __future__ import annotations

import argparse
import dataclasses
import sys
import time
from pathlib import Path

import numpy as np

from harness import stats
from harness.core.curves import LearningCurve
from harness.core.spec import canonical_json, sha256_of
from harness.execute.runner import run_manifest
from harness.gate.calibration_set import calibration_manifest
from harness.gate.compare import metric_values
from harness.gate.curveset import CurveSet
from harness.gate.preflight import check_gate_policy
from harness.gate.fresh_sets import baseline_draw, check_fresh_sets
from harness.manifest.loader import load_manifest
from harness.store.baseline import SeedCurve, read_baseline
from harness.store.cache import RunCache
from harness.stats.proportion import BinomialRate
from harness.store.results import TRAINER_SOURCE, read_record, record_file_name

ROOT = Path(__file__).resolve().parents[1]

#: Fresh sets per manifest (the issue: >= 40 for the tabular tasks, >= 10 for CartPole).
SETS = {"frozenlake-q": 40, "taxi-q": 40, "cartpole-dqn": 10, "acrobot-dqn": 4, "mountaincar-dqn": 3}
#: One setting per manifest that lowers the final return by about two margins: the evaluation's exploration
#: rate, so the greedy policy's returns drop by a controlled amount. Search (4 seeds of root 990001): Taxi
#: epsilon 0.01 lowered final by 0.29 (1.2 margins), FrozenLake 0.03 by 0.13; on the first pool seeds Taxi
#: 0.016 gave 2.55 margins and FrozenLake 0.03 gave 1.18, hence 0.0125 and 0.05. (Taxi's step size is a
#: cliff, not a knob: 0.1 instead of 0.5 leaves the final return at -253 on 4 seeds.)
WEAKENED = {"frozenlake-q": ("evaluation.epsilon", 0.05), "taxi-q": ("evaluation.epsilon", 0.0125)}
#: The rules compared: the default, then the rule before issue 10.
RULES = ("drop-beyond-margin", "any-drop")
#: Entropy of the re-partitions of the fresh seeds (``_rates``).
SPLIT_SEED = 20261203


def _pool_curves(manifest, n_seeds: int, folder: Path, *, train: bool, workers: int,
                 baseline=None) -> tuple[CurveSet, set[str]]:
    """The pool's curves: stored runs of the same training, plus (if ``train``) the missing ones trained.

    A seed of ``baseline`` (of the same configuration) missing from the folder is taken from the
    baseline file rather than trained again.
    """
    derived = calibration_manifest(manifest, seeds=n_seeds)
    specs = derived.runs()
    recorded = {} if baseline is None else {r.seed: r for r in baseline.runs}
    found, missing = {}, []
    for spec in specs:
        path = folder / record_file_name(spec)
        try:
            record = read_record(path) if path.is_file() else None
        except ValueError:
            record = None
        if record is not None and record.ok and _same_run(record.spec, spec):
            found[spec.index] = SeedCurve(spec.seed, record.curve), record.versions
        elif spec.seed in recorded:
            found[spec.index] = recorded[spec.seed], baseline.versions
        else:
            missing.append(spec)
    if missing and train:  # the missing seeds as a manifest of their own, trained into the same folder
        print(f"  training {len(missing)} missing seeds of {derived.name} into {folder} ...", flush=True)
        rest = dataclasses.replace(derived, seeds=tuple(s.seed for s in missing))
        rest = dataclasses.replace(rest, config_hash=sha256_of(rest.resolved_config()))
        outcome = run_manifest(rest, results_dir=folder, workers=workers, cache=RunCache(folder.parent / ".cache"))
        index = {s.seed: s.index for s in specs}
        for record in outcome.results.records:
            if record.ok:
                found[index[record.spec.seed]] = SeedCurve(record.spec.seed, record.curve), record.versions
    chosen = [found[i] for i in sorted(found)]
    sources = {v.get(TRAINER_SOURCE, "?") for _, v in chosen}
    label = f"pool {folder} ({len(chosen)} of {n_seeds} seeds)"
    curves = CurveSet(label, derived.name, derived.config_hash, derived.resolved_config(),
                      chosen[0][1] if chosen else {}, tuple(c for c, _ in chosen), derived.budget)
    return curves, sources


def _same_run(a, b) -> bool:
    """Whether two run specs train the same run: equal apart from the manifest's name, config hash and
    the run's index in it (the built-in trainers read none of the three)."""
    def training(spec) -> str:
        data = spec.to_json()
        del data["manifest"], data["config_hash"], data["index"]
        return canonical_json(data)

    return training(a) == training(b)


def _fresh(pool: CurveSet, base: CurveSet) -> CurveSet:
    """The pool without the baseline's seeds."""
    own = {r.seed for r in base.runs}
    return dataclasses.replace(pool, runs=tuple(r for r in pool.runs if r.seed not in own))


def _weakened(manifest, key: str, value):
    """The manifest with one setting changed: a trainer setting, or ``evaluation.epsilon``."""
    if key == "evaluation.epsilon":
        return dataclasses.replace(manifest, evaluation=dataclasses.replace(manifest.evaluation, epsilon=value))
    return dataclasses.replace(manifest, settings={**manifest.settings, key: value})


def _rate(fa: BinomialRate) -> str:
    return f"{fa.count}/{fa.trials} = {fa.estimate:.3f} [{fa.interval.low:.3f}, {fa.interval.high:.3f}]"


def _rates(base: CurveSet, pool: CurveSet, policy, kw: dict, *, wanted: int) -> tuple[str, str]:
    """Failed gates on the disjoint fresh sets (exact interval), and on ``wanted`` sets when there are fewer.

    The second figure adds random re-partitions of the same fresh seeds (``SPLIT_SEED``) into
    disjoint sets until ``wanted`` sets are reached: sets of different partitions share seeds, so
    its interval is approximate (as calibrate's A/A splits are).
    """
    first = check_fresh_sets(base, pool, policy=policy, **kw).false_alarms
    if first.trials >= wanted:
        return _rate(first), "(enough disjoint sets)"
    own = {r.seed for r in base.runs}
    fresh = [r for r in pool.runs if r.seed not in own]
    rng = np.random.default_rng(np.random.SeedSequence(SPLIT_SEED))
    failed, total = first.count, first.trials
    while total < wanted:
        shuffled = dataclasses.replace(pool, runs=tuple(fresh[i] for i in rng.permutation(len(fresh))))
        more = check_fresh_sets(base, shuffled, policy=policy, **kw).false_alarms
        failed, total = failed + more.count, total + more.trials
    return _rate(first), _rate(BinomialRate.of(failed, total)) + " approx."


def _same_numbers(baseline, pool: CurveSet) -> str:
    """Whether the pool's runs of the baseline's seeds are bitwise the baseline's curves."""
    mine = {r.seed: r.curve for r in pool.runs}
    shared = [(r.curve, mine[r.seed]) for r in baseline.runs if r.seed in mine]
    if not shared:
        return "no shared seeds"
    same = sum(_bytes(a) == _bytes(b) for a, b in shared)
    return f"{same} of {len(shared)} shared seeds bitwise equal"


def _bytes(curve: LearningCurve) -> bytes:
    return b"".join(np.asarray(cp.returns, dtype=float).tobytes() for cp in curve.checkpoints)


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--pools", default="results/pools", help="folder of the pools (default results/pools)")
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--no-train", action="store_true", help="use stored runs only; train nothing")
    parser.add_argument("--sets", nargs="*", default=[], metavar="NAME=N", help="fresh sets per manifest")
    parser.add_argument("manifests", nargs="*", default=["frozenlake-q", "taxi-q", "cartpole-dqn"])
    args = parser.parse_args()
    sets = dict(SETS) | {k: int(v) for k, v in (s.split("=", 1) for s in args.sets)}
    pools = Path(args.pools)
    gate_rows, draw_rows, claim_rows, notes = [], [], [], []
    start = time.perf_counter()
    for name in args.manifests:
        manifest = load_manifest(ROOT / "manifests" / f"{name}.toml")
        baseline = read_baseline(ROOT / "baselines" / f"{name}.json", manifest_name=name)
        base = CurveSet.from_baseline(baseline)
        g, nb = len(manifest.seeds), len(baseline.runs)
        n_pool = nb + sets.get(name, 10) * g
        policy = manifest.check
        scale = check_gate_policy(manifest, policy, baseline=baseline)  # floor, threshold, margins, as verify
        threshold = scale.threshold
        pool, sources = _pool_curves(manifest, n_pool, pools / name, train=not args.no_train, workers=args.workers,
                                     baseline=baseline)
        margins = ", ".join(m.text for m in scale.margins)
        notes.append(f"{name}: {pool.label}; margins {margins} (floor {scale.floor}, threshold {threshold}); trainer source "
                     f"of pool runs {sorted(sources)}, of the baseline {baseline.versions.get(TRAINER_SOURCE, '?')}; "
                     f"{_same_numbers(baseline, pool)}")
        short = dataclasses.replace(base, runs=base.runs[:g])  # a baseline recorded without baseline_count
        kw = {"group_size": g, "references": manifest.references, "scale": scale}
        wanted = sets.get(name, 10)
        fresh = _fresh(pool, base)
        if len(fresh.runs) < g:  # not one fresh set yet: the baseline's draw and the pool's claims only
            gate_rows.append([name, "-", f"{nb}", f"no fresh set: {len(fresh.runs)} fresh seeds, fewer than {g}", "-"])
            rules = ()
        else:
            rules = RULES
        for rule in rules:
            rp = dataclasses.replace(policy, rule=rule)
            gate_rows.append([name, rule, f"{nb}", *_rates(base, pool, rp, kw, wanted=wanted)])
            if nb > g:
                gate_rows.append([name, rule, f"{g} (the baseline's first)", *_rates(short, pool, rp, kw, wanted=wanted)])
        if name in WEAKENED and rules:
            key, value = WEAKENED[name]
            weak_manifest = _weakened(manifest, key, value)
            weak, _ = _pool_curves(weak_manifest, n_pool, pools / f"{name}-{key}-{value}", train=not args.no_train,
                                   workers=args.workers)
            fresh_final = np.mean(metric_values("final", _fresh(pool, base), policy, threshold).values)
            weak_final = np.mean(metric_values("final", _fresh(weak, base), policy, threshold).values)
            margin = scale.margin("final")
            for rule in RULES:
                found = _rates(base, weak, dataclasses.replace(policy, rule=rule), kw, wanted=wanted)
                gate_rows.append([f"{name}, {key} = {value} (final {weak_final - fresh_final:+.3g} = "
                                  f"{(weak_final - fresh_final) / margin:+.2f} margins)", rule, f"{nb}",
                                  *(f"detected {f}" for f in found)])
        if rules:
            check = check_fresh_sets(base, pool, policy=policy, **kw)
            tallies = "; ".join(f"{check_name}: " + ", ".join(f"{n} {v}" for v, n in sorted(counts.items()))
                                for check_name, counts in check.verdicts.items())
            notes.append(f"{name}: verdicts over the {check.false_alarms.trials} disjoint fresh sets (default rule): "
                         f"{tallies}")
        draws = [baseline_draw(m, metric_values(m, b, policy, threshold).values,
                               metric_values(m, fresh, policy, threshold).values)
                 for b in ((base, short) if nb > g else (base,)) for m in policy.metrics]
        for d in draws:
            pct = "-" if d.percentile is None else f"{d.percentile:.0f} (of {len(d.set_means)} sets of {d.baseline_seeds})"
            draw_rows.append([name, d.metric, f"{d.baseline_mean:.4g} ({d.baseline_seeds} seeds)",
                              f"{d.fresh_mean:.4g} ± {d.fresh_sd:.3g}",
                              f"{d.set_means[0]:.4g} to {d.set_means[-1]:.4g}" if d.set_means else "-",
                              f"{d.z:+.2f}", pct])
        for metric in policy.metrics:
            values = metric_values(metric, fresh, policy, threshold).values
            lo, q05, q50, q95, hi = np.percentile(values, [0, 5, 50, 95, 100])
            below = f"{int(np.sum(values < threshold))}" if metric == "final" and threshold is not None else "-"
            sd = float(values.std(ddof=1))
            detectable = stats.minimum_detectable_difference(sd, g, sd, g, alpha=policy.alpha, power=policy.power,
                                                             alternative="greater") if sd > 0 else 0.0
            claim_rows.append([name, metric, f"{values.size}", f"{values.mean():.4g}", f"{sd:.3g}",
                               f"{lo:.4g} / {q05:.4g} / {q50:.4g} / {q95:.4g} / {hi:.4g}", below,
                               f"{detectable:.3g}"])
    print(f"\n{time.perf_counter() - start:.0f} s. Pools: " + "\n  ".join([""] + notes))
    _table(["manifest (configuration)", "rule", "baseline seeds", "gate failed on disjoint fresh sets [95% CP]",
            "with re-partitions up to the wanted sets"], gate_rows)
    _table(["manifest", "metric", "baseline mean", "fresh mean ± sd", "set means (min to max)", "z",
            "baseline percentile"], draw_rows)
    _table(["manifest", "metric", "fresh seeds", "mean", "sd", "min / 5% / median / 95% / max", "below threshold",
            "detectable drop at the gate's seeds (one-sided Welch, alpha, power 0.8)"], claim_rows)
    return 0


def _table(header: list[str], rows: list[list[str]]) -> None:
    print("\n| " + " | ".join(header) + " |\n|" + "---|" * len(header))
    for row in rows:
        print("| " + " | ".join(row) + " |")


if __name__ == "__main__":
    sys.exit(main())
