"""Aggregates of per-seed scores across tasks: mean of task means, interquartile mean and
probability of improvement, with (stratified) bootstrap intervals (Agarwal et al. 2021)."""

from __future__ import annotations

import numpy as np
from scipy import stats as _st

from harness.stats._validate import as_sample
from harness.stats.bootstrap import BootstrapResult, _strata_groups, bootstrap_ci

__all__ = [
    "bootstrap_iqm",
    "bootstrap_task_mean",
    "bootstrap_probability_of_improvement",
    "iqm",
    "probability_of_improvement",
    "task_mean",
]


def _iqm(x: np.ndarray, axis: int = -1) -> np.ndarray:
    return _st.trim_mean(x, 0.25, axis=axis)


def iqm(x: object) -> float:
    """Interquartile mean: the mean of the middle 50% of the values (25% trimmed mean).

    Pool all runs of all tasks (normalised scores) before calling it to get the
    aggregate IQM of Agarwal et al. (2021).

    References
    ----------
    .. [1] Agarwal, R., Schwarzer, M., Castro, P. S., Courville, A. &
       Bellemare, M. G. (2021). Deep reinforcement learning at the edge of the
       statistical precipice. NeurIPS 34.

    Examples
    --------
    >>> iqm([1, 2, 3, 4, 100])
    3.0
    """
    return float(_iqm(as_sample(x, "x", min_size=1)))


