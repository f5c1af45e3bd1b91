"""The one place where a comparison's floor, threshold and per-metric margins are resolved.

``verify``, ``compare`` and ``calibrate`` all size their margins here, before any
training starts, so that a margin that cannot be sized (or a steps-to-threshold
check without a threshold) is a :class:`~harness.core.errors.ConfigError` naming
the file and the ``[check]`` key, never a failure after the runs. The rules for
each metric's margin are :meth:`harness.manifest.policy.GatePolicy.margin_for`;
this module only decides where the floor and the threshold come from:

* the threshold: ``[check].threshold``, else the reward threshold gymnasium
  registers for the task;
* the floor: ``[check].floor``, else the mean return of a uniformly random policy
  on the evaluation episodes, measured only when some return metric's margin is
  a share of the span.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Iterable, Mapping, Sequence

from harness.core.errors import ConfigError, ResultsError
from harness.core.spec import EvaluationPlan, TaskSpec
from harness.gate.curveset import random_policy_return, task_threshold
from harness.manifest.policy import METRIC_UNITS, GatePolicy, PublishedReference

__all__ = ["GateScale", "MetricMargin", "gate_scale", "task_scale"]


@dataclasses.dataclass(frozen=True, slots=True)
class MetricMargin:
    """One metric's margin: its value in the metric's unit, and how it was sized."""

    metric: str
    value: float
    unit: str
    basis: str

    @property
    def text(self) -> str:
        """``"final ±0.25 return (margins.final)"``."""
        return f"{self.metric} ±{self.value:.4g} {self.unit} ({self.basis})"


@dataclasses.dataclass(frozen=True, slots=True)
class GateScale:
    """The floor and threshold of a comparison and every checked metric's margin."""

    floor: float | None
    threshold: float | None
    margins: tuple[MetricMargin, ...]

    def margin(self, metric: str) -> float:
        """The margin of ``metric`` in its unit."""
        for m in self.margins:
            if m.metric == metric:
                return m.value
        raise KeyError(f"no margin was resolved for metric {metric!r}")

    @property
    def by_metric(self) -> Mapping[str, float]:
        return {m.metric: m.value for m in self.margins}


def _metrics(policy: GatePolicy, references: Iterable[PublishedReference]) -> tuple[str, ...]:
    return tuple(dict.fromkeys([*policy.metrics, *(r.metric for r in references)]))


def gate_scale(
    policy: GatePolicy,
    *,
    budget: int,
    references: Sequence[PublishedReference] = (),
    floor: float | None = None,
    threshold: float | None = None,
    path: str | None = None,
) -> GateScale:
    """Resolve every metric's margin from a known floor and threshold (the policy's own values win).

    Raises
    ------
    ConfigError
        Naming ``path`` and the ``[check]`` key: a steps-to-threshold check without a
        threshold, or a margin that cannot be sized.
    """
    threshold = policy.threshold if policy.threshold is not None else threshold
    floor = policy.floor if policy.floor is not None else floor
    metrics = _metrics(policy, references)
    if "steps-to-threshold" in metrics and threshold is None:
        raise ConfigError("metric 'steps-to-threshold' needs a threshold and the task registers no reward threshold "
                          "with gymnasium: set `threshold` in [check]", path=path, key="check.threshold")
    margins = []
    for metric in metrics:
        try:
            value = policy.margin_for(metric, floor=floor, threshold=threshold, budget=budget)
        except ConfigError as exc:
            raise ConfigError(str(exc).split(": ", 1)[-1], path=path, key=f"check.{exc.key}") from None
        margins.append(MetricMargin(metric, value, METRIC_UNITS[metric], policy.margin_basis(metric)))
    return GateScale(floor, threshold, tuple(margins))


def task_scale(
    policy: GatePolicy,
    *,
    task: TaskSpec,
    evaluation: EvaluationPlan,
    budget: int,
    references: Sequence[PublishedReference] = (),
    path: str | None = None,
) -> GateScale:
    """Resolve the scale of a task: its registered threshold, and the random-policy floor when a margin needs it.

    Raises
    ------
    ConfigError
        As :func:`gate_scale`.
    """
    threshold = task_threshold(task) if policy.threshold is None else None
    floor = None
    if policy.floor is None and any(policy.needs_span(m) for m in _metrics(policy, references)):
        try:
            floor = random_policy_return(task, evaluation)
        except ResultsError as exc:  # not a gymnasium task: no random policy to measure
            raise ConfigError(f"{exc}", path=path, key="check.floor") from None
    return gate_scale(policy, budget=budget, references=references, floor=floor, threshold=threshold, path=path)
