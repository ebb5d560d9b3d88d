"""A-scans with their gates: one figure for the report and the workbench.

:func:`ascan_arrays_figure` draws an A-scan from plain data: the axis
(depth in mm, or time in us), the signal in %FSH and one :class:`GateMark`
per gate (its window at this A-scan, its threshold, the event it found).
Each gate is drawn in its own colour as a shaded window with a bar at its
threshold; a diamond marks the event with its amplitude. The report calls it
through :func:`ascan_figure` (an A-scan from :func:`ascan_at` and the gate
results of :func:`ndtmap.gates.evaluate_gates`); the workbench passes what
its state computed.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import xarray as xr

from ndtmap._shared import mapgeom as mg
from ndtmap._shared.validate import finite_float
from ndtmap.errors import ParameterError, ParameterTypeError
from ndtmap.gates import Gate
from ndtmap.grid.geometry import PartConstants, depth_axis
from ndtmap.grid.schema import check_grid
from ndtmap.plot._common import escape, fmt, new_figure
from ndtmap.plot.style import INK, gate_colour
from ndtmap.signal import detected_signal

__all__ = ["GateMark", "ascan_at", "ascan_arrays_figure", "ascan_figure", "AXIS_TITLES"]

#: Horizontal axis titles by axis kind.
AXIS_TITLES = {"depth": "depth below the scanning surface [mm]", "time": "time from pulse entry [us]"}


@dataclass(frozen=True)
class GateMark:
    """A gate as drawn on one A-scan: its definition, its window there and the event it found.

    Positions are along the A-scan's axis: depth in mm (or time in us for a
    time axis).

    Attributes
    ----------
    gate : Gate
        The gate (name, definition and threshold in %FSH).
    start_at, end_at : float or None
        The window at this A-scan (None where not known, e.g. a following gate
        whose reference did not trigger).
    triggered : bool or None
        Whether the gate triggered here (None: not evaluated, no event drawn).
    event_at : float or None
        Position of the event.
    event_amplitude_fsh : float or None
        Amplitude of the event (the window maximum when not triggered), %FSH.
    """

    gate: Gate
    start_at: float | None
    end_at: float | None
    triggered: bool | None = None
    event_at: float | None = None
    event_amplitude_fsh: float | None = None

    @property
    def name(self) -> str:
        return self.gate.name

    @property
    def threshold_fsh(self) -> float | None:
        """The level in %FSH, or None for a level re a curve (DAC), which varies with depth."""
        return None if self.gate.threshold_fsh is None else float(self.gate.threshold_fsh)

    def label(self) -> str:
        """The gate's legend entry: name, window as defined, threshold and the gate it follows."""
        g = self.gate
        level = f"{g.threshold_fsh:g} %FSH" if g.threshold_fsh is not None else escape(g.level_text())
        text = f"{escape(g.name)}: {g.start:g}-{g.end:g} {g.unit}, {level}"
        if g.mode != "peak":
            text += f", {escape(g.mode)}"
        if g.follows is not None:
            text += f" (follows {escape(g.follows)})"
        return text


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
    grid = check_grid(grid)
    s = finite_float("scan_mm", scan_mm)
    i = finite_float("index_mm", index_mm)
    sig = detected_signal(grid, detect).sel(scan=s, index=i, method="nearest")
    out = sig.assign_coords(depth=depth_axis(grid)).compute()
    attrs = {k: v for k, v in grid.attrs.items() if k not in ("truth",)}
    attrs.update(units="%FSH", long_name=f"A-scan amplitude ({detect})", detect=detect)
    out.attrs = attrs
    return out.rename("amplitude_fsh")


