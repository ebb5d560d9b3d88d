"""DGS diagrams: back-wall and flat-bottom-hole echo curves against sound path, with indications on them."""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping, Sequence
from typing import Any

import numpy as np
import xarray as xr

from ndtmap.errors import ParameterError, ParameterTypeError
from ndtmap.plot._common import checked_records, escape, finish
from ndtmap.plot._common import field as rec_field
from ndtmap.plot.style import AXIS_COLOR, INK, MARK_COLOR, gate_colour

__all__ = ["dgs_points", "dgs_figure"]


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
    for rec in checked_records("records", records):
        if any(rec_field(rec, key) is None for key in ("ers_mm", "ers_ratio_db", "depth_mm")):
            continue
        var = "backwall_echo_far_field_db" if rec_field(rec, "ers_method") == "far-field" else "backwall_echo_db"
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
                             line=dict(color=INK, width=2.5),
                             hovertemplate="back wall<br>%{x:.1f} mm, %{y:.1f} dB<extra></extra>"))
    fig.add_trace(go.Scatter(x=z, y=diagram_ds["backwall_echo_far_field_db"].values, mode="lines",
                             name="back wall, far field", line=dict(color=INK, width=1, dash="dot"),
                             hoverinfo="skip"))
    sizes = np.asarray(diagram_ds["fbh_diameter_mm"].values, dtype=np.float64)
    for k, d in enumerate(sizes):
        color = gate_colour(k)
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
                          line=dict(color=AXIS_COLOR, width=1, dash="dash"))
            fig.add_annotation(x=math.log10(zn), y=1.0, xref="x", yref="paper", yanchor="bottom",
                               text=f"{name} = {zn:.1f} mm", font=dict(size=10))
    if backwall_point is not None:
        bz, bl = backwall_point
        fig.add_trace(go.Scatter(x=[float(bz)], y=[float(bl)], mode="markers", name="back-wall reference",
                                 marker=dict(symbol="square-open", size=11, color=INK, line=dict(width=2)),
                                 hovertemplate=f"back-wall reference<br>{float(bz):.1f} mm, {float(bl):.1f} dB"
                                 "<extra></extra>"))
    pts = list(points or [])
    if pts:
        px = [float(p[0]) for p in pts]
        py = [float(p[1]) for p in pts]
        labels = [escape(p[2]) for p in pts]
        short = [lab.split(" ")[0] for lab in labels]
        fig.add_trace(go.Scatter(x=px, y=py, mode="markers+text", name="indications", text=short,
                                 customdata=labels, textposition="bottom center", textfont=dict(size=10),
                                 marker=dict(symbol="circle", size=10, color=MARK_COLOR, line=dict(color=INK, width=1)),
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
    return finish(fig, "dgs", title)
