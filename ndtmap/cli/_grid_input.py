"""Opening the input grid of ``map`` and ``indications`` as their options ask."""

from __future__ import annotations

import argparse
from pathlib import Path
from typing import Any

__all__ = ["open_input_grid"]


def open_input_grid(path: Path, args: argparse.Namespace) -> Any:
    """Open and validate the grid at `path`: lazily with ``--chunk-scan N`` or ``--scheduler``, else as the
    grid's size suggests (see :func:`ndtmap.io.open_grid`)."""
    from ndtmap.io import open_grid  # imported on use: keeps xarray out of the parser's start-up

    chunks = {"scan": args.chunk_scan} if getattr(args, "chunk_scan", None) else None
    lazy = True if getattr(args, "scheduler", None) else None  # a cluster computes dask-backed grids only
    return open_grid(path, chunks=chunks, lazy=lazy)
