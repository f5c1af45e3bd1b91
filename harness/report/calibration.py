"""The report of a calibration (``rlharness calibrate``): terminal (rich) and Markdown."""

from __future__ import annotations

from collections.abc import Sequence

from rich.console import Group, RenderableType
from rich.table import Table
from rich.text import Text

from harness.calibrate import WHAT_CALIBRATION_SHOWS, Calibration, MetricNoise
from harness.report._rows import num

__all__ = ["METRIC_HEADER", "CalibrationReport", "calibration_lines", "metric_rows", "render_calibration_markdown"]

METRIC_HEADER = ("metric", "mean ± sd (seeds)", "margin", "target", "detectable", "detectable / target",
                 "seeds per group for target", "A/A verdicts")


def _verdicts(m: MetricNoise) -> str:
    total = sum(m.verdicts.values())
    return ", ".join(f"{v} {n / total:.0%}" for v, n in m.verdicts.items() if n)


def metric_rows(cal: Calibration) -> list[tuple[str, ...]]:
    """One row per metric, in :data:`METRIC_HEADER` order."""
    rows = []
    for m in cal.metrics:
        censored = f", {m.censored} never reached" if m.censored else ""
        needed = str(m.seeds_needed) if m.seeds_needed is not None else "more than 10,000,000"
        rows.append((m.metric, f"{num(m.mean)} ± {num(m.sd, 3)} ({m.seeds}{censored})", num(m.margin), num(m.target),
                     num(m.detectable), f"{m.ratio:.2f}", needed, _verdicts(m)))
    return rows


def calibration_lines(cal: Calibration) -> dict[str, str]:
    """The sentences of the report, by name: headline, runs, alarms, worse, power, recommendation, shows."""
    p = cal.policy
    runs = ", ".join(f"{n} {s}" for s, n in cal.sources.items() if n) or "read from the results folder"
    fa, cw = cal.false_alarms, cal.called_worse
    lines = {
        "headline": (f"calibration of {cal.manifest}: {cal.seeds} seeds of one unchanged configuration, {cal.splits} "
                     f"A/A splits into two disjoint groups of {cal.group_size} (split seed {cal.split_seed})"),
        "runs": f"runs: {runs}; curves: {cal.source}",
        "alarms": "false alarms: " + cal.reading,
        "interval": f"interval: {fa.method}.",
        "power": (f"detectable: the smallest true difference detected with power {p.power:g} by the one-sided Welch "
                  f"test at alpha {p.alpha:g} with {cal.group_size} seeds per group (Holm across "
                  f"{len(p.metrics)} metric{'s' if len(p.metrics) != 1 else ''} makes the gate's own figure a little "
                  "larger); target: the margin unless --target-difference is given."),
        "recommendation": f"recommended metric: {cal.recommendation.metric} — {cal.recommendation.reason}",
        "shows": WHAT_CALIBRATION_SHOWS,
    }
    if cw.count != fa.count:
        lines["worse"] = (f"a check was significantly worse in {cw.count} of {cw.trials} splits ({cw.estimate:.3g}); "
                          "the gate's failures differ because of the policy's strict or ignore_small setting.")
    if p.strict:
        lines["strict"] = ("the policy is strict: an inconclusive check fails the gate, so its A/A failure rate is not "
                           "bounded by alpha; more seeds per group lower it.")
    return lines


class CalibrationReport:
    """A calibration as rich renderables: ``console.print(CalibrationReport(calibration))``."""

    def __init__(self, calibration: Calibration) -> None:
        self.calibration = calibration

    def __rich__(self) -> RenderableType:
        cal = self.calibration
        lines = calibration_lines(cal)
        fa = cal.false_alarms
        calibrated = fa.interval.low <= cal.policy.alpha
        parts: list[RenderableType] = [Text(lines["headline"], style="bold"), Text(lines["runs"])]
        parts.append(Text(lines["alarms"], style="green" if calibrated else "bold red"))
        parts.extend(Text(lines[k]) for k in ("worse", "strict") if k in lines)
        parts.append(Text(lines["interval"], style="dim"))
        table = Table(title="noise and power per metric", title_justify="left", show_edge=False, pad_edge=False)
        for name in METRIC_HEADER:
            table.add_column(name, overflow="fold", no_wrap=name in ("metric", "detectable / target"))
        for row in metric_rows(cal):
            table.add_row(*row)
        parts += [table, Text(lines["power"], style="dim"), Text(lines["recommendation"], style="bold"),
                  Text(lines["shows"], style="italic")]
        return Group(*parts)


def _cell(text: str) -> str:
    return text.replace("|", "\\|").replace("\n", " ")


def _table(header: Sequence[str], rows: Sequence[Sequence[str]]) -> list[str]:
    lines = ["| " + " | ".join(_cell(h) for h in header) + " |", "|" + "---|" * len(header)]
    return lines + ["| " + " | ".join(_cell(c) for c in row) + " |" for row in rows] + [""]


def render_calibration_markdown(calibration: Calibration) -> str:
    """The calibration as GitHub-flavoured Markdown (a CI summary or the closing note of a task)."""
    cal = calibration
    lines = calibration_lines(cal)
    out = [f"## rl-harness calibration of `{cal.manifest}`", "", lines["headline"] + ".", "", f"- {lines['runs']}",
           f"- **{lines['alarms']}**"]
    out += [f"- {lines[k]}" for k in ("worse", "strict") if k in lines]
    out += [f"- {lines['interval']}", "", "### Noise and power per metric", ""]
    out += _table(METRIC_HEADER, metric_rows(cal))
    out += [lines["power"], "", f"**{lines['recommendation']}**", "", f"_{lines['shows']}_", ""]
    return "\n".join(out)
