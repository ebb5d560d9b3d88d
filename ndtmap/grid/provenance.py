"""Provenance: the record of every processing step a grid or result went through.

The record lives in the global attribute ``provenance`` as a JSON list, so it
travels inside NetCDF and Zarr files and a figure can be traced to the
settings that made it. Each entry is a mapping with the keys ``step``,
``parameters``, ``ndtmap_version`` and ``utc_time``.

Functions never change their input: :func:`with_step` returns a new object
whose record has one more entry.
"""

from __future__ import annotations

import datetime as _dt
import json
import math
from collections.abc import Mapping
from typing import Any, TypeVar

import numpy as np
import xarray as xr

from ndtmap._version import __version__
from ndtmap.errors import GridError

__all__ = ["read_provenance", "with_step", "jsonable"]

T = TypeVar("T", xr.Dataset, xr.DataArray)


def jsonable(value: Any) -> Any:
    """Convert `value` to plain JSON types (numpy scalars, tuples, NaN -> None).

    Examples
    --------
    >>> import numpy as np
    >>> jsonable({"a": np.float32(1.5), "b": (1, 2), "c": float("nan")})
    {'a': 1.5, 'b': [1, 2], 'c': None}
    """
    if isinstance(value, Mapping):
        return {str(k): jsonable(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [jsonable(v) for v in value]
    if isinstance(value, np.ndarray):
        return [jsonable(v) for v in value.tolist()]
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if value is None or isinstance(value, bool | int | float | str):
        return value
    return str(value)


def read_provenance(obj: xr.Dataset | xr.DataArray) -> list[dict[str, Any]]:
    """Return the provenance record of `obj` as a list of dicts.

    Parameters
    ----------
    obj : xarray.Dataset or xarray.DataArray
        A scan grid or a result computed from one.

    Returns
    -------
    list of dict
        Oldest step first; empty when there is no record.

    Raises
    ------
    GridError
        When the attribute exists but is not a JSON list.
    """
    raw = obj.attrs.get("provenance")
    if raw is None or raw == "":
        return []
    if isinstance(raw, bytes):
        raw = raw.decode("utf-8", errors="replace")
    try:
        record = json.loads(raw) if isinstance(raw, str) else raw
    except json.JSONDecodeError as exc:
        raise GridError(f"attribute `provenance` is not valid JSON ({exc.msg} at character {exc.pos})") from None
    if not isinstance(record, list) or not all(isinstance(r, dict) for r in record):
        raise GridError("attribute `provenance` must be a JSON list of objects")
    return record


def with_step(obj: T, step: str, parameters: Mapping[str, Any] | None = None, *, source: Any = None) -> T:
    """Return a shallow copy of `obj` whose provenance has one more step.

    Parameters
    ----------
    obj : xarray.Dataset or xarray.DataArray
        The result of the step.
    step : str
        Name of the processing step, e.g. ``"gate"`` or ``"depth_map"``.
    parameters : mapping, optional
        The settings of the step (JSON-serialisable after :func:`jsonable`).
    source : xarray object, optional
        The input of the step; its record is continued (default: `obj`'s own).

    Returns
    -------
    same type as `obj`
        A copy with the updated ``provenance`` attribute.

    Examples
    --------
    >>> import xarray as xr
    >>> r = with_step(xr.Dataset(), "example", {"gain_db": 6})
    >>> [(s["step"], s["parameters"]) for s in read_provenance(r)]
    [('example', {'gain_db': 6})]
    """
    base = read_provenance(source if source is not None else obj)
    entry = {
        "step": str(step),
        "parameters": jsonable(dict(parameters or {})),
        "ndtmap_version": __version__,
        "utc_time": _dt.datetime.now(_dt.UTC).strftime("%Y-%m-%dT%H:%M:%SZ"),
    }
    out = obj.copy(deep=False)
    out.attrs = dict(obj.attrs)
    out.attrs["provenance"] = json.dumps([*base, entry], sort_keys=False)
    return out
