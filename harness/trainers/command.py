"""The command trainer: any training program, run as an argument list, read through its curve file.

A manifest names the program instead of a Python function::

    [trainer]
    command = ["{python}", "train.py", "--seed", "{seed}", "--steps", "{env_steps}", "--out", "{curve_file}"]
    folder = "."                      # working folder, relative to the manifest's folder
    environment = { OMP_NUM_THREADS = "1" }
    time_limit = 120                  # seconds per seed
    sources = ["train.py", "lib/*.py"]

Every seed runs the program once, in its own process group (``start_new_session``),
with stdout and stderr going to ``<results>/runs/seed-<label>/output.log``. The
program writes its learning curve to ``{curve_file}`` in the format of
:mod:`harness.core.curvefile`; the harness reads the file while the program runs,
yields each checkpoint as its last episode arrives, and checks it against the
manifest's plan. Any failure (non-zero exit, a signal, a malformed or missing
curve file, a non-finite return, steps off the plan, the time limit) stops the
program's whole process group and fails that seed with a :class:`ProgramError`
whose last line is the reason. Determinism is the program's business; the exact
check of ``verify`` reports whether it is.
"""

from __future__ import annotations

import atexit
import dataclasses
import hashlib
import multiprocessing
import os
import re
import shlex
import signal
import subprocess
import sys
import threading
import time
from collections.abc import Iterator, Mapping
from pathlib import Path
from typing import BinaryIO

import numpy as np

from harness.core.curvefile import CurveAssembler, CurveFileError, LineParser
from harness.core.curves import Checkpoint
from harness.core.errors import ConfigError, HarnessError, did_you_mean
from harness.core.seeding import RunSeed
from harness.core.spec import RunSpec

__all__ = [
    "COMMAND_TRAINER",
    "ENV_PREFIX",
    "OUTPUT_PREFIX",
    "PLACEHOLDERS",
    "CommandSettings",
    "ProgramError",
    "Workspace",
    "expand",
    "git_commit",
    "program_seed",
    "run_folder",
    "source_files",
    "source_fingerprint",
    "stop_programs",
    "train",
]

#: The trainer name a command manifest resolves to (``RunSpec.trainer``).
COMMAND_TRAINER = "command"
#: Prefix of the environment variables that carry the placeholders' values.
ENV_PREFIX = "RLHARNESS_"
#: Placeholder names (``{name}`` in the command and in environment values) and what they become.
PLACEHOLDERS: Mapping[str, str] = {
    "seed": "the integer the program seeds itself with",
    "seed_index": "the seed's position in the manifest's seed list (0, 1, ...)",
    "env_steps": "the training budget in environment steps ([budget] env_steps)",
    "eval_every": "environment steps between checkpoints ([evaluation] every)",
    "eval_episodes": "evaluation episodes per checkpoint ([evaluation] episodes)",
    "eval_seed": "the root of the evaluation episodes' seeds ([evaluation] episode_seed)",
    "task_id": "the task's id ([task] id)",
    "curve_file": "absolute path of the curve file the program writes",
    "run_folder": "absolute path of the run's own folder (the program may write anything there)",
    "python": "the Python interpreter running rl-harness",
}
_NO_VARIABLE = frozenset({"python"})
_TEMPLATE = re.compile(r"\{\{|\}\}|\{([^{}]*)\}|[{}]")
_ENV_NAME = re.compile(r"[A-Za-z_][A-Za-z0-9_]*\Z")
_CURVE_NAME = "curve.csv"
_LOG_NAME = "output.log"
_TAIL_LINES = 15
#: Prefix of the program's output lines quoted in a failure reason.
OUTPUT_PREFIX = "  | "
_GRACE = 0.5  # seconds a stopped program gets between SIGTERM and SIGKILL


class ProgramError(HarnessError, RuntimeError):
    """The program's run failed; the message ends with a one-line reason."""


def _check_template(text: str, key: str) -> None:
    for match in _TEMPLATE.finditer(text):
        token = match.group(0)
        if token in ("{{", "}}"):
            continue
        if match.group(1) is None:
            raise ConfigError(f"lone {token!r} in {text!r}; write {token * 2!r} for a literal brace", key=key)
        if match.group(1) not in PLACEHOLDERS:
            raise ConfigError(f"unknown placeholder {token} in {text!r}.{did_you_mean(match.group(1), PLACEHOLDERS)}",
                              key=key)