def _poi(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """P(X > Y) + P(X = Y)/2 over all pairs, reducing the last axis of both (vectorised)."""
    xs, ys = x[..., :, None], y[..., None, :]
    return np.mean(np.where(xs > ys, 1.0, np.where(xs == ys, 0.5, 0.0)), axis=(-2, -1))


def _task_groups(values: np.ndarray, tasks: object, name: str) -> dict[object, np.ndarray]:
    labels = np.asarray(tasks)
    if labels.shape != values.shape:
        raise ValueError(
            f"`tasks_{name}` must give one task per value of `{name}` ({values.size}), "
            f"got shape {labels.shape}"
        )
    return {lab.item(): np.flatnonzero(labels == lab) for lab in np.unique(labels)}


def _paired_tasks(x, y, tasks_x, tasks_y) -> list[tuple[np.ndarray, np.ndarray]]:
    if (tasks_x is None) != (tasks_y is None):
        raise ValueError("give both `tasks_x` and `tasks_y`, or neither")
    if tasks_x is None:
        return [(np.arange(x.size), np.arange(y.size))]
    gx = _task_groups(x, tasks_x, "x")
    gy = _task_groups(y, tasks_y, "y")
    if gx.keys() != gy.keys():
        only = sorted(map(str, gx.keys() ^ gy.keys()))
        raise ValueError(f"`tasks_x` and `tasks_y` must name the same tasks; only in one of them: {only}")
    return [(gx[k], gy[k]) for k in gx]


def probability_of_improvement(
    x: object, y: object, *, tasks_x: object = None, tasks_y: object = None
) -> float:
    """Probability that a run of ``x`` scores higher than a run of ``y``, ties counted one half.

    With task labels, the probability is computed within each task and averaged
    over tasks, as in Agarwal et al. (2021).

    References
    ----------
    .. [1] Agarwal, R. et al. (2021). Deep reinforcement learning at the edge of
       the statistical precipice. NeurIPS 34.

    Examples
    --------
    >>> round(probability_of_improvement([1, 2, 3], [2, 2, 4]), 4)
    0.3333
    """
    xs = as_sample(x, "x", min_size=1)
    ys = as_sample(y, "y", min_size=1)
    pairs = _paired_tasks(xs, ys, tasks_x, tasks_y)
    return float(np.mean([_poi(xs[gx], ys[gy]) for gx, gy in pairs]))


def bootstrap_iqm(
    scores: object, *, tasks: object = None, method: str = "percentile", **options: object
) -> BootstrapResult:
    """Bootstrap interval of the IQM, resampling runs within each task when ``tasks`` is given.

    Parameters
    ----------
    scores
        Per-run scores (normalised scores when pooling tasks).
    tasks
        Optional task label of each run: the stratified bootstrap of Agarwal et al. (2021).
    method, **options
        As in :func:`~harness.stats.bootstrap.bootstrap_ci`; the percentile
        method is the default, as in Agarwal et al. (2021).

    References
    ----------
    .. [1] Agarwal, R. et al. (2021). NeurIPS 34.
    .. [2] Efron, B. & Tibshirani, R. J. (1993). An Introduction to the Bootstrap.
    """
    return bootstrap_ci(scores, _iqm, method=method, strata=tasks, **options)


def bootstrap_probability_of_improvement(
    x: object,
    y: object,
    *,
    tasks_x: object = None,
    tasks_y: object = None,
    method: str = "percentile",
    **options: object,
) -> BootstrapResult:
    """Bootstrap interval of :func:`probability_of_improvement`, stratified by task when given.

    With tasks only the percentile method is offered: BCa's jackknife deletes
    single runs, which would break the per-task pairing.

    References
    ----------
    .. [1] Agarwal, R. et al. (2021). NeurIPS 34.
    """
    xs = as_sample(x, "x")
    ys = as_sample(y, "y")
    pairs = _paired_tasks(xs, ys, tasks_x, tasks_y)
    if tasks_x is None:
        def statistic(a: np.ndarray, b: np.ndarray, axis: int = -1) -> np.ndarray:
            return _poi(a, b)

        return bootstrap_ci((xs, ys), statistic, method=method, **options)
    if method != "percentile":
        raise ValueError(
            f"`method` must be 'percentile' when tasks are given (BCa's jackknife would break "
            f"the per-task pairing), got {method!r}"
        )

    def per_task(a: np.ndarray, b: np.ndarray, axis: int = -1) -> np.ndarray:
        return np.mean([_poi(a[..., gx], b[..., gy]) for gx, gy in pairs], axis=0)

    return bootstrap_ci(
        (xs, ys), per_task, method=method, strata=(tasks_x, tasks_y), **options
    )


def _task_positions(n: int, tasks: object) -> list[np.ndarray]:
    return [np.arange(n)] if tasks is None else _strata_groups(tasks, n, "tasks")


def _mean_of_groups(groups: list[np.ndarray]):
    def statistic(x: np.ndarray, axis: int = -1) -> np.ndarray:
        return np.mean([np.mean(x[..., g], axis=-1) for g in groups], axis=0)

    return statistic


def task_mean(scores: object, *, tasks: object = None) -> float:
    """Mean over tasks of each task's mean score: every task weighs the same, whatever its seeds.

    Without ``tasks`` it is the plain mean. This is the "mean" aggregate of
    Agarwal et al. (2021), who average normalised scores over runs and tasks
    with the same number of runs per task.

    References
    ----------
    .. [1] Agarwal, R. et al. (2021). Deep reinforcement learning at the edge of
       the statistical precipice. NeurIPS 34.

    Examples
    --------
    >>> task_mean([0.0, 1.0, 1.0, 4.0], tasks=["a", "a", "b", "b"])  # (0.5 + 2.5) / 2
    1.5
    """
    x = as_sample(scores, "scores", min_size=1)
    return float(_mean_of_groups(_task_positions(x.size, tasks))(x))


def bootstrap_task_mean(
    scores: object, *, tasks: object = None, method: str = "percentile", **options: object
) -> BootstrapResult:
    """Bootstrap interval of :func:`task_mean`, resampling runs within each task when ``tasks`` is given.

    The stratified bootstrap of Agarwal et al. (2021): each resample draws every
    task's runs with replacement from that task's own runs, so the set of tasks
    is fixed and only the run-to-run noise is resampled. ``method`` and
    ``options`` as in :func:`~harness.stats.bootstrap.bootstrap_ci`; with tasks
    only the percentile method is offered (BCa's jackknife deletes single runs,
    which would shift the task positions the statistic reads).

    References
    ----------
    .. [1] Agarwal, R. et al. (2021). NeurIPS 34.
    .. [2] Efron, B. & Tibshirani, R. J. (1993). An Introduction to the Bootstrap.
    """
    x = as_sample(scores, "scores")
    if tasks is not None and method != "percentile":
        raise ValueError(f"`method` must be 'percentile' when tasks are given (BCa's jackknife would shift the "
                         f"task positions), got {method!r}")
    return bootstrap_ci(x, _mean_of_groups(_task_positions(x.size, tasks)), method=method, strata=tasks, **options)
