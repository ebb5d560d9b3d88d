"""Plan views (C-scans) for reports: a map on its scan and index positions with indication outlines.

Every function here is pure: it takes a map from :mod:`ndtmap.scans.maps`
(and indication records from :func:`ndtmap.size_indications`) and returns a
:class:`plotly.graph_objects.Figure`; nothing is shown or written (see
:mod:`ndtmap.plot.export` for files). Axes are in mm taken from the
coordinates of the map, so non-uniform scan or index spacing is drawn as it
was recorded, at equal aspect; positions without a value are grey
(:data:`~ndtmap.plot.style.MISSING_COLOR`). Indications are outlined by
:mod:`ndtmap.plot.outlines` (the exact cells of their sizing region). The
workbench's interactive plan view (:mod:`ndtmap.plot.plan`) draws its map
with the same :func:`map_heatmap` and :func:`plan_layout`.
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import xarray as xr

from ndtmap._shared import mapgeom as mg
from ndtmap.errors import ParameterError
from ndtmap.plot._common import axis_title, cell_edges, colour_range, escape, finish, typed_records
from ndtmap.plot.outlines import indication_outlines, outline_traces
from ndtmap.plot.style import AXIS_COLOR, INK, MARK_COLOR, MISSING_COLOR, color_scale_for, label_from_attrs, nice_length

__all__ = ["map_figure", "thickness_figure", "map_heatmap", "plan_layout"]


def map_heatmap(map_da: xr.DataArray) -> Any:
    """The heatmap of a plan view: x = scan, y = index (mm), colour scale and limits by the map's unit.

    Parameters
    ----------
    map_da : xarray.DataArray (scan, index)
        A map; ``units`` and ``long_name`` label the colour bar and the hover text.

    Returns
    -------
    plotly.graph_objects.Heatmap
    """
    import plotly.graph_objects as go  # plotly is imported when a figure is made

    m = mg.as_map("map_da", map_da)
    units = map_da.attrs.get("units")
    scan, index = mg.coords_mm(m)
    z = m.values.T  # rows: index (y), columns: scan (x)
    name = map_da.attrs.get("long_name") or map_da.name or "value"
    u = f" {escape(units)}" if units else ""
    return go.Heatmap(
        x=scan, y=index, z=z, colorscale=color_scale_for(units), **colour_range(units, z),
        colorbar=dict(title=dict(text=escape(label_from_attrs(map_da, "value")), side="right")),
        hovertemplate=(f"scan %{{x:.2f}} mm<br>index %{{y:.2f}} mm<br>{escape(name)}: %{{z:.2f}}{u}"
                       "<extra></extra>"),
        name=escape(name), showscale=True, hoverongaps=False,
    )


def plan_layout(map_da: xr.DataArray) -> tuple[dict[str, Any], np.ndarray, np.ndarray]:
    """The axes of a plan view: mm titles, ranges to the cell edges, equal aspect, grey where no value.

    Returns the layout and the cell edges along scan and index.
    """
    scan, index = mg.coords_mm(map_da)
    xe, ye = cell_edges(scan), cell_edges(index)
    layout = dict(
        xaxis=dict(title=dict(text=axis_title(map_da, "scan", "scan axis position")), range=[xe[0], xe[-1]],
                   constrain="domain", showgrid=False),
        yaxis=dict(title=dict(text=axis_title(map_da, "index", "index axis position")), range=[ye[0], ye[-1]],
                   scaleanchor="x", scaleratio=1.0, constrain="domain", showgrid=False),
        plot_bgcolor=MISSING_COLOR,
    )
    return layout, xe, ye


def _missing_legend() -> Any:
    import plotly.graph_objects as go

    return go.Scatter(x=[None], y=[None], mode="markers", name="no data",
                      marker=dict(symbol="square", size=11, color=MISSING_COLOR, line=dict(color=AXIS_COLOR, width=1)),
                      hoverinfo="skip")


def _scale_bar(fig: Any, xe: np.ndarray) -> None:
    """A bar of a round length (:func:`~ndtmap.plot.style.nice_length`) above the top right corner."""
    length = nice_length(xe[-1] - xe[0])
    x1 = float(xe[-1])
    x0 = x1 - length
    fig.add_shape(type="line", xref="x", yref="paper", x0=x0, x1=x1, y0=1.035, y1=1.035,
                  line=dict(color=INK, width=4))
    for x in (x0, x1):
        fig.add_shape(type="line", xref="x", yref="paper", x0=x, x1=x, y0=1.02, y1=1.05,
                      line=dict(color=INK, width=1.5))
    fig.add_annotation(x=x0, y=1.035, xref="x", yref="paper", xanchor="right", yanchor="middle",
                       text=f"{length:g} mm ", showarrow=False, font=dict(size=12))


def _place_labels(
    labels: Sequence[tuple[list[str], tuple[float, float, float, float]]], xe: np.ndarray, ye: np.ndarray
) -> list[tuple[float, float, str, str]]:
    """Anchor points of indication labels: above or below each outline, not over another label.

    Sizes are estimated for the default export size (about 700 x 470 px of plot area at equal aspect).
    """
    xspan, yspan = float(xe[-1] - xe[0]), float(ye[-1] - ye[0])
    px = min(700.0 / max(xspan, 1e-9), 470.0 / max(yspan, 1e-9))  # pixels per mm
    placed: list[tuple[float, float, float, float]] = []
    out = []
    for lines, (x0, x1, y0, y1) in labels:
        w = (max(len(re.sub(r"<[^>]+>|&[a-z]+;", "x", t)) for t in lines) * 6.2 + 6) / px
        h = (13.0 * len(lines) + 4) / px
        right = 0.5 * (x0 + x1) > 0.5 * (xe[0] + xe[-1])
        cands = []
        for above in (True, False):
            for align_right in (right, not right):
                ax = x1 if align_right else x0
                bx = (ax - w, ax) if align_right else (ax, ax + w)
                by = (y1, y1 + h) if above else (y0 - h, y0)
                cands.append((ax, y1 if above else y0, "right" if align_right else "left",
                              "bottom" if above else "top", (bx[0], bx[1], by[0], by[1])))

        def clear(b: tuple[float, float, float, float], margin: float) -> bool:
            inside = (b[0] >= xe[0] - 1e-9 and b[1] <= xe[-1] + 1e-9 and b[2] >= ye[0] - margin
                      and b[3] <= ye[-1] + margin)
            return inside and all(b[1] <= p[0] or b[0] >= p[1] or b[3] <= p[2] or b[2] >= p[3] for p in placed)

        pick = next((c for c in cands if clear(c[4], h)), cands[0])
        placed.append(pick[4])
        out.append(pick[:4])
    return out

def map_figure(
    map_da: xr.DataArray,
    *,
    indications: Sequence[Mapping[str, Any]] | None = None,
    outline_map: xr.DataArray | None = None,
    title: str | None = None,
    scale_bar: bool = True,
    show_ids: bool = True,
) -> Any:
    """Plan view (C-scan) of a map on its scan and index positions, with indication outlines.

    Parameters
    ----------
    map_da : xarray.DataArray (scan, index)
        A map from :mod:`ndtmap.scans.maps` (``units`` and ``long_name`` in attrs
        label the colour bar; the unit chooses the colour scale, dB maps are
        centred on 0).
    indications : list of dict, optional
        Records from :func:`ndtmap.size_indications`. Each is outlined on the
        map it was sized on (:func:`ndtmap.plot.outlines.indication_outlines`):
        an amplitude indication at its -6 dB region (8-connected to the peak,
        amplitude >= half the peak) and a back-wall-loss indication at its
        loss region (loss >= the detection level), both computed from
        `outline_map`; records of the other kind are marked at their peak
        only. Dashed outlines mark flagged indications (flags listed in the
        label and the hover text).
    outline_map : xarray.DataArray, optional
        The map the outlines are computed from (default `map_da`), e.g. the
        amplitude map when `map_da` is a depth map.
    title : str, optional
        Figure title (HTML-escaped).
    scale_bar : bool, default True
        Draw a bar of a round length above the top right corner.
    show_ids : bool, default True
        Label each indication with its id and 6 dB lengths.

    Returns
    -------
    plotly.graph_objects.Figure

    Raises
    ------
    ParameterError
        When the map is not on (scan, index) or an indication lies outside it.

    Examples
    --------
    >>> import numpy as np, xarray as xr
    >>> m = xr.DataArray(np.ones((3, 2)), dims=("scan", "index"), coords={"scan": [0.0, 1, 3], "index": [0.0, 2]},
    ...                  attrs={"units": "%FSH", "long_name": "gate peak amplitude"})
    >>> fig = map_figure(m)
    >>> fig.data[0].x.tolist(), fig.data[0].colorbar.title.text, fig.layout.yaxis.scaleanchor
    ([0.0, 1.0, 3.0], 'gate peak amplitude [%FSH]', 'x')
    """
    import plotly.graph_objects as go

    m = mg.as_map("map_da", map_da)
    if outline_map is not None:
        mg.check_same_grid("outline_map", mg.as_map("outline_map", outline_map), "map_da", m)
    outlines = indication_outlines(typed_records("indications", indications),
                                   map_da if outline_map is None else outline_map)
    layout, xe, ye = plan_layout(map_da)
    fig = go.Figure(data=[map_heatmap(map_da)], layout=layout)
    if np.isnan(m.values).any():
        fig.add_trace(_missing_legend())
    fig.add_traces(outline_traces(outlines))
    if show_ids:
        labels = [([o.label] + ([escape(", ".join(o.flags))] if o.flagged else []), o.box_mm()) for o in outlines]
        for lines, (x, y, ax, ay) in zip((lab[0] for lab in labels), _place_labels(labels, xe, ye), strict=True):
            text = lines[0] + "".join(f"<br><span style='font-size:9px'>{t}</span>" for t in lines[1:])
            fig.add_annotation(x=x, y=y, xref="x", yref="y", text=text, xanchor=ax, yanchor=ay, align="left",
                               bgcolor="rgba(255,255,255,0.8)", borderpad=1, font=dict(size=10, color=INK))
    if scale_bar:
        _scale_bar(fig, xe)
    fig.update_layout(legend=dict(orientation="h", x=0.0, xanchor="left", y=-0.12, yanchor="top"))
    return finish(fig, "map", title)


def thickness_figure(thickness_da: xr.DataArray, *, nominal_mm: float | None = None, title: str | None = None) -> Any:
    """Wall-thickness map with the minimum remaining wall marked.

    Parameters
    ----------
    thickness_da : xarray.DataArray (scan, index)
        Thickness in mm (from :func:`ndtmap.scans.maps.thickness_map`).
    nominal_mm : float, optional
        Nominal wall: the colour scale then reaches at least to it and the
        minimum is also given as a share of it.
    title : str, optional

    Returns
    -------
    plotly.graph_objects.Figure

    Examples
    --------
    >>> import numpy as np, xarray as xr
    >>> t = np.full((4, 3), 12.0); t[2, 1] = 9.5
    >>> m = xr.DataArray(t, dims=("scan", "index"), coords={"scan": np.arange(4.0), "index": np.arange(3.0)},
    ...                  attrs={"units": "mm", "long_name": "wall thickness"})
    >>> fig = thickness_figure(m, nominal_mm=12.0)
    >>> fig.layout.annotations[0].text.split("<br>")[0]
    'minimum 9.50 mm'
    """
    import plotly.graph_objects as go

    if thickness_da.attrs.get("units") not in (None, "mm"):
        raise ParameterError(f"`thickness_da` must be in mm, has units {thickness_da.attrs.get('units')!r}")
    m = mg.as_map("thickness_da", thickness_da)
    fig = map_figure(thickness_da, scale_bar=True, title=title)
    values = m.values
    heat = fig.data[0]
    finite = values[np.isfinite(values)]
    if nominal_mm is not None:
        nominal = float(nominal_mm)
        if not (math.isfinite(nominal) and nominal > 0):
            raise ParameterError(f"`nominal_mm` must be a thickness > 0 mm, got {nominal_mm!r}")
        if finite.size:
            heat.zmin = float(min(finite.min(), nominal))
            heat.zmax = float(max(finite.max(), nominal))
    if not finite.size:
        fig.add_annotation(x=0.5, y=0.5, xref="paper", yref="paper", text="no thickness reading in the map",
                           bgcolor="white")
        return finish(fig, "thickness", title)
    k = int(np.nanargmin(np.where(np.isfinite(values), values, np.inf)))
    i, j = np.unravel_index(k, values.shape)
    scan, index = mg.coords_mm(m)
    v = float(values[i, j])
    where = f"scan {scan[i]:.1f} mm, index {index[j]:.1f} mm"
    text = f"minimum {v:.2f} mm<br>at {where}"
    if nominal_mm is not None:
        text += f"<br>{100.0 * v / float(nominal_mm):.0f} % of nominal {float(nominal_mm):g} mm"
    fig.add_trace(go.Scatter(
        x=[float(scan[i])], y=[float(index[j])], mode="markers", name="minimum remaining wall",
        marker=dict(symbol="triangle-down-open", size=14, color=MARK_COLOR, line=dict(width=2.5)),
        hovertemplate=text + "<extra></extra>",
    ))
    annotations = list(fig.layout.annotations)
    fig.layout.annotations = []
    xe, ye = cell_edges(scan), cell_edges(index)
    right = scan[i] > 0.5 * (xe[0] + xe[-1])
    upper = index[j] > 0.5 * (ye[0] + ye[-1])
    fig.add_annotation(x=float(scan[i]), y=float(index[j]), xref="x", yref="y", text=text, showarrow=True,
                       arrowhead=2, arrowwidth=1.5, arrowcolor=INK, ax=-50 if right else 50, ay=40 if upper else -40,
                       align="left", bgcolor="rgba(255,255,255,0.9)", bordercolor=AXIS_COLOR, borderwidth=1,
                       xanchor="right" if right else "left")
    for a in annotations:
        fig.add_annotation(a)
    return finish(fig, "thickness", title)
