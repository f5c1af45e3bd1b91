"""Per-seed metrics: turn one learning curve into one number (the unit the statistics compare).

Seeds are the independent samples; the checkpoints of one seed are not, so
each metric summarises a whole curve into a single value per seed. The
registry :data:`METRICS` lets a manifest select metrics by name.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Callable, Mapping
from types import MappingProxyType

import numpy as np

from harness.core.curves import LearningCurve
from harness.stats._validate import check_finite_number

__all__ = [
    "METRICS",
    "MetricSpec",
    "ThresholdResult",
    "area_under_curve",
    "final_return",
    "normalised_score",
    "steps_to_threshold",
]


def _curve_iv(curve: object) -> np.ndarray:
    """The curve's mean return per checkpoint, after checking it is usable."""
    if not isinstance(curve, LearningCurve):
        raise TypeError(f"`curve` must be a harness.core.curves.LearningCurve, got {type(curve).__name__}")
    if not curve.checkpoints:
        raise ValueError("`curve` has no checkpoints; the run produced no evaluations")
    for c in curve.checkpoints:
        if not c.finite:
            raise ValueError(
                f"`curve` has a non-finite evaluation return at step {c.step}; the run diverged "
                "and must be treated as failed, not summarised"
            )
    return curve.means


def final_return(curve: LearningCurve, *, fraction: float = 0.1) -> float:
    """Mean evaluation return over the last ``fraction`` of the checkpoints.

    The last ``ceil(fraction * n_checkpoints)`` checkpoints (at least one) are
    averaged, each checkpoint weighted equally (each is the mean over its
    evaluation episodes). ``fraction=1`` averages the whole curve.

    Examples
    --------
    >>> from harness.core.curves import Checkpoint
    >>> c = LearningCurve(tuple(Checkpoint(s, (float(r),)) for s, r in
    ...                         [(0, 0), (10, 10), (20, 30), (30, 50)]))
    >>> final_return(c, fraction=0.5)
    40.0
    """
    means = _curve_iv(curve)
    frac = check_finite_number(fraction, "fraction")
    if not 0.0 < frac <= 1.0:
        raise ValueError(f"`fraction` must lie in (0, 1], got {fraction!r}")
    k = max(1, math.ceil(frac * means.size - 1e-9))
    return float(np.mean(means[-k:]))


def area_under_curve(curve: LearningCurve) -> float:
    """Area under the curve normalised by the budget: the time-average of the mean return.

    The trapezoid rule over the checkpoint steps, divided by the step span
    (last step minus first step), so the value is in units of return and
    checkpoints at uneven steps weigh by the interval they cover. A curve with
    a single checkpoint has no span: its value is that checkpoint's return.

    Examples
    --------
    >>> from harness.core.curves import Checkpoint
    >>> c = LearningCurve((Checkpoint(0, (0.0,)), Checkpoint(100, (100.0,))))
    >>> area_under_curve(c)
    50.0
    """
    means = _curve_iv(curve)
    if means.size == 1:
        return float(means[0])
    steps = curve.steps.astype(np.float64)
    return float(np.trapezoid(means, steps) / (steps[-1] - steps[0]))


@dataclasses.dataclass(frozen=True, slots=True)
class ThresholdResult:
    """Steps to reach a return threshold, possibly right-censored.

    Attributes
    ----------
    value
        The first checkpoint step whose mean return reaches the threshold; if
        it is never reached, the last evaluated step (the censoring time: the
        run is only known to need more than this).
    reached
        False when the run never reached the threshold (censored).
    threshold
        The threshold used.
    """

    value: int
    reached: bool
    threshold: float


def steps_to_threshold(curve: LearningCurve, threshold: float) -> ThresholdResult:
    """First step at which the mean evaluation return reaches ``threshold`` (``>=``).

    Runs that never reach it are censored at their last checkpoint, not dropped
    and not given a made-up value; compare such values with
    :func:`harness.stats.mann_whitney_censored` (Gehan 1965).

    Examples
    --------
    >>> from harness.core.curves import Checkpoint
    >>> c = LearningCurve(tuple(Checkpoint(s, (float(r),)) for s, r in
    ...                         [(0, 0), (10, 60), (20, 40)]))
    >>> steps_to_threshold(c, 50.0)
    ThresholdResult(value=10, reached=True, threshold=50.0)
    >>> steps_to_threshold(c, 70.0).reached
    False
    """
    means = _curve_iv(curve)
    thr = check_finite_number(threshold, "threshold")
    hits = np.flatnonzero(means >= thr)
    steps = curve.steps
    if hits.size:
        return ThresholdResult(int(steps[hits[0]]), True, thr)
    return ThresholdResult(int(steps[-1]), False, thr)


def normalised_score(x: float | np.ndarray, random_return: float, threshold: float) -> float | np.ndarray:
    """``(x - random_return) / (threshold - random_return)``: 0 at a random policy, 1 at the threshold.

    Puts returns of different tasks on one scale before pooling them (e.g. for
    an IQM across tasks); ``random_return`` is the measured return of a random
    policy on the task.

    References
    ----------
    .. [1] Agarwal, R. et al. (2021). Deep reinforcement learning at the edge of
       the statistical precipice. NeurIPS 34 (normalised scores).

    Examples
    --------
    >>> normalised_score(250.0, 20.0, 480.0)
    0.5
    """
    r = check_finite_number(random_return, "random_return")
    t = check_finite_number(threshold, "threshold")
    if t == r:
        raise ValueError(
            f"`threshold` equals `random_return` ({t!r}): the scale would be empty; "
            "choose a threshold a random policy does not reach"
        )
    arr = np.asarray(x, dtype=np.float64)
    if not np.all(np.isfinite(arr)):
        raise ValueError(f"`x` must be finite, got {x!r}")
    out = (arr - r) / (t - r)
    return float(out) if out.ndim == 0 else out


@dataclasses.dataclass(frozen=True, slots=True)
class MetricSpec:
    """A per-seed metric that a manifest can name.

    Attributes
    ----------
    name
        The name used in manifests (``"final"``, ``"auc"``, ``"steps-to-threshold"``).
    compute
        ``compute(curve, **options)``: the metric of one curve.
    higher_is_better
        Whether larger values are better (False for steps to threshold).
    censored
        Whether ``compute`` returns a :class:`ThresholdResult` that may be
        censored (compare with :func:`harness.stats.mann_whitney_censored`).
    description
        One line for reports.
    """

    name: str
    compute: Callable[..., object]
    higher_is_better: bool
    censored: bool
    description: str


#: Metrics by manifest name (read-only).
METRICS: Mapping[str, MetricSpec] = MappingProxyType({
    "final": MetricSpec(
        "final", final_return, True, False,
        "mean evaluation return over the last fraction of checkpoints",
    ),
    "auc": MetricSpec(
        "auc", area_under_curve, True, False,
        "area under the curve: trapezoid over steps divided by the step span",
    ),
    "steps-to-threshold": MetricSpec(
        "steps-to-threshold", steps_to_threshold, False, True,
        "first step whose mean return reaches the threshold (censored if never)",
    ),
})  # fmt: skip