def expand(text: str, values: Mapping[str, str]) -> str:
    """Replace ``{name}`` by ``values[name]``, ``{{`` and ``}}`` by single braces.

    Examples
    --------
    >>> expand("--seed={seed} {{x}}", {"seed": "7"})
    '--seed=7 {x}'
    """
    def replace(match: re.Match) -> str:
        token = match.group(0)
        return token[0] if token in ("{{", "}}") else values[match.group(1)]
    return _TEMPLATE.sub(replace, text)


@dataclasses.dataclass(frozen=True, slots=True)
class CommandSettings:
    """The ``[trainer]`` keys of a command manifest (all but ``time_limit`` enter the config hash).

    Attributes
    ----------
    command
        The argument list; ``{placeholder}`` values are filled in per seed.
    folder
        Working folder, relative to the manifest's folder.
    environment
        Extra environment variables (values may hold placeholders); ``RLHARNESS_*`` are reserved.
    sources
        Globs, relative to ``folder``, of the files whose content fingerprints the trainer;
        by default every argument of the command that names a file in ``folder``.
    """

    command: tuple[str, ...]
    folder: str = "."
    environment: Mapping[str, str] = dataclasses.field(default_factory=dict)
    sources: tuple[str, ...] = ()

    def __post_init__(self) -> None:
        if not self.command or not self.command[0]:
            raise ConfigError("must name the program: a non-empty argument list such as [\"python\", \"train.py\"]",
                              key="command")
        for i, arg in enumerate(self.command):
            _check_template(arg, f"command[{i}]")
        if Path(self.folder).is_absolute():
            raise ConfigError(f"must be relative to the manifest's folder, got {self.folder!r}", key="folder")
        for name, value in self.environment.items():
            if not _ENV_NAME.match(name):
                raise ConfigError(f"{name!r} is not an environment variable name (letters, digits, '_')",
                                  key=f"environment.{name}")
            if name.upper().startswith(ENV_PREFIX):
                raise ConfigError(f"{ENV_PREFIX}* variables are set by rl-harness; rename {name!r}",
                                  key=f"environment.{name}")
            _check_template(value, f"environment.{name}")
        for i, pattern in enumerate(self.sources):
            if not pattern or Path(pattern).is_absolute():
                raise ConfigError(f"must be a glob relative to `folder`, got {pattern!r}", key=f"sources[{i}]")


@dataclasses.dataclass(frozen=True, slots=True)
class Workspace:
    """Where a command run happens: the manifest's folder, the results folder and the time limit."""

    manifest_dir: Path
    results_dir: Path
    time_limit: float | None = None


def program_seed(seed: RunSeed) -> int:
    """The integer a program seeds itself with: the value of ``values = [...]`` seeds, else the
    first 32-bit word of the seed's SeedSequence (``SeedSequence(root, spawn_key=(i,))``).

    Examples
    --------
    >>> program_seed(RunSeed(7))
    7
    """
    if not seed.spawn_key:
        return seed.entropy
    return int(seed.sequence().generate_state(1, np.uint32)[0])


def run_folder(results_dir: Path, run: RunSpec) -> Path:
    """``<results>/runs/seed-<label>/``: the run's own folder, holding its curve file and log."""
    label = re.sub(r"[^A-Za-z0-9_.-]", "-", run.seed.label.replace("/", "-"))
    return Path(results_dir) / "runs" / f"seed-{label}"


def _values(run: RunSpec, folder: Path) -> dict[str, str]:
    return {
        "seed": str(program_seed(run.seed)),
        "seed_index": str(run.index),
        "env_steps": str(run.budget),
        "eval_every": str(run.evaluation.interval),
        "eval_episodes": str(run.evaluation.episodes),
        "eval_seed": str(run.evaluation.seed),
        "task_id": run.task.id,
        "curve_file": str(folder / _CURVE_NAME),
        "run_folder": str(folder),
        "python": sys.executable,
    }


def source_files(settings: CommandSettings, folder: Path) -> list[Path]:
    """The files whose content fingerprints the program, sorted (see :attr:`CommandSettings.sources`)."""
    if settings.sources:
        found = {p for pattern in settings.sources for p in folder.glob(pattern) if p.is_file()}
    else:
        found = {folder / a for a in settings.command if "{" not in a and a and (folder / a).is_file()}
    return sorted(found)


