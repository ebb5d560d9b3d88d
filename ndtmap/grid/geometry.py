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

Where the echo comes from in the part (grid format version 2): a plate or a
cylinder, the beam travelling in the skew direction on the scanned surface
(:class:`PartGeometry`, :func:`part_geometry`). :func:`reflector_position`
places echoes at their reflectors: on a plate and for an axial beam on a
cylinder by the legs above; for a circumferential or radial beam on a
cylinder on the exact chords across the wall (:func:`chord_path`: law of
cosines, incidence by the law of sines, the beam from outside missing the
bore beyond ``asin(d / D)``). :func:`echo_positions` does the same from a
grid's echo times.

Units: times in us, lengths in mm, velocities in m/s, angles in degrees.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
import xarray as xr

from ndtmap._shared.validate import finite_float, float_in_range, nonnegative_float, one_of, positive_float
from ndtmap.errors import ParameterError, ParameterTypeError
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
    "PartGeometry",
    "part_geometry",
    "ChordPath",
    "chord_path",
    "ReflectorPosition",
    "reflector_position",
    "echo_positions",
    "plate_sound_path_mm",
    "chord_sound_path_mm",
    "bore_limit_angle_deg",
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


# --------------------------------------------------------------------------- the part: plate or cylinder


@dataclass(frozen=True)
class PartGeometry:
    """The part and the beam direction a grid describes (grid format version 2).

    Parameters
    ----------
    beam_angle_deg : float
        Refracted beam angle in the part, from the surface normal (0: straight beam).
    beam_skew_deg : float, default 0
        Direction of travel on the scanned surface: 0 toward +scan, 90 toward
        +index, 180 toward -scan, 270 toward -index.
    shape : {'plate', 'cylinder'}, default 'plate'
    thickness_mm : float, optional
        Plate thickness (needed for legs on a plate). On a cylinder it is the
        wall thickness ``(D - d) / 2`` and is not given.
    outer_diameter_mm, inner_diameter_mm : float, optional
        Cylinder diameters; ``inner_diameter_mm`` = 0 for a solid shaft.
    scanned_surface : {'outer', 'inner'}, default 'outer'
        The cylinder surface the probe is on ('inner': in the bore).
    index_units : {'mm', 'deg'}, default 'mm'
        Units of the grid's index coordinate. On a cylinder, 'mm' is mm of
        arc on the scanned surface, 'deg' the angular position; both grow in
        the +index direction.

    Raises
    ------
    ParameterError
        For values the grid format refuses (see docs/grid-format.md).

    Examples
    --------
    >>> g = PartGeometry(45.0, 90.0, "cylinder", outer_diameter_mm=160.0,
    ...                  inner_diameter_mm=60.0, scanned_surface="inner", index_units="deg")
    >>> g.beam_path, g.scanned_radius_mm, g.wall_thickness_mm
    ('circumferential', 30.0, 50.0)
    """

    beam_angle_deg: float
    beam_skew_deg: float = 0.0
    shape: str = "plate"
    thickness_mm: float | None = None
    outer_diameter_mm: float | None = None
    inner_diameter_mm: float = 0.0
    scanned_surface: str = "outer"
    index_units: str = "mm"

    def __post_init__(self) -> None:
        _angle(self.beam_angle_deg)
        float_in_range("beam_skew_deg", self.beam_skew_deg, 0.0, 360.0, high_inclusive=False, unit="deg")
        one_of("shape", self.shape, ("plate", "cylinder"))
        one_of("index_units", self.index_units, ("mm", "deg"))
        if self.thickness_mm is not None:
            positive_float("thickness_mm", self.thickness_mm)
        if self.shape == "plate":
            if self.index_units != "mm":
                raise ParameterError("`index_units` 'deg' needs shape='cylinder'; a plate's index is in mm")
            return
        one_of("scanned_surface", self.scanned_surface, ("outer", "inner"))
        if self.outer_diameter_mm is None:
            raise ParameterError("a cylinder needs `outer_diameter_mm`; got None")
        outer = positive_float("outer_diameter_mm", self.outer_diameter_mm)
        inner = nonnegative_float("inner_diameter_mm", self.inner_diameter_mm)
        if inner >= outer:
            raise ParameterError(
                f"`inner_diameter_mm` ({inner:g}) must be smaller than `outer_diameter_mm` ({outer:g})"
            )
        if self.scanned_surface == "inner" and inner == 0:
            raise ParameterError("`scanned_surface` 'inner' needs a bore: `inner_diameter_mm` is 0")
        snapped = [a for a in (0.0, 90.0, 180.0, 270.0) if abs(float(self.beam_skew_deg) - a) <= 1e-6]
        if snapped:
            object.__setattr__(self, "beam_skew_deg", snapped[0])
        elif self.beam_angle_deg > 0:
            raise ParameterError(
                f"`beam_skew_deg` is {self.beam_skew_deg:g}; an angle beam on a cylinder travels axially "
                "(0 or 180) or circumferentially (90 or 270): skewed helical paths are not modelled"
            )

    @property
    def beam_path(self) -> str:
        """'plate', 'axial', 'circumferential' or 'radial' (a straight beam on a cylinder)."""
        if self.shape == "plate":
            return "plate"
        if self.beam_angle_deg == 0:
            return "radial"
        return "circumferential" if self.beam_skew_deg in (90.0, 270.0) else "axial"

    @property
    def outer_radius_mm(self) -> float:
        return float(self.outer_diameter_mm or math.nan) / 2.0

    @property
    def inner_radius_mm(self) -> float:
        return float(self.inner_diameter_mm) / 2.0

    @property
    def scanned_radius_mm(self) -> float:
        """Radius of the scanned surface (NaN on a plate)."""
        if self.shape == "plate":
            return math.nan
        return self.inner_radius_mm if self.scanned_surface == "inner" else self.outer_radius_mm

    @property
    def wall_thickness_mm(self) -> float | None:
        """Radial wall ``(D - d) / 2`` of a cylinder (the diameter of a solid shaft); the plate thickness."""
        if self.shape == "plate":
            return self.thickness_mm
        if self.inner_diameter_mm == 0:
            return float(self.outer_diameter_mm)  # type: ignore[arg-type]
        return self.outer_radius_mm - self.inner_radius_mm


