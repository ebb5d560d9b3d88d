"""The ``ndtmap`` command line.

The command line only parses arguments and calls library functions; every
behaviour is available from Python too. A user mistake (a bad file, a bad
option) ends with one line on stderr that says what is wrong and exit
status 2; nothing prints a traceback unless ``--debug`` is given.

Exit status: 0 success; 1 the command ran but found problems (``info`` on
an invalid grid) or finished a batch partially; 2 usage or input error;
70 an internal error (a bug: please report it with ``--debug`` output).
"""

from __future__ import annotations

import argparse
import json
import sys
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

from ndtmap import CAUTION, __version__
from ndtmap.cluster import add_scheduler_argument, with_scheduler
from ndtmap.errors import NdtmapError

__all__ = ["main", "build_parser"]

EXIT_OK = 0
EXIT_PROBLEMS = 1
EXIT_USAGE = 2
EXIT_INTERNAL = 70


class _Parser(argparse.ArgumentParser):
    """argparse, but usage errors are one line and exit status 2."""

    def error(self, message: str) -> None:  # pragma: no cover - exercised through main
        self.exit(EXIT_USAGE, f"{self.prog}: error: {message} (see `{self.prog} --help`)\n")


# --------------------------------------------------------------------------
# info
# --------------------------------------------------------------------------




def cmd_info(args: argparse.Namespace) -> int:
    from ndtmap.grid.summary import format_summary, grid_summary
    from ndtmap.io.grid_files import open_grid

    ds = open_grid(args.path, validate=False)
    summary = grid_summary(ds, source=str(args.path))
    if args.json:
        print(json.dumps(summary, indent=2, allow_nan=False))
    else:
        print(format_summary(summary))
    return EXIT_OK if summary["valid"] else EXIT_PROBLEMS


# --------------------------------------------------------------------------
# make-samples
# --------------------------------------------------------------------------
def cmd_make_samples(args: argparse.Namespace) -> int:
    from ndtmap.simulate.samples import SAMPLES, build_samples

    names = args.only or list(SAMPLES)
    unknown = [n for n in names if n not in SAMPLES]
    if unknown:
        raise NdtmapError(f"unknown sample {unknown[0]!r}; choose from {', '.join(SAMPLES)}")
    for path in build_samples(args.directory, names=names):
        print(f"wrote {path}")
    return EXIT_OK


# --------------------------------------------------------------------------
# demo
# --------------------------------------------------------------------------
def cmd_demo(args: argparse.Namespace) -> int:
    from ndtmap.cli.demo import run_demo

    return run_demo(output=Path(args.output), sample=args.sample, echo=print)


# --------------------------------------------------------------------------
# map
# --------------------------------------------------------------------------
def _open_valid(path: Path, args: argparse.Namespace) -> Any:
    from ndtmap.io.grid_files import open_grid

    chunks = {"scan": args.chunk_scan} if getattr(args, "chunk_scan", None) else None
    lazy = True if getattr(args, "scheduler", None) else None  # a cluster computes dask-backed grids only
    return open_grid(path, chunks=chunks, lazy=lazy)


