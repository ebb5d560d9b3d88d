"""The figures of a report page: one builder per figure kind, with its title and caption.

:data:`FIGURE_BUILDERS` maps each kind of :data:`ndtmap.procedure.FIGURE_KINDS`
to a function ``builder(analysis, part) -> (figures, notes)``: the figures
made (none or one :class:`BuiltFigure`) and, when none could be made, the
reason as a note for the page. Captions are plain text (the page template
escapes them).

The plotting, section and gate modules are imported inside the builders:
they pull in compiled kernels, and ``import ndtmap.report`` stays quick.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from ndtmap.errors import NdtmapError
from ndtmap.gates import evaluate_gates
from ndtmap.grid.schema import grid_attr
from ndtmap.indications import DgsOptions, dgs_diagram
from ndtmap.indications.equivalent_size import DgsInputs
from ndtmap.physics import near_field_length_mm
from ndtmap.plot import (
    ascan_at,
    ascan_figure,
    dgs_figure,
    dgs_points,
    figure_bytes,
    map_figure,
    section_figure,
    thickness_figure,
)
from ndtmap.report.text import fmt_number, gate_text, one_line
from ndtmap.scans import b_scan, d_scan

__all__ = ["FIGURE_SIZES", "FIGURE_BUILDERS", "BuiltFigure", "build_figures", "export_bytes", "dgs_family"]

#: Size of each figure kind in CSS pixels (PNG files are written at 3x: print resolution).
FIGURE_SIZES: dict[str, tuple[int, int]] = {
    "amplitude": (900, 650),
    "depth": (900, 650),
    "backwall_loss": (900, 650),
    "thickness": (900, 650),
    "bscan": (900, 560),
    "dscan": (900, 560),
    "ascan": (900, 480),
    "dgs": (900, 620),
}
_DGS_FAMILY_MM = (0.5, 1.0, 2.0, 3.0, 4.0, 6.0, 8.0, 10.0, 12.0, 16.0, 20.0)
_MISSING = "grey: no value (missing A-scan, or the gate did not trigger)"


@dataclass(frozen=True)
class BuiltFigure:
    """A figure made for a page: its kind, the plotly figure, its title and caption (plain text)."""

    kind: str
    figure: Any
    title: str
    caption: str


Built = tuple[list[BuiltFigure], list[str]]
FigureBuilder = Callable[[Any, str], Built]


def _records(analysis: Any, kind: str) -> list[dict[str, Any]]:
    return [r for r in analysis.indications if r["kind"] == kind]


def _backwall_gate(analysis: Any) -> Any:
    proc = analysis.procedure
    return proc.gate(proc.backwall_gate) if proc.backwall_gate else None


def _focus(analysis: Any) -> tuple[float, float, str]:
    """The position (scan mm, index mm) sections and the A-scan are drawn through, and why."""
    amp = _records(analysis, "amplitude")
    loss = _records(analysis, "backwall_loss")
    if amp:
        r = amp[0]
        return float(r["scan_mm"]), float(r["index_mm"]), f"through the peak of indication #{r['id']} (highest peak)"
    if loss:
        r = loss[0]
        return float(r["scan_mm"]), float(r["index_mm"]), f"through back-wall-loss indication #{r['id']}"
    s = np.asarray(analysis.grid["scan"].values)
    i = np.asarray(analysis.grid["index"].values)
    return float(s[s.size // 2]), float(i[i.size // 2]), "through the middle of the scanned area (no indication)"


# --------------------------------------------------------------------------- C-scans


def amplitude_figure(analysis: Any, part: str) -> Built:
    """C-scan of the detection gate's peak amplitude with the -6 dB outlines of the amplitude indications."""

    det = analysis.procedure.gate(analysis.procedure.detection_gate)
    title = f"{part}: peak amplitude in gate {det.name}"
    fig = map_figure(analysis.maps["amplitude"], indications=_records(analysis, "amplitude"), title=title)
    cap = (f"C-scan of the peak amplitude in {gate_text(det)}, %FSH, on the recorded scan and index "
           "positions (mm, equal scale). Outlines: the -6 dB region of each amplitude indication "
           "(positions connected to the peak with at least half its amplitude; the enclosed area is the "
           "table's -6 dB area), dashed when the indication is flagged; labels give the 6 dB drop "
           f"lengths along scan x index. {_MISSING}.")
    return [BuiltFigure("amplitude", fig, title, cap)], []


