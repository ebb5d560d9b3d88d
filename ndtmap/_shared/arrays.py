"""Small array and attribute helpers shared by every subpackage (private).

They tell dask-backed results from in-memory ones, keep whole A-scans in one dask chunk for kernels
along ``time``, and make attribute values that netCDF can store.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import xarray as xr

__all__ = ["is_lazy", "whole_time", "result_attrs", "netcdf_safe"]


def is_lazy(obj: xr.DataArray | xr.Dataset) -> bool:
    """True when `obj` is backed by dask arrays."""
    return obj.chunks is not None and len(obj.chunks) > 0


def whole_time(da: xr.DataArray) -> xr.DataArray:
    """Rechunk a dask-backed array so that each chunk holds whole A-scans (one chunk along ``time``)."""
    if da.chunks is not None and "time" in da.dims and len(da.chunksizes["time"]) > 1:
        return da.chunk({"time": -1})
    return da


def result_attrs(grid: xr.Dataset, **extra: Any) -> dict[str, Any]:
    """The grid's global attributes followed by `extra` (result attributes)."""
    out = dict(grid.attrs)
    out.update(extra)
    return out


def netcdf_safe(value: Any) -> Any:
    """An attribute value that netCDF can store (bool -> int, None -> '')."""
    if value is None:
        return ""
    if isinstance(value, bool | np.bool_):
        return int(value)
    return value