def cmd_map(args: argparse.Namespace) -> int:
    from ndtmap.gates import DEFAULT_THRESHOLD_FSH, Gate
    from ndtmap.scans.maps import map_by_kind, map_dataset

    out = Path(args.output)
    suffix = out.suffix.lower()
    if suffix not in (".nc", ".png", ".svg", ".pdf", ".html"):
        raise NdtmapError(f"`-o` must end in .nc, .png, .svg, .pdf or .html, got {str(out)!r}")
    grid = _open_valid(args.path, args)
    start, end = args.gate_mm
    threshold = DEFAULT_THRESHOLD_FSH if args.threshold_fsh is None else args.threshold_fsh
    gate = Gate("gate", start, end, unit="mm", threshold_fsh=threshold, mode=args.mode)
    options: dict[str, Any] = {"detect": args.detect}
    if args.kind == "thickness":
        if args.reference_gate_mm is not None:
            r0, r1 = args.reference_gate_mm
            options["reference_gate"] = Gate("reference", r0, r1, unit="mm", threshold_fsh=threshold, mode=args.mode)
            options["method"] = args.thickness_method or "echo-to-echo"
        elif args.thickness_method not in (None, "first-echo"):
            raise NdtmapError(f"--thickness-method {args.thickness_method} needs --reference-gate-mm START END")
    elif args.reference_gate_mm is not None or args.thickness_method is not None:
        raise NdtmapError("--reference-gate-mm and --thickness-method apply only to --kind thickness")
    if args.kind == "backwall-loss" and args.nominal_fsh is not None:
        options["nominal_fsh"] = args.nominal_fsh
    elif args.nominal_fsh is not None:
        raise NdtmapError("--nominal-fsh applies only to --kind backwall-loss")
    result = map_by_kind(grid, args.kind, gate, **options).compute()
    if suffix == ".nc":
        from ndtmap.io.grid_files import save_map

        save_map(map_dataset(result), out)
    else:
        from ndtmap.plot.export import write_figure
        from ndtmap.plot.maps import map_figure

        write_figure(map_figure(result, title=f"{args.kind} map, gate {start:g}-{end:g} mm"), out)
    values = result.values
    import numpy as np

    finite = values[np.isfinite(values)]
    unit = result.attrs.get("units", "")
    stats = (
        f"min {finite.min():.2f} {unit}, median {np.median(finite):.2f} {unit}, max {finite.max():.2f} {unit}"
        if finite.size
        else "no finite values (nothing triggered the gate)"
    )
    print(f"wrote {out}: {args.kind} map {result.sizes['scan']} x {result.sizes['index']}, {stats}")
    print(f"caution: {CAUTION}")
    return EXIT_OK


# --------------------------------------------------------------------------
# indications
# --------------------------------------------------------------------------
def cmd_indications(args: argparse.Namespace) -> int:
    from ndtmap.indications.tables import indications_csv, indications_text
    from ndtmap.procedure.definition import load_procedure, procedure_from_options, run_procedure

    grid = _open_valid(args.path, args)
    if args.procedure is not None:
        if args.gate_mm is not None or args.threshold_fsh is not None:
            raise NdtmapError("give either --procedure or --gate-mm/--threshold-fsh, not both")
        procedure = load_procedure(args.procedure)
    else:
        if args.gate_mm is None or args.threshold_fsh is None:
            raise NdtmapError("--gate-mm START END and --threshold-fsh PCT are required (or --procedure FILE)")
        procedure = procedure_from_options(
            gate_mm=args.gate_mm,
            threshold_fsh=args.threshold_fsh,
            mode=args.mode,
            backwall_gate_mm=args.backwall_gate_mm,
            rules=str(Path(args.rules).resolve()) if args.rules else None,
            min_area_mm2=args.min_area_mm2,
            detect=args.detect,
        )
    analysis = run_procedure(grid, procedure, source=str(args.path))
    if args.format == "json":
        print(json.dumps(analysis.indications_document(), indent=2, allow_nan=False))
    elif args.format == "csv":
        sys.stdout.write(indications_csv(analysis.indications))
    else:
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
        for note in analysis.notes:
            print(f"note: {note}")
        for caution in analysis.cautions:
            print(f"caution: {caution}")
    return EXIT_OK