def part_geometry(grid: xr.Dataset) -> PartGeometry:
    """Read the part's shape and the beam direction from a (valid) grid; version-1 grids are plates.

    Examples
    --------
    >>> from ndtmap.grid.examples import example_grid
    >>> part_geometry(example_grid(beam_angle_deg=45.0)).beam_path
    'plate'
    """
    grid = check_grid(grid)
    attrs = grid.attrs
    shape = str(attrs.get("part_shape", "plate"))
    thickness = grid_attr(grid, "part_thickness_mm")
    cylinder = shape == "cylinder"
    return PartGeometry(
        beam_angle_deg=float(grid_attr(grid, "beam_angle_deg", 0.0)),
        beam_skew_deg=float(grid_attr(grid, "beam_skew_deg", 0.0)),
        shape=shape,
        thickness_mm=None if (cylinder or thickness is None) else float(thickness),
        outer_diameter_mm=float(grid_attr(grid, "outer_diameter_mm")) if cylinder else None,
        inner_diameter_mm=float(grid_attr(grid, "inner_diameter_mm", 0.0)) if cylinder else 0.0,
        scanned_surface=str(attrs.get("scanned_surface", "outer")),
        index_units="deg" if grid["index"].attrs.get("units") == "deg" else "mm",
    )


# --------------------------------------------------------------------------- rays across a cylinder's wall


