"""Adopting curves that already exist: curve files in, a results folder out, nothing run.

Learning curves logged elsewhere (last month's experiments, a paper's released
logs) become a results folder that ``compare``, ``record --no-run`` and
``verify --no-run`` read like any other. The files are in the curve-file format
(:mod:`harness.core.curvefile`): one file per seed (``step,episode,return``),
taken in the manifest's seed order, or files with a seed column
(``seed,step,episode,return``) holding any seeds of the manifest. Every file is
read and checked against the manifest's plan before anything is written; a
malformed file is a :class:`~harness.core.curvefile.CurveFileError` naming the
file, line and column.

Each record says where its curve came from in place of installed versions:
``adopted`` (that nothing was rerun) and ``adopted_files`` (every file's name and
SHA-256), the same for every seed, so that a baseline recorded from them carries
it too. The index lists each seed's source as ``adopted``.
"""

from __future__ import annotations

import dataclasses
import hashlib
import os
from collections.abc import Sequence
from pathlib import Path

from harness.core.curvefile import parse_curve_text
from harness.core.curves import LearningCurve
from harness.core.errors import ResultsError
from harness.core.spec import RunSpec
from harness.store.results import INDEX_FILE, ResultSet, RunRecord, write_index, write_record

__all__ = ["ADOPTED", "ADOPTED_FILES", "AdoptedFile", "Adoption", "adopt_curves"]

#: Keys of ``RunRecord.versions`` for adopted runs.
ADOPTED = "adopted"
ADOPTED_FILES = "adopted_files"
_NOTHING_RUN = "nothing was rerun: curves read from files by `rlharness adopt`"


@dataclasses.dataclass(frozen=True, slots=True)
class AdoptedFile:
    """One adopted file: its path, SHA-256 and the seed labels it gave."""

    path: Path
    sha256: str
    seeds: tuple[str, ...]


@dataclasses.dataclass(frozen=True, slots=True)
class Adoption:
    """What :func:`adopt_curves` wrote: the result set, its folder and the files it came from."""

    results: ResultSet
    folder: Path
    files: tuple[AdoptedFile, ...]


def _plan(specs: Sequence[RunSpec]) -> tuple[RunSpec, ...]:
    ordered = tuple(sorted(specs, key=lambda s: s.index))
    if not ordered or [s.index for s in ordered] != list(range(len(ordered))):
        raise ValueError("`specs` must be a manifest's complete plan with indices 0..n-1")
    return ordered


def _curves(specs: tuple[RunSpec, ...], files: Sequence[Path]) -> tuple[dict[str, LearningCurve], list[AdoptedFile]]:
    labels = [s.seed.label for s in specs]
    steps, episodes = specs[0].checkpoint_steps(), specs[0].evaluation.episodes
    parsed, adopted = [], []
    for path in files:
        try:
            data = path.read_bytes()
        except OSError as exc:
            raise ResultsError(f"{path}: cannot be read ({exc.strerror}); check the path") from None
        curves = parse_curve_text(data, str(path), steps=steps, episodes=episodes, seeds=labels)
        parsed.append((path, curves))
        adopted.append(AdoptedFile(path, hashlib.sha256(data).hexdigest(), tuple(k or "" for k in curves)))
    seeded = {None not in curves for _, curves in parsed}
    if len(seeded) != 1:
        raise ResultsError("mix of files with and without a seed column; give one file per seed "
                           "(step,episode,return) or files with a seed column (seed,step,episode,return)")
    by_seed: dict[str, LearningCurve] = {}
    if seeded == {False}:
        if len(files) != len(specs):
            raise ResultsError(f"{len(files)} curve files for the manifest's {len(specs)} seeds "
                               f"({', '.join(labels)}); give one file per seed, in the manifest's seed order")
        for i, ((path, curves), label) in enumerate(zip(parsed, labels, strict=True)):
            by_seed[label] = LearningCurve(curves[None])
            adopted[i] = dataclasses.replace(adopted[i], seeds=(label,))
        return by_seed, adopted
    origin: dict[str, Path] = {}
    for path, curves in parsed:
        for label, checkpoints in curves.items():
            if label in origin:
                raise ResultsError(f"{path}: seed {label} is also in {origin[label]}; give each seed once")
            origin[label] = path
            by_seed[label] = LearningCurve(checkpoints)
    missing = [label for label in labels if label not in by_seed]
    if missing:
        raise ResultsError(f"no curve for seed{'s' if len(missing) > 1 else ''} {', '.join(missing)} of the manifest "
                           f"in {', '.join(str(p) for p in files)}; every planned seed needs one")
    return by_seed, adopted


def adopt_curves(specs: Sequence[RunSpec], files: Sequence[str | os.PathLike], *, results_dir: str | os.PathLike,
                 overwrite: bool = False) -> Adoption:
    """Turn curve files into the results folder of a manifest's plan, without running anything.

    Parameters
    ----------
    specs
        The manifest's plan (``Manifest.runs()``): which seeds, steps and episodes to expect.
    files
        Curve files: one per seed in the plan's order, or files with a seed column.
    results_dir
        The folder to write; it must hold no results yet unless ``overwrite``.
    overwrite
        Replace the results already in the folder.

    Raises
    ------
    CurveFileError
        A file breaks the format or the plan (file, line and column named); nothing is written.
    ResultsError
        Unreadable files, a wrong number of files, seeds missing or given twice, or a folder
        that already holds results (without ``overwrite``); nothing is written.
    """
    specs = _plan(specs)
    if not files:
        raise ResultsError("no curve files given; name one file per seed or files with a seed column")
    folder = Path(results_dir)
    if not overwrite and folder.is_dir() and ((folder / INDEX_FILE).exists() or any(folder.glob("seed-*.json"))):
        raise ResultsError(f"{folder}: already holds results; choose another folder (--results) or pass --overwrite")
    paths = [Path(f) for f in files]
    by_seed, adopted = _curves(specs, paths)
    listing = "; ".join(f"{a.path.name} sha256:{a.sha256}" for a in adopted)
    versions = {ADOPTED: _NOTHING_RUN, ADOPTED_FILES: listing}
    records = tuple(RunRecord(spec, "ok", by_seed[spec.seed.label], None, versions) for spec in specs)
    results = ResultSet(specs[0].manifest, specs[0].config_hash, records)
    folder.mkdir(parents=True, exist_ok=True)
    (folder / INDEX_FILE).unlink(missing_ok=True)  # until the new index is written, the folder is incomplete
    for record in records:
        write_record(folder, record)
    write_index(folder, results, sources={spec.index: ADOPTED for spec in specs})
    return Adoption(results, folder, tuple(adopted))
