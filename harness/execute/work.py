"""The code that runs inside a worker: train one task and report plain data back.

:func:`run_task` is a module-level function (picklable by reference) that any
executor can call: in a local worker process, or as a dask task. It never
raises for a trainer's fault: an exception, a non-finite evaluation return or a
checkpoint at the wrong step becomes that run's failure reason, and the other
runs of a lockstep group carry on. BLAS is limited to one thread while it
trains (threadpoolctl), so parallel workers do not oversubscribe the cores and
results do not depend on a thread count.
"""

from __future__ import annotations

import functools
import json
import math
import time
import traceback
from collections.abc import Callable, Iterable, Iterator
from pathlib import Path

from threadpoolctl import threadpool_limits

from harness.core.curves import Checkpoint, LearningCurve
from harness.core.jsondata import MAX_ABS_NUMBER
from harness.manifest.pins import installed_pins
from harness.core.spec import RunSpec
from harness.store.results import TRAINER_SOURCE
from harness.trainers import command
from harness.trainers.fingerprint import source_fingerprint
from harness.trainers.registry import resolve_trainer

__all__ = ["installed_versions", "lockstep_size", "run_task", "run_versions"]

Emit = Callable[[int, str, int, float], None]


@functools.cache
def installed_versions() -> dict[str, str]:
    """The installed versions that shape a run's numbers (``harness.manifest.pins``), read once per process."""
    return installed_pins(config_hash="").versions


def run_versions(spec: RunSpec, *, search_path: str | None = None) -> dict[str, str]:
    """What a stored run of ``spec`` must have been made with to be reused: the installed
    versions, and the fingerprint of the trainer's source (``harness.trainers.fingerprint``; for a
    command, ``command.source_fingerprint`` of its source files)."""
    if spec.trainer == command.COMMAND_TRAINER:
        settings = command.CommandSettings(**spec.config)
        folder = (Path(search_path or ".") / settings.folder).resolve()
        return {**installed_versions(), TRAINER_SOURCE: command.source_fingerprint(settings, folder)}
    trainer = resolve_trainer(spec.trainer, search_path=search_path)
    return {**installed_versions(), TRAINER_SOURCE: source_fingerprint(trainer.train)}


def lockstep_size(spec: RunSpec, *, search_path: str | None = None) -> int:
    """How many seeds the run's trainer trains together in one process (1 without lockstep).

    Raises ``ManifestError`` when the trainer cannot be resolved.
    """
    if spec.trainer == command.COMMAND_TRAINER:
        return 1
    trainer = resolve_trainer(spec.trainer, search_path=search_path)
    if trainer.train_lockstep is None or trainer.lockstep_size is None:
        return 1
    settings = trainer.settings_type(**spec.config) if trainer.settings_type is not None else spec.config
    return max(1, int(trainer.lockstep_size(settings)))


def _stream(specs: list[RunSpec], search_path: str | None, workspace: command.Workspace) -> Iterable[tuple[Checkpoint, ...]]:
    if specs[0].trainer == command.COMMAND_TRAINER:
        return ((cp,) for cp in command.train(specs[0], workspace))
    trainer = resolve_trainer(specs[0].trainer, search_path=search_path)
    if len(specs) == 1:
        return ((cp,) for cp in trainer.train(specs[0]))
    return trainer.train_lockstep(specs)


def _check(cp: object, spec: RunSpec, expected: int | None) -> str | None:
    if not isinstance(cp, Checkpoint):
        return f"trainer yielded {type(cp).__name__} {cp!r}, expected a harness.core.curves.Checkpoint"
    if expected is None:
        return f"trainer yielded a checkpoint at step {cp.step} after the last planned step {spec.budget}"
    if cp.step != expected:
        return f"trainer yielded a checkpoint at step {cp.step}, expected step {expected} (plan {list(spec.checkpoint_steps())})"
    if not cp.finite:
        bad = sorted({repr(r) for r in cp.returns if not math.isfinite(r)})
        return f"non-finite evaluation return ({', '.join(bad)}) at step {cp.step}"
    if any(abs(r) > MAX_ABS_NUMBER for r in cp.returns):  # stored, it could not be read back (or summed)
        return f"evaluation return beyond ±{MAX_ABS_NUMBER:g} at step {cp.step}"
    return None


