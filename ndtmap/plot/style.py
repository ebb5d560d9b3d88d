"""ndtmap's own look: colour scales and axis labels, shared by the workbench and static figures.

Colour scales are perceptually uniform and readable with the common forms of
colour-vision deficiency: viridis for amplitude, cividis for depth and wall
thickness, and the diverging purple-orange scale centred on zero for signed
changes in dB (back-wall loss). Labels come from the ``long_name`` and
``units`` attributes of the data, so a figure always names its quantity and unit.
"""

from __future__ import annotations

from typing import Any

__all__ = ["COLOR_SCALES", "color_scale_for", "label_from_attrs", "ACCENTS", "FONT_FAMILY"]

#: Colour scale per physical quantity (plotly names).
COLOR_SCALES: dict[str, str] = {
    "%FSH": "Viridis",
    "dB": "PuOr",
    "mm": "Cividis",
}

#: Line colours for overlays (gates, cursors, outlines), chosen from the Okabe-Ito palette,
#: which stays distinguishable under colour-vision deficiency.
ACCENTS: tuple[str, ...] = ("#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00", "#CC79A7", "#000000")

FONT_FAMILY = "DejaVu Sans, Arial, sans-serif"


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
