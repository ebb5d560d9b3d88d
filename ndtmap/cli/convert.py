"""The ``ndtmap convert`` command: a raw dump or NetCDF grid to a chunked Zarr v3 store.

The work is done by :func:`ndtmap.io.convert_to_zarr`.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path
from typing import Any

from ndtmap.cli._scheduler import add_scheduler_argument
from ndtmap.cluster import use_scheduler

__all__ = ["register", "cmd_convert"]


def _disk_bytes(path: Path) -> int:
    return sum(p.stat().st_size for p in path.rglob("*") if p.is_file())


def cmd_convert(args: argparse.Namespace) -> int:
    """Run ``ndtmap convert``; returns the exit status."""
    # imported on use, like every library module in the command line: building the parser stays cheap
    from ndtmap.io import convert_to_zarr, open_grid

    show = not args.quiet and sys.stderr.isatty()
    with use_scheduler(args.scheduler):
        out = convert_to_zarr(args.source, args.target, chunk_scan=args.chunk_scan, compress=not args.no_compress,
                              overwrite=args.overwrite, progress=show)
    grid = open_grid(out, lazy=True)
    try:
        a = grid["ascan"]
        shape = " x ".join(f"{d} {n}" for d, n in grid.sizes.items())
        chunks = tuple(int(c) for c in a.encoding.get("chunks", a.shape))  # as stored
        stored = _disk_bytes(out)
        if not args.quiet:
            print(
                f"wrote {out}: {shape}, {a.dtype}, chunks {chunks}, {a.nbytes / 1e6:.1f} MB of samples in "
                f"{stored / 1e6:.1f} MB on disk" + ("" if args.no_compress else " (compressed)")
            )
    finally:
        grid.close()
    return 0


def register(subparsers: Any) -> None:
    """Add the ``convert`` sub-command to the ``ndtmap`` command line."""
    p = subparsers.add_parser(
        "convert",
        help="convert a raw dump (.json sidecar) or a NetCDF grid into a chunked Zarr store, block by block",
        description="Convert a scan grid into a chunked Zarr v3 store without loading it whole. The store is "
        "written under a temporary name and renamed when complete.",
    )
    p.add_argument("source", type=Path, help="grid to convert: raw-dump .json sidecar, .nc or .zarr")
    p.add_argument("target", type=Path, help="new Zarr store (a folder named *.zarr)")
    p.add_argument("--chunk-scan", type=int, metavar="N",
                   help="scan lines per chunk (default: about 16 MiB of samples per chunk)")
    p.add_argument("--no-compress", action="store_true", help="store the chunks uncompressed")
    p.add_argument("--overwrite", action="store_true", help="replace an existing store of that name")
    p.add_argument("-q", "--quiet", action="store_true", help="no progress bar and no summary line")
    add_scheduler_argument(p)
    p.set_defaults(func=cmd_convert)
