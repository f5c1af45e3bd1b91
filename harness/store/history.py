"""What became of a baseline since a git ref: a re-recorded baseline is shown, never slipped in.

A pull request can lower a baseline and re-record it so that the gate passes
against it. ``rlharness verify --baseline-ref REF`` reads the baseline file as it
was at ``REF`` (for a pull request, the merge base: ``git merge-base HEAD
origin/main``) and compares it with the file the gate uses: mean returns, seeds,
configuration, installed versions, date and recorder. Every report puts the
outcome first.

git runs as a subprocess with an argument list (never a shell). The ref must
name a commit; the old file is read as a raw blob (``git cat-file``: no filters,
no hooks) and checked like any baseline (schema, checksum) before it is
compared. Nothing is written.
"""

from __future__ import annotations

import dataclasses
import getpass
import os
import subprocess
from pathlib import Path

import numpy as np

from harness.core.errors import BaselineError
from harness.core.seeding import describe_seed_change
from harness.core.spec import config_changes
from harness.store.baseline import Baseline, parse_baseline, read_baseline

__all__ = ["BaselineHistory", "baseline_at_ref", "baseline_history", "recorder_name"]

_OPTION = "--baseline-ref"
STATUSES = ("unchanged", "changed", "new", "removed")


@dataclasses.dataclass(frozen=True, slots=True)
class BaselineHistory:
    """How a baseline file differs from its version at a git ref.

    Attributes
    ----------
    ref
        The git ref as the user gave it.
    path
        The baseline file.
    status
        ``"unchanged"``, ``"changed"``, ``"new"`` (absent at the ref) or ``"removed"``
        (present at the ref, absent now).
    changes
        One phrase per aspect that changed, the mean returns first.
    """

    ref: str
    path: str
    status: str
    changes: tuple[str, ...] = ()

    @property
    def changed(self) -> bool:
        return self.status != "unchanged"

    @property
    def what(self) -> str:
        """``"is unchanged"``, ``"changed"``, ``"is new"`` or ``"was removed"``."""
        return {"unchanged": "is unchanged", "changed": "changed", "new": "is new", "removed": "was removed"}[self.status]

    @property
    def detail(self) -> str:
        """What changed (empty when nothing did)."""
        if self.status == "new":
            return f"{self.path} was absent there, so nothing vouches for it but this change; review it"
        if self.status == "removed":
            return f"{self.path} is gone, so verification falls back on published references; review the removal"
        return "; ".join(self.changes)

    @property
    def reading(self) -> str:
        """One sentence: ``the baseline changed since REF: ...``."""
        if self.status == "unchanged":
            return f"the baseline is unchanged since {self.ref}."
        return f"the baseline {self.what} since {self.ref}: {self.detail}."

    @property
    def headline(self) -> str:
        """The first line of every report when the baseline changed: ``BASELINE CHANGED since REF: ...``."""
        return f"BASELINE {self.status.upper()} since {self.ref}: {self.detail}."

    def to_json(self) -> dict:
        return {"ref": self.ref, "path": self.path, "status": self.status, "changes": list(self.changes),
                "reading": self.reading}


def _git(args: list[str], cwd: Path) -> subprocess.CompletedProcess:
    try:
        return subprocess.run(["git", *args], cwd=cwd, capture_output=True, check=False, timeout=60)
    except FileNotFoundError:
        raise BaselineError(f"{_OPTION} needs the git command, which is not installed or not on PATH") from None
    except subprocess.TimeoutExpired:
        raise BaselineError(f"{_OPTION}: git did not answer within 60 s in {cwd}") from None


def _existing_folder(path: Path) -> Path:
    folder = path.absolute().parent
    while not folder.is_dir():
        folder = folder.parent
    return folder


