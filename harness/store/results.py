"""Results on disk: one versioned JSON file per seed plus an index, written atomically.

A results folder (default ``results/<manifest name>/``) holds

``seed-<label>.json``
    One run: its :class:`~harness.core.spec.RunSpec`, status, learning curve (per
    checkpoint the step, the mean and every evaluation return), failure reason
    and the installed versions it ran with. Nothing time-dependent goes in, so
    the same run gives the same bytes whatever the worker count, executor,
    order or resumption.
``index.json``
    The manifest name, config hash and, per seed in the manifest's order, the
    file, its SHA-256, status, where the record came from (trained, cache,
    resumed) and the wall time. Written last, when every seed has a record.

Every file carries a ``schema`` field; readers refuse unknown schemas, files
whose checksum does not match the index and records that contradict the
index, with a :class:`~harness.core.errors.ResultsError` naming the file and the fix.
Writes go to a temporary file in the same folder and are renamed into place.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import math
import os
import re
from collections.abc import Mapping
from pathlib import Path
from typing import Any

from harness.core.curves import Checkpoint, LearningCurve
from harness.core.atomic import atomic_write_text
from harness.core.errors import ResultsError
from harness.core.jsondata import as_int, as_mapping, as_number, as_str, loads_strict
from harness.core.spec import RunSpec, canonical_json, plan_config, sha256_of

__all__ = [
    "INDEX_FILE",
    "RECORD_SCHEMA",
    "RESULTS_SCHEMA",
    "ResultSet",
    "RunRecord",
    "TRAINER_SOURCE",
    "read_index",
    "read_record",
    "read_results",
    "record_file_name",
    "record_from_json",
    "record_text",
    "same_plan",
    "same_spec",
    "write_index",
    "write_record",
    "write_results",
]

#: Key in ``RunRecord.versions`` of the trainer's source fingerprint
#: (``harness.trainers.fingerprint.source_fingerprint``): a run of other code is never reused.
TRAINER_SOURCE = "trainer_source"

RECORD_SCHEMA = "rlharness.run/1"
RESULTS_SCHEMA = "rlharness.results/1"
INDEX_FILE = "index.json"
STATUSES = ("ok", "failed")
_UNSAFE = re.compile(r"[^A-Za-z0-9_.-]")


@dataclasses.dataclass(frozen=True, slots=True)
class RunRecord:
    """The outcome of one training run.

    Attributes
    ----------
    spec
        The run that was asked for.
    status
        ``"ok"`` or ``"failed"``.
    curve
        The learning curve; ``None`` when the run failed.
    failure
        Why the run failed (the traceback for exceptions); ``None`` when it succeeded.
    versions
        The installed versions the run trained with (see ``harness.manifest.pins``), and under
        :data:`TRAINER_SOURCE` the fingerprint of the trainer's source code.
    """

    spec: RunSpec
    status: str
    curve: LearningCurve | None
    failure: str | None
    versions: Mapping[str, str]

    def __post_init__(self) -> None:
        if self.status not in STATUSES:
            raise ValueError(f"`status` must be one of {STATUSES}, got {self.status!r}")
        if (self.status == "ok") != (self.curve is not None):
            raise ValueError(f"a run with status {self.status!r} must {'' if self.status == 'ok' else 'not '}have a curve")
        if (self.status == "failed") != (self.failure is not None):
            raise ValueError(f"a run with status {self.status!r} must {'' if self.status == 'failed' else 'not '}give a failure reason")
        if self.curve is not None and not all(c.finite for c in self.curve.checkpoints):
            raise ValueError("a run with status 'ok' must have finite evaluation returns; record it as failed")

    @property
    def ok(self) -> bool:
        return self.status == "ok"


@dataclasses.dataclass(frozen=True, slots=True)
class ResultSet:
    """Every run of one manifest, in the manifest's seed order."""

    manifest: str
    config_hash: str
    records: tuple[RunRecord, ...]

    def __post_init__(self) -> None:
        indices = [r.spec.index for r in self.records]
        if indices != list(range(len(indices))):
            raise ValueError(f"records must be in seed order 0..{len(indices) - 1}, got indices {indices}")
        for r in self.records:
            if r.spec.config_hash != self.config_hash or r.spec.manifest != self.manifest:
                raise ValueError(
                    f"record of seed {r.spec.seed.label} belongs to {r.spec.manifest!r} "
                    f"({r.spec.config_hash}), not {self.manifest!r} ({self.config_hash})"
                )

    def completed(self) -> tuple[RunRecord, ...]:
        """The runs that finished with a curve."""
        return tuple(r for r in self.records if r.ok)

    def failed(self) -> tuple[RunRecord, ...]:
        """The runs that failed (exception, non-finite returns, time limit, dead worker)."""
        return tuple(r for r in self.records if not r.ok)


def same_spec(a: RunSpec, b: RunSpec) -> bool:
    """Whether two specs describe the same run, as their JSON says (a tuple and a list compare equal)."""
    return canonical_json(a.to_json()) == canonical_json(b.to_json())


