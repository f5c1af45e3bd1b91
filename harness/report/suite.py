"""Reports of a suite verdict: terminal (one line per task, details on demand), Markdown, JSON, JUnit XML.

Every format leads with the suite's outcome and the family the checks were
adjusted in, then one line per task, the aggregate across tasks on normalised
scores, and each task's own report (the per-verdict renderers of this package).
"""

from __future__ import annotations

import json
import xml.etree.ElementTree as ET
from collections.abc import Sequence

from rich.console import Group, RenderableType
from rich.table import Table
from rich.text import Text

from harness.gate.staged import StagedVerdict
from harness.gate.suite import SuiteVerdict
from harness.gate.suite_aggregate import SuiteAggregate
from harness.gate.verify import WHAT_A_PASS_MEANS, Verdict
from harness.report.jsonreport import verdict_text
from harness.report.junit import render_junit
from harness.report.markdown import _table as _md_table
from harness.report.markdown import render_markdown
from harness.report.staged import StagedReport, render_staged_junit, render_staged_markdown, staged_text
from harness.report.terminal import VerdictReport
from harness.stats import BootstrapResult, PerformanceProfile

__all__ = ["SUITE_SCHEMA", "SuiteReport", "render_suite_junit", "render_suite_markdown", "suite_json", "suite_text",
           "task_rows"]

#: Schema tag of the suite's JSON report; bumped on any incompatible change.
SUITE_SCHEMA = "rlharness.suite/1"

TASK_HEADER = ("task", "gate", "checks (family-adjusted)", "exact check", "score (candidate / baseline)")
AGGREGATE_HEADER = ("statistic", "candidate [95% interval]", "baseline [95% interval]")


def _checks_cell(v: Verdict | StagedVerdict) -> str:
    if isinstance(v, StagedVerdict):
        return (", ".join(f"{o.metric} {o.verdict}" for o in v.outcomes)
                + f" (staged: stopped at stage {v.stages[-1].look}, {v.seeds_used} of {v.plan.fixed_seeds} seeds)")
    return ", ".join(f"{c.name} {c.verdict} (p {c.pvalue:.3g})" for c in v.checks) or "no checks"


def _history(v: Verdict | StagedVerdict) -> object | None:
    return None if isinstance(v, StagedVerdict) else v.history


def _task_markdown(v: Verdict | StagedVerdict) -> str:
    return render_staged_markdown(v) if isinstance(v, StagedVerdict) else render_markdown(v)


def _task_junit(v: Verdict | StagedVerdict) -> str:
    return render_staged_junit(v) if isinstance(v, StagedVerdict) else render_junit(v)


def task_rows(sv: SuiteVerdict) -> list[tuple[str, ...]]:
    """One row per task in :data:`TASK_HEADER` order; the score is the mean normalised final return."""
    scores = {} if sv.aggregate is None else {t.manifest: t for t in sv.aggregate.tasks}
    rows = []
    for v in sv.verdicts:
        t = scores.get(v.manifest)
        score = "-" if t is None else (f"{sum(t.candidate) / len(t.candidate):.3f} / "
                                       f"{sum(t.baseline) / len(t.baseline):.3f}")
        rows.append((v.manifest, "passed" if v.passed else "FAILED", _checks_cell(v), v.exact.status, score))
    return rows


def _interval(r: BootstrapResult | None) -> str:
    if r is None:
        return "-"
    return f"{r.estimate:.3f} [{r.interval.low:.3f}, {r.interval.high:.3f}]"


def aggregate_rows(agg: SuiteAggregate) -> list[tuple[str, str, str]]:
    """The aggregate table in :data:`AGGREGATE_HEADER` order."""
    return [(name, _interval(cand), _interval(base)) for name, cand, base in agg.rows()]


def _aggregate_note(agg: SuiteAggregate) -> str:
    n = sum(len(t.candidate) for t in agg.tasks)
    note = (f"normalised final return (0 = random policy, 1 = the task's threshold) of {n} candidate runs on "
            f"{len(agg.tasks)} tasks; percentile intervals of the stratified bootstrap (runs resampled within each "
            f"task; Agarwal et al. 2021). They describe; the gate is the family of checks.")
    if agg.left_out:
        note += " Left out: " + "; ".join(f"{name} ({why})" for name, why in agg.left_out) + "."
    return note


class SuiteReport:
    """A suite verdict for the terminal: one line per task; every task's full report with ``details``."""

    def __init__(self, verdict: SuiteVerdict, *, details: bool = False) -> None:
        self.verdict = verdict
        self.details = details

    def __rich__(self) -> RenderableType:
        sv = self.verdict
        parts: list[RenderableType] = [Text(f"{v.manifest}: {h.headline}", style="bold yellow")
                                       for v in sv.verdicts if (h := _history(v)) is not None and h.changed]
        if self.details:
            for v in sv.verdicts:
                parts += [Text(f"── {v.manifest} " + "─" * max(0, 60 - len(v.manifest)), style="bold"),
                          StagedReport(v) if isinstance(v, StagedVerdict) else VerdictReport(v), Text("")]
        table = Table(title=f"suite {sv.name}: {len(sv.verdicts)} tasks", title_justify="left", show_edge=False)
        for name in TASK_HEADER:
            table.add_column(name, overflow="fold", no_wrap=name in ("task", "gate"))
        for row in task_rows(sv):
            table.add_row(row[0], Text(row[1], style="green" if row[1] == "passed" else "bold red"), *row[2:])
        parts.append(table)
        parts.append(Text(f"family: {sv.family}.", style="dim"))
        for v in sv.verdicts:
            if not v.passed:
                parts += [Text(f"{v.manifest}: gate: {r}", style="bold") for r in v.gate.reasons]
        if sv.aggregate is not None:
            agg = Table(title="aggregate across tasks", title_justify="left", show_edge=False)
            for name in AGGREGATE_HEADER:
                agg.add_column(name)
            for row in aggregate_rows(sv.aggregate):
                agg.add_row(*row)
            parts += [agg, Text(_aggregate_note(sv.aggregate), style="dim")]
        headline = Text()
        headline.append("PASSED" if sv.passed else "FAILED", style="bold green" if sv.passed else "bold red")
        headline.append(f"  {sv.summary}")
        parts.append(headline)
        if not self.details:
            parts.append(Text("each task's checks, provenance and exact check: --details", style="dim"))
        parts.append(Text(WHAT_A_PASS_MEANS, style="italic"))
        return Group(*parts)


