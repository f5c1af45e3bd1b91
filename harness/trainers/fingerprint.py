"""The trainer's source fingerprint: which Python files a stored run was trained by.

A stored run records ``"sha256:<hex>"`` of the source of the trainer that made it
(``harness.store.results.TRAINER_SOURCE``), so that a run trained by other code, say
before a refactor, is never taken from the cache or resumed as if it were current, and
provenance can say "the trainer's source code changed". The rule for which files count:

- A built-in trainer (a function of ``harness``) is covered by the modules it actually
  uses: its own module and every ``harness`` module it imports, transitively, plus the
  ``__init__.py`` of each package on the way (Python runs them on import). For DQN that is
  ``trainers/dqn.py``, ``nn.py``, ``replay.py``, ``envs.py``, ``schedule.py`` and the
  ``core`` modules they import; an edit to a report, the CLI or the statistics does not
  change it.
- A user trainer is covered by every ``.py`` file of its top-level package (or its
  module's single file), because user code may reach its own helpers in ways an import
  statement does not show, plus the ``harness`` modules those files import, transitively
  as above: a user trainer that delegates to a built-in one changes when that one does.

Imports are read from the source with :mod:`ast`, never executed, wherever they stand
(inside a function or an ``if TYPE_CHECKING:`` block too: counting one import too many
costs a retrain, one too few a stale run), so the list follows the code and cannot go
stale. Other installed packages count through their versions (``harness.manifest.pins``),
not here. A trainer that runs outside Python (a command) fingerprints its own files by
another path.
"""

from __future__ import annotations

import ast
import hashlib
import sys
import threading
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

__all__ = ["source_files", "source_fingerprint"]

_SELF = __name__.split(".")[0]
# One ast.parse at a time in this process. CPython 3.11 keeps the AST constructor's recursion depth
# in per-interpreter state, so two threads parsing at once (a dask worker with two threads, each
# resolving a trainer) can corrupt it: "SystemError: AST constructor recursion depth mismatch".
# Seen on 3.11.7, not on 3.12.1 or 3.13.0 (docs/running.md, executors); the lock costs nothing.
_PARSE_LOCK = threading.Lock()


def _roots(top: str) -> list[Path]:
    """The folders a top-level package's modules live in ([] for a single-file module)."""
    module = sys.modules.get(top)
    return [Path(d) for d in getattr(module, "__path__", None) or ()]


def _module_file(module: str) -> tuple[str, Path] | None:
    """``(name, file)`` of a module of an imported top-level package, found without importing it."""
    top, *rest = module.split(".")
    roots = _roots(top)
    if not roots:
        file = getattr(sys.modules.get(top), "__file__", None)
        return (Path(file).name, Path(file)) if not rest and file else None
    for root in roots:
        for candidate in (root.joinpath(*rest, "__init__.py"), root.joinpath(*rest).with_suffix(".py") if rest else None):
            if candidate is not None and candidate.is_file():
                return "/".join([top, *(candidate.relative_to(root).parts)]), candidate
    return None


def _imports(module: str, file: Path, is_package: bool) -> Iterator[str]:
    """Every module name ``file`` imports, and ``package.name`` for each ``from package import name``."""
    package = module if is_package else module.rpartition(".")[0]
    source = file.read_bytes()
    with _PARSE_LOCK:
        tree = ast.parse(source, filename=str(file))
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            yield from (alias.name for alias in node.names)
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")
                base = base[: len(base) - node.level + 1]
                source = ".".join(base + ([node.module] if node.module else []))
            else:
                source = node.module or ""
            yield source
            yield from (f"{source}.{alias.name}" for alias in node.names)


def source_files(function: Callable[..., Any]) -> list[tuple[str, Path]]:
    """The files :func:`source_fingerprint` hashes, as ``(name, path)`` sorted by name.

    ``name`` is the path from the folder holding the top-level package, e.g.
    ``"harness/trainers/dqn.py"``; the module docstring gives the rule.
    """
    top = function.__module__.split(".")[0]
    files: dict[str, Path] = {}
    queue: list[tuple[str, Path]] = []

    def add(module: str) -> None:
        parts = module.split(".")
        for k in range(1, len(parts) + 1):  # the packages on the way run on import
            found = _module_file(".".join(parts[:k]))
            if found is not None and found[0] not in files:
                files[found[0]] = found[1]
                queue.append((".".join(parts[:k]), found[1]))

    if top == _SELF:
        add(function.__module__)
    else:
        roots = _roots(top)
        for root in roots:
            for file in root.rglob("*.py"):
                rel = file.relative_to(root).with_suffix("").parts
                files["/".join([top, *file.relative_to(root).parts])] = file
                queue.append((".".join([top, *(rel[:-1] if rel[-1] == "__init__" else rel)]), file))
        if not roots:
            add(top)
    follow = {_SELF, top}
    while queue:
        module, file = queue.pop()
        for imported in _imports(module, file, is_package=file.name == "__init__.py"):
            if imported.split(".")[0] in follow:
                add(imported)
    return sorted(files.items())


def source_fingerprint(function: Callable[..., Any]) -> str:
    """``"sha256:<hex>"`` of the source files of the trainer ``function`` is part of.

    The files are those of :func:`source_files` (the module docstring gives the rule),
    hashed with their names in sorted order, so the fingerprint is a pure function of
    their names and bytes.
    """
    digest = hashlib.sha256()
    for name, file in source_files(function):
        digest.update(name.encode() + b"\0" + file.read_bytes() + b"\0")
    return "sha256:" + digest.hexdigest()