def same_plan(a: RunSpec, b: RunSpec) -> bool:
    """Whether two runs belong to one plan: equal but for their seed and position."""
    strip = ("seed", "index")
    return canonical_json({k: v for k, v in a.to_json().items() if k not in strip}) == canonical_json(
        {k: v for k, v in b.to_json().items() if k not in strip})


def record_file_name(spec: RunSpec) -> str:
    """``seed-<label>.json`` with the label made file-safe (``"42/3"`` -> ``seed-42-3.json``)."""
    return "seed-" + _UNSAFE.sub("-", spec.seed.label.replace("/", "-")) + ".json"


def _dumps(data: Any) -> str:
    return json.dumps(data, indent=2, sort_keys=True, ensure_ascii=False, allow_nan=False) + "\n"


def record_text(record: RunRecord) -> str:
    """The exact file content of one run (deterministic: same record, same bytes)."""
    curve = None
    if record.curve is not None:
        curve = [
            {"step": c.step, "mean": c.mean, "returns": list(c.returns)} for c in record.curve.checkpoints
        ]
    return _dumps(
        {
            "schema": RECORD_SCHEMA,
            "spec": record.spec.to_json(),
            "status": record.status,
            "curve": curve,
            "failure": record.failure,
            "versions": dict(sorted(record.versions.items())),
        }
    )


def record_from_json(data: Any, *, where: str) -> RunRecord:
    """Rebuild a :class:`RunRecord` from its JSON; ``where`` names the source in errors."""
    if not isinstance(data, dict) or data.get("schema") != RECORD_SCHEMA:
        found = data.get("schema") if isinstance(data, dict) else type(data).__name__
        raise ResultsError(
            f"{where}: not an rl-harness run record (schema {found!r}, expected {RECORD_SCHEMA!r}); "
            "delete it and run the manifest again"
        )
    try:
        curve = None
        if data["curve"] is not None:
            if not isinstance(data["curve"], list) or not data["curve"]:
                raise ValueError("[curve] must be a non-empty list of checkpoints or null")
            checkpoints = []
            for n, c in enumerate(data["curve"]):
                c = as_mapping(c, f"curve[{n}]")
                returns = c["returns"]
                if not isinstance(returns, list):
                    raise ValueError(f"[curve[{n}].returns] must be a list of numbers")
                cp = Checkpoint(as_int(c["step"], f"curve[{n}].step", minimum=0),
                                tuple(as_number(r, f"curve[{n}].returns") for r in returns))
                if not math.isclose(cp.mean, as_number(c["mean"], f"curve[{n}].mean"), rel_tol=1e-12, abs_tol=1e-12):
                    raise ValueError(f"checkpoint at step {cp.step}: stored mean {c['mean']} != mean of returns {cp.mean}")
                checkpoints.append(cp)
            curve = LearningCurve(tuple(checkpoints))
        failure = data["failure"]
        return RunRecord(
            spec=RunSpec.from_json(data["spec"]),
            status=as_str(data["status"], "status"),
            curve=curve,
            failure=None if failure is None else as_str(failure, "failure"),
            versions={as_str(k, "versions"): as_str(v, f"versions.{k}")
                      for k, v in as_mapping(data["versions"], "versions").items()},
        )
    except (KeyError, TypeError, ValueError, AttributeError) as exc:
        raise ResultsError(f"{where}: malformed run record ({type(exc).__name__}: {exc}); delete it and run the manifest again") from exc


def _load_json(path: Path) -> tuple[Any, str]:
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise ResultsError(f"{path}: file not found; run the manifest (`rlharness run`) to create it") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise ResultsError(f"{path}: cannot be read ({exc}); delete it and run the manifest again") from None
    try:
        return loads_strict(text), text
    except ValueError as exc:
        raise ResultsError(f"{path}: not valid JSON ({exc}); the file is damaged, delete it and run the manifest again") from None


def write_record(folder: str | os.PathLike, record: RunRecord) -> Path:
    """Write one run's file into ``folder`` (created if needed), atomically; return its path."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / record_file_name(record.spec)
    atomic_write_text(path, record_text(record))
    return path


def read_record(path: str | os.PathLike) -> RunRecord:
    """Read one run's file; :class:`ResultsError` if it is missing, damaged or of another schema."""
    path = Path(path)
    data, _ = _load_json(path)
    return record_from_json(data, where=str(path))


def write_index(
    folder: str | os.PathLike,
    result_set: ResultSet,
    *,
    timings: Mapping[int, float] | None = None,
    sources: Mapping[int, str] | None = None,
) -> Path:
    """Write ``index.json`` for records already written with :func:`write_record`.

    The index stores each file's SHA-256, so it must be written after the files.
    """
    folder = Path(folder)
    runs = []
    for record in result_set.records:
        name = record_file_name(record.spec)
        digest = hashlib.sha256((folder / name).read_bytes()).hexdigest()
        entry: dict[str, Any] = {
            "index": record.spec.index,
            "seed": record.spec.seed.label,
            "file": name,
            "sha256": digest,
            "status": record.status,
        }
        if timings is not None and record.spec.index in timings:
            entry["wall_seconds"] = round(float(timings[record.spec.index]), 6)
        if sources is not None and record.spec.index in sources:
            entry["source"] = sources[record.spec.index]
        runs.append(entry)
    index = {
        "schema": RESULTS_SCHEMA,
        "manifest": result_set.manifest,
        "config_hash": result_set.config_hash,
        "runs": runs,
    }
    path = folder / INDEX_FILE
    atomic_write_text(path, _dumps(index))
    return path


