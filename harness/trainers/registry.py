"""Trainer resolution: a manifest's ``[trainer] use`` -> the functions that train and their settings schema.

``use`` is either a built-in name (:data:`BUILTIN_TRAINERS`) or an entry point
``"package.module:function"`` naming a user trainer. Both resolve to the same
:class:`Trainer`. Modules are imported only when a name is resolved (the lazy
``"module:attr"`` loading of gymnasium's ``load_env_creator``), so importing
this module costs nothing and a broken optional trainer breaks only the
manifests that use it.

A user trainer's settings pass through as the manifest gives them, unless the
function has a ``settings_type`` attribute naming a dataclass; then the
``[trainer.settings]`` table is validated and completed against it exactly as
for the built-ins::

    def train(run): ...
    train.settings_type = MySettings
"""

from __future__ import annotations

import dataclasses
import importlib
import re
import sys
import types
from collections.abc import Callable, Mapping
from pathlib import Path
from typing import Any

from harness.core import config
from harness.core.errors import ConfigError, ManifestError, did_you_mean

__all__ = [
    "BUILTIN_TRAINERS",
    "ENTRY_POINT_RE",
    "Trainer",
    "TrainerSpec",
    "ModuleCodeError",
    "load_entry_point",
    "resolve_trainer",
]

#: ``package.module:attribute`` (dotted module, one attribute name).
ENTRY_POINT_RE = re.compile(r"^(?P<module>[A-Za-z_]\w*(?:\.[A-Za-z_]\w*)*):(?P<attr>[A-Za-z_]\w*)$")


@dataclasses.dataclass(frozen=True, slots=True)
class TrainerSpec:
    """Where a built-in trainer's pieces live, as ``"module:attr"`` entry points (loaded on use)."""

    train: str
    settings: str
    lockstep: str | None = None
    lockstep_size: str | None = None


#: The built-in trainers by the name a manifest uses.
BUILTIN_TRAINERS: Mapping[str, TrainerSpec] = types.MappingProxyType(
    {
        "dqn": TrainerSpec(
            train="harness.trainers.dqn:train",
            settings="harness.trainers.dqn:DQNSettings",
            lockstep="harness.trainers.dqn:train_lockstep",
            lockstep_size="harness.trainers.dqn:lockstep_size",
        ),
        "tabular-q": TrainerSpec(
            train="harness.trainers.tabular:train",
            settings="harness.trainers.tabular:TabularQSettings",
        ),
    }
)


@dataclasses.dataclass(frozen=True, slots=True)
class Trainer:
    """A resolved trainer.

    Attributes
    ----------
    name
        The name the manifest used (built-in name or entry point).
    train
        ``train(run) -> Iterable[Checkpoint]``.
    settings_type
        The settings dataclass, or ``None`` when settings pass through unchecked.
    train_lockstep
        ``train_lockstep(runs) -> Iterable[tuple[Checkpoint, ...]]``, if the trainer offers it.
    lockstep_size
        ``lockstep_size(settings) -> int``: how many seeds to train together, if offered.
    """

    name: str
    train: Callable[..., Any]
    settings_type: type | None = None
    train_lockstep: Callable[..., Any] | None = None
    lockstep_size: Callable[..., int] | None = None

    def resolve_settings(
        self, table: Mapping[str, Any], *, path: str | None = None, key: str = "trainer.settings"
    ) -> dict[str, Any]:
        """Validate ``[trainer.settings]`` and fill defaults; returns the resolved settings as a dict.

        The result holds JSON values (arrays as tuples), so ``settings_type(**result)`` rebuilds
        the same settings and ``json.dumps`` writes it.
        """
        if self.settings_type is None:
            if not isinstance(table, Mapping):
                raise ConfigError(f"must be a table, got {table!r}", path=path, key=key)
            return config.check_json_value(table, path=path, key=key)
        return config.to_json(config.resolve(self.settings_type, table, path=path, key=key))


def _import(module_name: str, search_path: Path | None) -> types.ModuleType:
    try:
        return importlib.import_module(module_name)
    except ModuleNotFoundError as exc:
        missing_self = exc.name is not None and (module_name == exc.name or module_name.startswith(exc.name + "."))
        if search_path is None or not missing_self or str(search_path) in sys.path:
            raise
    sys.path.append(str(search_path))
    try:
        return importlib.import_module(module_name)
    finally:
        sys.path.remove(str(search_path))


class ModuleCodeError(ImportError):
    """A module's own code raised an exception, or called ``sys.exit``, while it was imported."""


