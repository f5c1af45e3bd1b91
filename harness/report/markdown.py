"""The Markdown report of a verdict, for a CI job summary or a pull-request comment."""

from __future__ import annotations

from collections.abc import Sequence

from harness.report._rows import CHECK_HEADER, check_notes, check_rows, config_rows, drift_rows, policy_line
from harness.gate.verify import WHAT_A_PASS_MEANS, Verdict

__all__ = ["render_markdown"]


def _cell(text: str) -> str:
    return text.replace("|", "\\|").replace("\n", " ")


def _table(header: Sequence[str], rows: Sequence[Sequence[str]]) -> list[str]:
    lines = ["| " + " | ".join(_cell(h) for h in header) + " |", "|" + "---|" * len(header)]
    lines += ["| " + " | ".join(_cell(c) for c in row) + " |" for row in rows]
    return lines + [""]


def render_markdown(verdict: Verdict) -> str:
    """The verdict as GitHub-flavoured Markdown.

    Examples
    --------
    The first line is the gate's outcome, e.g. ``## ✅ rl-harness: gate passed for cartpole-dqn``,
    unless the baseline changed since the git ref it was compared with: that comes first.
    """
    v = verdict
    mark = "✅" if v.passed else "❌"
    out = []
    if v.history is not None and v.history.changed:
        out += [f"> **The baseline {v.history.what} since `{v.history.ref}`**: {_cell(v.history.detail)}.", ""]
    out += [f"## {mark} rl-harness: gate {'passed' if v.passed else 'FAILED'} for `{v.manifest}`", "",
            v.tally, "", f"- **baseline:** {v.provenance.baseline_label}",
            f"- **candidate:** {v.provenance.candidate_label}"]
    if v.history is not None and not v.history.changed:
        out.append(f"- **baseline history:** {v.history.reading}")
    out += ["", "### 1. Provenance", "", v.provenance.reading, ""]
    if v.provenance.changes:
        out += _table(("changed key", "baseline", "candidate"), config_rows(v))
    if v.provenance.drift:
        out += _table(("component", "baseline", "candidate"), drift_rows(v))
    out += ["### 2. Exact check", "", v.exact.reading, ""]
    if v.exact.status == "differs":
        out += [f"- baseline returns: `{list(v.exact.baseline_returns)}`",
                f"- candidate returns: `{list(v.exact.candidate_returns)}`", ""]
    rows = [(*row[:-1], f"**{row[-1]}**") for row in check_rows(v)]
    out += ["### 3. Statistical checks", ""] + _table(CHECK_HEADER, rows)
    out += [f"- {note}" for note in check_notes(v)] + [""]
    out += ["### 4. Where the curves part", ""]
    out += [v.divergence.reading if v.divergence is not None else "Not looked for.", ""]
    out += ["### Gate", "", f"Policy: {policy_line(v)}.", ""]
    out += [f"- {reason}" for reason in v.gate.reasons] + ["", f"_{WHAT_A_PASS_MEANS}_", ""]
    return "\n".join(out)
