"""Manifests: parsing, defaults, the config hash, run planning, and every kind of bad input."""

from __future__ import annotations

import dataclasses
import hashlib
import json
from io import StringIO
from pathlib import Path

import gymnasium as gym
import numpy as np
import pytest
from rich.console import Console

from harness.cli import ExitCode, main
from harness.core.errors import ManifestError
from harness.manifest.loader import load_manifest, parse_manifest
from harness.manifest.policy import GatePolicy
from harness.trainers.tabular import TabularQSettings

MANIFESTS = Path(__file__).resolve().parent.parent / "manifests"

BASE = """\
name = "tiny"
description = "a tiny manifest"

[task]
id = "FrozenLake-v1"
options = { is_slippery = false }

[trainer]
use = "tabular-q"

[trainer.settings]
discount = 0.9

[budget]
env_steps = 1000

[evaluation]
every = 500
episodes = 4
episode_seed = 3

[seeds]
count = 3
root = 11
"""


def manifest_text(old: str = "", new: str = "", *, append: str = "") -> str:
    if old:
        assert old in BASE, old  # guards the test itself, not user input
    return BASE.replace(old, new) + append


def parse(text: str):
    return parse_manifest(text, path="m.toml")


@pytest.mark.parametrize("name", ["frozenlake-q.toml", "taxi-q.toml"])
def test_shipped_manifests_load_with_the_registered_step_limits(name):
    manifest = load_manifest(MANIFESTS / name)
    # Step limits read from gymnasium's registry: FrozenLake-v1 100, Taxi-v4 200.
    assert manifest.task.max_episode_steps == gym.spec(manifest.task.id).max_episode_steps
    assert manifest.trainer == "tabular-q"
    assert len(manifest.runs()) == len(manifest.seeds) == 10


def test_defaults_are_filled_and_the_hash_is_sha256_of_canonical_json():
    manifest = parse(manifest_text())
    assert manifest.settings == dataclasses.asdict(TabularQSettings(discount=0.9))  # defaults filled in
    assert manifest.task.max_episode_steps == gym.spec("FrozenLake-v1").max_episode_steps
    assert manifest.evaluation.episodes == 4 and manifest.evaluation.epsilon == 0.0
    assert manifest.check == GatePolicy() and manifest.references == () and manifest.pins is None
    # The hash is SHA-256 (FIPS 180-4) of JSON with sorted keys and no whitespace.
    text = json.dumps(manifest.resolved_config(), sort_keys=True, separators=(",", ":"))
    assert manifest.config_hash == "sha256:" + hashlib.sha256(text.encode()).hexdigest()
    assert set(manifest.resolved_config()) == {"task", "trainer", "settings", "budget", "evaluation", "seeds"}


def test_hash_ignores_what_does_not_change_training():
    base = parse(manifest_text()).config_hash
    renamed = manifest_text('name = "tiny"\ndescription = "a tiny manifest"', 'name = "other"\ndescription = "x"',
                            append="[check]\nalpha = 0.01\n")
    assert parse(renamed).config_hash == base
    explicit_default = manifest_text("discount = 0.9", "discount = 0.9\nstep_size = 0.1")
    assert parse(explicit_default).config_hash == base  # an explicit default is the same config
    assert parse(manifest_text("discount = 0.9", "discount = 0.8")).config_hash != base
    assert parse(manifest_text("env_steps = 1000", "env_steps = 1001")).config_hash != base
    assert parse(manifest_text("root = 11", "root = 12")).config_hash != base


def test_runs_follow_numpy_seedsequence_spawn():
    manifest = parse(manifest_text())
    runs = manifest.runs()
    assert [r.index for r in runs] == [0, 1, 2]
    # Child i of SeedSequence(root).spawn(n), as numpy documents spawning.
    children = np.random.SeedSequence(11).spawn(3)
    for run, child in zip(runs, children, strict=True):
        assert np.array_equal(run.seed.sequence().generate_state(4), child.generate_state(4))
        assert run.config_hash == manifest.config_hash and run.config == manifest.settings
        assert run.checkpoint_steps() == (0, 500, 1000)
    explicit = parse(manifest_text("count = 3\nroot = 11", "values = [5, 2]"))
    assert [s.label for s in explicit.seeds] == ["5", "2"]


def test_task_without_a_registered_step_limit_needs_one():
    text = manifest_text('id = "FrozenLake-v1"\noptions = { is_slippery = false }', 'id = "CliffWalking-v1"')
    assert gym.spec("CliffWalking-v1").max_episode_steps is None  # gymnasium registers no limit
    with pytest.raises(ManifestError, match=r"\[task.episode_step_limit\]: .*set `episode_step_limit = N`"):
        parse(text)
    limited = parse(text.replace('id = "CliffWalking-v1"', 'id = "CliffWalking-v1"\nepisode_step_limit = 50'))
    assert limited.task.max_episode_steps == 50


def test_references_and_check_are_resolved():
    text = manifest_text(append='[check]\nmetrics = ["final"]\n\n[[reference]]\nmetric = "final"\nmean = 0.7\n'
                         'sd = 0.1\nseeds = 5\nsource = "a paper, 2020, table 1"\n')
    manifest = parse(text)
    assert manifest.check.metrics == ("final",)
    assert manifest.references[0].mean == 0.7 and manifest.references[0].seeds == 5