def depth_figure(analysis: Any, part: str) -> Built:
    """C-scan of the event depth in the detection gate, outlined as the amplitude map."""

    det = analysis.procedure.gate(analysis.procedure.detection_gate)
    maps = analysis.maps
    title = f"{part}: event depth in gate {det.name}"
    fig = map_figure(maps["depth"], indications=_records(analysis, "amplitude"), outline_map=maps["amplitude"],
                     title=title)
    cap = (f"C-scan of the depth of the gate event in {gate_text(det)}, mm below the scanning surface. "
           f"Outlines as in the amplitude map. {_MISSING}.")
    return [BuiltFigure("depth", fig, title, cap)], []


def backwall_loss_figure(analysis: Any, part: str) -> Built:
    """C-scan of the back-wall echo loss (dB) with the back-wall-loss indications outlined."""

    if "backwall_loss" not in analysis.maps:
        return [], ["no back-wall-loss figure: the procedure has no back-wall gate"]
    loss = analysis.maps["backwall_loss"]
    title = f"{part}: back-wall echo loss"
    fig = map_figure(loss, indications=_records(analysis, "backwall_loss"), title=title)
    level = analysis.procedure.backwall_loss_threshold_db
    nominal = f"{fmt_number(loss.attrs.get('nominal_fsh'))} %FSH, {loss.attrs.get('nominal_source', '')}"
    cap = (f"C-scan of the back-wall echo loss in {gate_text(_backwall_gate(analysis))}, dB re the nominal "
           f"back-wall echo ({nominal}); "
           "positive: weaker than nominal. The colour scale is centred on 0 dB. "
           + (f"Outlines: back-wall-loss indications (loss >= {level:g} dB). " if level else "")
           + f"{_MISSING}.")
    return [BuiltFigure("backwall_loss", fig, title, cap)], []


def wall_thickness_figure(analysis: Any, part: str) -> Built:
    """Wall thickness from the back-wall echo, the minimum remaining wall marked."""

    bw = _backwall_gate(analysis)
    if "thickness" not in analysis.maps:
        why = "the procedure has no back-wall gate" if bw is None else "the thickness map could not be made"
        return [], ["no thickness figure: " + why]
    grid = analysis.grid
    thickness = analysis.maps["thickness"]
    nominal = grid_attr(grid, "part_thickness_mm")
    title = f"{part}: wall thickness"
    fig = thickness_figure(thickness, nominal_mm=nominal if isinstance(nominal, float) else None, title=title)
    cap = (f"Wall thickness from the back-wall echo in {gate_text(bw)} "
           f"({thickness.attrs.get('thickness_method', 'first-echo')}: sound velocity "
           f"{grid_attr(grid, 'velocity_m_s'):g} m/s, zero offset "
           f"{grid_attr(grid, 'zero_offset_us', 0.0):g} us), mm; "
           "the minimum remaining wall is marked. Where an indication shadows the back wall the gate may "
           f"find a repeat echo instead. {_MISSING}.")
    return [BuiltFigure("thickness", fig, title, cap)], []


# --------------------------------------------------------------------------- sections and the A-scan


def bscan_figure(analysis: Any, part: str) -> Built:
    """B-scan (along the scan axis) through the focus position."""

    proc = analysis.procedure
    fs, fi, why = _focus(analysis)
    sec = b_scan(analysis.grid, fi, detect=proc.detect)
    title = f"{part}: B-scan at index {sec.attrs['index_mm_used']:.1f} mm"
    cap = (f"B-scan (A-scans along the scan axis) at index {sec.attrs['index_mm_used']:.1f} mm, "
           f"{why}; {proc.detect} signal, %FSH, depth increasing downwards (mm). Marks: amplitude "
           "indications crossed by the section at their peak depth, brackets over their 6 dB drop "
           "length along the scan axis; dotted line: the position of the A-scan figure.")
    fig = section_figure(sec, indications=_records(analysis, "amplitude"),
                         cursor_mm=fs, title=title)
    return [BuiltFigure("bscan", fig, title, cap)], []


