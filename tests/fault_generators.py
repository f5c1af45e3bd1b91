"""Seeded generators of malformed manifests and damaged or crafted baselines and results.

Used by ``tests/test_fault_sweep.py`` (a fast sample) and ``benchmarks/fault_sweep.py`` (the
full counts, before and after a change). Every case goes through the ``rlharness`` command
in-process; a case "crashes" when an exception escapes ``main``, the exit code is 70 (internal
error) or the output shows a traceback. A case "imports" when a module named by the data leaves
its marker file. Mutations come from ``numpy.random.default_rng(SeedSequence(seed))``: the same
seed gives the same cases. Only ``harness.cli.main`` and ``harness.core.spec.sha256_of`` are
used, so the generators run unchanged against older versions of rl-harness.
"""

from __future__ import annotations

import contextlib
import copy
import dataclasses
import importlib
import io
import json
import signal
import sys
from collections import Counter
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

import numpy as np
from crafting import TOY, copy_results, evil_module, record, resign_baseline, resign_results

__all__ = ["BASE_MANIFESTS", "Sweep", "data_cases", "manifest_cases", "record_toy", "run_case", "sweep"]

TABULAR = """name = "fuzz-q"
[task]
id = "FrozenLake-v1"
options = { is_slippery = false, map_name = "4x4" }
episode_step_limit = 100
[trainer]
use = "tabular-q"
[trainer.settings]
discount = 0.9
step_size = 0.5
explore_decay_steps = 1000
[budget]
env_steps = 2000
[evaluation]
every = 500
episodes = 5
[seeds]
values = [1, 2, 3]
[check]
margin = 0.1
strict = true
[[reference]]
metric = "final"
mean = 1.0
se = 0.1
seeds = 5
source = "invented for the fault sweep"
"""

BASE_MANIFESTS = (TOY, TABULAR)

#: Replacement values, as TOML text: wrong types, limits, non-finite numbers, code-naming strings.
TOML_VALUES = (
    '"x"', "true", "false", "-1", "0", "1e308", "nan", "inf", "-inf", "99999999999999999999", "[]",
    "[[[[[]]]]]", "{}", "1979-05-27", "07:32:00", '"CartPole-v1"', '"no_such_module:Evil-v0"', '"os:system"',
    '"builtins:eval"', '"sys:exit"', "3.5", '""', '"' + "a" * 300 + '"', '[1, "a"]', "{ a = 1 }",
    "10000000000", "1000000000", "-0.0", '"../../etc/passwd"', '"dqn"', "[1, 1, 1]", "0.5",
    '"broken_syntax:train"', '"raises_on_import:train"', '"exits_on_import:train"', '"opens_missing_file:train"',
)

#: Trainer modules written beside the manifests: each fails (or exits) while being imported.
BROKEN_MODULES = {
    "broken_syntax": "def train(run:\n",
    "raises_on_import": "raise RuntimeError('broken on purpose')\n",
    "exits_on_import": "import sys\nsys.exit(0)\n",
    "opens_missing_file": "open('no-such-file-next-to-the-module.txt')\n",
}

#: Replacement values for JSON data: wrong types, limits, code-naming strings.
JSON_VALUES = (
    "x", True, False, None, -1, 0, 2**70, 10**400, 1e308, -0.0, 3.5, [], {}, [[[[]]]], {"a": 1}, "",
    "no_such_module:Evil-v0", "../../outside.json", "sha256:" + "0" * 64, [1, "a"], "a" * 1000,
)


@dataclasses.dataclass
class Sweep:
    """Counts of one sweep: cases, exit codes, crashes (tracebacks) and imports from data."""

    cases: int = 0
    codes: Counter = dataclasses.field(default_factory=Counter)
    crashes: list = dataclasses.field(default_factory=list)
    imports: int = 0
    import_attempts: int = 0

    def add(self, label: str, code: int | str, crashed: bool) -> None:
        self.cases += 1
        self.codes[code] += 1
        if crashed:
            self.crashes.append(label)


class _Hung(BaseException):
    """Raised by SIGALRM in a case that runs too long (not an Exception: ``main`` must not catch it)."""


