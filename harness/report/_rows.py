"""The tables of a verdict as plain strings, shared by the terminal, Markdown and JUnit reports."""

from __future__ import annotations

import json
import math
from typing import Any

from harness.policy import DEFAULT_MARGIN_SHARE
from harness.verify import Verdict

__all__ = ["CHECK_HEADER", "check_rows", "config_rows", "drift_rows", "num", "policy_line", "value"]

CHECK_HEADER = ("check", "baseline", "candidate", "difference", "interval", "margin", "p (Holm)", "verdict")


def num(x: float | None) -> str:
    """Four significant digits; ``-`` for a missing value."""
    if x is None:
        return "-"
    if math.isinf(x):
        return "inf" if x > 0 else "-inf"
    return f"{x:.4g}"


def value(v: Any) -> str:
    """A configuration value as compact JSON (``-`` where the key is absent)."""
    return "-" if v is None else json.dumps(v, separators=(",", ":"))


def check_rows(verdict: Verdict) -> list[tuple[str, ...]]:
    """One row per statistical check, in :data:`CHECK_HEADER` order."""
    rows = []
    for c in verdict.checks:
        label = c.verdict
        if c.within_margin:
            label += " (within margin)"
        elif c.verdict == "inconclusive":
            label += f" (detectable {num(c.detectable)}; ~{c.seeds_needed} seeds/side)"
        rows.append((
            c.name,
            f"{num(c.baseline_mean)} ± {num(c.baseline_sd)} (n={c.baseline_n})",
            f"{num(c.candidate_mean)} ± {num(c.candidate_sd)} (n={c.candidate_n})",
            f"{c.estimate:+.4g}",
            f"{c.confidence_level:.0%} [{num(c.interval.low)}, {num(c.interval.high)}]",
            f"±{num(c.margin)}",
            f"{c.pvalue:.3g}",
            label,
        ))
    return rows


def config_rows(verdict: Verdict) -> list[tuple[str, str, str]]:
    """Changed resolved configuration keys: (key, baseline, candidate)."""
    return [(c.key, value(c.baseline), value(c.candidate)) for c in verdict.provenance.changes]


def drift_rows(verdict: Verdict) -> list[tuple[str, str, str]]:
    """Installed versions that differ: (component, baseline, candidate)."""
    return [(d.name, d.baseline or "-", d.candidate or "-") for d in verdict.provenance.drift]


def policy_line(verdict: Verdict) -> str:
    """The gate policy in one line."""
    p = verdict.policy
    parts = [f"alpha {p.alpha:g} (one-sided, Holm)", f"metrics {', '.join(p.metrics)}"]
    if p.margin is not None:
        parts.append(f"margin {p.margin:g}")
    else:
        share = DEFAULT_MARGIN_SHARE if p.margin_share is None else p.margin_share
        parts.append(f"margin {share:g} of the span from random-policy return {num(verdict.floor)} "
                     f"to threshold {num(verdict.threshold)}")
    if p.ignore_small:
        parts.append("significant differences inside the margin ignored")
    parts.append("strict: inconclusive fails" if p.strict else "inconclusive does not fail")
    return "; ".join(parts)
