"""Echoes at other depths that the gated map hides: found in the A-scans, each reflector on its own depth layer.

A gated amplitude map keeps the highest echo of the gate at each position.
Where a shallower reflector partly covers a deeper one (or a deeper one is
the stronger), the other echo is in the A-scans but not in the map. With
the grid (``echoes=EchoCheck(grid)`` in :func:`ndtmap.size_indications`):

1. at every position of a detected region, the envelope of the A-scan in
   the gate is searched for echoes at or above the detection level whose
   depth is more than one echo length (:func:`ndtmap.indications.depth_layers.depth_resolution_mm`)
   away from the depth in the map (:func:`scipy.signal.find_peaks`);
2. those echoes are grouped in scan x index x depth: 8-neighbouring
   positions whose echo depths differ by at most one echo length;
3. a group next to (or under) an indication at its depth is the hidden part
   of that reflector; any other group is a reflector of its own, detected
   (:func:`ndtmap.indications.detection.detect_indications`) on its depth
   layer: the highest rectified echo at each position within half an echo
   length of the group's depth range;
4. every indication that borders another at a different depth, or has a
   hidden part, is sized on its own depth layer (:func:`layer_map`), not
   on the gated map.
"""

from __future__ import annotations

import json
import math
from collections.abc import Callable, Mapping, Sequence
from typing import Any

import numpy as np
import xarray as xr
from scipy import ndimage
from scipy import signal as sps

from ndtmap._shared import mapgeom as mg
from ndtmap.errors import NdtmapError
from ndtmap.gates import Gate
from ndtmap.grid.geometry import part_constants
from ndtmap.grid.schema import ascan_in_fsh
from ndtmap.indications.depth_layers import DepthLayer, depth_resolution_mm, touching_indications
from ndtmap.indications.detection import Indication, detect_indications

__all__ = ["gate_depth_window_mm", "layer_map", "hidden_echo_groups", "depth_layers_from_ascans"]


def gate_depth_window_mm(amplitude_map: xr.DataArray, grid: xr.Dataset) -> tuple[float, float] | None:
    """The depth window of the gate that made the map (attr ``gate``), mm; None for a following gate or none."""
    text = amplitude_map.attrs.get("gate")
    if not isinstance(text, str) or not text:
        return None
    try:
        gate = Gate.from_dict(json.loads(text))
    except (ValueError, NdtmapError):
        return None
    if gate.follows is not None:
        return None
    if gate.unit == "mm":
        return float(gate.start), float(gate.end)
    pc = part_constants(grid)
    return float(pc.depth_mm(gate.start)), float(pc.depth_mm(gate.end))


def _depth_axis(grid: xr.Dataset) -> np.ndarray:
    pc = part_constants(grid)
    return np.asarray(pc.depth_mm(pc.time_us), dtype=np.float64)


def layer_map(grid: xr.Dataset, amplitude_map: xr.DataArray, lo_mm: float, hi_mm: float
              ) -> tuple[xr.DataArray, xr.DataArray]:
    """Amplitude (%FSH, highest rectified sample) and its depth (mm) in the depth window `lo_mm`..`hi_mm`.

    On the positions of `amplitude_map` (the map's attributes are kept).
    """
    depth = _depth_axis(grid)
    sel = np.flatnonzero((depth >= lo_mm) & (depth <= hi_mm))
    if sel.size == 0:
        sel = np.array([int(np.argmin(np.abs(depth - 0.5 * (lo_mm + hi_mm))))])
    window = np.abs(ascan_in_fsh(grid).isel(time=slice(int(sel[0]), int(sel[-1]) + 1)))
    window = window.transpose("scan", "index", "time")
    valid = np.asarray(window.notnull().all("time").values)  # reductions: dask-backed grids stay lazy until here
    filled = window.fillna(-np.inf)
    amp = np.where(valid, np.asarray(filled.max("time").values, dtype=np.float64), np.nan)
    at = np.asarray(filled.argmax("time").values)
    dep = np.where(valid, depth[sel[0] + at], np.nan)
    attrs = {k: v for k, v in amplitude_map.attrs.items() if k != "gate"}
    return amplitude_map.copy(data=amp).assign_attrs(attrs), amplitude_map.copy(data=dep).assign_attrs(
        {**attrs, "units": "mm"})