def _alarm(signum: int, frame: object) -> None:
    raise _Hung()


def run_case(argv: list[str], *, limit: float = 30.0) -> tuple[int | str, str, bool]:
    """Run ``rlharness ARGV`` in-process; return (exit code or exception name, output, crashed).

    A case still running after ``limit`` seconds is stopped and counted as ``"hang"`` (a crash).
    """
    from rich.console import Console

    from harness.cli import main

    out = io.StringIO()
    console = Console(file=out, width=200, color_system=None)
    previous = signal.signal(signal.SIGALRM, _alarm)
    signal.setitimer(signal.ITIMER_REAL, limit)
    try:
        with contextlib.redirect_stderr(io.StringIO()) as err:
            code: int | str = int(main([str(a) for a in argv], console=console))
    except KeyboardInterrupt:
        raise
    except _Hung:
        return "hang", out.getvalue(), True
    except BaseException as exc:  # noqa: BLE001 - an escaping exception is exactly what is counted
        return type(exc).__name__, out.getvalue(), True
    finally:
        signal.setitimer(signal.ITIMER_REAL, 0)
        signal.signal(signal.SIGALRM, previous)
    text = out.getvalue() + err.getvalue()
    return code, text, code == 70 or "Traceback (most recent call last)" in text


#: Keys with the values known to have crashed or hung the harness (issue 13), tried on purpose.
RISKY = (
    ("use", ('"broken_syntax:train"', '"raises_on_import:train"', '"exits_on_import:train"',
             '"opens_missing_file:train"', '"builtins:print"', '"sys:exit"')),
    ("count", ("100000", "1000000000", "1000000000000")),
    ("values", ("[-1, 2]", "[1, 1]", "[true]", "[]")),
    ("id", ('"no_such_module:Evil-v0"', '"Taxi-v3"', '"CliffWalking-v1"')),
    ("episodes", ("0", "1000000000000")),
    ("metrics", ('["steps-to-threshold"]', '["nope"]', "[]")),
)


def _mutate_toml(text: str, rng: np.random.Generator) -> str | bytes:
    lines = text.splitlines()
    op = int(rng.integers(14))
    if op >= 12:  # a value known to have caused trouble, on a key that takes it
        key, values = RISKY[int(rng.integers(len(RISKY)))]
        value = values[int(rng.integers(len(values)))]
        hits = [n for n, line in enumerate(lines) if line.split("=", 1)[0].strip() == key]
        if hits:
            lines[hits[0]] = f"{key} = {value}"
        else:
            lines.append(f"{key} = {value}")
        return "\n".join(lines) + "\n"
    i = int(rng.integers(len(lines)))
    valued = [n for n, line in enumerate(lines) if "=" in line and not line.startswith("[")]
    if op <= 3 and valued:  # a value of another type or out of range (the commonest mistake)
        n = valued[int(rng.integers(len(valued)))]
        key = lines[n].split("=", 1)[0]
        lines[n] = f"{key}= {TOML_VALUES[int(rng.integers(len(TOML_VALUES)))]}"
    elif op == 4:
        del lines[i]
    elif op == 5:
        lines.insert(i, lines[i])
    elif op == 6 and valued:  # a misspelt key
        n = valued[int(rng.integers(len(valued)))]
        key, value = lines[n].split("=", 1)
        key = key.strip()
        j = int(rng.integers(len(key)))
        lines[n] = f"{key[:j] + key[j + 1:] or 'k'} ={value}"
    elif op == 7:
        return text[: int(rng.integers(len(text)))]
    elif op == 8:
        j = int(rng.integers(len(lines)))
        lines[i], lines[j] = lines[j], lines[i]
    elif op == 9:
        headers = [n for n, line in enumerate(lines) if line.startswith("[")]
        lines[headers[int(rng.integers(len(headers)))]] = ["[nonsense]", "[[task]]", "[trainer.settings.deep]", "[seeds"][
            int(rng.integers(4))]
    elif op == 10:
        raw = text.encode()
        j = int(rng.integers(len(raw)))
        return raw[:j] + bytes(rng.integers(0, 256, size=int(rng.integers(1, 8)), dtype=np.uint8)) + raw[j:]
    else:
        lines.insert(i, ["[extra]", "x = 1", "= 3", "[check.margins]", 'metrics = ["nope"]', "count = 3"][int(rng.integers(6))])
    return "\n".join(lines) + "\n"


