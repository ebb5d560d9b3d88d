"""Write the scenario notebooks of ndtmap (without outputs) from the cells below.

Run from the repository root after editing a notebook's cells here::

    python notebooks/tools/build_notebooks.py

The notebooks are executed top to bottom by ``python -m pytest --nbval-lax notebooks/``: cells
with plotly output carry ``# NBVAL_IGNORE_OUTPUT``; cells whose printed numbers are checked carry
``# NBVAL_CHECK_OUTPUT`` (their outputs are filled in by running this script with ``--execute``,
which runs each notebook once and keeps only the outputs of those cells).
"""

from __future__ import annotations

import sys
from pathlib import Path

HERE = Path(__file__).resolve().parents[1]

SETUP = """\
import ndtmap
from ndtmap.simulate import sample_path

print(ndtmap.CAUTION)"""


def md(text: str) -> tuple[str, str]:
    return ("markdown", text.strip("\n"))


def code(text: str) -> tuple[str, str]:
    return ("code", text.strip("\n"))


QUICK_START = [
    md("""
# Quick start: plate KFP-PL-2041

*Kestrel Forge & Plate* (a fictional fabricator) scanned plate **KFP-PL-2041** (25 mm rolled steel)
with a 4 MHz, 8 mm straight-beam probe in contact. The scan grid is in `sample_grids/plate_laminations.nc`:
one A-scan per (scan, index) position. The data is simulated, so the true reflectors travel with
the file and we can compare what we measure with what is there.

This notebook opens the grid, sets gates, draws maps and sections, and opens the workbench.

**Caution.** Every number below is an input to an engineering assessment, not a decision:
"""),
    code(SETUP),
    md("## The scan grid"),
    code("""
grid = ndtmap.open_grid(sample_path("plate_laminations.nc"))
print(dict(grid.sizes))
print({k: grid.attrs[k] for k in ("part_id", "velocity_m_s", "probe_frequency_mhz", "probe_diameter_mm",
                                    "part_thickness_mm")})"""),
    md("""
## Gates

A gate is a window on the A-scan: here in depth (mm below the surface), with a threshold in %FSH.
`flaw` looks between the surface and the back wall, `backwall` at the back-wall echo.
"""),
    code("""
from ndtmap.gates import Gate, evaluate_gate

flaw = Gate("flaw", 1.0, 23.5, threshold_fsh=10.0)
backwall = Gate("backwall", 23.5, 27.0, threshold_fsh=10.0)
result = evaluate_gate(grid, flaw)
print(list(result.data_vars))
print(f"positions where the flaw gate triggered: {int(result.triggered.sum())} of {result.triggered.size}")"""),
    md("""
## Maps (C-scans)

The peak amplitude in the flaw gate shows the laminations; the depth of the gate event tells
at what depth each one lies.
"""),
    code("""
# NBVAL_IGNORE_OUTPUT
from ndtmap.plot import map_figure
from ndtmap.scans import amplitude_map, depth_map

amp = amplitude_map(grid, flaw)
map_figure(amp, title="KFP-PL-2041: peak amplitude in the flaw gate")"""),
    code("""
# NBVAL_IGNORE_OUTPUT
depth = depth_map(grid, flaw)
map_figure(depth, title="KFP-PL-2041: event depth in the flaw gate")"""),
    md("""
## Sections and an A-scan

A B-scan is the line of A-scans along the scan axis at one index position; a D-scan the line
along the index axis at one scan position. Both go through lamination L1 here.
"""),
    code("""
# NBVAL_IGNORE_OUTPUT
from ndtmap.plot import section_figure
from ndtmap.scans import b_scan

section_figure(b_scan(grid, 24.0), cursor_mm=37.5, title="B-scan at index 24 mm")"""),
    code("""
# NBVAL_IGNORE_OUTPUT
from ndtmap.gates import evaluate_gates
from ndtmap.plot import ascan_at, ascan_figure

ascan = ascan_at(grid, 37.5, 24.0)
at_l1 = evaluate_gates(grid.sel(scan=[37.5], index=[24.0]), [flaw, backwall])
ascan_figure(ascan, [flaw, backwall], gate_results=at_l1, title="A-scan at scan 37.5 mm, index 24 mm")"""),
    md("""
Over L1 the back wall is gone from the A-scan: the lamination shadows it. The echo near 22 mm is
L1's **second** echo (2 x 11 mm: sound bouncing lamination - surface - lamination), not a reflector
of its own. A gate measures whatever echo falls in it, so gates are placed knowing such echoes.

## What the file says is there
"""),
    code("""
# NBVAL_CHECK_OUTPUT
from ndtmap.simulate import scan_truth

for r in scan_truth(grid)["reflectors"]:
    print(f"{r['label']:28s} depth {r['depth_mm']:5.1f} mm, {r['length_scan_mm']:5.1f} x "
          f"{r['length_index_mm']:4.1f} mm")"""),
    md("""
## The workbench

The workbench links a plan view, the A-scan and the two sections through the selected position
(drawn by the same `ndtmap.plot` functions as above and as the reports).
Click the plan view to move the position; edit the gates in the *Gates* panel and the map follows;
choose *measure* and click two points across an indication to get its 6 dB drop length; the
*Indications* panel lists what `ndtmap indications` would report with the same settings, and
*Save* writes the views and the settings (a procedure file the command line replays).
"""),
    code("""
# NBVAL_IGNORE_OUTPUT
from ndtmap.procedure import Procedure
from ndtmap.workbench import open_workbench

procedure = Procedure("quick start", (flaw, backwall), "flaw", backwall_gate="backwall",
                      backwall_loss_threshold_db=6.0, min_positions=2)
wb = open_workbench(sample_path("plate_laminations.nc"), procedure=procedure)
wb"""),
    md("""
The same workbench can be driven from code, which is how its numbers are checked: the 6 dB
drop length of L1 along the scan axis, measured on a line through its middle.
"""),
    code("""
# NBVAL_CHECK_OUTPUT
m = wb.state.measure((10.0, 24.0), (64.0, 24.0))
wb.refresh()  # draw what the state now holds
print(f"L1: {m.result.length_mm:.1f} +/- {m.result.uncertainty_mm:.1f} mm (true length 30.0 mm)")
print(f"level: half the peak, {m.level_fsh:.1f} of {m.indication_peak_fsh:.1f} %FSH")"""),
]