def dscan_figure(analysis: Any, part: str) -> Built:
    """D-scan (along the index axis) through the focus position."""

    proc = analysis.procedure
    fs, fi, why = _focus(analysis)
    sec = d_scan(analysis.grid, fs, detect=proc.detect)
    title = f"{part}: D-scan at scan {sec.attrs['scan_mm_used']:.1f} mm"
    cap = (f"D-scan (A-scans along the index axis) at scan {sec.attrs['scan_mm_used']:.1f} mm, "
           f"{why}; {proc.detect} signal, %FSH, depth increasing downwards (mm). Marks as in the "
           "B-scan, brackets along the index axis.")
    fig = section_figure(sec, indications=_records(analysis, "amplitude"),
                         cursor_mm=fi, title=title)
    return [BuiltFigure("dscan", fig, title, cap)], []


def ascan_plot(analysis: Any, part: str) -> Built:
    """The A-scan at the focus position with every gate of the procedure and its event."""

    proc = analysis.procedure
    grid = analysis.grid
    fs, fi, why = _focus(analysis)
    a = ascan_at(grid, fs, fi, detect=proc.detect)
    sub = grid.sel(scan=[float(a["scan"])], index=[float(a["index"])])
    results = {k: v.compute() for k, v in evaluate_gates(sub, list(proc.gates), detect=proc.detect,
                                                          dac=getattr(analysis, "curve", None)).items()}
    title = f"{part}: A-scan at scan {float(a['scan']):.1f} mm, index {float(a['index']):.1f} mm"
    fig = ascan_figure(a, list(proc.gates), gate_results=results, title=title)
    cap = (f"A-scan at scan {float(a['scan']):.1f} mm, index {float(a['index']):.1f} mm ({why}), "
           f"{proc.detect} signal in %FSH against depth (mm). Every gate of the procedure is drawn in its "
           "own colour: the shaded window and a bar at its threshold; diamonds mark the gate events.")
    return [BuiltFigure("ascan", fig, title, cap)], []


# --------------------------------------------------------------------------- DGS


def dgs_family(probe_mm: float, ers: Sequence[float]) -> list[float]:
    """Flat-bottom-hole diameters (mm) drawn in the DGS diagram: up to half the probe, and one above the largest ERS.

    Examples
    --------
    >>> dgs_family(10.0, [2.2])
    [0.5, 1.0, 2.0, 3.0, 4.0]
    >>> dgs_family(10.0, [6.5])
    [0.5, 1.0, 2.0, 3.0, 4.0, 8.0]
    >>> dgs_family(0.8, [])
    [0.4]
    """
    top = 0.5 * probe_mm
    fam = [d for d in _DGS_FAMILY_MM if d <= top]
    if not fam:
        fam = [round(top, 2)]
    if ers:
        hi = max(ers)
        above = [d for d in _DGS_FAMILY_MM if d >= hi]
        if above and above[0] not in fam and above[0] <= probe_mm:
            fam.append(above[0])
    return sorted(set(fam))[-6:]


