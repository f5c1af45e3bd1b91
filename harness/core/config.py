"""Resolve a TOML table into a frozen dataclass: the schema is the dataclass.

A schema is a ``@dataclass(frozen=True, slots=True)``: its field names are the
keys, its defaults are the defaults, its annotations are the types and its
``__post_init__`` checks ranges with :func:`check_number` (or raises
``harness.core.errors.ConfigError(message, key="field")`` for other rules). :func:`resolve` turns a
mapping read from TOML into an instance of the schema and reports every problem
as a :class:`~harness.core.errors.ConfigError` carrying the file, the full dotted key
path (``"trainer.settings.discount"``) and the fix.

Supported annotations: ``bool``, ``int``, ``float`` (integers are accepted and
converted), ``str``, ``Literal[...]``, ``X | None`` (``None`` only as a default:
TOML has no null), ``tuple[X, ...]`` (TOML arrays become tuples), nested
schemas (sub-tables), ``Mapping[str, X]`` (tables of values) and ``Any``
(any TOML value except dates and times, which JSON cannot carry).
"""

from __future__ import annotations

import dataclasses
import datetime
import math
import numbers
import types
import typing
from collections.abc import Mapping
from typing import Any, TypeVar

from harness.core.errors import ConfigError, ManifestError, did_you_mean

__all__ = ["check_json_value", "check_number", "resolve", "to_json"]

T = TypeVar("T")

_TYPE_WORDS = {bool: "true or false", int: "an integer", float: "a number", str: "a string"}


def _join(prefix: str, key: str | int) -> str:
    if isinstance(key, int):
        return f"{prefix}[{key}]"
    return f"{prefix}.{key}" if prefix else key


def _describe(value: object) -> str:
    kinds = {bool: "a boolean", int: "an integer", float: "a number", str: "a string",
             list: "an array", tuple: "an array", dict: "a table"}
    for kind, word in kinds.items():
        if type(value) is kind:
            return f"{word} ({value!r})"
    if isinstance(value, Mapping):
        return "a table"
    return f"{type(value).__name__} ({value!r})"


def _bare_message(exc: ManifestError) -> str:
    """The message of ``exc`` without the ``path [key]: `` prefix ``ManifestError`` adds."""
    text = str(exc)
    where = " ".join(p for p in (exc.path and str(exc.path), exc.key and f"[{exc.key}]") if p)
    return text[len(where) + 2:] if where and text.startswith(where + ": ") else text