def _gate_marks(mark: GateMark, color: str, top: float, bipolar: bool, axis: str
                ) -> tuple[list[Any], list[dict[str, Any]], list[dict[str, Any]]]:
    """One gate on the A-scan: its traces (bar at the threshold, event), shapes (shaded window) and labels."""
    import plotly.graph_objects as go

    label = mark.label()
    x0, x1 = mark.start_at, mark.end_at
    if x0 is None or x1 is None or not (math.isfinite(x0) and math.isfinite(x1)):
        return [go.Scatter(x=[None], y=[None], mode="lines", line=dict(color=color, width=4),
                           name=label + ": window not known here", hoverinfo="skip")], [], []
    thr = mark.threshold_fsh
    tick = 0.03 * top
    shapes = [dict(type="rect", xref="x", yref="paper", x0=x0, x1=x1, y0=0, y1=1, fillcolor=color, opacity=0.08,
                   line_width=0, layer="below")]
    if thr is None:  # a level re a curve (DAC): no single bar; the window and the event are drawn
        thr, bipolar = 0.9 * top, False
        traces = [go.Scatter(x=[None], y=[None], mode="lines", line=dict(color=color, width=3), name=label,
                             legendgroup=mark.name, hoverinfo="skip")]
    else:
        traces = []
    traces = traces or [go.Scatter(x=[x0, x0, None, x0, x1, None, x1, x1],
                         y=[thr - tick, thr + tick, None, thr, thr, None, thr - tick, thr + tick],
                         mode="lines", line=dict(color=color, width=3), name=label, legendgroup=mark.name,
                         hovertemplate=f"gate {escape(mark.name)}: threshold {thr:g} %FSH<extra></extra>")]
    if bipolar:
        traces.append(go.Scatter(x=[x0, x1], y=[-thr, -thr], mode="lines", name=label + " (negative)",
                                 line=dict(color=color, width=1.5, dash="dot"), legendgroup=mark.name,
                                 showlegend=False, hoverinfo="skip"))
    notes = [dict(x=x0, y=thr + tick, xref="x", yref="y", text=f"<b>{escape(mark.name)}</b>", xanchor="left",
                  yanchor="bottom", font=dict(size=11, color=color))]
    if mark.triggered is None:
        return traces, shapes, notes
    amp, at = mark.event_amplitude_fsh, mark.event_at
    if mark.triggered and at is not None and math.isfinite(at) and amp is not None:
        unit = "mm depth" if axis == "depth" else "us"
        traces.append(go.Scatter(
            x=[at], y=[amp], mode="markers", name=f"{escape(mark.name)} event", legendgroup=mark.name,
            marker=dict(symbol="diamond", size=10, color=color, line=dict(color=INK, width=1)), showlegend=False,
            hovertemplate=f"{escape(mark.name)} event: {fmt(amp)} %FSH at {at:.2f} {unit}<extra></extra>",
        ))
        notes.append(dict(x=at, y=amp, xref="x", yref="y", text=f"{fmt(amp)} %FSH", xanchor="left",
                          yanchor="bottom", xshift=6, font=dict(size=10, color=INK)))
    else:
        notes.append(dict(x=0.5 * (x0 + x1), y=thr - tick, xref="x", yref="y", yanchor="top",
                          text=f"{escape(mark.name)}: no echo above the threshold", font=dict(size=10, color=color)))
    return traces, shapes, notes