def hidden_echo_groups(
    grid: xr.Dataset, amplitude_map: xr.DataArray, depth_map: xr.DataArray, cells: np.ndarray,
    level_fsh: np.ndarray, window_mm: tuple[float, float], resolution_mm: float,
    level_at_depth: Callable[[np.ndarray], np.ndarray] | None = None,
) -> list[dict[str, Any]]:
    """Groups of echoes at other depths than the map's, at the positions `cells`, in scan x index x depth.

    An echo counts where it reaches the detection level: `level_fsh` at its
    position or, for a level re a depth-dependent curve (DAC, DGS),
    ``level_at_depth(depth)`` at its own depth (NaN there: not counted).

    An echo within one echo length of 2 or 3 times the map's depth at that
    position, and not stronger than the map's echo, is its repeat (multiple
    reflection) and is left out.

    Returns
    -------
    list of dict
        ``cells`` (bool mask), ``depth_min_mm``, ``depth_max_mm`` and ``peak`` (array index of the strongest echo).
    """
    depth = _depth_axis(grid)
    sel = np.flatnonzero((depth >= window_mm[0]) & (depth <= window_mm[1]))
    if sel.size < 3 or not cells.any():
        return []
    sig = ascan_in_fsh(grid).transpose("scan", "index", "time").isel(time=slice(int(sel[0]), int(sel[-1]) + 1))
    rows, cols = np.nonzero(cells)
    a = np.asarray(sig.isel(scan=xr.DataArray(rows, dims="cell"), index=xr.DataArray(cols, dims="cell")).values,
                   dtype=np.float64)  # (n cells, n samples): only the A-scans of the detected regions
    env = np.abs(sps.hilbert(a, axis=-1)) if np.nanmin(a) < 0 else a
    z = depth[sel]
    dz = float(np.median(np.diff(z))) if z.size > 1 else 1.0
    gap = max(1, int(resolution_mm / max(dz, 1e-9)))
    by_depth = None
    if level_at_depth is not None:  # the curve's level at each sample's own depth
        by_depth = np.asarray(level_at_depth(z), dtype=np.float64)
        by_depth = np.where(np.isfinite(by_depth), by_depth, np.inf)
    points = []
    dmap = np.asarray(depth_map.values, dtype=np.float64)
    amap = np.asarray(amplitude_map.values, dtype=np.float64)
    for k in range(rows.size):
        e = env[k]
        if not np.all(np.isfinite(e)):
            continue
        d0, a0 = dmap[rows[k], cols[k]], amap[rows[k], cols[k]]
        height = level_fsh[rows[k], cols[k]] if by_depth is None else by_depth
        peaks, props = sps.find_peaks(e, height=height, distance=gap)
        for p, h in zip(peaks, props["peak_heights"], strict=True):
            if math.isfinite(d0) and (abs(z[p] - d0) <= resolution_mm or (
                    h <= a0 and min(abs(z[p] - m * d0) for m in (2, 3)) <= resolution_mm)):
                continue
            points.append((int(rows[k]), int(cols[k]), float(z[p]), float(h)))
    return _group(points, cells.shape, resolution_mm)


def _group(points: list[tuple[int, int, float, float]], shape: tuple[int, ...], res: float) -> list[dict[str, Any]]:
    """Connected groups of echo points: 8-neighbouring positions with depths within `res`."""
    parent = list(range(len(points)))

    def find(i: int) -> int:
        while parent[i] != i:
            parent[i] = parent[parent[i]]
            i = parent[i]
        return i

    by_cell: dict[tuple[int, int], list[int]] = {}
    for k, (r, c, _, _) in enumerate(points):
        by_cell.setdefault((r, c), []).append(k)
    for k, (r, c, d, _) in enumerate(points):
        for dr in (-1, 0, 1):
            for dc in (-1, 0, 1):
                for m in by_cell.get((r + dr, c + dc), ()):
                    if m != k and abs(points[m][2] - d) <= res:
                        parent[find(m)] = find(k)
    groups: dict[int, list[int]] = {}
    for k in range(len(points)):
        groups.setdefault(find(k), []).append(k)
    out = []
    for members in groups.values():
        mask = np.zeros(shape, dtype=bool)
        for k in members:
            mask[points[k][0], points[k][1]] = True
        best = max(members, key=lambda k: points[k][3])
        ds = [points[k][2] for k in members]
        out.append({"cells": mask, "depth_min_mm": min(ds), "depth_max_mm": max(ds),
                    "peak": (points[best][0], points[best][1])})
    return out


def _owner(group: Mapping[str, Any], inds: Sequence[Indication], res: float) -> Indication | None:
    """The indication whose hidden part the group is: at its depth, next to or over its region."""
    grown = ndimage.binary_dilation(group["cells"], structure=mg.STRUCTURE_8)
    for ind in inds:
        if ind.depth_min_mm is None or ind.depth_max_mm is None or ind.region.shape != grown.shape:
            continue
        if (group["depth_min_mm"] <= ind.depth_max_mm + res and group["depth_max_mm"] >= ind.depth_min_mm - res
                and np.any(grown & ind.region)):
            return ind
    return None


