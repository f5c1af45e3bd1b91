"""Trainer resolution: built-ins, lazy loading, user entry points with and without a settings schema."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest

from harness.core.curves import Checkpoint
from harness.core.errors import ManifestError
from harness.manifest.loader import load_manifest
from harness.trainers import dqn, tabular
from harness.trainers.registry import BUILTIN_TRAINERS, load_entry_point, resolve_trainer

USER_TRAINER = '''\
import dataclasses
from harness.core.curves import Checkpoint
from harness.core.errors import ConfigError


@dataclasses.dataclass(frozen=True, slots=True)
class CountSettings:
    reward: float = 1.0
    sizes: tuple[int, ...] = (2,)

    def __post_init__(self):
        if self.reward < 0:
            raise ConfigError(f"must not be negative, got {self.reward!r}", key="reward")


def train(run):
    settings = CountSettings(**run.config)
    draw = float(run.streams().explore.random())
    for step in run.checkpoint_steps():
        yield Checkpoint(step, (settings.reward * step + draw,))


train.settings_type = CountSettings


def loose(run):
    for step in run.checkpoint_steps():
        yield Checkpoint(step, (float(len(run.config)),))


bad_schema = lambda run: ()
bad_schema.settings_type = 42
not_callable = 3
'''

MANIFEST = """\
name = "user"

[task]
id = "CartPole-v1"

[trainer]
use = "{use}"

[trainer.settings]
{settings}

[budget]
env_steps = 20

[evaluation]
every = 10
episodes = 1

[seeds]
values = [4, 9]
"""


@pytest.fixture
def user_folder(tmp_path, request):
    """A folder holding a uniquely named trainer module (not on sys.path) and a way to write manifests."""
    module = f"user_trainer_{abs(hash(request.node.name))}"
    (tmp_path / f"{module}.py").write_text(USER_TRAINER, encoding="utf-8")

    def write(function: str, settings: str = "") -> Path:
        path = tmp_path / "m.toml"
        path.write_text(MANIFEST.format(use=f"{module}:{function}", settings=settings), encoding="utf-8")
        return path

    yield module, write
    sys.modules.pop(module, None)


def test_builtins_resolve_to_their_modules():
    q = resolve_trainer("tabular-q")
    assert (q.train, q.settings_type, q.train_lockstep) == (tabular.train, tabular.TabularQSettings, None)
    d = resolve_trainer("dqn")
    assert (d.train, d.settings_type) == (dqn.train, dqn.DQNSettings)
    assert d.train_lockstep is dqn.train_lockstep and d.lockstep_size is dqn.lockstep_size
    assert sorted(BUILTIN_TRAINERS) == ["dqn", "tabular-q"]


def test_importing_the_registry_imports_no_trainer():
    code = "import sys, harness.trainers.registry; print(sorted(m for m in sys.modules if m.startswith('harness.trainers.')))"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True,
                         cwd=Path(__file__).resolve().parent.parent).stdout
    assert out.strip() == "['harness.trainers.registry']"


def test_unknown_builtin_suggests_the_closest():
    with pytest.raises(ManifestError, match=r"unknown trainer 'dqm'. Did you mean 'dqn'\?.*'package.module:function'"):
        resolve_trainer("dqm")


def test_user_trainer_with_a_settings_type_is_validated_and_runs(user_folder):
    module, write = user_folder
    path = write("train", "sizes = [3, 4]")
    before = list(sys.path)
    manifest = load_manifest(path)  # the module is found in the manifest's folder
    assert sys.path == before  # ... without leaving that folder on sys.path
    assert manifest.settings == {"reward": 1.0, "sizes": (3, 4)}  # defaults filled, arrays as tuples
    trainer = resolve_trainer(manifest.trainer)
    curves = [list(trainer.train(run)) for run in manifest.runs()]
    assert [c.step for c in curves[0]] == [0, 10, 20]
    assert all(isinstance(c, Checkpoint) for c in curves[0])
    assert curves[0] != curves[1]  # each seed draws from its own stream
    with pytest.raises(ManifestError, match=r"\[trainer.settings.reward\]: must not be negative"):
        load_manifest(write("train", "reward = -1.0"))
    with pytest.raises(ManifestError, match=r"\[trainer.settings.rewrad\]: .*Did you mean 'reward'"):
        load_manifest(write("train", "rewrad = 1.0"))


def test_user_trainer_without_settings_type_passes_settings_through(user_folder):
    _, write = user_folder
    manifest = load_manifest(write("loose", 'anything = [1, 2]\nnested = { a = "b" }'))
    assert manifest.settings == {"anything": (1, 2), "nested": {"a": "b"}}


@pytest.mark.parametrize(
    ("function", "pattern"),
    [("trian", r"has no attribute 'trian'. Did you mean 'train'\?"),
     ("bad_schema", r"has `settings_type` = 42; it must be a dataclass"),
     ("not_callable", r"is not a function")],
)
def test_bad_user_entry_points(user_folder, function, pattern):
    _, write = user_folder
    with pytest.raises(ManifestError, match=pattern) as info:
        load_manifest(write(function))
    assert info.value.key == "trainer.use"


def test_unimportable_and_malformed_entry_points():
    with pytest.raises(ManifestError, match=r"cannot import the trainer's module \(ModuleNotFoundError"):
        resolve_trainer("no_such_package_xyz.mod:train")
    with pytest.raises(ManifestError, match=r"must look like 'package.module:function'"):
        resolve_trainer("a:b:c")
    with pytest.raises(ValueError, match=r"must look like"):
        load_entry_point("harness.trainers.tabular")
    assert load_entry_point("harness.trainers.tabular:train") is tabular.train


def test_a_module_with_a_broken_import_is_not_hidden(tmp_path):
    # A module that exists but fails inside must report its own error, not "not found".
    (tmp_path / "broken_trainer_mod.py").write_text("import no_such_dependency_xyz\n", encoding="utf-8")
    with pytest.raises(ManifestError, match=r"No module named 'no_such_dependency_xyz'"):
        resolve_trainer("broken_trainer_mod:train", search_path=tmp_path)
    sys.modules.pop("broken_trainer_mod", None)

