"""The first-look procedure: gates and a detection level derived from the grid itself.

For a report without a written procedure: a flaw gate between the surface
and the back wall, a back-wall gate around it, and a detection level from the
noise of the flaw gate. Every report made with it says so.
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from ndtmap.errors import ParameterError
from ndtmap.gates import Gate
from ndtmap.grid.geometry import part_constants
from ndtmap.grid.schema import grid_attr
from ndtmap.indications.echoes import echo_half_length_mm
from ndtmap.procedure.definition import Procedure
from ndtmap.scans import amplitude_map, side_view

__all__ = ["FIRST_LOOK_NOISE_FACTOR", "FIRST_LOOK_MIN_FSH", "first_look_procedure"]

#: The first-look detection threshold: this multiple of the median gate amplitude (the typical
#: noise peak in the gate), but at least FIRST_LOOK_MIN_FSH.
FIRST_LOOK_NOISE_FACTOR = 2.0
FIRST_LOOK_MIN_FSH = 10.0


def _estimate_backwall_depth_mm(grid: xr.Dataset) -> float | None:
    """Depth of the strongest echo in the later part of the record (a guess at the back wall), mm."""
    prof = side_view(grid).max("scan").values
    d0, d1 = part_constants(grid).record_depth_mm()
    depth = np.linspace(d0, d1, prof.size)
    sel = depth > d0 + 0.3 * (d1 - d0)
    if not np.any(sel) or not np.isfinite(prof[sel]).any():
        return None
    return float(depth[sel][int(np.nanargmax(prof[sel]))])


def _gate_limits_mm(grid: xr.Dataset, thickness: float) -> tuple[float, float, float, float]:
    """(flaw start, flaw end, back-wall start, back-wall end), depth mm, inside the record."""
    pc = part_constants(grid)
    d0, d1 = pc.record_depth_mm()
    echo = echo_half_length_mm(grid)
    dt_mm = pc.dt_us * pc.depth_per_us()
    start = max(d0 + dt_mm, echo, 1.0)
    end = min(thickness - 1.5 * echo, d1 - dt_mm)
    if not end > start + 2 * dt_mm:
        raise ParameterError(
            f"the wall ({thickness:.1f} mm) is too thin for a flaw gate clear of the surface and the back wall; "
            "write a procedure file"
        )
    half = max(2.0 * echo, 0.05 * thickness)
    bw_start = max(thickness - half, end)
    bw_end = min(thickness + half, d1 - dt_mm)
    if not bw_end > bw_start:
        raise ParameterError("the back wall lies too close to the end of the record for a back-wall gate")
    return start, end, bw_start, bw_end


def first_look_procedure(grid: xr.Dataset) -> Procedure:
    """Derive a first-look procedure from the grid itself (for a report without a procedure file).

    * back-wall depth: the ``part_thickness_mm`` attribute, else the depth of
      the strongest late echo;
    * flaw gate: from one echo length below the surface (at least 1 mm) to
      one echo length above the back wall;
    * back-wall gate: the back wall +/- max(2 echo lengths, 5 % of the wall),
      inside the record;
    * detection threshold: twice the median of the flaw gate's amplitude map
      (the typical noise peak), but at least 10 %FSH.

    It is a starting point stated as such in every report, not a substitute
    for a written procedure.

    Parameters
    ----------
    grid : xarray.Dataset
        A straight-beam scan grid.

    Returns
    -------
    Procedure
        With ``first_look=True``.

    Raises
    ------
    ParameterError
        When no back wall can be placed (angle beams, or a record too short).

    Examples
    --------
    >>> from ndtmap.grid.examples import example_grid
    >>> p = first_look_procedure(example_grid((8.0,), (80.0,)).assign_attrs(part_thickness_mm=23.68))
    >>> p.first_look, [g.name for g in p.gates], p.detection_level  # nothing but the back wall: 10 %FSH
    (True, ['flaw', 'backwall'], '10 %FSH')
    """
    theta = part_constants(grid).beam_angle_deg
    thickness = grid_attr(grid, "part_thickness_mm")
    if not isinstance(thickness, float):
        thickness = _estimate_backwall_depth_mm(grid)
    if thickness is None or theta > 1.0:
        raise ParameterError(
            "a first-look procedure needs a straight beam and a back wall inside the record; "
            "write a procedure file and pass it with --procedure"
        )
    start, end, bw_start, bw_end = _gate_limits_mm(grid, thickness)
    probe_gate = Gate("flaw", round(start, 2), round(end, 2), threshold_fsh=FIRST_LOOK_MIN_FSH)
    amp = amplitude_map(grid, probe_gate)
    median = float(np.nanmedian(np.asarray(amp.values, dtype=np.float64)))
    threshold = round(max(FIRST_LOOK_MIN_FSH, FIRST_LOOK_NOISE_FACTOR * median), 1)
    flaw = Gate("flaw", round(start, 2), round(end, 2), threshold_fsh=threshold)
    backwall = Gate("backwall", round(bw_start, 2), round(bw_end, 2), threshold_fsh=threshold)
    return Procedure(
        name="first look (derived from the grid)",
        description=(
            f"Derived from the grid, not from a written procedure: flaw gate {flaw.start:g}-{flaw.end:g} mm, "
            f"back-wall gate {backwall.start:g}-{backwall.end:g} mm, detection threshold {threshold:g} %FSH "
            f"(twice the median gate amplitude, at least {FIRST_LOOK_MIN_FSH:g} %FSH); back-wall loss "
            "indications at 6 dB."
        ),
        gates=(flaw, backwall),
        detection_gate="flaw",
        backwall_gate="backwall",
        backwall_loss_threshold_db=6.0,
        min_positions=2,
        first_look=True,
    )
