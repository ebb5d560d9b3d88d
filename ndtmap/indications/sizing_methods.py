"""Sizing methods as outlines: drop from the peak, drop from the local maximum at each edge, fixed level.

Each method gives the indication's sized region and its sub-cell outline
(:func:`ndtmap.indications.outline.contour_outline`), with other indications
masked out:

:func:`drop_outline`
    The region 8-connected to the peak where the amplitude is at least the
    peak less `drop_db` (6 dB: half the peak). Right for a reflector with one
    maximum; on an extended reflector with an uneven echo it shrinks to the
    neighbourhood of the hot spot.
:func:`edge_maximum_outline`
    The 6 dB drop from the local maximum at each edge (the "maximum
    amplitude at the edge" method for extended reflectors, ISO 16827 and
    EN 10160 in general terms): at every position the level is half the
    largest amplitude of the indication within `radius_mm` (the echo met
    while the probe approaches that edge from inside), so each edge is
    sized against its own maximum, not the global one. The region is every
    part of the indication at or above its local level, holes filled (a dip
    inside the reflector is not an edge). For a reflector with one maximum
    within `radius_mm` of its edges, or with an even echo, it gives the
    :func:`drop_outline` outline.
:func:`level_outline`
    The region connected to the peak at or above a fixed level (%FSH, or dB
    re a stated reference); on a back-wall-loss map in dB, the loss boundary.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import xarray as xr
from scipy import ndimage
from skimage import morphology

from ndtmap._shared import mapgeom as mg
from ndtmap._shared.validate import positive_float
from ndtmap.errors import ParameterError
from ndtmap.indications.detection import Indication
from ndtmap.indications.outline import SizedOutline, contour_outline
from ndtmap.indications.sizing import _check_indication, _drop_level, _drop_map, _fixed_level, _sizing_map, drop_factor

__all__ = [
    "EDGE_METHOD",
    "drop_outline",
    "edge_maximum_outline",
    "level_outline",
    "local_maximum",
    "significant_maxima",
]

#: Name of the edge method on records.
EDGE_METHOD = "6 dB drop from the local maximum at each edge"


def _exclude(exclude: Any, shape: tuple[int, ...]) -> np.ndarray:
    if exclude is None:
        return np.zeros(shape, dtype=bool)
    out = np.asarray(exclude, dtype=bool)
    if out.shape != tuple(shape):
        raise ParameterError(f"`exclude` must have the map's shape {tuple(shape)}, got {out.shape}")
    return out


def _member(values: np.ndarray, levels: np.ndarray, pk: tuple[int, int], exclude: np.ndarray) -> np.ndarray:
    with np.errstate(invalid="ignore"):
        mask = np.isfinite(values) & (values - levels >= 0) & ~exclude
    return mg.connected_to(mask, pk)


def drop_outline(amplitude_map: xr.DataArray, indication: Indication, *, drop_db: float = 6.0,
                 exclude: Any = None) -> SizedOutline:
    """Outline of the region 8-connected to the peak where the amplitude is at least the peak less `drop_db`.

    Parameters
    ----------
    amplitude_map : xarray.DataArray (scan, index)
        Amplitude, %FSH (the map the indication was detected on).
    indication : Indication
        The indication.
    drop_db : float, default 6
        Drop from the peak (6: half the peak).
    exclude : numpy.ndarray of bool, optional
        Cells of other indications, never part of this one's region.

    Returns
    -------
    SizedOutline

    Examples
    --------
    >>> import numpy as np, xarray as xr
    >>> from ndtmap.indications.detection import detect_indications
    >>> a = np.zeros((9, 9)); a[2:7, 3:6] = 80.0
    >>> m = xr.DataArray(a, dims=("scan", "index"), coords={"scan": np.arange(9.0), "index": np.arange(9.0)})
    >>> o = drop_outline(m, detect_indications(m, threshold_fsh=20)[0])
    >>> o.length_scan_mm, o.length_index_mm, o.area_mm2  # crossings half-way to the zero samples
    (5.0, 3.0, 14.5)
    """
    amp = _drop_map(amplitude_map, drop_db)
    pk = _check_indication(indication, amp.shape)
    level = _drop_level(amp.values, pk, drop_db, indication)
    levels = np.full(amp.shape, level)
    member = _member(amp.values, levels, pk, _exclude(exclude, amp.shape))
    return contour_outline(amp, levels, member, method=f"{float(drop_db):g} dB drop", level_fsh=level)


def level_outline(
    amplitude_map: xr.DataArray,
    indication: Indication,
    *,
    level_fsh: float | None = None,
    level_db: float | None = None,
    reference: float | xr.DataArray | None = None,
    exclude: Any = None,
) -> SizedOutline:
    """Outline of the region 8-connected to the peak at or above a fixed level.

    Parameters
    ----------
    amplitude_map : xarray.DataArray (scan, index)
        Amplitude in %FSH, or any map whose indication is "value >= level"
        (a back-wall-loss map in dB, with `level_db`).
    indication : Indication
        The indication.
    level_fsh : float, optional
        Level in the map's units.
    level_db, reference : float, optional
        Level in dB re `reference` (%FSH, a number or a per-position map);
        on a map in dB (``units`` 'dB', e.g. a back-wall-loss map), `level_db`
        alone, in the map's dB.
    exclude : numpy.ndarray of bool, optional
        Cells of other indications.

    Returns
    -------
    SizedOutline

    Raises
    ------
    UnitsError
        For `level_fsh` on a map in dB, or positions that are angles.
    """
    amp = _sizing_map(amplitude_map)
    pk = _check_indication(indication, amp.shape)
    levels, single, method = _fixed_level(amp, level_fsh, level_db, reference)
    member = _member(amp.values, levels, pk, _exclude(exclude, amp.shape))
    return contour_outline(amp, levels, member, method=method, level_fsh=single)


def local_maximum(values: np.ndarray, source: np.ndarray, scan: np.ndarray, index: np.ndarray,
                  radius_mm: float) -> np.ndarray:
    """The largest value of the `source` cells within `radius_mm` of each cell along both axes; NaN where none.

    The window is the square of half-side `radius_mm` (mm, on the positions
    as they are, uneven spacing included), taken as two 1-D passes.

    Examples
    --------
    >>> v = np.array([[1.0, 5.0, 2.0, 0.0, 0.0]]); src = v > 0
    >>> local_maximum(v, src, np.array([0.0]), np.arange(5.0), 1.0)[0].tolist()
    [5.0, 5.0, 5.0, 2.0, nan]
    """
    radius = positive_float("radius_mm", radius_mm)
    vals = np.where(source & np.isfinite(values), values, -np.inf)
    out = np.full(values.shape, -np.inf)
    if source.any():
        ks, ki = _reach(scan, radius), _reach(index, radius)
        rows, cols = np.nonzero(source)
        s0, s1 = max(0, rows.min() - ks), min(values.shape[0], rows.max() + ks + 1)
        c0, c1 = max(0, cols.min() - ki), min(values.shape[1], cols.max() + ki + 1)
        along_scan = _max_within(vals[s0:s1, c0:c1], scan[s0:s1], radius, ks)
        out[s0:s1, c0:c1] = _max_within(along_scan.T, index[c0:c1], radius, ki).T
    return np.where(np.isfinite(out), out, np.nan)


def _reach(x: np.ndarray, radius_mm: float) -> int:
    """How many positions along `x` can lie within `radius_mm` of one another."""
    if x.size < 2:
        return 0
    return min(x.size - 1, int(math.ceil(radius_mm / float(np.min(np.diff(x))))))


def _max_within(vals: np.ndarray, x: np.ndarray, radius_mm: float, reach: int) -> np.ndarray:
    """Along the first axis, the largest of `vals` at positions `x` within `radius_mm` of each position."""
    out = vals.copy()
    n = vals.shape[0]
    for d in range(1, reach + 1):
        if d >= n:
            break
        near = np.abs(x[d:] - x[:-d]) <= radius_mm  # pairs (k, k + d) within reach
        np.maximum(out[:-d], np.where(near[:, None], vals[d:], -np.inf), out=out[:-d])
        np.maximum(out[d:], np.where(near[:, None], vals[:-d], -np.inf), out=out[d:])
    return out


def significant_maxima(values: np.ndarray, region: np.ndarray, *, dynamic_db: float = 6.0) -> int:
    """Number of separate maxima in `region` that stand at least `dynamic_db` above the saddle to a higher one.

    The h-maxima of the amplitude in dB (:func:`skimage.morphology.h_maxima`,
    8-connected): a hot spot on a plateau is one maximum; two reflectors
    whose echoes dip by 6 dB or more between them are two.

    Examples
    --------
    >>> v = np.array([[10.0, 90.0, 40.0, 20.0, 50.0, 10.0]]); r = v > 15
    >>> significant_maxima(v, r), significant_maxima(v, r, dynamic_db=10.0)
    (2, 1)
    """
    ok = region & np.isfinite(values) & (values > 0)
    if not ok.any():
        return 0
    db = np.where(ok, 20.0 * np.log10(np.where(ok, values, 1.0)), -np.inf)
    floor = float(db[ok].min()) - 2.0 * dynamic_db - 1.0
    db = np.where(ok, db, floor)
    peaks = morphology.h_maxima(db, float(dynamic_db), footprint=mg.STRUCTURE_8) & ok
    return int(ndimage.label(peaks, structure=mg.STRUCTURE_8)[1])


def edge_maximum_outline(
    amplitude_map: xr.DataArray,
    indication: Indication,
    *,
    radius_mm: float,
    drop_db: float = 6.0,
    exclude: Any = None,
) -> SizedOutline:
    """Outline by the `drop_db` drop from the local maximum at each edge (maximum amplitude at the edge).

    Parameters
    ----------
    amplitude_map : xarray.DataArray (scan, index)
        Amplitude, %FSH.
    indication : Indication
        The indication: its detected region and its `drop_db` region from
        the peak are where the local maxima are taken.
    radius_mm : float
        How far from a position its local maximum is sought along scan and
        along index (a square window), mm: at least the
        distance over which the echo rises from an edge to its plateau (about
        one -6 dB beam width).
    drop_db : float, default 6
        Drop from the local maximum.
    exclude : numpy.ndarray of bool, optional
        Cells of other indications.

    Returns
    -------
    SizedOutline

    Examples
    --------
    >>> import numpy as np, xarray as xr
    >>> from ndtmap.indications.detection import detect_indications
    >>> a = np.zeros((7, 16)); a[1:6, 2:14] = 40.0; a[3, 7] = 90.0  # a plateau and a hot spot
    >>> m = xr.DataArray(a, dims=("scan", "index"), coords={"scan": np.arange(7.0), "index": np.arange(16.0)})
    >>> ind = detect_indications(m, threshold_fsh=20)[0]
    >>> round(drop_outline(m, ind).length_index_mm, 2), edge_maximum_outline(m, ind, radius_mm=2.0).length_index_mm
    (1.8, 12.0)
    """
    amp = _drop_map(amplitude_map, drop_db)
    pk = _check_indication(indication, amp.shape)
    excl = _exclude(exclude, amp.shape)
    values = amp.values
    peak_level = _drop_level(values, pk, drop_db, indication)
    source = (indication.region | _member(values, np.full(amp.shape, peak_level), pk, excl)) & ~excl
    scan, index = mg.coords_mm(amp)
    local = local_maximum(values, source, scan, index, radius_mm)
    levels = np.where(np.isfinite(local), drop_factor(drop_db) * local, peak_level)
    with np.errstate(invalid="ignore"):
        mask = np.isfinite(local) & np.isfinite(values) & (values - levels >= 0) & ~excl
    labels, _ = ndimage.label(mask, structure=mg.STRUCTURE_8)
    keep = np.unique(labels[source & mask])
    member = ndimage.binary_fill_holes(np.isin(labels, keep[keep > 0])) & ~excl
    method = EDGE_METHOD if float(drop_db) == 6.0 else f"{float(drop_db):g} dB drop from the local maximum at each edge"
    return contour_outline(amp, levels, member, method=method, level_fsh=None)
