"""Report wording (issue 13 item 10): each report says a thing once, plainly, and labels its numbers.

One headline, not "PASSED" three times; no "baseline: baseline ..."; the ± of a side is labelled
as a standard deviation; an equivalent check shows its equivalence (TOST) p-value; no "where the
curves part: the curves do not part" or "exact check: exact check skipped"; a seed change in a few
words instead of two raw seed lists; help texts that promise what the command does.
"""

from __future__ import annotations

import re
from io import StringIO
from pathlib import Path

import numpy as np
import pytest
from rich.console import Console

from harness.cli import build_parser
from harness.core.curves import Checkpoint, LearningCurve
from harness.core.seeding import plan_seeds
from harness.gate.curveset import CurveSet
from harness.gate.verify import WHAT_A_PASS_MEANS, verify_sets
from harness.manifest.policy import GatePolicy
from harness.report.markdown import render_markdown
from harness.report.terminal import VerdictReport
from harness.store.baseline import Baseline, SeedCurve


def _baseline_set(matrix, *, root=4, versions=None) -> CurveSet:
    seeds = plan_seeds(count=len(matrix), root=root)
    runs = tuple(SeedCurve(s, LearningCurve(tuple(Checkpoint(100 * j, (float(v),)) for j, v in enumerate(row))))
                 for s, row in zip(seeds, matrix, strict=True))
    baseline = Baseline(manifest="toy", config_hash=f"sha256:{root}",
                        config={"seeds": [s.to_json() for s in seeds], "settings": {"step_size": 0.1}},
                        versions=versions or {"numpy": "2.1"}, platform={}, recorded="2026-12-01T00:00:00Z",
                        harness_version="0.1", runs=runs, path=Path("baselines/toy.json"))
    return CurveSet.from_baseline(baseline)


def _terminal(verdict) -> str:
    console = Console(file=StringIO(), width=200, record=True, color_system=None)
    console.print(VerdictReport(verdict))
    return console.export_text()


def _without_pass_sentence(text: str) -> str:
    return " ".join(text.split()).replace(" ".join(WHAT_A_PASS_MEANS.split()), "")


@pytest.fixture(scope="module")
def equivalent():
    """Twelve seeds, a candidate within a small fraction of the margin: final is equivalent."""
    rng = np.random.default_rng(np.random.SeedSequence(13))
    base = rng.normal(100.0, 1.0, size=(12, 4)) + np.arange(4) * 10
    cand = base + rng.normal(0.0, 0.05, size=base.shape)
    return verify_sets(_baseline_set(base), _baseline_set(cand, versions={"numpy": "2.2"}),
                       GatePolicy(metrics=("final",), margin=5.0))


def test_one_headline(equivalent):
    assert equivalent.passed
    assert len(re.findall(r"(?i)\bpassed\b", _without_pass_sentence(_terminal(equivalent)))) == 1
    assert len(re.findall(r"(?i)\bpassed\b", _without_pass_sentence(render_markdown(equivalent)))) == 1


def test_the_baseline_is_not_called_baseline_twice(equivalent):
    assert not re.search(r"baseline:\s+baseline\b", _terminal(equivalent))
    assert not re.search(r"\*\*baseline:\*\* baseline\b", render_markdown(equivalent))


def test_the_spread_is_labelled_sd_and_equivalent_shows_the_equivalence_p(equivalent):
    [check] = equivalent.checks
    assert check.verdict == "equivalent" and f"{check.pvalue_equivalence:.3g}" != f"{check.pvalue:.3g}"
    text = _terminal(equivalent)
    row = next(line for line in text.splitlines() if line.startswith("final"))
    assert re.search(r"± \S+ sd", row), row
    assert f"{check.pvalue_equivalence:.3g}" in row and f"{check.pvalue:.3g}" not in row, row
    md_row = next(line for line in render_markdown(equivalent).splitlines() if line.startswith("| final"))
    assert f"{check.pvalue_equivalence:.3g}" in md_row


def test_no_layer_repeats_its_own_name(equivalent):
    text = _terminal(equivalent)
    assert "exact check: exact check" not in text  # skipped: the versions differ
    assert "where the curves part: the curves do not part" not in text
    assert "the curves do not part" not in render_markdown(equivalent)


def test_a_seed_change_is_said_in_a_few_words():
    base = np.arange(12, dtype=float).reshape(4, 3)
    verdict = verify_sets(_baseline_set(base, root=5), _baseline_set(base, root=9),
                          GatePolicy(metrics=("final",), margin=1.0))
    text = _terminal(verdict)
    assert "root 5 -> 9, 4 seeds, 0 shared" in text
    assert "entropy" not in text and "entropy" not in render_markdown(verdict)


def _help(command: str) -> tuple[str, dict[str, str]]:
    sub = next(a for a in build_parser()._subparsers._group_actions if a.choices)  # the subcommands
    parser = sub.choices[command]
    return parser.description, {o: a.help for a in parser._actions for o in a.option_strings}


def test_help_texts_promise_what_the_command_does():
    _, options = _help("verify")
    assert "manifest" in options["--alpha"]  # the default is the manifest's [check] alpha, not always 0.05
    description, _ = _help("compare")
    assert "3 runs failed" not in description and "trains nothing" in description.replace("\n", " ")