def baseline_at_ref(path: str | os.PathLike, ref: str) -> Baseline | None:
    """The baseline file at ``path`` as it was at the git ref ``ref``; ``None`` if it was absent there.

    Raises
    ------
    BaselineError
        ``ref`` is not a ref, git is missing, ``path`` is not inside a git repository, the ref
        is unknown there, or the file at the ref is not a valid baseline.
    """
    if not isinstance(ref, str) or not ref.strip() or ref.startswith("-"):
        raise BaselineError(f"{_OPTION} {ref!r} is not a git ref: name a branch, tag or commit (e.g. the merge base)")
    path = Path(path)
    folder = _existing_folder(path)
    top = _git(["rev-parse", "--show-toplevel"], folder)
    if top.returncode != 0:
        raise BaselineError(f"{_OPTION} {ref}: {folder} is not inside a git repository, so there is no earlier "
                            f"baseline to compare with; run verify in the repository's checkout or drop {_OPTION}")
    root = Path(top.stdout.decode().strip()).resolve()
    commit = _git(["rev-parse", "--verify", "--quiet", "--end-of-options", f"{ref}^{{commit}}"], root)
    if commit.returncode != 0:
        raise BaselineError(f"{_OPTION}: unknown git ref {ref!r} in {root}; name an existing branch, tag or commit "
                            "(a CI checkout may be shallow: fetch the history, e.g. fetch-depth 0)")
    try:
        relative = (folder.resolve() / path.name).relative_to(root).as_posix()
    except ValueError:
        raise BaselineError(f"{_OPTION}: the baseline {path} is outside the git repository {root}") from None
    blob = f"{commit.stdout.decode().strip()}:{relative}"
    if _git(["cat-file", "-e", blob], root).returncode != 0:
        return None
    shown = _git(["cat-file", "blob", blob], root)
    if shown.returncode != 0:
        raise BaselineError(f"{_OPTION}: git cannot read {relative} at {ref}: {shown.stderr.decode().strip()}")
    try:
        return parse_baseline(shown.stdout.decode("utf-8", errors="replace"), path=f"{relative} at {ref}")
    except BaselineError as exc:
        raise BaselineError(f"{_OPTION}: the baseline as it was at {ref} is not valid, so nothing can be compared "
                            f"with it: {exc}") from None


def _final_mean(baseline: Baseline) -> float:
    return float(np.mean([r.curve.checkpoints[-1].mean for r in baseline.runs]))


def _curve_mean(baseline: Baseline) -> float:
    return float(np.mean([np.mean(r.curve.means) for r in baseline.runs]))


def _abbreviate(value: str | None) -> str:
    if value is None:
        return "-"
    return value[:15] + "..." if value.startswith("sha256:") else value


def _differences(old: Baseline, new: Baseline) -> tuple[str, ...]:
    out = []
    if [(r.seed, r.curve) for r in old.runs] == [(r.seed, r.curve) for r in new.runs]:
        out.append("curves bitwise identical")
    else:
        out.append(f"final mean return {_final_mean(old):.4g} -> {_final_mean(new):.4g}, mean over all "
                   f"checkpoints {_curve_mean(old):.4g} -> {_curve_mean(new):.4g}")
    seeds_old, seeds_new = [r.seed for r in old.runs], [r.seed for r in new.runs]
    if seeds_old != seeds_new:
        out.append("seeds: " + describe_seed_change(seeds_old, seeds_new))
    if old.config_hash != new.config_hash:
        keys = [(k, a, b) for k, a, b in config_changes(old.config, new.config) if k != "seeds"]
        listed = ", ".join(f"{k} {a!r} -> {b!r}" for k, a, b in keys[:5]) + (", ..." if len(keys) > 5 else "")
        out.append(f"configuration changed ({listed})" if listed else "configuration hash changed")
    versions = [(k, old.versions.get(k), new.versions.get(k)) for k in sorted(old.versions.keys() | new.versions.keys())
                if old.versions.get(k) != new.versions.get(k)]
    if versions:
        out.append("versions: " + ", ".join(f"{k} {_abbreviate(a)} -> {_abbreviate(b)}" for k, a, b in versions))
    who_old, who_new = (b.recorder or "an unnamed recorder" for b in (old, new))
    out.append(f"recorded by {who_old} on {old.recorded} -> by {who_new} on {new.recorded}")
    return tuple(out)


def baseline_history(path: str | os.PathLike, ref: str) -> BaselineHistory:
    """Compare the baseline file at ``path`` with its version at the git ref ``ref``.

    Raises
    ------
    BaselineError
        As :func:`baseline_at_ref`, or the current file is not a valid baseline.
    """
    path = Path(path)
    old = baseline_at_ref(path, ref)
    if not path.exists():
        return BaselineHistory(ref, str(path), "unchanged" if old is None else "removed")
    new = read_baseline(path)
    if old is None:
        return BaselineHistory(ref, str(path), "new")
    if old.checksum == new.checksum:
        return BaselineHistory(ref, str(path), "unchanged")
    return BaselineHistory(ref, str(path), "changed", _differences(old, new))


def recorder_name(folder: str | os.PathLike = ".") -> str | None:
    """Who is recording: ``git config user.name`` in ``folder``, else the login name, else ``None``."""
    try:
        done = subprocess.run(["git", "config", "user.name"], cwd=folder, capture_output=True, check=False,
                              timeout=30)
        name = done.stdout.decode(errors="replace").strip() if done.returncode == 0 else ""
    except (OSError, subprocess.TimeoutExpired):
        name = ""
    if name:
        return name
    try:
        return getpass.getuser() or None
    except (OSError, KeyError):
        return None