def _train(specs: list[RunSpec], search_path: str | None, emit: Emit | None,
           workspace: command.Workspace) -> tuple[list[list[Checkpoint]], list[str | None]]:
    plan = specs[0].checkpoint_steps()
    curves: list[list[Checkpoint]] = [[] for _ in specs]
    failures: list[str | None] = [None] * len(specs)
    it: Iterator | None = None
    try:
        it = iter(_stream(specs, search_path, workspace))
        for n, group in enumerate(it, start=1):
            if len(group) != len(specs):
                raise RuntimeError(f"lockstep trainer yielded {len(group)} checkpoints for {len(specs)} runs")
            expected = plan[n - 1] if n <= len(plan) else None
            for k, (spec, cp) in enumerate(zip(specs, group, strict=True)):
                if failures[k] is None:
                    failures[k] = _check(cp, spec, expected)
                if failures[k] is None:
                    curves[k].append(cp)
                    if emit is not None:
                        emit(spec.index, spec.seed.label, cp.step, cp.mean)
            if all(f is not None for f in failures):
                break
    except command.ProgramError as exc:  # the program's fault, told in its own words: no traceback of ours
        reason = str(exc)
        failures = [f if f is not None else reason for f in failures]
    except Exception:
        reason = traceback.format_exc()
        failures = [f if f is not None else reason for f in failures]
    finally:  # also when the worker is being stopped (a BaseException): the trainer's cleanup runs now
        close = getattr(it, "close", None) if it is not None else None
        if close is not None:
            close()
    for k, spec in enumerate(specs):
        if failures[k] is None and len(curves[k]) != len(plan):
            failures[k] = f"trainer stopped after {len(curves[k])} of {len(plan)} checkpoints (plan {list(plan)})"
    return curves, failures


def _shifted(emit: Emit | None, offset: int) -> Emit | None:
    """``emit`` reporting ``offset + index`` (itself when the offset is 0)."""
    if emit is None or not offset:
        return emit

    def shifted(index: int, seed: str, step: int, mean: float) -> None:
        emit(offset + index, seed, step, mean)

    return shifted


def run_task(payload: str, emit: Emit | None = None) -> dict:
    """Train the runs of a task (JSON from :meth:`Task.payload`); return plain data.

    Parameters
    ----------
    payload
        ``{"runs": [RunSpec.to_json(), ...], "search_path": folder or null, "results_dir": folder or
        null, "time_limit": seconds or null, "index_offset": int}`` as JSON text; the search path
        is where a user trainer's module may be found (the manifest's folder); a command trainer
        runs in the results folder and stops its program at the time limit; the index offset is
        added to every index reported (the runs keep their own).
    emit
        Called with ``(index, seed label, step, mean return)`` after each accepted checkpoint.

    Returns
    -------
    dict
        ``{"runs": [{"index", "curve", "failure"}, ...], "versions": {...}, "wall_seconds": float}``
        where ``curve`` is ``LearningCurve.to_json()`` or ``None``.
    """
    data = json.loads(payload)
    specs = [RunSpec.from_json(d) for d in data["runs"]]
    offset = int(data.get("index_offset", 0))
    emit = _shifted(emit, offset)
    start = time.perf_counter()
    search_path = data.get("search_path")
    workspace = command.Workspace(Path(search_path or "."), Path(data.get("results_dir") or "."), data.get("time_limit"))
    with threadpool_limits(limits=1):
        curves, failures = _train(specs, search_path, emit, workspace)
        versions = dict(installed_versions())
    runs = [
        {
            "index": offset + spec.index,
            "curve": LearningCurve(tuple(cps)).to_json() if failure is None else None,
            "failure": failure,
        }
        for spec, cps, failure in zip(specs, curves, failures, strict=True)
    ]
    return {"runs": runs, "versions": versions, "wall_seconds": time.perf_counter() - start}
