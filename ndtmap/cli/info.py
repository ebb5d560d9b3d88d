"""The ``ndtmap info`` command: summarise a scan grid and list what is wrong with it.

Exit status 0 for a valid grid, 1 when the grid has problems (each one is
listed), 2 when the file cannot be read.
"""

from __future__ import annotations

import argparse
import json
from pathlib import Path
from typing import Any

from ndtmap.cli._exit_codes import EXIT_OK, EXIT_PROBLEMS

__all__ = ["register", "cmd_info"]


def cmd_info(args: argparse.Namespace) -> int:
    """Run ``ndtmap info`` with parsed arguments; return the exit status."""
    # imported on use, like every library module in the command line: building the parser stays cheap
    from ndtmap.grid.summary import format_summary, grid_summary
    from ndtmap.io import open_grid

    ds = open_grid(args.path, validate=False)
    summary = grid_summary(ds, source=str(args.path))
    if args.json:
        print(json.dumps(summary, indent=2, allow_nan=False))
    else:
        print(format_summary(summary))
    return EXIT_OK if summary["valid"] else EXIT_PROBLEMS


def register(subparsers: Any) -> None:
    """Add the ``info`` sub-command to the ``ndtmap`` argument parser."""
    p = subparsers.add_parser("info", help="summarise a scan grid and list what is wrong with it")
    p.add_argument("path", type=Path, help="grid file: .nc, .zarr or raw-dump .json sidecar")
    p.add_argument("--json", action="store_true", help="print one JSON object instead of text")
    p.set_defaults(func=cmd_info)
