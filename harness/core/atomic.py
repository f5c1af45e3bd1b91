"""Atomic file writes: a reader sees the old file or the complete new one, never a partial write.

The temporary file is ``.<name>.<pid>.<random>.tmp`` beside the target. A writer killed
mid-write (SIGKILL, power loss) leaves it behind; no reader ever opens such a file, and
:func:`sweep_stale_temporaries` removes those whose writing process is gone (the runner
calls it on its results folder, the run cache on the folder it writes to).
"""

from __future__ import annotations

import contextlib
import os
import re
import stat
import tempfile
from collections.abc import Iterator
from pathlib import Path

__all__ = ["atomic_path", "atomic_write_text", "sweep_stale_temporaries"]

_TEMPORARY = re.compile(r"^\..+\.(?P<pid>[0-9]+)\.[^.]+\.tmp$")


@contextlib.contextmanager
def atomic_path(path: str | os.PathLike) -> Iterator[Path]:
    """Yield a temporary path beside ``path``; on success rename it onto ``path``.

    The temporary file sits in the same folder (so ``os.replace`` is atomic), takes the
    permissions of the file it replaces (0644 for a new file), and is removed if the
    block raises, leaving ``path`` as it was.
    """
    target = Path(path)
    mode = stat.S_IMODE(target.stat().st_mode) if target.exists() else 0o644
    handle, temporary = tempfile.mkstemp(dir=target.parent, prefix=f".{target.name}.{os.getpid()}.", suffix=".tmp")
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


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:  # another user's live process
        return True
    return True


def sweep_stale_temporaries(folder: str | os.PathLike) -> int:
    """Remove the temporary files of :func:`atomic_path` in ``folder`` whose writer is no longer running.

    A live writer's temporary file is left alone (its process id is in the name), so two
    runners sharing a folder on one machine do not disturb each other. Returns how many
    files were removed.
    """
    removed = 0
    try:
        entries = list(os.scandir(folder))
    except OSError:
        return 0
    for entry in entries:
        match = _TEMPORARY.match(entry.name)
        if match is None or not entry.is_file(follow_symlinks=False) or _alive(int(match["pid"])):
            continue
        with contextlib.suppress(FileNotFoundError):
            os.unlink(entry.path)
            removed += 1
    return removed