@dataclass(frozen=True)
class ChordPath:
    """Where a beam in a cylinder's cross-section is after a sound path: the result of :func:`chord_path`.

    Arrays have the shape of the sound paths; NaN where the sound path is negative or NaN.

    Attributes
    ----------
    depth_mm : numpy.ndarray
        Radial depth below the scanned surface (``R - rho`` from outside, ``rho - r`` from the bore).
    radius_mm : numpy.ndarray
        Distance ``rho`` of the point from the cylinder's axis.
    angle_deg : numpy.ndarray
        Angle travelled round the axis from the beam exit point, >= 0, in the beam's direction.
    leg : numpy.ndarray
        1 from the scanned surface to the opposite surface, 2 back, and so on. When the beam cannot
        reach the opposite surface, each leg is a chord from the outer surface back to the outer surface.
    leg_ends_on : numpy.ndarray of str
        'outer' or 'inner': the surface at the end of the current leg.
    incidence_deg : numpy.ndarray
        Angle of incidence (from the surface normal) at the surface at the end of the current leg.
    reaches_opposite : bool
        Whether the beam reaches the opposite surface at all (always from the bore; from outside only
        if ``R sin(theta) <= r``).
    leg_mm, leg_angle_deg : float
        Sound path and angle round the axis of one leg.
    deepest_mm : float
        Greatest radial depth below the scanned surface the beam reaches.
    """

    depth_mm: np.ndarray
    radius_mm: np.ndarray
    angle_deg: np.ndarray
    leg: np.ndarray
    leg_ends_on: np.ndarray
    incidence_deg: np.ndarray
    reaches_opposite: bool
    leg_mm: float
    leg_angle_deg: float
    deepest_mm: float


def chord_path(
    sound_path: Any,
    beam_angle_deg: float,
    outer_diameter_mm: float,
    inner_diameter_mm: float,
    scanned_surface: str,
) -> ChordPath:
    """Follow a circumferential (or radial) beam across a cylinder's wall on its exact straight chords.

    In the cross-section the beam is a straight ray leaving the scanned
    surface (radius ``rho0``) at the refracted angle `theta` from the radial
    direction. Its distance from the axis at sound path ``L`` follows from the
    law of cosines, ``rho^2 = rho0^2 + L^2 +/- 2 rho0 L cos(theta)`` (+ from
    the bore, - from outside), and its *impact parameter* ``p = rho0
    sin(theta)`` (the distance of the ray's line from the axis) is kept at
    every specular reflection, so the angle of incidence at radius ``rho`` is
    ``asin(p / rho)`` (law of sines). From the bore the ray reaches the outer
    surface at ``L = sqrt(R^2 - p^2) - r cos(theta)``. From outside it reaches
    the bore only if ``p = R sin(theta) <= r``; otherwise it skims past the
    bore to the outer surface again after the chord ``2 R cos(theta)``,
    ``180 - 2 theta`` degrees further round, no deeper than ``R - p``.
    Mode conversion and beam spread are not modelled: this is the path of the
    beam axis.

    Parameters
    ----------
    sound_path : array_like
        One-way sound paths in mm.
    beam_angle_deg : float
        Refracted angle at the scanned surface, from the radial direction.
    outer_diameter_mm, inner_diameter_mm : float
        Diameters D and d (d = 0: solid shaft).
    scanned_surface : {'outer', 'inner'}
        Where the probe is.

    Returns
    -------
    ChordPath

    Raises
    ------
    ParameterError
        For an impossible cylinder or a probe in a bore that does not exist.

    Examples
    --------
    From a 60 mm bore in a 160 mm shaft a 45 degree shear beam reaches the
    outer surface after 55.9 mm, 29.6 degrees further round, at 15.4 degrees
    incidence (a flat plate of the same 50 mm wall would say 70.7 mm):

    >>> c = chord_path(55.92, 45.0, 160.0, 60.0, "inner")
    >>> round(c.leg_mm, 2), round(c.leg_angle_deg, 2), round(float(c.incidence_deg), 2)
    (55.92, 29.62, 15.38)
    >>> from_outside = chord_path(10.0, 45.0, 160.0, 60.0, "outer")
    >>> from_outside.reaches_opposite, round(from_outside.deepest_mm, 2)  # 80 sin 45 = 56.6 > 30
    (False, 23.43)
    """
    geo = PartGeometry(beam_angle_deg, 90.0, "cylinder", outer_diameter_mm=outer_diameter_mm,
                       inner_diameter_mm=inner_diameter_mm, scanned_surface=scanned_surface)
    big, small = geo.outer_radius_mm, geo.inner_radius_mm
    from_bore = scanned_surface == "inner"
    p = (small if from_bore else big) * math.sin(math.radians(beam_angle_deg))
    d_out = math.sqrt(max(big * big - p * p, 0.0))
    reaches = small > 0 and p <= small
    s = np.asarray(sound_path, dtype=np.float64)
    with np.errstate(invalid="ignore"):
        ok = np.isfinite(s) & (s >= 0)
        s = np.where(ok, s, 0.0)
        if reaches:
            d_in = math.sqrt(max(small * small - p * p, 0.0))
            leg_mm = d_out - d_in
            k = np.floor(s / leg_mm)
            u = s - k * leg_mm
            outward = (k % 2 == 0) if from_bore else (k % 2 == 1)
            t = np.where(outward, d_in + u, d_out - u)
            within = np.where(outward, np.arctan2(t, p) - math.atan2(d_in, p), math.atan2(d_out, p) - np.arctan2(t, p))
            leg_angle = math.atan2(d_out, p) - math.atan2(d_in, p)
            ends_outer = outward
        else:
            leg_mm = 2.0 * d_out
            k = np.floor(s / leg_mm)
            t = s - k * leg_mm - d_out
            within = np.arctan2(t, p) - math.atan2(-d_out, p)
            leg_angle = math.atan2(d_out, p) - math.atan2(-d_out, p)
            ends_outer = np.ones_like(s, dtype=bool)
        within = np.clip(within, 0.0, leg_angle)  # rounding must not step back past a leg's ends
        rho = np.hypot(p, t)
        depth = rho - small if from_bore else big - rho
        incidence = np.degrees(np.arcsin(np.clip(p / np.where(ends_outer, big, small if small > 0 else big), 0, 1)))
    nan = np.where(ok, 0.0, np.nan)
    deepest = (big - small) if (reaches or from_bore) else big - p
    return ChordPath(
        depth_mm=depth + nan, radius_mm=rho + nan, angle_deg=np.degrees(k * leg_angle + within) + nan,
        leg=k + 1.0 + nan, leg_ends_on=np.where(ends_outer, "outer", "inner"), incidence_deg=incidence + nan,
        reaches_opposite=bool(reaches), leg_mm=float(leg_mm), leg_angle_deg=math.degrees(leg_angle),
        deepest_mm=float(deepest),
    )


