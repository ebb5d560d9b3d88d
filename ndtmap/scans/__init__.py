"""Scans: C-scan maps and sections of a scan grid.

* :mod:`ndtmap.scans.maps`: the map kinds (:data:`MAP_KINDS`: amplitude, depth,
  thickness, back-wall loss) from a gate's evaluation, the one back-wall-loss
  formula (:func:`backwall_loss_db`, :func:`nominal_backwall_fsh`), side and end
  views, :func:`map_by_kind` for the command line;
* :mod:`ndtmap.scans.sections`: B-scans, D-scans, polyline sections and the
  true-geometry section of an angle beam, on a depth axis.

Every result is a labelled :class:`xarray.DataArray` with ``units``,
``long_name``, the grid's attributes and a provenance step; on a dask-backed
grid the results are lazy.
"""

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
