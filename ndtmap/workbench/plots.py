"""Figures of the workbench: pure functions from results to :class:`plotly.graph_objects.Figure`.

Each builder returns a figure with a fixed set of traces for its inputs, so
the widget layer can copy the trace data into a live ``FigureWidget``, and
:func:`save_views` can write the same figures to files. Colour scales come
from :mod:`ndtmap.plot.style` (viridis for %FSH, cividis for mm, the diverging
purple-orange scale centred on 0 for dB) and every colour bar names its
quantity and unit.

Display thinning
    A map or section with more positions (or samples) than a screen can
    show is thinned for display only: blocks of neighbouring cells are
    merged, keeping the largest value (amplitude, loss, sections) or the
    smallest (depth, thickness: the thinnest wall stays visible), and the
    figure says so. Sizing and the indication list always use every
    position. Figures written with :func:`save_views` are not thinned.
"""

from __future__ import annotations

import math
import os
import textwrap
from collections.abc import Iterable, Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np
import plotly.graph_objects as go
import xarray as xr

from ndtmap.plot.style import ACCENTS, FONT_FAMILY, color_scale_for, label_from_attrs

__all__ = [
    "MAX_MAP_CELLS",
    "MAX_SECTION_POSITIONS",
    "MAX_SECTION_SAMPLES",
    "PLAN_TRACES",
    "gate_colour",
    "thin",
    "plan_figure",
    "plan_overlays",
    "ascan_figure",
    "section_figure",
    "profile_figure",
    "view_figures",
    "save_views",
]

#: Most cells per axis drawn on the plan view (a denser map is thinned for display).
MAX_MAP_CELLS = 300
#: Most positions and samples drawn on a section.
MAX_SECTION_POSITIONS = 400
MAX_SECTION_SAMPLES = 500

#: Trace order of the plan view.
PLAN_TRACES = ("map", "outlines", "loss_outlines", "labels", "selected", "lines", "point", "ruler", "ends")

_GATE_ORDER = (0, 1, 2, 4, 5, 6, 7, 3)  # Okabe-Ito accents; the pale yellow last (weak on white)
_POINT = "#D55E00"
_RULER = "#000000"
_OUTLINE = "#FFFFFF"
_SELECTED = "#E69F00"
_LAYOUT = dict(font=dict(family=FONT_FAMILY, size=12), paper_bgcolor="white", plot_bgcolor="#F4F4F4")


def gate_colour(k: int) -> str:
    """The overlay colour of the k-th gate (Okabe-Ito accents, stable by gate order)."""
    return ACCENTS[_GATE_ORDER[k % len(_GATE_ORDER)]]


def _blocks(n: int, limit: int | None) -> int:
    return 1 if limit is None or n <= limit else int(math.ceil(n / limit))


def _reduce_axis(values: np.ndarray, coords: np.ndarray, f: int, axis: int, how: str) -> tuple[np.ndarray, np.ndarray]:
    if f == 1:
        return values, coords
    n = values.shape[axis]
    m = int(math.ceil(n / f))
    pad = m * f - n
    fill = -np.inf if how == "max" else np.inf
    v = np.moveaxis(values, axis, 0)
    finite = np.where(np.isnan(v), fill, v)
    if pad:
        finite = np.concatenate([finite, np.full((pad, *finite.shape[1:]), fill)], axis=0)
    blocks = finite.reshape(m, f, *finite.shape[1:])
    red = blocks.max(axis=1) if how == "max" else blocks.min(axis=1)
    red = np.where(np.isinf(red), np.nan, red)
    c = np.concatenate([coords, np.full(pad, np.nan)]).reshape(m, f)
    centres = np.array([float(np.mean(row[np.isfinite(row)])) for row in c])
    return np.moveaxis(red, 0, axis), centres