# --------------------------------------------------------------------------- echoes placed at the reflector


@dataclass(frozen=True)
class ReflectorPosition:
    """Where in the part an echo comes from: the result of :func:`reflector_position`.

    Arrays broadcast from the probe positions and sound paths; NaN where the
    sound path is negative or NaN (or, on a plate, where a leg needs a thickness
    that is not known).

    Attributes
    ----------
    scan_mm : numpy.ndarray
        Position along the scan axis (the axial position on a cylinder).
    index_mm : numpy.ndarray
        Position along the index axis; on a cylinder the arc on the *scanned*
        surface at the reflector's angle (the units of an index in mm).
    index_deg : numpy.ndarray
        Angular position of the reflector on a cylinder, degrees (NaN on a plate).
    depth_mm : numpy.ndarray
        Depth below the scanned surface (radial on a cylinder), folded at the surfaces.
    leg : numpy.ndarray
        Leg of the V path (plate, axial beam) or of the chord path (circumferential beam): 1, 2 ...
    radius_mm : numpy.ndarray
        Distance of the reflector from the cylinder's axis (NaN on a plate).
    arc_mm : numpy.ndarray
        ``index_deg`` as arc length at the reflector's radius, mm (NaN on a plate): lengths round
        the circumference at the reflector are differences of it.
    sound_path_mm : numpy.ndarray
        The sound paths, as given.
    toward : numpy.ndarray of str
        The surface the current leg runs to: 'opposite' (the back wall; the outer surface from the bore,
        the bore from outside) or 'scanned'; '' where the sound path is invalid.
    incidence_deg : numpy.ndarray
        Angle of incidence (from the normal) at that surface: the beam angle on a plate or along the
        axis, ``asin(p / radius)`` on a chord.
    reaches_opposite : bool
        Whether the beam reaches the surface opposite the scanned one (see :func:`chord_path`).
    """

    scan_mm: np.ndarray
    index_mm: np.ndarray
    index_deg: np.ndarray
    depth_mm: np.ndarray
    leg: np.ndarray
    radius_mm: np.ndarray
    arc_mm: np.ndarray
    sound_path_mm: np.ndarray
    toward: np.ndarray
    incidence_deg: np.ndarray
    reaches_opposite: bool


