"""Where the curves part: the first checkpoint range where the candidate falls significantly below.

Located with a max-statistic permutation test over checkpoints (Westfall & Young
1993), which controls the family-wise error over the whole curve. With too few
seeds the test cannot reach ``alpha`` at all; :func:`divergence_seeds_needed` says
how many it needs, and the report says so instead of "nowhere".
"""

from __future__ import annotations

import dataclasses

import numpy as np

from harness import stats
from harness.gate.curveset import CurveSet
from harness.manifest.policy import GatePolicy

__all__ = ["Divergence", "divergence_seeds_needed", "locate_divergence"]


@dataclasses.dataclass(frozen=True, slots=True)
class Divergence:
    """Where the candidate's curve first falls significantly below the baseline's.

    ``first_step``/``last_step`` bound the first contiguous range of checkpoints where the
    max-statistic test rejects at ``alpha`` (both ``None`` if nowhere); ``pvalue`` is the
    smallest adjusted p-value in that range (or overall when nowhere). ``seeds_needed`` is set
    when the test cannot reach ``alpha`` with the seeds at hand (``candidate_n`` against
    ``baseline_n``): the seeds per side it needs; then "nowhere" means nothing.
    """

    first_step: int | None
    last_step: int | None
    pvalue: float
    alpha: float
    method: str
    candidate_n: int = 0
    baseline_n: int = 0
    seeds_needed: int | None = None

    @property
    def found(self) -> bool:
        return self.first_step is not None

    @property
    def reading(self) -> str:
        if self.seeds_needed is not None:
            return (f"cannot tell where the curves part with {self.candidate_n} vs {self.baseline_n} seeds (needs "
                    f"{self.seeds_needed} per side): the permutation test's smallest p-value here is {self.pvalue:.3g}, "
                    f"above alpha = {self.alpha:g}.")
        if not self.found:
            return f"nowhere: at no checkpoint is the candidate significantly below (smallest adjusted p = {self.pvalue:.3g})."
        return (
            f"the candidate first falls significantly below between steps {self.first_step} and {self.last_step} "
            f"(family-wise adjusted p = {self.pvalue:.3g})."
        )


def divergence_seeds_needed(n_candidate: int, n_baseline: int, policy: GatePolicy) -> int | None:
    """Seeds per side the where-the-curves-part test needs to reach ``alpha``; ``None`` if these suffice."""
    def smallest(n_c: int, n_b: int) -> float:
        return stats.smallest_pvalue_permutation(n_c, n_b, n_resamples=policy.permutations, alternative="less")

    if smallest(n_candidate, n_baseline) <= policy.alpha:
        return None
    return stats.minimum_seeds(lambda n: smallest(n, n), policy.alpha)


def locate_divergence(baseline: CurveSet, candidate: CurveSet, policy: GatePolicy) -> Divergence:
    """Where ``candidate``'s curves first fall significantly below ``baseline``'s (one-sided, family-wise).

    References
    ----------
    Westfall, P. H. & Young, S. S. (1993). Resampling-Based Multiple Testing. Wiley.
    """
    a, b = candidate.curve_matrix(), baseline.curve_matrix()
    steps = baseline.steps
    rng = np.random.default_rng(np.random.SeedSequence(0x4449564552))  # fixed: same data, same report
    result = stats.max_statistic_test(a, b, alternative="less", n_resamples=policy.permutations, rng=rng,
                                      alpha=policy.alpha)
    adjusted = np.asarray(result.adjusted_pvalues, dtype=np.float64)
    method = f"{result.method}; Westfall & Young (1993)"
    sizes = {"candidate_n": a.shape[0], "baseline_n": b.shape[0],
             "seeds_needed": divergence_seeds_needed(a.shape[0], b.shape[0], policy)}
    where = result.first_rejected_range(policy.alpha)
    if where is None:
        return Divergence(None, None, float(adjusted.min()), policy.alpha, method, **sizes)
    return Divergence(steps[where.start], steps[where.stop - 1], float(adjusted[where.start:where.stop].min()),
                      policy.alpha, method, **sizes)
