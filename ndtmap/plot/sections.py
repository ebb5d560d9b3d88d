"""Sections on a depth axis: B-scans, D-scans, polylines and true-geometry sections, one figure for all uses.

:func:`section_figure` draws a section from :mod:`ndtmap.scans.sections`
with depth increasing downwards, the cursor of the shown A-scan (a dotted
line), the gate windows along the line (:class:`SectionGate`, dashed, in
each gate's colour) and amplitude indications crossed by the section (a
marker at the peak and a bracket over the 6 dB drop length). The report and
the workbench both draw their sections with it.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import xarray as xr

from ndtmap.errors import ParameterError, ParameterTypeError
from ndtmap.plot._common import axis_title, cell_edges, colour_range, escape, fmt, new_figure, typed_records
from ndtmap.plot._common import field as rec_field
from ndtmap.plot.outlines import _hover, length_ends_mm
from ndtmap.plot.style import ACCENTS, INK, MARK_COLOR, MISSING_COLOR, color_scale_for, gate_colour, label_from_attrs

__all__ = ["SectionGate", "section_figure"]

_POSITION_TITLES = {"scan": "scan axis position", "index": "index axis position",
                    "distance": "distance along the line", "x": "surface position"}
_CURSOR_COLOR = ACCENTS[1]


@dataclass(frozen=True)
class SectionGate:
    """A gate along a section: window start and end depth (and the event) at every position of the line.

    Attributes
    ----------
    name : str
        The gate's name.
    position_mm : numpy.ndarray
        Positions along the section, mm.
    start_depth_mm, end_depth_mm : numpy.ndarray
        The gate window at each position, mm of depth (NaN where not known).
    event_depth_mm : numpy.ndarray
        Depth of the gate event at each position (NaN where it did not trigger).
    """

    name: str
    position_mm: np.ndarray = field(repr=False)
    start_depth_mm: np.ndarray = field(repr=False)
    end_depth_mm: np.ndarray = field(repr=False)
    event_depth_mm: np.ndarray = field(repr=False)


def _section_arrays(section_da: Any) -> tuple[np.ndarray, np.ndarray, np.ndarray, str]:
    """Positions (x), depths, values (rows: depth) and the position dim of a section, checked."""
    if not isinstance(section_da, xr.DataArray):
        raise ParameterTypeError(f"`section_da` must be an xarray.DataArray, got {type(section_da).__name__}")
    if section_da.ndim != 2:
        raise ParameterError(f"`section_da` must be 2-D, has dims {section_da.dims}")
    if set(section_da.dims) == {"depth", "x"}:
        sec = section_da.transpose("depth", "x")
        return (np.asarray(sec["x"].values, dtype=np.float64), np.asarray(sec["depth"].values, dtype=np.float64),
                np.asarray(sec.values, dtype=np.float64), "x")
    pos = [d for d in section_da.dims if d != "time"]
    if "time" not in section_da.dims or pos[0] not in ("scan", "index", "distance"):
        raise ParameterError(
            f"`section_da` must have dims (scan|index|distance, time) or (depth, x), has {section_da.dims}"
        )
    if "depth" not in section_da.coords:
        raise ParameterError("`section_da` has no `depth` coordinate along time; make it with b_scan or d_scan")
    pos_dim = pos[0]
    sec = section_da.transpose(pos_dim, "time")
    return (np.asarray(sec[pos_dim].values, dtype=np.float64), np.asarray(sec["depth"].values, dtype=np.float64),
            np.asarray(sec.values, dtype=np.float64).T, pos_dim)


def _gate_traces(gates: Sequence[SectionGate], gate_order: Sequence[str] | None) -> list[Any]:
    import plotly.graph_objects as go

    order = list(gate_order) if gate_order is not None else [g.name for g in gates]
    traces = []
    for g in gates:
        k = order.index(g.name) if g.name in order else len(order)
        xs = np.concatenate([g.position_mm, [np.nan], g.position_mm])
        ys = np.concatenate([g.start_depth_mm, [np.nan], g.end_depth_mm])
        traces.append(go.Scatter(x=xs, y=ys, mode="lines", line=dict(color=gate_colour(k), width=1.2, dash="dash"),
                                 name=f"gate {escape(g.name)}", hoverinfo="skip", connectgaps=False,
                                 showlegend=False))
    return traces


def _crossing(section_da: xr.DataArray, rec: Any, x: np.ndarray, pos_dim: str
              ) -> tuple[float, tuple[float, float] | None] | None:
    """Where the section crosses an indication: its peak position along the section and its measured length's ends."""
    if pos_dim in ("scan", "index"):
        other = "index" if pos_dim == "scan" else "scan"
        fixed = section_da.attrs.get(f"{other}_mm_used")
        if fixed is None and other in section_da.coords and section_da[other].ndim == 0:
            fixed = float(section_da[other].values)
        lo, hi = rec_field(rec, f"{other}_min_mm"), rec_field(rec, f"{other}_max_mm")
        if fixed is None or lo is None or hi is None or not (float(lo) - 1e-9 <= float(fixed) <= float(hi) + 1e-9):
            return None
        ends = length_ends_mm(rec, pos_dim)
        return float(rec[f"{pos_dim}_mm"]), ends
    if pos_dim == "distance":
        ss = np.asarray(section_da["scan"].values, dtype=np.float64)
        ii = np.asarray(section_da["index"].values, dtype=np.float64)
        dist = np.hypot(ss - float(rec["scan_mm"]), ii - float(rec["index_mm"]))
        k = int(np.argmin(dist))
        step = float(np.median(np.diff(x))) if x.size > 1 else 1.0
        if dist[k] > max(step, 1e-9):
            return None
        return float(x[k]), None
    return None


