"""Performance profiles: the share of runs scoring above each threshold, with a stratified bootstrap band.

The run-score distribution of Agarwal et al. (2021): for normalised scores
``x[m, n]`` of run ``n`` on task ``m`` (``M`` tasks, ``N_m`` runs each),

    F(tau) = 1/M * sum_m 1/N_m * #{n : x[m, n] > tau}

the share of runs above ``tau``, each task weighing the same. Read as a curve
over ``tau`` it shows the whole distribution of scores rather than one summary:
a profile that lies above another everywhere is stochastically dominant.
The band is the pointwise percentile interval of the stratified bootstrap
(runs resampled within each task).
"""

from __future__ import annotations

import dataclasses

import numpy as np

from harness.stats._validate import as_sample, check_positive_int, check_probability, make_rng
from harness.stats.bootstrap import _resample_indices, _strata_groups

__all__ = ["PerformanceProfile", "bootstrap_performance_profile", "performance_profile"]


@dataclasses.dataclass(frozen=True, slots=True)
class PerformanceProfile:
    """A performance profile with its pointwise bootstrap band.

    Attributes
    ----------
    thresholds
        The scores ``tau`` the profile is evaluated at (increasing).
    share
        Share of runs scoring above each threshold (tasks weighed equally).
    low, high
        Pointwise ``confidence_level`` percentile band of the stratified bootstrap.
    confidence_level, n_resamples
        As requested.
    method
        The band's method in words.
    """

    thresholds: tuple[float, ...]
    share: tuple[float, ...]
    low: tuple[float, ...]
    high: tuple[float, ...]
    confidence_level: float
    n_resamples: int
    method: str


def _profile_iv(scores: object, thresholds: object, tasks: object) -> tuple[np.ndarray, np.ndarray, list[np.ndarray]]:
    x = as_sample(scores, "scores", min_size=1)
    taus = as_sample(thresholds, "thresholds", min_size=1)
    if np.any(np.diff(taus) <= 0):
        raise ValueError("`thresholds` must be strictly increasing")
    groups = [np.arange(x.size)] if tasks is None else _strata_groups(tasks, x.size, "tasks")
    return x, taus, groups


def _shares(x: np.ndarray, taus: np.ndarray, groups: list[np.ndarray]) -> np.ndarray:
    """Profile of each row of ``x`` (shape ``(..., n)``) at ``taus``: shape ``(..., len(taus))``."""
    above = x[..., None, :] > taus[:, None]
    return np.mean([np.mean(above[..., g], axis=-1) for g in groups], axis=0)


def performance_profile(scores: object, thresholds: object, *, tasks: object = None) -> np.ndarray:
    """Share of runs scoring above each threshold, averaged over tasks when ``tasks`` is given.

    Parameters
    ----------
    scores
        One (normalised) score per run.
    thresholds
        Strictly increasing scores ``tau``.
    tasks
        Optional task label of each run.

    References
    ----------
    .. [1] Agarwal, R., Schwarzer, M., Castro, P. S., Courville, A. &
       Bellemare, M. G. (2021). Deep reinforcement learning at the edge of the
       statistical precipice. NeurIPS 34 (performance profiles, run-score distribution).

    Examples
    --------
    >>> performance_profile([0.1, 0.5, 0.9, 1.0, 2.0], [0.0, 0.5, 1.5], tasks=list("aaabb")).tolist()
    [1.0, 0.6666666666666666, 0.25]
    """
    x, taus, groups = _profile_iv(scores, thresholds, tasks)
    return _shares(x, taus, groups)


def bootstrap_performance_profile(
    scores: object,
    thresholds: object,
    *,
    tasks: object = None,
    confidence_level: float = 0.95,
    n_resamples: int = 2000,
    rng: object = None,
) -> PerformanceProfile:
    """:func:`performance_profile` with a pointwise percentile band from the stratified bootstrap.

    Each resample draws every task's runs with replacement from that task's runs
    (Agarwal et al. 2021); the band at each threshold is the ``(1 ± level)/2``
    quantile pair of the resampled shares (Efron & Tibshirani 1993, ch. 13). It
    is pointwise, not simultaneous: it covers the share at each threshold, not
    the whole curve at once.

    References
    ----------
    .. [1] Agarwal, R. et al. (2021). NeurIPS 34.
    .. [2] Efron, B. & Tibshirani, R. J. (1993). An Introduction to the Bootstrap, chapter 13.
    """
    x, taus, groups = _profile_iv(scores, thresholds, tasks)
    level = check_probability(confidence_level, "confidence_level")
    n_resamples = check_positive_int(n_resamples, "n_resamples", minimum=2)
    gen = make_rng(rng)
    batch = max(1, min(n_resamples, 2_000_000 // max(1, x.size * taus.size)))
    dist = np.empty((n_resamples, taus.size))
    for start in range(0, n_resamples, batch):
        size = min(batch, n_resamples - start)
        dist[start:start + size] = _shares(x[_resample_indices(groups, x.size, size, gen)], taus, groups)
    alpha = (1.0 - level) / 2.0
    low, high = np.quantile(dist, [alpha, 1.0 - alpha], axis=0)
    stratified = "stratified " if tasks is not None else ""
    return PerformanceProfile(
        thresholds=tuple(taus.tolist()),
        share=tuple(_shares(x, taus, groups).tolist()),
        low=tuple(low.tolist()),
        high=tuple(high.tolist()),
        confidence_level=level,
        n_resamples=n_resamples,
        method=f"pointwise {level:.0%} {stratified}percentile bootstrap band ({n_resamples} resamples)",
    )