BAD = [
    # (what, old, new, append, key, message pattern)
    ("unknown key", "every = 500", "evry = 500", "", "evaluation.evry", r"Did you mean 'every'\?"),
    ("unknown setting", "discount = 0.9", "discont = 0.9", "", "trainer.settings.discont",
     r"Did you mean 'discount'\?"),
    ("unknown table", "", "", "[seed]\ncount = 1\n", "seed", r"Did you mean 'seeds'\?"),
    ("wrong type", "env_steps = 1000", 'env_steps = "1000"', "", "budget.env_steps", r"must be an integer"),
    ("budget zero", "env_steps = 1000", "env_steps = 0", "", "budget.env_steps", r"must be a positive integer"),
    ("budget negative", "env_steps = 1000", "env_steps = -5", "", "budget.env_steps", r"positive integer"),
    ("discount > 1", "discount = 0.9", "discount = 1.5", "", "trainer.settings.discount",
     r"must be a number in \[0, 1\]"),
    ("discount < 0", "discount = 0.9", "discount = -0.1", "", "trainer.settings.discount", r"in \[0, 1\]"),
    ("interval > budget", "every = 500", "every = 5000", "", "evaluation.every",
     r"more than the budget of 1000 steps; lower `every` or raise \[budget\] env_steps"),
    ("duplicate seeds", "count = 3\nroot = 11", "values = [1, 2, 1]", "", "seeds.values",
     r"must not repeat a seed, got duplicates \[1\]"),
    ("both seed forms", "count = 3", "count = 3\nvalues = [1]", "", "seeds.count", r"give either"),
    ("unknown gym id", 'id = "FrozenLake-v1"', 'id = "FrozenLak-v1"', "", "task.id",
     r"not a task in gymnasium's registry.*Did you mean 'FrozenLake-v1'"),
    ("deprecated gym id", 'id = "FrozenLake-v1"\noptions = { is_slippery = false }', 'id = "Taxi-v3"', "",
     "task.id", r"Please use `Taxi-v4`"),
    ("unknown env option", "is_slippery = false", "is_slipery = false", "", "task.options.is_slipery",
     r"'FrozenLake-v1' takes no option 'is_slipery'. Did you mean 'is_slippery'\?"),
    ("reserved env option", "is_slippery = false", "max_episode_steps = 9", "", "task.options.max_episode_steps",
     r"use `episode_step_limit` in \[task\]"),
    ("unknown trainer", 'use = "tabular-q"', 'use = "tabluar-q"', "", "trainer.use",
     r"Did you mean 'tabular-q'\?"),
    ("bad name", 'name = "tiny"', 'name = "has space"', "", "name", r"file-safe name"),
    ("bad check", "", "", "[check]\nalpah = 0.1\n", "check.alpah", r"Did you mean 'alpha'\?"),
    ("bad reference", "", "", '[[reference]]\nmetric = "final"\nmean = 1.0\nseeds = 5\nsource = "x"\n',
     "reference[0].sd", r"exactly one of `sd`"),
    ("partial pins", "", "", '[pins]\nnumpy = "2.0"\n', "pins.python", r"is required"),
]


@pytest.mark.parametrize(("what", "old", "new", "append", "key", "pattern"), BAD, ids=[b[0] for b in BAD])
def test_bad_manifest_names_file_key_and_fix(what, old, new, append, key, pattern):
    with pytest.raises(ManifestError, match=pattern) as info:
        parse(manifest_text(old, new, append=append))
    assert info.value.key == key
    assert str(info.value).startswith(f"m.toml [{key}]: ")


DQN = """\
[trainer]
use = "dqn"

[trainer.settings]
hidden = {hidden}
discount = {discount}
"""


@pytest.mark.parametrize(
    ("hidden", "discount", "key", "pattern"),
    [("[]", "0.99", "trainer.settings.hidden", r"non-empty"),
     ("[64, 64]", "1.01", "trainer.settings.discount", r"discount|\[0, 1\]"),
     ("[64, 0]", "0.99", "trainer.settings.hidden", r"positive")],
)
def test_dqn_settings_are_validated_through_the_manifest(hidden, discount, key, pattern):
    text = manifest_text('[trainer]\nuse = "tabular-q"\n\n[trainer.settings]\ndiscount = 0.9\n',
                         DQN.format(hidden=hidden, discount=discount))
    text = text.replace('id = "FrozenLake-v1"\noptions = { is_slippery = false }', 'id = "CartPole-v1"')
    with pytest.raises(ManifestError, match=pattern) as info:
        parse(text)
    assert info.value.key == key


def test_toml_syntax_error_gives_the_line():
    with pytest.raises(ManifestError, match=r"^m.toml: is not valid TOML: .*\(at line 5, column 20\)") as info:
        parse(manifest_text('id = "FrozenLake-v1"', 'id = "FrozenLake-v1'))
    assert info.value.path == "m.toml"


def test_missing_file():
    with pytest.raises(ManifestError, match=r"nope.toml: no such file"):
        load_manifest("nope.toml")


@pytest.mark.parametrize(("what", "old", "new", "append", "key", "pattern"), BAD, ids=[b[0] for b in BAD])
def test_cli_exits_2_and_writes_nothing_on_a_bad_manifest(tmp_path, what, old, new, append, key, pattern):
    path = tmp_path / "bad.toml"
    path.write_text(manifest_text(old, new, append=append), encoding="utf-8")
    before = path.read_bytes()
    for command in ("pin", "drift"):
        out = StringIO()
        code = main([command, str(path)], console=Console(file=out, width=400))
        assert code == ExitCode.BAD_INPUT == 2
        assert f"bad.toml [{key}]: " in out.getvalue()  # file and key path, unmangled by the renderer
    assert path.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["bad.toml"]
