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

import json
import math
import time
import traceback
from collections.abc import Callable, Iterable, Iterator

from threadpoolctl import threadpool_limits

from harness.curves import Checkpoint, LearningCurve
from harness.spec import RunSpec

__all__ = ["lockstep_size", "run_task"]

Emit = Callable[[int, str, int, float], None]


# TEMPORARY bridge until harness.trainers.registry and harness.pins land (helper H3).
import dataclasses, importlib, platform  # noqa: E402


@dataclasses.dataclass(frozen=True)
class _Entry:
    train: Callable
    train_lockstep: Callable | None
    lockstep_size: Callable[[dict], int]


def resolve_trainer(name: str) -> _Entry:
    target = {"tabular-q": "harness.trainers.tabular:train", "dqn": "harness.trainers.dqn:train"}.get(name, name)
    mod_name, _, attr = target.partition(":")
    mod = importlib.import_module(mod_name)
    lock = getattr(mod, "train_lockstep", None) if attr == "train" else None
    size = getattr(mod, "lockstep_size", None) if lock is not None else None
    return _Entry(getattr(mod, attr), lock, (lambda cfg: size(cfg)) if size else (lambda cfg: 1))


def installed_versions() -> dict[str, str]:
    import numpy, gymnasium, harness
    return {"python": platform.python_version(), "numpy": numpy.__version__, "gymnasium": gymnasium.__version__, "rl-harness": harness.__version__}


def lockstep_size(spec: RunSpec) -> int:
    """How many seeds the run's trainer trains together in one process (1 without lockstep)."""
    return resolve_trainer(spec.trainer).lockstep_size(spec.config)


def _stream(specs: list[RunSpec]) -> Iterable[tuple[Checkpoint, ...]]:
    entry = resolve_trainer(specs[0].trainer)
    if len(specs) == 1:
        return ((cp,) for cp in entry.train(specs[0]))
    return entry.train_lockstep(specs)


def _check(cp: object, spec: RunSpec, expected: int | None) -> str | None:
    if not isinstance(cp, Checkpoint):
        return f"trainer yielded {type(cp).__name__} {cp!r}, expected a harness.curves.Checkpoint"
    if expected is None:
        return f"trainer yielded a checkpoint at step {cp.step} after the last planned step {spec.budget}"
    if cp.step != expected:
        return f"trainer yielded a checkpoint at step {cp.step}, expected step {expected} (plan {list(spec.checkpoint_steps())})"
    if not cp.finite:
        bad = sorted({repr(r) for r in cp.returns if not math.isfinite(r)})
        return f"non-finite evaluation return ({', '.join(bad)}) at step {cp.step}"
    return None


def _train(specs: list[RunSpec], emit: Emit | None) -> tuple[list[list[Checkpoint]], list[str | None]]:
    plan = specs[0].checkpoint_steps()
    curves: list[list[Checkpoint]] = [[] for _ in specs]
    failures: list[str | None] = [None] * len(specs)
    it: Iterator = iter(_stream(specs))
    n = 0
    try:
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
    except Exception:
        reason = traceback.format_exc()
        failures = [f if f is not None else reason for f in failures]
    for k, spec in enumerate(specs):
        if failures[k] is None and len(curves[k]) != len(plan):
            failures[k] = f"trainer stopped after {len(curves[k])} of {len(plan)} checkpoints (plan {list(plan)})"
    close = getattr(it, "close", None)
    if close is not None:
        close()
    return curves, failures


def run_task(payload: str, emit: Emit | None = None) -> dict:
    """Train the runs of a task (JSON from :meth:`Task.payload`); return plain data.

    Parameters
    ----------
    payload
        ``{"runs": [RunSpec.to_json(), ...]}`` as JSON text.
    emit
        Called with ``(index, seed label, step, mean return)`` after each accepted checkpoint.

    Returns
    -------
    dict
        ``{"runs": [{"index", "curve", "failure"}, ...], "versions": {...}, "wall_seconds": float}``
        where ``curve`` is ``LearningCurve.to_json()`` or ``None``.
    """
    specs = [RunSpec.from_json(d) for d in json.loads(payload)["runs"]]
    start = time.perf_counter()
    with threadpool_limits(limits=1):
        curves, failures = _train(specs, emit)
        versions = dict(installed_versions())
    runs = [
        {
            "index": spec.index,
            "curve": LearningCurve(tuple(cps)).to_json() if failure is None else None,
            "failure": failure,
        }
        for spec, cps, failure in zip(specs, curves, failures, strict=True)
    ]
    return {"runs": runs, "versions": versions, "wall_seconds": time.perf_counter() - start}
