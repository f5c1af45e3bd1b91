"""Reports of a verdict: terminal, Markdown, JSON, JUnit XML and the plot."""

from __future__ import annotations

import json
import sys
import xml.etree.ElementTree as ET
from io import StringIO

import numpy as np
import pytest
from rich.console import Console

from harness.store.baseline import SeedCurve
from harness.core.curves import Checkpoint, LearningCurve
from harness.gate.curveset import CurveSet
from harness.manifest.policy import GatePolicy
from harness.report.jsonreport import VERDICT_SCHEMA, verdict_json, verdict_text
from harness.report.junit import render_junit
from harness.report.markdown import render_markdown
from harness.report.plot import INSTALL_HINT, PlotUnavailableError, curve_band, plot_curves
from harness.report.terminal import VerdictReport
from harness.core.seeding import plan_seeds
from harness.gate.verify import WHAT_A_PASS_MEANS, verify_sets


def _set(matrix, label, versions):
    seeds = plan_seeds(count=len(matrix), root=4)
    runs = tuple(SeedCurve(s, LearningCurve(tuple(Checkpoint(100 * j, (float(v),)) for j, v in enumerate(row))))
                 for s, row in zip(seeds, matrix, strict=True))
    return CurveSet(label, "toy", "sha256:x", {"settings": {"step_size": 0.1}}, versions, runs, 100 * (len(matrix[0]) - 1))


@pytest.fixture(scope="module")
def verdicts():
    rng = np.random.default_rng(np.random.SeedSequence(5))
    base = rng.normal(100.0, 3.0, size=(8, 5)) + np.arange(5) * 20
    worse = base + rng.normal(0.0, 1.0, size=base.shape)
    worse[:, 2:] -= 30.0
    # final: worse; auc: significant too; a third check (steps-to-threshold) lands inconclusive or equivalent.
    policy = GatePolicy(metrics=("final", "auc"), margin=5.0)
    failed = verify_sets(_set(base, "baseline B", {"numpy": "2.1"}), _set(worse, "candidate C", {"numpy": "2.2"}),
                         policy)
    same = verify_sets(_set(base, "baseline B", {"numpy": "2.1"}), _set(base, "candidate C", {"numpy": "2.1"}),
                       GatePolicy(metrics=("final",), margin=0.5))
    return failed, same


def test_terminal_report_is_readable_without_colour(verdicts):
    failed, same = verdicts
    console = Console(file=StringIO(), width=100, record=True, color_system=None)
    console.print(VerdictReport(failed))
    text = console.export_text()
    assert text.startswith("FAILED  toy: 2 worse.")
    assert "version drift" in text and "2.1" in text and "2.2" in text
    assert "exact check: skipped: installed versions differ (numpy 2.1 -> 2.2)" in text
    assert "final fails rule drop-beyond-margin" in text and "policy: rule drop-beyond-margin" in text
    assert "the candidate first falls significantly below between steps 200 and 400" in text
    assert " ".join(WHAT_A_PASS_MEANS.split()) in " ".join(text.split())
    console = Console(file=StringIO(), width=100, record=True, color_system=None)
    console.print(VerdictReport(same))
    text = console.export_text()
    assert "PASSED" in text and "bitwise identical" in text


def test_terminal_colour_is_only_emphasis(verdicts):
    failed, _ = verdicts
    plain = Console(file=StringIO(), width=100, record=True, color_system=None)
    plain.print(VerdictReport(failed))
    coloured = Console(file=StringIO(), width=100, record=True, color_system="truecolor", force_terminal=True)
    coloured.print(VerdictReport(failed))
    assert coloured.export_text(styles=False, clear=False) == plain.export_text()
    assert "\x1b[" in coloured.export_text(styles=True)


def test_markdown_report(verdicts):
    failed, same = verdicts
    md = render_markdown(failed)
    lines = md.splitlines()
    assert lines[0] == "## ❌ rl-harness: gate FAILED for `toy`"
    header = next(line for line in lines if line.startswith("| check |"))
    assert header == "| check | baseline | candidate | difference [interval] | margin | p | verdict |"
    rows = [line for line in lines if line.startswith("| final |") or line.startswith("| auc |")]
    assert len(rows) == 2 and all(r.count("|") == 8 for r in rows) and "**worse (beyond margin)**" in rows[0]
    assert "| numpy | 2.1 | 2.2 |" in md
    assert f"_{WHAT_A_PASS_MEANS}_" in md
    assert render_markdown(same).startswith("## ✅ rl-harness: gate passed for `toy`")


