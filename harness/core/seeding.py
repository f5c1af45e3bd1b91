"""Deterministic seeding: every random draw of a run comes from its own seed.

A run's seed is a :class:`numpy.random.SeedSequence` given by an entropy value
and a spawn key. A manifest either lists seeds explicitly (entropy = the seed,
empty spawn key) or gives a count and a root entropy; then run ``i`` is the
``i``-th child of ``SeedSequence(root).spawn(count)``, i.e. ``SeedSequence(root,
spawn_key=(i,))``, so adding seeds never changes the existing ones.

Each run's sequence is spawned into independent named streams (network
initialisation, exploration, replay sampling, training environment).
Evaluation episodes use one fixed stream shared by all runs and checkpoints, so
every checkpoint of every run is scored on the same episode seeds (common
random numbers); an episode's random actions (evaluation epsilon, the random
policy) come from :func:`episode_action_rng` of its seed, so they are shared
too. The global ``np.random`` state is never touched.
"""

from __future__ import annotations

import dataclasses
import itertools
from collections.abc import Sequence

import numpy as np

from harness.core.jsondata import as_int, as_mapping

__all__ = [
    "MAX_SEEDS",
    "STREAM_NAMES",
    "RunSeed",
    "RunStreams",
    "describe_seed_change",
    "episode_action_rng",
    "episode_seeds",
    "extend_seeds",
    "plan_seeds",
    "run_streams",
    "validate_seed",
]

#: Names of the per-run streams, in spawn order. Appending a name keeps the
#: earlier streams unchanged (SeedSequence children are positional).
STREAM_NAMES = ("init", "explore", "replay", "env")

#: The most seeds one manifest may plan. Far more than any statistical check needs (hundreds
#: settle differences a tenth of a seed-to-seed sd), and small enough that planning, the
#: results folder (a file per seed) and the reports stay quick.
MAX_SEEDS = 10_000


@dataclasses.dataclass(frozen=True, slots=True)
class RunSeed:
    """The seed material of one run: ``SeedSequence(entropy, spawn_key=spawn_key)``."""

    entropy: int
    spawn_key: tuple[int, ...] = ()

    @property
    def label(self) -> str:
        """Short human-readable name: ``"7"`` for an explicit seed, ``"7/3"`` for a spawned one."""
        if not self.spawn_key:
            return str(self.entropy)
        return f"{self.entropy}/" + "/".join(str(k) for k in self.spawn_key)

    def sequence(self) -> np.random.SeedSequence:
        """A fresh SeedSequence (fresh so that spawning from it is repeatable)."""
        return np.random.SeedSequence(self.entropy, spawn_key=self.spawn_key)

    def to_json(self) -> dict:
        return {"entropy": self.entropy, "spawn_key": list(self.spawn_key)}

    @classmethod
    def from_json(cls, data: dict) -> RunSeed:
        """Read back :meth:`to_json`; ``ValueError`` names a field that is not a non-negative integer."""
        data = as_mapping(data, "seed")
        keys = data["spawn_key"]
        if not isinstance(keys, list):
            raise ValueError(f"[seed.spawn_key] must be a list of integers, got {type(keys).__name__}")
        return cls(as_int(data["entropy"], "seed.entropy", minimum=0),
                   tuple(as_int(k, "seed.spawn_key", minimum=0) for k in keys))


@dataclasses.dataclass(frozen=True, slots=True)
class RunStreams:
    """Independent random streams of one run.

    ``env_seed`` is an integer for ``env.reset(seed=...)`` and
    ``env.action_space.seed(...)`` of the training environment.
    """

    init: np.random.Generator
    explore: np.random.Generator
    replay: np.random.Generator
    env_seed: int


def validate_seed(seed: object, *, name: str = "seed") -> int:
    """Return ``seed`` as an int if it is a non-negative integer, else raise ValueError."""
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise ValueError(f"`{name}` must be a non-negative integer, got {seed!r}")
    return int(seed)


def plan_seeds(
    *, seeds: Sequence[int] | None = None, count: int | None = None, root: int | None = None
) -> tuple[RunSeed, ...]:
    """Seeds of all runs of a manifest: an explicit list, or ``count`` children of ``root``.

    Examples
    --------
    >>> [s.label for s in plan_seeds(seeds=[3, 1])]
    ['3', '1']
    >>> [s.label for s in plan_seeds(count=2, root=42)]
    ['42/0', '42/1']
    """
    if (seeds is None) == (count is None):
        raise ValueError("give either `seeds` (a list) or `count` with `root`, not both or neither")
    if seeds is not None:
        values = [validate_seed(s, name=f"seeds[{i}]") for i, s in enumerate(seeds)]
        if not values:
            raise ValueError("`seeds` must list at least one seed, got []")
        if len(values) > MAX_SEEDS:
            raise ValueError(f"`seeds` lists {len(values)} seeds; at most {MAX_SEEDS} are allowed")
        dupes = sorted({v for v in values if values.count(v) > 1})
        if dupes:
            raise ValueError(f"`seeds` must not repeat a seed, got duplicates {dupes}")
        return tuple(RunSeed(v) for v in values)
    n = validate_seed(count, name="count")
    if n < 1:
        raise ValueError(f"`count` must be a positive integer, got {count!r}")
    if n > MAX_SEEDS:
        raise ValueError(f"`count` is {n}; at most {MAX_SEEDS} seeds are allowed")
    if root is None:
        raise ValueError("`root` is required with `count`")
    r = validate_seed(root, name="root")
    return tuple(RunSeed(r, (i,)) for i in range(n))


