"""The scan grid: its schema, its geometry and its record of processing.

A scan grid is an :class:`xarray.Dataset` of A-scans on ``(scan, index, time)``
(docs/grid-format.md). This subpackage states that format once and owns what
every other part needs to read a grid correctly:

* :mod:`ndtmap.grid.schema`: :func:`make_grid`, :func:`validate_grid`,
  :func:`grid_problems` (every problem at once), missing A-scans, samples in %FSH;
* :mod:`ndtmap.grid.geometry`: THE mapping from recorded time to sound path, depth
  and surface distance (:class:`PartConstants`), legs and skip distance of angle beams,
  and the reflector's position in a plate or a cylinder (:class:`PartGeometry`,
  :func:`reflector_position`, the exact chords of :func:`chord_path`);
* :mod:`ndtmap.grid.calibration`: velocity and zero offset from known thicknesses
  or echo sequences, :func:`calibrate`;
* :mod:`ndtmap.grid.provenance`: the processing record every result carries;
* :mod:`ndtmap.grid.summary`: the plain-value summary ``ndtmap info`` prints.
"""

from ndtmap.grid.calibration import (
    TwoPointCalibration,
    calibrate,
    thickness_from_echo_spacing,
    two_point_calibration,
    velocity_from_echo_spacing,
    velocity_from_thickness,
    zero_offset_from_echo,
)
from ndtmap.grid.geometry import (
    ChordPath,
    PartConstants,
    PartGeometry,
    ReflectorPosition,
    bore_limit_angle_deg,
    chord_path,
    chord_sound_path_mm,
    depth_axis,
    depth_from_sound_path_mm,
    echo_positions,
    leg_and_folded_depth,
    part_constants,
    part_geometry,
    plate_sound_path_mm,
    reflector_position,
    skip_distance_mm,
    sound_path_axis,
    sound_path_from_depth_mm,
    sound_path_mm,
    surface_distance_axis,
    surface_distance_from_sound_path_mm,
    surface_position_mm,
    time_from_sound_path_us,
)
from ndtmap.grid.provenance import (
    jsonable,
    read_provenance,
    with_step,
)
from ndtmap.grid.schema import (
    DIMS,
    OPTIONAL_ATTRS,
    REQUIRED_ATTRS,
    ascan_in_fsh,
    canonical_grid,
    check_grid,
    count_missing_ascans,
    grid_attr,
    grid_problems,
    make_grid,
    missing_ascans,
    nonfinite_along_time,
    replace_ascan,
    time_step_us,
    validate_grid,
)
from ndtmap.grid.summary import (
    format_summary,
    grid_summary,
)

__all__ = [
    "nonfinite_along_time",
    "count_missing_ascans",
    "check_grid",
    "replace_ascan",
    "DIMS",
    "REQUIRED_ATTRS",
    "OPTIONAL_ATTRS",
    "make_grid",
    "grid_problems",
    "validate_grid",
    "canonical_grid",
    "missing_ascans",
    "ascan_in_fsh",
    "time_step_us",
    "grid_attr",
    "PartConstants",
    "part_constants",
    "sound_path_mm",
    "time_from_sound_path_us",
    "depth_from_sound_path_mm",
    "surface_distance_from_sound_path_mm",
    "sound_path_from_depth_mm",
    "skip_distance_mm",
    "leg_and_folded_depth",
    "surface_position_mm",
    "sound_path_axis",
    "depth_axis",
    "surface_distance_axis",
    "PartGeometry",
    "part_geometry",
    "ReflectorPosition",
    "reflector_position",
    "echo_positions",
    "ChordPath",
    "chord_path",
    "plate_sound_path_mm",
    "chord_sound_path_mm",
    "bore_limit_angle_deg",
    "TwoPointCalibration",
    "velocity_from_thickness",
    "zero_offset_from_echo",
    "two_point_calibration",
    "thickness_from_echo_spacing",
    "velocity_from_echo_spacing",
    "calibrate",
    "read_provenance",
    "with_step",
    "jsonable",
    "grid_summary",
    "format_summary",
]
