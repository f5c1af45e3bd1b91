"""Manifests: TOML in, a validated, fully resolved :class:`Manifest` out.

The format is documented in docs/manifest.md. Each table
is resolved through :mod:`harness.core.config` against a schema (the private
``_...Table`` dataclasses here, the trainer's settings dataclass, and
:class:`harness.manifest.policy.GatePolicy` / :class:`harness.manifest.policy.PublishedReference`),
so every problem is reported as a :class:`~harness.core.errors.ManifestError` naming
the file, the dotted key and the fix. Nothing is trained or written while
loading.

The config hash is ``harness.core.spec.sha256_of(manifest.resolved_config())``: the
task (step limit filled in from gymnasium's registry), the trainer, its settings
with every default filled in, the budget, the evaluation plan and the planned
seeds. ``name``, ``description``, ``[check]``, ``[[reference]]`` and ``[pins]``
do not enter it: they do not change what is trained.
"""

from __future__ import annotations

import dataclasses
import difflib
import importlib
import inspect
import os
import re
import tomllib
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import gymnasium as gym
from gymnasium.envs.registration import load_env_creator

from harness.core import config
from harness.core.errors import ConfigError, ManifestError, did_you_mean
from harness.manifest.pins import Pins
from harness.manifest.policy import GatePolicy, PublishedReference
from harness.core.seeding import RunSeed, extend_seeds, plan_seeds
from harness.core.spec import EvaluationPlan, RunSpec, TaskSpec, sha256_of
from harness.trainers.command import COMMAND_TRAINER, CommandSettings, source_files
from harness.trainers.registry import resolve_trainer

__all__ = ["Manifest", "load_manifest", "parse_manifest", "read_toml_file"]

_NAME_RE = re.compile(r"^[A-Za-z0-9][A-Za-z0-9._-]{0,99}$")


@dataclasses.dataclass(frozen=True, slots=True)
class _TaskTable:
    id: str
    options: Mapping[str, Any] = dataclasses.field(default_factory=dict)
    episode_step_limit: int | None = None
    gymnasium: bool = True

    def __post_init__(self) -> None:
        if self.episode_step_limit is not None:
            config.check_number(self.episode_step_limit, "episode_step_limit", low=1, integer=True)


@dataclasses.dataclass(frozen=True, slots=True)
class _TrainerTable:
    use: str | None = None
    settings: Mapping[str, Any] | None = None
    command: tuple[str, ...] | None = None
    folder: str | None = None
    environment: Mapping[str, str] | None = None
    sources: tuple[str, ...] | None = None
    time_limit: float | None = None

    def __post_init__(self) -> None:
        if (self.use is None) == (self.command is None):
            raise ConfigError(
                "give either `use = \"name\"` (a built-in or \"package.module:function\") or "
                "`command = [\"program\", \"arg\", ...]` (a training program), not both or neither",
                key="use" if self.use is not None else None,
            )
        if self.use == COMMAND_TRAINER:
            raise ConfigError("a training program is given as `command = [\"program\", \"arg\", ...]`", key="use")
        if self.use is not None:
            for key in ("folder", "environment", "sources", "time_limit"):
                if getattr(self, key) is not None:
                    raise ConfigError(f"`{key}` goes with `command = [...]`, not with `use`; remove it", key=key)
        elif self.settings is not None:
            raise ConfigError("a command takes no [trainer.settings]: pass values as arguments in `command`",
                              key="settings")
        if self.time_limit is not None:
            config.check_number(self.time_limit, "time_limit", low=0, open_low=True)

    def command_table(self) -> dict[str, Any]:
        """The keys :class:`~harness.trainers.command.CommandSettings` takes, as given."""
        keys = ("command", "folder", "environment", "sources")
        return {key: getattr(self, key) for key in keys if getattr(self, key) is not None}


