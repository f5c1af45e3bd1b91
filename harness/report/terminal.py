"""The terminal report of a verdict: rich tables, colour only as emphasis (readable without it)."""

from __future__ import annotations

from rich.console import Group, RenderableType
from rich.table import Table
from rich.text import Text

from harness.report._rows import CHECK_HEADER, check_notes, check_rows, config_rows, drift_rows, policy_line
from harness.gate.verify import WHAT_A_PASS_MEANS, Verdict

__all__ = ["VerdictReport"]

_STYLE = {"equivalent": "green", "better": "cyan", "worse": "bold red", "inconclusive": "yellow"}


def _two_sided_table(title: str, header: tuple[str, str, str], rows: list[tuple[str, str, str]]) -> Table:
    table = Table(title=title, title_justify="left", show_edge=False)
    for name in header:
        table.add_column(name, overflow="fold")
    for row in rows:
        table.add_row(*row)
    return table


class VerdictReport:
    """A verdict as rich renderables; print it with ``console.print(VerdictReport(verdict))``.

    Parameters
    ----------
    verdict
        The verdict to show.
    """

    def __init__(self, verdict: Verdict) -> None:
        self.verdict = verdict

    def __rich__(self) -> RenderableType:
        v = self.verdict
        parts: list[RenderableType] = []
        if v.history is not None and v.history.changed:
            parts.append(Text(v.history.headline, style="bold red"))
        headline = Text()
        headline.append("PASSED" if v.passed else "FAILED", style="bold green" if v.passed else "bold red")
        headline.append(f"  {v.manifest}: {v.tally}")
        parts.append(headline)
        parts.append(Text(f"baseline:  {v.provenance.baseline_label}\ncandidate: {v.provenance.candidate_label}"))
        if v.history is not None and not v.history.changed:
            parts.append(Text(v.history.reading, style="dim"))
        parts.append(Text("1. provenance: " + v.provenance.reading))
        if v.provenance.changes:
            parts.append(_two_sided_table("changed configuration keys", ("key", "baseline", "candidate"), config_rows(v)))
        if v.provenance.drift:
            parts.append(_two_sided_table("version drift", ("component", "baseline", "candidate"), drift_rows(v)))
        exact_style = ("bold red" if v.exact.nondeterministic else
                       {"identical": "green", "differs": "bold yellow"}.get(v.exact.status, "dim"))
        parts.append(Text.assemble("2. exact check: ", (v.exact.reading, exact_style)))
        if v.exact.status == "differs":
            parts.append(Text(f"   baseline returns  {list(v.exact.baseline_returns)}\n"
                              f"   candidate returns {list(v.exact.candidate_returns)}"))
        table = Table(title="3. statistical checks", title_justify="left", show_edge=False, pad_edge=False)
        for name in CHECK_HEADER:
            table.add_column(name, overflow="fold", no_wrap=name in ("check", "margin", "p", "verdict"))
        for check, row in zip(v.checks, check_rows(v), strict=True):
            table.add_row(*row[:-1], Text(row[-1], style=_STYLE[check.verdict]))
        parts.append(table)
        parts.extend(Text("   " + note, style="dim") for note in check_notes(v))
        if v.divergence is not None:
            parts.append(Text("4. where the curves part: " + v.divergence.reading))
        else:
            parts.append(Text("4. where the curves part: not looked for (no baseline curves, fewer than 2 seeds, "
                              "constant curves, or turned off by the policy).", style="dim"))
        parts.append(Text("policy: " + policy_line(v), style="dim"))
        for reason in v.gate.reasons:
            parts.append(Text("gate: " + reason, style="bold" if not v.passed else ""))
        parts.append(Text(WHAT_A_PASS_MEANS, style="italic"))
        return Group(*parts)
