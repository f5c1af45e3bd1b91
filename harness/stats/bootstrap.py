"""Bootstrap confidence intervals: percentile and BCa, for one or several samples, optionally stratified.

Resampling is vectorised: a batch of resamples is one index array and one call
of the statistic along its last axis, never a Python loop per resample.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable, Sequence
from typing import Literal

import numpy as np
from scipy.special import ndtr, ndtri

from harness.stats._result import ConfidenceInterval, fmt
from harness.stats._validate import (
    as_sample,
    check_positive_int,
    check_probability,
    make_rng,
    warn_few,
)

__all__ = [
    "BOOTSTRAP_METHODS",
    "BootstrapResult",
    "bootstrap_ci",
    "bootstrap_mean",
    "bootstrap_mean_difference",
    "mean_difference",
]

#: Interval methods of :func:`bootstrap_ci`.
BOOTSTRAP_METHODS: tuple[str, ...] = ("bca", "percentile")

#: Most array elements one batch of resamples may hold (about 16 MB of float64).
_BATCH_ELEMENTS = 2_000_000

Statistic = Callable[..., np.ndarray]


@dataclasses.dataclass(frozen=True, slots=True)
class BootstrapResult:
    """A bootstrap confidence interval.

    Attributes
    ----------
    estimate
        The statistic on the original samples.
    interval
        The two-sided interval at ``confidence_level``.
    method
        ``"bca"`` or ``"percentile"`` (prefixed ``"stratified "`` when resampled within strata).
    standard_error
        Standard deviation of the bootstrap distribution.
    n_resamples, confidence_level
        As requested.
    bias_correction, acceleration
        BCa's ``z0`` and ``a`` (``None`` for the percentile method).
    reading
        One sentence.
    """

    estimate: float
    interval: ConfidenceInterval
    method: str
    standard_error: float
    n_resamples: int
    confidence_level: float
    bias_correction: float | None
    acceleration: float | None
    reading: str


def _strata_groups(labels: object, n: int, name: str) -> list[np.ndarray]:
    """Positions of each stratum, in order of first appearance."""
    arr = np.asarray(labels)
    if arr.ndim != 1 or arr.size != n:
        raise ValueError(f"`{name}` must give one label per value ({n}), got shape {arr.shape}")
    _, first, inverse = np.unique(arr, return_index=True, return_inverse=True)
    order = np.argsort(first)
    return [np.flatnonzero(inverse == k) for k in order]


def _bootstrap_iv(data, statistic, method, confidence_level, n_resamples, rng, strata):
    if isinstance(data, tuple):
        if not data:
            raise ValueError("`data` must hold at least one sample, got an empty tuple")
        if any(np.ndim(s) == 0 for s in data):
            raise ValueError(
                "`data` is a tuple, which means several samples, but it holds single numbers; "
                "pass one sample as a list or array"
            )
        samples = [as_sample(s, f"data[{i}]") for i, s in enumerate(data)]
    else:
        samples = [as_sample(data, "data")]
    if not callable(statistic):
        raise TypeError(f"`statistic` must be callable as statistic(*samples, axis=-1), got {statistic!r}")
    if method not in BOOTSTRAP_METHODS:
        listed = ", ".join(repr(m) for m in BOOTSTRAP_METHODS)
        raise ValueError(f"`method` must be one of {listed}, got {method!r}")
    level = check_probability(confidence_level, "confidence_level")
    n_resamples = check_positive_int(n_resamples, "n_resamples", minimum=2)
    if strata is None:
        groups = [[np.arange(s.size)] for s in samples]
    else:
        several = isinstance(data, tuple)
        per_sample = strata if several else (strata,)
        if not isinstance(per_sample, tuple) or len(per_sample) != len(samples):
            raise ValueError(
                f"`strata` must be a tuple of one label array per sample ({len(samples)}) "
                f"when `data` is a tuple of samples, got {type(strata).__name__}"
            )
        groups = [
            _strata_groups(lab, s.size, f"strata[{i}]" if several else "strata")
            for i, (lab, s) in enumerate(zip(per_sample, samples, strict=True))
        ]
    return samples, level, n_resamples, make_rng(rng), groups


def _scalar(value: object, what: str) -> float:
    arr = np.asarray(value, dtype=np.float64)
    if arr.shape != ():
        raise ValueError(f"`statistic` must return one number per sample set, got shape {arr.shape} {what}")
    if not np.isfinite(arr):
        raise ValueError(f"`statistic` returned {float(arr)} {what}; it must be finite")
    return float(arr)


def _resample_indices(groups: list[np.ndarray], n: int, size: int, rng: np.random.Generator) -> np.ndarray:
    """``size`` resamples of ``n`` positions, drawn with replacement within each group."""
    if len(groups) == 1:
        return rng.integers(0, n, size=(size, n))
    idx = np.empty((size, n), dtype=np.intp)
    for g in groups:
        idx[:, g] = g[rng.integers(0, g.size, size=(size, g.size))]
    return idx


def _bootstrap_distribution(samples, groups, statistic, n_resamples, rng) -> np.ndarray:
    total = sum(s.size for s in samples)
    batch = max(1, min(n_resamples, _BATCH_ELEMENTS // total))
    out = np.empty(n_resamples)
    for start in range(0, n_resamples, batch):
        size = min(batch, n_resamples - start)
        resampled = [
            s[_resample_indices(g, s.size, size, rng)] for s, g in zip(samples, groups, strict=True)
        ]
        values = np.asarray(statistic(*resampled, axis=-1), dtype=np.float64)
        if values.shape != (size,):
            raise ValueError(
                "`statistic` must reduce along `axis=-1`: for a batch of "
                f"{size} resamples it returned shape {values.shape}, expected ({size},)"
            )
        out[start : start + size] = values
    if not np.all(np.isfinite(out)):
        raise ValueError("`statistic` returned a non-finite value on some resamples; it must be finite")
    return out


def _acceleration(samples, groups, statistic) -> float:
    """BCa acceleration from jackknife influence values, one group (sample or stratum) at a time.

    ``a = sum_g n_g^-3 sum_j l_gj^3 / (6 (sum_g n_g^-2 sum_j l_gj^2)^(3/2))`` with the
    jackknife influence values ``l_gj = (n_g - 1)(mean_j theta_(gj) - theta_(gj))``
    (Davison & Hinkley 1997, chapter 5, for several samples; for one sample it is
    Efron & Tibshirani 1993, eq. 14.15).
    """
    num = den = 0.0
    for k, (s, sample_groups) in enumerate(zip(samples, groups, strict=True)):
        for g in sample_groups:
            m = g.size
            if m < 2:
                continue
            keep = np.ones((m, s.size), dtype=bool)
            keep[np.arange(m), g] = False
            left_out = np.broadcast_to(s, (m, s.size))[keep].reshape(m, s.size - 1)
            args = [
                left_out if j == k else np.broadcast_to(other, (m, other.size))
                for j, other in enumerate(samples)
            ]
            theta = np.asarray(statistic(*args, axis=-1), dtype=np.float64)
            if theta.shape != (m,) or not np.all(np.isfinite(theta)):
                raise ValueError(
                    "`statistic` must give a finite value on every jackknife sample for BCa; "
                    "use method='percentile'"
                )
            infl = (m - 1) * (theta.mean() - theta)
            num += float(np.sum(infl**3)) / m**3
            den += float(np.sum(infl**2)) / m**2
    return 0.0 if den == 0.0 else num / (6.0 * den**1.5)


def bootstrap_ci(
    data: object,
    statistic: Statistic,
    *,
    method: Literal["bca", "percentile"] = "bca",
    confidence_level: float = 0.95,
    n_resamples: int = 9999,
    rng: object = None,
    strata: object = None,
) -> BootstrapResult:
    """Bootstrap confidence interval of any statistic of one or several independent samples.

    Parameters
    ----------
    data
        One sample (a 1-D sequence) or a tuple of samples, each resampled
        independently with replacement.
    statistic
        ``statistic(*samples, axis=-1)``: reduces the last axis, so that a batch
        of resamples of shape ``(batch, n)`` gives ``batch`` values. It must be a
        symmetric function of the values of each sample (BCa deletes single
        observations to compute its acceleration).
    method
        ``"bca"`` (bias-corrected and accelerated) or ``"percentile"``.
    confidence_level
        Two-sided level of the interval.
    n_resamples
        Number of bootstrap resamples.
    rng
        A numpy Generator, SeedSequence, non-negative int or None.
    strata
        Optional stratum labels (one per value; a tuple of label arrays for a
        tuple of samples). Values are then resampled within their stratum, so
        each resample keeps the stratum sizes (a stratified bootstrap, e.g.
        runs resampled within each task). For BCa each stratum counts as its
        own sample in the acceleration.

    Returns
    -------
    BootstrapResult

    Notes
    -----
    The percentile interval takes the ``(1 ± level)/2`` quantiles of the
    bootstrap distribution. BCa shifts them to
    ``Φ(z0 + (z0 + z_α)/(1 - a (z0 + z_α)))`` with the bias correction
    ``z0 = Φ⁻¹(share of resamples below the estimate, ties counted half)`` and
    the jackknife acceleration ``a``. If every resample gives the same value
    (e.g. constant data), the interval is that single point. With fewer than
    10 values in a sample a :class:`~harness.core.errors.TooFewSeedsWarning` is
    emitted: bootstrap intervals are too narrow with few seeds (Colas et al. 2018).

    References
    ----------
    .. [1] Efron, B. (1987). Better bootstrap confidence intervals. JASA 82:171–185.
    .. [2] Efron, B. & Tibshirani, R. J. (1993). An Introduction to the Bootstrap,
       chapters 13–14. Chapman & Hall.
    .. [3] Davison, A. C. & Hinkley, D. V. (1997). Bootstrap Methods and their
       Application, sections 3.2 and 5.3. Cambridge University Press.
    .. [4] Agarwal, R. et al. (2021). Deep reinforcement learning at the edge of
       the statistical precipice. NeurIPS 34 (stratified bootstrap).
    .. [5] Colas, C., Sigaud, O. & Oudeyer, P.-Y. (2018). How many random seeds?
       arXiv:1806.08295.

    Examples
    --------
    >>> import numpy as np
    >>> x = np.arange(20.0)
    >>> r = bootstrap_ci(x, np.mean, rng=np.random.default_rng(1))
    >>> r.estimate, r.interval.low < 9.5 < r.interval.high
    (9.5, True)
    """
    samples, level, n_resamples, gen, groups = _bootstrap_iv(
        data, statistic, method, confidence_level, n_resamples, rng, strata
    )
    for s in samples:
        warn_few(s.size, 10, "a bootstrap interval")
    estimate = _scalar(statistic(*samples, axis=-1), "on the original data")
    dist = _bootstrap_distribution(samples, groups, statistic, n_resamples, gen)
    alpha = (1.0 - level) / 2.0
    z0 = accel = None
    if np.ptp(dist) == 0.0:
        low = high = float(dist[0])
    else:
        probs = np.array([alpha, 1.0 - alpha])
        if method == "bca":
            share = (np.count_nonzero(dist < estimate) + 0.5 * np.count_nonzero(dist == estimate)) / dist.size
            if share in (0.0, 1.0):
                raise ValueError(
                    "BCa is undefined here: the estimate lies outside the bootstrap distribution; "
                    "use method='percentile'"
                )
            z0 = float(ndtri(share))
            accel = _acceleration(samples, groups, statistic)
            z = ndtri(probs)
            probs = ndtr(z0 + (z0 + z) / (1.0 - accel * (z0 + z)))
        low, high = (float(v) for v in np.quantile(dist, probs))
    name = ("stratified " if strata is not None else "") + method
    interval = ConfidenceInterval(low, high)
    reading = (
        f"The statistic is {fmt(estimate)}, {fmt(100 * level)}% {name} bootstrap interval "
        f"{interval} from {n_resamples} resamples"
        + (" (every resample gave the same value)." if low == high else ".")
    )
    return BootstrapResult(
        estimate=estimate,
        interval=interval,
        method=name,
        standard_error=float(np.std(dist, ddof=1)),
        n_resamples=n_resamples,
        confidence_level=level,
        bias_correction=z0,
        acceleration=accel,
        reading=reading,
    )


def _mean(x: np.ndarray, axis: int = -1) -> np.ndarray:
    return np.mean(x, axis=axis)


def mean_difference(a: np.ndarray, b: np.ndarray, axis: int = -1) -> np.ndarray:
    """``mean(a) - mean(b)`` along ``axis``: the vectorised two-sample statistic that the
    bootstrap and the permutation test (``harness.stats.rank``) resample."""
    return np.mean(a, axis=axis) - np.mean(b, axis=axis)


def bootstrap_mean(x: Sequence[float], **options: object) -> BootstrapResult:
    """Bootstrap interval of the mean of ``x``; keyword options as in :func:`bootstrap_ci`.

    References
    ----------
    .. [1] Efron, B. & Tibshirani, R. J. (1993). An Introduction to the Bootstrap, chapter 13.
    """
    return bootstrap_ci(x, _mean, **options)


def bootstrap_mean_difference(a: Sequence[float], b: Sequence[float], **options: object) -> BootstrapResult:
    """Bootstrap interval of ``mean(a) - mean(b)``, resampling each group independently.

    References
    ----------
    .. [1] Efron, B. & Tibshirani, R. J. (1993). An Introduction to the Bootstrap,
       section 16.2 (two-sample problems).
    """
    return bootstrap_ci((a, b), mean_difference, **options)
