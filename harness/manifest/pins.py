"""Version pins: what a result was produced with, and drift from what is installed now.

The exact (bitwise) comparison of a rerun with a baseline is only meaningful on
the same Python, NumPy, SciPy, gymnasium and rl-harness, and on the same BLAS
running the same CPU kernel (OpenBLAS picks a kernel per CPU at load time, and
different kernels sum in different orders, so they round differently).
threadpoolctl reports the BLAS library, its version and that kernel. A
manifest's ``[pins]`` table records all of this plus the config hash;
``rlharness pin`` writes it, ``rlharness drift`` compares it with the
installed environment. Drift forbids the exact check, never the statistical one.
"""

from __future__ import annotations

import dataclasses
import importlib.metadata
import os
import platform
from collections.abc import MutableMapping
from pathlib import Path

import numpy as np
import threadpoolctl
import tomlkit
import tomlkit.exceptions

import harness
from harness.core.atomic import atomic_write_text
from harness.core.errors import ManifestError

__all__ = ["DriftRow", "Pins", "blas_in_use", "drift", "installed_pins", "write_pins"]


@dataclasses.dataclass(frozen=True, slots=True)
class Pins:
    """The ``[pins]`` table of a manifest: versions, BLAS and the config hash they were taken with.

    Attributes
    ----------
    python, numpy, scipy, gymnasium, rl_harness
        Versions.
    blas
        The BLAS library NumPy calls and its version (``"openblas 0.3.27"``).
    blas_kernel
        The CPU kernel that BLAS dispatches to (``"Haswell"``, ``"SkylakeX"``), or ``"unknown"``.
    config_hash
        The manifest's config hash when the pins were written.
    """

    python: str
    numpy: str
    scipy: str
    gymnasium: str
    rl_harness: str
    blas: str
    blas_kernel: str
    config_hash: str

    @property
    def versions(self) -> dict[str, str]:
        """Everything but the config hash: the installed environment."""
        return {f.name: getattr(self, f.name) for f in dataclasses.fields(self) if f.name != "config_hash"}

    def to_json(self) -> dict[str, str]:
        return dataclasses.asdict(self)


@dataclasses.dataclass(frozen=True, slots=True)
class DriftRow:
    """One pinned item next to the installed one."""

    key: str
    pinned: str
    installed: str

    @property
    def matches(self) -> bool:
        return self.pinned == self.installed


def _distribution_version(name: str) -> str:
    try:
        return importlib.metadata.version(name)
    except importlib.metadata.PackageNotFoundError:
        return "not installed"


def blas_in_use() -> tuple[str, str]:
    """``(library and version, CPU kernel)`` of the BLAS that NumPy calls, as threadpoolctl reports it.

    NumPy's build configuration names the BLAS and its version; when several BLAS libraries
    are loaded (SciPy wheels bring their own) the one whose version matches NumPy's is chosen.
    """
    libraries = [lib for lib in threadpoolctl.threadpool_info() if lib.get("user_api") == "blas"]
    if not libraries:
        return "none", "unknown"
    try:
        built = np.show_config(mode="dicts")["Build Dependencies"]["blas"].get("version", "")
    except (KeyError, TypeError, ValueError):
        built = ""
    chosen = next(
        (lib for lib in libraries if built and str(lib.get("version") or "").startswith(str(built))), libraries[0]
    )
    library = f"{chosen.get('internal_api', 'blas')} {chosen.get('version') or 'unknown'}"
    return library, str(chosen.get("architecture") or "unknown")


def installed_pins(*, config_hash: str) -> Pins:
    """The pins of the running environment, stamped with ``config_hash``."""
    blas, kernel = blas_in_use()
    return Pins(
        python=platform.python_version(),
        numpy=np.__version__,
        scipy=_distribution_version("scipy"),
        gymnasium=_distribution_version("gymnasium"),
        rl_harness=harness.__version__,
        blas=blas,
        blas_kernel=kernel,
        config_hash=config_hash,
    )


def drift(pinned: Pins, installed: Pins) -> tuple[DriftRow, ...]:
    """One row per pinned item, in the order of :class:`Pins`; ``row.matches`` is False where they differ.

    Examples
    --------
    >>> a = Pins("3.11.7", "2.1.0", "1.13.0", "1.0.0", "0.1.0", "openblas 0.3.27", "Haswell", "sha256:0")
    >>> [r.key for r in drift(a, dataclasses.replace(a, numpy="2.2.0")) if not r.matches]
    ['numpy']
    """
    return tuple(
        DriftRow(f.name, str(getattr(pinned, f.name)), str(getattr(installed, f.name)))
        for f in dataclasses.fields(Pins)
    )


_PINS_COMMENT = "written by `rlharness pin`; compared by `rlharness drift`"


def write_pins(path: str | os.PathLike, pins: Pins) -> None:
    """Write ``pins`` into the ``[pins]`` table of the TOML file at ``path``, in place.

    Existing keys keep their place and comments; the table is appended when
    missing. The file is replaced atomically (a temporary file in the same
    folder, then ``os.replace``), so a crash leaves either the old or the new file.
    """
    target = Path(path)
    try:
        document = tomlkit.parse(target.read_text(encoding="utf-8"))
    except tomlkit.exceptions.ParseError as exc:
        raise ManifestError(f"is not valid TOML: {exc}; fix the syntax there", path=str(target)) from None
    values = pins.to_json()
    table = document.get("pins")
    if table is not None and not isinstance(table, MutableMapping):
        raise ManifestError(f"must be a table, got {table!r}; remove the line to let it be written",
                            path=str(target), key="pins")
    if table is None:
        table = tomlkit.table()
        table.comment(_PINS_COMMENT)
        document["pins"] = table
    for key in [k for k in table if k not in values]:
        del table[key]
    for key, value in values.items():
        table[key] = value
    atomic_write_text(target, tomlkit.dumps(document))

