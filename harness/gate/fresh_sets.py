"""The recorded baseline against fresh seed sets: the false alarms a team lives with, and a lucky or unlucky draw.

A team records one baseline and verifies every later rerun against it. The
A/A splits of :mod:`harness.gate.calibrate` measure the gate on pairs of groups
drawn from one pool; they average over baselines, whereas the team keeps the one
it recorded, itself a single noisy draw. This module measures the gate against
that baseline:

* **fresh sets**: the calibration seeds that are not the baseline's, cut in
  order into disjoint sets of the gate's seed count; each set is verified
  against the recorded baseline's curves exactly as ``verify`` does
  (:func:`harness.gate.verify.verify_sets`, then the gate's decision). Every
  failed gate is a false alarm. The sets are disjoint, so given this baseline
  they are independent trials and the Clopper–Pearson interval of the rate is
  exact; the rate is *conditional on this baseline* (another draw of the
  baseline gives another rate).
* **the baseline's draw**: per metric, where the baseline's mean sits among the
  fresh seeds. The flag is ``|z| > 2`` with ``z = (baseline mean − fresh mean) /
  (fresh sd × sqrt(1/n_baseline + 1/n_fresh))``, i.e. the difference of two means
  of one distribution in units of its standard error (two-sided, about 5% of
  honest baselines are flagged when the means are near normal). The position
  among the means of disjoint fresh sets of the baseline's size is reported as
  well (a percentile), but not used for the flag: telling the 5th or 95th
  percentile apart needs at least 20 such sets, more than most pools hold
  (200 CartPole seeds give 10 sets of 20), whereas ``z`` uses every fresh seed.
  A high baseline (``z > 2``) makes unchanged reruns look worse, so false alarms
  rise; a low one (``z < −2``) lets real drops pass. Either way: re-record the
  baseline on more seeds (``[seeds] baseline_count``) or on another root.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from harness.core.errors import BaselineError
from harness.core.spec import canonical_json
from harness.gate.compare import metric_values
from harness.gate.curveset import CurveSet
from harness.gate.margins import GateScale, gate_scale
from harness.gate.preflight import check_grid
from harness.gate.verify import verify_sets
from harness.store.baseline import Baseline
from harness.manifest.policy import GatePolicy, PublishedReference
from harness.stats._validate import check_positive_int
from harness.stats.proportion import BinomialRate

__all__ = [
    "UNLUCKY_Z", "BaselineDraw", "FreshSetCheck", "baseline_draw", "check_fresh_sets", "check_pool_baseline",
    "fresh_set_indices",
]

#: ``|z|`` above which the baseline's mean counts as an unlucky draw (see the module docstring).
UNLUCKY_Z = 2.0


@dataclasses.dataclass(frozen=True, slots=True)
class BaselineDraw:
    """Where the baseline's mean of one metric sits among fresh seeds of the same configuration.

    Attributes
    ----------
    metric
        The metric's name.
    baseline_mean, baseline_seeds
        The recorded baseline's mean and seed count.
    fresh_mean, fresh_sd, fresh_seeds
        Mean, standard deviation (``ddof=1``) and count of the fresh seeds.
    z
        ``(baseline_mean - fresh_mean) / (fresh_sd * sqrt(1/baseline_seeds + 1/fresh_seeds))``;
        0 when the fresh seeds do not vary and the means agree, ±inf when they differ.
    set_means
        Means of the disjoint fresh sets of ``baseline_seeds`` seeds, sorted.
    percentile
        Share (0-100) of ``set_means`` below the baseline's mean, ties counted half; ``None``
        without any such set.
    """

    metric: str
    baseline_mean: float
    baseline_seeds: int
    fresh_mean: float
    fresh_sd: float
    fresh_seeds: int
    z: float
    set_means: tuple[float, ...]
    percentile: float | None

    @property
    def unlucky(self) -> bool:
        """``|z| > UNLUCKY_Z``: the baseline's mean sits in a tail of the fresh seeds' distribution."""
        return abs(self.z) > UNLUCKY_Z

    @property
    def reading(self) -> str:
        """One sentence: the baseline's mean next to the fresh seeds', and what a tail means."""
        position = ("" if self.percentile is None else
                    f", above {self.percentile:.0f}% of {len(self.set_means)} fresh sets of {self.baseline_seeds}")
        text = (f"{self.metric}: baseline mean {self.baseline_mean:.4g} ({self.baseline_seeds} seeds) against "
                f"{self.fresh_mean:.4g} ± {self.fresh_sd:.3g} over {self.fresh_seeds} fresh seeds: z = {self.z:+.2f}"
                f"{position}")
        if not self.unlucky:
            return text + f"; an ordinary draw (|z| <= {UNLUCKY_Z:g})."
        if self.z > 0:
            return (text + f"; an unlucky draw (z > {UNLUCKY_Z:g}): the baseline is high, so unchanged reruns look "
                    "worse and false alarms rise; re-record it on more seeds ([seeds] baseline_count) or another root.")
        return (text + f"; an unlucky draw (z < -{UNLUCKY_Z:g}): the baseline is low, so real drops can pass; "
                "re-record it on more seeds ([seeds] baseline_count) or another root.")


@dataclasses.dataclass(frozen=True, slots=True)
class FreshSetCheck:
    """Fresh seed sets verified against the recorded baseline.

    Attributes
    ----------
    baseline
        Where the baseline came from (its label).
    baseline_seeds, group_size
        Seeds of the baseline and of each fresh set (the gate's seed count).
    false_alarms
        Fresh sets whose gate failed, of all sets, with a Clopper–Pearson interval (exact:
        the sets are disjoint, so independent given the baseline).
    failing
        Per check name, in how many sets it failed the gate.
    verdicts
        Per check name, how often each verdict came out across the sets (an ``inconclusive``
        check fails a ``strict`` gate).
    draws
        The baseline's draw per metric, in the policy's order.
    rule
        The gate rule the sets were verified under (``GatePolicy.rule``), or ``None`` if the
        policy has none.
    """

    baseline: str
    baseline_seeds: int
    group_size: int
    false_alarms: BinomialRate
    failing: Mapping[str, int]
    verdicts: Mapping[str, Mapping[str, int]]
    draws: tuple[BaselineDraw, ...]
    rule: str | None = None

    @property
    def unlucky(self) -> tuple[str, ...]:
        """Metrics whose baseline mean looks like an unlucky draw."""
        return tuple(d.metric for d in self.draws if d.unlucky)

    @property
    def reading(self) -> str:
        """One sentence: the false-alarm rate against the recorded baseline."""
        fa = self.false_alarms
        rule = f" under rule {self.rule!r}" if self.rule else ""
        return (f"against the recorded baseline ({self.baseline_seeds} seeds), {fa.count} of {fa.trials} fresh sets of "
                f"{self.group_size} seeds failed the gate{rule}: false-alarm rate {fa.estimate:.3g} "
                f"({fa.confidence_level:.0%} interval [{fa.interval.low:.3g}, {fa.interval.high:.3g}], exact given "
                "this baseline).")


def fresh_set_indices(n_seeds: int, taken: Sequence[int], size: int) -> tuple[tuple[int, ...], ...]:
    """Disjoint sets of ``size`` indices of ``range(n_seeds)`` outside ``taken``, in order; a short rest is dropped.

    Examples
    --------
    >>> fresh_set_indices(9, (0, 1), 3)
    ((2, 3, 4), (5, 6, 7))
    """
    n = check_positive_int(n_seeds, "n_seeds")
    k = check_positive_int(size, "size")
    skip = set(taken)
    free = [i for i in range(n) if i not in skip]
    return tuple(tuple(free[j:j + k]) for j in range(0, len(free) - k + 1, k))


def baseline_draw(metric: str, base: np.ndarray, fresh: np.ndarray) -> BaselineDraw:
    """Where the mean of ``base`` (the baseline's values of ``metric``) sits among ``fresh`` values."""
    nb, nf = base.size, fresh.size
    mb, mf = float(np.mean(base)), float(np.mean(fresh))
    sd = float(np.std(fresh, ddof=1)) if nf > 1 else 0.0
    se = sd * math.sqrt(1.0 / nb + 1.0 / nf)
    z = (mb - mf) / se if se > 0 else (0.0 if mb == mf else math.copysign(math.inf, mb - mf))
    means = tuple(sorted(float(np.mean(fresh[j:j + nb])) for j in range(0, nf - nb + 1, nb)))
    percentile = None
    if means:
        below = sum(m < mb for m in means) + 0.5 * sum(m == mb for m in means)
        percentile = 100.0 * below / len(means)
    return BaselineDraw(metric, mb, nb, mf, sd, nf, z, means, percentile)


def check_fresh_sets(
    baseline: CurveSet,
    pool: CurveSet,
    *,
    group_size: int,
    policy: GatePolicy,
    references: Sequence[PublishedReference] = (),
    scale: GateScale | None = None,
) -> FreshSetCheck:
    """Verify disjoint fresh sets of ``pool`` against ``baseline`` and place the baseline's means among them.

    Parameters
    ----------
    baseline
        The recorded baseline's curves (``CurveSet.from_baseline``).
    pool
        Curves of the same configuration; seeds the baseline holds are left out, the rest cut in
        order into sets of ``group_size``.
    group_size
        Seeds per fresh set: the gate's seed count (the manifest's ``[seeds]``).
    policy, references, scale
        As ``verify`` applies them (``locate`` is turned off: where curves part does not enter
        the gate); ``scale`` (floor, threshold, margins) by default sized from the policy alone.

    Raises
    ------
    ValueError
        When the pool holds fewer fresh seeds than one set.

    References
    ----------
    .. [1] Clopper, C. J. & Pearson, E. S. (1934). Biometrika 26:404–413 (the interval of the rate).
    """
    g = check_positive_int(group_size, "group_size", minimum=2)
    own = {r.seed for r in baseline.runs}
    taken = [i for i, r in enumerate(pool.runs) if r.seed in own]
    sets = fresh_set_indices(len(pool.runs), taken, g)
    if not sets:
        raise ValueError(f"`pool` holds {len(pool.runs) - len(taken)} seeds besides the baseline's {len(own)}, fewer "
                         f"than one fresh set of {g}: train at least {len(own) + g} calibration seeds")
    gate = dataclasses.replace(policy, locate=False)
    scale = scale or gate_scale(policy, budget=pool.budget, references=references)
    failed = 0
    failing: dict[str, int] = {}
    verdicts: dict[str, dict[str, int]] = {}
    for indices in sets:
        candidate = dataclasses.replace(pool, runs=tuple(pool.runs[i] for i in indices))
        verdict = verify_sets(baseline, candidate, gate, references=references, scale=scale)
        failed += not verdict.passed
        for name in verdict.gate.failing:
            failing[name] = failing.get(name, 0) + 1
        for c in verdict.checks:
            tally = verdicts.setdefault(c.name, {})
            tally[c.verdict] = tally.get(c.verdict, 0) + 1
    fresh = dataclasses.replace(pool, runs=tuple(r for r in pool.runs if r.seed not in own))
    draws = tuple(
        baseline_draw(m, metric_values(m, baseline, policy, scale.threshold).values,
              metric_values(m, fresh, policy, scale.threshold).values)
        for m in policy.metrics
    )
    return FreshSetCheck(baseline.label, len(baseline.runs), g, BinomialRate.of(failed, len(sets)), failing, verdicts,
                         draws, policy.rule)


def check_pool_baseline(manifest: Any, derived: Any, baseline: Baseline) -> None:
    """Refuse a baseline that fresh sets of ``derived`` (a calibration set) cannot be verified against.

    Called before anything runs.

    Raises
    ------
    BaselineError
        The baseline belongs to another manifest, checkpoint grid or configuration (apart from
        the seeds), or the calibration set leaves fewer fresh seeds than one set.
    """
    if baseline.manifest != manifest.name:
        raise BaselineError(f"{baseline.path}: [manifest] is {baseline.manifest!r}, not {manifest.name!r}: pass the "
                            f"baseline of {manifest.name!r} (--baseline)")
    check_grid(manifest, baseline)
    training = {k: v for k, v in derived.resolved_config().items() if k != "seeds"}
    recorded = {k: v for k, v in baseline.config.items() if k != "seeds"}
    if canonical_json(training) != canonical_json(recorded):
        keys = sorted(k for k in training.keys() | recorded.keys()
                      if canonical_json(training.get(k)) != canonical_json(recorded.get(k)))
        raise BaselineError(f"{baseline.path}: recorded with another configuration ({', '.join(keys)} differ), so "
                            "fresh seeds of the manifest are no rerun of it: record the baseline again "
                            "(`rlharness record --overwrite`) or pass the right --baseline")
    fresh = len({*derived.seeds} - {r.seed for r in baseline.runs})
    group = len(manifest.seeds)
    if fresh < group:
        need = len(derived.seeds) - fresh + group
        raise BaselineError(f"{baseline.path}: the {len(derived.seeds)} calibration seeds leave {fresh} besides the "
                            f"baseline's, fewer than one fresh set of {group}: ask for at least {need} seeds (--seeds)")
