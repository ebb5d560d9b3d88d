"""The interactive plan view: a map with indication outlines, the selected position, sections and a ruler.

The workbench shows its map with :func:`plan_figure`: the same heatmap,
axes and indication outlines as the report's :func:`ndtmap.plot.maps.map_figure`
(:mod:`ndtmap.plot.outlines`: exact cells, black over a white halo, dashed
when flagged), plus what only an interactive view needs: the indication ids,
the selected indication, the selected position with the lines of the
B-scan and D-scan through it, and a measuring line with the two ends of its
drop length. The traces come in the fixed order of :data:`PLAN_TRACES`
whatever is shown, so a live figure can update them in place
(:func:`plan_overlays` gives the overlays alone).
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np
import xarray as xr

from ndtmap._shared import mapgeom as mg
from ndtmap.plot._common import cell_edges, new_figure
from ndtmap.plot.maps import map_heatmap, plan_layout
from ndtmap.plot.outlines import IndicationOutline, merged_outline_traces
from ndtmap.plot.style import INK, MARK_COLOR, SELECTED_COLOR

__all__ = ["PLAN_TRACES", "plan_overlays", "plan_figure"]

#: Trace order of the plan view.
PLAN_TRACES = ("map", "outline_halos", "outlines", "flagged_outlines", "labels", "selected", "lines", "point",
               "ruler", "ends")

Point = tuple[float, float]


def _labels(outlines: Sequence[IndicationOutline]) -> Any:
    """Indication ids next to their outlines: amplitude above the top left, back-wall loss below the bottom right."""
    import plotly.graph_objects as go

    at: dict[tuple[float, float, str], list[str]] = {}
    for o in outlines:
        s0, s1, i0, i1 = o.box_mm()
        key = (round(s0, 1), round(i1, 1), "top right") if o.kind == "amplitude" else \
            (round(s1, 1), round(i0, 1), "bottom left")
        at.setdefault(key, []).append(f"#{o.id}")
    return go.Scatter(x=[k[0] for k in at], y=[k[1] for k in at], mode="text", text=[" ".join(v) for v in at.values()],
                      textposition=[k[2] for k in at], textfont=dict(color="#FFFFFF", size=11), hoverinfo="skip",
                      showlegend=False, name="ids")


def _selected(outlines: Sequence[IndicationOutline], selected: int | None) -> Any:
    import plotly.graph_objects as go

    xs: list[float | None] = []
    ys: list[float | None] = []
    for o in outlines:
        if selected is not None and o.id == selected:
            for p in o.polygons:
                xs += [*p[:, 0].tolist(), float(p[0, 0]), None]
                ys += [*p[:, 1].tolist(), float(p[0, 1]), None]
    return go.Scatter(x=xs, y=ys, mode="lines", line=dict(color=SELECTED_COLOR, width=3), hoverinfo="skip",
                      showlegend=False, name="selected indication", connectgaps=False)


def _position(scan: np.ndarray, index: np.ndarray, point: Point | None) -> list[Any]:
    """The selected position and the lines of the B-scan (along scan) and the D-scan (along index) through it."""
    import plotly.graph_objects as go

    if point is None:
        return [go.Scatter(x=[], y=[], mode="lines", showlegend=False, name="section lines"),
                go.Scatter(x=[], y=[], mode="markers", showlegend=False, name="selected position")]
    ps, pi = float(point[0]), float(point[1])
    se, ie = cell_edges(scan), cell_edges(index)
    cross = go.Scatter(x=[se[0], se[-1], None, ps, ps], y=[pi, pi, None, ie[0], ie[-1]], mode="lines",
                       line=dict(color=MARK_COLOR, width=1, dash="dash"), hoverinfo="skip", showlegend=False,
                       name="section lines")
    marker = dict(symbol="circle-open", size=12, color=MARK_COLOR, line=dict(width=2.5, color=MARK_COLOR))
    pt = go.Scatter(x=[ps], y=[pi], mode="markers", marker=marker,
                    hovertemplate="selected: scan %{x:.2f} mm, index %{y:.2f} mm<extra></extra>", showlegend=False,
                    name="selected position")
    return [cross, pt]


def _ruler(line_mm: tuple[Point, Point] | None, pending_mm: Sequence[Point],
           length_ends_mm: tuple[Point, Point] | None) -> list[Any]:
    """The measuring line (or its first picked end) and the two ends of its drop length."""
    import plotly.graph_objects as go

    rx: list[float] = []
    ry: list[float] = []
    if len(pending_mm) == 1:
        rx, ry = [float(pending_mm[0][0])], [float(pending_mm[0][1])]
    elif line_mm is not None:
        (a, b), (c, d) = line_mm
        rx, ry = [float(a), float(c)], [float(b), float(d)]
    ex: list[float] = []
    ey: list[float] = []
    if length_ends_mm is not None and len(pending_mm) != 1:
        ex = [float(length_ends_mm[0][0]), float(length_ends_mm[1][0])]
        ey = [float(length_ends_mm[0][1]), float(length_ends_mm[1][1])]
    ruler = go.Scatter(x=rx, y=ry, mode="lines+markers", line=dict(color=INK, width=2), marker=dict(size=7, color=INK),
                       hovertemplate="line: %{x:.2f}, %{y:.2f} mm<extra></extra>", showlegend=False,
                       name="measuring line")
    ends = go.Scatter(x=ex, y=ey, mode="markers",
                      marker=dict(symbol="diamond", size=11, color="#FFFFFF", line=dict(width=2, color=INK)),
                      hovertemplate="drop-length end: %{x:.2f}, %{y:.2f} mm<extra></extra>", showlegend=False,
                      name="length ends")
    return [ruler, ends]


def plan_overlays(
    scan_mm: Any,
    index_mm: Any,
    *,
    outlines: Sequence[IndicationOutline] = (),
    point: Point | None = None,
    selected: int | None = None,
    line_mm: tuple[Point, Point] | None = None,
    pending_mm: Sequence[Point] = (),
    length_ends_mm: tuple[Point, Point] | None = None,
) -> list[Any]:
    """The traces drawn over the plan view, in the order of :data:`PLAN_TRACES` after ``'map'``.

    Parameters
    ----------
    scan_mm, index_mm : array_like
        Positions of the map, mm (the section lines span their cells).
    outlines : sequence of IndicationOutline
        From :func:`ndtmap.plot.outlines.indication_outlines`.
    point : (scan_mm, index_mm), optional
        The selected position: a marker and the B-scan and D-scan lines through it.
    selected : int, optional
        Id of the highlighted indication.
    line_mm : ((scan, index), (scan, index)), optional
        A measuring line.
    pending_mm : sequence of (scan, index)
        Picked ends of a line not yet complete (one is drawn alone).
    length_ends_mm : ((scan, index), (scan, index)), optional
        The two ends of the drop length measured along the line.

    Returns
    -------
    list of plotly.graph_objects.Scatter
    """
    scan = np.asarray(scan_mm, dtype=np.float64)
    index = np.asarray(index_mm, dtype=np.float64)
    return [*merged_outline_traces(outlines), _labels(outlines), _selected(outlines, selected),
            *_position(scan, index, point), *_ruler(line_mm, pending_mm, length_ends_mm)]


def plan_figure(
    map_da: xr.DataArray,
    *,
    outlines: Sequence[IndicationOutline] = (),
    point: Point | None = None,
    selected: int | None = None,
    line_mm: tuple[Point, Point] | None = None,
    pending_mm: Sequence[Point] = (),
    length_ends_mm: tuple[Point, Point] | None = None,
    note: str | None = None,
    title: str | None = None,
    width: int | None = None,
) -> Any:
    """The plan view (C-scan) of a map with the workbench's overlays, equal aspect, mm axes.

    Parameters
    ----------
    map_da : xarray.DataArray (scan, index)
        The map as displayed (``units`` and ``long_name`` label the colour
        bar; the unit chooses the colour scale, dB maps are centred on 0).
    outlines, point, selected, line_mm, pending_mm, length_ends_mm
        As for :func:`plan_overlays`.
    note : str, optional
        A line under the title (e.g. that the display is thinned).
    title : str, optional
        Default ``'Plan view - <long_name>'``.
    width : int, optional
        Figure width in px; the height then follows the map's aspect.

    Returns
    -------
    plotly.graph_objects.Figure
        Traces in the order of :data:`PLAN_TRACES`.

    Examples
    --------
    >>> import numpy as np, xarray as xr
    >>> m = xr.DataArray(np.ones((3, 2)), dims=("scan", "index"), coords={"scan": [0.0, 1, 2], "index": [0.0, 2]},
    ...                  attrs={"units": "%FSH", "long_name": "gate peak amplitude"})
    >>> fig = plan_figure(m, point=(1.0, 2.0))
    >>> len(fig.data) == len(PLAN_TRACES), list(fig.data[PLAN_TRACES.index("point")].x)
    (True, [1.0])
    """
    scan, index = mg.coords_mm(mg.as_map("map_da", map_da))
    traces = [map_heatmap(map_da), *plan_overlays(scan, index, outlines=outlines, point=point, selected=selected,
                                                  line_mm=line_mm, pending_mm=pending_mm,
                                                  length_ends_mm=length_ends_mm)]
    layout, xe, ye = plan_layout(map_da)
    height = None
    if width is not None:
        span_s, span_i = float(xe[-1] - xe[0]), float(ye[-1] - ye[0])
        height = int(min(720, max(300, (width - 150) * span_i / max(span_s, 1e-9) + 110)))
    layout.update(margin=dict(l=60, r=10, t=56 if note else 40, b=50), clickmode="event", hovermode="closest",
                  showlegend=False)
    short = str(map_da.attrs.get("long_name", map_da.name or "value"))
    return new_figure("plan", traces, layout, title=title or f"Plan view \u2013 {short}", note=note, width=width,
                      height=height)