def ascan_arrays_figure(
    axis_values: Any,
    signal_fsh: Any,
    marks: Sequence[GateMark] = (),
    *,
    axis: str = "depth",
    rf_fsh: Any = None,
    time_us: Any = None,
    signal_name: str = "A-scan",
    amplitude_title: str = "A-scan amplitude",
    position_mm: tuple[float, float] | None = None,
    missing: bool = False,
    gate_order: Sequence[str] | None = None,
    title: str | None = None,
    width: int | None = None,
    height: int | None = None,
) -> Any:
    """An A-scan from plain data, with its gates (window, threshold bar, event) in each gate's colour.

    Parameters
    ----------
    axis_values : array_like
        Depth of each sample in mm (`axis` 'depth') or its time in us ('time').
    signal_fsh : array_like
        The detection signal (rectified or envelope), %FSH.
    marks : sequence of GateMark
        The gates at this A-scan, positions along the same axis.
    axis : {'depth', 'time'}, default 'depth'
    rf_fsh : array_like, optional
        The RF signal, drawn in grey under the detection signal (the amplitude
        axis then spans both signs).
    time_us : array_like, optional
        Time of each sample, shown in the hover text of a depth axis.
    signal_name, amplitude_title : str
        Name of the signal trace and of the amplitude axis.
    position_mm : (float, float), optional
        (scan, index) of the A-scan: the default title names it.
    missing : bool, default False
        The A-scan is missing (the title says so).
    gate_order : sequence of str, optional
        Gate names in the order their colours are given (default: as in `marks`).
    title : str, optional
    width, height : int, optional
        Figure size in px.

    Returns
    -------
    plotly.graph_objects.Figure
        Traces: the RF (when given), the signal, per gate its bar (and the
        negative bar on a signed axis, its event); windows are shaded shapes.

    Examples
    --------
    >>> import numpy as np
    >>> depth = np.linspace(0.0, 30.0, 301); a = 80.0 * np.exp(-0.5 * ((depth - 25.0) / 0.3) ** 2)
    >>> mark = GateMark(Gate("bw", 20.0, 28.0, threshold_fsh=40.0), 20.0, 28.0, True, 25.0, 80.0)
    >>> fig = ascan_arrays_figure(depth, a, [mark], position_mm=(1.0, 2.0))
    >>> [t.name for t in fig.data][:2], fig.layout.title.text
    (['A-scan', 'bw: 20-28 mm, 40 %FSH'], 'A-scan at scan 1.00 mm, index 2.00 mm')
    """
    import plotly.graph_objects as go

    if axis not in AXIS_TITLES:
        raise ParameterError(f"`axis` must be 'depth' or 'time', got {axis!r}")
    x = np.asarray(axis_values, dtype=np.float64)
    y = np.asarray(signal_fsh, dtype=np.float64)
    if x.ndim != 1 or x.shape != y.shape:
        raise ParameterError(f"`axis_values` and `signal_fsh` must be 1-D of one length, got {x.shape} and {y.shape}")
    rf = None if rf_fsh is None else np.asarray(rf_fsh, dtype=np.float64)
    unit = "mm" if axis == "depth" else "us"
    traces: list[Any] = []
    if rf is not None:
        traces.append(go.Scatter(x=x, y=rf, mode="lines", line=dict(color="#9A9A9A", width=0.8), name="RF",
                                 hoverinfo="skip"))
    hover = f"%{{x:.2f}} {unit}<br>%{{y:.1f}} %FSH<extra></extra>"
    custom = None
    if time_us is not None and axis == "depth":
        custom = np.asarray(time_us, dtype=np.float64)
        hover = "depth %{x:.2f} mm (t %{customdata:.3f} us)<br>%{y:.1f} %FSH<extra></extra>"
    traces.append(go.Scatter(x=x, y=y, mode="lines", name=escape(signal_name), line=dict(color=INK, width=1.2),
                             customdata=custom, hovertemplate=hover))
    shown = np.concatenate([y, rf]) if rf is not None else y
    finite = shown[np.isfinite(shown)]
    top = max(100.0, float(finite.max()) if finite.size else 100.0)
    bipolar = bool(finite.size and finite.min() < 0)
    order = list(gate_order) if gate_order is not None else [m.name for m in marks]
    shapes: list[dict[str, Any]] = []
    notes: list[dict[str, Any]] = []
    for mark in marks:
        k = order.index(mark.name) if mark.name in order else len(order)
        t, sh, no = _gate_marks(mark, gate_colour(k), top, bipolar, axis)
        traces += t
        shapes += sh
        notes += no
    if title is None and position_mm is not None:
        title = f"A-scan at scan {position_mm[0]:.2f} mm, index {position_mm[1]:.2f} mm"
    if missing:
        title = (title or "A-scan") + " \u2013 missing A-scan"
    layout = dict(
        shapes=shapes, annotations=notes,
        xaxis=dict(title=dict(text=AXIS_TITLES[axis]), range=[float(x[0]), float(x[-1])] if x.size else None),
        yaxis=dict(title=dict(text=f"{escape(amplitude_title)} [%FSH]"),
                   range=[-1.05 * top if bipolar else 0.0, 1.08 * top]),
        legend=dict(orientation="h", x=0.0, xanchor="left", y=-0.18, yanchor="top"),
    )
    return new_figure("ascan", traces, layout, title=title, width=width, height=height)


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


