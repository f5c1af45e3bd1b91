"""The run cache: finished runs stored under a content key so that unchanged work is never redone.

The key of a run is the SHA-256 of the canonical JSON of its
:class:`~harness.core.spec.RunSpec` (task, trainer, resolved config, budget,
evaluation, seed, config hash), the installed versions that shape its numbers
(``harness.manifest.pins``) and the rl-harness version. An entry is the run's result
file exactly as :mod:`harness.store.results` writes it, so a cache hit gives the same
bytes as training again.

The cache never decides correctness: an entry that is missing, damaged, or whose
run does not match the one asked for is a miss, and the run is trained. The
folder is marked as a cache (``CACHEDIR.TAG``, a ``.gitignore`` and a
``README.md``); it can be deleted at any time. Keys are hexadecimal digests and
every path is checked to stay inside the folder. Writes are atomic; a per-run
file lock (:meth:`RunCache.claim`) lets two runners sharing a cache train each
run once.
"""

from __future__ import annotations

import dataclasses
import json
import os
import re
from collections.abc import Mapping
from pathlib import Path

from filelock import FileLock

from harness import __version__
from harness.core.errors import ResultsError
from harness.core.spec import RunSpec, sha256_of
from harness.core.atomic import atomic_write_text, sweep_stale_temporaries
from harness.store.results import RunRecord, record_from_json, record_text, same_spec

__all__ = ["DEFAULT_CACHE_DIR", "RunCache", "cache_key"]

#: Default cache folder, relative to the working directory; ``RLHARNESS_CACHE_DIR`` overrides it.
DEFAULT_CACHE_DIR = ".rlharness-cache"

_KEY = re.compile(r"[0-9a-f]{64}")
_TAG = (
    "Signature: 8a477f597d28d172789f06886806bc55\n"
    "# This file is a cache directory tag created by rl-harness.\n"
    "# For information about cache directory tags, see https://bford.info/cachedir/\n"
)
_README = (
    "# rl-harness run cache\n\n"
    "Finished training runs stored under a content key (run spec, installed versions, rl-harness\n"
    "version). `rlharness run` answers unchanged runs from here; `--no-cache` ignores it.\n"
    "It never decides correctness and can be deleted at any time.\n"
)


def cache_key(spec: RunSpec, versions: Mapping[str, str]) -> str:
    """The 64-hex-digit content key of a run trained with ``versions``."""
    digest = sha256_of({"run": spec.to_json(), "versions": dict(versions), "rl-harness": __version__})
    return digest.removeprefix("sha256:")


class RunCache:
    """A folder of finished runs, keyed by :func:`cache_key`.

    Parameters
    ----------
    folder
        The cache folder; ``None`` means ``$RLHARNESS_CACHE_DIR`` or ``.rlharness-cache``.
        It is created, with its marker files, on first write.
    """

    __slots__ = ("folder",)

    def __init__(self, folder: str | os.PathLike | None = None):
        if folder is None:
            folder = os.environ.get("RLHARNESS_CACHE_DIR") or DEFAULT_CACHE_DIR
        if not isinstance(folder, (str, os.PathLike)):
            raise TypeError(f"`folder` must be a path, got {type(folder).__name__} {folder!r}")
        self.folder = Path(folder).absolute()

    def __repr__(self) -> str:
        return f"RunCache({str(self.folder)!r})"

    def _join_within(self, *parts: str) -> Path:
        path = self.folder.joinpath(*parts).resolve()
        root = self.folder.resolve()
        if path != root and root not in path.parents:
            raise ValueError(f"cache path {'/'.join(parts)!r} escapes the cache folder {root}")
        return path

    def _entry(self, key: str) -> Path:
        if not isinstance(key, str) or not _KEY.fullmatch(key):
            raise ValueError(f"`key` must be 64 lowercase hexadecimal digits, got {key!r}")
        return self._join_within("runs", key[:2], key + ".json")

    def _ensure(self) -> None:
        if (self.folder / "CACHEDIR.TAG").is_file():
            return
        self.folder.mkdir(parents=True, exist_ok=True)
        with FileLock(str(self._join_within(".setup.lock"))):
            for name, text in (("README.md", _README), (".gitignore", "# created by rl-harness\n*\n"), ("CACHEDIR.TAG", _TAG)):
                target = self._join_within(name)
                if not target.is_file():
                    atomic_write_text(target, text)

    def get(self, spec: RunSpec, versions: Mapping[str, str]) -> RunRecord | None:
        """The cached successful run of ``spec`` trained with ``versions``, or ``None``."""
        path = self._entry(cache_key(spec, versions))
        try:
            data = json.loads(path.read_text(encoding="utf-8"))
            record = record_from_json(data, where=str(path))
        except (OSError, ValueError, ResultsError):
            return None
        if not record.ok or not same_spec(record.spec, spec) or dict(record.versions) != dict(versions):
            return None
        return dataclasses.replace(record, spec=spec)

    def put(self, record: RunRecord) -> Path | None:
        """Store a successful run under the key of its own spec and versions; failed runs are not cached."""
        if not isinstance(record, RunRecord):
            raise TypeError(f"`record` must be a RunRecord, got {type(record).__name__}")
        if not record.ok:
            return None
        self._ensure()
        path = self._entry(cache_key(record.spec, record.versions))
        path.parent.mkdir(parents=True, exist_ok=True)
        sweep_stale_temporaries(path.parent)  # left by a writer killed mid-write
        atomic_write_text(path, record_text(record))
        return path

    def claim(self, spec: RunSpec, versions: Mapping[str, str]) -> FileLock:
        """A file lock for training ``spec``; hold it while the run trains so another runner waits.

        The lock is released by the operating system if the holder dies.
        """
        self._ensure()
        key = cache_key(spec, versions)
        lock_dir = self._join_within("locks")
        lock_dir.mkdir(exist_ok=True)
        return FileLock(str(self._join_within("locks", key + ".lock")))