@dataclasses.dataclass(frozen=True, slots=True)
class _BudgetTable:
    env_steps: int

    def __post_init__(self) -> None:
        config.check_number(self.env_steps, "env_steps", low=1, integer=True)


@dataclasses.dataclass(frozen=True, slots=True)
class _EvaluationTable:
    every: int
    episodes: int = 10
    episode_seed: int = 0
    epsilon: float = 0.0

    def __post_init__(self) -> None:
        for key in ("every", "episodes"):
            config.check_number(getattr(self, key), key, low=1, integer=True)
        config.check_number(self.episode_seed, "episode_seed", low=0, integer=True)
        config.check_number(self.epsilon, "epsilon", low=0, high=1)


@dataclasses.dataclass(frozen=True, slots=True)
class _SeedsTable:
    count: int | None = None
    root: int | None = None
    values: tuple[int, ...] | None = None
    baseline_count: int | None = None

    def __post_init__(self) -> None:
        if (self.values is None) == (self.count is None):
            raise ConfigError(
                "give either `values = [1, 2, 3]` or `count = N` with `root = ENTROPY`, not both or neither",
                key="count" if self.count is not None else None,
            )
        if self.values is not None and self.root is not None:
            raise ConfigError("`root` goes with `count`; remove it or replace `values` by `count`", key="root")
        try:
            self.planned()
        except ValueError as exc:
            key = "values" if self.values is not None else ("root" if "root" in str(exc) else "count")
            raise ConfigError(f"{exc}; fix the seed list", key=key) from None
        gate = self.count if self.values is None else len(self.values)
        if self.baseline_count is not None and self.baseline_count < gate:
            raise ConfigError(
                f"must be at least the {gate} seeds of a gate run, got {self.baseline_count!r}: a baseline is "
                f"recorded on the gate's seeds and more; raise it to {gate} or more, or remove it",
                key="baseline_count",
            )

    def planned(self) -> tuple[RunSeed, ...]:
        return plan_seeds(seeds=self.values, count=self.count, root=self.root)


@dataclasses.dataclass(frozen=True, slots=True)
class _ManifestFile:
    name: str
    task: _TaskTable
    trainer: _TrainerTable
    budget: _BudgetTable
    evaluation: _EvaluationTable
    seeds: _SeedsTable
    description: str = ""
    check: Mapping[str, Any] = dataclasses.field(default_factory=dict)
    reference: tuple[Mapping[str, Any], ...] = ()
    pins: Mapping[str, Any] = dataclasses.field(default_factory=dict)

    def __post_init__(self) -> None:
        if not _NAME_RE.match(self.name):
            raise ConfigError(
                f"must be a file-safe name (letters, digits, '.', '_', '-'; up to 100), got {self.name!r}",
                key="name",
            )


