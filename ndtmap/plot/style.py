"""ndtmap's own look: colours, colour scales, axis labels and the plotly template of every figure.

Colour scales are perceptually uniform and readable with the common forms of
colour-vision deficiency: viridis for amplitude, cividis for depth and wall
thickness, and the diverging purple-orange scale centred on zero for signed
changes in dB (back-wall loss). Overlays (gates, cursors, outlines) use the
Okabe-Ito palette. Labels come from the ``long_name`` and ``units``
attributes of the data, so a figure always names its quantity and unit. The
report and the workbench draw with the same template and colours.
"""

from __future__ import annotations

import math
from typing import Any

__all__ = [
    "COLOR_SCALES",
    "ACCENTS",
    "OVERLAY_COLORS",
    "FONT_FAMILY",
    "MISSING_COLOR",
    "INK",
    "AXIS_COLOR",
    "GRID_COLOR",
    "MARK_COLOR",
    "OUTLINE_COLOR",
    "SELECTED_COLOR",
    "color_scale_for",
    "label_from_attrs",
    "gate_colour",
    "ndtmap_template",
    "nice_length",
]

#: Colour scale per physical quantity (plotly names).
COLOR_SCALES: dict[str, str] = {
    "%FSH": "Viridis",
    "dB": "PuOr",
    "mm": "Cividis",
}

#: Line colours for overlays (gates, cursors, outlines), chosen from the Okabe-Ito palette,
#: which stays distinguishable under colour-vision deficiency.
ACCENTS: tuple[str, ...] = ("#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00", "#CC79A7", "#000000")
#: Overlay colours in order of use: the accents without the yellow (too faint on white).
OVERLAY_COLORS: tuple[str, ...] = tuple(c for c in ACCENTS if c.upper() != "#F0E442")

FONT_FAMILY = "DejaVu Sans, Arial, sans-serif"
#: Colour of positions without a value (missing A-scans, gate not triggered).
MISSING_COLOR = "#c4c4c4"
#: Text and signal lines.
INK = "#222222"
AXIS_COLOR = "#4d4d4d"
GRID_COLOR = "#ebebeb"
#: Markers on sections, A-scans and diagrams (vermillion), and the selected position.
MARK_COLOR = "#D55E00"
#: Indication outlines on maps (drawn over a white halo).
OUTLINE_COLOR = "#000000"
#: The indication selected in the workbench.
SELECTED_COLOR = "#E69F00"


def color_scale_for(units: str | None) -> str:
    """Return the colour scale for data in `units` (viridis when unknown).

    Examples
    --------
    >>> color_scale_for("dB"), color_scale_for("%FSH")
    ('PuOr', 'Viridis')
    """
    return COLOR_SCALES.get(str(units), "Viridis")


def label_from_attrs(obj: Any, default: str = "") -> str:
    """``"long_name [units]"`` from an xarray object's attributes.

    Examples
    --------
    >>> import xarray as xr
    >>> label_from_attrs(xr.DataArray(0, attrs={"long_name": "depth", "units": "mm"}))
    'depth [mm]'
    """
    attrs = getattr(obj, "attrs", {}) or {}
    name = attrs.get("long_name") or attrs.get("standard_name") or getattr(obj, "name", None) or default
    units = attrs.get("units")
    return f"{name} [{units}]" if units not in (None, "", "1") else str(name)


def gate_colour(k: int) -> str:
    """The colour of the k-th gate of a procedure (the same gate has the same colour in every figure).

    Examples
    --------
    >>> gate_colour(0), gate_colour(len(OVERLAY_COLORS))
    ('#E69F00', '#E69F00')
    """
    return OVERLAY_COLORS[int(k) % len(OVERLAY_COLORS)]


def ndtmap_template() -> Any:
    """ndtmap's plotly template: white, boxed axes with outside ticks, DejaVu Sans, Okabe-Ito colours.

    Examples
    --------
    >>> t = ndtmap_template()
    >>> t.layout.paper_bgcolor, t.layout.font.family.split(",")[0]
    ('white', 'DejaVu Sans')
    """
    import plotly.graph_objects as go  # plotly is imported when a figure is made, not with ndtmap

    axis = dict(
        showline=True,
        linecolor=AXIS_COLOR,
        linewidth=1,
        mirror=True,
        ticks="outside",
        ticklen=5,
        tickcolor=AXIS_COLOR,
        showgrid=True,
        gridcolor=GRID_COLOR,
        gridwidth=1,
        zeroline=False,
        automargin=True,
        title=dict(standoff=10),
    )
    colorbar = dict(outlinewidth=1, outlinecolor=AXIS_COLOR, ticks="outside", ticklen=4, thickness=16)
    return go.layout.Template(
        layout=dict(
            font=dict(family=FONT_FAMILY, size=13, color=INK),
            paper_bgcolor="white",
            plot_bgcolor="white",
            colorway=list(OVERLAY_COLORS),
            title=dict(x=0.0, xanchor="left", xref="paper", font=dict(size=15)),
            margin=dict(l=70, r=30, t=80, b=60),
            xaxis=axis,
            yaxis=axis,
            legend=dict(bgcolor="rgba(255,255,255,0.9)", bordercolor="#b3b3b3", borderwidth=1,
                        font=dict(size=11)),
            hoverlabel=dict(font=dict(family=FONT_FAMILY, size=12), align="left"),
            hovermode="closest",
            annotationdefaults=dict(font=dict(size=11, color=INK), showarrow=False),
        ),
        data=dict(
            heatmap=[go.Heatmap(colorbar=colorbar)],
            scatter=[go.Scatter(line=dict(width=1.5))],
        ),
    )


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
