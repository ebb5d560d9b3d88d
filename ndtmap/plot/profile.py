"""The amplitude profile along a measuring line, with the drop level and the two ends of the length."""

from __future__ import annotations

from typing import Any

import numpy as np

from ndtmap.errors import ParameterError
from ndtmap.plot._common import new_figure
from ndtmap.plot.style import INK, MARK_COLOR

__all__ = ["profile_figure", "PROFILE_TRACES"]

#: Trace order of the profile figure (the same with and without a measurement).
PROFILE_TRACES = ("amplitude", "level", "ends", "length")


def profile_figure(
    distance_mm: Any = None,
    amplitude_fsh: Any = None,
    *,
    level_fsh: float | None = None,
    drop_db: float = 6.0,
    ends_mm: tuple[float, float] | None = None,
    length_mm: float | None = None,
    title: str | None = None,
    width: int | None = None,
    height: int | None = None,
) -> Any:
    """The amplitude along a line (e.g. a drop-length measurement), its drop level and the ends of the length.

    Parameters
    ----------
    distance_mm, amplitude_fsh : array_like, optional
        Distance from the line's start (mm) and the amplitude there (%FSH);
        without them the figure is empty (its title says what to do).
    level_fsh : float, optional
        The level the length is measured at (a dashed line).
    drop_db : float, default 6
        The drop the level stands for (named in the legend).
    ends_mm : (float, float), optional
        Distances of the two ends of the length from the line's start.
    length_mm : float, optional
        The length, written over the span between the ends.
    title : str, optional
    width, height : int, optional
        Figure size in px.

    Returns
    -------
    plotly.graph_objects.Figure
        Traces in the order of :data:`PROFILE_TRACES`.

    Examples
    --------
    >>> import numpy as np
    >>> d = np.linspace(0.0, 10.0, 11); a = 80.0 * np.exp(-0.5 * ((d - 5.0) / 2.0) ** 2)
    >>> fig = profile_figure(d, a, level_fsh=40.0, ends_mm=(2.6, 7.4), length_mm=4.8)
    >>> [t.name for t in fig.data], fig.data[3].text[1]
    (['amplitude', '-6 dB level 40.0 %FSH', 'ends', 'length'], '4.8 mm')
    """
    import plotly.graph_objects as go  # plotly is imported when a figure is made

    traces = [go.Scatter(x=[], y=[], name=n) for n in PROFILE_TRACES]
    if distance_mm is not None:
        d = np.asarray(distance_mm, dtype=np.float64)
        v = np.asarray(amplitude_fsh, dtype=np.float64)
        if d.ndim != 1 or d.shape != v.shape or d.size < 2:
            raise ParameterError(f"`distance_mm` and `amplitude_fsh` must be 1-D of one length >= 2, got {d.shape} "
                                 f"and {v.shape}")
        traces[0] = go.Scatter(x=d, y=v, mode="lines", line=dict(color=INK, width=1.6), name="amplitude",
                               hovertemplate="%{x:.2f} mm along the line: %{y:.1f} %FSH<extra></extra>")
        if level_fsh is not None:
            lvl = float(level_fsh)
            traces[1] = go.Scatter(x=[d[0], d[-1]], y=[lvl, lvl], mode="lines",
                                   line=dict(color=MARK_COLOR, dash="dash"),
                                   name=f"-{drop_db:g} dB level {lvl:.1f} %FSH",
                                   hovertemplate=f"-{drop_db:g} dB: {lvl:.1f} %FSH<extra></extra>")
            if ends_mm is not None:
                a, b = (float(e) for e in ends_mm)
                traces[2] = go.Scatter(x=[a, b], y=[lvl, lvl], mode="markers", name="ends",
                                       marker=dict(symbol="diamond", size=11, color="#FFFFFF",
                                                   line=dict(width=2, color=INK)),
                                       hovertemplate="end at %{x:.2f} mm along the line<extra></extra>")
                text = ["", f"{float(length_mm):.1f} mm" if length_mm is not None else ""]
                traces[3] = go.Scatter(x=[a, b], y=[lvl * 1.08, lvl * 1.08], mode="lines+text",
                                       line=dict(color=INK, width=1.5), text=text, textposition="top left",
                                       name="length", hoverinfo="skip")
    layout = dict(xaxis=dict(title=dict(text="distance along the line [mm]")),
                  yaxis=dict(title=dict(text="amplitude [%FSH]"), rangemode="tozero"), showlegend=False)
    return new_figure("profile", traces, layout, title=title, width=width, height=height)
