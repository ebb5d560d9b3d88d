"""Figures for assessment reports: C-scan maps, sections, A-scans, DGS diagrams, thickness maps.

Every function here is pure: it takes ndtmap results (maps, sections,
A-scans, indication records from :func:`ndtmap.size_indications`) and
returns a :class:`plotly.graph_objects.Figure`; nothing is shown or written
(see :mod:`ndtmap.plot.export` for files). The figures use ndtmap's own look
(:mod:`ndtmap.plot.style`): a plain white template with a boxed plot area,
DejaVu Sans, perceptually uniform colour scales chosen by the unit of the
data (viridis for %FSH, cividis for mm, a diverging scale centred on 0 for
dB) and Okabe-Ito accents for overlays. Axes are in mm (or us) taken from the
coordinates of the data, so non-uniform scan or index spacing is drawn as it
was recorded; plan views are drawn at equal aspect.

Figures are deterministic: the same input gives the same figure, with
trace ids set from the figure kind and trace number (plotly.js would
otherwise choose random ones) and no time stamps.

Indication outlines on maps follow the cells of the map: the outline of an
amplitude indication encloses exactly the positions of its -6 dB region
(8-connected to the peak, amplitude at least half the peak), each position
standing for its midpoint (Voronoi) cell, so the area inside the outline is
the ``area_mm2`` of the indication table.
"""

from __future__ import annotations

import html
import math
import re
from collections.abc import Iterable, Mapping, Sequence
from typing import Any

import numpy as np
import xarray as xr

from ndtmap._shared import mapgeom as mg
from ndtmap.errors import ParameterError, ParameterTypeError, SizingError
from ndtmap.gates import Gate
from ndtmap.indications.detection import Indication
from ndtmap.indications.sizing import drop_factor, drop_length, level_length
from ndtmap.plot.style import ACCENTS, FONT_FAMILY, color_scale_for, label_from_attrs

__all__ = [
    "ndtmap_template",
    "map_figure",
    "section_figure",
    "ascan_figure",
    "ascan_at",
    "dgs_figure",
    "dgs_points",
    "thickness_figure",
    "indication_outline",
    "nice_length",
    "MISSING_COLOR",
]

#: Colour of positions without a value (missing A-scans, gate not triggered).
MISSING_COLOR = "#c4c4c4"
_INK = "#222222"
_AXIS = "#4d4d4d"
_GRID = "#ebebeb"
#: Overlay colours in order of use, without the yellow of the palette (too faint on white).
_OVERLAY = tuple(c for c in ACCENTS if c.upper() != "#F0E442")
_OUTLINE = "#D55E00"  # vermillion: markers on sections and diagrams
_OUTLINE_LINE = "#000000"  # indication outlines on maps (over a white halo)


# --------------------------------------------------------------------------- look


def ndtmap_template() -> Any:
    """ndtmap's plotly template: white, boxed axes with outside ticks, DejaVu Sans, Okabe-Ito colours.

    Examples
    --------
    >>> t = ndtmap_template()
    >>> t.layout.paper_bgcolor, t.layout.font.family.split(",")[0]
    ('white', 'DejaVu Sans')
    """
    import plotly.graph_objects as go

    axis = dict(
        showline=True,
        linecolor=_AXIS,
        linewidth=1,
        mirror=True,
        ticks="outside",
        ticklen=5,
        tickcolor=_AXIS,
        showgrid=True,
        gridcolor=_GRID,
        gridwidth=1,
        zeroline=False,
        automargin=True,
        title=dict(standoff=10),
    )
    colorbar = dict(outlinewidth=1, outlinecolor=_AXIS, ticks="outside", ticklen=4, thickness=16)
    return go.layout.Template(
        layout=dict(
            font=dict(family=FONT_FAMILY, size=13, color=_INK),
            paper_bgcolor="white",
            plot_bgcolor="white",
            colorway=list(_OVERLAY),
            title=dict(x=0.0, xanchor="left", xref="paper", font=dict(size=15)),
            margin=dict(l=70, r=30, t=80, b=60),
            xaxis=axis,
            yaxis=axis,
            legend=dict(bgcolor="rgba(255,255,255,0.9)", bordercolor="#b3b3b3", borderwidth=1,
                        font=dict(size=11)),
            hoverlabel=dict(font=dict(family=FONT_FAMILY, size=12), align="left"),
            hovermode="closest",
            annotationdefaults=dict(font=dict(size=11, color=_INK), showarrow=False),
        ),
        data=dict(
            heatmap=[go.Heatmap(colorbar=colorbar)],
            scatter=[go.Scatter(line=dict(width=1.5))],
        ),
    )


def _text(value: Any) -> str:
    """Text from a file for a plotly label: HTML-escaped (plotly reads a subset of HTML)."""
    return html.escape(str(value), quote=False)


def _finish(fig: Any, kind: str, title: str | None) -> Any:
    fig.update_layout(template=ndtmap_template(), uirevision=kind)
    if title is not None:
        fig.update_layout(title=dict(text=_text(title)))
    for k, trace in enumerate(fig.data):
        trace.uid = f"{kind}-{k}"
    return fig


def nice_length(span_mm: float, fraction: float = 0.2) -> float:
    """A round length (1, 2 or 5 times a power of ten) close to `fraction` of `span_mm`, for a scale bar.

    Examples
    --------
    >>> nice_length(120.0), nice_length(80.0), nice_length(7.0)
    (20.0, 10.0, 1.0)
    """
    target = abs(float(span_mm)) * fraction
    if not math.isfinite(target) or target <= 0:
        return 1.0
    power = 10.0 ** math.floor(math.log10(target))
    best = power
    for m in (1.0, 2.0, 5.0, 10.0):
        if m * power <= target * 1.0000001:
            best = m * power
    return float(best)


def _edges(x: np.ndarray) -> np.ndarray:
    """Cell edges of positions: midpoints, half a spacing beyond the ends (1 mm cells for one position)."""
    x = np.asarray(x, dtype=np.float64)
    if x.size == 1:
        return np.array([x[0] - 0.5, x[0] + 0.5])
    w = mg.cell_widths(x)
    return np.concatenate([[x[0] - 0.5 * w[0]], 0.5 * (x[1:] + x[:-1]), [x[-1] + 0.5 * w[-1]]])


def _fmt(value: Any, spec: str = ".1f", none: str = "-") -> str:
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return none
    try:
        return format(float(value), spec)
    except (TypeError, ValueError):
        return str(value)


