"""``ndtmap demo``: the main job end to end on a bundled sample grid.

Open the grid, check it, run the sample's written procedure (calibration,
gates, C-scans, sections, indications sized by 6 dB drop and DGS, screening
rules), write the maps, a B-scan and a D-scan through the largest indication,
the indication table and a report bundle, and print where everything is.
Every step calls the same library functions as the other commands; the
library modules are imported inside the functions, so that building the
parser stays cheap.
"""

from __future__ import annotations

import argparse
import json
import math
from collections.abc import Callable
from importlib import resources
from pathlib import Path
from typing import Any

from ndtmap._shared.caution import CAUTION
from ndtmap.errors import ParameterError

__all__ = ["register", "cmd_demo", "run_demo", "SAMPLE_PROCEDURES", "procedure_for_sample"]

#: The written procedure shipped for each sample grid (package data), if any.
SAMPLE_PROCEDURES: dict[str, str] = {
    "plate_laminations.nc": "plate_lamination_procedure.toml",
    "forging_block.nc": "forging_procedure.toml",
    "corroded_wall.nc": "wall_thickness_procedure.toml",
}


def cmd_demo(args: argparse.Namespace) -> int:
    """Run ``ndtmap demo`` with parsed arguments; return the exit status."""
    return run_demo(output=Path(args.output), sample=args.sample, echo=print)


def register(subparsers: Any) -> None:
    """Add the ``demo`` sub-command to the ``ndtmap`` argument parser."""
    p = subparsers.add_parser("demo", help="run the main job end to end on a bundled sample grid")
    p.add_argument("-o", "--output", default="ndtmap-demo-output", help="folder for the results")
    p.add_argument("--sample", default="plate_laminations.nc", help="sample grid to use")
    p.set_defaults(func=cmd_demo)


def procedure_for_sample(sample: str) -> Any:
    """The packaged procedure for a sample grid name (see :data:`SAMPLE_PROCEDURES`), or None."""
    from ndtmap.procedure import load_procedure

    name = SAMPLE_PROCEDURES.get(sample)
    if name is None:
        return None
    ref = resources.files("ndtmap") / "data" / name
    if not ref.is_file():
        return None
    with resources.as_file(ref) as path:
        return load_procedure(path)


def _locate_sample(sample: str, output: Path, echo: Callable[[str], None]) -> Path:
    from ndtmap.errors import FileFormatError
    from ndtmap.simulate.samples import SAMPLES, build_samples, sample_path

    if sample not in SAMPLES:
        raise ParameterError(f"`--sample` must be one of {', '.join(SAMPLES)}, got {sample!r}")
    try:
        return sample_path(sample)
    except FileFormatError:
        echo(f"sample grid {sample} not found beside the package; building it with the simulator ...")
        (output / "sample_grids").mkdir(parents=True, exist_ok=True)
        return build_samples(output / "sample_grids", names=[sample])[0]


