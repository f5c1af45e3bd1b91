"""Baselines: the stored learning curves a manifest's reruns are verified against.

A baseline is one JSON file, ``baselines/<manifest name>.json`` by default,
laid out to be read in a code review: per-seed curves (one line per
checkpoint), the resolved configuration and its hash, the versions the curves
were produced with, the platform, the date, the rl-harness version and a
checksum of the content. The checksum is ``sha256:`` of the canonical JSON
(``harness.core.spec.canonical_json``) of every field except ``checksum`` itself, so
reformatting the file keeps it valid while changing any value (or cutting the
file short) makes :func:`read_baseline` refuse it.

Writes are atomic (temporary file in the same folder, then ``os.replace``) and
refuse to replace an existing baseline unless ``overwrite=True``.
"""

from __future__ import annotations

import dataclasses
import datetime
import json
import os
import platform
from collections.abc import Mapping
from pathlib import Path
from typing import Any, Protocol, runtime_checkable

from harness import __version__
from harness.core.atomic import atomic_write_text
from harness.core.curves import LearningCurve
from harness.core.errors import BaselineError
from harness.core.jsondata import as_mapping, as_str, loads_strict
from harness.core.seeding import RunSeed, extend_seeds
from harness.core.spec import sha256_of
from harness.store.results import ResultSet

__all__ = [
    "BASELINE_SCHEMA",
    "Baseline",
    "RecordedManifest",
    "SeedCurve",
    "baseline_from_results",
    "check_overwrite",
    "default_baseline_path",
    "parse_baseline",
    "read_baseline",
    "write_baseline",
]

#: Schema tag of baseline files; bumped on any incompatible change of the layout.
BASELINE_SCHEMA = "rlharness.baseline/1"

_RECORD_FIX = "record it with `rlharness record MANIFEST`"


@dataclasses.dataclass(frozen=True, slots=True)
class SeedCurve:
    """One seed's learning curve."""

    seed: RunSeed
    curve: LearningCurve


@dataclasses.dataclass(frozen=True, slots=True)
class Baseline:
    """A recorded baseline (see the module docstring for the file layout).

    Attributes
    ----------
    manifest, config_hash, config
        The manifest's name, its config hash and the resolved config the hash was taken of.
    versions
        Installed versions when the curves were produced (python, numpy, ..., BLAS).
    platform
        Operating system, machine and Python implementation of the recording host.
    recorded
        UTC date and time of recording, ISO 8601.
    harness_version
        rl-harness version that recorded it.
    runs
        Per-seed curves in the manifest's seed order.
    recording
        How the recording went: wall time, worker processes, where the runs came from
        (informational; not compared).
    recorder
        Who recorded it (``git config user.name`` or the login name at record time);
        ``None`` for baselines recorded before the field existed, which then lack the key.
    path
        The file it was read from or written to, if any (not part of the content).
    """

    manifest: str
    config_hash: str
    config: Mapping[str, Any]
    versions: Mapping[str, str]
    platform: Mapping[str, str]
    recorded: str
    harness_version: str
    runs: tuple[SeedCurve, ...]
    recording: Mapping[str, str] = dataclasses.field(default_factory=dict)
    recorder: str | None = None
    path: Path | None = dataclasses.field(default=None, compare=False)

    def content(self) -> dict:
        """The JSON content without the checksum (``recorder`` only when known: additive)."""
        content = {
            "schema": BASELINE_SCHEMA,
            "manifest": self.manifest,
            "config_hash": self.config_hash,
            "config": self.config,
            "versions": dict(self.versions),
            "platform": dict(self.platform),
            "recording": dict(self.recording),
            "recorded": self.recorded,
            "harness_version": self.harness_version,
            "runs": [{"seed": r.seed.to_json(), "curve": r.curve.to_json()} for r in self.runs],
        }
        if self.recorder is not None:
            content["recorder"] = self.recorder
        return content

    @property
    def checksum(self) -> str:
        return sha256_of(self.content())