def test_json_report_is_versioned_and_complete(verdicts):
    failed, _ = verdicts
    data = json.loads(verdict_text(failed))
    assert data["schema"] == VERDICT_SCHEMA == "rlharness.verdict/1"
    assert data["passed"] is False and data["gate"]["reasons"]
    assert data["what_a_pass_means"] == WHAT_A_PASS_MEANS
    assert data["provenance"]["drift"] == [{"name": "numpy", "baseline": "2.1", "candidate": "2.2"}]
    final = data["checks"][0]
    assert final["metric"] == "final" and final["verdict"] == "worse"
    assert len(final["baseline_values"]) == len(final["candidate_values"]) == 8
    assert final["interval"]["low"] < final["estimate"] < final["interval"]["high"]
    assert data["divergence"]["first_step"] == 200
    assert data["policy"]["margin"] == 5.0
    assert verdict_json(failed)["checks"][0]["reading"].startswith("final: significantly worse")


def test_junit_one_testcase_per_check(verdicts):
    failed, same = verdicts
    suite = ET.fromstring(render_junit(failed))
    names = [c.get("name") for c in suite.iter("testcase")]
    assert names == ["provenance", "exact", "check final", "check auc", "divergence"]
    assert suite.get("tests") == "5" and suite.get("failures") == "2" and suite.get("skipped") == "1"
    failing = [c.get("name") for c in suite.iter("testcase") if c.find("failure") is not None]
    assert failing == ["check final", "check auc"]
    props = {p.get("name"): p.get("value") for p in suite.iter("property")}
    assert props["what_a_pass_means"] == WHAT_A_PASS_MEANS and props["gate"] == "failed"
    assert props["rule"] == "drop-beyond-margin" and props["policy"].startswith("rule drop-beyond-margin")
    ok = ET.fromstring(render_junit(same))
    assert ok.get("failures") == "0"


def test_curve_band_is_the_t_interval():
    # Student (1908): mean +- t(0.975, n-1) * s / sqrt(n); for [1, 2, 3]: 2 +- 4.302653 * 1 / sqrt(3)
    # (t quantile recalled from memory, 2 df: 4.303).
    mean, low, high = curve_band(np.array([[1.0], [2.0], [3.0]]))
    assert mean[0] == 2.0
    assert high[0] - 2.0 == pytest.approx(4.302653 / np.sqrt(3), rel=1e-5)
    assert low[0] == pytest.approx(4.0 - high[0])


@pytest.mark.parametrize("suffix", [".png", ".svg"])
def test_plot_files(verdicts, tmp_path, suffix):
    failed, _ = verdicts
    path = plot_curves(failed.baseline_set, failed.candidate_set, tmp_path / f"curves{suffix}")
    head = path.read_bytes()[:64]
    assert head.startswith(b"\x89PNG") if suffix == ".png" else b"<svg" in path.read_bytes()[:2000]
    assert [p.name for p in tmp_path.iterdir()] == [f"curves{suffix}"]  # no temporary file left


def test_plot_without_matplotlib_says_how_to_install(verdicts, tmp_path, monkeypatch):
    failed, _ = verdicts
    monkeypatch.setitem(sys.modules, "matplotlib", None)
    with pytest.raises(PlotUnavailableError, match=r"pip install 'rl-harness\[plot\]'"):
        plot_curves(failed.baseline_set, failed.candidate_set, tmp_path / "c.png")
    assert "rl-harness[plot]" in INSTALL_HINT
    assert not list(tmp_path.iterdir())


def test_plot_refuses_unknown_format(verdicts, tmp_path):
    failed, _ = verdicts
    with pytest.raises(ValueError, match=r"`path` must end in .png or .svg, got '.*c.pdf'"):
        plot_curves(failed.baseline_set, failed.candidate_set, tmp_path / "c.pdf")


def test_nondeterminism_is_shown_in_every_report():
    # Same config, versions and trainer source; one seed's curve differs by one ulp.
    rng = np.random.default_rng(np.random.SeedSequence(6))
    base = rng.normal(100.0, 3.0, size=(6, 3))
    noisy = base.copy()
    noisy[1, 2] = np.nextafter(noisy[1, 2], np.inf)
    versions = {"numpy": "2.1", "trainer_source": "sha256:t"}
    verdict = verify_sets(_set(base, "baseline B", versions), _set(noisy, "candidate C", versions),
                          GatePolicy(metrics=("final",), margin=5.0))
    assert not verdict.passed
    console = Console(file=StringIO(), width=200, record=True, color_system=None)
    console.print(VerdictReport(verdict))
    text = console.export_text()
    assert "FAILED" in text and "nondeterminism" in text and "reproducibility failure" in text
    md = render_markdown(verdict)
    assert md.startswith("## ❌") and "reproducibility failure" in md
    data = verdict_json(verdict)
    assert data["passed"] is False and data["exact"]["nondeterministic"] is True
    assert data["gate"]["failing"] == ["exact"]
    suite = ET.fromstring(render_junit(verdict))
    exact = next(c for c in suite.iter("testcase") if c.get("name") == "exact")
    assert exact.find("failure") is not None and "nondeterminism" in exact.find("failure").get("message")
    assert suite.get("failures") == "1"
