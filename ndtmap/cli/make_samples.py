"""The ``ndtmap make-samples`` command: rebuild the bundled sample grids with the simulator."""

from __future__ import annotations

import argparse
from pathlib import Path
from typing import Any

from ndtmap.cli._exit_codes import EXIT_OK
from ndtmap.errors import NdtmapError

__all__ = ["register", "cmd_make_samples"]


def cmd_make_samples(args: argparse.Namespace) -> int:
    """Run ``ndtmap make-samples`` with parsed arguments; return the exit status."""
    from ndtmap.simulate import SAMPLES, build_samples  # imported on use: keeps the parser's start-up cheap

    names = args.only or list(SAMPLES)
    unknown = [n for n in names if n not in SAMPLES]
    if unknown:
        raise NdtmapError(f"unknown sample {unknown[0]!r}; choose from {', '.join(SAMPLES)}")
    for path in build_samples(args.directory, names=names):
        print(f"wrote {path}")
    return EXIT_OK


def register(subparsers: Any) -> None:
    """Add the ``make-samples`` sub-command to the ``ndtmap`` argument parser."""
    p = subparsers.add_parser("make-samples", help="rebuild the bundled sample grids (deterministic)")
    p.add_argument("directory", type=Path, help="folder to write the samples into")
    p.add_argument("--only", nargs="+", metavar="NAME", help="build only these samples")
    p.set_defaults(func=cmd_make_samples)
