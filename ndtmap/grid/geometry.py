"""Pulse-echo geometry: time, sound path, depth and surface distance.

In pulse-echo the sound travels to the reflector and back, so the sound
path (one way, along the beam) is ``s = c (t - t0) / 2`` with ``c`` the
velocity of the wave mode in the part and ``t0`` the zero offset (the time
of pulse entry into the part on the recorded time axis). For a beam
refracted at ``theta`` (``beam_angle_deg``; 0 is a straight beam) the
reflector lies at depth ``s cos(theta)`` below the scanning surface and at
surface distance ``s sin(theta)`` in front of the beam exit (index) point.

In a plate of thickness ``T`` an angle beam is reflected at the back wall
and at the scanning surface: the *legs* of the V path. One full skip (down
and up again) covers the surface distance ``2 T tan(theta)``. The
*unfolded* depth ``s cos(theta)`` keeps growing; the true (*folded*) depth
counts down from the surface in odd legs and back up from the back wall in
even legs.

Units: times in us, lengths in mm, velocities in m/s, angles in degrees.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
import xarray as xr

from ndtmap._shared.validate import finite_float, float_in_range, positive_float
from ndtmap.errors import ParameterError
from ndtmap.grid.schema import check_grid, grid_attr, time_step_us

__all__ = [
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
]


def _angle(beam_angle_deg: Any) -> float:
    return math.radians(float_in_range("beam_angle_deg", beam_angle_deg, 0.0, 90.0, high_inclusive=False, unit="deg"))


def sound_path_mm(time_us: Any, velocity_m_s: float, *, zero_offset_us: float = 0.0) -> Any:
    """One-way sound path in mm from a pulse-echo time.

    ``s = velocity * (time - zero_offset) / 2``.

    Parameters
    ----------
    time_us : array_like or xarray.DataArray
        Echo times on the recorded time axis, us.
    velocity_m_s : float
        Velocity of the wave mode in the part, m/s.
    zero_offset_us : float, default 0
        Time of pulse entry into the part on the recorded axis, us.

    Returns
    -------
    same type as `time_us`
        Sound path in mm (negative before pulse entry).

    Examples
    --------
    >>> round(float(sound_path_mm(4.0, 5920.0)), 3)  # 4 us in steel
    11.84
    """
    v = positive_float("velocity_m_s", velocity_m_s)
    t0 = finite_float("zero_offset_us", zero_offset_us)
    t = time_us if isinstance(time_us, xr.DataArray) else np.asarray(time_us, dtype=np.float64)
    return v * 1e-3 * (t - t0) / 2.0


def time_from_sound_path_us(sound_path: Any, velocity_m_s: float, *, zero_offset_us: float = 0.0) -> Any:
    """Pulse-echo time in us at which an echo from sound path `sound_path` (mm) arrives.

    The inverse of :func:`sound_path_mm`.

    Examples
    --------
    >>> round(float(time_from_sound_path_us(11.84, 5920.0, zero_offset_us=0.5)), 6)
    4.5
    """
    v = positive_float("velocity_m_s", velocity_m_s)
    t0 = finite_float("zero_offset_us", zero_offset_us)
    s = sound_path if isinstance(sound_path, xr.DataArray) else np.asarray(sound_path, dtype=np.float64)
    return t0 + 2.0 * s / (v * 1e-3)


def depth_from_sound_path_mm(sound_path: Any, beam_angle_deg: float = 0.0) -> Any:
    """Unfolded depth ``s cos(theta)`` in mm below the scanning surface.

    Examples
    --------
    >>> round(float(depth_from_sound_path_mm(100.0, 60.0)), 6)
    50.0
    """
    c = math.cos(_angle(beam_angle_deg))
    s = sound_path if isinstance(sound_path, xr.DataArray) else np.asarray(sound_path, dtype=np.float64)
    return s * c


def surface_distance_from_sound_path_mm(sound_path: Any, beam_angle_deg: float) -> Any:
    """Surface distance ``s sin(theta)`` in mm from the beam exit point to above the reflector.

    Examples
    --------
    >>> round(float(surface_distance_from_sound_path_mm(100.0, 30.0)), 6)
    50.0
    """
    sn = math.sin(_angle(beam_angle_deg))
    s = sound_path if isinstance(sound_path, xr.DataArray) else np.asarray(sound_path, dtype=np.float64)
    return s * sn


def sound_path_from_depth_mm(depth: Any, beam_angle_deg: float = 0.0) -> Any:
    """Sound path ``d / cos(theta)`` in mm to an (unfolded) depth `depth` in mm.

    Examples
    --------
    >>> round(float(sound_path_from_depth_mm(50.0, 60.0)), 6)
    100.0
    """
    c = math.cos(_angle(beam_angle_deg))
    d = depth if isinstance(depth, xr.DataArray) else np.asarray(depth, dtype=np.float64)
    return d / c


def skip_distance_mm(thickness_mm: float, beam_angle_deg: float) -> float:
    """Full skip distance ``2 T tan(theta)`` in mm on a plate of thickness `thickness_mm`.

    Examples
    --------
    >>> round(skip_distance_mm(20.0, 45.0), 6)
    40.0
    """
    t = positive_float("thickness_mm", thickness_mm)
    return 2.0 * t * math.tan(_angle(beam_angle_deg))


def leg_and_folded_depth(unfolded_depth_mm: Any, thickness_mm: float) -> tuple[np.ndarray, np.ndarray]:
    """Leg number and true depth in a plate for an unfolded depth ``s cos(theta)``.

    Leg 1 runs from the surface down to the back wall (depth = unfolded
    depth), leg 2 from the back wall up to the surface (depth = 2 T -
    unfolded depth), leg 3 down again, and so on. A point exactly on the back
    wall belongs to leg 2 (depth T), one exactly on the surface after a full
    skip to leg 3 (depth 0).

    Parameters
    ----------
    unfolded_depth_mm : array_like
        ``s cos(theta)`` in mm.
    thickness_mm : float
        Plate thickness T in mm.

    Returns
    -------
    leg : numpy.ndarray of float
        1, 2, 3 ...; NaN where the unfolded depth is negative or NaN.
    depth_mm : numpy.ndarray
        True depth below the scanning surface, in [0, T]; NaN likewise.

    Examples
    --------
    >>> leg, depth = leg_and_folded_depth([5.0, 25.0, 45.0], 20.0)
    >>> leg.tolist(), depth.tolist()
    ([1.0, 2.0, 3.0], [5.0, 15.0, 5.0])
    """
    t = positive_float("thickness_mm", thickness_mm)
    d = np.asarray(unfolded_depth_mm, dtype=np.float64)
    with np.errstate(invalid="ignore"):
        ok = np.isfinite(d) & (d >= 0)
        safe = np.where(ok, d, 0.0)
        k = np.floor(safe / t)
        rest = safe - k * t
        folded = np.where(k % 2 == 0, rest, t - rest)
    leg = np.where(ok, k + 1.0, np.nan)
    return leg, np.where(ok, folded, np.nan)


def surface_position_mm(
    scan_mm: Any,
    sound_path: Any,
    beam_angle_deg: float,
    *,
    index_point_offset_mm: float = 0.0,
    beam_direction: int = 1,
) -> np.ndarray:
    """Position along the scan axis of the point on the surface above a reflector.

    ``x = scan + index_point_offset + direction * s sin(theta)``: the encoder
    reads the position of its own reference on the probe, the beam leaves
    the wedge at the index point `index_point_offset_mm` further along the
    scan axis, and the beam points in +scan (`beam_direction` = 1) or -scan
    (-1) direction.

    Parameters
    ----------
    scan_mm : array_like
        Encoder positions along the scan axis, mm.
    sound_path : array_like
        Sound paths, mm (broadcast against `scan_mm`).
    beam_angle_deg : float
        Refracted beam angle, degrees.
    index_point_offset_mm : float, default 0
        Beam exit point minus encoder reference, along the scan axis, mm.
    beam_direction : {1, -1}, default 1
        Sense of the beam along the scan axis.

    Returns
    -------
    numpy.ndarray
        Surface position in mm.

    Examples
    --------
    >>> round(float(surface_position_mm(10.0, 20.0, 30.0, index_point_offset_mm=-2.0)), 6)
    18.0
    """
    if beam_direction not in (1, -1):
        raise ParameterError(f"`beam_direction` must be 1 or -1, got {beam_direction!r}")
    off = finite_float("index_point_offset_mm", index_point_offset_mm)
    sn = math.sin(_angle(beam_angle_deg))
    return np.asarray(scan_mm, dtype=np.float64) + off + beam_direction * sn * np.asarray(sound_path, dtype=np.float64)


@dataclass(frozen=True)
class PartConstants:
    """Velocity, beam angle, zero offset and time axis of a grid, and the one time -> depth mapping.

    Every conversion between the recorded time axis and positions in the part
    goes through the methods below (straight or angle beam in a flat part):
    ``s = c (t - t0) / 2`` (:func:`sound_path_mm`), depth ``s cos(theta)``,
    surface distance ``s sin(theta)``.

    Examples
    --------
    >>> pc = PartConstants(5920.0, 0.0, 0.5, np.array([0.0, 1.0]), 1.0)
    >>> round(float(pc.depth_mm(4.5)), 3), round(float(pc.time_us_at_depth(11.84)), 3)
    (11.84, 4.5)
    >>> round(pc.depth_per_us(), 3)        # mm of depth per us of pulse-echo time
    2.96
    """

    velocity_m_s: float
    beam_angle_deg: float
    zero_offset_us: float
    time_us: np.ndarray
    dt_us: float

    @property
    def mm_per_us(self) -> float:
        """Sound path per microsecond of pulse-echo time (half the velocity in mm/us)."""
        return self.velocity_m_s * 1e-3 / 2.0

    @property
    def cos_theta(self) -> float:
        return math.cos(math.radians(self.beam_angle_deg))

    @property
    def sin_theta(self) -> float:
        return math.sin(math.radians(self.beam_angle_deg))

    def depth_per_us(self) -> float:
        """Depth in mm per us of pulse-echo time (for windows relative to an event)."""
        return self.mm_per_us * self.cos_theta

    def sound_path_mm(self, time_us: Any, *, from_us: Any = None) -> Any:
        """Sound path in mm of echo times `time_us`, from pulse entry (or from the times `from_us`)."""
        t0 = self.zero_offset_us if from_us is None else from_us
        return self.mm_per_us * (time_us - t0)

    def depth_mm(self, time_us: Any, *, from_us: Any = None) -> Any:
        """Unfolded depth ``s cos(theta)`` in mm of echo times `time_us` (numbers, arrays or DataArrays)."""
        return self.sound_path_mm(time_us, from_us=from_us) * self.cos_theta

    def surface_distance_mm(self, time_us: Any, *, from_us: Any = None) -> Any:
        """Surface distance ``s sin(theta)`` in mm of echo times `time_us`."""
        return self.sound_path_mm(time_us, from_us=from_us) * self.sin_theta

    def time_us_at_depth(self, depth_mm: Any) -> Any:
        """Pulse-echo time in us of an echo from (unfolded) depth `depth_mm`: the inverse of :meth:`depth_mm`."""
        return self.zero_offset_us + depth_mm / self.depth_per_us()

    def record_depth_mm(self) -> tuple[float, float]:
        """Depths in mm of the first and the last recorded sample (the first may be negative)."""
        return float(self.depth_mm(self.time_us[0])), float(self.depth_mm(self.time_us[-1]))


def part_constants(grid: xr.Dataset) -> PartConstants:
    """Read the constants the geometry needs from a (validated) grid."""
    return PartConstants(
        velocity_m_s=float(grid_attr(grid, "velocity_m_s")),
        beam_angle_deg=float(grid_attr(grid, "beam_angle_deg", 0.0)),
        zero_offset_us=float(grid_attr(grid, "zero_offset_us", 0.0)),
        time_us=np.asarray(grid["time"].values, dtype=np.float64),
        dt_us=time_step_us(grid),
    )


def _axis(grid: xr.Dataset, values: np.ndarray, name: str, long_name: str) -> xr.DataArray:
    return xr.DataArray(
        values, dims=("time",), coords={"time": grid["time"]}, name=name,
        attrs={"units": "mm", "long_name": long_name},
    )


def sound_path_axis(grid: xr.Dataset) -> xr.DataArray:
    """Sound path in mm of every time sample of `grid`, from its calibration.

    Uses the grid's ``velocity_m_s`` and ``zero_offset_us`` (default 0).

    Examples
    --------
    >>> from ndtmap.grid.examples import example_grid
    >>> round(float(sound_path_axis(example_grid()).isel(time=200)), 3)  # t = 4 us
    11.84
    """
    grid = check_grid(grid)
    pc = part_constants(grid)
    return _axis(grid, pc.sound_path_mm(pc.time_us), "sound_path", "sound path along the beam")


def depth_axis(grid: xr.Dataset, *, fold: bool = False) -> xr.DataArray:
    """Depth in mm below the scanning surface of every time sample of `grid`.

    Parameters
    ----------
    grid : xarray.Dataset
        A scan grid (calibrated: ``velocity_m_s``, ``beam_angle_deg``,
        ``zero_offset_us``).
    fold : bool, default False
        False: unfolded depth ``s cos(theta)`` (a repeat echo or a later leg
        lies deeper than the plate). True: true depth in the plate of
        thickness ``part_thickness_mm`` (required), folded at the back wall
        and the surface (see :func:`leg_and_folded_depth`).

    Returns
    -------
    xarray.DataArray along ``time``
        Depth in mm (negative before pulse entry when unfolded; NaN there
        when folded).

    Raises
    ------
    ParameterError
        `fold` is True but the grid has no ``part_thickness_mm``.

    Examples
    --------
    >>> from ndtmap.grid.examples import example_grid
    >>> g = example_grid(beam_angle_deg=45.0)
    >>> round(float(depth_axis(g).isel(time=200)), 3)  # 11.84 mm / sqrt(2)
    8.372
    """
    grid = check_grid(grid)
    pc = part_constants(grid)
    depth = pc.depth_mm(pc.time_us)
    if fold:
        thickness = grid.attrs.get("part_thickness_mm")
        if thickness is None:
            raise ParameterError(
                "`fold` needs the grid attribute `part_thickness_mm`, which is missing; set it or use fold=False"
            )
        _, depth = leg_and_folded_depth(depth, float(thickness))
    return _axis(grid, depth, "depth", "depth below the scanning surface" + (" (folded)" if fold else ""))


def surface_distance_axis(grid: xr.Dataset) -> xr.DataArray:
    """Surface distance ``s sin(theta)`` in mm of every time sample of `grid`.

    Examples
    --------
    >>> from ndtmap.grid.examples import example_grid
    >>> g = example_grid(beam_angle_deg=30.0)
    >>> round(float(surface_distance_axis(g).isel(time=200)), 3)
    5.92
    """
    grid = check_grid(grid)
    pc = part_constants(grid)
    return _axis(grid, pc.surface_distance_mm(pc.time_us), "surface_distance",
                 "surface distance from the beam exit point")
