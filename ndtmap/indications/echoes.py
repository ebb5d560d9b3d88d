"""Telling real reflectors from repeat and geometry echoes, by looking at the A-scans.

A gated amplitude map keeps only the highest echo in the gate, so a repeat
echo (the double reflection of a reflector, reflector - front surface -
reflector, at twice its depth) is often the only echo in a deep gate while its
primary sits in another gate or above the gate start. A practitioner then
looks at the A-scan: is there a stronger echo at half (or a third) of the
depth at the same probe position? :func:`classify_echoes` does that for every
indication, and also marks echoes at the back-wall depth (geometry: the back
wall itself reached by the gate).

Flags added (vocabulary in :data:`ndtmap.indications.flags.FLAG_MEANINGS`):

``repeat_echo``
    At the indication's peak position the A-scan holds an echo at least as
    strong at 1/k of its depth (k = 2, 3), within the depth tolerance.
``backwall_echo``
    The depth equals the nominal back-wall depth within the tolerance: a
    geometry echo, not a reflector inside the wall.

The tolerance is ``max(tolerance_mm, tolerance_fraction * depth)`` plus one
echo half-length (the time extent of the pulse, from the probe's frequency and
bandwidth), so that the diffraction phase of each echo does not matter.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, MutableMapping
from typing import Any

import numpy as np
import xarray as xr

from ndtmap._shared.validate import nonnegative_float
from ndtmap.grid.schema import grid_attr

__all__ = ["classify_echoes", "echo_half_length_mm"]


def echo_half_length_mm(grid: xr.Dataset) -> float:
    """Depth extent of half an echo (to -20 dB of the envelope), mm.

    From the probe frequency and the fractional bandwidth attribute
    ``probe_bandwidth`` (0.5 when absent) for a Gaussian pulse:
    ``sqrt(2 ln 10) sigma_t``, ``sigma_t = 2 sqrt(2 ln 2) / (2 pi B f)``.

    Examples
    --------
    >>> import xarray as xr
    >>> g = xr.Dataset(attrs={"probe_frequency_mhz": 5.0, "probe_bandwidth": 0.6, "velocity_m_s": 5920.0})
    >>> round(echo_half_length_mm(g), 2)
    0.8
    """
    f = float(grid_attr(grid, "probe_frequency_mhz"))
    bw = min(max(float(grid_attr(grid, "probe_bandwidth", 0.5)), 0.2), 1.5)
    sigma_t = 2.0 * math.sqrt(2.0 * math.log(2.0)) / (2.0 * math.pi * bw * f)
    c = float(grid_attr(grid, "velocity_m_s")) * 1e-3
    theta = math.radians(float(grid_attr(grid, "beam_angle_deg", 0.0)))
    return 0.5 * c * math.sqrt(2.0 * math.log(10.0)) * sigma_t * math.cos(theta)


def _depth_of_samples(grid: xr.Dataset) -> np.ndarray:
    t = np.asarray(grid["time"].values, dtype=np.float64)
    zero = float(grid_attr(grid, "zero_offset_us", 0.0))
    c = float(grid_attr(grid, "velocity_m_s")) * 1e-3
    theta = math.radians(float(grid_attr(grid, "beam_angle_deg", 0.0)))
    return 0.5 * c * (t - zero) * math.cos(theta)


def _add(rec: MutableMapping[str, Any], flag: str, note: str) -> None:
    flags = rec.setdefault("flags", [])
    if flag not in flags:
        flags.append(flag)
    rec.setdefault("notes", []).append(note)


def classify_echoes(
    grid: xr.Dataset,
    records: Iterable[MutableMapping[str, Any]],
    *,
    backwall_depth_mm: float | None = None,
    multiples: tuple[int, ...] = (2, 3),
    tolerance_mm: float = 1.0,
    tolerance_fraction: float = 0.03,
    min_depth_mm: float | None = None,
) -> list[MutableMapping[str, Any]]:
    """Flag repeat echoes and back-wall (geometry) echoes among indication records.

    Parameters
    ----------
    grid : xarray.Dataset
        The scan grid the indications come from (immersion grids are skipped:
        their depth axis depends on the interface).
    records : iterable of dict
        Indication records (as from :func:`ndtmap.size_indications`) with
        ``kind``, ``scan_mm``, ``index_mm``, ``depth_mm``, ``peak_fsh``,
        ``flags`` and ``notes``; changed in place and returned.
    backwall_depth_mm : float, optional
        Nominal back-wall depth; default the grid's ``part_thickness_mm``.
    multiples : tuple of int, default (2, 3)
        Repeat orders looked for.
    tolerance_mm, tolerance_fraction : float
        Depth tolerance, see the module docstring.
    min_depth_mm : float, optional
        Shallowest depth searched for a primary (default: one echo length, to
        keep clear of the surface).

    Returns
    -------
    list of dict
        The same records.

    Examples
    --------
    >>> from ndtmap.grid.examples import example_grid
    >>> g = example_grid((4.0, 8.0), (90.0, 30.0))  # echoes at 4 us and 8 us: depths 11.8 and 23.7 mm
    >>> rec = {"kind": "amplitude", "scan_mm": 0.0, "index_mm": 0.0, "depth_mm": 23.68, "peak_fsh": 30.0}
    >>> classify_echoes(g, [rec])[0]["flags"]
    ['repeat_echo']
    """
    records = list(records)
    if "water_path_mm" in grid.attrs or "water_velocity_m_s" in grid.attrs:
        return records
    nonnegative_float("tolerance_mm", tolerance_mm)
    nonnegative_float("tolerance_fraction", tolerance_fraction)
    if backwall_depth_mm is None:
        t = grid_attr(grid, "part_thickness_mm")
        backwall_depth_mm = t if isinstance(t, float) else None
    depth = _depth_of_samples(grid)
    half = echo_half_length_mm(grid)
    floor = half * 2.0 if min_depth_mm is None else float(min_depth_mm)
    from ndtmap.grid.schema import ascan_in_fsh

    signal = ascan_in_fsh(grid)
    for rec in records:
        d = rec.get("depth_mm")
        peak = rec.get("peak_fsh")
        if rec.get("kind", "amplitude") != "amplitude" or d is None or peak is None:
            continue
        d, peak = float(d), float(peak)
        if backwall_depth_mm is not None:
            tol = max(tolerance_mm, tolerance_fraction * backwall_depth_mm) + half
            if abs(d - backwall_depth_mm) <= tol:
                _add(
                    rec,
                    "backwall_echo",
                    f"the echo lies at the back-wall depth ({backwall_depth_mm:g} mm): a geometry echo of the "
                    "back wall reached by the gate, not a reflector inside the wall",
                )
        a = np.abs(
            np.asarray(
                signal.sel(scan=rec["scan_mm"], index=rec["index_mm"], method="nearest").values, dtype=np.float64
            )
        )
        if not np.all(np.isfinite(a)):
            continue
        for k in multiples:
            target = d / k
            tol = max(tolerance_mm, tolerance_fraction * target) + half
            sel = (depth >= max(target - tol, floor)) & (depth <= target + tol)
            if not np.any(sel):
                continue
            primary = float(a[sel].max())
            if primary >= peak:
                at = float(depth[sel][int(np.argmax(a[sel]))])
                _add(
                    rec,
                    "repeat_echo",
                    f"the A-scan at the peak position holds a stronger echo ({primary:.1f} %FSH) at {at:.1f} mm, "
                    f"1/{k} of this depth: probably its repeat echo (multiple reflection), not a separate reflector",
                )
                break
    return records
