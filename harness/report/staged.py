"""The reports of the staged gate: terminal, Markdown, JSON and JUnit XML.

Every report shows each stage (seeds so far, each metric's estimate with its repeated
confidence interval, the Welch p-values against the stage's boundaries, the decision), why the
gate stopped, and the seeds trained against the fixed gate's.
"""

from __future__ import annotations

import dataclasses
import xml.etree.ElementTree as ET
from typing import Any

from rich.console import Group, RenderableType
from rich.table import Table
from rich.text import Text

from harness.gate.staged import StagedVerdict
from harness.stats.sequential_design import small_first_stage
from harness.gate.verify import WHAT_A_PASS_MEANS
from harness.report._rows import num
from harness.report.jsonreport import json_text, outcome_json, provenance_json
from harness.report.junit import junit_document

__all__ = ["STAGE_HEADER", "STAGED_SCHEMA", "StagedReport", "render_staged_junit", "render_staged_markdown",
           "stage_rows", "staged_json", "staged_text"]

#: Schema tag of the staged gate's JSON report; bumped on any incompatible change.
STAGED_SCHEMA = "rlharness.staged-verdict/1"

STAGE_HEADER = ("stage", "seeds (cand/base)", "metric", "difference [repeated interval]",
                "worse: p vs boundary", "equivalent: p vs boundary", "futility: p vs boundary", "decision")

_STYLE = {"worse": "bold red", "equivalent": "green", "futility": "green", "not-worse": "green",
          "continue": "yellow", "final": "yellow", "better": "cyan", "inconclusive": "yellow", "undecided": "dim"}


def stage_rows(verdict: StagedVerdict) -> list[tuple[str, ...]]:
    """One row per stage and metric, in :data:`STAGE_HEADER` order."""
    rows = []
    for stage in verdict.stages:
        for metric, lk in zip(verdict.plan.metrics, stage.looks, strict=True):
            rows.append((
                str(stage.look), f"{stage.n_candidate}/{stage.n_baseline}", metric,
                f"{lk.estimate:+.3g} [{num(lk.interval.low, 3)}, {num(lk.interval.high, 3)}]",
                f"{lk.pvalue_worse:.3g} vs {lk.nominal_worse:.3g}",
                f"{lk.pvalue_equivalence:.3g} vs {lk.nominal_equivalence:.3g}",
                "-" if lk.pvalue_futility is None else f"{lk.pvalue_futility:.3g} vs {lk.nominal_futility:.3g}",
                lk.decision,
            ))
    return rows


def _seeds_line(v: StagedVerdict) -> str:
    trained = sum(s.trained for s in v.stages)
    reused = sum(s.reused for s in v.stages)
    return (f"seeds: {v.seeds_used} of {v.plan.fixed_seeds} trained for the verdict ({trained} trained now, "
            f"{reused} reused from earlier runs), {v.seeds_saved} saved against the fixed gate; "
            f"{v.seconds:.1f} s over {len(v.stages)} of {len(v.plan.stages)} stages.")


def _notes(v: StagedVerdict) -> list[str]:
    margins = ", ".join(f"{m} ±{num(v.plan.margins[m])}" for m in v.plan.metrics)
    shifts = ", ".join(f"{m} {num(v.plan.shifts[m])}" for m in v.plan.metrics)
    return [
        "difference = candidate - baseline; its repeated interval holds over all stages at once; a stage rejects "
        "when its Welch p-value is below the stage's boundary (significance level approach).",
        f"margins: {margins}; drop tolerated before 'worse': {shifts}; futility rules out a drop of one margin "
        "beyond the tolerated one (a futility pass is no proof of equivalence).",
        f"method: {v.plan.sequential.method}.",
    ] + small_first_stage(v.plan.stages[0])



class StagedReport:
    """A staged verdict as rich renderables: ``console.print(StagedReport(verdict))``."""

    def __init__(self, verdict: StagedVerdict) -> None:
        self.verdict = verdict

    def __rich__(self) -> RenderableType:
        v = self.verdict
        headline = Text()
        headline.append("PASSED" if v.passed else "FAILED", style="bold green" if v.passed else "bold red")
        headline.append(f"  {v.summary}")
        parts: list[RenderableType] = [headline, Text("plan: " + v.plan.reading),
                                       Text("1. provenance: " + v.provenance.reading),
                                       Text("2. exact check (seeds trained): " + v.exact.reading)]
        table = Table(title="3. stages", title_justify="left", show_edge=False, pad_edge=False)
        for name in STAGE_HEADER:
            table.add_column(name, overflow="fold")
        for row in stage_rows(v):
            table.add_row(*row[:-1], Text(row[-1], style=_STYLE[row[-1]]))
        parts.append(table)
        parts.extend(Text("   " + note, style="dim") for note in _notes(v))
        parts.append(Text("stopped because " + v.stopped_because + "."))
        parts.append(Text(_seeds_line(v)))
        for o in v.outcomes:
            parts.append(Text.assemble("   ", (o.reading, _STYLE[o.verdict])))
        for reason in v.gate.reasons:
            parts.append(Text("gate: " + reason, style="bold" if not v.passed else ""))
        parts.append(Text(WHAT_A_PASS_MEANS, style="italic"))
        return Group(*parts)