@dataclasses.dataclass(frozen=True, slots=True)
class Manifest:
    """A validated manifest with every default filled in.

    Attributes
    ----------
    path
        The file it was read from (``None`` when parsed from text without one).
    name, description
        File-safe name (results and baselines are stored under it) and one line of text.
    task
        The task; ``max_episode_steps`` is filled from gymnasium's registry when not given.
    trainer
        Built-in trainer name or ``"package.module:function"``.
    settings
        The trainer's resolved settings (arrays as tuples; JSON writes them as lists).
    budget
        Environment steps of training per seed.
    evaluation
        The evaluation plan.
    seeds
        The planned seeds, in manifest order.
    check, references
        The verification policy (``[check]``) and published references (``[[reference]]``).
    pins
        The ``[pins]`` table, or ``None`` when the manifest has not been pinned.
    config_hash
        ``"sha256:..."`` of :meth:`resolved_config`.
    time_limit
        ``[trainer] time_limit`` of a command trainer (seconds per seed), else ``None``; it
        does not enter the config hash.
    baseline_count
        Seeds ``record`` trains for the baseline (``[seeds] baseline_count``); ``None``: the
        gate's seeds. See :meth:`baseline_manifest`.
    """

    path: Path | None
    name: str
    description: str
    task: TaskSpec
    trainer: str
    settings: Mapping[str, Any]
    budget: int
    evaluation: EvaluationPlan
    seeds: tuple[RunSeed, ...]
    check: GatePolicy
    references: tuple[PublishedReference, ...]
    pins: Pins | None
    config_hash: str
    time_limit: float | None = None
    baseline_count: int | None = None

    def resolved_config(self) -> dict[str, Any]:
        """The resolved training configuration: exactly what the config hash is taken of."""
        return _resolved_config(self.task, self.trainer, self.settings, self.budget, self.evaluation, self.seeds)

    def baseline_manifest(self) -> Manifest:
        """The manifest ``record`` trains: this one, or ``<name>-baseline`` with ``baseline_count`` seeds.

        With ``[seeds] baseline_count = B`` larger than the gate's seed count, the baseline is
        recorded on the gate's seeds followed by more children of the same root
        (:func:`harness.core.seeding.extend_seeds`), so its mean carries less of one draw's
        luck. The derived manifest has its own name (its results go to
        ``results/<name>-baseline/``) and config hash (of its own seed list); the baseline
        file stores this manifest's hash and configuration, so ``verify``'s exact check
        compares the seeds both share (the gate's).
        """
        if self.baseline_count is None or self.baseline_count == len(self.seeds):
            return self
        derived = dataclasses.replace(self, name=f"{self.name}-baseline", seeds=extend_seeds(self.seeds, self.baseline_count),
                                      pins=None, baseline_count=None)
        return dataclasses.replace(derived, config_hash=sha256_of(derived.resolved_config()))

    def runs(self) -> tuple[RunSpec, ...]:
        """One :class:`~harness.core.spec.RunSpec` per seed, in manifest order."""
        return tuple(
            RunSpec(
                manifest=self.name,
                task=self.task,
                trainer=self.trainer,
                config=dict(self.settings),
                budget=self.budget,
                evaluation=self.evaluation,
                seed=seed,
                index=index,
                config_hash=self.config_hash,
            )
            for index, seed in enumerate(self.seeds)
        )


def _resolved_config(task, trainer, settings, budget, evaluation, seeds) -> dict[str, Any]:
    return {
        "task": task.to_json(),
        "trainer": trainer,
        "settings": dict(settings),
        "budget": budget,
        "evaluation": evaluation.to_json(),
        "seeds": [seed.to_json() for seed in seeds],
    }


def _registered_task(task: _TaskTable, *, path: str | None) -> int | None:
    """Check the id against gymnasium's registry and return its registered episode step limit."""
    env_id = task.id
    if ":" in env_id:
        module, _, env_id = env_id.partition(":")
        try:
            importlib.import_module(module)
        except ImportError as exc:
            raise ManifestError(
                f"cannot import {module!r}, which should register the task ({exc}); install it",
                path=path, key="task.id",
            ) from None
    try:
        spec = gym.spec(env_id)
    except gym.error.Error as exc:
        close = difflib.get_close_matches(env_id, list(gym.registry), n=3, cutoff=0.6)
        hint = f" Did you mean {' or '.join(repr(c) for c in close)}?" if close else ""
        raise ManifestError(
            f"{env_id!r} is not a task in gymnasium's registry ({exc}).{hint} "
            "Use a registered id (`python -c \"import gymnasium; gymnasium.pprint_registry()\"` lists them).",
            path=path, key="task.id",
        ) from None
    _check_options(spec, task.options, path=path)
    return spec.max_episode_steps


#: ``gymnasium.make`` arguments that the harness itself sets (see ``harness.trainers.envs.make_env``).
_RESERVED_OPTIONS = {"max_episode_steps": "use `episode_step_limit` in [task]",
                     "disable_env_checker": "the harness sets it"}


