"""ndtmap.plot."""

from ndtmap.plot.export import (
    STATIC_FORMATS,
    export_session,
    figure_bytes,
    find_chromium,
    stable_pdf,
    stable_svg,
    write_figure,
    write_plotly_js,
)
from ndtmap.plot.figures import (
    MISSING_COLOR,
    ascan_at,
    ascan_figure,
    dgs_figure,
    dgs_points,
    indication_outline,
    map_figure,
    ndtmap_template,
    nice_length,
    section_figure,
    thickness_figure,
)

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
    "STATIC_FORMATS",
    "write_figure",
    "write_plotly_js",
    "export_session",
    "find_chromium",
    "figure_bytes",
    "stable_svg",
    "stable_pdf",
]
