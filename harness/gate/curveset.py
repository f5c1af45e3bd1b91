"""A set of per-seed learning curves with its provenance: a baseline or a stored result set.

Both sides of a comparison are a :class:`CurveSet`, whatever they were read
from, so that ``verify`` (rerun vs baseline) and ``compare`` (two result sets)
run the same checks. Also here: the task facts a margin is sized from (the
registered reward threshold and the return of a random policy).
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from harness.store.baseline import Baseline, SeedCurve
from harness.store.results import ResultSet
from harness.core.errors import ResultsError, RunFailedError
from harness.core.spec import EvaluationPlan, TaskSpec, plan_config

__all__ = ["CurveSet", "last_line", "random_policy_return", "task_from_data", "task_threshold", "version_mix"]


def last_line(text: str | None) -> str:
    """The last line of a failure reason (the exception message of a traceback)."""
    lines = (text or "").strip().splitlines()
    return lines[-1] if lines else "no reason given"


@dataclasses.dataclass(frozen=True, slots=True)
class CurveSet:
    """Per-seed curves with where they came from: a baseline or a result set.

    Attributes
    ----------
    label
        Where it came from, for reports (``"baselines/x.json (recorded ...)"``).
    manifest, config_hash, config
        The manifest's name, config hash and resolved configuration.
    versions
        Installed versions the curves were produced with; a component whose version differs
        between seeds reads ``"mixed: <version> (<n> seeds), ..."`` (never one seed's version).
    runs
        Per-seed curves.
    budget
        Training budget in environment steps.
    """

    label: str
    manifest: str
    config_hash: str
    config: Mapping[str, Any]
    versions: Mapping[str, str]
    runs: tuple[SeedCurve, ...]
    budget: int
    mixed_versions: Mapping[str, Mapping[str, tuple[str, ...]]] = dataclasses.field(default_factory=dict)
    """Components whose version differs between seeds: ``{component: {version: seed labels}}``."""

    @classmethod
    def from_baseline(cls, baseline: Baseline) -> CurveSet:
        where = str(baseline.path) if baseline.path is not None else baseline.manifest
        return cls(
            label=f"{where} (recorded {baseline.recorded})",
            manifest=baseline.manifest,
            config_hash=baseline.config_hash,
            config=baseline.config,
            versions=baseline.versions,
            runs=baseline.runs,
            budget=int(baseline.runs[0].curve.steps[-1]),  # the grid always ends at the budget
        )

    @classmethod
    def from_results(cls, results: ResultSet, *, label: str, config: Mapping[str, Any] | None = None,
                     expected: int | None = None) -> CurveSet:
        """From a result set; every seed must have completed.

        Parameters
        ----------
        results
            The result set.
        label
            Where it came from, for reports.
        config
            The resolved configuration (``Manifest.resolved_config()``); by default it is
            rebuilt from the first run's spec.
        expected
            Number of seeds the manifest asks for; fewer completed seeds is an error.

        Raises
        ------
        RunFailedError
            If any seed failed (never verified silently on fewer seeds).
        ResultsError
            If fewer seeds than ``expected`` have results, or there are none.
        """
        failed = results.failed()
        if failed:
            lines = "; ".join(f"seed {r.spec.seed.label}: {last_line(r.failure)}" for r in failed)
            raise RunFailedError(
                f"{label}: {len(failed)} of {len(results.records)} seeds failed, so there is nothing sound to "
                f"verify (never verified on fewer seeds than asked): {lines}"
            )
        done = results.completed()
        if not done or (expected is not None and len(done) < expected):
            raise ResultsError(
                f"{label}: {len(done)} completed seeds, but the manifest asks for {expected}; run the missing "
                "seeds first (`rlharness run`); verification never uses fewer seeds than asked"
            )
        first = done[0].spec
        mixed = version_mix(done)
        versions = {k: v for r in done for k, v in r.versions.items()}
        for name, seeds in mixed.items():
            versions[name] = "mixed: " + ", ".join(f"{v} ({len(s)} seed{'s' if len(s) != 1 else ''})" for v, s in seeds.items())
        return cls(
            label=label,
            manifest=results.manifest,
            config_hash=results.config_hash,
            config=config if config is not None else plan_config([r.spec for r in done]),
            versions=versions,
            runs=tuple(SeedCurve(r.spec.seed, r.curve) for r in done),
            budget=first.budget,
            mixed_versions=mixed,
        )

    @property
    def steps(self) -> tuple[int, ...]:
        """The checkpoint grid shared by every seed."""
        grids = {tuple(int(s) for s in r.curve.steps) for r in self.runs}
        if len(grids) != 1:
            raise ResultsError(f"{self.label}: seeds have different checkpoint grids: {sorted(grids)}")
        return next(iter(grids))

    def curve_matrix(self) -> np.ndarray:
        """Mean evaluation return per seed and checkpoint, shape ``(n_seeds, n_checkpoints)``."""
        return np.stack([r.curve.means for r in self.runs])


def version_mix(records: Sequence[Any]) -> dict[str, dict[str, tuple[str, ...]]]:
    """The components whose installed version differs between runs (or is missing in some):
    ``{component: {version: seed labels}}``, with ``"-"`` for a missing one; empty when all agree."""
    names = sorted({k for r in records for k in r.versions})
    mix: dict[str, dict[str, tuple[str, ...]]] = {}
    for name in names:
        seeds: dict[str, list[str]] = {}
        for r in records:
            seeds.setdefault(r.versions.get(name, "-"), []).append(r.spec.seed.label)
        if len(seeds) > 1:
            mix[name] = {v: tuple(s) for v, s in seeds.items()}
    return mix


def task_from_data(task: TaskSpec, *, where: str, manifest_task: TaskSpec | None = None,
                   environment: bool = True) -> TaskSpec:
    """The task of stored results, made safe to build an environment from.

    Data never runs code: an id of the form ``"module:Env-v0"`` would make gymnasium import
    ``module``, so an id read from a file must already be in gymnasium's registry (checked by
    lookup, which imports nothing) or be the given manifest's own id, before anything is created.
    Options read from data are never passed to an environment: the manifest's task (validated
    when it was loaded) is used when given; otherwise, when an ``environment`` is to be built
    from it, the stored task must have no options.

    Raises
    ------
    ResultsError
        Naming the field and the fix.
    """
    import gymnasium

    if manifest_task is not None:
        if task.id != manifest_task.id:
            raise ResultsError(f"{where}: [task.id] is {task.id!r}, but the manifest's task is {manifest_task.id!r}: "
                               "pass the manifest these results belong to")
        return manifest_task
    if ":" in task.id or task.id not in gymnasium.registry:
        raise ResultsError(
            f"{where}: [task.id] {task.id!r} is not a gymnasium task in its registry; ids read from results are "
            "never imported. Pass --manifest FILE to take the task from the manifest"
        )
    if task.kwargs and environment:
        raise ResultsError(
            f"{where}: [task.kwargs] {dict(task.kwargs)} are options read from data, which are never passed to an "
            "environment. Pass --manifest FILE to take the task from the manifest, or --margin to need no environment"
        )
    return task


def task_threshold(task: TaskSpec) -> float | None:
    """The reward threshold registered with gymnasium for the task, or ``None`` (also for a task
    gymnasium does not know: a training program's own task)."""
    import gymnasium

    try:
        value = gymnasium.spec(task.id).reward_threshold
    except gymnasium.error.Error:
        return None
    return None if value is None else float(value)


def random_policy_return(task: TaskSpec, evaluation: EvaluationPlan) -> float:
    """Mean return of a uniformly random policy on the evaluation episodes.

    Deterministic: the episode seeds are the evaluation's, and each episode's random
    actions come from its own Generator, as in a trainer's evaluation with epsilon
    (:func:`harness.core.seeding.episode_action_rng`).
    """
    import gymnasium

    from harness.trainers.envs import evaluate_policy, make_env

    try:
        gymnasium.spec(task.id)
    except gymnasium.error.Error:
        raise ResultsError(
            f"task {task.id!r} is not a gymnasium task, so there is no random policy to size the margin from: "
            "give the policy's floor or margin ([check] floor / margin, or --manifest, or --margin)"
        ) from None
    env = make_env(task)
    try:
        returns = evaluate_policy(lambda obs: 0, env, evaluation.episode_seeds(), epsilon=1.0)
    finally:
        env.close()
    return math.fsum(returns) / len(returns)