def _records(name: str, indications: Any) -> list[Mapping[str, Any]]:
    if indications is None:
        return []
    if isinstance(indications, Mapping) or isinstance(indications, str | bytes):
        raise ParameterTypeError(
            f"`{name}` must be a list of indication records (dicts), got one {type(indications).__name__}"
        )
    out = []
    for k, rec in enumerate(indications):
        if not isinstance(rec, Mapping):
            raise ParameterTypeError(
                f"`{name}[{k}]` must be an indication record (a dict from size_indications), got {type(rec).__name__}"
            )
        for key in ("id", "kind", "scan_mm", "index_mm"):
            if key not in rec:
                raise ParameterError(f"`{name}[{k}]` has no `{key}`; pass records from ndtmap.size_indications")
        out.append(rec)
    return out


# --------------------------------------------------------------------------- outlines


def _region_loops(region: np.ndarray) -> list[list[tuple[int, int]]]:
    """Closed boundary loops of a boolean region on a grid of cells, as vertex indices (i, j).

    Cell (i, j) spans the vertices i..i+1 (first axis) and j..j+1 (second
    axis). Outer boundaries run counter-clockwise and holes clockwise (the
    region is on the left), so the signed (shoelace) areas of the loops add
    up to the area of the region. Where two cells of the region touch only
    at a corner the walk turns right, so such cells share one loop.
    """
    ni, nj = region.shape
    pad = np.zeros((ni + 2, nj + 2), dtype=bool)
    pad[1:-1, 1:-1] = region
    out_edges: dict[tuple[int, int], list[tuple[int, int]]] = {}

    def add(a: tuple[int, int], b: tuple[int, int]) -> None:
        out_edges.setdefault(a, []).append(b)

    for i, j in zip(*np.nonzero(region), strict=True):
        i, j = int(i), int(j)
        p, q = i + 1, j + 1  # indices into pad
        if not pad[p, q - 1]:
            add((i, j), (i + 1, j))
        if not pad[p + 1, q]:
            add((i + 1, j), (i + 1, j + 1))
        if not pad[p, q + 1]:
            add((i + 1, j + 1), (i, j + 1))
        if not pad[p - 1, q]:
            add((i, j + 1), (i, j))
    loops: list[list[tuple[int, int]]] = []
    for start in sorted(out_edges):
        while out_edges.get(start):
            loop = [start]
            prev = start
            cur = out_edges[start].pop(0)
            while cur != start:
                loop.append(cur)
                choices = out_edges.get(cur, [])
                if len(choices) == 1:
                    nxt = choices.pop()
                else:
                    d_in = (cur[0] - prev[0], cur[1] - prev[1])
                    right = (d_in[1], -d_in[0])
                    nxt = next((c for c in choices if (c[0] - cur[0], c[1] - cur[1]) == right), choices[0])
                    choices.remove(nxt)
                prev, cur = cur, nxt
            loops.append(_drop_collinear(loop))
    return loops


def _drop_collinear(loop: list[tuple[int, int]]) -> list[tuple[int, int]]:
    n = len(loop)
    keep = []
    for k in range(n):
        a, b, c = loop[k - 1], loop[k], loop[(k + 1) % n]
        if (b[0] - a[0]) * (c[1] - b[1]) - (b[1] - a[1]) * (c[0] - b[0]) != 0:
            keep.append(b)
    return keep or loop


def indication_outline(region: np.ndarray, scan_mm: Any, index_mm: Any) -> list[np.ndarray]:
    """The outline of a region of map positions as closed polygons in mm.

    Each position stands for its midpoint (Voronoi) cell, as in
    :func:`ndtmap.indications.sizing.drop_area`, so the signed areas of the polygons
    (outer boundaries counter-clockwise, holes clockwise) add up to the
    region's area.

    Parameters
    ----------
    region : numpy.ndarray of bool, shape (n_scan, n_index)
        The positions.
    scan_mm, index_mm : array_like
        Positions of the map, mm (strictly increasing).

    Returns
    -------
    list of numpy.ndarray, each (n, 2)
        Vertices (scan_mm, index_mm) of each closed polygon (first vertex not
        repeated).

    Examples
    --------
    >>> import numpy as np
    >>> r = np.zeros((4, 4), bool); r[1:3, 1:3] = True
    >>> [p.tolist() for p in indication_outline(r, [0, 1, 2, 3], [0, 2, 4, 6])]
    [[[0.5, 1.0], [2.5, 1.0], [2.5, 5.0], [0.5, 5.0]]]
    """
    region = np.asarray(region, dtype=bool)
    s = np.asarray(scan_mm, dtype=np.float64)
    i = np.asarray(index_mm, dtype=np.float64)
    if region.ndim != 2 or region.shape != (s.size, i.size):
        raise ParameterError(
            f"`region` must have the shape (n_scan, n_index) = {(s.size, i.size)}, got {region.shape}"
        )
    xe, ye = _edges(s), _edges(i)
    return [np.array([(xe[a], ye[b]) for a, b in loop]) for loop in _region_loops(region)]


def _peak_cell(m: xr.DataArray, rec: Mapping[str, Any]) -> tuple[int, int]:
    scan, index = mg.coords_mm(m)
    out = []
    for axis, c, v in (("scan", scan, rec["scan_mm"]), ("index", index, rec["index_mm"])):
        v = float(v)
        k = int(np.argmin(np.abs(c - v)))
        tol = 0.5 * (float(mg.cell_widths(c)[k]) if c.size > 1 else 1.0)
        if abs(c[k] - v) > tol:
            raise ParameterError(
                f"indication #{rec['id']} lies at {axis} {v:g} mm, outside the map ({c[0]:g} to {c[-1]:g} mm); "
                "draw it on the map it was found on"
            )
        out.append(k)
    return out[0], out[1]


_LEVEL_DB = re.compile(r">=\s*([-+]?\d+(?:\.\d*)?(?:[eE][-+]?\d+)?)\s*dB")


def _loss_level_db(rec: Mapping[str, Any]) -> float | None:
    for key in ("detection_level", "sizing_method"):
        found = _LEVEL_DB.search(str(rec.get(key) or ""))
        if found:
            return float(found.group(1))
    return None


def _indication_region(m: xr.DataArray, rec: Mapping[str, Any]) -> tuple[np.ndarray | None, str, tuple[int, int]]:
    """The sizing region of a record on map `m` (None when the map is not the one it was sized on)."""
    pk = _peak_cell(m, rec)
    values = m.values
    units = m.attrs.get("units")
    kind = rec.get("kind")
    if kind == "amplitude" and units == "%FSH":
        peak = float(values[pk])
        if not (math.isfinite(peak) and peak > 0):
            return None, "", pk
        level = peak * drop_factor(6.0)
        what = "-6 dB"
    elif kind == "backwall_loss" and units == "dB":
        level_db = _loss_level_db(rec)
        if level_db is None:
            return None, "", pk
        level = level_db
        what = f"loss >= {level_db:g} dB"
    else:
        return None, "", pk
    with np.errstate(invalid="ignore"):
        mask = np.isfinite(values) & (values >= level)
    region = mg.connected_to(mask, pk)
    return (region if region.any() else None), what, pk


