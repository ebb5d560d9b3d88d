"""The ``ndtmap report`` command: report folders for one grid or a batch.

``ndtmap report PATH... [--procedure FILE] -o DIR`` calls
:func:`ndtmap.report.bundle.write_report`. Exit status: 0 every input reported; 1 a
partial batch (some inputs could not be read or evaluated; each is listed
with its reason in the summary page, ``summary.json`` and on stderr); 2 a
usage or input error (also when no input of a batch could be reported).
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path
from typing import Any

from ndtmap._shared.caution import CAUTION
from ndtmap.cli._library_choices import LibraryChoices
from ndtmap.cli._scheduler import add_scheduler_argument, with_scheduler

__all__ = ["register", "cmd_report"]

#: Figure kinds of ``--figures`` and static formats of ``--formats``, read from the library when argparse needs them.
FIGURE_KINDS = LibraryChoices("ndtmap.procedure", "FIGURE_KINDS")
REPORT_FORMATS = LibraryChoices("ndtmap.report", "REPORT_FORMATS")


def cmd_report(args: argparse.Namespace) -> int:
    """Run ``ndtmap report`` with parsed arguments; return the exit status."""
    from ndtmap.report import write_report  # imported on use: keeps the parser's start-up cheap

    formats = args.formats if args.formats is not None else ["png", "svg"]
    inputs: Any = args.paths[0] if len(args.paths) == 1 else list(args.paths)
    progress = not args.quiet and sys.stderr.isatty()
    lazy = True if getattr(args, "scheduler", None) else None  # a cluster computes dask-backed grids only
    result = write_report(inputs, args.output, procedure=args.procedure, figures=args.figures, formats=formats,
                          progress=progress, lazy=lazy)
    n_ind = sum(p.n_indications for p in result.parts)
    print(f"wrote {result.index_html}: {len(result.parts)} part(s), {n_ind} indication(s) "
          f"in {result.seconds:.1f} s")
    for p in result.parts:
        first = " (first look: settings derived from the grid)" if p.first_look else ""
        print(f"  {p.part_id or '-'}: {p.n_indications} indication(s){first} -> {p.index_html}")
    for note in result.notes:
        print(f"ndtmap report: note: {note}", file=sys.stderr)
    for err in result.errors:
        print(f"ndtmap report: could not report {err.source}: {err.reason}", file=sys.stderr)
    if result.errors:
        print(f"ndtmap report: {len(result.errors)} of {len(result.errors) + len(result.parts)} input(s) not "
              "reported (listed in the summary)", file=sys.stderr)
    print(f"caution: {CAUTION}")
    return result.exit_status


def register(subparsers: Any) -> None:
    """Add the ``report`` sub-command to the ``ndtmap`` argument parser."""
    p = subparsers.add_parser(
        "report",
        help="write a report folder (HTML page, figures, indication table, settings, provenance)",
        description="Write a self-contained report folder that opens offline. Without --procedure the gates and "
        "threshold are derived from each grid (a first look), and the report says so. " + CAUTION,
    )
    p.add_argument("paths", nargs="+", type=Path, metavar="PATH",
                   help="grid files (.nc, .zarr, raw .json sidecar) or folders of them")
    p.add_argument("-o", "--output", required=True, type=Path, metavar="DIR", help="report folder to write")
    p.add_argument("--procedure", type=Path, metavar="FILE", help="procedure file (TOML) applied to every grid")
    p.add_argument("--figures", nargs="+", choices=FIGURE_KINDS, metavar="KIND",
                   help="figures to include (default: the procedure's list); from %(choices)s")
    p.add_argument("--formats", nargs="*", choices=REPORT_FORMATS, metavar="FMT",
                   help="static figure files: png svg pdf (default: png svg; none: interactive figures only)")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    add_scheduler_argument(p)
    p.set_defaults(func=with_scheduler(cmd_report))
