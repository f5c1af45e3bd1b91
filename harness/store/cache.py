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

**What the cache trusts.** Whoever can write into the cache folder could plant an entry that is
well-formed and matches its key (any edit can be made self-consistent) and so pass a gate with
curves nobody trained. Each entry therefore carries an HMAC-SHA256 of its text
(``<key>.mac`` beside ``<key>.json``) under a secret that is not in the cache folder:
``$RLHARNESS_CACHE_KEY`` if set (on CI: from a secret that pull requests cannot read), else the
file ``$XDG_CONFIG_HOME/rl-harness/cache-key`` (default ``~/.config/rl-harness/cache-key``),
created with mode 0600 on first use. An entry without a valid MAC is a miss and is trained
again. So the cache trusts exactly the holders of that secret, and the folder structure itself:
a folder inside it that leads out of it (a symlink), or a file where the cache folder should
be, is refused with :class:`~harness.core.errors.CacheError` (exit 2), never followed.
"""

from __future__ import annotations

import dataclasses
import hashlib
import hmac
import os
import re
import secrets
from collections.abc import Mapping
from pathlib import Path

from filelock import FileLock

from harness import __version__
from harness.core.errors import CacheError, ResultsError
from harness.core.spec import RunSpec, sha256_of
from harness.core.atomic import atomic_write_text, sweep_stale_temporaries
from harness.core.jsondata import loads_strict
from harness.store.results import RunRecord, record_from_json, record_text, same_spec

__all__ = ["CACHE_KEY_ENV", "DEFAULT_CACHE_DIR", "RunCache", "cache_key", "cache_secret"]

#: Default cache folder, relative to the working directory; ``RLHARNESS_CACHE_DIR`` overrides it.
DEFAULT_CACHE_DIR = ".rlharness-cache"

#: Environment variable holding the cache's MAC secret (else a key file in the user's config folder).
CACHE_KEY_ENV = "RLHARNESS_CACHE_KEY"

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
    "Each entry carries an HMAC under a secret kept outside this folder ($RLHARNESS_CACHE_KEY or\n"
    "~/.config/rl-harness/cache-key); an entry without a valid one is trained again.\n"
    "It never decides correctness and can be deleted at any time.\n"
)


def cache_secret() -> bytes:
    """The secret the cache's MACs are keyed with: ``$RLHARNESS_CACHE_KEY``, else the user's key file.

    The key file (``$XDG_CONFIG_HOME/rl-harness/cache-key``, default ``~/.config/...``) is
    created with 32 random bytes and mode 0600 when missing.
    """
    value = os.environ.get(CACHE_KEY_ENV)
    if value:
        return value.encode("utf-8")
    base = os.environ.get("XDG_CONFIG_HOME") or os.path.join(os.path.expanduser("~"), ".config")
    path = Path(base) / "rl-harness" / "cache-key"
    try:
        return path.read_bytes().strip()
    except FileNotFoundError:
        pass
    try:
        path.parent.mkdir(parents=True, exist_ok=True, mode=0o700)
        handle = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600)
    except FileExistsError:  # another runner created it just now
        return path.read_bytes().strip()
    except OSError as exc:
        raise CacheError(f"cannot create the cache's key file {path} ({exc}); set ${CACHE_KEY_ENV} or pass --no-cache") from None
    with os.fdopen(handle, "w") as stream:
        stream.write(secrets.token_hex(32) + "\n")
    return path.read_bytes().strip()


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

    __slots__ = ("_secret", "folder")

    def __init__(self, folder: str | os.PathLike | None = None):
        if folder is None:
            folder = os.environ.get("RLHARNESS_CACHE_DIR") or DEFAULT_CACHE_DIR
        if not isinstance(folder, (str, os.PathLike)):
            raise TypeError(f"`folder` must be a path, got {type(folder).__name__} {folder!r}")
        self.folder = Path(folder).absolute()
        if self.folder.exists() and not self.folder.is_dir():
            raise CacheError(f"{self.folder}: the run cache folder is a file; move it away, or pass another "
                             "--cache-dir or --no-cache")
        self._secret: bytes | None = None

    def _mac(self, text: str) -> str:
        if self._secret is None:
            self._secret = cache_secret()
        return hmac.new(self._secret, text.encode("utf-8"), hashlib.sha256).hexdigest()

    def __repr__(self) -> str:
        return f"RunCache({str(self.folder)!r})"

    def _join_within(self, *parts: str) -> Path:
        path = self.folder.joinpath(*parts).resolve()
        root = self.folder.resolve()
        if path != root and root not in path.parents:
            raise CacheError(f"cache path {'/'.join(parts)!r} escapes the cache folder {root} (a symlink out of it?); "
                             "the cache is not used through it: delete the cache folder or pass --no-cache")
        return path

    def _entry(self, key: str) -> Path:
        if not isinstance(key, str) or not _KEY.fullmatch(key):
            raise ValueError(f"`key` must be 64 lowercase hexadecimal digits, got {key!r}")
        return self._join_within("runs", key[:2], key + ".json")

    def _ensure(self) -> None:
        if (self.folder / "CACHEDIR.TAG").is_file():
            return
        try:
            self.folder.mkdir(parents=True, exist_ok=True)
            with FileLock(str(self._join_within(".setup.lock"))):
                for name, text in (("README.md", _README), (".gitignore", "# created by rl-harness\n*\n"),
                                   ("CACHEDIR.TAG", _TAG)):
                    target = self._join_within(name)
                    if not target.is_file():
                        atomic_write_text(target, text)
        except OSError as exc:
            raise CacheError(f"{self.folder}: cannot set up the run cache ({exc}); pass another --cache-dir or --no-cache") from None

    def get(self, spec: RunSpec, versions: Mapping[str, str]) -> RunRecord | None:
        """The cached successful run of ``spec`` trained with ``versions``, or ``None``."""
        path = self._entry(cache_key(spec, versions))
        try:
            text = path.read_text(encoding="utf-8")
            mac = path.with_suffix(".mac").read_text(encoding="ascii").strip()
            if not hmac.compare_digest(mac, self._mac(text)):  # edited, or written without the secret
                return None
            record = record_from_json(loads_strict(text), where=str(path))
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
        text = record_text(record)
        try:
            path.parent.mkdir(parents=True, exist_ok=True)
            sweep_stale_temporaries(path.parent)  # left by a writer killed mid-write
            atomic_write_text(path, text)
            atomic_write_text(path.with_suffix(".mac"), self._mac(text) + "\n")
        except OSError as exc:
            raise CacheError(f"{path}: cannot write the run cache entry ({exc}); pass another --cache-dir or --no-cache") from None
        return path

    def claim(self, spec: RunSpec, versions: Mapping[str, str]) -> FileLock:
        """A file lock for training ``spec``; hold it while the run trains so another runner waits.

        The lock is released by the operating system if the holder dies.
        """
        self._ensure()
        key = cache_key(spec, versions)
        lock_dir = self._join_within("locks")
        try:
            lock_dir.mkdir(exist_ok=True)
        except OSError as exc:
            raise CacheError(f"{lock_dir}: cannot create the cache's lock folder ({exc}); pass --no-cache") from None
        return FileLock(str(self._join_within("locks", key + ".lock")))