def thin(values: np.ndarray, c0: np.ndarray, c1: np.ndarray, limit0: int | None, limit1: int | None,
         how: str = "max") -> tuple[np.ndarray, np.ndarray, np.ndarray, tuple[int, int]]:
    """Merge blocks of cells of a 2-D array for display (largest or smallest finite value per block).

    Parameters
    ----------
    values : ndarray (n0, n1)
    c0, c1 : ndarray
        Coordinates along the two axes; the block coordinate is the mean.
    limit0, limit1 : int or None
        Most cells kept along each axis (None: keep all).
    how : {'max', 'min'}

    Returns
    -------
    values, c0, c1, (f0, f1)
        The thinned array, its coordinates and the block sizes.

    Examples
    --------
    >>> v, a, b, f = thin(np.arange(16.0).reshape(4, 4), np.arange(4.0), np.arange(4.0), 2, 2)
    >>> v.tolist(), a.tolist(), f
    ([[5.0, 7.0], [13.0, 15.0]], [0.5, 2.5], (2, 2))
    """
    v = np.asarray(values, dtype=np.float64)
    f0, f1 = _blocks(v.shape[0], limit0), _blocks(v.shape[1], limit1)
    v, a = _reduce_axis(v, np.asarray(c0, dtype=np.float64), f0, 0, how)
    v, b = _reduce_axis(v, np.asarray(c1, dtype=np.float64), f1, 1, how)
    return v, a, b, (f0, f1)


def _thinning_note(f: tuple[int, int], what: str, sizing: bool) -> str:
    if f == (1, 1):
        return ""
    tail = "; sizing uses every position" if sizing else ""
    return f"display only: blocks of {f[0]} \u00d7 {f[1]} {what} merged{tail}"


def _map_units(da: xr.DataArray) -> str:
    return str(da.attrs.get("units", ""))


def _colour_range(da: xr.DataArray, values: np.ndarray) -> dict[str, Any]:
    units = _map_units(da)
    finite = values[np.isfinite(values)]
    if units == "%FSH":
        full = float(da.attrs.get("digitiser_full_scale_fsh", 100.0) or 100.0)
        top = max(100.0, full, float(finite.max()) if finite.size else 0.0)
        return dict(zmin=0.0, zmax=top, zauto=False)
    if units == "dB":
        span = float(np.abs(finite).max()) if finite.size else 1.0
        span = max(span, 1.0)
        return dict(zmin=-span, zmax=span, zmid=0.0, zauto=False)
    if finite.size:
        lo, hi = float(finite.min()), float(finite.max())
        if hi - lo < 1e-9:
            lo, hi = lo - 0.5, hi + 0.5
        return dict(zmin=lo, zmax=hi, zauto=False)
    return dict(zauto=True)


def _box(rec: Mapping[str, Any], pad_s: float, pad_i: float) -> tuple[list[float | None], list[float | None]]:
    s0, s1 = rec["scan_min_mm"] - pad_s, rec["scan_max_mm"] + pad_s
    i0, i1 = rec["index_min_mm"] - pad_i, rec["index_max_mm"] + pad_i
    return [s0, s1, s1, s0, s0, None], [i0, i0, i1, i1, i0, None]


def _half_steps(c: np.ndarray) -> float:
    return 0.5 * float(np.median(np.diff(c))) if c.size > 1 else 0.5