def check_json_value(value: Any, *, path: str | None, key: str) -> Any:
    """Return ``value`` (tuples for arrays, dicts for tables) if JSON can carry it, else raise.

    TOML dates and times, and non-finite floats, have no canonical JSON form
    and so cannot enter a configuration hash.
    """
    if isinstance(value, (datetime.date, datetime.time)):
        raise ConfigError(f"dates and times are not allowed here, got {value!r}; write it as a string",
                          path=path, key=key)
    if isinstance(value, float) and not math.isfinite(value):
        raise ConfigError(f"must be a finite number, got {value!r}", path=path, key=key)
    if isinstance(value, Mapping):
        return {str(k): check_json_value(v, path=path, key=_join(key, str(k))) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return tuple(check_json_value(v, path=path, key=_join(key, i)) for i, v in enumerate(value))
    if value is None or isinstance(value, (bool, int, float, str)):
        return value
    raise ConfigError(f"must be a TOML value, got {_describe(value)}", path=path, key=key)


def _range_words(low: float, high: float, open_low: bool, open_high: bool, integer: bool) -> str:
    if integer:
        if high == math.inf:
            return {0: "a non-negative integer", 1: "a positive integer"}.get(low, f"an integer of at least {low:g}")
        return f"an integer in [{low:g}, {high:g}]"
    if (low, high) == (-math.inf, math.inf):
        return "a finite number"
    if high == math.inf:
        if low == 0:
            return "a positive finite number" if open_low else "a non-negative finite number"
        return f"a finite number {'above' if open_low else 'of at least'} {low:g}"
    if low == -math.inf:
        return f"a finite number {'below' if open_high else 'of at most'} {high:g}"
    if open_low and open_high and math.isfinite(low) and math.isfinite(high):
        return f"a number strictly between {low:g} and {high:g}"
    return f"a number in {'(' if open_low else '['}{low:g}, {high:g}{')' if open_high else ']'}"


def check_number(
    value: object,
    key: str,
    *,
    low: float = -math.inf,
    high: float = math.inf,
    open_low: bool = False,
    open_high: bool = False,
    integer: bool = False,
) -> Any:
    """The one range check of a settings value: ``value`` as a float (an int with ``integer``).

    For a schema's ``__post_init__`` (a trainer's settings, a manifest table, the gate
    policy): the value must be a finite real number (an integer with ``integer``; never a
    boolean) in the interval from ``low`` to ``high``, each end closed unless ``open_low`` /
    ``open_high``. NumPy scalars count as numbers.

    Raises
    ------
    ConfigError
        Naming ``key``, the interval in words and the value, e.g. ``[discount]: must be a
        number in [0, 1], got 1.5`` or ``[every]: must be a positive integer, got 0``.

    Examples
    --------
    >>> check_number(1, "discount", low=0, high=1)
    1.0
    >>> check_number(0.0, "step_size", low=0, open_low=True)
    Traceback (most recent call last):
    ...
    harness.core.errors.ConfigError: [step_size]: must be a positive finite number, got 0.0
    """
    kind = numbers.Integral if integer else numbers.Real
    ok = isinstance(value, kind) and not isinstance(value, bool) and math.isfinite(value)
    if ok:
        ok = (low < value if open_low else low <= value) and (value < high if open_high else value <= high)
    if not ok:
        raise ConfigError(f"must be {_range_words(low, high, open_low, open_high, integer)}, got {value!r}", key=key)
    return int(value) if integer else float(value)


def _convert(value: Any, hint: Any, *, path: str | None, key: str) -> Any:
    """Convert ``value`` to the annotation ``hint`` or raise a ConfigError naming ``key``."""
    origin = typing.get_origin(hint)
    args = typing.get_args(hint)
    if hint is Any:
        return check_json_value(value, path=path, key=key)
    if origin in (typing.Union, types.UnionType):
        inner = [a for a in args if a is not type(None)]
        if value is None and len(inner) < len(args):
            return None
        if len(inner) == 1:
            return _convert(value, inner[0], path=path, key=key)
        for option in inner:
            try:
                return _convert(value, option, path=path, key=key)
            except ConfigError:
                continue
        raise ConfigError(f"has the wrong type: got {_describe(value)}", path=path, key=key)
    if origin is typing.Literal:
        if value in args and type(value) in {type(a) for a in args}:
            return value
        hint_text = did_you_mean(str(value), [str(a) for a in args])
        raise ConfigError(f"must be one of the listed values, got {value!r}.{hint_text}", path=path, key=key)
    if origin is tuple:
        if not isinstance(value, (list, tuple)):
            raise ConfigError(f"must be an array, got {_describe(value)}; write it as [a, b, ...]",
                              path=path, key=key)
        if len(args) == 2 and args[1] is Ellipsis:
            return tuple(_convert(v, args[0], path=path, key=_join(key, i)) for i, v in enumerate(value))
        if len(value) != len(args):
            raise ConfigError(f"must be an array of {len(args)} values, got {len(value)}", path=path, key=key)
        return tuple(_convert(v, a, path=path, key=_join(key, i)) for i, (v, a) in enumerate(zip(value, args)))
    if origin in (Mapping, dict) or hint in (Mapping, dict):
        if not isinstance(value, Mapping):
            raise ConfigError(f"must be a table, got {_describe(value)}; write it as {{ key = value }}",
                              path=path, key=key)
        value_hint = args[1] if len(args) == 2 else Any
        return {str(k): _convert(v, value_hint, path=path, key=_join(key, str(k))) for k, v in value.items()}
    if isinstance(hint, type) and dataclasses.is_dataclass(hint):
        return resolve(hint, value, path=path, key=key)
    if hint is float:
        if isinstance(value, (int, float)) and not isinstance(value, bool):
            if not math.isfinite(value):
                raise ConfigError(f"must be a finite number, got {value!r}", path=path, key=key)
            return float(value)
    elif hint is int:
        if isinstance(value, int) and not isinstance(value, bool):
            return int(value)
        if isinstance(value, float) and value.is_integer():
            raise ConfigError(f"must be an integer, got {value!r}; write {int(value)} without the decimal point",
                              path=path, key=key)
    elif hint in (bool, str):
        if type(value) is hint:
            return value
    else:
        raise TypeError(f"schema annotation {hint!r} at {key!r} is not supported by harness.core.config")
    raise ConfigError(f"must be {_TYPE_WORDS[hint]}, got {_describe(value)}", path=path, key=key)


def resolve(schema: type[T], data: Any, *, path: str | None = None, key: str = "") -> T:
    """Validate ``data`` (a TOML table) against the dataclass ``schema`` and build an instance.

    Parameters
    ----------
    schema
        A dataclass whose fields are the table's keys.
    data
        The table as read from TOML (a mapping); missing keys take the field defaults.
    path
        The file the table comes from, named in every error.
    key
        The dotted key path of the table in its file (``"trainer.settings"``); ``""`` for the top.

    Returns
    -------
    An instance of ``schema``; arrays become tuples.

    Raises
    ------
    ConfigError
        For a table that is not a table, an unknown key (with a "did you mean"), a missing
        required key, a value of the wrong type, or a value that the schema's
        ``__post_init__`` rejects; the error names ``path`` and the full key path.

    Examples
    --------
    >>> @dataclasses.dataclass(frozen=True, slots=True)
    ... class Point:
    ...     x: float = 0.0
    ...     tags: tuple[str, ...] = ()
    >>> resolve(Point, {"x": 1, "tags": ["a"]})
    Point(x=1.0, tags=('a',))
    >>> resolve(Point, {"y": 1}, path="m.toml", key="point")
    Traceback (most recent call last):
    ...
    harness.core.errors.ConfigError: m.toml [point.y]: unknown key 'y'. Valid choices: 'tags', 'x'. Remove it or fix its spelling.
    """
    if not (isinstance(schema, type) and dataclasses.is_dataclass(schema)):
        raise TypeError(f"`schema` must be a dataclass type, got {schema!r}")
    if not isinstance(data, Mapping):
        raise ConfigError(f"must be a table, got {_describe(data)}", path=path, key=key or None)
    fields = {f.name: f for f in dataclasses.fields(schema) if f.init}
    for name in data:
        if name not in fields:
            raise ConfigError(
                f"unknown key {name!r}.{did_you_mean(str(name), fields)} Remove it or fix its spelling.",
                path=path, key=_join(key, str(name)),
            )
    hints = typing.get_type_hints(schema)
    values = {}
    for name, field in fields.items():
        if name in data:
            values[name] = _convert(data[name], hints[name], path=path, key=_join(key, name))
        elif field.default is dataclasses.MISSING and field.default_factory is dataclasses.MISSING:
            raise ConfigError(f"is required: add `{name} = ...` to the table", path=path, key=_join(key, name))
    try:
        return schema(**values)
    except ConfigError as exc:
        inner = exc.key if exc.key is not None else ""
        raise ConfigError(_bare_message(exc), path=path, key=_join(key, inner) if inner else (key or None)) from None
    except (TypeError, ValueError) as exc:
        raise ConfigError(str(exc), path=path, key=key or None) from None


def to_json(instance: Any) -> dict:
    """The fields of a schema instance as a JSON-compatible dict (tuples stay tuples; JSON writes lists)."""
    if not dataclasses.is_dataclass(instance) or isinstance(instance, type):
        raise TypeError(f"`instance` must be a dataclass instance, got {instance!r}")
    return {f.name: _plain(getattr(instance, f.name)) for f in dataclasses.fields(instance)}


def _plain(value: Any) -> Any:
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return to_json(value)
    if isinstance(value, Mapping):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return tuple(_plain(v) for v in value)
    return value