def _toward(leg: np.ndarray, opposite: np.ndarray) -> np.ndarray:
    return np.where(np.isfinite(leg), np.where(opposite, "opposite", "scanned"), "")


def _plate_depth(geo: PartGeometry, unfolded: np.ndarray, thickness: float | None) -> tuple[np.ndarray, np.ndarray]:
    if geo.beam_angle_deg == 0 and thickness is None:
        return np.where(unfolded >= 0, 1.0, np.nan), np.where(unfolded >= 0, unfolded, np.nan)
    if thickness is None:
        raise ParameterError(
            "placing angle-beam echoes on a plate needs its thickness: set the grid attribute "
            "`part_thickness_mm` (or PartGeometry.thickness_mm)"
        )
    return leg_and_folded_depth(unfolded, thickness)


def _axial_on_cylinder(geo: PartGeometry, depth: np.ndarray, probe_deg: np.ndarray) -> tuple[np.ndarray, ...]:
    """Radius and angle of points in the meridional plane of an axial beam (depth folded over the strip)."""
    if geo.scanned_surface == "inner":
        return geo.inner_radius_mm + depth, probe_deg, depth
    signed = geo.outer_radius_mm - depth  # a solid shaft's strip runs through the axis to the far side
    radial_depth = geo.outer_radius_mm - np.abs(signed)
    return np.abs(signed), np.where(signed < 0, probe_deg + 180.0, probe_deg), radial_depth


