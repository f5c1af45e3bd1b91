"""``rlharness pin MANIFEST``: write or refresh the manifest's ``[pins]`` table in place.

The manifest is validated first; on bad input nothing is written (exit 2). The
file keeps its comments and layout (tomlkit) and is replaced atomically.
"""

from __future__ import annotations

import argparse
from typing import Any

from rich.console import Console
from rich.table import Table

from harness.cli import ExitCode
from harness.manifest.loader import load_manifest
from harness.manifest.pins import DriftRow, drift, installed_pins, write_pins

__all__ = ["format_pin_changes", "register"]


def format_pin_changes(rows: tuple[DriftRow, ...] | None, written: dict[str, str]) -> Table:
    """Table of the pins written, with the previous value where one changed."""
    table = Table(title="pins written", title_justify="left")
    table.add_column("key")
    table.add_column("value", overflow="fold")
    table.add_column("was", overflow="fold")
    previous = {} if rows is None else {row.key: row.pinned for row in rows}
    for key, value in written.items():
        before = previous.get(key)
        table.add_row(key, value, "(new)" if before is None else ("" if before == value else before))
    return table


def _handle(args: argparse.Namespace, console: Console) -> ExitCode:
    manifest = load_manifest(args.manifest)
    pins = installed_pins(config_hash=manifest.config_hash)
    rows = None if manifest.pins is None else drift(manifest.pins, pins)
    write_pins(args.manifest, pins)
    console.print(format_pin_changes(rows, pins.to_json()))
    return ExitCode.OK


def register(subparsers: Any) -> None:
    parser = subparsers.add_parser(
        "pin", help="write the installed versions and config hash into a manifest's [pins]",
        description="Validate MANIFEST and write (or refresh) its [pins] table in place: Python, NumPy, "
        "SciPy, gymnasium and rl-harness versions, the BLAS and its CPU kernel, and the config hash.",
    )
    parser.add_argument("manifest", metavar="MANIFEST", help="the manifest (TOML), rewritten in place")
    parser.set_defaults(handler=_handle)
