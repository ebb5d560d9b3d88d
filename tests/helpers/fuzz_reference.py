"""What a command should have written for a fuzz input, computed without ndtmap.

The input is read with xarray/h5netcdf (NetCDF), zarr (a store) or numpy and
the sidecar's documented layout (raw dump; docs/grid-format.md section 2.3),
never with ndtmap's readers; the amplitude map is the highest rectified sample
in the gate window, and positions whose A-scan holds a NaN or infinite sample
(or is listed as missing) are NaN (the grid format's rule, docs/grid-format.md).
"""

from __future__ import annotations

import json
import math
import warnings
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr


def _axis(spec: Any, n: int) -> np.ndarray:
    if isinstance(spec, dict):
        return float(spec["start"]) + np.arange(n) * float(spec["step"])
    return np.asarray(spec, dtype=float)


def _sidecar(path: Path) -> xr.Dataset:
    doc = json.loads(path.read_text())
    shape = doc["shape"]
    order = list(doc["axis_order"])
    dtype = np.dtype(doc["dtype"])
    raw = np.fromfile(path.parent / doc["data_file"], dtype=dtype, offset=int(doc.get("byte_offset", 0)),
                      count=int(np.prod([shape[a] for a in order])))
    a = raw.reshape([shape[a] for a in order]).transpose([order.index(d) for d in ("scan", "index", "time")])
    n = {d: shape[d] for d in ("scan", "index", "time")}
    coords = {d: _axis(doc["coords"][f"{d}_{'us' if d == 'time' else 'mm'}"], n[d]) for d in n}
    attrs = {"signal": doc["signal"]}
    if "fsh_per_count" in doc:
        attrs["fsh_per_count"] = doc["fsh_per_count"]
    ds = xr.Dataset({"ascan": (("scan", "index", "time"), a, attrs)}, coords=coords, attrs=dict(doc["attrs"]))
    if doc.get("missing"):
        mask = np.zeros((n["scan"], n["index"]), dtype=bool)
        for i, j in doc["missing"]:
            mask[i, j] = True
        ds["missing"] = (("scan", "index"), mask)
    return ds


def read_input(path: Path) -> xr.Dataset:
    """The input grid as stored, without ndtmap."""
    if path.suffix == ".json":
        return _sidecar(path)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        if path.is_dir():
            return xr.open_zarr(path).load()
        return xr.open_dataset(path, engine="h5netcdf").load()


def samples_fsh(ds: xr.Dataset) -> np.ndarray:
    """The A-scans in %FSH, float64, (scan, index, time)."""
    a = ds["ascan"].transpose("scan", "index", "time")
    values = np.asarray(a.values)
    if np.issubdtype(values.dtype, np.integer):
        return values.astype(np.float64) * float(np.float32(a.attrs.get("fsh_per_count", 1.0)))
    return values.astype(np.float32).astype(np.float64)


def missing_mask(ds: xr.Dataset) -> np.ndarray:
    """True where an A-scan holds a NaN or infinite sample or is listed as missing."""
    bad = ~np.isfinite(samples_fsh(ds)).all(axis=-1)
    if "missing" in ds.data_vars:
        bad |= np.asarray(ds["missing"].transpose("scan", "index").values, dtype=bool)
    return bad


def gate_peak(ds: xr.Dataset, gate_mm: tuple[float, float]) -> tuple[np.ndarray, np.ndarray]:
    """Highest rectified sample in the gate (depth mm, straight or angle beam) and the depth of that sample.

    Depth = (t - zero offset) x velocity / 2 x cos(beam angle) (pulse-echo; Krautkramer, ch. 4, in
    general terms); the window holds the samples whose depth is in the gate.
    """
    a = samples_fsh(ds)
    if str(ds["ascan"].attrs.get("signal", "rf")) == "rf":
        a = np.abs(a)
    t = np.asarray(ds["time"].values, dtype=float)
    v_mm_us = float(ds.attrs["velocity_m_s"]) * 1e-3
    cos = math.cos(math.radians(float(ds.attrs.get("beam_angle_deg", 0.0))))
    depth = (t - float(ds.attrs.get("zero_offset_us", 0.0))) * v_mm_us / 2.0 * cos
    tol = 1e-6 * (depth[1] - depth[0]) if depth.size > 1 else 0.0
    inside = (depth >= gate_mm[0] - tol) & (depth <= gate_mm[1] + tol)
    window = a[..., inside]
    with np.errstate(invalid="ignore"):
        peak = window.max(axis=-1)
        at = depth[inside][window.argmax(axis=-1)]
    bad = missing_mask(ds)
    peak[bad] = np.nan
    at[bad] = np.nan
    return peak, at
