"""The suite's live progress: one row per task and one overall row, fed by the runner's events."""

from __future__ import annotations

from io import StringIO

from rich.console import Console

from harness.execute import RunEvent
from harness.report.progress import SuiteProgress


def test_suite_progress_counts_steps_and_seeds_per_task():
    progress = SuiteProgress(Console(file=StringIO(), force_terminal=True, width=100))
    with progress:
        for manifest, seeds, budget in (("a", 2, 100), ("b", 1, 40)):
            for i in range(seeds):
                progress(RunEvent("planned", i, str(i), budget=budget, manifest=manifest))
        progress(RunEvent("checkpoint", 0, "0", step=50, mean_return=1.0, manifest="a"))
        progress(RunEvent("checkpoint", 0, "0", step=20, mean_return=1.0, manifest="b"))
        progress(RunEvent("finished", 1, "1", mean_return=1.0, source="cache", manifest="a"))
        progress(RunEvent("failed", 0, "0", source="trained", message="boom", manifest="b"))
    rows = {t.description: t for t in progress.progress.tasks}
    assert set(rows) == {"all tasks", "a", "b"}
    # a: 50 steps of seed 0 and all 100 of seed 1 (finished); b: its one seed ended (failed) at 40.
    assert (rows["a"].completed, rows["a"].total) == (150, 200)
    assert (rows["b"].completed, rows["b"].total) == (40, 40)
    assert (rows["all tasks"].completed, rows["all tasks"].total) == (190, 240)
    assert rows["a"].fields["seeds"] == "1/2 seeds"
    assert rows["b"].fields["seeds"] == "1/1 seeds, 1 failed"
    assert rows["all tasks"].fields["seeds"] == "2/3 seeds, 1 failed"