def default_baseline_path(manifest_name: str, folder: str | os.PathLike = "baselines") -> Path:
    """Where the baseline of a manifest lives: ``<folder>/<manifest name>.json``."""
    return Path(folder) / f"{manifest_name}.json"


def _host_platform() -> dict[str, str]:
    return {
        "system": platform.platform(),
        "machine": platform.machine(),
        "cpus": str(os.cpu_count()),
        "python": f"{platform.python_implementation()} {platform.python_version()}",
    }


@runtime_checkable
class RecordedManifest(Protocol):
    """What a baseline reads of its manifest: ``harness.manifest.loader.Manifest`` is one (the store
    layer does not import the manifest layer, which sits beside it)."""

    @property
    def name(self) -> str: ...

    @property
    def config_hash(self) -> str: ...

    @property
    def seeds(self) -> tuple[RunSeed, ...]: ...

    def resolved_config(self) -> dict[str, Any]: ...


def baseline_from_results(
    manifest: RecordedManifest, results: ResultSet, *, recorded: str | None = None,
    recording: Mapping[str, str] | None = None,
    recorder: str | None = None,
) -> Baseline:
    """Build a baseline from a manifest and its complete result set.

    Parameters
    ----------
    manifest
        A ``harness.manifest.loader.Manifest``.
    results
        A ``harness.store.results.ResultSet`` of the manifest ``record`` trains,
        ``manifest.baseline_manifest()``: the manifest itself, or ``<name>-baseline`` with the
        ``[seeds] baseline_count`` seeds. The baseline stores the manifest's own name, config
        hash and configuration (of the gate's seeds, the first of the baseline's), so that
        ``verify``'s exact check compares the seeds both share.
    recorded
        ISO date to store; the current UTC time by default.
    recording
        How the recording went (wall time, workers, run sources), stored as given.
    recorder
        Who records it (stored as given; ``None`` leaves the field out).

    Raises
    ------
    BaselineError
        If the results belong to another configuration, a seed is missing or failed,
        the curves have different checkpoint grids, or the runs were produced with
        different installed versions.
    """
    where = f"results of {results.manifest!r}"
    planned = manifest.baseline_manifest()
    if results.config_hash != planned.config_hash:
        raise BaselineError(
            f"{where} have config hash {results.config_hash}, but the manifest {planned.name!r} has "
            f"{planned.config_hash}: rerun the manifest (`rlharness run`) before recording"
        )
    failed = results.failed()
    if failed:
        labels = ", ".join(r.spec.seed.label for r in failed)
        raise BaselineError(f"{where}: seeds {labels} failed; a baseline needs every seed: fix the failures and rerun")
    done = {r.spec.seed: r for r in results.completed()}
    missing = [s.label for s in planned.seeds if s not in done]
    if missing:
        raise BaselineError(
            f"{where}: {len(missing)} of the manifest's {len(planned.seeds)} seeds have no result "
            f"({', '.join(missing)}); run them first (`rlharness run`)"
        )
    records = [done[s] for s in planned.seeds]
    grids = {tuple(int(x) for x in r.curve.steps) for r in records}
    if len(grids) != 1:
        raise BaselineError(f"{where}: the seeds' curves have different checkpoint grids {sorted(grids)}")
    versions = {sha256_of(dict(r.versions)): dict(r.versions) for r in records}
    if len(versions) != 1:
        raise BaselineError(
            f"{where}: the seeds were run with different installed versions; clear the cache and rerun all seeds"
        )
    return Baseline(
        manifest=manifest.name,
        config_hash=manifest.config_hash,
        config=manifest.resolved_config(),
        versions=next(iter(versions.values())),
        platform=_host_platform(),
        recorded=recorded or datetime.datetime.now(datetime.UTC).strftime("%Y-%m-%dT%H:%M:%SZ"),
        harness_version=__version__,
        runs=tuple(SeedCurve(r.spec.seed, r.curve) for r in records),
        recording={str(k): str(v) for k, v in (recording or {}).items()},
        recorder=recorder,
    )


