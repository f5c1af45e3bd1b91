"""A command manifest around tests/programs/curve_writer.py, for the command-trainer and dask tests."""

from __future__ import annotations

import shutil
from pathlib import Path

PROGRAM = Path(__file__).parent / "programs" / "curve_writer.py"

MANIFEST = """
name = "toy-command"
[task]
id = "Toy-v0"
gymnasium = false
[trainer]
command = ["{{python}}", "curve_writer.py", "--seed", "{{seed}}", "--steps", "{{env_steps}}", "--every",
           "{{eval_every}}", "--episodes", "{{eval_episodes}}", "--out", "{{curve_file}}"{extra}]
{keys}
[budget]
env_steps = 100
[evaluation]
every = 25
episodes = 3
[seeds]
values = {seeds}
[check]
threshold = 1.0
floor = 0.0
"""


def write_manifest(folder: Path, *, extra: list[str] = (), keys: str = "", seeds=(1, 2, 3)) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    shutil.copy(PROGRAM, folder / "curve_writer.py")
    text = MANIFEST.format(extra="".join(f', "{a}"' for a in extra), keys=keys, seeds=list(seeds))
    path = folder / "m.toml"
    path.write_text(text)
    return path