def _as_indication(m: xr.DataArray, rec: Mapping[str, Any], region: np.ndarray, pk: tuple[int, int]) -> Indication:
    """An Indication standing for a record (for re-measuring its drop lengths on the same map)."""
    return Indication(
        id=int(rec["id"]), kind=str(rec.get("kind", "amplitude")), peak_fsh=rec.get("peak_fsh"),
        peak_db=rec.get("peak_db"), reference_fsh=rec.get("reference_fsh"),
        backwall_loss_db=rec.get("backwall_loss_db"), scan_mm=float(rec["scan_mm"]),
        index_mm=float(rec["index_mm"]), peak_position=pk, depth_mm=rec.get("depth_mm"),
        depth_min_mm=rec.get("depth_min_mm"), depth_max_mm=rec.get("depth_max_mm"),
        scan_min_mm=float(rec.get("scan_min_mm", rec["scan_mm"])),
        scan_max_mm=float(rec.get("scan_max_mm", rec["scan_mm"])),
        index_min_mm=float(rec.get("index_min_mm", rec["index_mm"])),
        index_max_mm=float(rec.get("index_max_mm", rec["index_mm"])), n_positions=int(region.sum()),
        area_mm2=rec.get("area_mm2"), detection_level=str(rec.get("detection_level", "")),
        touches_edge=mg.touches_edge(region), missing_adjacent=0, region=region,
    )


def _drop_ends(m: xr.DataArray, rec: Mapping[str, Any], axis: str, edge: str) -> tuple[float, float] | None:
    """Ends (mm along `axis`) of the record's 6 dB drop length (or loss-level length) on map `m`."""
    try:
        region, _, pk = _indication_region(m, rec)
        if region is None:
            return None
        ind = _as_indication(m, rec, region, pk)
        if rec.get("kind") == "backwall_loss":
            r = level_length(m, ind, level_fsh=_loss_level_db(rec), axis=axis, edge=edge)
        else:
            r = drop_length(m, ind, drop_db=6.0, axis=axis, edge=edge)
    except (SizingError, ParameterError):
        return None
    if r.start_mm is None or r.end_mm is None:
        return None
    k = 0 if axis == "scan" else 1
    return float(r.start_mm[k]), float(r.end_mm[k])


def _size_label(rec: Mapping[str, Any]) -> str:
    return f"#{rec['id']} {_fmt(rec.get('length_scan_mm'))} x {_fmt(rec.get('length_index_mm'))} mm"


def _hover(rec: Mapping[str, Any]) -> str:
    lines = [f"<b>indication #{rec['id']}</b> ({_text(rec.get('kind'))})",
             f"peak at scan {_fmt(rec['scan_mm'])} mm, index {_fmt(rec['index_mm'])} mm"]
    if rec.get("depth_mm") is not None:
        lines.append(f"depth {_fmt(rec.get('depth_mm'))} mm")
    if rec.get("peak_fsh") is not None:
        lines.append(f"peak {_fmt(rec.get('peak_fsh'))} %FSH")
    if rec.get("backwall_loss_db") is not None or rec.get("total_backwall_loss"):
        lines.append("back-wall loss " + ("total" if rec.get("total_backwall_loss") else
                                         f"{_fmt(rec.get('backwall_loss_db'))} dB"))
    lines.append(
        f"length scan {_fmt(rec.get('length_scan_mm'))} ± {_fmt(rec.get('length_scan_uncertainty_mm'))} mm, "
        f"index {_fmt(rec.get('length_index_mm'))} ± {_fmt(rec.get('length_index_uncertainty_mm'))} mm"
    )
    if rec.get("area_mm2") is not None:
        lines.append(f"area {_fmt(rec.get('area_mm2'), '.0f')} ± {_fmt(rec.get('area_uncertainty_mm2'), '.0f')} mm²")
    if rec.get("ers_mm") is not None:
        lines.append(f"ERS {_fmt(rec.get('ers_mm'), '.2f')} mm ({_text(rec.get('ers_method'))})")
    flags = list(rec.get("flags") or [])
    lines.append("flags: " + (_text(", ".join(flags)) if flags else "none"))
    if rec.get("screening"):
        lines.append("screening: " + _text(rec["screening"]))
    return "<br>".join(lines)


# --------------------------------------------------------------------------- maps


def _axis_title(da: xr.DataArray, dim: str, default: str) -> str:
    if dim in da.coords:
        c = da.coords[dim]
        name = c.attrs.get("long_name") or default
        units = c.attrs.get("units", "mm")
        return f"{_text(name)} [{_text(units)}]"
    return f"{default} [mm]"


def _heatmap_map(fig: Any, m: xr.DataArray, src: xr.DataArray) -> None:
    import plotly.graph_objects as go

    units = src.attrs.get("units")
    scan, index = mg.coords_mm(m)
    z = m.values.T  # rows: index (y), columns: scan (x)
    finite = z[np.isfinite(z)]
    kw: dict[str, Any] = {}
    if units == "dB":
        top = float(np.max(np.abs(finite))) if finite.size else 1.0
        kw.update(zmid=0.0, zmin=-top, zmax=top)
    elif units == "%FSH":
        kw.update(zmin=0.0)
    name = src.attrs.get("long_name") or src.name or "value"
    u = f" {_text(units)}" if units else ""
    fig.add_trace(
        go.Heatmap(
            x=scan, y=index, z=z, colorscale=color_scale_for(units), **kw,
            colorbar=dict(title=dict(text=_text(label_from_attrs(src, "value")), side="right")),
            hovertemplate=(f"scan %{{x:.2f}} mm<br>index %{{y:.2f}} mm<br>{_text(name)}: %{{z:.2f}}{u}"
                           "<extra></extra>"),
            name=_text(name), showscale=True, hoverongaps=False,
        )
    )


def _plan_axes(fig: Any, m: xr.DataArray, src: xr.DataArray) -> tuple[np.ndarray, np.ndarray]:
    scan, index = mg.coords_mm(m)
    xe, ye = _edges(scan), _edges(index)
    fig.update_xaxes(title_text=_axis_title(src, "scan", "scan axis position"), range=[xe[0], xe[-1]],
                     constrain="domain", showgrid=False)
    fig.update_yaxes(title_text=_axis_title(src, "index", "index axis position"), range=[ye[0], ye[-1]],
                     scaleanchor="x", scaleratio=1.0, constrain="domain", showgrid=False)
    fig.update_layout(plot_bgcolor=MISSING_COLOR)
    return xe, ye


