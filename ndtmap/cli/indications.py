"""The ``ndtmap indications`` command: detect and size indications, print a table, CSV or JSON.

The settings come either from a procedure file (``--procedure``) or from the
options (``--gate-mm`` and ``--threshold-fsh``, or ``--threshold-db`` in dB re
a DAC from ``--dac FILE`` or a DGS curve from ``--dgs-fbh-mm``; optionally a
back-wall gate and screening rules), never from both.
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path
from typing import Any

from ndtmap.cli._exit_codes import EXIT_OK
from ndtmap.cli._grid_input import open_input_grid
from ndtmap.cli._scheduler import add_scheduler_argument, with_scheduler
from ndtmap.errors import NdtmapError

__all__ = ["register", "cmd_indications"]


def _procedure(args: argparse.Namespace) -> Any:
    """The procedure the options describe: the file of ``--procedure`` or one built from the gate options."""
    from ndtmap.procedure import load_procedure, procedure_from_options  # imported on use
    from ndtmap.signal import DacCurve

    level_options = (args.gate_mm, args.gate_us, args.threshold_fsh, args.threshold_db, args.dac, args.dgs_fbh_mm)
    if args.procedure is not None:
        if any(v is not None for v in level_options):
            raise NdtmapError("give either --procedure or --gate-mm with its level (--threshold-fsh, or --threshold-db "
                              "with --dac/--dgs-fbh-mm), not both")
        return load_procedure(args.procedure)
    if (args.gate_mm is None) == (args.gate_us is None) or (args.threshold_fsh is None) == (args.threshold_db is None):
        raise NdtmapError("--gate-mm START END or --gate-us START END (one of them) and one of --threshold-fsh PCT or "
                          "--threshold-db DB (with --dac FILE or --dgs-fbh-mm D) are required (or --procedure FILE)")
    if args.dgs_fbh_mm is not None and args.backwall_gate_mm is None:
        raise NdtmapError("--dgs-fbh-mm sets the gain from the back-wall echo: give --backwall-gate-mm START END too")
    dac = None if args.dac is None else DacCurve.from_csv(args.dac, outside=args.dac_outside)
    return procedure_from_options(
        threshold_db=args.threshold_db,
        dac=dac,
        dgs_fbh_mm=args.dgs_fbh_mm,
        gate_mm=args.gate_mm,
        gate_us=args.gate_us,
        threshold_fsh=args.threshold_fsh,
        mode=args.mode,
        backwall_gate_mm=args.backwall_gate_mm,
        rules=str(Path(args.rules).resolve()) if args.rules else None,
        min_area_mm2=args.min_area_mm2,
        detect=args.detect,
    )


def _print_table(args: argparse.Namespace, procedure: Any, analysis: Any) -> None:
    """The ``--format table`` output: a heading line, the table, screening, notes and cautions."""
    from ndtmap.indications import indications_text

    doc = analysis.indications_document()
    gate = doc["gate"]
    level = procedure.detection_level
    print(
        f"{args.path}: {len(analysis.indications)} indication(s); gate {gate['start']:g}-{gate['end']:g} "
        f"{gate['unit']}, threshold {level}"
    )
    print(indications_text(analysis.indications))
    if analysis.screening is not None:
        print(f"screening ({analysis.screening.get('rules') or 'rules'}): {analysis.screening['overall']}")
        for s in analysis.screening["indications"]:
            print(f"  indication {s['id']}: {s['statement']}")
    for note in analysis.notes:
        print(f"note: {note}")
    for caution in analysis.cautions:
        print(f"caution: {caution}")


def cmd_indications(args: argparse.Namespace) -> int:
    """Run ``ndtmap indications`` with parsed arguments; return the exit status."""
    from ndtmap.indications import indications_csv
    from ndtmap.procedure import run_procedure

    grid = open_input_grid(args.path, args)
    procedure = _procedure(args)
    analysis = run_procedure(grid, procedure, source=str(args.path))
    if args.format == "json":
        print(json.dumps(analysis.indications_document(), indent=2, allow_nan=False))
    elif args.format == "csv":
        sys.stdout.write(indications_csv(analysis.indications))
    else:
        _print_table(args, procedure, analysis)
    return EXIT_OK


def register(subparsers: Any) -> None:
    """Add the ``indications`` sub-command to the ``ndtmap`` argument parser."""
    p = subparsers.add_parser("indications", help="detect and size indications, print a table")
    p.add_argument("path", type=Path, help="grid file")
    p.add_argument("--gate-mm", nargs=2, type=float, metavar=("START", "END"), help="flaw gate, depth mm")
    p.add_argument("--gate-us", nargs=2, type=float, metavar=("START", "END"),
                   help="flaw gate in time from pulse entry, us (instead of --gate-mm)")
    p.add_argument("--threshold-fsh", type=float, metavar="PCT", help="detection threshold, %%FSH")
    p.add_argument(
        "--backwall-gate-mm",
        nargs=2,
        type=float,
        metavar=("START", "END"),
        help="back-wall gate, depth mm (DGS reference, back-wall loss)",
    )
    p.add_argument("--threshold-db", type=float, metavar="DB",
                   help="detection level in dB re the DAC (--dac) or DGS curve (--dgs-fbh-mm); 0 is 100 %% of it")
    p.add_argument("--dac", type=Path, metavar="FILE",
                   help="DAC points: CSV with the header depth_mm,amplitude_fsh (linear in dB between them)")
    p.add_argument("--dac-outside", default="conservative", choices=("conservative", "extrapolate", "refuse"),
                   help="the DAC beyond its depths: the lower of end level held and end segment continued "
                   "(conservative), the end segments continued in dB, or refused")
    p.add_argument("--dgs-fbh-mm", type=float, metavar="D",
                   help="DGS recording level: the curve of an equivalent flat-bottom hole of D mm, gain set from "
                   "the back-wall echo (needs --backwall-gate-mm; the grid's probe attributes)")
    p.add_argument("--rules", metavar="FILE", help="screening rules (TOML)")
    p.add_argument("--procedure", type=Path, metavar="FILE", help="a procedure file instead of the options above")
    p.add_argument("--mode", default="peak", choices=("peak", "first-crossing"), help="gate detection mode")
    p.add_argument("--detect", default="rectified", choices=("rectified", "envelope"), help="detection signal")
    p.add_argument("--min-area-mm2", type=float, default=0.0, help="drop indications smaller than this")
    p.add_argument("--format", default="table", choices=("table", "csv", "json"))
    p.add_argument("--chunk-scan", type=int, metavar="N", help="open lazily with N scan lines per chunk")
    add_scheduler_argument(p)
    p.set_defaults(func=with_scheduler(cmd_indications))
