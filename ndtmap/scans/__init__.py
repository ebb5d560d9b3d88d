"""ndtmap.scans."""

from ndtmap.scans.maps import (
    MAP_KINDS,
    THICKNESS_METHODS,
    amplitude_map,
    backwall_loss_db,
    backwall_loss_map,
    depth_map,
    end_view,
    map_by_kind,
    map_dataset,
    nominal_backwall_fsh,
    side_view,
    thickness_map,
)
from ndtmap.scans.sections import (
    SECTION_METHODS,
    angle_beam_section,
    b_scan,
    d_scan,
    polyline_section,
)

__all__ = [
    "MAP_KINDS",
    "THICKNESS_METHODS",
    "amplitude_map",
    "depth_map",
    "thickness_map",
    "backwall_loss_map",
    "backwall_loss_db",
    "nominal_backwall_fsh",
    "side_view",
    "end_view",
    "map_by_kind",
    "map_dataset",
    "SECTION_METHODS",
    "b_scan",
    "d_scan",
    "polyline_section",
    "angle_beam_section",
]
