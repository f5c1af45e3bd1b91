"""The report of a calibration (``rlharness calibrate``): terminal (rich) and Markdown."""

from __future__ import annotations

from collections.abc import Sequence

from rich import box
from rich.console import Group, RenderableType
from rich.table import Table
from rich.text import Text

from harness.gate.calibrate import WHAT_CALIBRATION_SHOWS, Calibration, MetricNoise
from harness.report._rows import num

__all__ = ["ROWS_NOTE", "CalibrationReport", "calibration_lines", "metric_rows", "render_calibration_markdown"]

def _share(m: MetricNoise, verdict: str) -> str:
    return f"{m.verdicts.get(verdict, 0) / sum(m.verdicts.values()):.0%}"


def metric_rows(cal: Calibration) -> list[tuple[str, ...]]:
    """The metrics table, one metric per column (it fits 80 columns): a header row, then one row per quantity."""
    ms = cal.metrics
    n = cal.group_size
    rows = [("", *(m.metric for m in ms)),
            ("mean", *(num(m.mean) for m in ms)),
            ("sd", *(num(m.sd, 3) for m in ms)),
            ("margin", *(num(m.margin) for m in ms)),
            ("target difference", *(num(m.target) for m in ms)),
            (f"detectable, {n} seeds per group", *(num(m.detectable, 3) for m in ms)),
            ("detectable / target", *(num(m.ratio, 3) for m in ms)),
            ("seeds per group for target", *(">1e7" if m.seeds_needed is None else str(m.seeds_needed) for m in ms)),
            ("A/A equivalent", *(_share(m, "equivalent") for m in ms)),
            ("A/A worse", *(_share(m, "worse") for m in ms))]
    return rows


ROWS_NOTE = (
    "mean, sd: across every calibration seed; detectable: the smallest true difference detected with the gate's "
    "power by its one-sided Welch test at its alpha with the manifest's seeds per group (Holm across several metrics "
    "makes the gate's own figure a little larger); target difference: the margin unless --target-difference is "
    "given (below 1, detectable / target says the manifest's seeds suffice); A/A equivalent, A/A worse: share of "
    "splits with that verdict."
)


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
        "power": f"gate rule {p.rule}; power {p.power:g}, alpha {p.alpha:g}, {cal.group_size} seeds per group. " + ROWS_NOTE,
        "recommendation": f"recommended metric: {cal.recommendation.metric} — {cal.recommendation.reason}",
        "shows": WHAT_CALIBRATION_SHOWS,
    }
    if cw.count != fa.count:
        lines["worse"] = (f"a check was significantly worse in {cw.count} of {cw.trials} splits ({cw.estimate:.3g}); "
                          f"the gate's failures differ because of the policy's rule ({p.rule}) or strict setting.")
    censored = [f"{m.metric}: {m.censored} of {m.seeds} seeds never reach the threshold"
                for m in cal.metrics if m.censored]
    if censored:
        lines["censored"] = ("; ".join(censored) + ": the gate compares them with Gehan's test, and the power figures, "
                             "which assume Welch's t-test on their censoring steps, are approximate.")
    fresh = cal.against_baseline
    if fresh is None:
        lines["baseline"] = ("no recorded baseline was given, so the false alarms of fresh seeds against the baseline a "
                             "team keeps are not measured (pass --baseline FILE).")
    else:
        lines["baseline"] = "against the baseline: " + fresh.reading
        for d in fresh.draws:
            lines[f"draw {d.metric}"] = "baseline draw, " + d.reading
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
        parts.append(Text(lines["baseline"], style="bold" if cal.against_baseline is not None else "dim"))
        if cal.against_baseline is not None:
            parts.extend(Text(lines[f"draw {d.metric}"], style="bold red" if d.unlucky else "")
                         for d in cal.against_baseline.draws)
        table = Table(title="noise and power per metric", title_justify="left", box=box.SIMPLE_HEAD,
                      show_edge=False, pad_edge=False, collapse_padding=True)
        header, *rows = metric_rows(cal)
        for i, name in enumerate(header):
            table.add_column(name, no_wrap=i == 0, justify="left" if i == 0 else "right")
        for row in rows:
            table.add_row(*row)
        parts.append(table)
        if "censored" in lines:
            parts.append(Text(lines["censored"]))
        parts += [Text(lines["power"], style="dim"), Text(lines["recommendation"], style="bold"),
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
    out += [f"- {lines['interval']}", f"- **{lines['baseline']}**"]
    out += [f"- {lines[k]}" for k in lines if k.startswith("draw ")]
    out += ["", "### Noise and power per metric", ""]
    header, *rows = metric_rows(cal)
    out += _table(header, rows)
    out += [lines["censored"], ""] if "censored" in lines else []
    out += [lines["power"], "", f"**{lines['recommendation']}**", "", f"_{lines['shows']}_", ""]
    return "\n".join(out)
