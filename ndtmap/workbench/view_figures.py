"""The workbench's views as figures: what the state computed, thinned for display, drawn by ndtmap.plot.

No figure is built here: each function hands the state's results (the map,
the outlines of the listed indications, the A-scan with its gate marks, the
sections with the gate windows along them, the measurement) to the figure
builders of :mod:`ndtmap.plot`, which the report uses too. The widget layer
(:mod:`ndtmap.workbench.view`) copies these figures into its live views;
:func:`save_views` writes them to files (at full resolution, each with the
caution under it).
"""

from __future__ import annotations

import math
import os
from collections.abc import Iterable
from pathlib import Path
from typing import Any

import plotly.graph_objects as go
import xarray as xr

from ndtmap.errors import ParameterError
from ndtmap.plot import (
    ascan_arrays_figure,
    export_session,
    find_chromium,
    plan_figure,
    plan_overlays,
    profile_figure,
    section_figure,
    with_caption,
    write_figure,
)
from ndtmap.workbench._display import (
    MAX_MAP_CELLS,
    MAX_SECTION_POSITIONS,
    MAX_SECTION_SAMPLES,
    display_map,
    display_section,
)
from ndtmap.workbench.state import AScanView, DropMeasurement, WorkbenchState

__all__ = ["plan_view", "plan_view_overlays", "ascan_view", "section_view", "profile_view", "view_figures",
           "save_views", "EMPTY_PROFILE_TITLE"]

#: Title of the profile before a line is measured.
EMPTY_PROFILE_TITLE = "Drop ruler \u2013 pick two points on the plan view (tool: measure) or type the line"


def _ruler(state: WorkbenchState, measurement: DropMeasurement | None) -> dict[str, Any]:
    """The measuring line as the plan view draws it: the measured line and its ends, or the drawn line."""
    if measurement is not None:
        return dict(line_mm=measurement.line_mm, length_ends_mm=measurement.length_ends_mm())
    return dict(line_mm=state.line, length_ends_mm=None)


def plan_view(state: WorkbenchState, map_da: xr.DataArray, measurement: DropMeasurement | None = None, *,
              max_cells: int | None = MAX_MAP_CELLS, width: int | None = None) -> go.Figure:
    """The plan view of `map_da` with the state's indications, position and measuring line."""
    below = None if state.show_below_threshold else state.gate().threshold_fsh
    shown, note = display_map(map_da, max_cells=max_cells, below_fsh=below)
    return plan_figure(shown, outlines=state.indication_outlines(), point=state.point,
                       selected=state.selected_indication, pending_mm=state.measure_points, note=note, width=width,
                       **_ruler(state, measurement))


def plan_view_overlays(state: WorkbenchState, measurement: DropMeasurement | None = None) -> list[Any]:
    """The overlay traces of :func:`plan_view` alone (everything but the map)."""
    return plan_overlays(state.scan_mm, state.index_mm, outlines=state.indication_outlines(), point=state.point,
                         selected=state.selected_indication, pending_mm=state.measure_points,
                         **_ruler(state, measurement))


def ascan_view(state: WorkbenchState, ascan: AScanView, *, show_rf: bool = False, width: int | None = None,
               height: int | None = None) -> go.Figure:
    """The A-scan at the selected position with every gate (colours by the state's gate order)."""
    return ascan_arrays_figure(
        ascan.depth_mm, ascan.signal_fsh, ascan.gates, rf_fsh=ascan.rf_fsh if show_rf else None,
        time_us=ascan.time_us, signal_name=f"A-scan ({ascan.detect})", position_mm=(ascan.scan_mm, ascan.index_mm),
        missing=ascan.missing, gate_order=state.gate_names, width=width, height=height,
    )


