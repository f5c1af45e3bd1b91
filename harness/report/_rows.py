"""The tables of a verdict as plain strings, shared by the terminal, Markdown and JUnit reports."""

from __future__ import annotations

import json
import math
from typing import Any

from harness.core.seeding import RunSeed, describe_seed_change
from harness.gate.verify import Verdict
from harness.stats.drop_rules import DROP_RULES

__all__ = ["CHECK_HEADER", "check_notes", "check_rows", "config_rows", "drift_rows", "num", "policy_line", "value"]

CHECK_HEADER = ("check", "baseline", "candidate", "difference [interval]", "margin", "p", "verdict")


def num(x: float | None, digits: int = 4) -> str:
    """``digits`` significant digits; ``-`` for a missing value."""
    if x is None:
        return "-"
    if math.isinf(x):
        return "inf" if x > 0 else "-inf"
    return f"{x:.{digits}g}"


def value(v: Any) -> str:
    """A configuration value as compact JSON (``-`` where the key is absent)."""
    return "-" if v is None else json.dumps(v, separators=(",", ":"))


def _side(mean: float, sd: float, n: int) -> str:
    return f"{num(mean)} ± {num(sd, 3)} sd ({n})"


def check_rows(verdict: Verdict) -> list[tuple[str, ...]]:
    """One row per statistical check, in :data:`CHECK_HEADER` order (sides are ``mean ± sd "sd" (seeds)``).

    The p-value is the one behind the verdict: the equivalence (TOST) p-value beside "equivalent",
    the Holm-adjusted one-sided p-value otherwise.
    """
    return [
        (
            c.name,
            _side(c.baseline_mean, c.baseline_sd, c.baseline_n),
            _side(c.candidate_mean, c.candidate_sd, c.candidate_n),
            f"{c.estimate:+.3g} [{num(c.interval.low, 3)}, {num(c.interval.high, 3)}]",
            f"±{num(c.margin)}",
            f"{c.pvalue_equivalence:.3g} TOST" if c.verdict == "equivalent" else f"{c.pvalue:.3g} Holm",
            c.verdict + (" (within margin)" if c.within_margin else " (beyond margin)" if c.beyond_margin
                         else " (too few seeds)" if c.undecidable is not None else ""),
        )
        for c in verdict.checks
    ]


def check_notes(verdict: Verdict) -> list[str]:
    """The lines under the checks table: what the interval is, and what would settle inconclusive checks."""
    if not verdict.checks:
        return []
    level = verdict.checks[0].confidence_level
    notes = [f"difference = candidate - baseline with its {level:.0%} interval; sides: mean ± standard deviation "
             "across seeds (seeds); p: TOST = the equivalence p-value, Holm = the Holm-adjusted one-sided p-value "
             "(of 'worse', or of 'better' for a better verdict)."]
    notes += [f"{c.name}: {c.against} (mean {num(c.baseline_mean)}, sd {num(c.baseline_sd)}, {c.baseline_n} seeds)."
              for c in verdict.checks if c.against != "baseline"]
    for c in verdict.checks:
        if c.undecidable is not None:
            notes.append(f"{c.name}: cannot decide with {c.candidate_n} vs {c.baseline_n} seeds (needs {c.undecidable} "
                         "per side): its test cannot reach the level with fewer, so no difference is not evidence.")
        elif c.verdict == "inconclusive" and c.detectable is None:
            notes.append(f"{c.name}: inconclusive; every value is equal on both sides, so no power figure exists.")
        elif c.verdict == "inconclusive":
            seeds = (f"about {c.seeds_needed} seeds per side would detect a drop of {num(c.target)}"
                     if c.seeds_needed is not None else "no practical number of seeds would settle it")
            notes.append(f"{c.name}: inconclusive; differences of about {num(c.detectable)} are detectable with these "
                         f"seeds (power {verdict.policy.power:g}); {seeds}.")
    return notes


def _seeds(listed: Any) -> tuple[RunSeed, ...] | None:
    try:
        return tuple(RunSeed.from_json(s) for s in listed)
    except (TypeError, KeyError, ValueError, AttributeError):
        return None


def config_rows(verdict: Verdict) -> list[tuple[str, str, str]]:
    """Changed resolved configuration keys: (key, baseline, candidate); a seed change in a few words."""
    rows = []
    for c in verdict.provenance.changes:
        old, new = (_seeds(c.baseline), _seeds(c.candidate)) if c.key == "seeds" else (None, None)
        if old is not None and new is not None:
            rows.append(("seeds", describe_seed_change(old, new), ""))  # one phrase for both sides
        else:
            rows.append((c.key, value(c.baseline), value(c.candidate)))
    return rows


def drift_rows(verdict: Verdict) -> list[tuple[str, str, str]]:
    """Installed versions that differ: (component, baseline, candidate)."""
    return [(d.name, d.baseline or "-", d.candidate or "-") for d in verdict.provenance.drift]


def policy_line(verdict: Verdict) -> str:
    """The gate policy in one line: the rule that decides, and each metric's margin in its units."""
    p = verdict.policy
    rule = DROP_RULES[verdict.gate.rule]
    parts = [f"rule {rule.name} (fails when {rule.fails_when})", f"alpha {p.alpha:g} (one-sided, Holm)",
             f"metrics {', '.join(p.metrics)}",
             "margins " + ", ".join(m.text for m in verdict.scale.margins)]
    if any(m.basis.endswith("of the span") for m in verdict.scale.margins):
        parts.append(f"span from random-policy return {num(verdict.floor)} to threshold {num(verdict.threshold)}")
    parts.append("strict: inconclusive fails" if p.strict else "inconclusive does not fail")
    if p.bitwise:
        parts.append("nondeterminism allowed" if p.allow_nondeterminism else "nondeterminism fails")
    return "; ".join(parts)
