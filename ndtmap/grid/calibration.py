"""Calibration of the time base: sound velocity and zero offset.

The recorded time axis becomes a depth axis through two numbers: the
velocity ``c`` of the wave mode in the part and the zero offset ``t0`` (the
time of pulse entry into the part: wedge or delay-line delay, electronics).
A reflector at sound path ``s`` echoes at ``t = t0 + 2 s / c``.

* One echo from a known sound path gives ``c`` when ``t0`` is known
  (:func:`velocity_from_thickness`) or ``t0`` when ``c`` is known
  (:func:`zero_offset_from_echo`).
* Two echoes from known sound paths give both (:func:`two_point_calibration`):
  ``c = 2 (s2 - s1) / (t2 - t1)``, ``t0 = t1 - 2 s1 / c``.
* Successive back-wall echoes are spaced ``2 T / c`` apart whatever the zero
  offset (the multiple-echo method): :func:`thickness_from_echo_spacing` and
  :func:`velocity_from_echo_spacing` fit that spacing by least squares over
  all echoes given.

:func:`calibrate` writes the values into a grid (a new one), with a JSON
``calibration`` record and a provenance step. Times in us, lengths in mm,
velocities in m/s.
"""

from __future__ import annotations

import datetime as _dt
import json
import math
from collections.abc import Sequence
from typing import Any, NamedTuple

import numpy as np
import xarray as xr

from ndtmap._shared.validate import finite_float, float_in_range
from ndtmap.errors import CalibrationError, NdtmapError
from ndtmap.grid.geometry import sound_path_mm
from ndtmap.grid.provenance import jsonable, with_step
from ndtmap.grid.schema import check_grid, grid_attr

__all__ = [
    "TwoPointCalibration",
    "velocity_from_thickness",
    "zero_offset_from_echo",
    "two_point_calibration",
    "thickness_from_echo_spacing",
    "velocity_from_echo_spacing",
    "calibrate",
]

# the grid format's plausibility range for velocities (m/s)
_V_LOW, _V_HIGH = 100.0, 20000.0


class TwoPointCalibration(NamedTuple):
    """Result of :func:`two_point_calibration`."""

    velocity_m_s: float
    zero_offset_us: float


def _number(name: str, value: Any) -> float:
    try:
        return finite_float(name, value)
    except NdtmapError as exc:
        raise CalibrationError(str(exc)) from None


def _positive(name: str, value: Any, unit: str) -> float:
    v = _number(name, value)
    if v <= 0:
        raise CalibrationError(f"`{name}` must be greater than 0 {unit}, got {value!r}")
    return v


def _check_velocity(v: float, how: str) -> float:
    if not _V_LOW < v <= _V_HIGH:
        raise CalibrationError(
            f"{how} gives a velocity of {v:g} m/s, outside the plausible range ({_V_LOW:g}, {_V_HIGH:g}] m/s; "
            "check the times (us) and distances (mm)"
        )
    return v


def _path(depth_mm: float, beam_angle_deg: float) -> float:
    theta = float_in_range("beam_angle_deg", beam_angle_deg, 0.0, 90.0, high_inclusive=False, unit="deg")
    return depth_mm / math.cos(math.radians(theta))


def velocity_from_thickness(thickness_mm: float, echo_time_us: float, *, zero_offset_us: float = 0.0) -> float:
    """Velocity in m/s from the back-wall echo of a known thickness.

    ``c = 2 T / (t - t0)``.

    Parameters
    ----------
    thickness_mm : float
        Known thickness (one-way sound path), mm.
    echo_time_us : float
        Time of its echo on the recorded axis, us.
    zero_offset_us : float, default 0
        Zero offset, us.

    Returns
    -------
    float
        Velocity, m/s.

    Raises
    ------
    CalibrationError
        Echo not after the zero offset, thickness not > 0, implausible result.

    Examples
    --------
    >>> round(velocity_from_thickness(25.0, 8.446), 0)  # 25 mm of steel
    5920.0
    """
    t = _positive("thickness_mm", thickness_mm, "mm")
    te = _number("echo_time_us", echo_time_us)
    t0 = _number("zero_offset_us", zero_offset_us)
    if te <= t0:
        raise CalibrationError(
            f"`echo_time_us` ({te:g} us) must be later than `zero_offset_us` ({t0:g} us)"
        )
    return _check_velocity(2.0 * t / (te - t0) * 1e3, "the thickness and echo time")