def load_entry_point(entry: str, *, search_path: str | Path | None = None) -> Any:
    """Import ``"package.module:attr"`` and return the attribute.

    Parameters
    ----------
    entry
        The entry point.
    search_path
        A folder to look in as well when the module is not importable as installed (a
        manifest's folder); it is on ``sys.path`` only during the import.

    Raises
    ------
    ValueError
        If ``entry`` is not of the form ``"module:attr"``.
    ImportError
        If the module cannot be imported; :class:`ModuleCodeError` if its code raised or
        exited (``sys.exit``) while being imported.
    AttributeError
        If the module has no such attribute (the message suggests close names).
    """
    match = ENTRY_POINT_RE.match(entry) if isinstance(entry, str) else None
    if match is None:
        raise ValueError(f"entry point must look like 'package.module:function', got {entry!r}")
    try:
        module = _import(match["module"], Path(search_path) if search_path is not None else None)
    except ImportError:
        raise
    except (Exception, SystemExit) as exc:  # the module's own code raised, or called sys.exit, on import
        raise ModuleCodeError(
            f"module {match['module']!r} raised {type(exc).__name__} while being imported: {exc}", name=match["module"]
        ) from exc
    attr = match["attr"]
    if not hasattr(module, attr):
        public = [n for n in dir(module) if not n.startswith("_")]
        raise AttributeError(f"module {match['module']!r} has no attribute {attr!r}.{did_you_mean(attr, public)}")
    return getattr(module, attr)


def _optional(entry: str | None) -> Any:
    return None if entry is None else load_entry_point(entry)


def resolve_trainer(
    name: str, *, search_path: str | Path | None = None, path: str | None = None, key: str = "trainer.use"
) -> Trainer:
    """Resolve a built-in name or a ``"package.module:function"`` entry point to a :class:`Trainer`.

    Parameters
    ----------
    name
        ``"dqn"``, ``"tabular-q"`` or an entry point.
    search_path
        Extra folder for importing a user trainer's module (the manifest's folder).
    path, key
        The manifest file and key named in errors.

    Raises
    ------
    ManifestError
        Unknown built-in name (with a "did you mean"), malformed entry point, module that does
        not import, missing or non-callable function, or a ``settings_type`` that is not a
        dataclass.

    Examples
    --------
    >>> resolve_trainer("tabular-q").settings_type.__name__
    'TabularQSettings'
    >>> resolve_trainer("tabluar-q")
    Traceback (most recent call last):
    ...
    harness.core.errors.ManifestError: [trainer.use]: unknown trainer 'tabluar-q'. Did you mean 'tabular-q'? Valid choices: 'dqn', 'tabular-q'. A trainer of your own is named as 'package.module:function'.
    """
    if not isinstance(name, str):
        raise ManifestError(f"must be a string, got {name!r}", path=path, key=key)
    if name in BUILTIN_TRAINERS:
        spec = BUILTIN_TRAINERS[name]
        return Trainer(
            name=name,
            train=load_entry_point(spec.train),
            settings_type=load_entry_point(spec.settings),
            train_lockstep=_optional(spec.lockstep),
            lockstep_size=_optional(spec.lockstep_size),
        )
    if ":" not in name:
        raise ManifestError(
            f"unknown trainer {name!r}.{did_you_mean(name, BUILTIN_TRAINERS)} "
            "A trainer of your own is named as 'package.module:function'.",
            path=path, key=key,
        )
    try:
        function = load_entry_point(name, search_path=search_path)
    except ValueError as exc:
        raise ManifestError(str(exc), path=path, key=key) from None
    except ModuleCodeError as exc:
        raise ManifestError(
            f"importing the trainer's module failed: {exc}; fix the module (`python -c \"import "
            f"{exc.name}\"` in its folder shows the traceback)", path=path, key=key,
        ) from None
    except ImportError as exc:
        where = f" or in {str(search_path)!r}" if search_path is not None else ""
        raise ManifestError(
            f"cannot import the trainer's module ({type(exc).__name__}: {exc}); install it or put it on "
            f"PYTHONPATH{where}",
            path=path, key=key,
        ) from None
    except AttributeError as exc:
        raise ManifestError(f"{exc} Name the trainer function after the colon.", path=path, key=key) from None
    if not callable(function):
        raise ManifestError(f"{name!r} is not a function: it must be train(run) -> checkpoints", path=path, key=key)
    from harness.trainers.fingerprint import source_files  # here: importing the registry imports no trainer code

    if not source_files(function):
        raise ManifestError(
            f"{name!r} has no Python source file (a builtin or compiled module), so runs of it cannot be told apart "
            "from runs of other code; a trainer must be a function in a .py module",
            path=path, key=key,
        )
    settings_type = getattr(function, "settings_type", None)
    if settings_type is not None and not (isinstance(settings_type, type) and dataclasses.is_dataclass(settings_type)):
        raise ManifestError(
            f"{name!r} has `settings_type` = {settings_type!r}; it must be a dataclass (or be removed)",
            path=path, key=key,
        )
    return Trainer(name=name, train=function, settings_type=settings_type)
