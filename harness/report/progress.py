"""Live progress of ``rlharness run`` and its closing summary table.

:class:`RunProgress` is an ``on_event`` callback for :func:`harness.execute.runner.run_specs`:
one row per seed (environment steps done, latest mean evaluation return,
elapsed time) and an overall row with the ETA. It draws nothing when the
console is not a terminal (CI logs get the summary table only).
:class:`RunSummary` renders a :class:`~harness.execute.runner.RunOutcome` as a table:
per seed the status, where the result came from, final return, area under the
curve and training wall time, and the reason of every failure.
"""

from __future__ import annotations

from rich.console import Console, Group, RenderableType
from rich.progress import (
    BarColumn,
    MofNCompleteColumn,
    Progress,
    SpinnerColumn,
    TaskID,
    TextColumn,
    TimeElapsedColumn,
    TimeRemainingColumn,
)
from rich.table import Table
from rich.text import Text

from harness.execute import RunEvent
from harness.gate.metrics import area_under_curve, final_return
from harness.execute.runner import RunOutcome
from harness.trainers.command import OUTPUT_PREFIX

__all__ = ["RunProgress", "RunSummary", "SuiteProgress", "format_return"]

#: With more seeds than this, finished seeds leave the live display to keep it short.
MAX_ROWS = 16


def format_return(value: float | None) -> str:
    """A return for a table cell: 4 significant digits, ``"-"`` when there is none."""
    return "-" if value is None else f"{value:.4g}"


class RunProgress:
    """Live per-seed progress fed with :class:`~harness.execute.RunEvent` values.

    Parameters
    ----------
    console
        Where to draw; nothing is drawn when ``console.is_terminal`` is False.

    Examples
    --------
    >>> from io import StringIO
    >>> with RunProgress(Console(file=StringIO())) as progress:
    ...     progress(RunEvent("planned", 0, "7", budget=100))
    """

    def __init__(self, console: Console):
        self.progress = Progress(
            SpinnerColumn(),
            TextColumn("{task.description}"),
            BarColumn(bar_width=10),
            MofNCompleteColumn(),
            TextColumn("steps  ret {task.fields[ret]:>7}"),
            TimeElapsedColumn(),
            TimeRemainingColumn(compact=True),
            console=console,
            disable=not console.is_terminal,
        )
        self._rows: dict[int, TaskID] = {}
        self._budget: dict[int, int] = {}
        self._overall: TaskID | None = None
        self._done = 0
        self._failed = 0

    def __enter__(self) -> RunProgress:
        self.progress.start()
        return self

    def __exit__(self, *exc: object) -> None:
        self.progress.stop()

    def _overall_row(self) -> TaskID:
        if self._overall is None:
            self._overall = self.progress.add_task("all seeds", total=0, ret="", start=True)
        return self._overall

    def _finish(self, event: RunEvent, label: str) -> None:
        row = self._rows[event.index]
        budget = self._budget[event.index]
        before = self.progress.tasks[row].completed
        self.progress.update(row, completed=budget, ret=label)
        self.progress.stop_task(row)
        if len(self._rows) > MAX_ROWS:
            self.progress.update(row, visible=False)
        self._done += 1
        self._failed += event.kind == "failed"
        failed = f", {self._failed} failed" if self._failed else ""
        self.progress.update(
            self._overall_row(), advance=budget - before,
            description=f"all seeds ({self._done}/{len(self._rows)} done{failed})",
        )

    def __call__(self, event: RunEvent) -> None:
        if event.kind == "planned":
            self._budget[event.index] = event.budget
            self._rows[event.index] = self.progress.add_task(f"seed {event.seed}", total=event.budget, ret="", start=False)
            overall = self._overall_row()
            self.progress.update(overall, total=sum(self._budget.values()))
        elif event.kind == "started":
            self.progress.start_task(self._rows[event.index])
        elif event.kind == "checkpoint":
            row = self._rows[event.index]
            before = self.progress.tasks[row].completed
            self.progress.update(row, completed=event.step, ret=format_return(event.mean_return))
            self.progress.update(self._overall_row(), advance=event.step - before)
        elif event.kind == "finished":
            self._finish(event, format_return(event.mean_return) if event.source == "trained" else event.source)
        elif event.kind == "failed":
            self._finish(event, "FAILED")


