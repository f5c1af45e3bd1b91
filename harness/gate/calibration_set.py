"""The calibration set of a manifest: which seeds, under which derived manifest, and which runs are reused.

The calibration set starts with the manifest's own seeds, in order, followed by
children of ``SeedSequence(entropy of the first seed)`` with spawn keys
``(0,), (1,), ...`` that the manifest does not already use
(:func:`harness.core.seeding.extend_seeds`, which also extends a baseline recorded
with ``[seeds] baseline_count``: that baseline's seeds are the calibration set's first). For a manifest with
``count = c`` and ``root = r`` this is exactly ``count = N, root = r``: the
manifest's runs are the first ``c`` of the calibration's. The set is a derived
manifest named ``<name>-calibration`` (its config hash covers its seed list), so
its results go to ``results/<name>-calibration/`` and reruns resume from there
and from the run cache.

Runs of the same spec (apart from the manifest's name and config hash) already
stored in the calibration folder (an earlier calibration with another seed
count), in the manifest's own results folder, or in the run cache under the
manifest's own spec are reused when they were trained with the installed
versions and the same trainer source (``harness.execute.work.run_versions``):
a run is a function of its spec, versions and code (the determinism contract),
so reusing it gives the same bytes as training it.
"""

from __future__ import annotations

import dataclasses
import os
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

from harness.store.cache import RunCache
from harness.core.seeding import extend_seeds
from harness.core.spec import canonical_json, sha256_of
from harness.store.results import RunRecord, read_record, record_file_name, same_spec, write_record

__all__ = ["SEED_FACTOR", "calibration_manifest", "reuse_stored_runs"]

#: Default calibration set: this many times the manifest's seed count.
SEED_FACTOR = 4


def calibration_manifest(manifest: Any, *, seeds: int | None = None) -> Any:
    """The derived manifest ``<name>-calibration``: the same configuration with ``seeds`` seeds.

    Parameters
    ----------
    manifest
        A ``harness.manifest.loader.Manifest``.
    seeds
        Calibration seeds; default :data:`SEED_FACTOR` times the manifest's. At least twice the
        manifest's, so that two disjoint groups of its seed count fit.

    Raises
    ------
    ValueError
        Too few seeds, or a manifest with fewer than 2 seeds (the checks need 2 per group).
    """
    own = len(manifest.seeds)
    if own < 2:
        raise ValueError(f"the manifest {manifest.name!r} has {own} seed; the gate's checks need at least 2 seeds per "
                         "group: raise [seeds] count to 2 or more")
    n = SEED_FACTOR * own if seeds is None else seeds
    if isinstance(n, bool) or not isinstance(n, int) or n < 2 * own:
        raise ValueError(f"`seeds` must be an integer of at least {2 * own} (twice the manifest's {own} seeds, so "
                         f"that two disjoint groups fit), got {n!r}: ask for more seeds (default {SEED_FACTOR * own})")
    planned = extend_seeds(manifest.seeds, int(n))
    derived = dataclasses.replace(manifest, name=f"{manifest.name}-calibration", seeds=planned, pins=None)
    return dataclasses.replace(derived, config_hash=sha256_of(derived.resolved_config()))


def _training(spec: Any) -> str:
    """What a run trains: its spec's JSON without the manifest's name and config hash."""
    data = spec.to_json()
    del data["manifest"], data["config_hash"]
    return canonical_json(data)


def _stored(folder: Path, spec: Any, versions: Mapping[str, str], *, exact: bool = False) -> RunRecord | None:
    """The successful run of ``spec`` stored in ``folder`` and trained with ``versions``, or ``None``."""
    path = folder / record_file_name(spec)
    try:
        record = read_record(path) if path.is_file() else None
    except ValueError:  # damaged or of another schema: not reusable, the runner trains it
        return None
    if record is None or not record.ok or dict(record.versions) != dict(versions):
        return None
    same = same_spec(record.spec, spec) if exact else _training(record.spec) == _training(spec)
    return record if same else None


def reuse_stored_runs(
    manifest: Any,
    derived: Any,
    *,
    folder: str | os.PathLike,
    stored: Sequence[str | os.PathLike] = (),
    cache: RunCache | None = None,
    versions: Mapping[str, str],
) -> int:
    """Copy finished runs of the calibration's specs into its results folder, where the runner resumes them.

    A run is reused when a successful record of the same spec (apart from the manifest's name
    and config hash) trained with ``versions`` (``harness.execute.work.run_versions``: the
    installed versions and the trainer's source fingerprint) is found, in order: in ``folder`` itself (an
    earlier calibration with another seed count), in each ``stored`` folder (the manifest's own
    results), or in ``cache`` under the manifest's own spec.

    Returns
    -------
    int
        How many runs were copied (runs already in ``folder`` under this spec are not counted).
    """
    folder = Path(folder)
    own = {s.seed: s for s in manifest.runs()}
    copied = 0
    for spec in derived.runs():
        if _stored(folder, spec, versions, exact=True) is not None:
            continue  # already there under this very spec: the runner resumes it
        record = next((r for r in (_stored(Path(w), spec, versions) for w in (folder, *stored)) if r is not None), None)
        if record is None and cache is not None and spec.seed in own:
            record = cache.get(own[spec.seed], versions)
        if record is not None:
            write_record(folder, dataclasses.replace(record, spec=spec))
            copied += 1
    return copied