def source_fingerprint(settings: CommandSettings, folder: Path) -> str:
    """``"sha256:<hex>"`` of the source files' relative paths and contents."""
    digest = hashlib.sha256()
    for path in source_files(settings, folder):
        name = path.relative_to(folder).as_posix() if path.is_relative_to(folder) else path.as_posix()
        digest.update(name.encode() + b"\0" + path.read_bytes() + b"\0")
    return "sha256:" + digest.hexdigest()


def git_commit(folder: Path) -> str | None:
    """The commit checked out in ``folder`` (with ``+changes`` when tracked files differ from it), or ``None``."""
    try:
        head = subprocess.run(["git", "-C", str(folder), "rev-parse", "HEAD"], capture_output=True, text=True, timeout=10)
        if head.returncode != 0:
            return None
        status = subprocess.run(["git", "-C", str(folder), "status", "--porcelain", "--untracked-files=no", "--",
                                 "."], capture_output=True, text=True, timeout=10)
    except (OSError, subprocess.TimeoutExpired):
        return None
    return head.stdout.strip() + ("+changes" if status.stdout.strip() else "")


# Programs running in this process, by process group id, so that a signal handler (a worker told
# to stop) and atexit reach every program still running; and the guard that stops them if this
# process dies without running any code (SIGKILL), with the process it belongs to.
_LIVE: dict[int, subprocess.Popen] = {}
_GUARD: tuple[int, subprocess.Popen] | None = None
_GUARD_LOCK = threading.Lock()
_GUARD_SCRIPT = Path(__file__).with_name("orphan_guard.py")


def _start_guard() -> subprocess.Popen:
    """Start :mod:`harness.trainers.orphan_guard` for this process, told of every program running now."""
    guard = subprocess.Popen([sys.executable, "-I", "-S", str(_GUARD_SCRIPT)], stdin=subprocess.PIPE,
                             stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, start_new_session=True)
    guard.stdin.write(b"".join(b"+%d\n" % pgid for pgid in _LIVE))
    guard.stdin.flush()
    return guard


def _tell_guard(line: bytes) -> None:
    """Send ``+PGID``/``-PGID`` to this process's guard, starting it (again) when it is not running.

    A process forked from this one inherits the module's state but not the guard's loyalty: the
    guard watches the process that started it, so a child of a fork starts its own.
    """
    global _GUARD
    with _GUARD_LOCK:
        if _GUARD is not None and _GUARD[0] == os.getpid() and _GUARD[1].poll() is None:
            try:
                _GUARD[1].stdin.write(line)
                _GUARD[1].stdin.flush()
                return
            except OSError:  # the guard died (someone killed it): start a new one
                pass
        _GUARD = (os.getpid(), _start_guard())


def _stop(proc: subprocess.Popen, *, grace: float = _GRACE) -> None:
    """End the program's whole process group: SIGTERM, up to ``grace`` seconds, then SIGKILL."""
    pgid = proc.pid
    if proc.poll() is None:
        try:
            os.killpg(pgid, signal.SIGTERM)
            proc.wait(timeout=grace)
        except (ProcessLookupError, PermissionError, subprocess.TimeoutExpired):
            pass
    try:
        os.killpg(pgid, signal.SIGKILL)  # also what the program left behind in its group
    except (ProcessLookupError, PermissionError):
        pass
    if _LIVE.pop(pgid, None) is not None:
        _tell_guard(b"-%d\n" % pgid)  # before the wait: until it is reaped, no other process can get this id
    proc.wait()


def stop_programs() -> None:
    """Stop every program this process started that is still running (workers call it on SIGTERM)."""
    for proc in list(_LIVE.values()):
        _stop(proc, grace=0.2)


def _at_exit() -> None:
    """Stop the programs, then let the guard go (end of file on its pipe) and reap it."""
    stop_programs()
    if _GUARD is not None and _GUARD[0] == os.getpid():
        _GUARD[1].stdin.close()
        _GUARD[1].wait()


atexit.register(_at_exit)


def _tail(log: Path) -> str:
    try:
        with open(log, "rb") as stream:
            stream.seek(max(0, stream.seek(0, os.SEEK_END) - 8192))
            text = stream.read().decode("utf-8", errors="replace")
    except OSError:
        return ""
    lines = [line for line in text.splitlines() if not line.startswith("rlharness:")][-_TAIL_LINES:]
    if not lines:
        return f"the program wrote nothing to {log}\n"
    return f"last lines of the program's output ({log}):\n" + "".join(f"{OUTPUT_PREFIX}{line}\n" for line in lines)


