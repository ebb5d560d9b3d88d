"""Which attribute values a file can store: netCDF attributes, and the ``attrs`` of a raw sidecar.

netCDF attributes hold numbers, strings and 1-D lists of numbers or of
strings; not booleans, None or mappings. Raw sidecars keep the same rule so
that a grid moves between the containers unchanged.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np
import xarray as xr

from ndtmap.errors import FileFormatError

__all__ = ["attr_problem", "check_netcdf_attrs"]


def attr_problem(value: Any) -> str | None:
    """Why `value` cannot be stored as a netCDF (or raw sidecar) attribute, or None.

    Examples
    --------
    >>> attr_problem(12.5) is None, attr_problem([0.5, 1.0]) is None
    (True, True)
    >>> attr_problem(True)
    'is a boolean (True); netCDF attributes cannot hold booleans: store 1/0 or a string'
    """
    if value is None:
        return "is None; netCDF attributes cannot be empty: remove it or store a string"
    if isinstance(value, bool | np.bool_):
        return f"is a boolean ({value!r}); netCDF attributes cannot hold booleans: store 1/0 or a string"
    if isinstance(value, Mapping):
        return "is a mapping; store it as a JSON string (json.dumps)"
    if isinstance(value, str | bytes | int | float | np.integer | np.floating):
        return None
    if isinstance(value, list | tuple | np.ndarray):
        arr = np.asarray(value)
        if arr.ndim != 1 or arr.size == 0:
            return "must be a non-empty 1-D list of numbers or of strings"
        if arr.dtype.kind in "iuf" or (arr.dtype.kind in "US" and all(isinstance(v, str | np.str_) for v in value)):
            return None
        return "must be a list of numbers only or of strings only (no booleans, None or mixed types)"
    return f"has type {type(value).__name__}; store a number, a string or a list of them"


def check_netcdf_attrs(ds: xr.Dataset) -> None:
    """Raise when a global or variable attribute of `ds` cannot be stored in NetCDF (every problem listed).

    Raises
    ------
    FileFormatError
        Naming each attribute, what it holds and how to store it instead.
    """
    problems = []
    for name, value in ds.attrs.items():
        why = attr_problem(value)
        if why:
            problems.append(f"global attribute `{name}` {why}")
    for var_name, var in ds.variables.items():
        for name, value in var.attrs.items():
            why = attr_problem(value)
            if why:
                problems.append(f"attribute `{name}` of `{var_name}` {why}")
    if problems:
        raise FileFormatError("cannot write the grid to NetCDF: " + "; ".join(problems))