def _indication_marks(section_da: xr.DataArray, recs: list[Any], x: np.ndarray, depth: np.ndarray, pos_dim: str
                      ) -> tuple[list[Any], list[dict[str, Any]]]:
    """Marks of the amplitude indications the section crosses: peak marker, 6 dB bracket (traces), label."""
    import plotly.graph_objects as go

    traces: list[Any] = []
    notes: list[dict[str, Any]] = []
    span = float(depth[-1] - depth[0]) if depth.size > 1 else 1.0
    shown: set[str] = set()
    for rec in recs:
        if rec_field(rec, "kind") != "amplitude" or rec_field(rec, "depth_mm") is None:
            continue
        where = _crossing(section_da, rec, x, pos_dim)
        if where is None:
            continue
        xpk, ends = where
        zpk = float(rec["depth_mm"])
        traces.append(go.Scatter(
            x=[xpk], y=[zpk], mode="markers", name="indication peak", legendgroup="ind",
            showlegend="peak" not in shown, hovertemplate=_hover(rec) + "<extra></extra>",
            marker=dict(symbol="x-thin", size=10, color=MARK_COLOR, line=dict(width=2.5, color=MARK_COLOR)),
        ))
        shown.add("peak")
        label, top, xlab = f"#{rec['id']}", zpk - 0.04 * span, xpk
        if ends is not None:
            a, b = ends
            h1, h2 = zpk - 0.02 * span, zpk - 0.05 * span
            traces.append(go.Scatter(
                x=[a, a, b, b], y=[h1, h2, h2, h1], mode="lines", line=dict(color=MARK_COLOR, width=2),
                name="6 dB drop length", legendgroup="bracket", showlegend="bracket" not in shown, hoverinfo="skip",
            ))
            shown.add("bracket")
            label += f" 6 dB {fmt(rec_field(rec, f'length_{pos_dim}_mm'))} mm"
            top, xlab = h2, 0.5 * (a + b)
        notes.append(dict(x=xlab, y=top, xref="x", yref="y", text=label, yanchor="bottom",
                          bgcolor="rgba(255,255,255,0.8)", font=dict(size=10)))
    return traces, notes