class SuiteProgress:
    """Live progress of a suite in one display: a row per task (steps, seeds done) and an overall row.

    An ``on_event`` callback for :func:`harness.execute.runner.run_plans`, whose events carry
    their manifest. Draws nothing when the console is not a terminal.

    Examples
    --------
    >>> from io import StringIO
    >>> with SuiteProgress(Console(file=StringIO())) as progress:
    ...     progress(RunEvent("planned", 0, "7", budget=100, manifest="toy"))
    """

    def __init__(self, console: Console):
        self.progress = Progress(
            SpinnerColumn(),
            TextColumn("{task.description}"),
            BarColumn(bar_width=16),
            TextColumn("{task.fields[seeds]}"),
            TimeElapsedColumn(),
            TimeRemainingColumn(compact=True),
            console=console,
            disable=not console.is_terminal,
        )
        self._rows: dict[str, TaskID] = {}
        self._seeds: dict[str, list[int]] = {}  # manifest -> [done, failed, planned]
        self._steps: dict[tuple[str, int], int] = {}
        self._budget: dict[tuple[str, int], int] = {}
        self._overall = self.progress.add_task("all tasks", total=0, seeds="", start=True)

    def __enter__(self) -> SuiteProgress:
        self.progress.start()
        return self

    def __exit__(self, *exc: object) -> None:
        self.progress.stop()

    def _advance(self, manifest: str, key: tuple[str, int], step: int) -> None:
        delta = step - self._steps.get(key, 0)
        self._steps[key] = step
        self.progress.update(self._rows[manifest], advance=delta)
        self.progress.update(self._overall, advance=delta)

    def _label(self, manifest: str) -> None:
        done, failed, planned = self._seeds[manifest]
        self.progress.update(self._rows[manifest], seeds=f"{done}/{planned} seeds" + (f", {failed} failed" if failed else ""))
        totals = [sum(v[i] for v in self._seeds.values()) for i in range(3)]
        self.progress.update(self._overall, seeds=f"{totals[0]}/{totals[2]} seeds"
                             + (f", {totals[1]} failed" if totals[1] else ""))

    def __call__(self, event: RunEvent) -> None:
        name = event.manifest or "?"
        key = (name, event.index)
        if event.kind == "planned":
            if name not in self._rows:
                self._rows[name] = self.progress.add_task(name, total=0, seeds="", start=True)
                self._seeds[name] = [0, 0, 0]
            self._budget[key] = event.budget
            self._seeds[name][2] += 1
            self.progress.update(self._rows[name], total=self.progress.tasks[self._rows[name]].total + event.budget)
            self.progress.update(self._overall, total=self.progress.tasks[self._overall].total + event.budget)
            self._label(name)
        elif event.kind == "checkpoint":
            self._advance(name, key, event.step)
        elif event.kind in ("finished", "failed"):
            self._advance(name, key, self._budget[key])
            self._seeds[name][0] += 1
            self._seeds[name][1] += event.kind == "failed"
            self._label(name)


class RunSummary:
    """The closing table of a run; print it with ``console.print(RunSummary(outcome))``."""

    def __init__(self, outcome: RunOutcome):
        self.outcome = outcome

    def table(self) -> Table:
        out = self.outcome
        table = Table(title=f"{out.results.manifest}: {len(out.results.records)} seeds", title_justify="left")
        for name, justify in (("seed", "left"), ("status", "left"), ("from", "left"), ("final return", "right"),
                              ("area under curve", "right"), ("wall time", "right")):
            table.add_column(name, justify=justify)
        for record in out.results.records:
            i = record.spec.index
            wall = out.wall_seconds.get(i)
            table.add_row(
                record.spec.seed.label,
                Text("ok") if record.ok else Text("FAILED", style="bold red"),
                out.sources.get(i, "-"),
                format_return(final_return(record.curve)) if record.ok else "-",
                format_return(area_under_curve(record.curve)) if record.ok else "-",
                "-" if wall is None else f"{wall:.1f} s",
            )
        return table

    def __rich__(self) -> RenderableType:
        out = self.outcome
        parts: list[RenderableType] = [self.table()]
        failed = out.results.failed()
        for record in failed:
            lines = record.failure.strip().splitlines()
            parts.append(Text(f"seed {record.spec.seed.label} failed: {lines[-1]}", style="red"))
            output = [line for line in lines[:-1] if line.startswith(OUTPUT_PREFIX)]  # a command's last output lines
            if output:
                parts.append(Text("\n".join(output[-5:])))
        done = len(out.results.completed())
        total = len(out.results.records)
        counts = {s: sum(1 for v in out.sources.values() if v == s) for s in ("trained", "cache", "resumed")}
        origin = ", ".join(f"{n} {s}" for s, n in counts.items() if n)
        status = f"{done} of {total} seeds finished ({origin}) in {out.elapsed:.1f} s; results in {out.folder}"
        if failed:
            status += f". {len(failed)} failed: verification will have fewer seeds than the manifest asks"
        parts.append(Text(status))
        return Group(*parts)