def plan_overlays(
    scan: np.ndarray,
    index: np.ndarray,
    *,
    point: tuple[float, float] | None = None,
    indications: Sequence[Mapping[str, Any]] = (),
    selected: int | None = None,
    measurement: Any = None,
    line: tuple[tuple[float, float], tuple[float, float]] | None = None,
    pending: Sequence[tuple[float, float]] = (),
) -> list[go.Scatter]:
    """The traces drawn over the plan view, in the order of :data:`PLAN_TRACES` after ``'map'``.

    See :func:`plan_figure` for the parameters.
    """
    scan = np.asarray(scan, dtype=np.float64)
    index = np.asarray(index, dtype=np.float64)
    hs, hi = _half_steps(scan), _half_steps(index)
    boxes: dict[str, tuple[list[float | None], list[float | None]]] = {"amplitude": ([], []), "loss": ([], [])}
    labels_at: dict[tuple[float, float, str], list[str]] = {}
    sel_x: list[float | None] = []
    sel_y: list[float | None] = []
    for rec in indications:
        bx, by = _box(rec, hs, hi)
        if selected is not None and rec["id"] == selected:
            sel_x, sel_y = bx, by
        kind = "amplitude" if rec["kind"] == "amplitude" else "loss"
        boxes[kind][0].extend(bx)
        boxes[kind][1].extend(by)
        if kind == "amplitude":  # amplitude ids above the top-left corner, loss ids below the bottom-right
            at = (round(rec["scan_min_mm"] - hs, 1), round(rec["index_max_mm"] + hi, 1), "top right")
        else:
            at = (round(rec["scan_max_mm"] + hs, 1), round(rec["index_min_mm"] - hi, 1), "bottom left")
        labels_at.setdefault(at, []).append(f"#{rec['id']}")
    outlines = go.Scatter(x=boxes["amplitude"][0], y=boxes["amplitude"][1], mode="lines",
                          line=dict(color=_OUTLINE, width=1, dash="dot"), hoverinfo="skip",
                          name="amplitude indications", showlegend=False)
    loss_outlines = go.Scatter(x=boxes["loss"][0], y=boxes["loss"][1], mode="lines",
                               line=dict(color="#56B4E9", width=1, dash="dash"), hoverinfo="skip",
                               name="back-wall-loss indications", showlegend=False)
    labels = go.Scatter(x=[k[0] for k in labels_at], y=[k[1] for k in labels_at], mode="text",
                        text=[" ".join(v) for v in labels_at.values()], textposition=[k[2] for k in labels_at],
                        textfont=dict(color="#FFFFFF", size=11), hoverinfo="skip", showlegend=False, name="ids")
    sel = go.Scatter(x=sel_x, y=sel_y, mode="lines", line=dict(color=_SELECTED, width=3), hoverinfo="skip",
                     showlegend=False, name="selected indication")
    if point is not None:
        ps, pi = point
        cx_ = [scan[0] - hs, scan[-1] + hs, None, ps, ps]
        cy_ = [pi, pi, None, index[0] - hi, index[-1] + hi]
        pt = go.Scatter(x=[ps], y=[pi], mode="markers", marker=dict(symbol="circle-open", size=12, color=_POINT,
                                                                     line=dict(width=2.5, color=_POINT)),
                        hovertemplate="selected: scan %{x:.2f} mm, index %{y:.2f} mm<extra></extra>",
                        showlegend=False, name="selected position")
    else:
        cx_, cy_ = [], []
        pt = go.Scatter(x=[], y=[], mode="markers", showlegend=False, name="selected position")
    cross = go.Scatter(x=cx_, y=cy_, mode="lines", line=dict(color=_POINT, width=1, dash="dash"), hoverinfo="skip",
                       showlegend=False, name="section lines")
    rx: list[float] = []
    ry: list[float] = []
    ex: list[float] = []
    ey: list[float] = []
    if len(pending) == 1:  # the first end of a new line
        rx, ry = [pending[0][0]], [pending[0][1]]
    elif measurement is not None:
        (a, b), (c, d) = measurement.line_mm
        rx, ry = [a, c], [b, d]
        r = measurement.result
        if r.start_mm is not None and r.end_mm is not None:
            ex, ey = [r.start_mm[0], r.end_mm[0]], [r.start_mm[1], r.end_mm[1]]
    elif line is not None:
        (a, b), (c, d) = line
        rx, ry = [a, c], [b, d]
    ruler = go.Scatter(x=rx, y=ry, mode="lines+markers", line=dict(color=_RULER, width=2),
                       marker=dict(size=7, color=_RULER), hovertemplate="line: %{x:.2f}, %{y:.2f} mm<extra></extra>",
                       showlegend=False, name="measuring line")
    ends = go.Scatter(x=ex, y=ey, mode="markers", marker=dict(symbol="diamond", size=11, color="#FFFFFF",
                                                              line=dict(width=2, color=_RULER)),
                      hovertemplate="drop-length end: %{x:.2f}, %{y:.2f} mm<extra></extra>", showlegend=False,
                      name="length ends")
    return [outlines, loss_outlines, labels, sel, cross, pt, ruler, ends]


