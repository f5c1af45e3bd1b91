"""Atomic file writes: a reader sees the old file or the complete new one, never a partial write."""

from __future__ import annotations

import contextlib
import os
import stat
import tempfile
from collections.abc import Iterator
from pathlib import Path

__all__ = ["atomic_path", "atomic_write_text"]


@contextlib.contextmanager
def atomic_path(path: str | os.PathLike) -> Iterator[Path]:
    """Yield a temporary path beside ``path``; on success rename it onto ``path``.

    The temporary file sits in the same folder (so ``os.replace`` is atomic), takes the
    permissions of the file it replaces (0644 for a new file), and is removed if the
    block raises, leaving ``path`` as it was.
    """
    target = Path(path)
    mode = stat.S_IMODE(target.stat().st_mode) if target.exists() else 0o644
    handle, temporary = tempfile.mkstemp(dir=target.parent, prefix=f".{target.name}.", suffix=".tmp")
    os.close(handle)
    try:
        yield Path(temporary)
        os.chmod(temporary, mode)
        os.replace(temporary, target)
    except BaseException:
        Path(temporary).unlink(missing_ok=True)
        raise


def atomic_write_text(path: str | os.PathLike, text: str) -> None:
    """Write ``text`` (UTF-8, line endings as given) to ``path`` atomically, flushed to disk."""
    with atomic_path(path) as temporary, open(temporary, "w", encoding="utf-8", newline="") as stream:
        stream.write(text)
        stream.flush()
        os.fsync(stream.fileno())
