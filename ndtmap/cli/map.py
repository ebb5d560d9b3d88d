"""The ``ndtmap map`` command: one C-scan map, written as NetCDF or as a figure."""

from __future__ import annotations

import argparse
from pathlib import Path
from typing import Any

from ndtmap._shared.caution import CAUTION
from ndtmap.cli._exit_codes import EXIT_OK
from ndtmap.cli._grid_input import open_input_grid
from ndtmap.cli._scheduler import add_scheduler_argument, with_scheduler
from ndtmap.errors import NdtmapError

__all__ = ["register", "cmd_map"]

#: Output file types of ``ndtmap map -o``.
MAP_OUTPUT_SUFFIXES = (".nc", ".png", ".svg", ".pdf", ".html")


def _map_options(args: argparse.Namespace, threshold_fsh: float) -> dict[str, Any]:
    """The keyword arguments of :func:`ndtmap.scans.map_by_kind` the options ask for; raise on options that
    do not apply to ``--kind``."""
    from ndtmap.gates import Gate  # imported on use: keeps the parser's start-up cheap

    options: dict[str, Any] = {"detect": args.detect}
    if args.kind == "thickness":
        if args.reference_gate_mm is not None:
            r0, r1 = args.reference_gate_mm
            options["reference_gate"] = Gate("reference", r0, r1, unit="mm", threshold_fsh=threshold_fsh,
                                             mode=args.mode)
            options["method"] = args.thickness_method or "echo-to-echo"
        elif args.thickness_method not in (None, "first-echo"):
            raise NdtmapError(f"--thickness-method {args.thickness_method} needs --reference-gate-mm START END")
    elif args.reference_gate_mm is not None or args.thickness_method is not None:
        raise NdtmapError("--reference-gate-mm and --thickness-method apply only to --kind thickness")
    if args.kind == "backwall-loss" and args.nominal_fsh is not None:
        options["nominal_fsh"] = args.nominal_fsh
    elif args.nominal_fsh is not None:
        raise NdtmapError("--nominal-fsh applies only to --kind backwall-loss")
    return options


def _value_range(result: Any) -> str:
    """Minimum, median and maximum of a map's finite values, in its unit."""
    import numpy as np

    finite = result.values[np.isfinite(result.values)]
    unit = result.attrs.get("units", "")
    if not finite.size:
        return "no finite values (nothing triggered the gate)"
    return f"min {finite.min():.2f} {unit}, median {np.median(finite):.2f} {unit}, max {finite.max():.2f} {unit}"


def cmd_map(args: argparse.Namespace) -> int:
    """Run ``ndtmap map`` with parsed arguments; return the exit status."""
    from ndtmap.gates import DEFAULT_THRESHOLD_FSH, Gate
    from ndtmap.scans import map_by_kind, map_dataset

    out = Path(args.output)
    suffix = out.suffix.lower()
    if suffix not in MAP_OUTPUT_SUFFIXES:
        raise NdtmapError(f"`-o` must end in .nc, .png, .svg, .pdf or .html, got {str(out)!r}")
    grid = open_input_grid(args.path, args)
    start, end = args.gate_mm
    threshold = DEFAULT_THRESHOLD_FSH if args.threshold_fsh is None else args.threshold_fsh
    gate = Gate("gate", start, end, unit="mm", threshold_fsh=threshold, mode=args.mode)
    options = _map_options(args, threshold)
    result = map_by_kind(grid, args.kind, gate, **options).compute()
    if suffix == ".nc":
        from ndtmap.io import save_map

        save_map(map_dataset(result), out)
    else:
        from ndtmap.plot import map_figure, write_figure  # plotly and kaleido: only for figures

        write_figure(map_figure(result, title=f"{args.kind} map, gate {start:g}-{end:g} mm"), out)
    print(f"wrote {out}: {args.kind} map {result.sizes['scan']} x {result.sizes['index']}, {_value_range(result)}")
    print(f"caution: {CAUTION}")
    return EXIT_OK


def register(subparsers: Any) -> None:
    """Add the ``map`` sub-command to the ``ndtmap`` argument parser."""
    p = subparsers.add_parser("map", help="write one C-scan map (NetCDF, or a figure)")
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