def plan_figure(
    map_da: xr.DataArray,
    *,
    point: tuple[float, float] | None = None,
    indications: Sequence[Mapping[str, Any]] = (),
    selected: int | None = None,
    measurement: Any = None,
    line: tuple[tuple[float, float], tuple[float, float]] | None = None,
    pending: Sequence[tuple[float, float]] = (),
    threshold_fsh: float | None = None,
    show_below_threshold: bool = True,
    max_cells: int | None = MAX_MAP_CELLS,
    width: int = 560,
    title: str | None = None,
) -> go.Figure:
    """The plan view (C-scan) of a map on the scan/index plane, equal aspect, mm axes.

    Parameters
    ----------
    map_da : xarray.DataArray (scan, index)
        The map (``units`` and ``long_name`` label the colour bar).
    point : (scan_mm, index_mm), optional
        Selected position: a marker and the lines of the B-scan (along
        scan) and the D-scan (along index) through it.
    indications : sequence of dict
        Indication records (outlined by their extents and numbered).
    selected : int, optional
        Id of the highlighted indication.
    measurement : DropMeasurement, optional
        Drawn as its line and the two ends of the drop length.
    line, pending
        A line without a measurement, and picked points of a line not yet
        complete.
    threshold_fsh : float, optional
        With ``show_below_threshold=False``, %FSH positions below it are left
        blank.
    max_cells : int or None
        Thin the display above this many cells per axis (None: never).

    Returns
    -------
    plotly.graph_objects.Figure
        Traces in the order of :data:`PLAN_TRACES`.
    """
    scan = np.asarray(map_da["scan"].values, dtype=np.float64)
    index = np.asarray(map_da["index"].values, dtype=np.float64)
    values = np.asarray(map_da.transpose("scan", "index").values, dtype=np.float64)
    units = _map_units(map_da)
    if units == "%FSH" and not show_below_threshold and threshold_fsh is not None:
        values = np.where(values >= threshold_fsh, values, np.nan)
    how = "min" if units == "mm" else "max"
    z, s_c, i_c, f = thin(values, scan, index, max_cells, max_cells, how)
    label = label_from_attrs(map_da)
    short = str(map_da.attrs.get("long_name", map_da.name or "value"))
    heat = go.Heatmap(
        z=z.T, x=s_c, y=i_c, colorscale=color_scale_for(units),
        colorbar=dict(title=dict(text=label, side="right"), thickness=14, len=0.9),
        hovertemplate=f"scan %{{x:.2f}} mm<br>index %{{y:.2f}} mm<br>{short} %{{z:.2f}} {units}<extra></extra>",
        name="map", hoverongaps=False, **_colour_range(map_da, z),
    )
    overlays = plan_overlays(scan, index, point=point, indications=indications, selected=selected,
                             measurement=measurement, line=line, pending=pending)
    note = _thinning_note(f, "positions", True)
    head = title or f"Plan view \u2013 {short}"
    hs, hi = _half_steps(scan), _half_steps(index)
    span_s = (scan[-1] - scan[0]) + 2 * hs
    span_i = (index[-1] - index[0]) + 2 * hi
    plot_w = width - 150
    height = int(min(720, max(300, plot_w * span_i / max(span_s, 1e-9) + 110)))
    fig = go.Figure(data=[heat, *overlays])
    fig.update_layout(
        **_LAYOUT, width=width, height=height, margin=dict(l=60, r=10, t=50 if note else 36, b=50),
        title=dict(text=head + (f"<br><sup>{note}</sup>" if note else ""), x=0.0, xanchor="left", font=dict(size=13)),
        xaxis=dict(title="scan axis [mm]", range=[scan[0] - hs, scan[-1] + hs], constrain="domain", zeroline=False,
                   showgrid=False),
        yaxis=dict(title="index axis [mm]", range=[index[0] - hi, index[-1] + hi], scaleanchor="x", scaleratio=1,
                   constrain="domain", zeroline=False, showgrid=False),
        uirevision="plan", clickmode="event", hovermode="closest", meta="ndtmap-plan",
    )
    return fig


