"""The suite's family of checks (Holm over every task) and the shipped suite file."""

from __future__ import annotations

from pathlib import Path

import pytest

from harness.gate.suite import _FamilyAdjustment

ROOT = Path(__file__).resolve().parent.parent


def test_family_is_holm_over_every_task():
    # Holm (1979), the textbook example (CHECK-VALUES.md, "Multiple comparisons"):
    # p = (0.01, 0.03, 0.04, 0.005) at alpha 0.05 -> adjusted (0.03, 0.06, 0.06, 0.02), rejecting
    # the first and the last. Split over two tasks, the suite must give each task its share.
    family = _FamilyAdjustment(0.05, 2)
    for task, ps in enumerate([(0.01, 0.03), (0.04, 0.005)]):
        for kind in ("p_worse", "p_better"):
            family.collecting(task)(kind, ps)
    family.adjust()
    first = family.applying(0)("p_worse", (0.01, 0.03))
    second = family.applying(1)("p_worse", (0.04, 0.005))
    assert first.adjusted == pytest.approx((0.03, 0.06)) and first.reject == (True, False)
    assert second.adjusted == pytest.approx((0.06, 0.02)) and second.reject == (False, True)
    assert family.size == 4 and first.method == "Holm over the suite's 4 checks"
    with pytest.raises(RuntimeError, match="changed between the two passes"):
        family.applying(0)("p_worse", (0.02, 0.03))


def test_shipped_suite_lists_every_shipped_manifest_once():
    from harness.manifest.suite import load_suite

    suite = load_suite([ROOT / "suites/shipped.toml"])
    assert (suite.name, suite.alpha) == ("shipped", 0.05)
    shipped = sorted(p.stem for p in (ROOT / "manifests").glob("*.toml"))
    assert sorted(m.name for m in suite.manifests) == shipped
    assert all((ROOT / "baselines" / f"{m.name}.json").is_file() for m in suite.manifests)
