"""Indication outlines on maps: the sized outline of each indication, one style everywhere.

The outline drawn is the one the indication was sized by: the sub-cell
contour of its sizing boundary (the -6 dB drop from the peak, the 6 dB drop
from the local maximum at each edge, or the back-wall-loss level) that the
record carries (:attr:`ndtmap.indications.IndicationRecord.outline_polygons`,
see :mod:`ndtmap.indications.outline`), so its extents, largest dimension
and enclosed area are the record's ``length_scan_mm``, ``length_index_mm``,
``length_mm`` and ``area_mm2``. A record without polygons is outlined by the
cells of its sized region (:func:`indication_outline`, each position standing
for its midpoint cell). The report's maps and the workbench's plan view draw the
same outlines in the same style: a black line over a white halo, dashed when
the indication is flagged.

:func:`indication_outlines` computes them from the map the indications were
sized on; :func:`outline_traces` draws one pair of traces per indication
(legend and hover per indication, for reports) and
:func:`merged_outline_traces` the same lines as a fixed set of three traces
(for a live figure whose traces are updated in place).
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import xarray as xr

from ndtmap._shared import mapgeom as mg
from ndtmap.errors import ParameterError
from ndtmap.indications import IndicationRecord
from ndtmap.plot._common import cell_edges, escape, fmt, typed_records
from ndtmap.plot._common import field as rec_field
from ndtmap.plot.style import OUTLINE_COLOR

__all__ = [
    "IndicationOutline",
    "indication_outline",
    "indication_outlines",
    "outline_traces",
    "merged_outline_traces",
    "OUTLINE_WIDTH",
    "HALO_WIDTH",
]

#: Width of an outline and of the white halo under it, px.
OUTLINE_WIDTH = 2.0
HALO_WIDTH = 4.5
_HALO_OPACITY = 0.85


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
    xe, ye = cell_edges(s), cell_edges(i)
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


def _sized_region(m: xr.DataArray, rec: IndicationRecord) -> tuple[np.ndarray | None, str, tuple[int, int]]:
    """The region the record was sized on, if `m` is a map of the kind it was sized on (else None).

    An amplitude indication is outlined on %FSH maps, a back-wall-loss
    indication on dB maps, both on the positions of the map they were found on.
    """
    pk = _peak_cell(m, rec)
    region = rec.sized_region
    wanted = "%FSH" if rec.kind == "amplitude" else "dB"
    if (region is None or m.attrs.get("units") != wanted or region.shape != m.shape
            or tuple(rec.peak_index) != pk or not region.any()):
        return None, "", pk
    if rec.kind == "amplitude":
        return region, str(rec.sizing_method or "-6 dB"), pk
    return region, f"loss >= {rec.sizing_level_db:g} dB", pk


def length_ends_mm(rec: IndicationRecord, axis: str) -> tuple[float, float] | None:
    """Positions (mm along `axis`, 'scan' or 'index') of the two ends of the record's measured length."""
    return rec.length_scan_ends_mm if axis == "scan" else rec.length_index_ends_mm


def _size_label(rec: Any) -> str:
    return f"#{rec['id']} {fmt(rec_field(rec, 'length_scan_mm'))} x {fmt(rec_field(rec, 'length_index_mm'))} mm"


def _hover(rec: Any) -> str:
    """Hover text of an indication record: position, depth, peak, lengths, area, ERS, flags, screening."""

    def get(key: str) -> Any:
        return rec_field(rec, key)

    lines = [f"<b>indication #{rec['id']}</b> ({escape(get('kind'))})",
             f"peak at scan {fmt(rec['scan_mm'])} mm, index {fmt(rec['index_mm'])} mm"]
    if get("depth_mm") is not None:
        lines.append(f"depth {fmt(get('depth_mm'))} mm")
    if get("peak_fsh") is not None:
        lines.append(f"peak {fmt(get('peak_fsh'))} %FSH")
    if get("backwall_loss_db") is not None or get("total_backwall_loss"):
        loss = "total" if get("total_backwall_loss") else f"{fmt(get('backwall_loss_db'))} dB"
        lines.append(f"back-wall loss {loss}")
    lines.append(
        f"length scan {fmt(get('length_scan_mm'))} ± {fmt(get('length_scan_uncertainty_mm'))} mm, "
        f"index {fmt(get('length_index_mm'))} ± {fmt(get('length_index_uncertainty_mm'))} mm"
    )
    if get("length_mm") is not None:
        lines.append(f"largest dimension {fmt(get('length_mm'))} mm at {fmt(get('length_orientation_deg'), '.0f')}° "
                     "from the scan axis")
    if get("area_mm2") is not None:
        lines.append(f"area {fmt(get('area_mm2'), '.0f')} ± {fmt(get('area_uncertainty_mm2'), '.0f')} mm²")
    if get("sizing_method") is not None:
        lines.append(f"sized by {escape(get('sizing_method'))}")
    if get("ers_mm") is not None:
        lines.append(f"ERS {fmt(get('ers_mm'), '.2f')} mm ({escape(get('ers_method'))})")
    flags = list(get("flags") or [])
    lines.append("flags: " + (escape(", ".join(flags)) if flags else "none"))
    if get("screening"):
        lines.append("screening: " + escape(get("screening")))
    return "<br>".join(lines)