def _missing_legend(fig: Any) -> None:
    import plotly.graph_objects as go

    fig.add_trace(go.Scatter(x=[None], y=[None], mode="markers", name="no data",
                             marker=dict(symbol="square", size=11, color=MISSING_COLOR,
                                         line=dict(color=_AXIS, width=1)), hoverinfo="skip"))


def _scale_bar(fig: Any, xe: np.ndarray) -> None:
    length = nice_length(xe[-1] - xe[0])
    x1 = float(xe[-1])
    x0 = x1 - length
    fig.add_shape(type="line", xref="x", yref="paper", x0=x0, x1=x1, y0=1.035, y1=1.035,
                  line=dict(color=_INK, width=4))
    for x in (x0, x1):
        fig.add_shape(type="line", xref="x", yref="paper", x0=x, x1=x, y0=1.02, y1=1.05,
                      line=dict(color=_INK, width=1.5))
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
        map it was sized on: an amplitude indication at its -6 dB region
        (8-connected to the peak, amplitude >= half the peak) and a
        back-wall-loss indication at its loss region (loss >= the detection
        level), both computed from `outline_map`; records of the other kind
        are marked at their peak only. Dashed outlines mark flagged
        indications (flags listed in the label and the hover text).
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
    om = m if outline_map is None else mg.as_map("outline_map", outline_map)
    if outline_map is not None:
        mg.check_same_grid("outline_map", om, "map_da", m)
        om.attrs = dict(outline_map.attrs)
    else:
        om.attrs = dict(map_da.attrs)
    recs = _records("indications", indications)
    fig = go.Figure()
    _heatmap_map(fig, m, map_da)
    xe, ye = _plan_axes(fig, m, map_da)
    if np.isnan(m.values).any():
        _missing_legend(fig)
    color = _OUTLINE_LINE
    scan, index = mg.coords_mm(m)
    shown: set[str] = set()
    labels: list[tuple[list[str], tuple[float, float, float, float]]] = []
    for rec in recs:
        region, what, pk = _indication_region(om, rec)
        flags = list(rec.get("flags") or [])
        flagged = bool(flags)
        hover = _hover(rec)
        if region is not None:
            polys = indication_outline(region, scan, index)
            xs: list[float | None] = []
            ys: list[float | None] = []
            for p in polys:
                xs += [*p[:, 0].tolist(), float(p[0, 0]), None]
                ys += [*p[:, 1].tolist(), float(p[0, 1]), None]
            legend = f"{what} outline" + (", flagged (dashed)" if flagged else "")
            # a white halo under the line keeps the outline readable on every colour of the scale
            fig.add_trace(go.Scatter(
                x=xs, y=ys, mode="lines", line=dict(color="white", width=4.5), name=legend + " (halo)",
                legendgroup=legend, showlegend=False, hoverinfo="skip", connectgaps=False, opacity=0.85,
            ))
            fig.add_trace(go.Scatter(
                x=xs, y=ys, mode="lines", line=dict(color=color, width=2, dash="dash" if flagged else "solid"),
                name=legend, legendgroup=legend, showlegend=legend not in shown, hoverinfo="text",
                text=hover, hoveron="points", connectgaps=False,
            ))
            shown.add(legend)
            allp = np.vstack(polys)
            box = (float(allp[:, 0].min()), float(allp[:, 0].max()), float(allp[:, 1].min()), float(allp[:, 1].max()))
        else:
            box = (float(scan[pk[0]]),) * 2 + (float(index[pk[1]]),) * 2
        name = "indication peak"
        fig.add_trace(go.Scatter(
            x=[float(scan[pk[0]])], y=[float(index[pk[1]])], mode="markers",
            marker=dict(symbol="x-thin", size=9, color=color, line=dict(width=2, color=color)),
            name=name, legendgroup=name, showlegend=name not in shown, hovertemplate=hover + "<extra></extra>",
        ))
        shown.add(name)
        if show_ids:
            lines = [_size_label(rec)] + ([_text(", ".join(flags))] if flagged else [])
            labels.append((lines, box))
    for lines, (x, y, ax, ay) in zip((lab[0] for lab in labels), _place_labels(labels, xe, ye), strict=True):
        text = lines[0] + "".join(f"<br><span style='font-size:9px'>{t}</span>" for t in lines[1:])
        fig.add_annotation(x=x, y=y, xref="x", yref="y", text=text, xanchor=ax, yanchor=ay, align="left",
                           bgcolor="rgba(255,255,255,0.8)", borderpad=1, font=dict(size=10, color=_INK))
    if scale_bar:
        _scale_bar(fig, xe)
    fig.update_layout(legend=dict(orientation="h", x=0.0, xanchor="left", y=-0.12, yanchor="top"))
    return _finish(fig, "map", title)


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
        return _finish(fig, "thickness", title)
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
        marker=dict(symbol="triangle-down-open", size=14, color="#D55E00", line=dict(width=2.5)),
        hovertemplate=text + "<extra></extra>",
    ))
    annotations = list(fig.layout.annotations)
    fig.layout.annotations = []
    xe, ye = _edges(scan), _edges(index)
    right = scan[i] > 0.5 * (xe[0] + xe[-1])
    upper = index[j] > 0.5 * (ye[0] + ye[-1])
    fig.add_annotation(x=float(scan[i]), y=float(index[j]), xref="x", yref="y", text=text, showarrow=True,
                       arrowhead=2, arrowwidth=1.5, arrowcolor=_INK, ax=-50 if right else 50, ay=40 if upper else -40,
                       align="left", bgcolor="rgba(255,255,255,0.9)", bordercolor=_AXIS, borderwidth=1,
                       xanchor="right" if right else "left")
    for a in annotations:
        fig.add_annotation(a)
    return _finish(fig, "thickness", title)


# --------------------------------------------------------------------------- sections


