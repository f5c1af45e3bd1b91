"""Run a suite's manifests in one worker pool, longest runs first.

The order of training only matters for wall time: with one shared pool, the
slowest tasks should start first so that no worker waits for a long task
started last (Graham 1969). A run's cost is estimated from its baseline's
recording (wall time x worker processes / seeds: the CPU seconds one seed took
when the baseline was recorded); a manifest without a recorded time takes the
seconds per environment step of the recorded manifests with the same trainer
(else of all recorded manifests) times its budget; with no recorded time at all,
every run costs its budget in steps.
"""

from __future__ import annotations

import math
import os
import statistics
from collections.abc import Mapping, Sequence
from pathlib import Path

from harness.execute.runner import RunOutcome, RunPlan, run_plans
from harness.store.baseline import Baseline

__all__ = ["recorded_run_seconds", "run_suite", "suite_plans"]


def recorded_run_seconds(baseline: Baseline | None) -> float | None:
    """CPU seconds one seed took when ``baseline`` was recorded, or ``None`` if not known.

    A baseline recorded as part of a suite (its recording names the suite) carries the whole
    suite's wall time, which says nothing of its own runs: ``None``.

    Examples
    --------
    >>> recorded_run_seconds(None) is None
    True
    """
    if baseline is None or not baseline.runs:
        return None
    recording = baseline.recording or {}
    if "suite" in recording:  # recorded with other manifests in one pool: the wall time is the suite's
        return None
    try:
        wall, workers = float(recording["wall_seconds"]), int(recording["workers"])
    except (KeyError, TypeError, ValueError):
        return None
    if not (math.isfinite(wall) and wall > 0 and workers > 0):
        return None
    return wall * workers / len(baseline.runs)


def suite_plans(manifests: Sequence[object], folders: Sequence[str | os.PathLike],
                baselines: Mapping[str, Baseline | None], first: Mapping[str, int] | None = None) -> list[RunPlan]:
    """One :class:`RunPlan` per manifest, with run costs estimated as the module docstring says.

    ``first`` maps a manifest's name to how many of its first seeds to plan (a stage of the
    staged gate); the others plan every seed.
    """
    known = {m.name: s for m in manifests if (s := recorded_run_seconds(baselines.get(m.name))) is not None}

    def per_step(ms: Sequence[object]) -> float | None:
        rates = [known[m.name] / m.budget for m in ms if m.name in known]
        return statistics.median(rates) if rates else None

    costs: dict[str, float | None] = {}
    for m in manifests:
        rate = per_step([o for o in manifests if o.trainer == m.trainer]) or per_step(manifests)
        costs[m.name] = known.get(m.name, None if rate is None else rate * m.budget)
    if any(c is None for c in costs.values()):  # no time recorded anywhere: budgets for all
        costs = dict.fromkeys(costs)
    return [
        RunPlan(m.runs()[:(first or {}).get(m.name)], Path(folder), None if m.path is None else str(Path(m.path).resolve().parent),
                costs[m.name])
        for m, folder in zip(manifests, folders, strict=True)
    ]


def run_suite(manifests: Sequence[object], folders: Sequence[str | os.PathLike],
              baselines: Mapping[str, Baseline | None], *, first: Mapping[str, int] | None = None,
              **options: object) -> tuple[RunOutcome, ...]:
    """Train every run of every manifest in one pool (see :func:`harness.execute.runner.run_plans`).

    ``first`` as in :func:`suite_plans`; ``options`` go to :func:`~harness.execute.runner.run_plans` (``workers``, ``executor``,
    ``cache``, ``on_event``, ...). Returns one outcome per manifest, in order.
    """
    return run_plans(suite_plans(manifests, folders, baselines, first), **options)