def section_view(state: WorkbenchState, along: str, section: xr.DataArray, gates: Any, *,
                 max_positions: int | None = MAX_SECTION_POSITIONS, max_samples: int | None = MAX_SECTION_SAMPLES,
                 width: int | None = None, height: int | None = None) -> go.Figure:
    """The B-scan (`along`='scan') or D-scan ('index') through the selected position with the gate windows."""
    shown, note = display_section(section, along, max_positions=max_positions, max_samples=max_samples)
    s, i = state.point
    title = f"B-scan at index {i:.2f} mm" if along == "scan" else f"D-scan at scan {s:.2f} mm"
    return section_figure(shown, cursor_mm=s if along == "scan" else i, gates=gates, gate_order=state.gate_names,
                          title=title, note=note, width=width, height=height)


def profile_view(measurement: DropMeasurement | None, *, width: int | None = None,
                 height: int | None = None) -> go.Figure:
    """The amplitude along the measuring line with the drop level and the ends (empty without a measurement)."""
    if measurement is None:
        return profile_figure(title=EMPTY_PROFILE_TITLE, width=width, height=height)
    m = measurement
    level = m.level_fsh if math.isfinite(m.level_fsh) else None
    return profile_figure(m.distance_mm, m.profile_fsh, level_fsh=level, drop_db=m.drop_db,
                          ends_mm=m.crossings_distance_mm, length_mm=m.result.length_mm, title=m.summary(),
                          width=width, height=height)


def view_figures(state: WorkbenchState, *, max_cells: int | None = None) -> dict[str, go.Figure]:
    """The current views of a :class:`WorkbenchState` as figures: plan, ascan, bscan, dscan (+ profile).

    Full resolution by default (`max_cells` None).
    """
    meas = state.measurement()
    samples = None if max_cells is None else MAX_SECTION_SAMPLES
    figs = {
        "plan": plan_view(state, state.map(), meas, max_cells=max_cells),
        "ascan": ascan_view(state, state.ascan()),
        "bscan": section_view(state, "scan", state.b_scan(), state.section_gates("scan"), max_positions=max_cells,
                              max_samples=samples),
        "dscan": section_view(state, "index", state.d_scan(), state.section_gates("index"), max_positions=max_cells,
                              max_samples=samples),
    }
    if meas is not None:
        figs["profile"] = profile_view(meas)
    return figs


def save_views(state: WorkbenchState, folder: str | os.PathLike[str], *, stem: str = "workbench",
               formats: Iterable[str] = ("html", "png", "svg")) -> list[Path]:
    """Write the current views to `folder`: HTML always, PNG/SVG when a Chromium browser is present.

    Parameters
    ----------
    state : WorkbenchState
    folder : path-like
        An existing folder.
    stem : str
        File names are ``<stem>-<view>.<ext>``.
    formats : iterable of {'html', 'png', 'svg', 'pdf'}
        Static formats are skipped without Chromium
        (:func:`ndtmap.plot.find_chromium`).

    Returns
    -------
    list of pathlib.Path
        The files written.
    """
    out = Path(folder)
    if not out.is_dir():
        raise ParameterError(f"`folder` {str(out)!r} is not an existing folder; create it first")
    stem = str(stem).strip() or "workbench"
    if any(ch in stem for ch in "/\\"):
        raise ParameterError(f"`stem` must be a file name without folders, got {stem!r}")
    fmts = [f.lower().lstrip(".") for f in formats]
    bad = [f for f in fmts if f not in ("html", "png", "svg", "pdf")]
    if bad:
        raise ParameterError(f"`formats` must be among html, png, svg, pdf, got {bad}")
    figs = {k: with_caption(f, state.caution) for k, f in view_figures(state).items()}
    written = [write_figure(f, out / f"{stem}-{k}.html") for k, f in figs.items()] if "html" in fmts else []
    static = [f for f in fmts if f != "html"]
    if static and find_chromium() is not None:
        with export_session():
            for k, f in figs.items():
                for ext in static:
                    written.append(write_figure(f, out / f"{stem}-{k}.{ext}"))
    return written
