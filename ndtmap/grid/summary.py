"""A summary of a scan grid as plain values: what ``ndtmap info`` prints and every report carries.

:func:`grid_summary` reads the grid's shape, extents, time and depth range,
metadata and every problem found, without failing on an invalid grid;
:func:`format_summary` turns it into the lines people read.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from ndtmap.errors import NdtmapError
from ndtmap.grid.geometry import depth_from_sound_path_mm, part_geometry, sound_path_mm
from ndtmap.grid.provenance import jsonable, read_provenance
from ndtmap.grid.schema import REQUIRED_ATTRS, count_missing_ascans, grid_attr, grid_problems

__all__ = ["grid_summary", "format_summary"]


def grid_summary(ds: Any, *, source: str) -> dict[str, Any]:
    """Summarise a (possibly invalid) scan grid as plain JSON-able values.

    Parameters
    ----------
    ds : xarray.Dataset
        The grid as read from the file, before validation.
    source : str
        Path shown in the summary.

    Returns
    -------
    dict
        Keys ``file``, ``shape``, ``part`` (shape of the part, beam skew
        and path, index units: grid format 2), ``index_units``, ``scan_mm``,
        ``index_mm`` (in ``index_units``), ``time_us``,
        ``depth_mm``, ``dtype``, ``signal``, ``attrs``, ``missing_ascans``,
        ``problems`` (list of str) and ``valid``.
    """
    problems = grid_problems(ds, check_values=False)
    out: dict[str, Any] = {"file": source}
    out["shape"] = {d: int(n) for d, n in ds.sizes.items()} if hasattr(ds, "sizes") else {}

    def extent(name: str) -> list[float] | None:
        if name not in getattr(ds, "coords", {}):
            return None
        v = np.asarray(ds[name].values, dtype=np.float64)
        v = v[np.isfinite(v)]
        return [float(v.min()), float(v.max())] if v.size else None

    out["part"] = _part(ds, problems)
    out["index_units"] = out["part"]["index_units"]
    out["scan_mm"] = extent("scan")
    out["index_mm"] = extent("index")
    out["time_us"] = extent("time")
    depth = None
    velocity = grid_attr(ds, "velocity_m_s")
    angle = grid_attr(ds, "beam_angle_deg", 0.0)
    zero = grid_attr(ds, "zero_offset_us", 0.0)
    if (
        out["time_us"] is not None
        and isinstance(velocity, float)
        and math.isfinite(velocity)
        and velocity > 0
        and isinstance(angle, float)
        and 0 <= angle < 90
        and isinstance(zero, float)
    ):
        first, last = (float(depth_from_sound_path_mm(sound_path_mm(t, velocity, zero_offset_us=zero), angle))
                       for t in out["time_us"])
        depth = [max(0.0, first), last]
    out["depth_mm"] = depth
    if "ascan" in getattr(ds, "data_vars", {}):
        a = ds["ascan"]
        out["dtype"] = str(a.dtype)
        out["signal"] = a.attrs.get("signal")
        out["lazy"] = a.chunks is not None
        if not problems:
            try:
                out["missing_ascans"] = count_missing_ascans(ds)
                if out["missing_ascans"] == ds.sizes["scan"] * ds.sizes["index"]:
                    problems.append("every A-scan is missing (NaN); the file holds no usable data")
            except Exception as exc:  # noqa: BLE001 - a summary must not fail on odd data
                problems.append(f"could not read the A-scans: {exc}")
    attrs = {}
    for key, value in getattr(ds, "attrs", {}).items():
        if key in ("provenance", "truth"):
            continue
        attrs[key] = jsonable(value)
    out["attrs"] = attrs
    out["required_attrs"] = {k: jsonable(ds.attrs.get(k)) for k in REQUIRED_ATTRS} if hasattr(ds, "attrs") else {}
    try:
        out["provenance_steps"] = [s.get("step") for s in read_provenance(ds)]
    except NdtmapError as exc:
        problems.append(str(exc))
    out["problems"] = problems
    out["valid"] = not problems
    return jsonable(out)


def _part(ds: Any, problems: list[str]) -> dict[str, Any]:
    """Shape of the part and direction of the beam (grid format 2), read leniently from the attributes."""
    attrs = getattr(ds, "attrs", {})
    index = ds.coords["index"].attrs.get("units") if "index" in getattr(ds, "coords", {}) else None
    part: dict[str, Any] = {"shape": attrs.get("part_shape", "plate"),
                            "beam_skew_deg": grid_attr(ds, "beam_skew_deg", 0.0) if attrs else 0.0,
                            "index_units": "deg" if index == "deg" else "mm"}
    if part["shape"] == "cylinder" and attrs:
        for key in ("outer_diameter_mm", "inner_diameter_mm", "scanned_surface"):
            part[key] = grid_attr(ds, key)
    if not problems:
        part["beam_path"] = part_geometry(ds).beam_path
    return part


def _part_line(part: dict[str, Any]) -> str:
    if part.get("shape") != "cylinder":
        return f"plate; beam skew {part.get('beam_skew_deg', 0.0):g} deg"
    side = "from the bore" if part.get("scanned_surface") == "inner" else "from outside"
    bore = part.get("inner_diameter_mm")
    bore_text = "solid" if bore == 0 else f"bore {bore:g} mm" if isinstance(bore, float) else f"bore {bore}"
    outer = part.get("outer_diameter_mm")
    outer_text = f"{outer:g}" if isinstance(outer, float) else str(outer)
    path = part.get("beam_path", "unknown: the grid has problems")
    return (f"cylinder D {outer_text} mm, {bore_text}, scanned {side}; "
            f"beam {path} (skew {part.get('beam_skew_deg', 0.0):g} deg)")


def format_summary(s: dict[str, Any]) -> str:
    lines = [f"Scan grid: {s['file']}"]
    shape = s.get("shape") or {}
    if shape:
        lines.append("  shape        " + " x ".join(f"{k} {v}" for k, v in shape.items()))

    def rng(v: list[float] | None, unit: str) -> str:
        return "-" if v is None else f"{v[0]:.3f} .. {v[1]:.3f} {unit}"

    lines.append(f"  scan axis    {rng(s.get('scan_mm'), 'mm')}")
    lines.append(f"  index axis   {rng(s.get('index_mm'), s.get('index_units', 'mm'))}")
    lines.append(f"  time         {rng(s.get('time_us'), 'us')}")
    lines.append(f"  depth        {rng(s.get('depth_mm'), 'mm')} (from velocity and beam angle)")
    if "part" in s:
        lines.append(f"  part         {_part_line(s['part'])}")
    if "dtype" in s:
        lines.append(
            f"  samples      {s['dtype']}, signal {s.get('signal')}, {'lazy' if s.get('lazy') else 'in memory'}"
        )
    if "missing_ascans" in s:
        lines.append(f"  missing      {s['missing_ascans']} A-scan(s)")
    attrs = s.get("attrs") or {}
    if attrs:
        lines.append("  metadata")
        width = max(len(k) for k in attrs)
        for k in sorted(attrs):
            lines.append(f"    {k.ljust(width)}  {attrs[k]}")
    steps = s.get("provenance_steps") or []
    lines.append(f"  provenance   {' -> '.join(map(str, steps)) if steps else 'none recorded'}")
    if s["problems"]:
        lines.append(f"  PROBLEMS ({len(s['problems'])}):")
        lines.extend(f"    - {p}" for p in s["problems"])
    else:
        lines.append("  valid        yes (follows the ndtmap grid format)")
    return "\n".join(lines)
