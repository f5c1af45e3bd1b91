"""Where do two sets of learning curves differ? A max-statistic permutation test over checkpoints."""

from __future__ import annotations

import dataclasses
import itertools
import math

import numpy as np

from harness.stats._result import fmt
from harness.stats._validate import (
    Alternative,
    check_alternative,
    check_positive_int,
    check_probability,
    make_rng,
)
from harness.stats.resolution import rounding_tolerance

__all__ = ["MaxStatisticResult", "max_statistic_test"]

#: Most permutations handled in one vectorised batch.
_BATCH = 2048


@dataclasses.dataclass(frozen=True, slots=True)
class MaxStatisticResult:
    """Per-checkpoint Welch statistics with p-values adjusted for the whole curve.

    Attributes
    ----------
    statistics
        Welch's t of ``mean(a) - mean(b)`` at each checkpoint.
    differences
        ``mean(a) - mean(b)`` at each checkpoint (the estimates).
    adjusted_pvalues
        Single-step max-statistic adjusted p-values: rejecting where they are
        at most ``alpha`` keeps the family-wise error over all checkpoints at ``alpha``.
    alternative, n_resamples, exact, alpha, method
        The alternative, the number of relabellings used, whether all were
        enumerated, the level the reading uses, and the method's name.
    """

    statistics: tuple[float, ...]
    differences: tuple[float, ...]
    adjusted_pvalues: tuple[float, ...]
    alternative: str
    n_resamples: int
    exact: bool
    alpha: float
    method: str

    def rejected(self, alpha: float | None = None) -> tuple[bool, ...]:
        """Checkpoints where the curves differ at family-wise level ``alpha`` (default: ``self.alpha``)."""
        level = self.alpha if alpha is None else check_probability(alpha, "alpha")
        return tuple(p <= level for p in self.adjusted_pvalues)

    def first_rejected_range(self, alpha: float | None = None) -> range | None:
        """The first run of consecutive rejected checkpoint indices, or None if none is rejected.

        Examples
        --------
        >>> r = MaxStatisticResult((0.0,) * 5, (0.0,) * 5, (0.5, 0.01, 0.02, 0.3, 0.01),
        ...                        "two-sided", 99, False, 0.05, "max-T")
        >>> r.first_rejected_range()
        range(1, 3)
        """
        flags = self.rejected(alpha)
        if True not in flags:
            return None
        start = flags.index(True)
        stop = start
        while stop < len(flags) and flags[stop]:
            stop += 1
        return range(start, stop)

    @property
    def reading(self) -> str:
        """One sentence."""
        where = self.first_rejected_range()
        if where is None:
            return (
                f"The curves differ at no checkpoint at family-wise level {fmt(self.alpha)} "
                f"({len(self.statistics)} checkpoints, {self.n_resamples} relabellings)."
            )
        k = sum(self.rejected())
        return (
            f"The curves differ at {k} of {len(self.statistics)} checkpoints at family-wise level "
            f"{fmt(self.alpha)}, first at checkpoints {where.start}..{where.stop - 1}."
        )


def _curves_iv(curves: object, name: str) -> np.ndarray:
    try:
        arr = np.asarray(curves, dtype=np.float64)
    except (TypeError, ValueError):
        raise TypeError(f"`{name}` must be a 2-D array (seeds, checkpoints) of numbers") from None
    if arr.ndim != 2:
        raise ValueError(f"`{name}` must be 2-D (seeds, checkpoints), got shape {arr.shape}")
    if arr.shape[0] < 2:
        raise ValueError(f"`{name}` needs at least 2 seeds (rows), got {arr.shape[0]}; run more seeds")
    if arr.shape[1] < 1:
        raise ValueError(f"`{name}` needs at least one checkpoint (column)")
    bad = np.argwhere(~np.isfinite(arr))
    if bad.size:
        i, j = (int(v) for v in bad[0])
        raise ValueError(f"`{name}` must be finite, got {arr[i, j]} at seed {i}, checkpoint {j}")
    return arr


def _welch_t(sum_a, sq_a, n_a, sum_all, sq_all, n_b, tol) -> np.ndarray:
    """Welch's t per row and checkpoint from group sums of centred values (vectorised).

    Differences and standard errors at most ``tol`` (the rounding noise of each checkpoint) count as zero.
    """
    mean_a = sum_a / n_a
    mean_b = (sum_all - sum_a) / n_b
    var_a = np.maximum(sq_a - n_a * mean_a**2, 0.0) / (n_a - 1)
    var_b = np.maximum((sq_all - sq_a) - n_b * mean_b**2, 0.0) / (n_b - 1)
    diff = mean_a - mean_b
    diff = np.where(np.abs(diff) <= tol, 0.0, diff)
    se = np.sqrt(var_a / n_a + var_b / n_b)
    se = np.where(se <= tol, 0.0, se)
    with np.errstate(divide="ignore", invalid="ignore"):
        t = np.where(se > 0, diff / se, np.where(diff == 0, 0.0, np.copysign(np.inf, diff)))
    return t


def _labellings(n_a: int, n: int, size: int, exact: bool, rng: np.random.Generator):
    """Batches of 0/1 group-a indicators, (batch, n): all combinations, or random ones."""
    if exact:
        combos = itertools.combinations(range(n), n_a)
        while chunk := list(itertools.islice(combos, _BATCH)):
            m = np.zeros((len(chunk), n))
            m[np.repeat(np.arange(len(chunk)), n_a), np.asarray(chunk).ravel()] = 1.0
            yield m
        return
    base = np.concatenate([np.ones(n_a), np.zeros(n - n_a)])
    for start in range(0, size, _BATCH):
        b = min(_BATCH, size - start)
        yield rng.permuted(np.tile(base, (b, 1)), axis=1)