def _root(seeds: Sequence[RunSeed]) -> int | None:
    """The root when ``seeds`` are exactly the children ``0..n-1`` of one root, else ``None``."""
    if seeds and all(s.entropy == seeds[0].entropy and s.spawn_key == (i,) for i, s in enumerate(seeds)):
        return seeds[0].entropy
    return None


def _origin(seeds: Sequence[RunSeed]) -> str:
    root = _root(seeds)
    if root is not None:
        return f"root {root}"
    labels = [s.label for s in seeds]
    return "seeds " + ", ".join(labels[:4]) + (", ..." if len(labels) > 4 else "")


def describe_seed_change(old: Sequence[RunSeed], new: Sequence[RunSeed]) -> str:
    """A seed change in a few words, for reports: where each side's seeds come from, how many, how many shared.

    Examples
    --------
    >>> describe_seed_change(plan_seeds(count=20, root=1), plan_seeds(count=20, root=2))
    'root 1 -> 2, 20 seeds, 0 shared'
    >>> describe_seed_change(plan_seeds(count=3, root=1), plan_seeds(count=5, root=1))
    'root 1, 3 -> 5 seeds, 3 shared'
    """
    a, b = _origin(old), _origin(new)
    if a == b:
        origin = a
    elif _root(old) is not None and _root(new) is not None:
        origin = f"root {_root(old)} -> {_root(new)}"
    else:
        origin = f"{a} -> {b}"
    count = f"{len(old)} seeds" if len(old) == len(new) else f"{len(old)} -> {len(new)} seeds"
    return f"{origin}, {count}, {len(set(old) & set(new))} shared"


def extend_seeds(own: Sequence[RunSeed], n_seeds: int) -> tuple[RunSeed, ...]:
    """``own`` followed by spawned children of its first seed that it does not use, ``n_seeds`` in all.

    For ``count = c`` and ``root = r`` this is exactly ``count = n_seeds, root = r``: the
    ``c`` seeds are the first of the extended set, so every run of theirs is reused.
    Calibration sets and baselines recorded with more seeds than a gate run
    (``[seeds] baseline_count``) are extended this way.

    Examples
    --------
    >>> [s.label for s in extend_seeds(plan_seeds(count=2, root=9), 4)]
    ['9/0', '9/1', '9/2', '9/3']
    >>> [s.label for s in extend_seeds(plan_seeds(seeds=[3, 5]), 4)]
    ['3', '5', '3/0', '3/1']
    """
    own = tuple(own)
    if not own:
        raise ValueError("`own` must hold at least one seed, got none")
    n = validate_seed(n_seeds, name="n_seeds")
    if n < len(own):
        raise ValueError(f"`n_seeds` must be at least the {len(own)} seeds given, got {n_seeds!r}")
    taken = set(own)
    extra = (s for s in (RunSeed(own[0].entropy, (i,)) for i in itertools.count()) if s not in taken)
    return own + tuple(itertools.islice(extra, n - len(own)))


def run_streams(seed: RunSeed) -> RunStreams:
    """Spawn the named streams of one run from its seed."""
    children = seed.sequence().spawn(len(STREAM_NAMES))
    named = dict(zip(STREAM_NAMES, children, strict=True))
    return RunStreams(
        init=np.random.default_rng(named["init"]),
        explore=np.random.default_rng(named["explore"]),
        replay=np.random.default_rng(named["replay"]),
        env_seed=int(named["env"].generate_state(1)[0]),
    )


def episode_seeds(root: int, episodes: int) -> tuple[int, ...]:
    """The evaluation episode seeds: the same for every run and every checkpoint.

    Examples
    --------
    >>> len(episode_seeds(0, 5)), episode_seeds(0, 5) == episode_seeds(0, 5)
    (5, True)
    """
    root = validate_seed(root, name="evaluation seed")
    state = np.random.SeedSequence(root).generate_state(episodes, dtype=np.uint32)
    return tuple(int(s) for s in state)


def episode_action_rng(episode_seed: int) -> np.random.Generator:
    """The Generator of an evaluation episode's random actions: the one rule for every trainer.

    It is the first child of the episode's seed, ``SeedSequence(episode_seed, spawn_key=(0,))``,
    independent of the environment's own generator (``reset(seed=episode_seed)``). Episode ``e``
    meets the same random numbers at every checkpoint, in every run and whichever trainer (or
    the random policy that sizes a margin) plays it, and however many episodes are played side
    by side.

    Examples
    --------
    >>> a, b = episode_action_rng(5), episode_action_rng(5)
    >>> a.random() == b.random(), episode_action_rng(5).random() == episode_action_rng(6).random()
    (True, False)
    """
    return np.random.default_rng(np.random.SeedSequence(validate_seed(episode_seed, name="episode seed"), spawn_key=(0,)))