def render_suite_markdown(sv: SuiteVerdict) -> str:
    """The suite verdict as GitHub-flavoured Markdown: summary, task table, aggregate, then each task's report."""
    mark = "✅" if sv.passed else "❌"
    out = [f"# {mark} rl-harness: suite gate {'passed' if sv.passed else 'FAILED'} for `{sv.name}`", "",
           sv.summary, "", f"Family: {sv.family}.", ""]
    out += _md_table(TASK_HEADER, [(f"`{r[0]}`", f"**{r[1]}**", *r[2:]) for r in task_rows(sv)])
    if sv.aggregate is not None:
        out += ["## Aggregate across tasks", ""] + _md_table(AGGREGATE_HEADER, aggregate_rows(sv.aggregate))
        out += [_aggregate_note(sv.aggregate), ""]
    out += [f"_{WHAT_A_PASS_MEANS}_", ""]
    for v in sv.verdicts:  # each task's report, one heading level down
        out += ["#" + line if line.startswith("#") else line for line in _task_markdown(v).splitlines()]
    return "\n".join(out) + "\n"


def _bootstrap_json(r: BootstrapResult) -> dict:
    return {"estimate": r.estimate, "low": r.interval.low, "high": r.interval.high, "method": r.method,
            "confidence_level": r.confidence_level, "n_resamples": r.n_resamples}


def _profile_json(p: PerformanceProfile) -> dict:
    return {"share": list(p.share), "low": list(p.low), "high": list(p.high)}


def _aggregate_json(agg: SuiteAggregate) -> dict:
    return {
        "score": "final return normalised: (x - floor) / (threshold - floor)",
        "tasks": [{"manifest": t.manifest, "floor": t.floor, "threshold": t.threshold,
                   "baseline": list(t.baseline), "candidate": list(t.candidate)} for t in agg.tasks],
        "left_out": [{"manifest": name, "reason": why} for name, why in agg.left_out],
        "candidate": {"mean": _bootstrap_json(agg.candidate_mean), "iqm": _bootstrap_json(agg.candidate_iqm)},
        "baseline": {"mean": _bootstrap_json(agg.baseline_mean), "iqm": _bootstrap_json(agg.baseline_iqm)},
        "probability_of_improvement": _bootstrap_json(agg.improvement),
        "profile": {"thresholds": list(agg.candidate_profile.thresholds), "method": agg.candidate_profile.method,
                    "candidate": _profile_json(agg.candidate_profile),
                    "baseline": _profile_json(agg.baseline_profile)},
    }


def suite_json(sv: SuiteVerdict) -> dict:
    """The suite verdict as a JSON-compatible dict (``schema`` = :data:`SUITE_SCHEMA`); each task's
    verdict in the single-manifest report's schema."""
    return {
        "schema": SUITE_SCHEMA,
        "suite": sv.name,
        "passed": sv.passed,
        "summary": sv.summary,
        "what_a_pass_means": WHAT_A_PASS_MEANS,
        "family": {"method": "Holm" if sv.staged_share is None else "Bonferroni over tasks (Holm within the fixed)",
                   "alpha": sv.alpha, "alpha_per_task": sv.staged_share, "checks": sv.family_size,
                   "reading": sv.family},
        "failing": list(sv.failing),
        "tasks": [json.loads(staged_text(v) if isinstance(v, StagedVerdict) else verdict_text(v))
                  for v in sv.verdicts],
        "aggregate": None if sv.aggregate is None else _aggregate_json(sv.aggregate),
    }


def suite_text(sv: SuiteVerdict) -> str:
    """:func:`suite_json` as indented text."""
    return json.dumps(suite_json(sv), indent=2, allow_nan=False) + "\n"


def render_suite_junit(sv: SuiteVerdict) -> str:
    """The suite as JUnit XML: one ``<testsuite>`` per task (a test case per check) inside ``<testsuites>``."""
    root = ET.Element("testsuites", name=f"rlharness.suite.{sv.name}")
    totals = dict.fromkeys(("tests", "failures", "errors", "skipped"), 0)
    for v in sv.verdicts:
        task = ET.fromstring(_task_junit(v).split("\n", 1)[1])
        for key in totals:
            totals[key] += int(task.get(key, "0"))
        root.append(task)
    for key, n in totals.items():
        root.set(key, str(n))
    ET.indent(root)
    return '<?xml version="1.0" encoding="utf-8"?>\n' + ET.tostring(root, encoding="unicode") + "\n"