def manifest_cases(seed: int, n: int, folder: Path) -> Iterator[tuple[str, list[str], None]]:
    """``n`` malformed manifests written under ``folder``, each with the command that reads it."""
    rng = np.random.default_rng(np.random.SeedSequence(seed))
    folder.mkdir(parents=True, exist_ok=True)
    for name, source in BROKEN_MODULES.items():
        (folder / f"{name}.py").write_text(source)
    for k in range(n):
        text = BASE_MANIFESTS[k % len(BASE_MANIFESTS)]
        mutated: str | bytes = text
        for _ in range(1 + int(rng.integers(3))):
            mutated = _mutate_toml(mutated if isinstance(mutated, str) else mutated.decode("utf-8", "replace"), rng)
        path = folder / f"m{k:04d}.toml"
        path.write_bytes(mutated if isinstance(mutated, bytes) else mutated.encode("utf-8", "surrogatepass"))
        yield f"manifest #{k}", ["verify", str(path), "--no-run", "--results", str(folder / "no-results"),
                                 "--baselines", str(folder / "no-baselines")], None


def record_toy(folder: Path) -> Path:
    """Record the toy manifest's results and baseline under ``folder`` (a few seconds), plus
    ``threshold.toml``: the same manifest with ``[check] threshold`` set."""
    record(folder)
    (folder / "threshold.toml").write_text(TOY.replace("[check]\n", "[check]\nthreshold = 400.0\n"))
    return folder


def _paths(value: Any, prefix: tuple = ()) -> list[tuple]:
    if isinstance(value, dict):
        return [p for k, v in value.items() for p in _paths(v, (*prefix, k))] or [prefix]
    if isinstance(value, list):
        return [p for k, v in enumerate(value) for p in _paths(v, (*prefix, k))] or [prefix]
    return [prefix]


def _set(data: Any, path: tuple, value: Any) -> None:
    for key in path[:-1]:
        data = data[key]
    if path:
        data[path[-1]] = value


def _json_edit(data: Any, rng: np.random.Generator) -> None:
    """One structural edit of parsed JSON: a leaf replaced, a key dropped, a list item dropped or doubled."""
    paths = [p for p in _paths(data) if p]
    path = paths[int(rng.integers(len(paths)))]
    op = int(rng.integers(4))
    parent = data
    for key in path[:-1]:
        parent = parent[key]
    if op <= 1:
        _set(data, path, copy.deepcopy(JSON_VALUES[int(rng.integers(len(JSON_VALUES)))]))
    elif op == 2:
        del parent[path[-1]]
    elif isinstance(parent, list):
        parent.insert(path[-1], copy.deepcopy(parent[path[-1]]))
    else:
        parent[path[-1] + "_extra" if isinstance(path[-1], str) else path[-1]] = copy.deepcopy(parent[path[-1]])


_TEXT_LITERALS = ("NaN", "Infinity", "-Infinity", "1e999", "9" * 5000, "[" * 50_000 + "]" * 50_000, "true", '"0"')


def _text_edit(text: str, rng: np.random.Generator) -> str | bytes:
    op = int(rng.integers(4))
    if op == 0:  # a non-standard literal where a number stands
        anchors = [k for k, ch in enumerate(text) if ch.isdigit() and text[k - 1] in " [,-"]
        k = anchors[int(rng.integers(len(anchors)))]
        end = k
        while end < len(text) and (text[end].isdigit() or text[end] in ".e-+"):
            end += 1
        return text[:k] + _TEXT_LITERALS[int(rng.integers(len(_TEXT_LITERALS)))] + text[end:]
    if op == 1:
        return text[: int(rng.integers(len(text)))]
    if op == 2:
        raw = bytearray(text.encode())
        raw[int(rng.integers(len(raw)))] ^= 1 << int(rng.integers(8))
        return bytes(raw)
    k = int(rng.integers(len(text)))
    return text[:k] + ["\x00", "\udcff", "}", "{", ",", "\ufeff"][int(rng.integers(6))] + text[k:]