def zero_offset_from_echo(depth_mm: float, echo_time_us: float, velocity_m_s: float, *,
                          beam_angle_deg: float = 0.0) -> float:
    """Zero offset in us from one echo of a known depth and a known velocity.

    ``t0 = t - 2 s / c`` with ``s = depth / cos(theta)``.

    Examples
    --------
    >>> round(zero_offset_from_echo(25.0, 9.446, 5920.0), 3)
    1.0
    """
    s = _path(_number("depth_mm", depth_mm), beam_angle_deg)
    te = _number("echo_time_us", echo_time_us)
    v = _check_velocity(_positive("velocity_m_s", velocity_m_s, "m/s"), "`velocity_m_s`")
    return te - 2.0 * s / (v * 1e-3)


def two_point_calibration(depth1_mm: float, time1_us: float, depth2_mm: float, time2_us: float, *,
                          beam_angle_deg: float = 0.0) -> TwoPointCalibration:
    """Velocity and zero offset together from two echoes of known depth.

    ``c = 2 (s2 - s1) / (t2 - t1)`` and ``t0 = t1 - 2 s1 / c``, with the
    sound paths ``s = depth / cos(theta)`` (for an angle beam on a
    calibration block pass the sound paths as depths with
    ``beam_angle_deg=0``).

    Parameters
    ----------
    depth1_mm, depth2_mm : float
        Depths of the two reflectors, mm (different).
    time1_us, time2_us : float
        Their echo times, us; the deeper reflector must echo later.
    beam_angle_deg : float, default 0
        Beam angle used to turn depths into sound paths.

    Returns
    -------
    TwoPointCalibration
        ``(velocity_m_s, zero_offset_us)``.

    Raises
    ------
    CalibrationError
        Equal depths, equal times, times in the wrong order, an implausible
        velocity.

    Examples
    --------
    >>> cal = two_point_calibration(25.0, 9.446, 50.0, 17.892)
    >>> round(cal.velocity_m_s), round(cal.zero_offset_us, 3)
    (5920, 1.0)
    """
    d1, d2 = _number("depth1_mm", depth1_mm), _number("depth2_mm", depth2_mm)
    t1, t2 = _number("time1_us", time1_us), _number("time2_us", time2_us)
    if d1 == d2:
        raise CalibrationError(f"`depth1_mm` and `depth2_mm` must differ, both are {d1:g} mm")
    if t1 == t2:
        raise CalibrationError(f"`time1_us` and `time2_us` must differ, both are {t1:g} us")
    if (d2 - d1) * (t2 - t1) < 0:
        raise CalibrationError(
            f"the deeper reflector must echo later: depths {d1:g}, {d2:g} mm but times {t1:g}, {t2:g} us "
            "(are the two times swapped?)"
        )
    s1, s2 = _path(d1, beam_angle_deg), _path(d2, beam_angle_deg)
    v = _check_velocity(2.0 * (s2 - s1) / (t2 - t1) * 1e3, "the two echoes")
    return TwoPointCalibration(v, t1 - 2.0 * s1 / (v * 1e-3))


def _echo_spacing_us(echo_times_us: Sequence[float], echo_numbers: Sequence[int] | None) -> float:
    try:
        t = np.asarray(echo_times_us, dtype=np.float64).ravel()
    except (TypeError, ValueError):
        raise CalibrationError(f"`echo_times_us` must be a sequence of numbers, got {echo_times_us!r}") from None
    if t.size < 2:
        raise CalibrationError(f"`echo_times_us` needs at least two back-wall echoes, got {t.size}")
    if not np.all(np.isfinite(t)):
        raise CalibrationError(f"`echo_times_us` must be finite, got {t.tolist()}")
    if echo_numbers is None:
        n = np.arange(1, t.size + 1, dtype=np.float64)
    else:
        n = np.asarray(echo_numbers, dtype=np.float64).ravel()
        if n.size != t.size or np.any(n != np.round(n)) or np.any(n < 1) or np.any(np.diff(n) <= 0):
            raise CalibrationError(
                f"`echo_numbers` must be increasing whole numbers >= 1, one per echo time, got {list(echo_numbers)}"
            )
    if np.any(np.diff(t) <= 0):
        raise CalibrationError(f"`echo_times_us` must increase from echo to echo, got {t.tolist()}")
    slope = float(np.polyfit(n, t, 1)[0])  # least-squares spacing per echo order
    if slope <= 0:  # pragma: no cover - excluded by the increasing check
        raise CalibrationError("the echo times give no positive spacing")
    return slope