def _check_options(spec: gym.envs.registration.EnvSpec, options: Mapping[str, Any], *, path: str | None) -> None:
    """Reject ``[task] options`` that the task's constructor does not take (checked by signature, not built)."""
    for name, why in _RESERVED_OPTIONS.items():
        if name in options:
            raise ManifestError(f"{name!r} cannot be an option: {why}", path=path, key=f"task.options.{name}")
    try:
        creator = load_env_creator(spec.entry_point) if isinstance(spec.entry_point, str) else spec.entry_point
    except (ImportError, gym.error.Error) as exc:
        raise ManifestError(
            f"cannot load the environment of {spec.id!r} ({exc}); install what it needs",
            path=path, key="task.id",
        ) from None
    try:
        parameters = inspect.signature(creator).parameters
    except (TypeError, ValueError):  # builtins and some C extensions have no signature: cannot check
        return
    if any(p.kind is inspect.Parameter.VAR_KEYWORD for p in parameters.values()):
        return
    accepted = {n for n, p in parameters.items() if p.kind in (p.POSITIONAL_OR_KEYWORD, p.KEYWORD_ONLY)}
    for name in options:
        if name not in accepted:
            raise ManifestError(
                f"{spec.id!r} takes no option {name!r}.{did_you_mean(name, accepted)}",
                path=path, key=f"task.options.{name}",
            )


def _check_own_task(table: _ManifestFile, *, path: str | None) -> None:
    """A task outside gymnasium: only a command trains on it, and the gate's scale comes from [check]."""
    if table.trainer.command is None:
        raise ManifestError("a task outside gymnasium (`gymnasium = false`) is trained by a program: give "
                            "`command = [...]` in [trainer], or use a gymnasium id", path=path, key="task.gymnasium")
    if table.task.options:
        raise ManifestError("options go to gymnasium.make; a task outside gymnasium takes none (pass them to "
                            "the program in `command`)", path=path, key="task.options")
    check = table.check
    if "threshold" not in check:
        raise ManifestError("a task outside gymnasium has no registered reward threshold: set `threshold` in "
                            "[check] (the return that counts as solved)", path=path, key="check.threshold")
    if not any(k in check for k in ("floor", "margin", "margins")):
        raise ManifestError("a task outside gymnasium has no random-policy return to size the margin from: set "
                            "`floor` (a random policy's return) or `margin` in [check]", path=path, key="check.floor")


def _command_settings(table: _TrainerTable, base: Path, *, path: str | None) -> dict[str, Any]:
    """Resolve a command's keys; its folder must exist and each source glob match a file."""
    settings = config.resolve(CommandSettings, table.command_table(), path=path, key="trainer")
    folder = (base / settings.folder).resolve()
    if not folder.is_dir():
        raise ManifestError(f"the working folder {str(folder)!r} does not exist; give it relative to the "
                            "manifest's folder", path=path, key="trainer.folder")
    for i, pattern in enumerate(settings.sources):
        if not any(p.is_file() for p in folder.glob(pattern)):
            raise ManifestError(f"{pattern!r} matches no file in {str(folder)!r}; fix the glob (relative to "
                                "`folder`)", path=path, key=f"trainer.sources[{i}]")
    if not source_files(settings, folder):
        raise ManifestError("no source file fingerprints the program: name its files in `sources` (globs "
                            "relative to `folder`), so that a changed program is never taken from the cache",
                            path=path, key="trainer.sources")
    return config.to_json(settings)


