"""Exceptions and warnings of rl-harness.

Every exception the package raises derives from :class:`HarnessError`, so one
``except HarnessError`` catches them all; subclasses also inherit the builtin
they refine (a bad manifest is a ``ValueError`` too). Messages name the file,
the key and the fix.
"""

from __future__ import annotations

import difflib
from collections.abc import Iterable

__all__ = [
    "BaselineError",
    "CacheError",
    "ConfigError",
    "HarnessError",
    "ManifestError",
    "ResultsError",
    "RunFailedError",
    "TooFewSeedsWarning",
    "did_you_mean",
]


class HarnessError(Exception):
    """Root of every error raised by rl-harness."""


class ManifestError(HarnessError, ValueError):
    """A manifest is malformed or asks for something impossible.

    Parameters
    ----------
    message
        What is wrong and how to fix it.
    path
        The manifest file, if known.
    key
        The dotted key path inside the manifest (``"trainer.config.gamma"``), if known.
    """

    def __init__(self, message: str, *, path: str | None = None, key: str | None = None):
        self.path = path
        self.key = key
        where = []
        if path is not None:
            where.append(str(path))
        if key is not None:
            where.append(f"[{key}]")
        prefix = " ".join(where)
        super().__init__(f"{prefix}: {message}" if prefix else message)


class ConfigError(ManifestError):
    """A trainer configuration value is invalid (a ManifestError raised by a trainer's schema)."""


class BaselineError(HarnessError, ValueError):
    """A stored baseline is missing, belongs to another manifest, or fails its checksum."""


class ResultsError(HarnessError, ValueError):
    """A stored result file is missing, truncated, of an unknown schema or inconsistent."""


class CacheError(HarnessError, ValueError):
    """The run cache folder cannot be trusted or used (a symlink out of it, a file in its place)."""


class RunFailedError(HarnessError, RuntimeError):
    """One or more training runs failed; the message lists which seeds and why."""


class TooFewSeedsWarning(RuntimeWarning):
    """The number of seeds is too small for the requested statistic to be reliable."""


def did_you_mean(word: str, choices: Iterable[str]) -> str:
    """Return a ``" Did you mean 'x'?"`` hint followed by the sorted valid choices.

    Examples
    --------
    >>> did_you_mean("gama", ["gamma", "budget"])
    " Did you mean 'gamma'? Valid choices: 'budget', 'gamma'."
    """
    options = sorted(set(choices))
    close = difflib.get_close_matches(word, options, n=1)
    hint = f" Did you mean {close[0]!r}?" if close else ""
    listed = ", ".join(repr(o) for o in options)
    return f"{hint} Valid choices: {listed}."