def _exit_reason(code: int) -> str:
    if code < 0:
        try:
            return f"was killed by signal {signal.Signals(-code).name}"
        except ValueError:
            return f"was killed by signal {-code}"
    return f"exited with code {code}"


def _parent_gone() -> bool:
    parent = multiprocessing.parent_process()
    return parent is not None and not parent.is_alive()


def _check_same_file(curve: Path, stream: BinaryIO) -> None:
    """The program must append to its curve file: replacing or truncating it would mix two versions."""
    try:
        now = os.stat(curve)
    except FileNotFoundError:
        now = None
    if now is None or now.st_ino != os.fstat(stream.fileno()).st_ino or now.st_size < stream.tell():
        raise CurveFileError("the curve file was replaced, truncated or removed while the program ran; write it once, "
                             "appending lines (or write it whole when training ends)", file=str(curve), line=1)


def train(run: RunSpec, workspace: Workspace) -> Iterator[Checkpoint]:
    """Run the program for one seed and yield its checkpoints as the curve file grows.

    Raises
    ------
    ProgramError
        The program could not start, exited non-zero or by a signal, ran past the time
        limit, wrote no curve file or a malformed one, or a curve off the manifest's plan.
        Its process group is stopped first; the message ends with the reason.
    """
    settings = CommandSettings(**run.config)
    cwd = (Path(workspace.manifest_dir) / settings.folder).resolve()
    folder = run_folder(Path(workspace.results_dir).resolve(), run)
    folder.mkdir(parents=True, exist_ok=True)
    values = _values(run, folder)
    curve, log = Path(values["curve_file"]), folder / _LOG_NAME
    curve.unlink(missing_ok=True)
    argv = [expand(a, values) for a in settings.command]
    env = {**os.environ, **{k: expand(v, values) for k, v in settings.environment.items()},
           **{ENV_PREFIX + k.upper(): v for k, v in values.items() if k not in _NO_VARIABLE}}
    commit = git_commit(cwd)
    with open(log, "wb") as out:
        out.write(f"rlharness: {shlex.join(argv)}\nrlharness: in {cwd}"
                  f"{f' (git {commit})' if commit else ''}\n".encode())
        out.flush()
        try:
            proc = subprocess.Popen(argv, cwd=cwd, env=env, stdin=subprocess.DEVNULL, stdout=out,
                                    stderr=subprocess.STDOUT, start_new_session=True)
        except OSError as exc:
            raise ProgramError(f"cannot start the program {shlex.join(argv)} in {cwd}: {exc}") from None
    _LIVE[proc.pid] = proc
    parser = LineParser(str(curve))
    assembler = CurveAssembler(str(curve), run.checkpoint_steps(), run.evaluation.episodes)
    deadline = None if workspace.time_limit is None else time.monotonic() + workspace.time_limit
    stream = None
    try:
        _tell_guard(b"+%d\n" % proc.pid)  # from here on the program cannot outlive this process
        try:
            while True:
                code = proc.poll()
                if stream is None and curve.exists():
                    stream = open(curve, "rb")
                if stream is not None:
                    _check_same_file(curve, stream)
                    for row in parser.feed(stream.read()):
                        checkpoint = assembler.add(row)
                        if checkpoint is not None:
                            yield checkpoint
                if code is not None:
                    break
                if deadline is not None and time.monotonic() >= deadline:
                    _stop(proc)
                    raise ProgramError(_tail(log) + f"the program ran past the time limit of {workspace.time_limit:g} s "
                                       "per seed; its process group was stopped")
                if _parent_gone():
                    raise ProgramError("the rl-harness process that started this run is gone")
                try:
                    proc.wait(timeout=0.05)
                except subprocess.TimeoutExpired:
                    pass
            if code != 0:
                raise ProgramError(_tail(log) + f"the program {_exit_reason(code)} (output: {log})")
            if stream is None:
                raise ProgramError(_tail(log) + f"the program exited without writing its curve file {curve} "
                                   "(pass {curve_file} to it, or read $RLHARNESS_CURVE_FILE)")
            for row in parser.close():
                checkpoint = assembler.add(row)
                if checkpoint is not None:
                    yield checkpoint
            assembler.finish()
        except CurveFileError as exc:
            raise ProgramError(_tail(log) + f"bad curve file: {exc}") from None
    finally:
        if stream is not None:
            stream.close()
        _stop(proc)