def run_demo(
    *, output: Path, sample: str = "plate_laminations.nc", echo: Callable[[str], None] = print, report: bool = True
) -> int:
    """Run the demonstration; return the exit status (0).

    Parameters
    ----------
    output : pathlib.Path
        Folder for every result (created if needed).
    sample : str
        Sample grid file name, see :data:`ndtmap.simulate.samples.SAMPLES`.
    echo : callable
        Where progress lines go.
    report : bool, default True
        Also write the report bundle.
    """
    from ndtmap.grid.summary import format_summary, grid_summary
    from ndtmap.indications import indications_csv, indications_text, largest_indication
    from ndtmap.io import atomic_write_text, open_grid, save_map
    from ndtmap.procedure import first_look_procedure, procedure_to_toml, run_procedure
    from ndtmap.scans.maps import map_dataset
    from ndtmap.scans.sections import b_scan, d_scan

    output = Path(output)
    output.mkdir(parents=True, exist_ok=True)
    echo("ndtmap demo: the main job on a synthetic sample (fictional workshop Kestrel Forge & Plate)")
    path = _locate_sample(sample, output, echo)
    grid = open_grid(path)
    echo("")
    echo(format_summary(grid_summary(grid, source=str(path))))

    procedure = procedure_for_sample(sample)
    if procedure is None:
        procedure = first_look_procedure(grid)
        echo(f"\nprocedure: {procedure.name}: {procedure.description}")
    else:
        echo(f"\nprocedure: {procedure.name} ({SAMPLE_PROCEDURES[sample]}, shipped with ndtmap)")
    atomic_write_text(output / "procedure.toml", procedure_to_toml(procedure))
    analysis = run_procedure(grid, procedure, source=str(path))

    echo("\nC-scan maps:")
    for kind, m in analysis.maps.items():
        target = save_map(map_dataset(m), output / f"map_{kind}.nc")
        echo(f"  {kind:<20} {m.attrs.get('long_name', '')} [{m.attrs.get('units', '')}] -> {target}")

    biggest = largest_indication(analysis.indications)
    if biggest is not None:
        echo(
            f"\nsections through indication #{biggest['id']} at scan {biggest['scan_mm']:g} mm, "
            f"index {biggest['index_mm']:g} mm:"
        )
        for name, section in (
            ("bscan", b_scan(grid, biggest["index_mm"])),
            ("dscan", d_scan(grid, biggest["scan_mm"])),
        ):
            section = section.compute()
            target = save_map(map_dataset(section.rename(f"{name}_fsh")), output / f"section_{name}.nc")
            echo(f"  {name}: {section.attrs.get('long_name', name)} -> {target}")

    atomic_write_text(output / "indications.csv", indications_csv(analysis.indications))
    atomic_write_text(
        output / "indications.json", json.dumps(analysis.indications_document(), indent=2, allow_nan=False)
    )
    echo(f"\n{len(analysis.indications)} indication(s):")
    echo(indications_text(analysis.indications))
    truth = grid.attrs.get("truth")
    if truth:
        echo("\ncompared with the simulator's truth (the sample is synthetic):")
        for t in json.loads(truth).get("reflectors", []):
            near = [r for r in analysis.indications if r.get("kind") == "amplitude"]
            if not near:
                continue
            r = min(near, key=lambda r: math.hypot(r["scan_mm"] - t["scan_mm"], r["index_mm"] - t["index_mm"]))
            size = (
                f"true {t.get('length_scan_mm', 0):g} x {t.get('length_index_mm', 0):g} mm"
                if t["type"] == "planar"
                else f"true diameter {t.get('diameter_mm', 0):g} mm"
            )
            measured = (
                f"6 dB {r['length_scan_mm']:.1f} x {r['length_index_mm']:.1f} mm"
                if r.get("length_scan_mm") is not None and r.get("length_index_mm") is not None
                else "-"
            )
            ers = f", ERS {r['ers_mm']:.2f} mm" if r.get("ers_mm") is not None else ""
            echo(f"  {t.get('label') or t['type']}: {size} at {t['depth_mm']:g} mm -> #{r['id']} {measured}{ers}")
    if "thickness" in analysis.maps:
        th = analysis.maps["thickness"]
        import numpy as np

        values = np.asarray(th.values, dtype=np.float64)
        if np.isfinite(values).any():
            i, j = np.unravel_index(int(np.nanargmin(values)), values.shape)
            echo(
                f"\nminimum remaining wall {values[i, j]:.2f} mm at scan {float(th.scan[i]):g} mm, index "
                f"{float(th.index[j]):g} mm ({int(np.isnan(values).sum())} position(s) without a back-wall echo)"
            )
            if "truth_thickness_mm" in grid:
                echo(f"  (simulator truth: {float(grid['truth_thickness_mm'].min()):.2f} mm)")
    if analysis.screening is not None:
        echo(f"\nscreening ({analysis.screening.get('rules') or 'rules'}): {analysis.screening['overall']}")
    for note in analysis.notes:
        echo(f"note: {note}")

    if report:
        from ndtmap.report import write_report

        # the analysis above is reported as it is: the procedure runs once
        result = write_report([analysis], output / "report")
        echo(f"\nreport bundle: {result.index_html}")
        for note in result.notes:
            echo(f"  note: {note}")
    echo(f"\nall results in {output.resolve()}")
    echo(f"\ncaution: {CAUTION}")
    return 0