def data_cases(seed: int, n: int, recorded: Path, folder: Path, *, evil_share: float = 0.1
               ) -> Iterator[tuple[str, list[str], Path | None]]:
    """``n`` damaged or crafted baselines and results folders, each with the command that reads it.

    Half are baselines (read by ``verify --no-run``), half results folders (read by ``compare``,
    some with ``--manifest``). Most edits keep every hash consistent (:mod:`crafting`), so only
    semantic validation can catch them; some damage the text (literals, truncation, bit flips).
    About ``evil_share`` of the cases name a module that leaves a marker when imported as the
    task id; the third element is that marker (``None`` otherwise).
    """
    rng = np.random.default_rng(np.random.SeedSequence(seed))
    folder.mkdir(parents=True, exist_ok=True)
    if str(folder) not in sys.path:
        sys.path.insert(0, str(folder))
    baseline_text = (recorded / "bl" / "fuzz.json").read_text()
    for k in range(n):
        evil = rng.random() < evil_share
        marker = folder / f"MARKER-{k}" if evil else None
        task_id = evil_module(folder, f"fuzz_evil_{seed}_{k}", marker) if evil else None
        if k % 2 == 0:
            data = json.loads(baseline_text)
            if evil:
                data["config"]["task"]["id"] = task_id
                text: str | bytes = resign_baseline(data)
            elif rng.random() < 0.75:
                for _ in range(1 + int(rng.integers(2))):
                    _json_edit(data, rng)
                text = resign_baseline(data, rehash_config=bool(rng.random() < 0.7))
            else:
                text = _text_edit(baseline_text, rng)
            path = folder / f"b{k:04d}.json"
            path.write_bytes(text if isinstance(text, bytes) else text.encode("utf-8", "surrogatepass"))
            yield (f"baseline #{k}", ["verify", recorded / "m.toml", "--no-run", "--results", recorded / "res",
                                      "--baseline", path], marker)
            continue
        target = copy_results(recorded / "res", folder / f"r{k:04d}")
        manifest = [] if rng.random() < 0.5 else ["--manifest", recorded / "threshold.toml"]
        if evil:
            def edit(records, index, task_id=task_id):
                for r in records:
                    r["spec"]["task"]["id"] = task_id
            resign_results(target, edit)
        elif rng.random() < 0.75:
            def edit(records, index, rng=rng):
                _json_edit(records if rng.random() < 0.8 else index, rng)
            try:
                resign_results(target, edit, rehash_config=bool(rng.random() < 0.7))
            except (KeyError, TypeError, IndexError, AttributeError):
                pass  # the edit broke what the re-signing needs: the files stay as edited so far
        else:
            victim = sorted(target.glob("*.json"))[int(rng.integers(4))]
            damaged = _text_edit(victim.read_text(), rng)
            victim.write_bytes(damaged if isinstance(damaged, bytes) else damaged.encode("utf-8", "surrogatepass"))
        yield f"results #{k}", ["compare", recorded / "res", target, *manifest], marker


def sweep(cases: Iterator, on_case: Callable[[str, Any, str], None] | None = None, *, limit: float = 30.0) -> Sweep:
    """Run every case (each stopped as a hang after ``limit`` seconds); count exit codes, crashes, imports."""
    for module in ("harness.manifest.loader", "harness.gate.verify", "harness.cli.verify", "harness.cli.compare"):
        importlib.import_module(module)  # first imports (gymnasium, scipy) are slow: not inside a timed case
    out = Sweep()
    for label, argv, marker in cases:
        code, text, crashed = run_case(argv, limit=limit)
        out.add(label, code, crashed)
        if marker is not None:
            out.import_attempts += 1
            out.imports += marker.exists()
        if on_case is not None:
            on_case(label, code, text)
    return out