def section_figure(
    section_da: xr.DataArray,
    *,
    indications: Sequence[Mapping[str, Any]] | None = None,
    cursor_mm: float | None = None,
    title: str | None = None,
    amplitude_map: xr.DataArray | None = None,
    edge: str = "first",
    equal_aspect: bool = False,
) -> Any:
    """A B-scan, D-scan, polyline or true-geometry section on a depth axis (depth increasing downwards).

    Parameters
    ----------
    section_da : xarray.DataArray
        From :mod:`ndtmap.scans.sections`: ``(scan, time)`` (B-scan), ``(index,
        time)`` (D-scan) or ``(distance, time)`` (polyline) with a ``depth``
        coordinate along ``time``, or ``(depth, x)`` (true geometry).
    indications : list of dict, optional
        Records from :func:`ndtmap.size_indications`; amplitude indications
        whose detected extent the section crosses are marked at their peak
        position and depth, with a bracket over their 6 dB drop length along
        the section when `amplitude_map` is given.
    cursor_mm : float, optional
        A position along the section to mark (e.g. where an A-scan is shown).
    title : str, optional
    amplitude_map : xarray.DataArray, optional
        The amplitude map the indications were sized on (for the brackets).
    edge : {'first', 'outermost'}, default 'first'
        The walking rule the lengths were measured with.
    equal_aspect : bool, default False
        Draw mm at the same scale on both axes.

    Returns
    -------
    plotly.graph_objects.Figure

    Examples
    --------
    >>> from ndtmap.grid.examples import example_grid
    >>> from ndtmap.scans.sections import b_scan
    >>> fig = section_figure(b_scan(example_grid(), 0.0))
    >>> fig.layout.yaxis.autorange, fig.layout.yaxis.title.text
    ('reversed', 'depth below the scanning surface [mm]')
    """
    import plotly.graph_objects as go

    if not isinstance(section_da, xr.DataArray):
        raise ParameterTypeError(f"`section_da` must be an xarray.DataArray, got {type(section_da).__name__}")
    recs = _records("indications", indications)
    if section_da.ndim != 2:
        raise ParameterError(f"`section_da` must be 2-D, has dims {section_da.dims}")
    if set(section_da.dims) == {"depth", "x"}:
        sec = section_da.transpose("depth", "x")
        x = np.asarray(sec["x"].values, dtype=np.float64)
        depth = np.asarray(sec["depth"].values, dtype=np.float64)
        z = np.asarray(sec.values, dtype=np.float64)
        pos_dim = "x"
    else:
        pos = [d for d in section_da.dims if d != "time"]
        if "time" not in section_da.dims or pos[0] not in ("scan", "index", "distance"):
            raise ParameterError(
                f"`section_da` must have dims (scan|index|distance, time) or (depth, x), has {section_da.dims}"
            )
        if "depth" not in section_da.coords:
            raise ParameterError("`section_da` has no `depth` coordinate along time; make it with b_scan or d_scan")
        pos_dim = pos[0]
        sec = section_da.transpose(pos_dim, "time")
        x = np.asarray(sec[pos_dim].values, dtype=np.float64)
        depth = np.asarray(sec["depth"].values, dtype=np.float64)
        z = np.asarray(sec.values, dtype=np.float64).T  # rows: depth
    units = section_da.attrs.get("units", "%FSH")
    fig = go.Figure()
    kw = {"zmin": 0.0} if units == "%FSH" and np.nanmin(z) >= 0 else {}
    fig.add_trace(go.Heatmap(
        x=x, y=depth, z=z, colorscale=color_scale_for(units), **kw,
        colorbar=dict(title=dict(text=_text(label_from_attrs(section_da, "amplitude")), side="right")),
        hovertemplate=f"%{{x:.2f}} mm<br>depth %{{y:.2f}} mm<br>%{{z:.1f}} {_text(units)}<extra></extra>",
        name="section", hoverongaps=False,
    ))
    depth_title = "depth below the scanning surface [mm]"
    if "depth" in section_da.coords and section_da["depth"].attrs.get("long_name"):
        depth_title = f"{_text(section_da['depth'].attrs['long_name'])} [mm]"
    defaults = {"scan": "scan axis position", "index": "index axis position", "distance": "distance along the line",
                "x": "surface position"}
    fig.update_xaxes(title_text=_axis_title(section_da, pos_dim, defaults[pos_dim]),
                     range=[_edges(x)[0], _edges(x)[-1]], showgrid=False)
    yaxis: dict[str, Any] = dict(title_text=depth_title, autorange="reversed", showgrid=False)
    if equal_aspect:
        yaxis.update(scaleanchor="x", scaleratio=1.0)
    fig.update_yaxes(**yaxis)
    fig.update_layout(plot_bgcolor=MISSING_COLOR)
    span = float(depth[-1] - depth[0]) if depth.size > 1 else 1.0
    at_other = {"scan": section_da.attrs.get("index_mm_used"), "index": section_da.attrs.get("scan_mm_used")}
    amp = mg.as_map("amplitude_map", amplitude_map) if amplitude_map is not None else None
    if amp is not None:
        amp.attrs = dict(amplitude_map.attrs)
    shown = False
    for rec in recs:
        if rec.get("kind") != "amplitude" or rec.get("depth_mm") is None:
            continue
        zpk = float(rec["depth_mm"])
        ends = None
        if pos_dim in ("scan", "index"):
            other = "index" if pos_dim == "scan" else "scan"
            fixed = at_other[pos_dim]
            if fixed is None and other in section_da.coords and section_da[other].ndim == 0:
                fixed = float(section_da[other].values)
            lo, hi = rec.get(f"{other}_min_mm"), rec.get(f"{other}_max_mm")
            if fixed is None or lo is None or hi is None or not (float(lo) - 1e-9 <= float(fixed) <= float(hi) + 1e-9):
                continue
            xpk = float(rec[f"{pos_dim}_mm"])
            if amp is not None:
                ends = _drop_ends(amp, rec, pos_dim, edge)
        elif pos_dim == "distance":
            ss = np.asarray(section_da["scan"].values, dtype=np.float64)
            ii = np.asarray(section_da["index"].values, dtype=np.float64)
            dist = np.hypot(ss - float(rec["scan_mm"]), ii - float(rec["index_mm"]))
            k = int(np.argmin(dist))
            step = float(np.median(np.diff(x))) if x.size > 1 else 1.0
            if dist[k] > max(step, 1e-9):
                continue
            xpk = float(x[k])
        else:
            continue
        hover = _hover(rec)
        fig.add_trace(go.Scatter(
            x=[xpk], y=[zpk], mode="markers", name="indication peak", legendgroup="ind", showlegend=not shown,
            marker=dict(symbol="x-thin", size=10, color=_OUTLINE, line=dict(width=2.5, color=_OUTLINE)),
            hovertemplate=hover + "<extra></extra>",
        ))
        shown = True
        label = f"#{rec['id']}"
        top = zpk - 0.04 * span
        if ends is not None:
            a, b = ends
            h1, h2 = zpk - 0.02 * span, zpk - 0.05 * span
            fig.add_trace(go.Scatter(
                x=[a, a, b, b], y=[h1, h2, h2, h1], mode="lines", line=dict(color=_OUTLINE, width=2),
                name="6 dB drop length", legendgroup="bracket",
                showlegend=not any(t.name == "6 dB drop length" for t in fig.data), hoverinfo="skip",
            ))
            length = rec.get(f"length_{pos_dim}_mm")
            label += f" 6 dB {_fmt(length)} mm"
            top = h2
            xlab = 0.5 * (a + b)
        else:
            xlab = xpk
        fig.add_annotation(x=xlab, y=top, xref="x", yref="y", text=label, yanchor="bottom",
                           bgcolor="rgba(255,255,255,0.8)", font=dict(size=10))
    if cursor_mm is not None:
        c = float(cursor_mm)
        fig.add_shape(type="line", xref="x", yref="paper", x0=c, x1=c, y0=0, y1=1,
                      line=dict(color=ACCENTS[1], width=1.5, dash="dot"))
        fig.add_annotation(x=c, y=1.0, xref="x", yref="paper", yanchor="bottom", text=f"A-scan at {c:.1f} mm",
                           font=dict(size=10, color=_INK))
    fig.update_layout(legend=dict(orientation="h", x=0.0, xanchor="left", y=-0.14, yanchor="top"))
    return _finish(fig, "section", title)