def parse_manifest(text: str, *, path: str | os.PathLike | None = None) -> Manifest:
    """Parse and validate a manifest given as TOML text.

    Parameters
    ----------
    text
        The TOML text.
    path
        The file the text came from: named in errors, and its folder is where a user
        trainer's module (``use = "module:function"``) is looked for if not installed.

    Raises
    ------
    ManifestError
        For TOML syntax errors (with the line), unknown keys (with a "did you mean"), wrong
        types, out-of-range values, an unknown gymnasium id or trainer, an evaluation interval
        larger than the budget, duplicate seeds.
    """
    if not isinstance(text, str):
        raise TypeError(f"`text` must be the manifest's TOML text (a str), got {type(text).__name__}")
    where = None if path is None else str(path)
    search_path = None if path is None else Path(path).resolve().parent
    table = config.resolve(_ManifestFile, _parse_toml(text, where), path=where)
    task = table.task
    step_limit = task.episode_step_limit
    if not task.gymnasium:
        _check_own_task(table, path=where)
    else:
        registered = _registered_task(task, path=where)
        if step_limit is None:
            step_limit = registered
    if step_limit is None and task.gymnasium:
        raise ManifestError(
            f"{task.id!r} has no episode step limit registered with gymnasium; set "
            "`episode_step_limit = N` in [task] so that every episode (and evaluation) ends",
            path=where, key="task.episode_step_limit",
        )
    task_spec = TaskSpec(task.id, dict(task.options), step_limit)
    if table.trainer.command is not None:
        trainer_name = COMMAND_TRAINER
        settings = _command_settings(table.trainer, search_path or Path.cwd(), path=where)
    else:
        trainer_name = table.trainer.use
        trainer = resolve_trainer(trainer_name, search_path=search_path, path=where, key="trainer.use")
        settings = trainer.resolve_settings(table.trainer.settings or {}, path=where, key="trainer.settings")
    budget = table.budget.env_steps
    if table.evaluation.every > budget:
        raise ManifestError(
            f"evaluation every {table.evaluation.every} steps is more than the budget of {budget} steps; "
            "lower `every` or raise [budget] env_steps",
            path=where, key="evaluation.every",
        )
    evaluation = EvaluationPlan(
        interval=table.evaluation.every,
        episodes=table.evaluation.episodes,
        seed=table.evaluation.episode_seed,
        epsilon=table.evaluation.epsilon,
    )
    seeds = table.seeds.planned()
    GatePolicy.check_retired(table.check, path=where)
    check = config.resolve(GatePolicy, table.check, path=where, key="check")
    references = tuple(
        config.resolve(PublishedReference, ref, path=where, key=f"reference[{i}]") for i, ref in enumerate(table.reference)
    )
    pins = config.resolve(Pins, table.pins, path=where, key="pins") if table.pins else None
    resolved = _resolved_config(task_spec, trainer_name, settings, budget, evaluation, seeds)
    return Manifest(
        path=None if path is None else Path(path),
        name=table.name,
        description=table.description,
        task=task_spec,
        trainer=trainer_name,
        settings=settings,
        budget=budget,
        evaluation=evaluation,
        seeds=seeds,
        check=check,
        references=references,
        pins=pins,
        config_hash=sha256_of(resolved),
        time_limit=table.trainer.time_limit,
        baseline_count=table.seeds.baseline_count,
    )


def _parse_toml(text: str, where: str | None) -> dict[str, Any]:
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ManifestError(f"is not valid TOML: {exc}; fix the syntax there", path=where) from None


def _read_text(path: str | os.PathLike) -> str:
    try:
        return Path(path).read_text(encoding="utf-8")
    except FileNotFoundError:
        raise ManifestError("no such file; check the path", path=str(path)) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise ManifestError(f"cannot be read as UTF-8 text ({exc})", path=str(path)) from None


def read_toml_file(path: str | os.PathLike) -> dict[str, Any]:
    """The TOML tables of a file (a manifest or a suite file), unchecked.

    Raises ``ManifestError`` naming the file when it is missing, not UTF-8 text or not valid TOML.
    """
    return _parse_toml(_read_text(path), str(path))


def load_manifest(path: str | os.PathLike) -> Manifest:
    """Read and validate the manifest at ``path`` (see :func:`parse_manifest`)."""
    return parse_manifest(_read_text(path), path=path)
