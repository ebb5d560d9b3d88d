"""Geometry of 2-D maps on (scan, index): checks, cell sizes, line sampling.

Private helpers shared by :mod:`ndtmap.indications.detection`, :mod:`ndtmap.indications.sizing`,
:mod:`ndtmap.indications.flags` and :mod:`ndtmap.indications.dgs`. A *map* is an
:class:`xarray.DataArray` with the two dimensions ``scan`` and ``index``,
whose coordinates are positions in mm (finite, strictly increasing, spacing
free to vary). Every size is computed from the coordinates, never from
sample counts.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import xarray as xr
from scipy import interpolate, ndimage

from ndtmap.errors import ParameterError, ParameterTypeError, UnitsError

MAP_DIMS = ("scan", "index")

#: 8-connectivity (a 3x3 structuring element) used for every labelling.
STRUCTURE_8 = np.ones((3, 3), dtype=bool)


def as_map(name: str, value: Any) -> xr.DataArray:
    """Check that `value` is a 2-D map on (scan, index) and return it as float64.

    The result is a new array (dims in the order scan, index); the input is
    never modified. Dask-backed maps are computed.
    """
    if not isinstance(value, xr.DataArray):
        raise ParameterTypeError(
            f"`{name}` must be an xarray.DataArray on dims ('scan', 'index'), got {type(value).__name__}"
        )
    if set(value.dims) != set(MAP_DIMS) or value.ndim != 2:
        raise ParameterError(
            f"`{name}` must have exactly the dims ('scan', 'index'), has {value.dims}; "
            "select one gate or time first (e.g. .isel(...))"
        )
    for dim in MAP_DIMS:
        if dim not in value.coords:
            raise ParameterError(f"`{name}` has no `{dim}` coordinate; assign positions in mm")
        c = np.asarray(value.coords[dim].values)
        if not np.issubdtype(c.dtype, np.number) or np.iscomplexobj(c):
            raise ParameterError(f"`{name}` coordinate `{dim}` must be real numbers in mm, has dtype {c.dtype}")
        if not np.all(np.isfinite(c)):
            raise ParameterError(f"`{name}` coordinate `{dim}` has NaN or infinite positions")
        if c.size > 1 and np.any(np.diff(c.astype(np.float64)) <= 0):
            raise ParameterError(
                f"`{name}` coordinate `{dim}` must be strictly increasing; sort with .sortby({dim!r})"
            )
    if not (np.issubdtype(value.dtype, np.number) or value.dtype == bool) or np.iscomplexobj(value):
        raise ParameterTypeError(f"`{name}` must hold real numbers, has dtype {value.dtype}")
    out = value.transpose(*MAP_DIMS)
    return out.copy(data=np.array(out.values, dtype=np.float64))  # one new float64 array


#: Coordinate units that are angles, never mm.
ANGLE_UNITS = frozenset({"deg", "degree", "degrees", "\u00b0", "rad", "radian", "radians", "grad", "gon"})


def units_of(da: xr.DataArray | Any) -> str:
    """The ``units`` attribute of a map or coordinate ('' when missing or not text)."""
    units = getattr(da, "attrs", {}).get("units", "")
    return units.strip() if isinstance(units, str) else ""


def in_db(da: xr.DataArray) -> bool:
    """True when a map's ``units`` say dB (``'dB'``, ``'dB re DAC'`` ...)."""
    return units_of(da).lower().startswith("db")


def check_mm_coords(name: str, da: xr.DataArray) -> None:
    """Refuse a map whose scan or index positions are angles (units deg, degree, rad ...): sizes are in mm."""
    for dim in MAP_DIMS:
        units = units_of(da.coords[dim])
        if units.lower() in ANGLE_UNITS:
            raise UnitsError(
                f"`{name}` coordinate `{dim}` has units {units!r}, an angle, but sizes are measured in mm; convert "
                f"the {dim} positions to mm (arc length = radius x angle in radians) and set their units to 'mm'"
            )


def check_linear_amplitude(name: str, da: xr.DataArray, what: str) -> None:
    """Refuse a map in dB for a drop or level in %FSH terms (`what` names it)."""
    if in_db(da):
        raise UnitsError(
            f"`{name}` has units {units_of(da)!r} but {what} is a ratio of amplitudes in %FSH (the 6 dB drop is half "
            "the peak, not the peak less 6 of the map's units); size on the %FSH amplitude map, or state the level "
            "in dB with `level_db` (level_length, level_area, level_outline)"
        )


def check_same_grid(name: str, value: xr.DataArray, ref_name: str, ref: xr.DataArray) -> None:
    """Raise unless `value` has the same scan and index positions as `ref`."""
    for dim in MAP_DIMS:
        a = np.asarray(value.coords[dim].values, dtype=np.float64)
        b = np.asarray(ref.coords[dim].values, dtype=np.float64)
        if a.shape != b.shape or not np.allclose(a, b, rtol=0.0, atol=1e-9 * max(1.0, float(np.abs(b).max()))):
            raise ParameterError(
                f"`{name}` must be on the same `{dim}` positions as `{ref_name}` "
                f"({a.size} vs {b.size} positions, or different values); compute both from the same grid"
            )


def coords_mm(da: xr.DataArray) -> tuple[np.ndarray, np.ndarray]:
    """Scan and index positions of a map, float64 mm."""
    return (
        np.asarray(da.coords["scan"].values, dtype=np.float64),
        np.asarray(da.coords["index"].values, dtype=np.float64),
    )