# --------------------------------------------------------------------------- A-scans


def ascan_at(grid: xr.Dataset, scan_mm: float, index_mm: float, *, detect: str = "rectified") -> xr.DataArray:
    """The A-scan nearest to a position, as the detection signal with a ``depth`` coordinate.

    Parameters
    ----------
    grid : xarray.Dataset
        A scan grid.
    scan_mm, index_mm : float
        Position, mm (the nearest recorded A-scan is taken).
    detect : {'rectified', 'envelope', 'none'}, default 'rectified'

    Returns
    -------
    xarray.DataArray (time,)
        %FSH, coordinates ``time`` (us), ``depth`` (mm), scalar ``scan`` and
        ``index``; attrs: the grid's attributes.

    Examples
    --------
    >>> from ndtmap.grid.examples import example_grid
    >>> a = ascan_at(example_grid(), 0.2, 0.0)
    >>> a.dims, float(a.scan), a.attrs["units"]
    (('time',), 0.0, '%FSH')
    """
    from ndtmap._shared.validate import finite_float
    from ndtmap.grid.geometry import depth_axis
    from ndtmap.grid.schema import check_grid
    from ndtmap.signal import detected_signal

    grid = check_grid(grid)
    s = finite_float("scan_mm", scan_mm)
    i = finite_float("index_mm", index_mm)
    sig = detected_signal(grid, detect).sel(scan=s, index=i, method="nearest")
    out = sig.assign_coords(depth=depth_axis(grid)).compute()
    attrs = {k: v for k, v in grid.attrs.items() if k not in ("truth",)}
    attrs.update(units="%FSH", long_name=f"A-scan amplitude ({detect})", detect=detect)
    out.attrs = attrs
    return out.rename("amplitude_fsh")


def _scalar(ds: Any, name: str, at: Mapping[str, float]) -> Any:
    if ds is None or name not in getattr(ds, "variables", {}):
        return None
    v = ds[name]
    sel = {d: at[d] for d in v.dims if d in at}
    if sel:
        v = v.sel(sel, method="nearest")
    v = v.squeeze()
    if v.ndim != 0:
        raise ParameterError(f"gate result `{name}` must hold one value at the A-scan's position, has dims {v.dims}")
    return v.values.item()


