"""``rlharness drift MANIFEST``: the manifest's pins next to the installed environment.

Exit codes: 0 (the table is shown; with ``--fail-on-drift`` only when nothing
drifted), 1 with ``--fail-on-drift`` when something drifted, 2 on bad input or
a manifest without ``[pins]``.
"""

from __future__ import annotations

import argparse
from typing import Any

from rich.console import Console
from rich.table import Table

from harness.cli import ExitCode
from harness.core.errors import ManifestError
from harness.manifest.loader import load_manifest
from harness.manifest.pins import DriftRow, drift, installed_pins

__all__ = ["format_drift", "register"]


def format_drift(rows: tuple[DriftRow, ...]) -> Table:
    """Pinned vs installed, one row per item, drifted rows marked."""
    table = Table(title="pins vs installed", title_justify="left")
    table.add_column("key")
    table.add_column("pinned", overflow="fold")
    table.add_column("installed", overflow="fold")
    table.add_column("")
    for row in rows:
        mark = "same" if row.matches else "[bold red]DRIFT[/]"
        table.add_row(row.key, row.pinned, row.installed, mark)
    return table


def _handle(args: argparse.Namespace, console: Console) -> ExitCode:
    manifest = load_manifest(args.manifest)
    if manifest.pins is None:
        raise ManifestError(f"has no [pins] table; run `rlharness pin {args.manifest}` first",
                            path=args.manifest, key="pins")
    rows = drift(manifest.pins, installed_pins(config_hash=manifest.config_hash))
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
    parser = subparsers.add_parser(
        "drift", help="show a manifest's pins next to the installed versions",
        description="Compare MANIFEST's [pins] with the installed Python, NumPy, SciPy, gymnasium, "
        "rl-harness, BLAS and CPU kernel, and with the manifest's current config hash.",
    )
    parser.add_argument("manifest", metavar="MANIFEST", help="the manifest (TOML)")
    parser.add_argument("--fail-on-drift", action="store_true", help="exit 1 when anything drifted")
    parser.set_defaults(handler=_handle)