def _window_us(g: Gate, res: xr.Dataset | None, at: Mapping[str, float]) -> tuple[float, float] | None:
    """The gate's window in us at this A-scan, from its result, or from its definition when fixed in us."""
    if res is not None and "window_start_us" in res.variables:
        w0, w1 = _scalar(res, "window_start_us", at), _scalar(res, "window_end_us", at)
        if w0 is not None and w1 is not None and math.isfinite(w0) and math.isfinite(w1):
            return float(w0), float(w1)
        return None
    if res is not None and res.attrs.get("gate_window_us") is not None:
        w = list(np.asarray(res.attrs["gate_window_us"], dtype=np.float64).reshape(-1))
        return float(w[0]), float(w[1])
    if g.follows is None and g.unit == "us":
        return float(g.start), float(g.end)
    return None


def _mark_of(g: Gate, res: xr.Dataset | None, at: Mapping[str, float], t: np.ndarray, depth: np.ndarray | None,
             depth_axis_on: bool) -> GateMark:
    """A gate's mark on the A-scan, from its result at this position (or its definition)."""
    to_x = (lambda us: float(np.interp(us, t, depth))) if depth_axis_on else (lambda us: float(us))
    window = _window_us(g, res, at)
    if window is not None:
        x0, x1 = to_x(window[0]), to_x(window[1])
    elif g.follows is None and g.unit == "mm" and depth_axis_on:
        x0, x1 = float(g.start), float(g.end)
    elif g.follows is None and g.unit == "mm" and depth is not None:
        x0, x1 = float(np.interp(g.start, depth, t)), float(np.interp(g.end, depth, t))
    else:
        x0 = x1 = None
    if res is None:
        return GateMark(g, x0, x1)
    trig = bool(_scalar(res, "triggered", at))
    amp = _scalar(res, "amplitude_fsh", at)
    ev_t = _scalar(res, "time_us", at)
    ev = to_x(ev_t) if trig and ev_t is not None and math.isfinite(ev_t) else None
    return GateMark(g, x0, x1, trig, ev, None if amp is None or not math.isfinite(amp) else float(amp))


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
        ``depth`` coordinate along ``time`` (or the grid's ``velocity_m_s`` in
        its attributes).
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
        As :func:`ascan_arrays_figure`.

    Examples
    --------
    >>> from ndtmap.grid.examples import example_grid
    >>> fig = ascan_figure(ascan_at(example_grid((4.0,)), 0.0, 0.0), [Gate("bw", 10.0, 14.0, threshold_fsh=30)])
    >>> [t.name for t in fig.data][:2]
    ['A-scan', 'bw: 10-14 mm, 30 %FSH']
    """
    if not isinstance(ascan_da, xr.DataArray) or ascan_da.dims != ("time",):
        raise ParameterError("`ascan_da` must be one A-scan, an xarray.DataArray on the dim ('time',)")
    if isinstance(gates, Gate):
        gates = [gates]
    gate_list = list(gates.values()) if isinstance(gates, Mapping) else list(gates)
    for k, g in enumerate(gate_list):
        if not isinstance(g, Gate):
            raise ParameterTypeError(f"`gates[{k}]` must be a Gate, got {type(g).__name__}")
    t = np.asarray(ascan_da["time"].values, dtype=np.float64)
    depth = None
    if "depth" in ascan_da.coords:
        depth = np.asarray(ascan_da["depth"].values, dtype=np.float64)
    elif depth_axis:
        c = mg.map_attr(ascan_da.attrs, "velocity_m_s")
        if c is None:
            raise ParameterError("`ascan_da` has no `depth` coordinate or `velocity_m_s`; use depth_axis=False")
        pc = PartConstants(velocity_m_s=c, beam_angle_deg=mg.map_attr(ascan_da.attrs, "beam_angle_deg", 0.0) or 0.0,
                           zero_offset_us=mg.map_attr(ascan_da.attrs, "zero_offset_us", 0.0) or 0.0, time_us=t,
                           dt_us=float(t[1] - t[0]) if t.size > 1 else 0.0)
        depth = np.asarray(pc.depth_mm(t), dtype=np.float64)
    at = {k: float(ascan_da[k].values) for k in ("scan", "index") if k in ascan_da.coords and ascan_da[k].ndim == 0}
    marks = [_mark_of(g, None if gate_results is None else gate_results.get(g.name), at, t, depth, depth_axis)
             for g in gate_list]
    return ascan_arrays_figure(
        depth if depth_axis else t, ascan_da.values, marks, axis="depth" if depth_axis else "time",
        amplitude_title=str(ascan_da.attrs.get("long_name", "A-scan amplitude")), title=title,
    )