def ascan_figure(
    ascan_da: xr.DataArray,
    gates: Iterable[Gate] | Mapping[str, Gate],
    *,
    gate_results: Mapping[str, xr.Dataset] | None = None,
    depth_axis: bool = True,
    title: str | None = None,
) -> Any:
    """An A-scan with its gates (window and threshold as a bar, in each gate's colour) and gate events.

    Parameters
    ----------
    ascan_da : xarray.DataArray (time,)
        One A-scan in %FSH (see :func:`ascan_at`); for a depth axis it needs a
        ``depth`` coordinate along ``time``.
    gates : sequence or mapping of Gate
        The gates to draw.
    gate_results : mapping of str to xarray.Dataset, optional
        Results of :func:`ndtmap.gates.evaluate.evaluate_gates` (for the whole grid or
        this position): they give the window of following gates at this
        A-scan and the events (marked with their amplitude). Without them
        only gates with a fixed window are drawn, without events.
    depth_axis : bool, default True
        Depth (mm) along the horizontal axis; False for time (us).
    title : str, optional

    Returns
    -------
    plotly.graph_objects.Figure

    Examples
    --------
    >>> from ndtmap.grid.examples import example_grid
    >>> fig = ascan_figure(ascan_at(example_grid((4.0,)), 0.0, 0.0), [Gate("bw", 10.0, 14.0, threshold_fsh=30)])
    >>> [t.name for t in fig.data][:2]
    ['A-scan', 'bw: 10-14 mm, 30 %FSH']
    """
    import plotly.graph_objects as go

    if not isinstance(ascan_da, xr.DataArray) or ascan_da.dims != ("time",):
        raise ParameterError("`ascan_da` must be one A-scan, an xarray.DataArray on the dim ('time',)")
    if isinstance(gates, Gate):
        gates = [gates]
    gate_list = list(gates.values()) if isinstance(gates, Mapping) else list(gates)
    for k, g in enumerate(gate_list):
        if not isinstance(g, Gate):
            raise ParameterTypeError(f"`gates[{k}]` must be a Gate, got {type(g).__name__}")
    t = np.asarray(ascan_da["time"].values, dtype=np.float64)
    if depth_axis:
        if "depth" in ascan_da.coords:
            d = np.asarray(ascan_da["depth"].values, dtype=np.float64)
        else:
            c = mg.map_attr(ascan_da.attrs, "velocity_m_s")
            if c is None:
                raise ParameterError("`ascan_da` has no `depth` coordinate or `velocity_m_s`; use depth_axis=False")
            theta = math.radians(mg.map_attr(ascan_da.attrs, "beam_angle_deg", 0.0) or 0.0)
            zero = mg.map_attr(ascan_da.attrs, "zero_offset_us", 0.0) or 0.0
            d = c * 1e-3 / 2.0 * (t - zero) * math.cos(theta)
        x = d
    else:
        x = t
    to_x = (lambda us: float(np.interp(us, t, x))) if depth_axis else (lambda us: float(us))
    y = np.asarray(ascan_da.values, dtype=np.float64)
    at = {k: float(ascan_da[k].values) for k in ("scan", "index") if k in ascan_da.coords and ascan_da[k].ndim == 0}
    fig = go.Figure()
    fig.add_trace(go.Scatter(x=x, y=y, mode="lines", name="A-scan", line=dict(color=_INK, width=1.2),
                             hovertemplate=("%{x:.2f} " + ("mm" if depth_axis else "us") +
                                            "<br>%{y:.1f} %FSH<extra></extra>")))
    finite = y[np.isfinite(y)]
    top = max(100.0, float(finite.max()) if finite.size else 100.0)
    bipolar = bool(finite.size and finite.min() < 0)
    for k, g in enumerate(gate_list):
        color = _OVERLAY[k % len(_OVERLAY)]
        res = None if gate_results is None else gate_results.get(g.name)
        window_us: tuple[float, float] | None = None
        if res is not None and "window_start_us" in res.variables:
            w0, w1 = _scalar(res, "window_start_us", at), _scalar(res, "window_end_us", at)
            if w0 is not None and w1 is not None and math.isfinite(w0) and math.isfinite(w1):
                window_us = (float(w0), float(w1))
        elif res is not None and res.attrs.get("gate_window_us") is not None:
            w = list(np.asarray(res.attrs["gate_window_us"], dtype=np.float64).reshape(-1))
            window_us = (float(w[0]), float(w[1]))
        elif g.follows is None and g.unit == "us":
            window_us = (float(g.start), float(g.end))
        if window_us is not None:
            x0, x1 = to_x(window_us[0]), to_x(window_us[1])
        elif g.follows is None and g.unit == "mm" and depth_axis:
            x0, x1 = float(g.start), float(g.end)
        elif g.follows is None and g.unit == "mm":
            x0 = float(np.interp(g.start, np.asarray(ascan_da["depth"].values), t)) if "depth" in ascan_da.coords \
                else None
            x1 = float(np.interp(g.end, np.asarray(ascan_da["depth"].values), t)) if "depth" in ascan_da.coords \
                else None
        else:
            x0 = x1 = None
        label = f"{_text(g.name)}: {g.start:g}-{g.end:g} {g.unit}, {g.threshold_fsh:g} %FSH"
        if g.follows is not None:
            label += f" (follows {_text(g.follows)})"
        if x0 is None or x1 is None:
            fig.add_trace(go.Scatter(x=[None], y=[None], mode="lines", line=dict(color=color, width=4),
                                     name=label + ": window not known here", hoverinfo="skip"))
            continue
        thr = float(g.threshold_fsh)
        fig.add_vrect(x0=x0, x1=x1, fillcolor=color, opacity=0.08, line_width=0, layer="below")
        bar_x = [x0, x0, None, x0, x1, None, x1, x1]
        tick = 0.03 * top
        bar_y = [thr - tick, thr + tick, None, thr, thr, None, thr - tick, thr + tick]
        fig.add_trace(go.Scatter(x=bar_x, y=bar_y, mode="lines", line=dict(color=color, width=3), name=label,
                                 legendgroup=g.name, hoverinfo="skip"))
        if bipolar:
            fig.add_trace(go.Scatter(x=[x0, x1], y=[-thr, -thr], mode="lines", name=label + " (negative)",
                                     line=dict(color=color, width=1.5, dash="dot"), legendgroup=g.name,
                                     showlegend=False, hoverinfo="skip"))
        fig.add_annotation(x=x0, y=thr + tick, xref="x", yref="y", text=f"<b>{_text(g.name)}</b>", xanchor="left",
                           yanchor="bottom", font=dict(size=11, color=color))
        if res is not None:
            trig = _scalar(res, "triggered", at)
            amp = _scalar(res, "amplitude_fsh", at)
            ev_t = _scalar(res, "time_us", at)
            ev_d = _scalar(res, "depth_mm", at)
            if trig and ev_t is not None and math.isfinite(ev_t):
                ex = to_x(ev_t)
                text = (f"{_text(g.name)} event: {_fmt(amp)} %FSH at "
                        + (f"{_fmt(ev_d, '.2f')} mm depth" if ev_d is not None else "") + f", {ev_t:.3f} us")
                fig.add_trace(go.Scatter(
                    x=[ex], y=[amp], mode="markers", name=f"{_text(g.name)} event",
                    marker=dict(symbol="diamond", size=10, color=color, line=dict(color=_INK, width=1)),
                    legendgroup=g.name, showlegend=False, hovertemplate=text + "<extra></extra>",
                ))
                fig.add_annotation(x=ex, y=amp, xref="x", yref="y", text=f"{_fmt(amp)} %FSH",
                                   xanchor="left", yanchor="bottom", xshift=6, font=dict(size=10, color=_INK))
            else:
                fig.add_annotation(x=0.5 * (x0 + x1), y=thr - tick, xref="x", yref="y", yanchor="top",
                                   text=f"{_text(g.name)}: no echo above the threshold",
                                   font=dict(size=10, color=color))
    fig.update_xaxes(title_text=("depth below the scanning surface [mm]" if depth_axis
                                 else "time from pulse entry [us]"), range=[float(x[0]), float(x[-1])])
    ylo = -1.05 * top if bipolar else 0.0
    fig.update_yaxes(title_text=f"{_text(ascan_da.attrs.get('long_name', 'A-scan amplitude'))} [%FSH]",
                     range=[ylo, 1.08 * top])
    fig.update_layout(legend=dict(orientation="h", x=0.0, xanchor="left", y=-0.18, yanchor="top"))
    return _finish(fig, "ascan", title)


# --------------------------------------------------------------------------- DGS


def _interp_log(z: np.ndarray, curve: np.ndarray, q: float) -> float:
    ok = np.isfinite(curve)
    return float(np.interp(math.log(q), np.log(z[ok]), curve[ok]))


def dgs_points(
    records: Sequence[Mapping[str, Any]],
    diagram_ds: xr.Dataset,
    *,
    backwall_sound_path_mm: float,
    beam_angle_deg: float = 0.0,
) -> list[tuple[float, float, str]]:
    """Where indications lie on a DGS diagram: (sound path mm, echo dB, label) for each with an ERS.

    The echo level is the back-wall echo of the diagram at
    `backwall_sound_path_mm` (piston-model or far-field curve, as the
    record's ``ers_method``) plus the record's corrected echo ratio
    ``ers_ratio_db``; an indication then lies on the FBH curve of its
    equivalent size.

    Parameters
    ----------
    records : list of dict
        From :func:`ndtmap.size_indications` (records without ``ers_mm`` are
        left out).
    diagram_ds : xarray.Dataset
        From :func:`ndtmap.indications.dgs.dgs_diagram` (made without attenuation, the
        ratios are corrected for it).
    backwall_sound_path_mm : float
        Sound path of the back-wall reference, mm.
    beam_angle_deg : float, default 0
        To turn the depth of a record into a sound path.

    Returns
    -------
    list of (float, float, str)
    """
    zb = float(backwall_sound_path_mm)
    if not (math.isfinite(zb) and zb > 0):
        raise ParameterError(f"`backwall_sound_path_mm` must be > 0 mm, got {backwall_sound_path_mm!r}")
    z = np.asarray(diagram_ds["distance_mm"].values, dtype=np.float64)
    cos = math.cos(math.radians(float(beam_angle_deg)))
    out = []
    for rec in _records("records", records):
        if rec.get("ers_mm") is None or rec.get("ers_ratio_db") is None or rec.get("depth_mm") is None:
            continue
        var = "backwall_echo_far_field_db" if rec.get("ers_method") == "far-field" else "backwall_echo_db"
        level = _interp_log(z, np.asarray(diagram_ds[var].values, dtype=np.float64), zb) + float(rec["ers_ratio_db"])
        out.append((float(rec["depth_mm"]) / cos, float(level), f"#{rec['id']} ERS {float(rec['ers_mm']):.1f} mm"))
    return out


