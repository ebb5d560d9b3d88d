"""Small helpers shared by the processing modules (private).

They check the grid at the public boundary, read the part constants once,
keep whole A-scans in one dask chunk for kernels along ``time``, and build
result grids without touching the input.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
import xarray as xr

from .errors import ParameterTypeError
from .grid import grid_attr, time_step_us, validate_grid


def check_grid(grid: Any, name: str = "grid") -> xr.Dataset:
    """Return `grid` after a metadata check (values are not read, so dask grids stay lazy)."""
    if not isinstance(grid, xr.Dataset):
        raise ParameterTypeError(f"`{name}` must be a scan grid (xarray.Dataset), got {type(grid).__name__}")
    return validate_grid(grid, check_values=False)


def is_lazy(obj: xr.DataArray | xr.Dataset) -> bool:
    """True when `obj` is backed by dask arrays."""
    return obj.chunks is not None and len(obj.chunks) > 0


def whole_time(da: xr.DataArray) -> xr.DataArray:
    """Rechunk a dask-backed array so that each chunk holds whole A-scans (one chunk along ``time``)."""
    if da.chunks is not None and "time" in da.dims and len(da.chunksizes["time"]) > 1:
        return da.chunk({"time": -1})
    return da


@dataclass(frozen=True)
class PartConstants:
    """Velocity, beam angle, zero offset and time axis of a grid."""

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


def part_constants(grid: xr.Dataset) -> PartConstants:
    """Read the constants the geometry needs from a (validated) grid."""
    return PartConstants(
        velocity_m_s=float(grid_attr(grid, "velocity_m_s")),
        beam_angle_deg=float(grid_attr(grid, "beam_angle_deg", 0.0)),
        zero_offset_us=float(grid_attr(grid, "zero_offset_us", 0.0)),
        time_us=np.asarray(grid["time"].values, dtype=np.float64),
        dt_us=time_step_us(grid),
    )


def result_attrs(grid: xr.Dataset, **extra: Any) -> dict[str, Any]:
    """The grid's global attributes followed by `extra` (result attributes)."""
    out = dict(grid.attrs)
    out.update(extra)
    return out


def replace_ascan(grid: xr.Dataset, data: xr.DataArray, **ascan_attrs: Any) -> xr.Dataset:
    """Return a copy of `grid` whose ``ascan`` is `data` (float32 %FSH), attributes updated."""
    attrs = {k: v for k, v in grid["ascan"].attrs.items() if k != "fsh_per_count"}
    attrs.update(ascan_attrs)
    attrs["units"] = "%FSH"
    out = grid.copy(deep=False)
    out.attrs = dict(grid.attrs)
    data = data.astype(np.float32).transpose("scan", "index", "time")
    out["ascan"] = xr.Variable(("scan", "index", "time"), data.data, attrs=attrs)
    return out


def netcdf_safe(value: Any) -> Any:
    """An attribute value that netCDF can store (bool -> int, None -> '')."""
    if value is None:
        return ""
    if isinstance(value, bool | np.bool_):
        return int(value)
    return value