def cell_widths(x: np.ndarray) -> np.ndarray:
    """Width (mm) of the cell each position stands for: midpoint (Voronoi) cells.

    Interior cells reach half-way to each neighbour, ``(x[i+1] - x[i-1]) / 2``;
    the two end cells reach half a spacing beyond the end position, so their
    width is the adjacent spacing. A single position has no defined width
    (NaN).
    """
    x = np.asarray(x, dtype=np.float64)
    if x.size < 2:
        return np.full(x.shape, np.nan)
    edges = np.empty(x.size + 1)
    edges[1:-1] = 0.5 * (x[1:] + x[:-1])
    edges[0] = x[0] - 0.5 * (x[1] - x[0])
    edges[-1] = x[-1] + 0.5 * (x[-1] - x[-2])
    return np.diff(edges)


def cell_areas(da: xr.DataArray) -> np.ndarray:
    """Area (mm^2) of each position's cell, shape (n_scan, n_index)."""
    s, i = coords_mm(da)
    return np.outer(cell_widths(s), cell_widths(i))


def local_spacing(x: np.ndarray, k: int) -> float:
    """Spacing around position k (the cell width); NaN for a single position."""
    return float(cell_widths(x)[k])


def touches_edge(region: np.ndarray) -> bool:
    """True when a boolean region includes a position on the map boundary."""
    return bool(region[0, :].any() or region[-1, :].any() or region[:, 0].any() or region[:, -1].any())


def adjacent_missing(region: np.ndarray, missing: np.ndarray) -> int:
    """Number of missing positions inside or 8-adjacent to `region`."""
    if not missing.any():
        return 0
    grown = ndimage.binary_dilation(region, structure=STRUCTURE_8)
    return int(np.count_nonzero(grown & missing))


def connected_to(mask: np.ndarray, seed: tuple[int, int]) -> np.ndarray:
    """The 8-connected component of `mask` that contains `seed` (empty if seed is off)."""
    if not mask[seed]:
        return np.zeros_like(mask, dtype=bool)
    labels, _ = ndimage.label(mask, structure=STRUCTURE_8)
    return labels == labels[seed]


def point_pair(name: str, value: Any) -> tuple[tuple[float, float], tuple[float, float]]:
    """Check a line given as ((scan0, index0), (scan1, index1)) in mm."""
    try:
        (s0, i0), (s1, i1) = value
        p = tuple(float(v) for v in (s0, i0, s1, i1))
    except (TypeError, ValueError):
        raise ParameterError(
            f"`{name}` must be two end points ((scan0_mm, index0_mm), (scan1_mm, index1_mm)), got {value!r}"
        ) from None
    if not all(math.isfinite(v) for v in p):
        raise ParameterError(f"`{name}` end points must be finite numbers, got {value!r}")
    if p[0] == p[2] and p[1] == p[3]:
        raise ParameterError(f"`{name}` end points must differ, got the same point twice ({p[0]:g}, {p[1]:g})")
    return (p[0], p[1]), (p[2], p[3])


def sample_line(
    values: np.ndarray,
    scan: np.ndarray,
    index: np.ndarray,
    p0: tuple[float, float],
    p1: tuple[float, float],
    step_mm: float,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Sample a 2-D array along a straight line by bilinear interpolation.

    Returns the distances from `p0` (mm), the sample points (n, 2) in
    (scan, index) mm and the values (NaN outside the map or where a
    neighbouring grid value is NaN).
    """
    length = math.hypot(p1[0] - p0[0], p1[1] - p0[1])
    n = max(2, int(math.ceil(length / step_mm)) + 1)
    t = np.linspace(0.0, 1.0, n)
    pts = np.column_stack([p0[0] + t * (p1[0] - p0[0]), p0[1] + t * (p1[1] - p0[1])])
    if scan.size < 2 or index.size < 2:
        raise ParameterError("a map needs at least two positions along both axes to be sampled along a line")
    interp = interpolate.RegularGridInterpolator(
        (scan, index), values, method="linear", bounds_error=False, fill_value=np.nan
    )
    return t * length, pts, interp(pts)


def inside_map(pts: np.ndarray, scan: np.ndarray, index: np.ndarray) -> np.ndarray:
    """True for points within the rectangle spanned by the map positions."""
    tol = 1e-9
    return (
        (pts[:, 0] >= scan[0] - tol)
        & (pts[:, 0] <= scan[-1] + tol)
        & (pts[:, 1] >= index[0] - tol)
        & (pts[:, 1] <= index[-1] + tol)
    )


def nearest_cell(pts: np.ndarray, scan: np.ndarray, index: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Indices of the grid position nearest to each point (per axis)."""

    def nearest(x: np.ndarray, q: np.ndarray) -> np.ndarray:
        k = np.clip(np.searchsorted(x, q), 1, max(1, x.size - 1))
        if x.size == 1:
            return np.zeros(q.shape, dtype=int)
        left = x[k - 1]
        right = x[np.minimum(k, x.size - 1)]
        return np.where(np.abs(q - left) <= np.abs(right - q), k - 1, k)

    return nearest(scan, pts[:, 0]), nearest(index, pts[:, 1])


def map_attr(attrs: Any, name: str, default: Any = None) -> Any:
    """A numeric attribute (float) from a map's attrs (or the map itself), or `default`."""
    if isinstance(attrs, xr.DataArray | xr.Dataset):
        attrs = attrs.attrs
    if name not in attrs:
        return default
    value = attrs[name]
    if isinstance(value, bool | str | bytes) or value is None:
        return default
    try:
        arr = np.asarray(value, dtype=np.float64).reshape(-1)
    except (TypeError, ValueError):
        return default
    if arr.size != 1 or not math.isfinite(float(arr[0])):
        return default
    return float(arr[0])