def depth_layers_from_ascans(
    grid: xr.Dataset, amplitude_map: xr.DataArray, depth_map: xr.DataArray, inds: Sequence[Indication],
    level: Mapping[str, Any], *, level_fsh: np.ndarray, curve: Any = None,
) -> tuple[list[Indication], dict[int, DepthLayer]]:
    """The reflectors the gated map hides (new indications, numbered after `inds`) and the depth layers to size on.

    Parameters
    ----------
    grid : xarray.Dataset
        The grid the maps come from.
    amplitude_map, depth_map : xarray.DataArray
        The gated maps the indications were detected on.
    inds : sequence of Indication
        The indications of the map.
    level : mapping
        The keywords of the detection level (``threshold_fsh`` or ``threshold_db`` and ``reference``).
    level_fsh : numpy.ndarray
        The detection level at every position, %FSH.
    curve : DacCurve, optional
        The depth-dependent curve a level in dB (``threshold_db``) is re:
        echoes at other depths are then judged against the curve at their
        own depth, not at the depth of the map's echo.

    Returns
    -------
    (new indications, layers by id)
    """
    res = depth_resolution_mm(amplitude_map.attrs)
    window = gate_depth_window_mm(amplitude_map, grid)
    amp_inds = [i for i in inds if i.kind == "amplitude"]
    if res is None or window is None or not amp_inds or "water_path_mm" in grid.attrs:
        return [], {}
    if tuple(grid.sizes.get(d, 0) for d in ("scan", "index")) != amplitude_map.shape:
        return [], {}
    cells = np.logical_or.reduce([i.region for i in amp_inds])
    level_at_depth = None
    if curve is not None and level.get("threshold_db") is not None:
        factor = 10.0 ** (float(level["threshold_db"]) / 20.0)

        def level_at_depth(depth_mm: np.ndarray) -> np.ndarray:
            return np.asarray(curve.level_fsh(depth_mm), dtype=np.float64) * factor

    groups = hidden_echo_groups(grid, amplitude_map, depth_map, cells, level_fsh, window, res,
                                level_at_depth=level_at_depth)
    extended: dict[int, list[dict[str, Any]]] = {}
    new: list[Indication] = []
    for g in groups:
        owner = _owner(g, [*amp_inds, *new], res)
        if owner is not None:
            extended.setdefault(owner.id, []).append(g)
            continue
        found = _layer_indication(grid, amplitude_map, g, level, res, first_id=len(inds) + len(new) + 1,
                                  curve=curve)
        new.extend(found)
    layers = {}
    near = touching_indications([*amp_inds, *new])
    for ind in [*amp_inds, *new]:
        if ind.id in near or ind.id in extended or ind in new:
            layers[ind.id] = _ascan_layer(grid, amplitude_map, depth_map, ind, res, hidden=ind.id in extended,
                                          new=ind in new)
    return new, layers


def _layer_indication(grid: xr.Dataset, amplitude_map: xr.DataArray, group: Mapping[str, Any],
                      level: Mapping[str, Any], res: float, *, first_id: int, curve: Any = None) -> list[Indication]:
    """The indication(s) on the depth layer of a hidden echo group that contain its strongest echo."""
    lam, dep = layer_map(grid, amplitude_map, group["depth_min_mm"] - res / 2, group["depth_max_mm"] + res / 2)
    if curve is not None and level.get("threshold_db") is not None:  # re the curve at the layer's own depth
        level = {**level, "reference": dep.copy(data=np.asarray(curve.level_fsh(dep.values), dtype=np.float64))}
    found = detect_indications(lam, **level, depth_map=dep, first_id=first_id)
    i, j = group["peak"]
    hit = [ind for ind in found if ind.region[i, j]]
    return [Indication(**{**{f: getattr(ind, f) for f in ind.__dataclass_fields__}, "id": first_id + k})
            for k, ind in enumerate(hit)]


def _ascan_layer(grid: xr.Dataset, amplitude_map: xr.DataArray, depth_map: xr.DataArray, ind: Indication,
                 res: float, *, hidden: bool, new: bool) -> DepthLayer:
    """The depth layer of `ind` from the A-scans, with its note.

    Where the layer's echo is at 2 or 3 times the depth of the gated map's echo and not stronger, it is
    that echo's repeat, not this reflector: the layer reads 0 there.
    """
    lo = (ind.depth_min_mm if ind.depth_min_mm is not None else ind.depth_mm) - res / 2
    hi = (ind.depth_max_mm if ind.depth_max_mm is not None else ind.depth_mm) + res / 2
    lam, dep = layer_map(grid, amplitude_map, lo, hi)
    d0 = np.asarray(depth_map.values, dtype=np.float64)
    a0 = np.asarray(amplitude_map.values, dtype=np.float64)
    z, a = dep.values, lam.values
    with np.errstate(invalid="ignore"):
        repeat = (np.abs(z - d0) > res) & (a0 >= a) & np.logical_or.reduce(
            [np.abs(z - k * d0) <= res for k in (2, 3)])
    if repeat.any():
        lam = lam.copy(data=np.where(repeat, 0.0, a))
    if new:
        why = ("found in the A-scans: a stronger echo at another depth hides it in the gated map; a separate "
               "reflector at this depth")
    elif hidden:
        why = "part of it is hidden in the gated map by a stronger echo at another depth and was found in the A-scans"
    else:
        why = "its plan region borders an indication at another depth"
    note = (f"{why}: sized on its own depth layer from the A-scans (highest echo between {lo:.1f} and {hi:.1f} mm); "
            "where a shallower reflector shadows it completely no echo comes back and the size there is a lower bound")
    return DepthLayer(lam, (), (note,))