@dataclass(frozen=True)
class IndicationOutline:
    """An indication as drawn on a map: its outline (exact cells), peak, label and hover text.

    Attributes
    ----------
    id : int
        The indication's id.
    kind : str
        ``'amplitude'`` or ``'backwall_loss'``.
    polygons : tuple of numpy.ndarray
        Closed polygons (n, 2) of (scan_mm, index_mm), first vertex not
        repeated: the record's sized outline (else the cells of its sized
        region, :func:`indication_outline`); empty when the map is not the
        one the indication was sized on (then it is marked at its peak only).
    peak_mm : (float, float)
        The peak position on the map's positions, mm.
    region : str
        What the outline encloses: the sizing method, e.g. ``'6 dB drop'``, or ``'loss >= 6 dB'``.
    flags : tuple of str
        The record's flags (flagged outlines are dashed).
    hover : str
        Hover text (HTML, escaped).
    label : str
        Short label: id and 6 dB lengths.
    """

    id: int
    kind: str
    polygons: tuple[np.ndarray, ...] = field(repr=False)
    peak_mm: tuple[float, float]
    region: str
    flags: tuple[str, ...]
    hover: str = field(repr=False)
    label: str

    @property
    def flagged(self) -> bool:
        return bool(self.flags)

    def box_mm(self) -> tuple[float, float, float, float]:
        """(scan min, scan max, index min, index max) of the outline (the peak without one), mm."""
        if not self.polygons:
            return (self.peak_mm[0], self.peak_mm[0], self.peak_mm[1], self.peak_mm[1])
        allp = np.vstack(self.polygons)
        return (float(allp[:, 0].min()), float(allp[:, 0].max()), float(allp[:, 1].min()), float(allp[:, 1].max()))


def indication_outlines(indications: Sequence[Mapping[str, Any]] | None, outline_map: xr.DataArray
                        ) -> list[IndicationOutline]:
    """The outlines of indications on the map they were sized on.

    Parameters
    ----------
    indications : list of IndicationRecord
        Records from :func:`ndtmap.size_indications` or ``run_procedure``; each
        carries the region it was sized on.
    outline_map : xarray.DataArray (scan, index)
        The map the indications were sized on: an amplitude map in %FSH for
        amplitude indications (outline: the -6 dB region), a back-wall-loss
        map in dB for back-wall-loss indications (outline: loss at least
        the detection level). Records of the other kind get no polygons.
        The polygons are the records' sized outlines.

    Returns
    -------
    list of IndicationOutline
        In the order of the records.

    Raises
    ------
    ParameterError
        When the map is not on (scan, index) or an indication lies outside it.

    Examples
    --------
    >>> import numpy as np, xarray as xr
    >>> from ndtmap.indications import size_indications
    >>> a = np.zeros((5, 5)); a[1:3, 1:4] = 80.0
    >>> m = xr.DataArray(a, dims=("scan", "index"), coords={"scan": np.arange(5.0), "index": np.arange(5.0)},
    ...                  attrs={"units": "%FSH"})
    >>> o = indication_outlines(size_indications(m, threshold_fsh=20), m)[0]
    >>> o.region, o.box_mm()  # the 6 dB crossings lie half-way between 80 and 0
    ('6 dB drop', (0.5, 2.5, 0.5, 3.5))
    """
    recs = typed_records("indications", indications)
    om = mg.as_map("outline_map", outline_map)
    om.attrs = dict(outline_map.attrs)
    scan, index = mg.coords_mm(om)
    out = []
    for rec in recs:
        region, what, pk = _sized_region(om, rec)
        polys: tuple[np.ndarray, ...] = ()
        if region is not None:
            polys = tuple(rec.outline_polygons) or tuple(indication_outline(region, scan, index))
        out.append(IndicationOutline(
            id=int(rec["id"]), kind=str(rec["kind"]), polygons=polys,
            peak_mm=(float(scan[pk[0]]), float(index[pk[1]])), region=what,
            flags=tuple(str(f) for f in (rec_field(rec, "flags") or ())), hover=_hover(rec), label=_size_label(rec),
        ))
    return out