def ascan_figure(view: Any, *, gate_order: Sequence[str] | None = None, show_rf: bool = False, width: int = 560,
                 height: int = 270, title: str | None = None) -> go.Figure:
    """The A-scan at one position with the gates: window (start, end) at the threshold, and the event.

    Parameters
    ----------
    view : AScanView
        From :meth:`WorkbenchState.ascan`.
    gate_order : sequence of str, optional
        Gate names in the order their colours are given (default: as in
        `view`).
    show_rf : bool, default False
        Draw the RF signal too (RF grids); the amplitude axis then spans
        both signs.

    Returns
    -------
    plotly.graph_objects.Figure
        Traces: the RF signal (empty unless shown), the detection
        signal, one per gate, the gate events.
    """
    order = list(gate_order) if gate_order is not None else [g.name for g in view.gates]
    depth = np.asarray(view.depth_mm, dtype=np.float64)
    rf_on = show_rf and view.rf_fsh is not None
    rf = go.Scatter(x=depth if rf_on else [], y=np.asarray(view.rf_fsh, dtype=np.float64) if rf_on else [],
                    mode="lines", line=dict(color="#9A9A9A", width=0.8), name="RF", hoverinfo="skip",
                    showlegend=bool(rf_on))
    sig = go.Scatter(x=depth, y=np.asarray(view.signal_fsh, dtype=np.float64), mode="lines",
                     line=dict(color="#1F3A5F", width=1.2), name=view.detect,
                     customdata=np.asarray(view.time_us, dtype=np.float64),
                     hovertemplate="depth %{x:.2f} mm (t %{customdata:.3f} us)<br>%{y:.1f} %FSH<extra></extra>")
    traces: list[Any] = [rf, sig]
    ex, ey, et, ec = [], [], [], []
    for mark in view.gates:
        k = order.index(mark.name) if mark.name in order else len(order)
        colour = gate_colour(k)
        if mark.start_depth_mm is None or mark.end_depth_mm is None:
            xs: list[float | None] = []
            ys: list[float | None] = []
        else:
            s, e, t = mark.start_depth_mm, mark.end_depth_mm, mark.threshold_fsh
            xs, ys = [s, s, e, e], [0.0, t, t, 0.0]
        label = f"{mark.name} ({mark.mode}{', follows ' + mark.follows if mark.follows else ''})"
        traces.append(go.Scatter(x=xs, y=ys, mode="lines", line=dict(color=colour, width=2), name=label,
                                 hovertemplate=f"gate {mark.name}: threshold {mark.threshold_fsh:g} %FSH"
                                               "<extra></extra>"))
        if mark.triggered and mark.event_depth_mm is not None:
            ex.append(mark.event_depth_mm)
            ey.append(mark.event_amplitude_fsh)
            et.append(mark.name)
            ec.append(colour)
    traces.append(go.Scatter(x=ex, y=ey, mode="markers", marker=dict(symbol="triangle-down", size=10, color=ec,
                                                                    line=dict(width=1, color="#000000")),
                             text=et, name="gate events",
                             hovertemplate="%{text}: event at %{x:.2f} mm, %{y:.1f} %FSH<extra></extra>"))
    head = title or f"A-scan at scan {view.scan_mm:.2f} mm, index {view.index_mm:.2f} mm"
    if view.missing:
        head += " \u2013 missing A-scan"
    shown = np.abs(np.asarray(view.rf_fsh if rf_on else view.signal_fsh, dtype=np.float64))
    finite = shown[np.isfinite(shown)]
    top = max(100.0, float(finite.max()) * 1.05 if finite.size else 100.0)
    fig = go.Figure(data=traces)
    fig.update_layout(
        **_LAYOUT, width=width, height=height, margin=dict(l=60, r=10, t=34, b=44),
        title=dict(text=head, x=0.0, xanchor="left", font=dict(size=13)),
        xaxis=dict(title="depth below the surface [mm]", zeroline=False),
        yaxis=dict(title="amplitude [%FSH]", range=[-top if rf_on else -1.0, top], zeroline=True),
        legend=dict(orientation="h", y=-0.28, x=0.0, font=dict(size=10)), meta="ndtmap-ascan",
        uirevision="ascan",
    )
    return fig