PLATE = [
    md("""
# Plate KFP-PL-2041: laminations, back-wall loss, sizing, screening

Kestrel Forge & Plate (fictional) checks rolled plate for laminations before cutting. A lamination
is a planar separation parallel to the surface: it returns an echo of its own and **shadows the
back wall**. So two maps find it: the amplitude in a flaw gate, and the loss of the back-wall echo.

**Caution.**
"""),
    code(SETUP),
    code("""
from ndtmap.gates import Gate
from ndtmap.procedure import Procedure, run_procedure
from ndtmap.simulate import scan_truth

grid = ndtmap.open_grid(sample_path("plate_laminations.nc"))
truth = {r["label"].split()[0]: r for r in scan_truth(grid)["reflectors"]}
procedure = Procedure(
    "KFP-PL-2041 lamination survey",
    gates=(Gate("flaw", 1.0, 23.5, threshold_fsh=10.0), Gate("backwall", 23.5, 27.0, threshold_fsh=10.0)),
    detection_gate="flaw", backwall_gate="backwall", backwall_loss_threshold_db=6.0,
    min_positions=2, rules="kfp-plate-rules.toml", base_dir=".",
)
analysis = run_procedure(grid, procedure, source="plate_laminations.nc")
print(sorted(analysis.maps))"""),
    md("""
## Back-wall loss

The loss is `20 log10(nominal / A)` with the nominal back-wall echo taken as the median over the
scan. The purple-orange scale is centred on no loss.
"""),
    code("""
# NBVAL_IGNORE_OUTPUT
from ndtmap.plot import map_figure

loss_indications = [rec for rec in analysis.indications if rec["kind"] == "backwall_loss"]
map_figure(analysis.maps["backwall_loss"], indications=loss_indications, title="KFP-PL-2041: back-wall loss")"""),
    md("""
## Sizes against the truth

Each lamination is matched with the amplitude indication whose peak lies inside its outline.
The 6 dB drop length (the echo falls to half its peak) of a reflector much larger than the beam
lands on its edges; L4 runs off the scanned area, so its lengths are lower bounds (`at_scan_edge`).
"""),
    code("""
# NBVAL_CHECK_OUTPUT
def inside(rec, r):
    (s0, s1), (i0, i1) = r["scan_range_mm"], r["index_range_mm"]
    return s0 <= rec["scan_mm"] <= s1 and i0 <= rec["index_mm"] <= i1

amplitude = [rec for rec in analysis.indications if rec["kind"] == "amplitude"]
for label, r in truth.items():
    rec = next(x for x in amplitude if inside(x, r))
    print(f"{label}: depth {rec['depth_mm']:5.1f} (true {r['depth_mm']:4.1f}) mm, "
          f"scan {rec['length_scan_mm']:5.1f} (true {r['length_scan_mm']:4.1f}) mm, "
          f"index {rec['length_index_mm']:5.1f} (true {r['length_index_mm']:4.1f}) mm, "
          f"flags {', '.join(rec['flags']) or '-'}")"""),
    md("""
* The depths come from the highest rectified RF peak in the gate, which may sit a carrier cycle
  away from the middle of the echo; the envelope (`detect="envelope"`) is steadier.
* The lengths are measured along the scan and index lines **through the peak**. L2 is an ellipse
  whose strongest position lies off its centre, so those lines cut short chords of it; measure it
  along its long axis with the drop ruler (below) to get its extent.
* L4 runs off the scanned area: 16 mm of its 26 mm were scanned (`at_scan_edge`, a lower bound).
* `near_field`: every lamination lies within three near-field lengths of this probe
  (N = 10.8 mm); the flag concerns DGS sizes, not the drop lengths.

## Screening

`kfp-plate-rules.toml` (next to this notebook) holds **invented** limits for illustration. The
screening only says which rules an indication exceeds; acceptance is for qualified personnel.
"""),
    code("""
# NBVAL_CHECK_OUTPUT
print(analysis.screening["overall"])
for rec in analysis.indications:
    print(f"#{rec['id']} {rec['kind']:13s} {rec['screening']}")"""),
    md("""
## Measuring on the map

The workbench's drop ruler measures along any line: the index extent of L1 through its middle,
and L2 along its long axis.
"""),
    code("""
# NBVAL_CHECK_OUTPUT
from ndtmap.workbench import WorkbenchState

state = WorkbenchState(grid, procedure=procedure)
m = state.measure((37.0, 2.0), (37.0, 46.0))
print(m.summary())
print(f"true width {truth['L1']['length_index_mm']:.1f} mm; grid step along index 2.0 mm")
m = state.measure((66.0, 52.0), (106.0, 52.0))
print(m.summary())
print(f"L2 along its long axis: true {truth['L2']['length_scan_mm']:.1f} mm")"""),
]