def _polygon_xy(polygons: Iterable[np.ndarray]) -> tuple[list[float | None], list[float | None]]:
    """Vertices of closed polygons as one line with gaps (None) between them."""
    xs: list[float | None] = []
    ys: list[float | None] = []
    for p in polygons:
        xs += [*p[:, 0].tolist(), float(p[0, 0]), None]
        ys += [*p[:, 1].tolist(), float(p[0, 1]), None]
    return xs, ys


def _halo(xs: list[float | None], ys: list[float | None], name: str, legendgroup: str | None = None) -> Any:
    import plotly.graph_objects as go  # plotly is imported when a figure is made

    # a white halo under the line keeps the outline readable on every colour of the scale
    return go.Scatter(x=xs, y=ys, mode="lines", line=dict(color="white", width=HALO_WIDTH), name=name,
                      legendgroup=legendgroup, showlegend=False, hoverinfo="skip", connectgaps=False,
                      opacity=_HALO_OPACITY)


def _line_style(flagged: bool) -> dict[str, Any]:
    return dict(color=OUTLINE_COLOR, width=OUTLINE_WIDTH, dash="dash" if flagged else "solid")


def outline_traces(outlines: Sequence[IndicationOutline]) -> list[Any]:
    """Traces of indication outlines for a report: per indication a halo, its outline and a peak marker.

    The outline carries the indication's hover text and a legend entry per
    kind of region (flagged outlines dashed); indications without polygons
    get the peak marker only.
    """
    import plotly.graph_objects as go

    traces: list[Any] = []
    shown: set[str] = set()
    for o in outlines:
        if o.polygons:
            xs, ys = _polygon_xy(o.polygons)
            legend = f"{o.region} outline" + (", flagged (dashed)" if o.flagged else "")
            traces.append(_halo(xs, ys, legend + " (halo)", legend))
            traces.append(go.Scatter(
                x=xs, y=ys, mode="lines", line=_line_style(o.flagged), name=legend, legendgroup=legend,
                showlegend=legend not in shown, hoverinfo="text", text=o.hover, hoveron="points", connectgaps=False,
            ))
            shown.add(legend)
        name = "indication peak"
        traces.append(go.Scatter(
            x=[o.peak_mm[0]], y=[o.peak_mm[1]], mode="markers",
            marker=dict(symbol="x-thin", size=9, color=OUTLINE_COLOR, line=dict(width=2, color=OUTLINE_COLOR)),
            name=name, legendgroup=name, showlegend=name not in shown, hovertemplate=o.hover + "<extra></extra>",
        ))
        shown.add(name)
    return traces


def merged_outline_traces(outlines: Sequence[IndicationOutline]) -> list[Any]:
    """The outlines of :func:`outline_traces` as three traces: the halos, the plain and the flagged (dashed) lines.

    Each vertex carries its indication's hover text. Indications without
    polygons are left out (their peak is drawn by the caller if at all).
    """
    import plotly.graph_objects as go

    halo_x: list[float | None] = []
    halo_y: list[float | None] = []
    lines: dict[bool, tuple[list[float | None], list[float | None], list[str]]] = {
        False: ([], [], []), True: ([], [], [])}
    for o in outlines:
        if not o.polygons:
            continue
        xs, ys = _polygon_xy(o.polygons)
        halo_x += xs
        halo_y += ys
        bx, by, bt = lines[o.flagged]
        bx += xs
        by += ys
        bt += [o.hover] * len(xs)
    traces = [_halo(halo_x, halo_y, "outline halos")]
    for flagged in (False, True):
        xs, ys, texts = lines[flagged]
        traces.append(go.Scatter(
            x=xs, y=ys, mode="lines", line=_line_style(flagged), text=texts, hoverinfo="text", hoveron="points",
            connectgaps=False, showlegend=False,
            name="flagged indication outlines (dashed)" if flagged else "indication outlines",
        ))
    return traces