def thickness_from_echo_spacing(echo_times_us: Sequence[float], velocity_m_s: float, *,
                                echo_numbers: Sequence[int] | None = None) -> float:
    """Thickness in mm from successive back-wall echoes (multiple-echo method).

    Echo ``n`` arrives at ``t0 + n 2 T / c``; the spacing ``2 T / c`` is the
    least-squares slope of time against echo number, so the zero offset
    drops out. ``T = c * spacing / 2``.

    Parameters
    ----------
    echo_times_us : sequence of float
        Times of back-wall echoes, us, increasing.
    velocity_m_s : float
        Velocity in the part, m/s.
    echo_numbers : sequence of int, optional
        Order of each echo (default 1, 2, 3 ...), for when some are skipped.

    Returns
    -------
    float
        Thickness, mm.

    Examples
    --------
    >>> round(thickness_from_echo_spacing([5.0, 13.446, 21.892], 5920.0), 3)
    25.0
    """
    v = _check_velocity(_positive("velocity_m_s", velocity_m_s, "m/s"), "`velocity_m_s`")
    return float(sound_path_mm(_echo_spacing_us(echo_times_us, echo_numbers), v))


def velocity_from_echo_spacing(echo_times_us: Sequence[float], thickness_mm: float, *,
                               echo_numbers: Sequence[int] | None = None) -> float:
    """Velocity in m/s from successive back-wall echoes of a known thickness.

    ``c = 2 T / spacing``, the spacing fitted as in
    :func:`thickness_from_echo_spacing` (independent of the zero offset).

    Examples
    --------
    >>> round(velocity_from_echo_spacing([5.0, 13.446, 21.892], 25.0))
    5920
    """
    t = _positive("thickness_mm", thickness_mm, "mm")
    return _check_velocity(2.0 * t / _echo_spacing_us(echo_times_us, echo_numbers) * 1e3, "the echo spacing")


def calibrate(grid: xr.Dataset, *, velocity_m_s: float | None = None, zero_offset_us: float | None = None,
              note: str = "") -> xr.Dataset:
    """Return a new grid with the velocity and/or zero offset set.

    Parameters
    ----------
    grid : xarray.Dataset
        A scan grid.
    velocity_m_s : float, optional
        Velocity of the wave mode in the part, m/s.
    zero_offset_us : float, optional
        Zero offset, us (time of pulse entry into the part on the recorded
        axis).
    note : str, default ''
        Free text: how the values were obtained (block, echoes used).

    Returns
    -------
    xarray.Dataset
        A shallow copy with the attributes set, a ``calibration`` attribute
        (a JSON record of the new and the previous values, the note and the
        UTC time) and a provenance step ``calibrate``.

    Raises
    ------
    CalibrationError
        Neither value given, or a value out of range.

    Examples
    --------
    >>> from ndtmap.grid.examples import example_grid
    >>> g = calibrate(example_grid(), velocity_m_s=5900.0, zero_offset_us=0.25, note="KFP-0007 step block")
    >>> g.attrs["velocity_m_s"], g.attrs["zero_offset_us"]
    (5900.0, 0.25)
    """
    grid = check_grid(grid)
    if velocity_m_s is None and zero_offset_us is None:
        raise CalibrationError("give `velocity_m_s`, `zero_offset_us` or both; got neither")
    if not isinstance(note, str):
        raise CalibrationError(f"`note` must be text, got {type(note).__name__}")
    record: dict[str, Any] = {
        "previous": {
            "velocity_m_s": grid_attr(grid, "velocity_m_s"),
            "zero_offset_us": grid_attr(grid, "zero_offset_us", 0.0),
        },
        "note": note,
        "utc_time": _dt.datetime.now(_dt.UTC).strftime("%Y-%m-%dT%H:%M:%SZ"),
    }
    attrs = dict(grid.attrs)
    if velocity_m_s is not None:
        v = _check_velocity(_positive("velocity_m_s", velocity_m_s, "m/s"), "`velocity_m_s`")
        attrs["velocity_m_s"] = v
        record["velocity_m_s"] = v
    if zero_offset_us is not None:
        z = _number("zero_offset_us", zero_offset_us)
        if abs(z) > 1e6:
            raise CalibrationError(f"`zero_offset_us` must lie in [-1e6, 1e6] us, got {z:g}")
        attrs["zero_offset_us"] = z
        record["zero_offset_us"] = z
    attrs["calibration"] = json.dumps(jsonable(record))
    out = grid.copy(deep=False)
    out.attrs = attrs
    params = {k: record[k] for k in ("velocity_m_s", "zero_offset_us") if k in record}
    params["note"] = note
    return with_step(out, "calibrate", params, source=grid)
