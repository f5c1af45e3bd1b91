"""What an attacker or a careless edit can do to stored data, with every hash recomputed.

Checksums and the index's SHA-256 prove nothing against a deliberate edit: anyone can
recompute them. These helpers edit a results folder or a baseline and then make every hash
consistent again, exactly as such a person would, so that tests (and
``benchmarks/fault_sweep.py``) check that the readers' semantic validation, not the hashes,
refuses the edit. They use only ``harness.core.spec.sha256_of`` and plain JSON, so they work
on older versions of rl-harness too (for before/after figures).
"""

from __future__ import annotations

import hashlib
import io
import json
import shutil
from collections.abc import Callable
from pathlib import Path
from typing import Any

from harness.core.spec import sha256_of

__all__ = ["TOY", "cli", "copy_results", "evil_module", "record", "resign_baseline", "resign_results"]

#: A toy manifest (``runner_toys:toy``, 3 seeds, a few seconds) with a published reference, so
#: that ``verify`` also runs without a recorded baseline.
TOY = """name = "fuzz"
description = "a manifest to damage"
[task]
id = "CartPole-v1"
options = {}
[trainer]
use = "runner_toys:toy"
[trainer.settings]
pause = 0.0
[budget]
env_steps = 100
[evaluation]
every = 25
episodes = 3
episode_seed = 1
epsilon = 0.0
[seeds]
count = 3
root = 7
[check]
metrics = ["final", "auc"]
alpha = 0.05
[[reference]]
metric = "final"
mean = 1.0
sd = 1.0
seeds = 10
source = "invented for the fault tests"
"""


def cli(*argv: Any) -> tuple[int, str]:
    """``rlharness ARGV`` in-process: the exit code and the output on one line (rich wraps long lines)."""
    from rich.console import Console

    from harness.cli import main

    out = io.StringIO()
    code = main([str(a) for a in argv], console=Console(file=out, width=400, color_system=None))
    return code, " ".join(out.getvalue().split())


def record(folder: Path, manifest: str = TOY) -> Path:
    """Write ``manifest`` to ``folder/m.toml`` and record its results (``res/``) and baseline (``bl/``)."""
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "m.toml").write_text(manifest)
    code, text = cli("record", folder / "m.toml", "--results", folder / "res", "--baselines", folder / "bl",
                     "--no-cache", "--workers", "1")
    if code != 0:
        raise RuntimeError(f"recording {folder / 'm.toml'} failed ({code}): {text}")
    return folder


def copy_results(source: Path, target: Path) -> Path:
    """A copy of a results folder's JSON files."""
    target.mkdir(parents=True, exist_ok=True)
    for f in Path(source).glob("*.json"):
        shutil.copyfile(f, target / f.name)
    return target


def _plan_hash(specs: list[dict]) -> str:
    first = specs[0]
    return sha256_of({"task": first["task"], "trainer": first["trainer"], "settings": first["config"],
                      "budget": first["budget"], "evaluation": first["evaluation"],
                      "seeds": [s["seed"] for s in specs]})


def resign_results(folder: Path, edit: Callable[[list[dict], dict], None] | None = None, *,
                   rehash_config: bool = True) -> None:
    """Apply ``edit(records, index)`` to the parsed seed files and index, then make every hash consistent.

    With ``rehash_config`` the config hash (index and every spec) is recomputed from the edited
    specs, as the loader would compute it for a manifest describing them.
    """
    folder = Path(folder)
    index = json.loads((folder / "index.json").read_text())
    records = [json.loads((folder / run["file"]).read_text()) for run in index["runs"]]
    if edit is not None:
        edit(records, index)
    if rehash_config and records and all(isinstance(r, dict) and isinstance(r.get("spec"), dict) for r in records):
        try:
            digest = _plan_hash([r["spec"] for r in records])
        except (KeyError, TypeError, ValueError, IndexError):
            digest = None
        if digest is not None:
            index["config_hash"] = digest
            for r in records:
                r["spec"]["config_hash"] = digest
    for run, record in zip(index["runs"], records):
        text = record if isinstance(record, str) else json.dumps(record, indent=2)
        (folder / run["file"]).write_text(text)
        run["sha256"] = hashlib.sha256(text.encode("utf-8")).hexdigest()
    (folder / "index.json").write_text(json.dumps(index, indent=2))


def resign_baseline(data: dict[str, Any], *, rehash_config: bool = True) -> str:
    """The baseline's JSON text with its config hash (optionally) and checksum recomputed."""
    data = {k: v for k, v in data.items() if k != "checksum"}
    if rehash_config and isinstance(data.get("config"), dict):
        try:
            data["config_hash"] = sha256_of(data["config"])
        except (TypeError, ValueError):
            pass
    try:
        data["checksum"] = sha256_of(data)
    except (TypeError, ValueError):
        data["checksum"] = "sha256:" + "0" * 64
    return json.dumps(data, indent=2)


def evil_module(folder: Path, name: str, marker: Path) -> str:
    """Write ``<folder>/<name>.py``, which creates ``marker`` when imported; return a task id naming it."""
    (Path(folder) / f"{name}.py").write_text(
        f"from pathlib import Path\nPath({str(marker)!r}).write_text('imported from data')\n"
        "import gymnasium\n"
        f"gymnasium.register('Evil-v0', entry_point='gymnasium.envs.classic_control:CartPoleEnv')\n"
    )
    return f"{name}:Evil-v0"
