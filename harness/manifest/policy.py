"""The verification policy of a manifest (``[check]``) and published references (``[[reference]]``).

:class:`GatePolicy` says which metrics are checked, at which error rate, how
large a difference still counts as equivalent (the margin) and which verdicts
fail the gate. :class:`PublishedReference` holds summary statistics quoted in a
paper (mean, sd or standard error, number of seeds, where it was published),
against which a rerun can be tested instead of a stored baseline.

Both are frozen values; ``__post_init__`` raises
:class:`harness.core.errors.ConfigError` naming the key. A manifest's tables are
read into them by the settings resolver (``harness.core.config.resolve``), which
also rejects unknown keys with a "did you mean" hint.

The rule
--------
``rule`` names when a drop fails the gate (:data:`harness.stats.drop_rules.DROP_RULES`):
``"drop-beyond-margin"`` (the default) fails only when the drop is
significantly larger than the margin; ``"any-drop"`` fails on any significant
drop (the rule before issue 10). The retired key ``ignore_small`` is refused
with the name of its replacement (``rule = "interval-past-margin"``).

The margin, in each metric's units
----------------------------------
Each metric has its own margin in its own units (:data:`METRIC_UNITS`):

* the return metrics (``final``, ``auc``): ``margins.<metric>`` if given, else
  ``margin`` (absolute, in units of return), else ``margin_share`` (default
  ``0.1``) of the span between the random-policy return and the task's reward
  threshold. The span is ``|threshold - floor|``, so it is positive for tasks
  whose returns are negative (Acrobot: random about -500, threshold -100, span
  400; MountainCar: -200 and -110, span 90). The floor is the mean return of a
  uniformly random policy on the evaluation episodes unless the manifest gives
  ``floor``.
* ``steps-to-threshold`` (environment steps): ``margins.steps-to-threshold`` if
  given, else ``margin_share`` (default ``0.1``) of the training budget. The
  absolute ``margin`` is in units of return and never applies to it.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping
from typing import Any

from harness.core.config import check_number
from harness.core.errors import ConfigError, did_you_mean
from harness.stats.drop_rules import DEFAULT_RULE, DROP_RULES
from harness.stats.boundaries import BOUNDARY_KINDS

__all__ = ["DEFAULT_MARGIN_SHARE", "KNOWN_METRICS", "METRIC_UNITS", "RETIRED_KEYS", "GatePolicy",
           "PublishedReference"]

#: Metric names understood by the checks (see ``harness.gate.metrics.METRICS``).
KNOWN_METRICS = ("final", "auc", "steps-to-threshold")

#: The unit of each metric, in which its margin is given.
METRIC_UNITS = {"final": "return", "auc": "return", "steps-to-threshold": "env steps"}

#: Keys of ``[check]`` that no longer exist, with what to write instead.
RETIRED_KEYS = {
    "ignore_small": ('was replaced by `rule`: write `rule = "interval-past-margin"` for the same behaviour, or '
                     'remove it: the default rule "drop-beyond-margin" already lets drops inside the margin pass'),
}

#: Default margin: a tenth of the span between random-policy return and reward threshold.
DEFAULT_MARGIN_SHARE = 0.1


def _check_stages(stages: object, design: object, futility: object, futility_design: object) -> None:
    """The staged gate's own checks; those against the manifest and baseline are in ``harness.gate.staged``."""
    for key, value in (("stage_design", design), ("stage_futility_design", futility_design)):
        if value not in BOUNDARY_KINDS:
            raise ConfigError(f"unknown design {value!r}.{did_you_mean(str(value), BOUNDARY_KINDS)}", key=key)
    check_number(futility, "stage_futility", low=0, high=0.5, open_high=True)
    if stages is None:
        return
    fix = "give strictly increasing seed counts of at least 2, e.g. [5, 10, 15, 20]"
    if isinstance(stages, (str, bytes)) or not isinstance(stages, (tuple, list)):
        raise ConfigError(f"must be a list of seed counts, got {stages!r}; {fix}", key="stages")
    if len(stages) < 2:
        raise ConfigError(f"needs at least 2 stages, got {list(stages)}; {fix} (one stage is the fixed gate: "
                          "leave `stages` out)", key="stages")
    for i, n in enumerate(stages):
        if isinstance(n, bool) or not isinstance(n, int) or n < 2:
            raise ConfigError(f"stage {i + 1} must be a whole number of at least 2 seeds, got {n!r}; {fix}",
                              key="stages")
        if i and n <= stages[i - 1]:
            raise ConfigError(f"must be strictly increasing, got {list(stages)} (stage {i + 1} has {n} after "
                              f"{stages[i - 1]}); {fix}", key="stages")


