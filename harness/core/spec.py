"""What one training run is: the task, the trainer and its resolved config, budget, evaluation, seed.

A :class:`RunSpec` is all a trainer receives. It is built from a manifest by
``harness.manifest.loader`` (one per seed) and is JSON-serialisable so that it can be
hashed for the run cache and shipped to worker processes or a cluster.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
from collections.abc import Mapping, Sequence
from typing import Any

from harness.core.jsondata import as_int, as_mapping, as_number, as_str
from harness.core.seeding import RunSeed, RunStreams, episode_seeds, run_streams

__all__ = ["EvaluationPlan", "RunSpec", "TaskSpec", "canonical_json", "config_changes", "plan_config", "sha256_of"]


def canonical_json(value: Any) -> str:
    """JSON with sorted keys, no whitespace and exact float repr: the text that hashes are taken of."""
    return json.dumps(value, sort_keys=True, separators=(",", ":"), ensure_ascii=False, allow_nan=False)


def sha256_of(value: Any) -> str:
    """``"sha256:<hex>"`` of the canonical JSON of ``value``."""
    return "sha256:" + hashlib.sha256(canonical_json(value).encode()).hexdigest()


def _flatten(value: Any, prefix: str = "") -> dict[str, Any]:
    if isinstance(value, Mapping) and value:
        out: dict[str, Any] = {}
        for key, item in value.items():
            out.update(_flatten(item, f"{prefix}.{key}" if prefix else str(key)))
        return out
    return {prefix: value}


def config_changes(old: Mapping[str, Any], new: Mapping[str, Any]) -> list[tuple[str, Any, Any]]:
    """Dotted keys whose values differ between two configurations: ``(key, old, new)``, sorted by key.

    Compared in their JSON form, so a config read back from a file (lists) equals the resolved
    one (tuples); a key missing on one side has the value ``None`` there.

    Examples
    --------
    >>> config_changes({"settings": {"hidden": (64,), "lr": 0.1}}, {"settings": {"hidden": [64], "lr": 0.2}})
    [('settings.lr', 0.1, 0.2)]
    """
    a, b = (_flatten(json.loads(canonical_json(side))) for side in (old, new))
    return [(k, a.get(k), b.get(k)) for k in sorted(a.keys() | b.keys()) if a.get(k) != b.get(k)]


def _tuples(value: Any) -> Any:
    """``value`` with every list turned into a tuple, recursively (mappings become dicts)."""
    if isinstance(value, Mapping):
        return {k: _tuples(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return tuple(_tuples(v) for v in value)
    return value


@dataclasses.dataclass(frozen=True, slots=True)
class TaskSpec:
    """A gymnasium task: its id, keyword arguments and episode step limit.

    ``max_episode_steps=None`` keeps the limit registered with gymnasium.
    """

    id: str
    kwargs: Mapping[str, Any] = dataclasses.field(default_factory=dict)
    max_episode_steps: int | None = None

    def to_json(self) -> dict:
        return {"id": self.id, "kwargs": dict(self.kwargs), "max_episode_steps": self.max_episode_steps}

    @classmethod
    def from_json(cls, data: Mapping) -> TaskSpec:
        data = as_mapping(data, "task")
        limit = data["max_episode_steps"]
        return cls(as_str(data["id"], "task.id"), dict(as_mapping(data["kwargs"], "task.kwargs")),
                   None if limit is None else as_int(limit, "task.max_episode_steps", minimum=1))


@dataclasses.dataclass(frozen=True, slots=True)
class EvaluationPlan:
    """When and how a run is evaluated.

    Checkpoints are taken at step 0 (the untrained policy), every ``interval``
    environment steps, and at the end of the budget. Each checkpoint plays
    ``episodes`` episodes whose seeds come from ``seed`` (the same for every
    run and checkpoint), acting greedily except with probability ``epsilon``.
    """

    interval: int
    episodes: int
    seed: int = 0
    epsilon: float = 0.0

    def checkpoint_steps(self, budget: int) -> tuple[int, ...]:
        """
        Examples
        --------
        >>> EvaluationPlan(interval=400, episodes=5).checkpoint_steps(1000)
        (0, 400, 800, 1000)
        """
        steps = list(range(0, budget + 1, self.interval))
        if steps[-1] != budget:
            steps.append(budget)
        return tuple(steps)

    def episode_seeds(self) -> tuple[int, ...]:
        return episode_seeds(self.seed, self.episodes)

    def to_json(self) -> dict:
        return dataclasses.asdict(self)

    @classmethod
    def from_json(cls, data: Mapping) -> EvaluationPlan:
        data = as_mapping(data, "evaluation")
        unknown = set(data) - {"interval", "episodes", "seed", "epsilon"}
        if unknown:
            raise ValueError(f"[evaluation] has unknown keys {sorted(unknown)}")
        epsilon = as_number(data.get("epsilon", 0.0), "evaluation.epsilon")
        if not 0.0 <= epsilon <= 1.0:
            raise ValueError(f"[evaluation.epsilon] must be in [0, 1], got {epsilon}")
        return cls(as_int(data["interval"], "evaluation.interval", minimum=1),
                   as_int(data["episodes"], "evaluation.episodes", minimum=1),
                   as_int(data.get("seed", 0), "evaluation.seed", minimum=0), epsilon)


@dataclasses.dataclass(frozen=True, slots=True)
class RunSpec:
    """One training run. Everything in it is part of the run's identity.

    Attributes
    ----------
    manifest
        The manifest's name (for messages and file names only).
    task, evaluation, budget
        The task, the evaluation plan and the budget in environment steps.
    trainer
        A built-in trainer name (``"dqn"``, ``"tabular-q"``) or a ``"module:function"`` entry point.
    config
        The trainer's fully resolved configuration (defaults filled in), JSON-compatible.
    config_hash
        SHA-256 of the manifest's resolved configuration (see ``harness.manifest.loader``).
    seed, index
        The run's seed material and its position in the manifest's seed list.
    """

    manifest: str
    task: TaskSpec
    trainer: str
    config: Mapping[str, Any]
    budget: int
    evaluation: EvaluationPlan
    seed: RunSeed
    index: int
    config_hash: str

    def __post_init__(self) -> None:
        # Arrays are tuples, as the settings resolver gives them, so that a spec read back
        # from JSON (where they are lists) is equal to the one that was written.
        object.__setattr__(self, "config", _tuples(self.config))

    def streams(self) -> RunStreams:
        """The run's independent random streams (fresh Generators on each call)."""
        return run_streams(self.seed)

    def checkpoint_steps(self) -> tuple[int, ...]:
        return self.evaluation.checkpoint_steps(self.budget)

    def to_json(self) -> dict:
        return {
            "manifest": self.manifest,
            "task": self.task.to_json(),
            "trainer": self.trainer,
            "config": dict(self.config),
            "budget": self.budget,
            "evaluation": self.evaluation.to_json(),
            "seed": self.seed.to_json(),
            "index": self.index,
            "config_hash": self.config_hash,
        }

    @classmethod
    def from_json(cls, data: Mapping) -> RunSpec:
        """Read back :meth:`to_json`; ``ValueError`` names a field of the wrong type or range."""
        data = as_mapping(data, "spec")
        return cls(
            manifest=as_str(data["manifest"], "spec.manifest"),
            task=TaskSpec.from_json(data["task"]),
            trainer=as_str(data["trainer"], "spec.trainer"),
            config=dict(as_mapping(data["config"], "spec.config")),
            budget=as_int(data["budget"], "spec.budget", minimum=1),
            evaluation=EvaluationPlan.from_json(data["evaluation"]),
            seed=RunSeed.from_json(data["seed"]),
            index=as_int(data["index"], "spec.index", minimum=0),
            config_hash=as_str(data["config_hash"], "spec.config_hash"),
        )


def plan_config(specs: Sequence[RunSpec]) -> dict:
    """The resolved configuration of a manifest's complete plan (its runs in seed order).

    It is what ``harness.manifest.Manifest.resolved_config`` gives for the manifest the runs came
    from, so ``sha256_of(plan_config(runs))`` is their ``config_hash``: a reader of stored runs
    checks the hash against the runs themselves rather than trusting the claim.
    """
    first = specs[0].to_json()
    return {
        "task": first["task"],
        "trainer": first["trainer"],
        "settings": first["config"],
        "budget": first["budget"],
        "evaluation": first["evaluation"],
        "seeds": [s.seed.to_json() for s in specs],
    }