def section_figure(section: xr.DataArray, *, along: str, cursor_mm: float | None = None,
                   gates: Sequence[Any] = (), gate_order: Sequence[str] | None = None,
                   max_positions: int | None = MAX_SECTION_POSITIONS, max_samples: int | None = MAX_SECTION_SAMPLES,
                   width: int = 560, height: int = 250, title: str | None = None) -> go.Figure:
    """A B-scan (`along`='scan') or D-scan ('index'): positions across, depth down, amplitude in colour.

    Parameters
    ----------
    section : xarray.DataArray (position, time)
        From :func:`ndtmap.scans.sections.b_scan` or :func:`~ndtmap.scans.sections.d_scan`
        (with its ``depth`` coordinate).
    cursor_mm : float, optional
        The selected position along the section (a vertical line).
    gates : sequence of SectionGate
        Gate windows along the line (start and end depth; dashed lines).

    Returns
    -------
    plotly.graph_objects.Figure
        Traces: the section, the cursor, one per gate.
    """
    pos = np.asarray(section[along].values, dtype=np.float64)
    depth = np.asarray(section["depth"].values, dtype=np.float64)
    values = np.asarray(section.transpose(along, "time").values, dtype=np.float64)
    z, p_c, d_c, f = thin(values, pos, depth, max_positions, max_samples, "max")
    units = str(section.attrs.get("units", "%FSH"))
    label = label_from_attrs(section)
    heat = go.Heatmap(
        z=z.T, x=p_c, y=d_c, colorscale=color_scale_for(units), zmin=0.0,
        zmax=max(100.0, float(np.nanmax(z)) if np.isfinite(z).any() else 100.0), zauto=False,
        colorbar=dict(title=dict(text=label, side="right"), thickness=12, len=0.9),
        hovertemplate=f"{along} %{{x:.2f}} mm<br>depth %{{y:.2f}} mm<br>%{{z:.1f}} {units}<extra></extra>",
        name="section", hoverongaps=False,
    )
    traces: list[Any] = [heat]
    if cursor_mm is not None:
        traces.append(go.Scatter(x=[cursor_mm, cursor_mm], y=[depth[0], depth[-1]], mode="lines",
                                 line=dict(color=_POINT, width=1.5), hoverinfo="skip", showlegend=False,
                                 name="selected position"))
    else:
        traces.append(go.Scatter(x=[], y=[], mode="lines", showlegend=False, name="selected position"))
    order = list(gate_order) if gate_order is not None else [g.name for g in gates]
    for g in gates:
        k = order.index(g.name) if g.name in order else len(order)
        xs = np.concatenate([g.position_mm, [np.nan], g.position_mm])
        ys = np.concatenate([g.start_depth_mm, [np.nan], g.end_depth_mm])
        traces.append(go.Scatter(x=xs, y=ys, mode="lines", line=dict(color=gate_colour(k), width=1.2, dash="dash"),
                                 name=f"gate {g.name}", hoverinfo="skip", connectgaps=False, showlegend=False))
    note = _thinning_note(f, "cells", False)
    kind = "B-scan" if along == "scan" else "D-scan"
    head = title or kind
    fig = go.Figure(data=traces)
    fig.update_layout(
        **_LAYOUT, width=width, height=height, margin=dict(l=60, r=10, t=46 if note else 30, b=40),
        title=dict(text=head + (f"<br><sup>{note}</sup>" if note else ""), x=0.0, xanchor="left", font=dict(size=13)),
        xaxis=dict(title=f"{along} axis [mm]", range=[pos[0], pos[-1]] if pos.size > 1 else None, zeroline=False),
        yaxis=dict(title="depth [mm]", range=[depth[-1], depth[0]], zeroline=False),
        meta=f"ndtmap-{'bscan' if along == 'scan' else 'dscan'}", clickmode="event", hovermode="closest",
        uirevision=kind,
    )
    return fig


def profile_figure(measurement: Any = None, *, width: int = 560, height: int = 260) -> go.Figure:
    """The amplitude along the measuring line, the drop level and the two ends of the length.

    Parameters
    ----------
    measurement : DropMeasurement, optional
        From :meth:`WorkbenchState.measure` (None: an empty figure that
        says how to measure).

    Returns
    -------
    plotly.graph_objects.Figure
        Traces: the profile, the level, the two ends, the length between them.
    """
    if measurement is None:
        traces = [go.Scatter(x=[], y=[], name=n) for n in ("amplitude", "level", "ends", "length")]
        head = "Drop ruler \u2013 pick two points on the plan view (tool: measure) or type the line"
        level = None
    else:
        m = measurement
        r = m.result
        d = np.asarray(m.distance_mm, dtype=np.float64)
        v = np.asarray(m.profile_fsh, dtype=np.float64)
        level = m.level_fsh
        lvl = go.Scatter(x=[d[0], d[-1]], y=[level, level], mode="lines", line=dict(color=_POINT, dash="dash"),
                         name=f"-{m.drop_db:g} dB level {level:.1f} %FSH",
                         hovertemplate=f"-{m.drop_db:g} dB: {level:.1f} %FSH<extra></extra>")
        if m.crossings_distance_mm is not None:
            a, b = m.crossings_distance_mm
            ends = go.Scatter(x=[a, b], y=[level, level], mode="markers",
                              marker=dict(symbol="diamond", size=11, color="#FFFFFF", line=dict(width=2, color="#000")),
                              name="ends", hovertemplate="end at %{x:.2f} mm along the line<extra></extra>")
            length = go.Scatter(x=[a, b], y=[level * 1.08, level * 1.08], mode="lines+text",
                                line=dict(color="#000000", width=1.5), text=["", f"{r.length_mm:.1f} mm"],
                                textposition="top left", name="length", hoverinfo="skip")
        else:
            ends = go.Scatter(x=[], y=[], name="ends")
            length = go.Scatter(x=[], y=[], name="length")
        traces = [go.Scatter(x=d, y=v, mode="lines", line=dict(color="#1F3A5F", width=1.6), name="amplitude",
                             hovertemplate="%{x:.2f} mm along the line: %{y:.1f} %FSH<extra></extra>"),
                  lvl, ends, length]
        head = m.summary()
    fig = go.Figure(data=traces)
    fig.update_layout(
        **_LAYOUT, width=width, height=height, margin=dict(l=60, r=10, t=36, b=44),
        title=dict(text=head, x=0.0, xanchor="left", font=dict(size=12)),
        xaxis=dict(title="distance along the line [mm]", zeroline=False),
        yaxis=dict(title="amplitude [%FSH]", rangemode="tozero"),
        showlegend=False, meta="ndtmap-profile",
    )
    return fig