@dataclasses.dataclass(frozen=True, slots=True)
class GatePolicy:
    """How verification decides: the ``[check]`` table of a manifest.

    Attributes
    ----------
    metrics
        Metrics checked statistically, from ``"final"``, ``"auc"`` and ``"steps-to-threshold"``.
    alpha
        Family-wise error rate of the checks (Holm-corrected across metrics).
    rule
        When a drop fails the gate: a name from :data:`harness.stats.drop_rules.DROP_RULES`.
    margin
        Absolute margin in units of return, for the return metrics; excludes ``margin_share``.
    margin_share
        Margin as a share of the span between random-policy return and reward threshold
        (return metrics) or of the budget (``steps-to-threshold``); default ``0.1``.
    margins
        Absolute margins per metric in the metric's units, overriding the two above.
    floor
        Random-policy return used for the span; ``None`` measures it on the evaluation episodes.
    threshold
        Return that counts as solved; ``None`` takes the task's registered reward threshold.
    strict
        Also fail on an inconclusive verdict (too few seeds to tell).
    final_share
        Share of the last checkpoints averaged into the ``"final"`` metric.
    power
        Power at which the minimum detectable difference and the seeds needed are given.
    bitwise
        Run the exact check when config and pins match.
    allow_nondeterminism
        Do not fail when the curves are not bitwise identical although the configuration, the
        installed versions and the trainer's source are all unchanged (a reproducibility failure
        by default); the statistical checks then decide alone.
    locate
        Look for the first checkpoint range where the candidate falls significantly below.
    permutations
        Permutations of the max-statistic test used by ``locate``.
    stages
        Candidate seeds trained before each look of the staged (group-sequential) gate,
        strictly increasing, e.g. ``(5, 10, 15, 20)``; ``None`` (the default) is the fixed gate
        on every seed. See :mod:`harness.gate.staged`.
    stage_design
        The staged gate's boundaries, one of ``harness.stats.boundaries.BOUNDARY_KINDS``.
    stage_futility
        The staged gate's futility spend: the largest chance that a candidate whose drop is one
        margin beyond the tolerated one is stopped early as "no drop beyond the margin can be
        shown" (the power the futility stop may cost against that drop); 0 turns the stop off.
    stage_futility_design
        The futility boundary's spending design, one of ``BOUNDARY_KINDS``.
    """

    metrics: tuple[str, ...] = ("final", "auc")
    alpha: float = 0.05
    rule: str = DEFAULT_RULE
    margin: float | None = None
    margin_share: float | None = None
    margins: Mapping[str, float] = dataclasses.field(default_factory=dict)
    floor: float | None = None
    threshold: float | None = None
    strict: bool = False
    final_share: float = 0.1
    power: float = 0.8
    bitwise: bool = True
    allow_nondeterminism: bool = False
    locate: bool = True
    permutations: int = 2000
    stages: tuple[int, ...] | None = None
    stage_design: str = "obrien-fleming-spending"
    stage_futility: float = 0.05
    stage_futility_design: str = "pocock-spending"

    def __post_init__(self) -> None:
        if isinstance(self.metrics, str) or not isinstance(self.metrics, (tuple, list)) or not self.metrics:
            raise ConfigError(f"must be a non-empty list of metric names, got {self.metrics!r}", key="metrics")
        for name in self.metrics:
            if name not in KNOWN_METRICS:
                raise ConfigError(f"unknown metric {name!r}.{did_you_mean(str(name), KNOWN_METRICS)}", key="metrics")
        if len(set(self.metrics)) != len(self.metrics):
            raise ConfigError(f"lists a metric twice: {list(self.metrics)}", key="metrics")
        object.__setattr__(self, "metrics", tuple(self.metrics))
        check_number(self.alpha, "alpha", low=0, high=0.5, open_low=True, open_high=True)
        if self.rule not in DROP_RULES:
            raise ConfigError(f"unknown rule {self.rule!r}.{did_you_mean(str(self.rule), tuple(DROP_RULES))}",
                              key="rule")
        if self.margin is not None:
            check_number(self.margin, "margin", low=0, open_low=True)
        for key in ("floor", "threshold"):
            if getattr(self, key) is not None:
                check_number(getattr(self, key), key)
        if self.margin_share is not None:
            check_number(self.margin_share, "margin_share", low=0, high=1, open_low=True, open_high=True)
        if self.margin is not None and self.margin_share is not None:
            raise ConfigError("give either `margin` (absolute) or `margin_share`, not both", key="margin")
        if not isinstance(self.margins, Mapping):
            raise ConfigError(f"must be a table of metric = margin, got {self.margins!r}", key="margins")
        for name, value in self.margins.items():
            if name not in KNOWN_METRICS:
                raise ConfigError(f"unknown metric {name!r}.{did_you_mean(str(name), KNOWN_METRICS)}", key="margins")
            check_number(value, f"margins.{name}", low=0, open_low=True)
        object.__setattr__(self, "margins", dict(self.margins))
        for key in ("strict", "bitwise", "allow_nondeterminism", "locate"):
            if not isinstance(getattr(self, key), bool):
                raise ConfigError(f"must be true or false, got {getattr(self, key)!r}", key=key)
        check_number(self.final_share, "final_share", low=0, high=1, open_low=True)
        check_number(self.power, "power", low=0, high=1, open_low=True, open_high=True)
        check_number(self.permutations, "permutations", low=99, integer=True)
        _check_stages(self.stages, self.stage_design, self.stage_futility, self.stage_futility_design)
        if self.stages is not None:
            object.__setattr__(self, "stages", tuple(self.stages))

    def to_json(self) -> dict:
        data = {f.name: getattr(self, f.name) for f in dataclasses.fields(self)}
        data["metrics"] = list(self.metrics)
        data["margins"] = dict(self.margins)
        data["stages"] = None if self.stages is None else list(self.stages)
        return data

    def margin_for(self, metric: str, *, floor: float | None, threshold: float | None, budget: int) -> float:
        """The equivalence margin of ``metric`` in its own units.

        Parameters
        ----------
        metric
            A metric name.
        floor, threshold
            Random-policy return and reward threshold (this policy's own values win).
        budget
            Training budget in environment steps (the span of ``steps-to-threshold``).

        Raises
        ------
        ConfigError
            If a share margin is asked for but floor or threshold are unknown or equal.

        Examples
        --------
        >>> GatePolicy().margin_for("final", floor=-500.0, threshold=-100.0, budget=1000)
        40.0
        >>> GatePolicy(margin=5.0).margin_for("auc", floor=None, threshold=None, budget=1000)
        5.0
        >>> GatePolicy(margin=5.0).margin_for("steps-to-threshold", floor=None, threshold=None, budget=1000)
        100.0
        """
        if metric in self.margins:
            return float(self.margins[metric])
        share = DEFAULT_MARGIN_SHARE if self.margin_share is None else self.margin_share
        if METRIC_UNITS[metric] != "return":  # steps-to-threshold: never the absolute return margin
            return share * budget
        if self.margin is not None:
            return float(self.margin)
        low = self.floor if self.floor is not None else floor
        high = self.threshold if self.threshold is not None else threshold
        if low is None or high is None or high == low:
            raise ConfigError(
                f"cannot size the margin of {metric!r} as a share of the span between the random-policy "
                f"return ({low!r}) and the reward threshold ({high!r}); give `margin` (absolute, in the "
                "metric's units) or set `floor` and `threshold` in [check]",
                key="margin",
            )
        return share * abs(high - low)

    @staticmethod
    def check_retired(table: Mapping[str, Any], *, path: str | None = None, section: str = "check") -> None:
        """Refuse a key of :data:`RETIRED_KEYS` in a ``[check]`` table, naming its replacement."""
        for key, fix in RETIRED_KEYS.items():
            if key in table:
                raise ConfigError(fix, path=path, key=f"{section}.{key}")

    def needs_span(self, metric: str) -> bool:
        """Whether the margin of ``metric`` is a share of the span from random-policy return to threshold."""
        return metric not in self.margins and METRIC_UNITS[metric] == "return" and self.margin is None

    def margin_basis(self, metric: str) -> str:
        """How the margin of ``metric`` is sized, in words (for the report's policy line).

        Examples
        --------
        >>> GatePolicy(margin=20.0).margin_basis("steps-to-threshold")
        '0.1 of the budget'
        """
        if metric in self.margins:
            return f"margins.{metric}"
        share = DEFAULT_MARGIN_SHARE if self.margin_share is None else self.margin_share
        if METRIC_UNITS[metric] != "return":
            return f"{share:g} of the budget"
        if self.margin is not None:
            return "margin"
        return f"{share:g} of the span"

    def with_overrides(self, **changes: Any) -> GatePolicy:
        """A copy with the given fields replaced (``None`` values are ignored): command-line overrides."""
        self.check_retired({k: v for k, v in changes.items() if v is not None}, section="policy")
        names = [f.name for f in dataclasses.fields(self)]
        for key in changes:
            if key not in names:
                raise ConfigError(f"unknown policy setting {key!r}.{did_you_mean(key, names)}", key=key)
        given = {k: v for k, v in changes.items() if v is not None}
        if "margin" in given:
            given.setdefault("margin_share", None)
        if "margin_share" in given:
            given.setdefault("margin", None)
        return dataclasses.replace(self, **given)