def _render(value: Any, indent: int = 0) -> str:
    """JSON with dicts and lists of containers broken over lines and lists of scalars on one line."""
    pad = "  " * (indent + 1)
    if isinstance(value, Mapping):
        if not value:
            return "{}"
        items = [f"{pad}{json.dumps(k)}: {_render(v, indent + 1)}" for k, v in value.items()]
        return "{\n" + ",\n".join(items) + "\n" + "  " * indent + "}"
    if isinstance(value, (list, tuple)) and any(isinstance(v, (Mapping, list, tuple)) for v in value):
        items = [pad + _render(v, indent + 1) for v in value]
        return "[\n" + ",\n".join(items) + "\n" + "  " * indent + "]"
    return json.dumps(value, allow_nan=False)


def check_overwrite(path: str | os.PathLike, *, overwrite: bool) -> None:
    """Raise :class:`BaselineError` if a baseline exists at ``path`` and ``overwrite`` is false.

    Call it before running anything, so that a refused record wastes no training.
    """
    path = Path(path)
    if path.exists() and not overwrite:
        raise BaselineError(
            f"{path}: a baseline already exists (recorded for {_describe_existing(path)}); it is kept. "
            "Pass --overwrite (overwrite=True) to replace it, or choose another path"
        )


def write_baseline(baseline: Baseline, path: str | os.PathLike, *, overwrite: bool = False) -> Path:
    """Write ``baseline`` to ``path`` atomically; refuse to replace a file unless ``overwrite``.

    Raises
    ------
    BaselineError
        If ``path`` exists and ``overwrite`` is false; nothing is written then.
    """
    path = Path(path)
    check_overwrite(path, overwrite=overwrite)
    content = baseline.content()
    content["checksum"] = sha256_of(baseline.content())
    text = _render(content) + "\n"
    path.parent.mkdir(parents=True, exist_ok=True)
    atomic_write_text(path, text)
    return path


def _describe_existing(path: Path) -> str:
    try:
        data = loads_strict(path.read_text(encoding="utf-8"))  # deep nesting too: a ValueError
        return f"{data.get('manifest')!r} on {data.get('recorded')}"
    except (OSError, ValueError, AttributeError):
        return "an unreadable file"


def _strings(value: Any, key: str) -> dict[str, str]:
    return {as_str(k, key): as_str(v, f"{key}.{k}") for k, v in as_mapping(value, key).items()}


def _list(value: Any, key: str) -> list:
    if not isinstance(value, list):
        raise ValueError(f"[{key}] must be a list, got {type(value).__name__}")
    return value


def _check_meaning(baseline: Baseline) -> None:
    """What a checksum cannot show (anyone can recompute it): the content must make sense.

    At least one run; no seed twice; the config hash is the hash of the stored config; the runs
    are the config's seeds, in order, followed only by the seeds ``[seeds] baseline_count`` adds
    (``harness.core.seeding.extend_seeds``; no run dropped without saying so); every curve on one grid.
    """
    if not baseline.runs:
        raise ValueError("[runs] is empty: a baseline holds at least one seed's curve")
    labels = [r.seed.label for r in baseline.runs]
    twice = sorted({label for label in labels if labels.count(label) > 1})
    if twice:
        raise ValueError(f"[runs] lists seed {', '.join(twice)} more than once")
    if sha256_of(baseline.config) != baseline.config_hash:
        raise ValueError(f"[config_hash] {baseline.config_hash} is not the hash of [config] ({sha256_of(baseline.config)})")
    planned = baseline.config.get("seeds")
    if isinstance(planned, list):
        seeds = [RunSeed.from_json(s) for s in planned]
        if seeds and len(baseline.runs) > len(seeds):  # [seeds] baseline_count: the gate's seeds, then more
            seeds = list(extend_seeds(seeds, len(baseline.runs)))
        if seeds != [r.seed for r in baseline.runs]:
            raise ValueError(f"[runs] holds {len(baseline.runs)} seeds ({', '.join(labels[:5])}...), but [config.seeds] "
                             f"plans {len(seeds)} ({', '.join(s.label for s in seeds[:5])}...): a run was dropped, added "
                             "or reordered")
    grids = {tuple(c.step for c in r.curve.checkpoints) for r in baseline.runs}
    if len(grids) != 1:
        raise ValueError(f"[runs] curves have different checkpoint grids: {sorted(grids)[:2]}")