FORGING = [
    md("""
# Forging KFP-FG-0317: DGS equivalent sizes and a repeat echo

Kestrel Forge & Plate (fictional) examines an upset forging block, 160 mm thick, with a 2 MHz,
20 mm straight-beam probe. Deep in the block lie three small reflectors (like flat-bottom holes of
2, 3 and 4 mm at 100, 120 and 140 mm); at 55 mm lies a larger, partly bonded planar reflector.

Small deep reflectors are smaller than the beam: their 6 dB drop length measures the **beam**,
not the reflector. Their size is expressed as a DGS equivalent flat-bottom-hole diameter, from
the echo height relative to the back-wall echo.

**Caution.**
"""),
    code(SETUP),
    code("""
import numpy as np

from ndtmap.gates import Gate
from ndtmap.indications import detect_indications
from ndtmap.scans import amplitude_map, depth_map
from ndtmap.simulate import scan_truth

grid = ndtmap.open_grid(sample_path("forging_block.nc"))
truth = scan_truth(grid)
print(f"near field N = {truth['near_field_mm']:.1f} mm, wavelength {truth['wavelength_mm']:.2f} mm")
for r in truth["reflectors"]:
    print(r["label"], r["depth_mm"], "mm", r.get("diameter_mm", ""))"""),
    md("""
## Echo heights and noise

A gate over the deep zone: the small reflectors peak at a few %FSH, barely above the grain noise.
"""),
    code("""
# NBVAL_CHECK_OUTPUT
deep_all = Gate("deep", 80.0, 150.0, threshold_fsh=3.0)
amp = amplitude_map(grid, deep_all)
print(f"median of the gate amplitude (the noise): {float(np.nanmedian(amp.values)):.1f} %FSH")
for r in truth["reflectors"][:3]:
    a = float(amp.sel(scan=r["scan_mm"], index=r["index_mm"], method="nearest"))
    print(f"{r['label']}: {a:.1f} %FSH at its position")"""),
    code("""
# NBVAL_IGNORE_OUTPUT
from ndtmap.plot import map_figure

map_figure(amp, title="KFP-FG-0317: peak amplitude, 80-150 mm")"""),
    md("""
The strongest thing in the deep gate is not a small reflector: at about 110 mm, right below the
planar reflector at 55 mm, is its **repeat echo** (sound bouncing reflector - surface - reflector).
Two gates keep the zones apart: `mid` (80-115 mm) and
`deep` (115-150 mm); a gate `upper` (10-80 mm) finds the primary echo, so the repeat can be
recognised as one.
"""),
    code("""
from ndtmap.indications import size_indications

upper = Gate("upper", 10.0, 80.0, threshold_fsh=3.0)
backwall = Gate("backwall", 150.0, 168.0, threshold_fsh=20.0)
bw_amp, bw_depth = amplitude_map(grid, backwall), depth_map(grid, backwall)
primaries = detect_indications(amplitude_map(grid, upper), threshold_fsh=3.0, depth_map=depth_map(grid, upper))

records = []
for name, start, end in (("mid", 80.0, 115.0), ("deep", 115.0, 150.0)):
    g = Gate(name, start, end, threshold_fsh=3.0)
    for rec in size_indications(amplitude_map(grid, g), threshold_fsh=3.0, depth_map=depth_map(grid, g),
                                backwall=bw_amp, backwall_depth_mm=bw_depth, other_indications=primaries):
        records.append((name, rec))
print(len(records), "indications")"""),
    md("""
## DGS equivalent size against the truth
"""),
    code("""
# NBVAL_CHECK_OUTPUT
for name, rec in records:
    near = [r for r in truth["reflectors"][:3]
            if abs(r["scan_mm"] - rec["scan_mm"]) <= 5 and abs(r["index_mm"] - rec["index_mm"]) <= 5]
    true = f"true FBH {near[0]['diameter_mm']:.0f} mm" if near else "no small reflector here"
    print(f"{name:4s} at ({rec['scan_mm']:5.1f}, {rec['index_mm']:4.1f}) mm, depth {rec['depth_mm']:5.1f} mm, "
          f"peak {rec['peak_fsh']:4.1f} %FSH: ERS {rec['ers_mm']:.1f} mm ({true}); "
          f"flags {', '.join(rec['flags'])}")"""),
    md("""
What the flags say:
"""),
    code("""
# NBVAL_CHECK_OUTPUT
from ndtmap.indications import FLAG_MEANINGS

for flag in sorted({f for _, rec in records for f in rec["flags"]}):
    print(f"{flag}: {FLAG_MEANINGS[flag]}")"""),
    md("""
The repeat echo gets an "equivalent size" too, but it is flagged `repeat_echo`: it is the
planar reflector seen twice, not a second reflector. R1 lies just inside three near-field lengths
(`near_field`), where the far-field DGS relation does not hold. The `at_scan_edge` flags come from
the 20 dB drop lengths, which for a small deep reflector reach across the whole scanned area.
"""),
]