def reflector_position(scan_mm: Any, index: Any, sound_path: Any, geometry: PartGeometry) -> ReflectorPosition:
    """Place echoes at their reflectors: position, depth below the scanned surface and leg.

    * **Plate**: the reflector lies ``s sin(theta)`` from the beam exit point
      in the skew direction (``+scan`` at skew 0, ``+index`` at 90 ...), at
      the depth ``s cos(theta)`` folded at the back wall and the surface
      (:func:`leg_and_folded_depth`).
    * **Cylinder, axial beam** (skew 0/180): the beam axis stays in the
      meridional plane through the probe, where the wall is a strip of width
      ``(D - d)/2`` (the full diameter through the axis for a solid shaft):
      the plate model with that thickness is exact for the beam axis; the
      approximation is that the beam's width across the curved surface (its
      focusing or defocusing by the curvature) is ignored.
    * **Cylinder, circumferential beam** (skew 90/270) or straight (radial)
      beam: the exact chord path of :func:`chord_path`.

    Parameters
    ----------
    scan_mm : array_like
        Probe positions (beam exit point) along the scan axis, mm.
    index : array_like
        Probe positions along the index axis, in the grid's index units
        (`geometry.index_units`: mm, or degrees on a rotary index).
    sound_path : array_like
        One-way sound paths in mm (broadcast with the positions).
    geometry : PartGeometry
        The part and beam, e.g. ``part_geometry(grid)``.

    Returns
    -------
    ReflectorPosition

    Raises
    ------
    ParameterError
        An angle beam on a plate without a thickness.

    Examples
    --------
    A 45 degree beam in a 20 mm plate, skew 0: an echo at 35.36 mm sound path
    comes from 25 mm ahead of the probe, in the second leg, 15 mm deep
    (Krautkramer, angle-beam testing):

    >>> plate = PartGeometry(45.0, 0.0, thickness_mm=20.0)
    >>> r = reflector_position(100.0, 50.0, 35.355339, plate)
    >>> [round(float(v), 2) for v in (r.scan_mm, r.index_mm, r.depth_mm, r.leg)]
    [125.0, 50.0, 15.0, 2.0]

    From a 60 mm bore in a 160 mm shaft, probe at 10 degrees, beam toward +index:

    >>> shaft = PartGeometry(45.0, 90.0, "cylinder", outer_diameter_mm=160.0, inner_diameter_mm=60.0,
    ...                      scanned_surface="inner", index_units="deg")
    >>> r = reflector_position(0.0, 10.0, 55.923, shaft)
    >>> [round(float(v), 1) for v in (r.index_deg, r.depth_mm, r.radius_mm, r.leg)]
    [39.6, 50.0, 80.0, 1.0]
    """
    if not isinstance(geometry, PartGeometry):
        raise ParameterTypeError(f"`geometry` must be a PartGeometry, got {type(geometry).__name__}")
    scan, idx, s = np.broadcast_arrays(*(np.asarray(v, dtype=np.float64) for v in (scan_mm, index, sound_path)))
    theta = math.radians(geometry.beam_angle_deg)
    skew = math.radians(geometry.beam_skew_deg)
    path = geometry.beam_path
    with np.errstate(invalid="ignore"):
        unfolded = np.where(s >= 0, s * math.cos(theta), np.nan)
    nan = np.full(s.shape, np.nan)
    if path == "plate":
        leg, depth = _plate_depth(geometry, unfolded, geometry.thickness_mm)
        ahead = s * math.sin(theta)
        return ReflectorPosition(scan + ahead * round(math.cos(skew), 15), idx + ahead * round(math.sin(skew), 15),
                                 nan, depth, leg, nan, nan, s, _toward(leg, leg % 2 == 1),
                                 np.where(np.isfinite(leg), geometry.beam_angle_deg, np.nan), True)
    r_scan = geometry.scanned_radius_mm
    probe_deg = idx if geometry.index_units == "deg" else np.degrees(idx / r_scan)
    if path == "axial":
        leg, depth = leg_and_folded_depth(unfolded, geometry.wall_thickness_mm)  # type: ignore[arg-type]
        radius, angle, depth = _axial_on_cylinder(geometry, depth, probe_deg)
        axial = scan + s * math.sin(theta) * round(math.cos(skew), 15)
        reaches = True
        toward = _toward(leg, leg % 2 == 1)
        incidence = np.where(np.isfinite(leg), geometry.beam_angle_deg, np.nan)
    else:
        chord = chord_path(s, geometry.beam_angle_deg, geometry.outer_diameter_mm,  # type: ignore[arg-type]
                           geometry.inner_diameter_mm, geometry.scanned_surface)
        sense = -1.0 if geometry.beam_skew_deg == 270.0 else 1.0
        radius, depth, leg, reaches = chord.radius_mm, chord.depth_mm, chord.leg, chord.reaches_opposite
        angle = probe_deg + sense * chord.angle_deg
        axial = scan + 0.0 * s
        far = "outer" if geometry.scanned_surface == "inner" else "inner"
        toward = _toward(leg, chord.leg_ends_on == far)
        incidence = chord.incidence_deg
    index_out = angle if geometry.index_units == "deg" else np.radians(angle) * r_scan
    return ReflectorPosition(axial, index_out, angle, depth, leg, radius, np.radians(angle) * radius, s,
                             toward, incidence, reaches)


def echo_positions(grid: xr.Dataset, scan_mm: Any, index: Any, time_us: Any) -> ReflectorPosition:
    """Place echoes found in `grid` at their reflectors: the grid's calibration, then :func:`reflector_position`.

    The sound path comes from the grid's velocity and zero offset
    (:class:`PartConstants`), the part and the beam from its attributes
    (:func:`part_geometry`).

    Parameters
    ----------
    grid : xarray.Dataset
        A valid scan grid.
    scan_mm, index : array_like
        Probe positions of the echoes (index in the grid's index units).
    time_us : array_like
        Echo times on the grid's time axis, us.

    Returns
    -------
    ReflectorPosition

    Examples
    --------
    >>> from ndtmap.grid.examples import example_grid
    >>> g = example_grid(beam_angle_deg=45.0).assign_attrs(part_thickness_mm=5.0)
    >>> r = echo_positions(g, 2.0, 0.0, 4.0)  # 4 us: 11.84 mm of sound path, 8.37 mm unfolded: 2nd leg
    >>> [round(float(v), 3) for v in (r.scan_mm, r.depth_mm, r.leg)]
    [10.372, 1.628, 2.0]
    """
    grid = check_grid(grid)
    path = part_constants(grid).sound_path_mm(np.asarray(time_us, dtype=np.float64))
    return reflector_position(scan_mm, index, path, part_geometry(grid))