def max_statistic_test(
    curves_a: object,
    curves_b: object,
    *,
    alternative: Alternative = "two-sided",
    n_resamples: int = 9999,
    rng: object = None,
    alpha: float = 0.05,
) -> MaxStatisticResult:
    """Compare two sets of learning curves checkpoint by checkpoint, controlling the family-wise error.

    Parameters
    ----------
    curves_a, curves_b
        Arrays of shape ``(n_a, T)`` and ``(n_b, T)``: one row per seed, one
        column per checkpoint (the same checkpoints in both).
    alternative
        ``"two-sided"``, ``"greater"`` (``a`` higher) or ``"less"``.
    n_resamples
        Random relabellings of seeds between the groups. If the number of
        distinct relabellings ``C(n_a + n_b, n_a)`` is at most this, all are
        enumerated instead (``exact=True``).
    rng
        A numpy Generator, SeedSequence, non-negative int or None.
    alpha
        Family-wise level used by :meth:`MaxStatisticResult.rejected` and the reading.

    Notes
    -----
    At each checkpoint the statistic is Welch's t. Whole curves are relabelled
    (seeds are the exchangeable units; checkpoints of a seed stay together, so
    their correlation is kept). For each relabelling the maximum over
    checkpoints of ``|t|`` (``t`` or ``-t`` one-sided) is recorded; the adjusted
    p-value of a checkpoint is the share of relabellings, the observed one
    included, whose maximum reaches its statistic (single-step max-T). A
    checkpoint where every seed of both groups has the same value gets ``t = 0``;
    one where each group is constant but the groups differ gets ``t = ±inf``.
    Differences and spreads within the rounding noise of the checkpoint's values
    (:func:`harness.stats.resolution.rounding_tolerance`) count as zero. The
    smallest attainable adjusted p-value is ``1 / C(n_a + n_b, n_a)`` with exact
    enumeration (:func:`harness.stats.resolution.smallest_pvalue_permutation`):
    with 2 against 2 seeds it is 1/6, so no checkpoint can be rejected at 0.05.
    Sums are taken of values centred per checkpoint, so large returns with a
    small spread keep their precision.

    References
    ----------
    .. [1] Westfall, P. H. & Young, S. S. (1993). Resampling-Based Multiple
       Testing, section 2.6 (single-step max-T). Wiley.
    .. [2] Nichols, T. E. & Holmes, A. P. (2002). Nonparametric permutation tests
       for functional neuroimaging. Human Brain Mapping 15:1–25.
    .. [3] Phipson, B. & Smyth, G. K. (2010). Permutation p-values should never be zero.

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> a = rng.normal(size=(8, 5)); b = rng.normal(size=(8, 5)); a[:, 3:] += 3.0
    >>> r = max_statistic_test(a, b, rng=np.random.default_rng(1))
    >>> r.rejected()[3:], r.first_rejected_range().stop
    ((True, True), 5)
    """
    a = _curves_iv(curves_a, "curves_a")
    b = _curves_iv(curves_b, "curves_b")
    if a.shape[1] != b.shape[1]:
        raise ValueError(
            "`curves_a` and `curves_b` must have the same checkpoints, "
            f"got {a.shape[1]} and {b.shape[1]} columns"
        )
    alternative = check_alternative(alternative)
    n_resamples = check_positive_int(n_resamples, "n_resamples", minimum=1)
    alpha = check_probability(alpha, "alpha")
    gen = make_rng(rng)
    n_a, n_b = a.shape[0], b.shape[0]
    x = np.vstack([a, b])
    z = x - x.mean(axis=0)
    z2 = z**2
    s_all, q_all = z.sum(axis=0), z2.sum(axis=0)
    tol = rounding_tolerance(1.0, n_a + n_b) * np.abs(x).max(axis=0)
    sign = {"two-sided": 0.0, "greater": 1.0, "less": -1.0}[alternative]

    def oriented(t: np.ndarray) -> np.ndarray:
        return np.abs(t) if sign == 0.0 else sign * t

    t_obs = _welch_t(z[:n_a].sum(axis=0), z2[:n_a].sum(axis=0), n_a, s_all, q_all, n_b, tol)
    distinct = math.comb(n_a + n_b, n_a)
    exact = distinct <= n_resamples
    maxima = np.concatenate([
        oriented(_welch_t(m @ z, m @ z2, n_a, s_all, q_all, n_b, tol)).max(axis=1)
        for m in _labellings(n_a, n_a + n_b, n_resamples, exact, gen)
    ])  # fmt: skip
    obs = oriented(t_obs)
    # A relative tolerance so that the observed labelling counts itself despite rounding.
    tol = 1e-10 * np.where(np.isfinite(obs), np.abs(obs), 0.0)
    maxima.sort()
    at_least = maxima.size - np.searchsorted(maxima, obs - tol, side="left")
    if exact:
        pvalues = at_least / maxima.size
    else:
        pvalues = (1.0 + at_least) / (1.0 + maxima.size)
    return MaxStatisticResult(
        statistics=tuple(float(v) for v in t_obs),
        differences=tuple(float(v) for v in a.mean(axis=0) - b.mean(axis=0)),
        adjusted_pvalues=tuple(float(v) for v in pvalues),
        alternative=alternative,
        n_resamples=int(maxima.size),
        exact=exact,
        alpha=alpha,
        method="max-statistic permutation test (Welch t, single-step max-T)",
    )