WALL = [
    md("""
# Wall section KFP-PW-1180: thickness map and minimum remaining wall

Kestrel Forge & Plate (fictional) surveys a vessel wall section, 12 mm nominal, for far-side
corrosion with a 5 MHz, 6 mm straight-beam probe. The thickness at each position comes from the
time of the back-wall echo: `T = c t / 2`. A few A-scans were lost to encoder drop-outs: those
positions must stay blank, never show a thickness.

**Caution.**
"""),
    code(SETUP),
    code("""
import numpy as np

from ndtmap.gates import Gate
from ndtmap.grid import missing_ascans
from ndtmap.scans import thickness_map
from ndtmap.simulate import scan_truth

grid = ndtmap.open_grid(sample_path("corroded_wall.nc"))
truth = scan_truth(grid)
print(f"nominal wall {truth['part']['thickness_mm']} mm; missing A-scans: {int(missing_ascans(grid).sum())}")"""),
    md("""
## The back-wall gate

The gate must reach down to the thinnest wall: a gate set around the nominal wall (11-13.4 mm)
misses the thinned areas; one from 6 mm catches the back wall everywhere.
"""),
    code("""
# NBVAL_CHECK_OUTPUT
for start in (11.0, 6.0):
    t = thickness_map(grid, Gate("backwall", start, 13.4, threshold_fsh=10.0))
    print(f"gate from {start:4.1f} mm: thinnest {float(np.nanmin(t.values)):.2f} mm, "
          f"positions without a thickness {int(np.isnan(t.values).sum())}")"""),
    code("""
# NBVAL_IGNORE_OUTPUT
from ndtmap.plot import thickness_figure

thickness = thickness_map(grid, Gate("backwall", 6.0, 13.4, threshold_fsh=10.0))
thickness_figure(thickness, nominal_mm=12.0, title="KFP-PW-1180: remaining wall")"""),
    md("""
## Against the truth

The simulated file carries the true wall at every position (`truth_thickness_mm`).
"""),
    code("""
# NBVAL_CHECK_OUTPUT
err = thickness.values - grid["truth_thickness_mm"].values
k = np.unravel_index(np.nanargmin(thickness.values), thickness.shape)
print(f"minimum remaining wall {float(thickness.values[k]):.2f} mm at scan {float(thickness.scan[k[0]]):.1f}, "
      f"index {float(thickness.index[k[1]]):.1f} mm (true minimum {truth['part']['min_thickness_mm']:.2f} mm)")
print(f"error against the true wall: median {np.nanmedian(np.abs(err)):.2f} mm, "
      f"largest {np.nanmax(np.abs(err)):.2f} mm")
print(f"missing A-scans with a thickness: {int(np.isfinite(thickness.values[missing_ascans(grid).values]).sum())}")"""),
    md("""
The errors are a fraction of the 1.2 mm wavelength: the rectified RF peak lies within half a period
of the middle of the echo. On a sloped back wall the echo also weakens, and a few positions do not
reach the threshold at all: those positions need a closer look (a smaller probe, another angle),
never an assumed thickness.

## Figures for the report

`ndtmap.plot.write_figure` writes HTML always, and PNG, SVG or PDF when a Chromium browser is
installed. The workbench's *Save* panel does the same for its current views.
"""),
    code("""
# NBVAL_IGNORE_OUTPUT
import tempfile
from pathlib import Path

from ndtmap.plot import find_chromium, write_figure

out = Path(tempfile.mkdtemp(prefix="kfp-pw-1180-"))
fig = thickness_figure(thickness, nominal_mm=12.0, title="KFP-PW-1180 remaining wall")
written = [write_figure(fig, out / "thickness.html")]
if find_chromium() is not None:
    written.append(write_figure(fig, out / "thickness.png"))
print([p.name for p in written])"""),
]

