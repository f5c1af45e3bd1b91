"""The gate's decision: the policy's rule applied to the statistical checks' verdicts.

:func:`decide` applies the policy's ``rule`` (:mod:`harness.stats.drop_rules`) to the
checks of :func:`harness.gate.compare.compare_sets`: by default it fails only when a
drop is significantly larger than the margin; ``any-drop`` fails on any significant
drop. Under ``strict`` an inconclusive check fails too. Each failing check gives one
reason; a check significantly worse but not failing the rule is named in the pass line.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Sequence
from typing import TYPE_CHECKING

from harness import stats
from harness.gate.metrics import METRICS
from harness.manifest.policy import GatePolicy
from harness.stats import DROP_RULES, ConfidenceInterval

if TYPE_CHECKING:  # compare.py builds the checks and calls decide
    from harness.gate.compare import MetricCheck

__all__ = ["GateDecision", "decide"]


@dataclasses.dataclass(frozen=True, slots=True)
class GateDecision:
    """The gate's outcome under ``rule``, the reasons for it (one line per failing check) and the failing checks."""

    passed: bool
    reasons: tuple[str, ...]
    failing: tuple[str, ...] = ()
    rule: str = "drop-beyond-margin"


def _oriented_drop(check: MetricCheck) -> tuple[float, ConfidenceInterval]:
    """The check's drop (positive = worse) and its interval."""
    if METRICS[check.metric].higher_is_better:
        return -check.estimate, ConfidenceInterval(-check.interval.high, -check.interval.low)
    return check.estimate, check.interval


def decide(checks: Sequence[MetricCheck], policy: GatePolicy) -> GateDecision:
    """Apply the gate policy (its ``rule`` and ``strict``) to the statistical verdicts."""
    reasons, failing, forgiven = [], [], []
    rule = DROP_RULES[policy.rule]
    for c in checks:
        drop, drop_interval = _oriented_drop(c)
        fails = stats.drop_fails(policy.rule, significant=c.verdict == "worse", beyond_margin=c.beyond_margin,
                                 drop=drop, drop_interval=drop_interval, margin=c.margin)
        if fails:
            reasons.append(f"{c.title} fails rule {rule.name} ({rule.fails_when}): difference {c.estimate:+.4g}, "
                           f"margin ±{c.margin:.4g}, Holm-adjusted p = {c.pvalue_worse:.3g} (worse), "
                           f"{c.pvalue_beyond:.3g} (worse by more than the margin)")
            failing.append(c.name)
        elif c.verdict == "worse":
            forgiven.append(c.name)
        elif c.verdict == "inconclusive" and policy.strict:
            settle = (f"needs {c.undecidable} seeds per side to decide at all" if c.undecidable is not None else
                      f"about {c.seeds_needed} seeds per side would settle it")
            reasons.append(f"{c.title} is inconclusive and the policy is strict ({settle})")
            failing.append(c.name)
    if not reasons:
        note = (f" (significantly worse but not failing rule {rule.name}: {', '.join(forgiven)})" if forgiven else "")
        return GateDecision(True, (f"no check fails rule {rule.name} ({rule.fails_when}){note}",), (), rule.name)
    return GateDecision(False, tuple(reasons), tuple(failing), rule.name)