@dataclasses.dataclass(frozen=True, slots=True)
class PublishedReference:
    """Summary statistics quoted in a publication: one ``[[reference]]`` table.

    Attributes
    ----------
    metric
        Which metric the numbers are of (``"final"``, ``"auc"`` or ``"steps-to-threshold"``).
    mean
        The published mean over seeds.
    sd, se
        The published standard deviation across seeds, or the standard error; exactly one.
    seeds
        The number of seeds the published numbers are over (at least 2).
    source
        Where it was published (authors, year, table or figure).
    """

    metric: str
    mean: float
    seeds: int
    source: str
    sd: float | None = None
    se: float | None = None

    def __post_init__(self) -> None:
        if self.metric not in KNOWN_METRICS:
            raise ConfigError(f"unknown metric {self.metric!r}.{did_you_mean(str(self.metric), KNOWN_METRICS)}", key="metric")
        if self.mean is None:
            raise ConfigError("is required: the published mean", key="mean")
        check_number(self.mean, "mean")
        if (self.sd is None) == (self.se is None):
            raise ConfigError("give exactly one of `sd` (standard deviation) or `se` (standard error)", key="sd")
        check_number(self.sd if self.sd is not None else self.se, "sd" if self.sd is not None else "se", low=0)
        check_number(self.seeds, "seeds", low=2, integer=True)
        if not isinstance(self.source, str) or not self.source.strip():
            raise ConfigError("must name where the numbers were published (authors, year, table)", key="source")

    @property
    def std(self) -> float:
        """The standard deviation across seeds (from ``se`` as ``se * sqrt(seeds)`` if needed)."""
        return float(self.sd) if self.sd is not None else float(self.se) * math.sqrt(self.seeds)

    def to_json(self) -> dict:
        return dataclasses.asdict(self)
