"""Suites: several manifests verified together, with one family of checks and one verdict.

A suite comes from the command line in one of three forms:

- a **suite file**: TOML with a ``[suite]`` table::

      [suite]
      name = "shipped"                  # names the suite's reports (default: the file's stem)
      alpha = 0.05                      # family-wise error rate over every task's checks
      members = ["../manifests/cartpole-dqn.toml", "../manifests/tabular/"]

  ``members`` are manifest files or folders of them, relative to the suite file;
- a **folder**: every ``*.toml`` manifest directly inside it, in name order;
- **several manifests** (files or folders) listed on the command line.

Manifest names must differ within a suite: results and baselines are stored by name.
Every problem is a :class:`~harness.core.errors.ManifestError` naming the file and the
key, raised before anything is trained.
"""

from __future__ import annotations

import dataclasses
import os
from collections.abc import Sequence
from pathlib import Path

from harness.core import config
from harness.core.errors import ConfigError, ManifestError
from harness.manifest.loader import Manifest, load_manifest, read_toml_file

__all__ = ["DEFAULT_SUITE_ALPHA", "Suite", "is_suite_file", "load_suite"]

#: Family-wise error rate of a suite that does not set ``alpha``.
DEFAULT_SUITE_ALPHA = 0.05


@dataclasses.dataclass(frozen=True, slots=True)
class _SuiteTable:
    """The ``[suite]`` table of a suite file."""

    members: tuple[str, ...]
    name: str = ""
    alpha: float = DEFAULT_SUITE_ALPHA
    description: str = ""

    def __post_init__(self) -> None:
        if not 0.0 < self.alpha < 0.5:
            raise ConfigError(f"must lie strictly between 0 and 0.5, got {self.alpha!r}", key="alpha")
        if not self.members:
            raise ConfigError("is empty; list at least one manifest file or folder, relative to the suite file",
                              key="members")


@dataclasses.dataclass(frozen=True, slots=True)
class _SuiteFile:
    suite: _SuiteTable


@dataclasses.dataclass(frozen=True, slots=True)
class Suite:
    """Manifests verified together.

    Attributes
    ----------
    name
        Names the suite's reports.
    alpha
        Family-wise error rate over every check of every task (Holm 1979).
    manifests
        The members, in the order given (manifest names are distinct).
    path
        The suite file, or ``None`` for a folder or a list given on the command line.
    description
        Free text from the suite file.
    """

    name: str
    alpha: float
    manifests: tuple[Manifest, ...]
    path: Path | None = None
    description: str = ""

    def __post_init__(self) -> None:
        if not self.manifests:
            raise ValueError("a suite needs at least one manifest")


def is_suite_file(path: str | os.PathLike) -> bool:
    """True when ``path`` is a TOML file with a ``[suite]`` table (False for a folder or a manifest).

    Raises ``ManifestError`` when the file cannot be read or is not valid TOML.
    """
    path = Path(path)
    return path.is_file() and "suite" in read_toml_file(path)


def _folder_members(folder: Path, *, path: str | None, key: str | None) -> list[Path]:
    found = sorted(p for p in folder.glob("*.toml") if p.is_file())
    manifests = [p for p in found if "suite" not in read_toml_file(p)]
    if not manifests:
        raise ManifestError(
            f"the folder {folder} holds no manifest (*.toml without a [suite] table); "
            "point at a folder of manifests or list the manifest files",
            path=path or str(folder), key=key)
    return manifests


def _expand(item: Path, *, path: str | None, key: str | None) -> list[Path]:
    """The manifest files an item names: itself, or the manifests in a folder."""
    if item.is_dir():
        return _folder_members(item, path=path, key=key)
    if not item.exists():
        raise ManifestError(f"no such manifest file or folder: {item}; fix the path (paths in a suite file are "
                            "relative to the suite file)", path=path or str(item), key=key)
    if "suite" in read_toml_file(item):
        raise ManifestError(f"{item} is a suite file; a suite lists manifests, not other suites: pass it alone "
                            "or list its manifests", path=path or str(item), key=key)
    return [item]


def _check_names(manifests: Sequence[Manifest], *, path: str | None, keys: Sequence[str | None]) -> None:
    seen: dict[str, Manifest] = {}
    for manifest, key in zip(manifests, keys, strict=True):
        first = seen.get(manifest.name)
        if first is not None:
            raise ManifestError(
                f"two manifests are named {manifest.name!r}: {first.path} and {manifest.path}; names must differ "
                "within a suite (results and baselines are stored by name): rename one or list it once",
                path=path or str(manifest.path), key=key)
        seen[manifest.name] = manifest


def _load_suite_file(path: Path) -> Suite:
    where = str(path)
    table = config.resolve(_SuiteFile, read_toml_file(path), path=where).suite
    files: list[Path] = []
    keys: list[str] = []
    for i, member in enumerate(table.members):
        key = f"suite.members[{i}]"
        for found in _expand(path.parent / member, path=where, key=key):
            files.append(found)
            keys.append(key)
    manifests = [load_manifest(f) for f in files]
    _check_names(manifests, path=where, keys=keys)
    return Suite(table.name or path.stem, table.alpha, tuple(manifests), path, table.description)


def load_suite(items: Sequence[str | os.PathLike], *, alpha: float | None = None) -> Suite:
    """The suite named on the command line: one suite file, or manifest files and folders.

    Parameters
    ----------
    items
        One suite file; or any number of manifest files and folders of manifests.
    alpha
        Overrides the suite file's ``alpha`` (default :data:`DEFAULT_SUITE_ALPHA`).

    Raises
    ------
    ManifestError
        A missing file or folder, a folder without manifests, an empty ``members``, two
        manifests with one name, a suite file mixed with other items, or any error of a
        member manifest; each names the file and the key.

    Examples
    --------
    >>> load_suite([])
    Traceback (most recent call last):
    ...
    harness.core.errors.ManifestError: no manifest given; pass a suite file, a folder of manifests or manifest files
    """
    paths = [Path(p) for p in items]
    if not paths:
        raise ManifestError("no manifest given; pass a suite file, a folder of manifests or manifest files")
    suites = [p for p in paths if p.is_file() and "suite" in read_toml_file(p)]
    if suites and len(paths) > 1:
        raise ManifestError("a suite file must be given alone; list its manifests in its `members` instead",
                            path=str(suites[0]), key="suite.members")
    if suites:
        suite = _load_suite_file(suites[0])
    else:
        files = [f for p in paths for f in _expand(p, path=None, key=None)]
        manifests = [load_manifest(f) for f in files]
        _check_names(manifests, path=None, keys=[None] * len(manifests))
        name = paths[0].name if len(paths) == 1 and paths[0].is_dir() else "suite"
        suite = Suite(name, DEFAULT_SUITE_ALPHA, tuple(manifests))
    if alpha is not None:
        if not 0.0 < alpha < 0.5:
            raise ManifestError(f"--alpha must lie strictly between 0 and 0.5, got {alpha!r}")
        suite = dataclasses.replace(suite, alpha=alpha)
    return suite