def section_figure(
    section_da: xr.DataArray,
    *,
    indications: Sequence[Mapping[str, Any]] | None = None,
    cursor_mm: float | None = None,
    title: str | None = None,
    equal_aspect: bool = False,
    gates: Sequence[SectionGate] = (),
    gate_order: Sequence[str] | None = None,
    note: str | None = None,
    width: int | None = None,
    height: int | None = None,
) -> Any:
    """A B-scan, D-scan, polyline or true-geometry section on a depth axis (depth increasing downwards).

    Parameters
    ----------
    section_da : xarray.DataArray
        From :mod:`ndtmap.scans.sections`: ``(scan, time)`` (B-scan), ``(index,
        time)`` (D-scan) or ``(distance, time)`` (polyline) with a ``depth``
        coordinate along ``time``, or ``(depth, x)`` (true geometry).
    indications : list of IndicationRecord, optional
        Records from :func:`ndtmap.size_indications`; amplitude indications
        whose detected extent the section crosses are marked at their peak
        position and depth, with a bracket over their 6 dB drop length along
        the section (the ends the record measured).
    cursor_mm : float, optional
        A position along the section to mark (e.g. where an A-scan is shown):
        a dotted line, always the second trace.
    title : str, optional
    equal_aspect : bool, default False
        Draw mm at the same scale on both axes.
    gates : sequence of SectionGate, optional
        Gate windows along the line (dashed, in each gate's colour).
    gate_order : sequence of str, optional
        Gate names in the order their colours are given (default: as in `gates`).
    note : str, optional
        A line under the title (e.g. that the display is thinned).
    width, height : int, optional
        Figure size in px.

    Returns
    -------
    plotly.graph_objects.Figure
        Traces: the section, the cursor (empty without one), one per gate,
        then the indication marks.

    Examples
    --------
    >>> from ndtmap.grid.examples import example_grid
    >>> from ndtmap.scans.sections import b_scan
    >>> fig = section_figure(b_scan(example_grid(), 0.0), cursor_mm=1.0)
    >>> fig.layout.yaxis.range[0] > fig.layout.yaxis.range[1], fig.layout.yaxis.title.text, list(fig.data[1].x)
    (True, 'depth below the scanning surface [mm]', [1.0, 1.0])
    """
    import plotly.graph_objects as go

    recs = typed_records("indications", indications)
    x, depth, z, pos_dim = _section_arrays(section_da)
    units = section_da.attrs.get("units", "%FSH")
    finite = z[np.isfinite(z)]
    signed = units == "%FSH" and finite.size and float(finite.min()) < 0  # an RF section: automatic limits
    limits = dict(zauto=True) if signed else colour_range(units, z)
    heat = go.Heatmap(
        x=x, y=depth, z=z, colorscale=color_scale_for(units), **limits,
        colorbar=dict(title=dict(text=escape(label_from_attrs(section_da, "amplitude")), side="right")),
        hovertemplate=f"%{{x:.2f}} mm<br>depth %{{y:.2f}} mm<br>%{{z:.1f}} {escape(units)}<extra></extra>",
        name="section", hoverongaps=False,
    )
    c = None if cursor_mm is None else float(cursor_mm)
    cursor = go.Scatter(x=[] if c is None else [c, c], y=[] if c is None else [float(depth[0]), float(depth[-1])],
                        mode="lines", line=dict(color=_CURSOR_COLOR, width=1.5, dash="dot"), hoverinfo="skip",
                        showlegend=False, name="A-scan position")
    marks, notes = _indication_marks(section_da, recs, x, depth, pos_dim)
    if c is not None:
        notes.append(dict(x=c, y=1.0, xref="x", yref="paper", yanchor="bottom", text=f"A-scan at {c:.1f} mm",
                          font=dict(size=10, color=INK)))
    depth_title = "depth below the scanning surface [mm]"
    if "depth" in section_da.coords and section_da["depth"].attrs.get("long_name"):
        depth_title = f"{escape(section_da['depth'].attrs['long_name'])} [mm]"
    xe, de = cell_edges(x), cell_edges(depth)
    yaxis: dict[str, Any] = dict(title=dict(text=depth_title), range=[de[-1], de[0]], showgrid=False)  # down
    if equal_aspect:
        yaxis.update(scaleanchor="x", scaleratio=1.0)
    layout = dict(
        xaxis=dict(title=dict(text=axis_title(section_da, pos_dim, _POSITION_TITLES[pos_dim])), range=[xe[0], xe[-1]],
                   showgrid=False),
        yaxis=yaxis, plot_bgcolor=MISSING_COLOR, annotations=notes,
        legend=dict(orientation="h", x=0.0, xanchor="left", y=-0.14, yanchor="top"),
    )
    return new_figure("section", [heat, cursor, *_gate_traces(gates, gate_order), *marks], layout, title=title,
                      note=note, width=width, height=height)