def _cell(text: str) -> str:
    return text.replace("|", "\\|").replace("\n", " ")


def render_staged_markdown(verdict: StagedVerdict) -> str:
    """The staged verdict as GitHub-flavoured Markdown."""
    v = verdict
    out = [f"## {'✅' if v.passed else '❌'} rl-harness: staged gate {'passed' if v.passed else 'FAILED'} "
           f"for `{v.manifest}`", "", v.summary, "", f"- **plan:** {v.plan.reading}",
           f"- **baseline:** {v.provenance.baseline_label}", f"- **candidate:** {v.provenance.candidate_label}", "",
           "### 1. Provenance", "", v.provenance.reading, "", "### 2. Exact check (seeds trained)", "",
           v.exact.reading, "", "### 3. Stages", "",
           "| " + " | ".join(STAGE_HEADER) + " |", "|" + "---|" * len(STAGE_HEADER)]
    out += ["| " + " | ".join(_cell(c) for c in (*row[:-1], f"**{row[-1]}**")) + " |" for row in stage_rows(v)]
    out += [""] + [f"- {note}" for note in _notes(v)] + [""]
    out += ["### Gate", "", f"Stopped because {v.stopped_because}.", "", _seeds_line(v), ""]
    out += [f"- {o.reading}" for o in v.outcomes] + [""]
    out += [f"- {reason}" for reason in v.gate.reasons] + ["", f"_{WHAT_A_PASS_MEANS}_", ""]
    return "\n".join(out)


def _look(lk: Any) -> dict:
    data = {f.name: getattr(lk, f.name) for f in dataclasses.fields(lk)}
    data["interval"] = {"low": lk.interval.low, "high": lk.interval.high}
    return data


def staged_json(verdict: StagedVerdict) -> dict:
    """The staged verdict as a JSON-compatible dict (``schema`` = :data:`STAGED_SCHEMA`)."""
    v, p = verdict, verdict.plan
    return {
        "schema": STAGED_SCHEMA,
        **outcome_json(v),
        "decision": v.decision,
        "stopped_because": v.stopped_because,
        "seeds": {"used": v.seeds_used, "fixed": p.fixed_seeds, "saved": v.seeds_saved,
                  "baseline": p.baseline_seeds, "trained_now": sum(s.trained for s in v.stages),
                  "reused": sum(s.reused for s in v.stages)},
        "seconds": v.seconds,
        "plan": {"stages": list(p.stages), "design": p.design, "alpha": p.alpha, "alpha_per_metric": p.alpha_metric,
                 "family": "Bonferroni split of alpha over metrics for 'worse'; equivalence needs every metric",
                 "metrics": list(p.metrics), "margins": dict(p.margins), "shifts": dict(p.shifts),
                 "worse_nominal": list(p.sequential.worse.nominal),
                 "equivalence_nominal": list(p.sequential.equivalence.nominal),
                 "futility_nominal": None if p.sequential.futility is None else list(p.sequential.futility.nominal),
                 "futility_spend": 0.0 if p.sequential.futility is None else p.sequential.futility.alpha,
                 "method": p.sequential.method},
        "stages": [{"look": s.look, "candidate_seeds": s.n_candidate, "baseline_seeds": s.n_baseline,
                    "decision": s.decision, "trained": s.trained, "reused": s.reused, "seconds": s.seconds,
                    "metrics": {m: _look(lk) for m, lk in zip(p.metrics, s.looks, strict=True)}}
                   for s in v.stages],
        "outcomes": [{"metric": o.metric, "verdict": o.verdict, "pvalue_better": o.pvalue_better,
                      "reading": o.reading} for o in v.outcomes],
        "policy": v.policy.to_json(),
        "provenance": provenance_json(v.provenance, v.baseline_set, v.candidate_set),
        "exact": {"status": v.exact.status, "reason": v.exact.reason, "seed": v.exact.seed, "step": v.exact.step,
                  "reading": v.exact.reading},
    }


def staged_text(verdict: StagedVerdict) -> str:
    """:func:`staged_json` as indented text (infinite values written as strings)."""
    return json_text(staged_json(verdict))


def render_staged_junit(verdict: StagedVerdict) -> str:
    """The staged verdict as JUnit XML: ``provenance``, ``exact``, one case per stage and per metric."""
    v = verdict
    suite = ET.Element("testsuite", name=f"rlharness.verify.{v.manifest}")
    cases: list[tuple[str, str, str | None, str | None]] = [
        ("provenance", v.provenance.reading, None, None),
        ("exact", v.exact.reading, None, v.exact.reason if v.exact.status == "skipped" else None),
    ]
    cases += [(f"stage {s.look}", " ".join(lk.reading for lk in s.looks), None, None) for s in v.stages]
    failing = set(v.gate.failing)
    for o in v.outcomes:
        failure = o.reading if o.metric in failing else None
        skipped = o.reading if failure is None and o.verdict in ("inconclusive", "undecided") else None
        cases.append((f"check {o.metric}", o.reading, failure, skipped))
    return junit_document(suite, v.manifest, cases, {
        "gate": "passed" if v.passed else "failed", "rule": v.gate.rule, "stopped_because": v.stopped_because,
        "seeds_used": str(v.seeds_used), "seeds_saved": str(v.seeds_saved)})
