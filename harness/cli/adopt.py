"""``rlharness adopt MANIFEST CURVE_FILE...``: existing curve files become a results folder; nothing runs.

The files are in the curve-file format (docs/your-training.md): one per seed in the
manifest's seed order, or files with a seed column. The folder is then read by
``compare``, ``record --no-run`` and ``verify --no-run`` like any other. Exit codes:
0 adopted, 2 bad input (a malformed file is named with its line and column; nothing
written).
"""

from __future__ import annotations

import argparse
from pathlib import Path
from typing import Any

from rich.console import Console

from harness.cli import ExitCode

__all__ = ["register"]


def _handle(args: argparse.Namespace, console: Console) -> ExitCode:
    from harness.manifest.loader import load_manifest
    from harness.store.adopt import adopt_curves

    manifest = load_manifest(args.manifest)
    folder = Path(args.results) if args.results else Path("results") / manifest.name
    adoption = adopt_curves(manifest.runs(), args.files, results_dir=folder, overwrite=args.overwrite)
    for file in adoption.files:
        console.print(f"{file.path}  sha256:{file.sha256}  seeds {', '.join(file.seeds)}", highlight=False,
                      soft_wrap=True)
    console.print(f"adopted {len(adoption.results.records)} seeds of {manifest.name} into {adoption.folder}; "
                  "nothing was rerun. `rlharness record --no-run`, `verify --no-run` and `compare` read it.",
                  highlight=False, soft_wrap=True)
    return ExitCode.OK


def register(subparsers: Any) -> None:
    parser = subparsers.add_parser(
        "adopt", help="turn existing curve files into a results folder (nothing is run)",
        description="Read learning curves that already exist (curve files, one per seed in the manifest's seed "
        "order, or files with a seed column), check them against MANIFEST's plan and write them as its results "
        "folder, recording each file's name and SHA-256. Exit 0 adopted, 2 bad input (nothing written).",
    )
    parser.add_argument("manifest", metavar="MANIFEST", help="the manifest the curves were trained by (TOML)")
    parser.add_argument("files", metavar="CURVE_FILE", nargs="+", help="curve files (format rlharness-curve 1)")
    parser.add_argument("--results", metavar="DIR", help="results folder to write (default: results/<manifest name>/)")
    parser.add_argument("--overwrite", action="store_true", help="replace results already in the folder")
    parser.set_defaults(handler=_handle)