def write_results(
    folder: str | os.PathLike,
    result_set: ResultSet,
    *,
    timings: Mapping[int, float] | None = None,
    sources: Mapping[int, str] | None = None,
) -> Path:
    """Write every run's file and then the index, each atomically; return the index path.

    Parameters
    ----------
    folder
        The results folder; created if missing.
    result_set
        The records, in the manifest's seed order.
    timings
        Wall time in seconds per run index; stored in the index only.
    sources
        Where each run's record came from (``"trained"``, ``"cache"``, ``"resumed"``); index only.
    """
    for record in result_set.records:
        write_record(folder, record)
    return write_index(folder, result_set, timings=timings, sources=sources)


def read_index(folder: str | os.PathLike) -> dict:
    """The parsed ``index.json`` of a results folder (checked for its schema)."""
    path = Path(folder) / INDEX_FILE
    data, _ = _load_json(path)
    if not isinstance(data, dict) or data.get("schema") != RESULTS_SCHEMA:
        found = data.get("schema") if isinstance(data, dict) else type(data).__name__
        raise ResultsError(
            f"{path}: unknown results schema {found!r} (expected {RESULTS_SCHEMA!r}); "
            "run the manifest again with this version of rl-harness"
        )
    return data


def read_results(folder: str | os.PathLike) -> ResultSet:
    """Read a results folder written by :func:`write_results` or ``rlharness run``.

    Raises
    ------
    ResultsError
        The index or a run file is missing, damaged, of an unknown schema, fails its
        checksum, or belongs to another manifest or configuration.
    """
    folder = Path(folder)
    index = read_index(folder)
    where = folder / INDEX_FILE
    try:
        manifest, config_hash = as_str(index["manifest"], "manifest"), as_str(index["config_hash"], "config_hash")
        runs = index["runs"]
        if not isinstance(runs, list) or not runs:
            raise ValueError("[runs] must be a non-empty list")
        entries = [(as_str(e["file"], f"runs[{n}].file"), as_str(e["sha256"], f"runs[{n}].sha256"),
                    e.get("seed")) for n, e in enumerate(runs)]
    except (KeyError, TypeError, ValueError) as exc:
        raise ResultsError(f"{where}: malformed index ({type(exc).__name__}: {exc}); run the manifest again") from exc
    records = []
    for position, (name, digest, label) in enumerate(entries):
        if Path(name).name != name or name in ("", ".", ".."):
            raise ResultsError(f"{where}: run file name {name!r} leaves the results folder; the index is damaged")
        path = folder / name
        data, text = _load_json(path)
        if hashlib.sha256(text.encode("utf-8")).hexdigest() != digest:
            raise ResultsError(
                f"{path}: content does not match its SHA-256 in {where}; the file was changed after the run. "
                "Delete the folder and run the manifest again"
            )
        record = record_from_json(data, where=str(path))
        if record.spec.index != position or record.spec.config_hash != config_hash or record.spec.manifest != manifest:
            raise ResultsError(
                f"{path}: belongs to {record.spec.manifest!r} seed #{record.spec.index} ({record.spec.config_hash}), "
                f"but {where} lists it as {manifest!r} seed #{position} ({config_hash}); run the manifest again"
            )
        if label is not None and label != record.spec.seed.label:
            raise ResultsError(f"{where}: [runs[{position}].seed] is {label!r}, but {path} holds seed "
                               f"{record.spec.seed.label}; the index was edited, run the manifest again")
        if records and not same_plan(records[0].spec, record.spec):
            raise ResultsError(f"{path}: [spec] differs from the first run's in more than its seed and position "
                               f"(task, trainer, settings, budget or evaluation); runs of one folder share one plan: "
                               "the folder was edited, run the manifest again")
        if any(r.spec.seed == record.spec.seed for r in records):
            raise ResultsError(f"{path}: [spec.seed] {record.spec.seed.label} is also the seed of an earlier run in "
                               f"{where}: a seed counts once; the folder was edited, run the manifest again")
        records.append(record)
    planned = sha256_of(plan_config([r.spec for r in records]))
    if planned != config_hash:  # the hash is only a claim in the files: check it against the runs they hold
        raise ResultsError(
            f"{where}: [config_hash] {config_hash} is not the hash of the configuration its {len(records)} runs "
            f"describe ({planned}): a run was edited, dropped or added; run the manifest again into a fresh folder"
        )
    return ResultSet(manifest=manifest, config_hash=config_hash, records=tuple(records))