def dgs_plot(analysis: Any, part: str) -> Built:
    """The DGS diagram of the probe with the back-wall reference and every indication with an ERS."""

    bw = _backwall_gate(analysis)
    with_ers = [r for r in _records(analysis, "amplitude") if r.get("ers_mm") is not None]
    if bw is None:
        return [], ["no DGS figure: the procedure has no back-wall gate (the DGS reference)"]
    if not with_ers:
        return [], ["no DGS figure: no indication has a DGS equivalent size"]
    grid = analysis.grid
    d = float(grid_attr(grid, "probe_diameter_mm"))
    f = float(grid_attr(grid, "probe_frequency_mhz"))
    c = float(grid_attr(grid, "velocity_m_s"))
    angle = float(grid_attr(grid, "beam_angle_deg", 0.0))
    cos = math.cos(math.radians(angle))
    zb = float(np.nanmedian(np.asarray(analysis.maps["backwall_depth"].values, dtype=np.float64))) / cos
    n = near_field_length_mm(d, f, c)
    z_ind = [float(r["depth_mm"]) / cos for r in with_ers]
    zmax = 1.5 * max(zb, *z_ind)
    zmin = 0.5 * min(z_ind)
    # the curves with the band the sizes were made with, so each point lies on its own curve
    bandwidth = DgsInputs.from_attrs(grid.attrs, DgsOptions()).bandwidth
    diagram = dgs_diagram(d, f, c, dgs_family(d, [float(r["ers_mm"]) for r in with_ers]),
                          max_distance_n=max(zmax / n, 3.5), min_distance_n=min(0.2, zmin / n), n_points=300,
                          bandwidth=bandwidth)
    points = dgs_points(with_ers, diagram, backwall_sound_path_mm=zb, beam_angle_deg=angle)
    zz = np.asarray(diagram["distance_mm"].values)
    bw_level = float(np.interp(math.log(zb), np.log(zz), diagram["backwall_echo_db"].values))
    title = f"{part}: DGS diagram, {d:g} mm {f:g} MHz probe"
    fig = dgs_figure(diagram, points=points, backwall_point=(zb, bw_level), title=title)
    cap = (f"DGS diagram of the {d:g} mm, {f:g} MHz probe in the part ({c:g} m/s; near-field length "
           f"{n:.1f} mm): back-wall and flat-bottom-hole echoes in dB re a plane reflector at zero "
           "distance against the sound path (log scale); solid: circular-piston model, dotted: far-field "
           f"relation. The back-wall reference (median back-wall depth {zb:.1f} mm, gate "
           f"“{bw.name}”) is the open square; each indication is placed at the back-wall level plus its "
           "corrected echo ratio (attenuation and transfer corrections applied), so it lies on the curve "
           "of its equivalent size (ERS).")
    return [BuiltFigure("dgs", fig, title, cap)], []


# --------------------------------------------------------------------------- the registry

#: The builder of each figure kind (the keys are :data:`ndtmap.procedure.FIGURE_KINDS`).
FIGURE_BUILDERS: dict[str, FigureBuilder] = {
    "amplitude": amplitude_figure,
    "depth": depth_figure,
    "backwall_loss": backwall_loss_figure,
    "thickness": wall_thickness_figure,
    "bscan": bscan_figure,
    "dscan": dscan_figure,
    "ascan": ascan_plot,
    "dgs": dgs_plot,
}


def build_figures(analysis: Any, kinds: Sequence[str], part: str) -> Built:
    """The figures of one part in the order of `kinds`, and a note for each kind that could not be made.

    Parameters
    ----------
    analysis : ndtmap.procedure.Analysis
    kinds : sequence of str
        Figure kinds (keys of :data:`FIGURE_BUILDERS`).
    part : str
        The part's name in the figure titles.

    Returns
    -------
    figures : list of BuiltFigure
    notes : list of str
        Why a figure is missing (no back-wall gate, no equivalent size, an error of the data).
    """
    figures: list[BuiltFigure] = []
    notes: list[str] = []
    for kind in kinds:
        try:
            made, why = FIGURE_BUILDERS[kind](analysis, part)
        except NdtmapError as exc:
            notes.append(f"no {kind} figure: {one_line(exc)}")
            continue
        figures += made
        notes += why
    return figures, notes


def export_bytes(fig: Any, fmt: str, kind: str) -> bytes:
    """PNG, SVG or PDF bytes of a figure at the size of its kind (:data:`FIGURE_SIZES`)."""

    w, h = FIGURE_SIZES.get(kind, (900, 650))
    return figure_bytes(fig, fmt, width=w, height=h)