# --------------------------------------------------------------------------
def build_parser() -> argparse.ArgumentParser:
    """The argument parser of ``ndtmap`` (for documentation and tests)."""
    parser = _Parser(
        prog="ndtmap",
        description="Open workbench for encoded pulse-echo ultrasonic scans. " + CAUTION,
    )
    parser.add_argument("--version", action="version", version=f"ndtmap {__version__}")
    parser.add_argument("--debug", action="store_true", help="show the full traceback of an error")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)

    p = sub.add_parser("info", help="summarise a scan grid and list what is wrong with it")
    p.add_argument("path", type=Path, help="grid file: .nc, .zarr or raw-dump .json sidecar")
    p.add_argument("--json", action="store_true", help="print one JSON object instead of text")
    p.set_defaults(func=cmd_info)

    p = sub.add_parser("demo", help="run the main job end to end on a bundled sample grid")
    p.add_argument("-o", "--output", default="ndtmap-demo-output", help="folder for the results")
    p.add_argument("--sample", default="plate_laminations.nc", help="sample grid to use")
    p.set_defaults(func=cmd_demo)

    p = sub.add_parser("make-samples", help="rebuild the bundled sample grids (deterministic)")
    p.add_argument("directory", type=Path, help="folder to write the samples into")
    p.add_argument("--only", nargs="+", metavar="NAME", help="build only these samples")
    p.set_defaults(func=cmd_make_samples)

    p = sub.add_parser("map", help="write one C-scan map (NetCDF, or a figure)")
    p.add_argument("path", type=Path, help="grid file")
    p.add_argument("--kind", required=True, choices=("amplitude", "depth", "thickness", "backwall-loss"))
    p.add_argument(
        "--gate-mm",
        required=True,
        nargs=2,
        type=float,
        metavar=("START", "END"),
        help="gate window as depth below the surface, mm",
    )
    p.add_argument("--threshold-fsh", type=float, metavar="PCT", help="gate threshold, %%FSH (default 20)")
    p.add_argument("--mode", default="peak", choices=("peak", "first-crossing"), help="gate detection mode")
    p.add_argument("--detect", default="rectified", choices=("rectified", "envelope"), help="detection signal")
    p.add_argument(
        "--reference-gate-mm",
        nargs=2,
        type=float,
        metavar=("START", "END"),
        help="thickness: a second gate on the first back-wall echo or the interface echo",
    )
    p.add_argument(
        "--thickness-method",
        choices=("first-echo", "echo-to-echo", "interface-to-backwall"),
        help="thickness: how the wall is measured (default first-echo; echo-to-echo with a reference gate)",
    )
    p.add_argument(
        "--nominal-fsh",
        type=float,
        metavar="PCT",
        help="backwall-loss: nominal back-wall level (default: median over the scan)",
    )
    p.add_argument("--chunk-scan", type=int, metavar="N", help="open lazily with N scan lines per chunk")
    p.add_argument("-o", "--output", required=True, metavar="OUT", help="output: .nc, .png, .svg, .pdf or .html")
    add_scheduler_argument(p)
    p.set_defaults(func=with_scheduler(cmd_map))

    p = sub.add_parser("indications", help="detect and size indications, print a table")
    p.add_argument("path", type=Path, help="grid file")
    p.add_argument("--gate-mm", nargs=2, type=float, metavar=("START", "END"), help="flaw gate, depth mm")
    p.add_argument("--threshold-fsh", type=float, metavar="PCT", help="detection threshold, %%FSH")
    p.add_argument(
        "--backwall-gate-mm",
        nargs=2,
        type=float,
        metavar=("START", "END"),
        help="back-wall gate, depth mm (DGS reference, back-wall loss)",
    )
    p.add_argument("--rules", metavar="FILE", help="screening rules (TOML)")
    p.add_argument("--procedure", type=Path, metavar="FILE", help="a procedure file instead of the options above")
    p.add_argument("--mode", default="peak", choices=("peak", "first-crossing"), help="gate detection mode")
    p.add_argument("--detect", default="rectified", choices=("rectified", "envelope"), help="detection signal")
    p.add_argument("--min-area-mm2", type=float, default=0.0, help="drop indications smaller than this")
    p.add_argument("--format", default="table", choices=("table", "csv", "json"))
    p.add_argument("--chunk-scan", type=int, metavar="N", help="open lazily with N scan lines per chunk")
    add_scheduler_argument(p)
    p.set_defaults(func=with_scheduler(cmd_indications))

    from ndtmap.cli.convert import register as register_convert
    from ndtmap.cli.report import register as register_report

    register_report(sub)
    register_convert(sub)
    for register in _EXTRA_COMMANDS:
        register(sub)
    return parser


#: Functions that add further sub-commands (other modules register theirs here).
_EXTRA_COMMANDS: list[Callable[[Any], None]] = []


def main(argv: Sequence[str] | None = None) -> int:
    """Run ``ndtmap`` with `argv` (default: ``sys.argv[1:]``); return the exit status."""
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "func", None):
        parser.print_help()
        return EXIT_USAGE
    try:
        return int(args.func(args) or 0)
    except NdtmapError as exc:
        if args.debug:
            raise
        print(f"ndtmap {args.command}: error: {exc}", file=sys.stderr)
        return EXIT_USAGE
    except KeyboardInterrupt:
        print(f"ndtmap {args.command}: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        return EXIT_OK
    except Exception as exc:  # noqa: BLE001 - the last line of defence against tracebacks
        if args.debug:
            raise
        print(
            f"ndtmap {args.command}: internal error: {type(exc).__name__}: {exc} "
            "(this is a bug; rerun with --debug and report the output)",
            file=sys.stderr,
        )
        return EXIT_INTERNAL

if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