NOTEBOOKS = {
    "01_quick_start.ipynb": QUICK_START,
    "02_plate_laminations.ipynb": PLATE,
    "03_forging_dgs.ipynb": FORGING,
    "04_corroded_wall.ipynb": WALL,
}


def build(name: str, cells: list[tuple[str, str]]):
    import nbformat

    nb = nbformat.v4.new_notebook()
    nb.metadata["kernelspec"] = {"name": "python3", "display_name": "Python 3", "language": "python"}
    nb.metadata["language_info"] = {"name": "python"}
    for kind, text in cells:
        nb.cells.append(nbformat.v4.new_markdown_cell(text) if kind == "markdown" else nbformat.v4.new_code_cell(text))
    for k, cell in enumerate(nb.cells):
        cell["id"] = f"{Path(name).stem[:2]}-{k:02d}"
    return nb


def execute(nb, path: Path):
    """Run `nb` in its folder; keep the outputs of the NBVAL_CHECK_OUTPUT cells only."""
    from nbclient import NotebookClient

    NotebookClient(nb, timeout=300, kernel_name="python3", resources={"metadata": {"path": str(path.parent)}}).execute()
    nb.metadata.pop("widgets", None)  # the saved widget state would be megabytes of map data
    for cell in nb.cells:
        if cell.cell_type != "code":
            continue
        if "NBVAL_CHECK_OUTPUT" not in cell.source:
            cell.outputs = []
            cell.execution_count = None  # nbval needs the count of the cells whose outputs it compares
        cell.metadata.pop("execution", None)
    return nb


def main(argv: list[str]) -> None:
    import nbformat

    run = "--execute" in argv
    for name, cells in NOTEBOOKS.items():
        path = HERE / name
        nb = build(name, cells)
        if run:
            nb = execute(nb, path)
        nbformat.write(nb, str(path))
        print("wrote", path)


if __name__ == "__main__":
    main(sys.argv[1:])