def read_baseline(path: str | os.PathLike, *, manifest_name: str | None = None) -> Baseline:
    """Read and check a baseline file.

    Parameters
    ----------
    path
        The baseline file.
    manifest_name
        If given, the baseline must belong to this manifest.

    Raises
    ------
    BaselineError
        If the file is missing, truncated or not JSON, of an unknown schema, fails its
        checksum (edited by hand), or belongs to another manifest.
    """
    path = Path(path)
    if not path.is_file():
        raise BaselineError(f"{path}: no baseline found; {_RECORD_FIX} (or pass the right --baseline path)")
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise BaselineError(f"{path}: cannot be read ({exc})") from None
    return parse_baseline(text, path=path, manifest_name=manifest_name)


def parse_baseline(text: str, *, path: str | os.PathLike, manifest_name: str | None = None) -> Baseline:
    """Check and read the text of a baseline file; ``path`` names it in errors (see :func:`read_baseline`).

    Raises
    ------
    BaselineError
        As :func:`read_baseline`.
    """
    path = Path(path)
    try:
        data = loads_strict(text)
    except json.JSONDecodeError as exc:
        raise BaselineError(
            f"{path}: is truncated or not valid JSON (line {exc.lineno}, column {exc.colno}: {exc.msg}); "
            f"restore it from version control or {_RECORD_FIX} --overwrite"
        ) from None
    except ValueError as exc:  # NaN/Infinity literals, overflowing numbers, huge integers, deep nesting
        raise BaselineError(f"{path}: is not a baseline rl-harness wrote ({exc}); restore it from version control "
                            f"or {_RECORD_FIX} --overwrite") from None
    if not isinstance(data, dict) or data.get("schema") != BASELINE_SCHEMA:
        found = data.get("schema") if isinstance(data, dict) else type(data).__name__
        raise BaselineError(f"{path}: [schema] is {found!r}, expected {BASELINE_SCHEMA!r}: not a baseline of this version")
    stored = data.pop("checksum", None)
    actual = sha256_of(data)
    if stored != actual:
        raise BaselineError(
            f"{path}: [checksum] does not match the content (stored {stored}, computed {actual}): the file was "
            f"edited or damaged; restore it from version control, or {_RECORD_FIX} --overwrite if the change is intended"
        )
    try:
        baseline = Baseline(
            manifest=as_str(data["manifest"], "manifest"),
            config_hash=as_str(data["config_hash"], "config_hash"),
            config=as_mapping(data["config"], "config"),
            versions=_strings(data["versions"], "versions"),
            platform=_strings(data["platform"], "platform"),
            recording=_strings(data.get("recording", {}), "recording"),
            recorded=as_str(data["recorded"], "recorded"),
            harness_version=as_str(data["harness_version"], "harness_version"),
            recorder=None if data.get("recorder") is None else as_str(data["recorder"], "recorder"),
            runs=tuple(
                SeedCurve(RunSeed.from_json(as_mapping(r, "runs")["seed"]), LearningCurve.from_json(r["curve"]))
                for r in _list(data["runs"], "runs")
            ),
            path=path,
        )
        _check_meaning(baseline)
    except (KeyError, TypeError, ValueError, AttributeError) as exc:
        raise BaselineError(f"{path}: malformed content ({type(exc).__name__}: {exc}); {_RECORD_FIX} --overwrite") from None
    if manifest_name is not None and baseline.manifest != manifest_name:
        raise BaselineError(
            f"{path}: [manifest] is {baseline.manifest!r}, but it is being used for manifest {manifest_name!r}: "
            f"pass the baseline of {manifest_name!r} (or {_RECORD_FIX})"
        )
    return baseline