def dgs_figure(
    diagram_ds: xr.Dataset,
    *,
    points: Iterable[tuple[float, float, str]] | None = None,
    title: str | None = None,
    backwall_point: tuple[float, float] | None = None,
) -> Any:
    """A DGS diagram (back wall and FBH echo curves against sound path) with indications on it.

    Parameters
    ----------
    diagram_ds : xarray.Dataset
        From :func:`ndtmap.indications.dgs.dgs_diagram`: piston-model curves are drawn
        solid, far-field curves dotted; vertical lines mark one and three
        near-field lengths.
    points : iterable of (float, float, str), optional
        (sound path mm, echo level dB on the diagram's scale, label), e.g.
        from :func:`dgs_points`.
    title : str, optional
    backwall_point : (float, float), optional
        (sound path mm, dB) of the back-wall reference, marked.

    Returns
    -------
    plotly.graph_objects.Figure

    Examples
    --------
    >>> from ndtmap.indications.dgs import dgs_diagram
    >>> fig = dgs_figure(dgs_diagram(10, 5, 5920, [1, 2], n_points=50), points=[(100.0, -45.0, "#1")])
    >>> fig.layout.xaxis.type, [t.name for t in fig.data][:2]
    ('log', ['back wall', 'back wall, far field'])
    """
    import plotly.graph_objects as go

    if not isinstance(diagram_ds, xr.Dataset) or "fbh_echo_db" not in diagram_ds:
        raise ParameterTypeError("`diagram_ds` must be a dataset from ndtmap.indications.dgs.dgs_diagram")
    z = np.asarray(diagram_ds["distance_mm"].values, dtype=np.float64)
    n = float(diagram_ds.attrs["near_field_length_mm"])
    fig = go.Figure()
    fig.add_trace(go.Scatter(x=z, y=diagram_ds["backwall_echo_db"].values, mode="lines", name="back wall",
                             line=dict(color=_INK, width=2.5),
                             hovertemplate="back wall<br>%{x:.1f} mm, %{y:.1f} dB<extra></extra>"))
    fig.add_trace(go.Scatter(x=z, y=diagram_ds["backwall_echo_far_field_db"].values, mode="lines",
                             name="back wall, far field", line=dict(color=_INK, width=1, dash="dot"),
                             hoverinfo="skip"))
    sizes = np.asarray(diagram_ds["fbh_diameter_mm"].values, dtype=np.float64)
    for k, d in enumerate(sizes):
        color = _OVERLAY[k % len(_OVERLAY)]
        curve = diagram_ds["fbh_echo_db"].isel(fbh_diameter_mm=k).values
        far = diagram_ds["fbh_echo_far_field_db"].isel(fbh_diameter_mm=k).values
        fig.add_trace(go.Scatter(x=z, y=curve, mode="lines", name=f"FBH {d:g} mm", line=dict(color=color, width=2),
                                 hovertemplate=f"FBH {d:g} mm<br>%{{x:.1f}} mm, %{{y:.1f}} dB<extra></extra>"))
        fig.add_trace(go.Scatter(x=z, y=far, mode="lines", name=f"FBH {d:g} mm, far field", showlegend=False,
                                 line=dict(color=color, width=1, dash="dot"), hoverinfo="skip"))
        fig.add_annotation(x=math.log10(z[-1]), y=float(curve[-1]), xref="x", yref="y", text=f"{d:g} mm",
                           xanchor="left", xshift=4, font=dict(size=10, color=color))
    for mult, name in ((1.0, "N"), (3.0, "3 N")):
        zn = mult * n
        if z[0] <= zn <= z[-1]:
            fig.add_shape(type="line", xref="x", yref="paper", x0=zn, x1=zn, y0=0, y1=1,
                          line=dict(color=_AXIS, width=1, dash="dash"))
            fig.add_annotation(x=math.log10(zn), y=1.0, xref="x", yref="paper", yanchor="bottom",
                               text=f"{name} = {zn:.1f} mm", font=dict(size=10))
    if backwall_point is not None:
        bz, bl = backwall_point
        fig.add_trace(go.Scatter(x=[float(bz)], y=[float(bl)], mode="markers", name="back-wall reference",
                                 marker=dict(symbol="square-open", size=11, color=_INK, line=dict(width=2)),
                                 hovertemplate=f"back-wall reference<br>{float(bz):.1f} mm, {float(bl):.1f} dB"
                                 "<extra></extra>"))
    pts = list(points or [])
    if pts:
        px = [float(p[0]) for p in pts]
        py = [float(p[1]) for p in pts]
        labels = [_text(p[2]) for p in pts]
        short = [lab.split(" ")[0] for lab in labels]
        fig.add_trace(go.Scatter(x=px, y=py, mode="markers+text", name="indications", text=short,
                                 customdata=labels, textposition="bottom center", textfont=dict(size=10),
                                 marker=dict(symbol="circle", size=10, color=_OUTLINE, line=dict(color=_INK, width=1)),
                                 hovertemplate="%{customdata}<br>%{x:.1f} mm, %{y:.1f} dB<extra></extra>"))
    # the lower end: below the smallest hole's far-end echo, not down to the zeros of the near field
    far_end = np.asarray(diagram_ds["fbh_echo_db"].values, dtype=np.float64)[:, -1]
    lo = float(np.nanmin(far_end)) - 15.0 if np.isfinite(far_end).any() else -80.0
    if pts:
        lo = min(lo, min(py) - 10.0)
    ticks = [m * 10.0**e for e in range(-2, 5) for m in (1, 2, 5) if z[0] <= m * 10.0**e <= z[-1]]
    fig.update_xaxes(type="log", title_text="sound path [mm]", range=[math.log10(z[0]), math.log10(z[-1]) + 0.08],
                     tickvals=ticks, ticktext=[f"{t:g}" for t in ticks])
    fig.update_yaxes(title_text="echo re plane reflector at zero distance [dB]", range=[max(lo, -100.0), 3.0])
    fig.update_layout(legend=dict(x=0.01, xanchor="left", y=0.01, yanchor="bottom"))
    return _finish(fig, "dgs", title)