def plate_sound_path_mm(depth_mm: Any, leg: Any, thickness_mm: float, beam_angle_deg: float) -> np.ndarray:
    """Sound path in mm to a reflector at `depth_mm` in leg `leg` of a plate: the inverse of the folding.

    ``s = ((leg - 1) T + d') / cos(theta)`` with ``d' = d`` in odd legs and
    ``T - d`` in even legs.

    Examples
    --------
    >>> round(float(plate_sound_path_mm(15.0, 2, 20.0, 45.0)), 4)  # 25 mm unfolded at 45 deg
    35.3553
    """
    t = positive_float("thickness_mm", thickness_mm)
    c = math.cos(_angle(beam_angle_deg))
    d = np.asarray(depth_mm, dtype=np.float64)
    k = np.asarray(leg, dtype=np.float64)
    unfolded = (k - 1.0) * t + np.where(k % 2 == 1, d, t - d)
    return unfolded / c


def chord_sound_path_mm(
    angle_deg: Any,
    beam_angle_deg: float,
    outer_diameter_mm: float,
    inner_diameter_mm: float,
    scanned_surface: str,
) -> np.ndarray:
    """Sound path in mm at which a circumferential beam has travelled `angle_deg` round the axis.

    The inverse of ``chord_path(...).angle_deg``, which grows monotonically
    along the path of an angle beam.

    Raises
    ------
    ParameterError
        For a straight (radial) beam, which does not travel round the axis.

    Examples
    --------
    >>> round(float(chord_sound_path_mm(29.6232, 45.0, 160.0, 60.0, "inner")), 3)
    55.923
    """
    if float(beam_angle_deg) == 0.0:
        raise ParameterError("`beam_angle_deg` is 0: a radial beam does not travel round the axis")
    base = chord_path(0.0, beam_angle_deg, outer_diameter_mm, inner_diameter_mm, scanned_surface)
    big, small = outer_diameter_mm / 2.0, inner_diameter_mm / 2.0
    p = (small if scanned_surface == "inner" else big) * math.sin(math.radians(beam_angle_deg))
    d_out = math.sqrt(big * big - p * p)
    a = np.radians(np.asarray(angle_deg, dtype=np.float64))
    span = math.radians(base.leg_angle_deg)
    with np.errstate(invalid="ignore"):
        k = np.floor(a / span)
        phi = a - k * span
        if base.reaches_opposite:
            d_in = math.sqrt(max(small * small - p * p, 0.0))
            outward = (k % 2 == 0) if scanned_surface == "inner" else (k % 2 == 1)
            u = np.where(outward, p * np.tan(math.atan2(d_in, p) + phi) - d_in,
                         d_out - p * np.tan(math.atan2(d_out, p) - phi))
        else:
            u = p * np.tan(math.atan2(-d_out, p) + phi) + d_out
    return np.where(a >= 0, k * base.leg_mm + u, np.nan)


def bore_limit_angle_deg(outer_diameter_mm: float, inner_diameter_mm: float) -> float:
    """Largest refracted angle at which a beam from the outer surface of a tube still reaches the bore.

    ``asin(d / D)``: beyond it the chord passes the bore by (:func:`chord_path`).

    Examples
    --------
    >>> round(bore_limit_angle_deg(160.0, 60.0), 2)   # a beam of 45 deg from outside misses this bore
    22.02
    >>> bore_limit_angle_deg(100.0, 0.0)              # a solid shaft has no bore to reach
    0.0
    """
    outer = positive_float("outer_diameter_mm", outer_diameter_mm)
    inner = nonnegative_float("inner_diameter_mm", inner_diameter_mm)
    if inner >= outer:
        raise ParameterError(f"`inner_diameter_mm` ({inner:g}) must be smaller than `outer_diameter_mm` ({outer:g})")
    return math.degrees(math.asin(inner / outer))
