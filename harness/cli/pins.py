"""``rlharness pin MANIFEST`` and ``rlharness drift MANIFEST``: a manifest's ``[pins]`` and the installed environment.

``pin`` validates the manifest and writes (or refreshes) its ``[pins]`` table in
place; on bad input nothing is written (exit 2). The file keeps its comments
and layout (tomlkit) and is replaced atomically. ``drift`` shows the pins next
to what is installed: exit 0 (the table is shown; with ``--fail-on-drift`` only
when nothing drifted), 1 with ``--fail-on-drift`` when something drifted, 2 on
bad input or a manifest without ``[pins]``.
"""

from __future__ import annotations

import argparse
from collections.abc import Iterable
from typing import Any

from rich.console import Console
from rich.table import Table

from harness.cli import ExitCode
from harness.core.errors import ManifestError
from harness.manifest.loader import Manifest, load_manifest
from harness.manifest.pins import DriftRow, Pins, drift, installed_pins, write_pins

__all__ = ["format_drift", "format_pin_changes", "register"]


def _table(title: str, columns: tuple[str, ...], rows: Iterable[tuple[str, ...]]) -> Table:
    table = Table(title=title, title_justify="left")
    table.add_column(columns[0])
    for column in columns[1:]:
        table.add_column(column, overflow="fold")
    for row in rows:
        table.add_row(*row)
    return table


def format_drift(rows: tuple[DriftRow, ...]) -> Table:
    """Pinned vs installed, one row per item, drifted rows marked."""
    return _table("pins vs installed", ("key", "pinned", "installed", ""),
                  ((r.key, r.pinned, r.installed, "same" if r.matches else "[bold red]DRIFT[/]") for r in rows))


def format_pin_changes(rows: tuple[DriftRow, ...] | None, written: dict[str, str]) -> Table:
    """Table of the pins written, with the previous value where one changed."""
    previous = {} if rows is None else {row.key: row.pinned for row in rows}

    def was(key: str, value: str) -> str:
        before = previous.get(key)
        return "(new)" if before is None else ("" if before == value else before)

    return _table("pins written", ("key", "value", "was"), ((k, v, was(k, v)) for k, v in written.items()))


def _pins_of(path: str) -> tuple[Manifest, Pins, tuple[DriftRow, ...] | None]:
    """The manifest, the installed pins for its config hash, and its own pins against them (``None`` without)."""
    manifest = load_manifest(path)
    installed = installed_pins(config_hash=manifest.config_hash)
    return manifest, installed, None if manifest.pins is None else drift(manifest.pins, installed)


def _pin(args: argparse.Namespace, console: Console) -> ExitCode:
    _, installed, rows = _pins_of(args.manifest)
    write_pins(args.manifest, installed)
    console.print(format_pin_changes(rows, installed.to_json()))
    return ExitCode.OK


def _drift(args: argparse.Namespace, console: Console) -> ExitCode:
    _, _, rows = _pins_of(args.manifest)
    if rows is None:
        raise ManifestError(f"has no [pins] table; run `rlharness pin {args.manifest}` first",
                            path=args.manifest, key="pins")
    console.print(format_drift(rows))
    drifted = [row.key for row in rows if not row.matches]
    if not drifted:
        console.print("no drift: the exact (bitwise) check applies")
        return ExitCode.OK
    console.print(
        f"drift in {', '.join(drifted)}: the exact check does not apply, the statistical checks do; "
        f"`rlharness pin {args.manifest}` re-pins after a deliberate upgrade",
        highlight=False, soft_wrap=True,
    )
    return ExitCode.GATE_FAILED if args.fail_on_drift else ExitCode.OK


def register(subparsers: Any) -> None:
    """Add ``pin`` and ``drift``."""
    pin = subparsers.add_parser(
        "pin", help="write the installed versions and config hash into a manifest's [pins]",
        description="Validate MANIFEST and write (or refresh) its [pins] table in place: Python, NumPy, "
        "SciPy, gymnasium and rl-harness versions, the BLAS and its CPU kernel, and the config hash.",
    )
    pin.add_argument("manifest", metavar="MANIFEST", help="the manifest (TOML), rewritten in place")
    pin.set_defaults(handler=_pin)
    check = subparsers.add_parser(
        "drift", help="show a manifest's pins next to the installed versions",
        description="Compare MANIFEST's [pins] with the installed Python, NumPy, SciPy, gymnasium, "
        "rl-harness, BLAS and CPU kernel, and with the manifest's current config hash.",
    )
    check.add_argument("manifest", metavar="MANIFEST", help="the manifest (TOML)")
    check.add_argument("--fail-on-drift", action="store_true", help="exit 1 when anything drifted")
    check.set_defaults(handler=_drift)