def view_figures(state: Any, *, max_cells: int | None = None) -> dict[str, go.Figure]:
    """The current views of a :class:`WorkbenchState` as figures: plan, ascan, bscan, dscan (+ profile).

    Full resolution by default (`max_cells` None).
    """
    order = list(state.gate_names)
    recs = state.indications() if state.has_analysis() else []
    meas = state.measurement()
    g = state.gate()
    figs = {
        "plan": plan_figure(state.map(), point=state.point, indications=recs, selected=state.selected_indication,
                            measurement=meas, threshold_fsh=g.threshold_fsh,
                            show_below_threshold=state.show_below_threshold, max_cells=max_cells),
        "ascan": ascan_figure(state.ascan(), gate_order=order),
        "bscan": section_figure(state.b_scan(), along="scan", cursor_mm=state.point[0],
                                gates=state.section_gates("scan"), gate_order=order, max_positions=max_cells,
                                max_samples=None if max_cells is None else MAX_SECTION_SAMPLES,
                                title=f"B-scan at index {state.point[1]:.2f} mm"),
        "dscan": section_figure(state.d_scan(), along="index", cursor_mm=state.point[1],
                                gates=state.section_gates("index"), gate_order=order, max_positions=max_cells,
                                max_samples=None if max_cells is None else MAX_SECTION_SAMPLES,
                                title=f"D-scan at scan {state.point[0]:.2f} mm"),
    }
    if meas is not None:
        figs["profile"] = profile_figure(meas)
    return figs


def _with_caution(fig: go.Figure, caution: str) -> go.Figure:
    """A copy of `fig` with the caution written under it (for figures saved to files)."""
    out = go.Figure(fig)
    h = int(out.layout.height or 400)
    b = int(out.layout.margin.b if out.layout.margin.b is not None else 40)
    legend_below = out.layout.showlegend is not False and out.layout.legend.y is not None and out.layout.legend.y < 0
    below = b + (34 if legend_below else 0)
    out.update_layout(height=h + 44 + below - b, margin=dict(b=below + 44))
    text = "<br>".join(textwrap.wrap(caution, 110))
    out.add_annotation(text=f"<i>{text}</i>", xref="paper", yref="paper", x=0.0, y=0.0, yshift=-below - 4,
                       showarrow=False, xanchor="left", yanchor="top", font=dict(size=8, color="#444444"),
                       align="left")
    return out


def save_views(state: Any, folder: str | os.PathLike[str], *, stem: str = "workbench",
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
        (:func:`ndtmap.plot.export.find_chromium`).

    Returns
    -------
    list of pathlib.Path
        The files written.
    """
    from ndtmap.errors import ParameterError
    from ndtmap.plot.export import export_session, find_chromium, write_figure

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
    figs = {k: _with_caution(f, state.caution) for k, f in view_figures(state).items()}
    written = [write_figure(f, out / f"{stem}-{k}.html") for k, f in figs.items()] if "html" in fmts else []
    static = [f for f in fmts if f != "html"]
    if static and find_chromium() is not None:
        with export_session():
            for k, f in figs.items():
                for ext in static:
                    written.append(write_figure(f, out / f"{stem}-{k}.{ext}"))
    return written
