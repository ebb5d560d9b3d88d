"""Reflectors at different depths: the depth resolution of the pulse and the split of plan regions by depth.

A gated C-scan keeps one echo per probe position, so two reflectors at
different depths whose plan regions touch (side by side) or overlap (the
shallower one partly above the deeper one) make one connected plan region
on the amplitude map. They are different reflectors, and are reported as
different indications:

* **From the maps** (:func:`split_by_depth`): the cells of a plan region are
  connected only where neighbouring depths agree, i.e. differ by at most the
  depth step tolerance (:func:`depth_step_tolerance_mm`), or where the step
  continues the depth slope of the neighbouring cells on both sides (an
  inclined reflector, whose depth changes by about the same step from cell
  to cell, stays one). The connected parts are the indications. This is
  connectivity with a per-neighbour step, not absolute depth bins, so a
  sloping reflector is not cut into bands.
* **From the A-scans** (:mod:`ndtmap.indications.hidden_echoes`): where a
  stronger echo hides a second one in the same gate, the second echo is
  found in the A-scans.

The tolerance is the depth resolution of the pulse (:func:`depth_resolution_mm`:
the length in depth of an echo down to -20 dB of its envelope, from the
probe's centre frequency, fractional bandwidth and the velocity) plus three
times the depth noise of the map (robust spread of the neighbour-to-neighbour
depth steps inside the regions): two echoes further apart than one echo
length are separate in the A-scan, nearer ones merge into one echo. It is
not a fraction of the wall thickness.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import xarray as xr
from scipy import ndimage
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components

from ndtmap._shared import mapgeom as mg

__all__ = [
    "DepthLayer",
    "depth_resolution_mm",
    "depth_noise_mm",
    "depth_step_tolerance_mm",
    "split_by_depth",
    "merge_repeat_fragments",
    "touching_indications",
    "map_layer",
]

#: Neighbour directions of 8-connectivity, each pair once.
_STEPS = ((0, 1), (1, 0), (1, 1), (1, -1))


def depth_resolution_mm(attrs: Mapping[str, Any]) -> float | None:
    """Length in depth of one echo down to -20 dB of its envelope, mm (None without the probe data).

    For a Gaussian pulse of centre frequency ``f`` (``probe_frequency_mhz``)
    and -6 dB fractional bandwidth ``B`` (``probe_bandwidth``, 0.5 when absent,
    held to 0.2..1.5) the envelope is ``exp(-t^2 / (2 sigma_t^2))`` with
    ``sigma_t = 2 sqrt(2 ln 2) / (2 pi B f)``; it is above -20 dB over
    ``2 sqrt(2 ln 10) sigma_t``, turned into depth with ``c cos(theta) / 2``
    (``velocity_m_s``, ``beam_angle_deg``). Two echoes further apart than
    this are separate in the A-scan.

    Examples
    --------
    >>> round(depth_resolution_mm({"probe_frequency_mhz": 5.0, "probe_bandwidth": 0.6, "velocity_m_s": 5920.0}), 2)
    1.59
    >>> depth_resolution_mm({"velocity_m_s": 5920.0}) is None
    True
    """
    f = mg.map_attr(attrs, "probe_frequency_mhz")
    c = mg.map_attr(attrs, "velocity_m_s")
    if f is None or c is None or f <= 0 or c <= 0:
        return None
    bw = min(max(mg.map_attr(attrs, "probe_bandwidth", 0.5) or 0.5, 0.2), 1.5)
    theta = math.radians(mg.map_attr(attrs, "beam_angle_deg", 0.0) or 0.0)
    sigma_t = 2.0 * math.sqrt(2.0 * math.log(2.0)) / (2.0 * math.pi * bw * f)  # us
    depth_per_us = c * 1e-3 / 2.0 * math.cos(theta)
    return 2.0 * math.sqrt(2.0 * math.log(10.0)) * sigma_t * depth_per_us


def _pairs(mask: np.ndarray, step: tuple[int, int]) -> tuple[np.ndarray, np.ndarray]:
    """Flat indices (p, p + step) of the 8-neighbour pairs along `step` with both cells in `mask`."""
    n0, n1 = mask.shape
    r, c = np.nonzero(mask)
    r2, c2 = r + step[0], c + step[1]
    ok = (r2 >= 0) & (r2 < n0) & (c2 >= 0) & (c2 < n1)
    r, c, r2, c2 = r[ok], c[ok], r2[ok], c2[ok]
    ok = mask[r2, c2]
    return r[ok] * n1 + c[ok], r2[ok] * n1 + c2[ok]


def depth_noise_mm(depth: np.ndarray, mask: np.ndarray) -> float:
    """Depth noise of a map inside `mask`: robust spread of the neighbour depth steps, mm.

    For each of the four neighbour directions, the steps between neighbouring
    cells of `mask` less their median (the slope of an inclined reflector);
    the noise is 1.4826 times the median absolute value of all of them
    (the MAD, a standard deviation for Gaussian noise) divided by sqrt(2)
    (a step is the difference of two noisy depths). 0 with fewer than 10 steps.

    Examples
    --------
    >>> d = np.add.outer(np.zeros(6), np.arange(6.0))  # a ramp: no noise
    >>> depth_noise_mm(d, np.ones((6, 6), bool))
    0.0
    """
    flat = np.asarray(depth, dtype=np.float64).reshape(-1)
    devs = []
    for step in _STEPS:
        p, q = _pairs(mask, step)
        dd = flat[q] - flat[p]
        dd = dd[np.isfinite(dd)]
        if dd.size:
            devs.append(dd - np.median(dd))
    if not devs or sum(d.size for d in devs) < 10:
        return 0.0
    allv = np.concatenate(devs)
    return float(1.4826 * np.median(np.abs(allv)) / math.sqrt(2.0))


def depth_step_tolerance_mm(attrs: Mapping[str, Any], depth: np.ndarray, mask: np.ndarray) -> float | None:
    """Largest depth step between neighbours of one reflector: depth resolution plus 3 x the depth noise, mm.

    None when the map's attributes do not give the depth resolution
    (:func:`depth_resolution_mm`): regions are then not split by depth.

    Examples
    --------
    >>> attrs = {"probe_frequency_mhz": 5.0, "probe_bandwidth": 0.6, "velocity_m_s": 5920.0}
    >>> round(depth_step_tolerance_mm(attrs, np.full((4, 4), 12.0), np.ones((4, 4), bool)), 2)
    1.59
    """
    res = depth_resolution_mm(attrs)
    if res is None:
        return None
    return res + 3.0 * depth_noise_mm(depth, mask)


def _step_from(flat: np.ndarray, mask: np.ndarray, r: np.ndarray, c: np.ndarray, step: tuple[int, int]
               ) -> np.ndarray:
    """Depth step from cell (r, c) to (r, c) + `step`; NaN where that cell is off the map or not in `mask`."""
    n0, n1 = mask.shape
    r2, c2 = r + step[0], c + step[1]
    out = np.full(r.shape, np.nan)
    ok = (r2 >= 0) & (r2 < n0) & (c2 >= 0) & (c2 < n1)
    ok[ok] = mask[r2[ok], c2[ok]]
    out[ok] = flat[r2[ok] * n1 + c2[ok]] - flat[r[ok] * n1 + c[ok]]
    return out


def _linked(flat: np.ndarray, mask: np.ndarray, step: tuple[int, int], tol: float) -> tuple[np.ndarray, np.ndarray]:
    """The neighbour pairs along `step` that belong to one reflector (see :func:`split_by_depth`)."""
    n1 = mask.shape[1]
    p, q = _pairs(mask, step)
    delta = flat[q] - flat[p]
    keep = ~np.isfinite(delta) | (np.abs(delta) <= tol)
    # the step continues the slope on both sides where those cells exist (an inclined reflector)
    smooth = np.isfinite(delta)
    seen = np.zeros(p.shape, dtype=bool)
    pr, pc = np.divmod(p, n1)
    qr, qc = np.divmod(q, n1)
    for other in (-_step_from(flat, mask, pr, pc, (-step[0], -step[1])), _step_from(flat, mask, qr, qc, step)):
        has = np.isfinite(other)
        smooth &= ~has | (np.abs(delta - other) <= tol)
        seen |= has
    keep |= smooth & seen
    return p[keep], q[keep]


def split_by_depth(region: np.ndarray, depth: np.ndarray, tol_mm: float) -> list[np.ndarray]:
    """The parts of a plan region that are one reflector each: cells connected where their depths agree.

    Two 8-neighbouring cells of `region` are connected when their depths
    differ by at most `tol_mm`, or when the step continues the depth step
    of the neighbouring cells on both sides along the same direction within
    `tol_mm` (the depth of an inclined reflector changes by about the same
    step from cell to cell); a cell without a depth (NaN) connects to its
    neighbours. The parts are the connected components of that graph
    (:func:`scipy.sparse.csgraph.connected_components`).

    Parameters
    ----------
    region : numpy.ndarray of bool (scan, index)
        One connected plan region.
    depth : numpy.ndarray (scan, index)
        Depth map, mm (NaN where unknown).
    tol_mm : float
        Largest depth step between neighbours of one reflector, mm
        (:func:`depth_step_tolerance_mm`).

    Returns
    -------
    list of numpy.ndarray of bool
        The parts, largest first (the region itself when it is one).

    Examples
    --------
    >>> reg = np.ones((3, 6), bool)
    >>> d = np.array([[12.0] * 3 + [24.0] * 3] * 3)  # two laminations side by side
    >>> [int(p.sum()) for p in split_by_depth(reg, d, 1.6)]
    [9, 9]
    >>> ramp = np.add.outer(np.zeros(3), 12.0 + 3.0 * np.arange(6))  # one reflector sloping 3 mm per cell
    >>> len(split_by_depth(reg, ramp, 1.6))
    1
    """
    mask = np.asarray(region, dtype=bool)
    flat = np.asarray(depth, dtype=np.float64).reshape(-1)
    rows, cols = [], []
    for step in _STEPS:
        p, q = _linked(flat, mask, step, float(tol_mm))
        rows.append(p)
        cols.append(q)
    cells = np.flatnonzero(mask.reshape(-1))
    lookup = np.full(mask.size, -1)
    lookup[cells] = np.arange(cells.size)
    r = lookup[np.concatenate(rows)]
    c = lookup[np.concatenate(cols)]
    graph = coo_matrix((np.ones(r.size), (r, c)), shape=(cells.size, cells.size))
    n, labels = connected_components(graph, directed=False)
    if n == 1:
        return [mask]
    parts = []
    for k in range(n):
        part = np.zeros(mask.size, dtype=bool)
        part[cells[labels == k]] = True
        parts.append(part.reshape(mask.shape))
    parts.sort(key=lambda m: -int(m.sum()))
    return parts


def _median_depth(part: np.ndarray, depth: np.ndarray) -> float:
    d = depth[part]
    d = d[np.isfinite(d)]
    return float(np.median(d)) if d.size else math.nan


def merge_repeat_fragments(parts: list[np.ndarray], depth: np.ndarray, values: np.ndarray, tol_mm: float
                           ) -> tuple[list[np.ndarray], np.ndarray]:
    """Give back to its reflector a part that is its repeat echo: at 2 or 3 times its depth and inside it.

    A repeat echo (reflector - front surface - reflector) lies where its
    primary is, so a part of a split region whose median depth is within
    `tol_mm` of 2 or 3 times that of a neighbouring part with a higher
    peak, that touches it, is smaller and lies within its plan extent (its
    bounding box of positions), is the gate picking the primary's repeat at
    a few positions (e.g. the corner of a lamination): it is merged into the
    primary's part. A reflector beside another at twice its depth is not
    inside it and stays.

    Returns
    -------
    (parts, repeat_cells)
        The parts after merging and the positions merged as repeats (their
        depths are not the reflector's).
    """
    repeat = np.zeros(depth.shape, dtype=bool)
    if len(parts) < 2:
        return parts, repeat
    depths = [_median_depth(p, depth) for p in parts]
    peaks = [float(np.nanmax(np.where(p, values, np.nan))) for p in parts]
    merged_into = list(range(len(parts)))
    sizes = [int(np.count_nonzero(p)) for p in parts]
    for k, part in enumerate(parts):
        grown = ndimage.binary_dilation(part, structure=mg.STRUCTURE_8)
        rows, cols = np.nonzero(part)
        for m, other in enumerate(parts):
            if m == k or not (peaks[m] >= peaks[k]) or not math.isfinite(depths[m]) or sizes[k] >= sizes[m]:
                continue
            if min(abs(depths[k] - j * depths[m]) for j in (2, 3)) > tol_mm or not np.any(grown & other):
                continue
            r_o, c_o = np.nonzero(other)
            if r_o.min() <= rows.min() and rows.max() <= r_o.max() and c_o.min() <= cols.min() and \
                    cols.max() <= c_o.max():
                merged_into[k] = m
                break
    for k in range(len(parts)):  # a chain ends at a part that is not merged (sizes grow along it: no cycle)
        while merged_into[merged_into[k]] != merged_into[k]:
            merged_into[k] = merged_into[merged_into[k]]
    out = []
    for m, part in enumerate(parts):
        if merged_into[m] != m:
            continue
        whole = part.copy()
        for k in range(len(parts)):
            if merged_into[k] == m and k != m:
                whole |= parts[k]
                repeat |= parts[k]
        out.append(whole)
    return out, repeat


@dataclass(frozen=True, eq=False)
class DepthLayer:
    """The map an indication at its own depth is sized on, with the flags and notes that come with it.

    Attributes
    ----------
    amplitude_map : xarray.DataArray (scan, index)
        Amplitude of this reflector's depth layer, %FSH.
    flags, notes : tuple of str
    """

    amplitude_map: xr.DataArray
    flags: tuple[str, ...] = ()
    notes: tuple[str, ...] = ()


def touching_indications(indications: Sequence[Any]) -> dict[int, list[Any]]:
    """For each amplitude indication, the other amplitude indications whose plan regions touch or overlap it.

    On one map, touching regions are the parts of one plan region split by
    depth (:func:`split_by_depth`): reflectors at different depths.
    """
    amp = [ind for ind in indications if ind.kind == "amplitude"]
    out: dict[int, list[Any]] = {}
    for ind in amp:
        rows, cols = np.nonzero(ind.region)
        if not rows.size:
            continue
        box = (slice(max(rows.min() - 1, 0), rows.max() + 2), slice(max(cols.min() - 1, 0), cols.max() + 2))
        grown = ndimage.binary_dilation(ind.region[box], structure=mg.STRUCTURE_8)  # within its bounding box
        near = [o for o in amp if o is not ind and o.region.shape == ind.region.shape and
                bool(np.any(grown & o.region[box]))]
        if near:
            out[ind.id] = near
    return out


def _depth_text(ind: Any) -> str:
    return f"{ind.depth_mm:.1f} mm" if ind.depth_mm is not None else "another depth"


def map_layer(amplitude_map: xr.DataArray, ind: Any, neighbours: Sequence[Any]) -> DepthLayer:
    """The depth layer of `ind` from the gated map alone: the positions of its neighbours at other depths read 0.

    The gated map holds one echo per position; where a neighbour at another
    depth is the echo there, this reflector's echo (if any) is not in the
    map. Its sizing then stops at the neighbour's region (flag
    ``depth_neighbour``: a length or area there may be short; give the
    A-scans, ``echoes=EchoCheck(grid)``, to size it on its own depth).
    """
    values = np.array(amplitude_map.values, dtype=np.float64)
    for other in neighbours:
        values[other.region & np.isfinite(values)] = 0.0
    ids = ", ".join(f"{o.id} ({_depth_text(o)})" for o in neighbours)
    note = (
        f"the plan region borders indication(s) {ids} at another depth: sized on its own depth, their positions "
        "taken as below the level; where their echo is the stronger the gated map does not show this reflector, "
        "so a length or area there may be short (the A-scans would show it)"
    )
    return DepthLayer(amplitude_map.copy(data=values), ("depth_neighbour",), (note,))
