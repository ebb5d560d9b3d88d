"""Sized outlines: an indication's sizing boundary as a sub-cell contour, and its properties in mm.

The boundary of a sizing method (the -6 dB drop level, the level of the
method used) is traced by marching squares (:func:`skimage.measure.find_contours`)
on the amplitude minus the level, over the cells of the sized region only:
cells of other indications and cells outside the region count as below the
level, so neighbours never merge. A crossing lies on a cell edge, linearly
interpolated between the two samples on each side (as the drop lengths do),
and fractional array indices are turned into mm by interpolating the
coordinate arrays, so non-uniform spacing is handled. Where the region
reaches the end of the map the outline runs along the last samples (the
sizes are then lower bounds). Missing samples are given the value of the
nearest valid sample for the contour only (the record says ``data_gap``).

Properties (:func:`outline_properties`, mm): the extents along the scan and
the index axis, the largest dimension in any direction (the maximum Feret
diameter: the largest distance between two vertices, found on the convex
hull) and its orientation (degrees from the scan axis towards the index
axis, in (-90, 90]), the enclosed area (shoelace; outer loops run
counter-clockwise, holes clockwise, so holes are subtracted) and the
perimeter.

Uncertainty (estimates, not bounds): an end of an extent or of the largest
dimension is the linear interpolation between two samples; the true
crossing lies between the same two samples only when the amplitude is
monotone and noise-free between them, so each end contributes the full
spacing of its two bracketing samples, and the two ends are added. The area
contributes, along the outline, its length times half the local spacing.
Left out: noise, the sampling of the peak (the level's own error), and the
beam (see the flags).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import xarray as xr
from scipy import ndimage
from scipy.spatial import ConvexHull, QhullError
from skimage import measure

from ndtmap._shared import mapgeom as mg
from ndtmap.errors import ParameterError

__all__ = ["OutlineProperties", "SizedOutline", "outline_properties", "contour_outline"]


@dataclass(frozen=True)
class OutlineProperties:
    """Geometry of closed polygons in (scan, index) mm.

    Attributes
    ----------
    length_scan_mm, length_index_mm : float
        Extents along the scan and the index axis.
    length_mm : float
        Largest dimension in any direction (maximum Feret diameter).
    orientation_deg : float
        Direction of `length_mm` from the scan axis towards the index axis, degrees in (-90, 90].
    area_mm2 : float
        Enclosed area, holes subtracted.
    perimeter_mm : float
        Total length of the loops.
    scan_ends_mm, index_ends_mm : (float, float)
        Least and greatest scan / index position of the outline.
    feret_ends_mm : ((float, float), (float, float))
        The two vertices (scan, index) of `length_mm`.
    width_mm : float
        Extent across the direction of `length_mm`.
    """

    length_scan_mm: float
    length_index_mm: float
    length_mm: float
    orientation_deg: float
    area_mm2: float
    perimeter_mm: float
    scan_ends_mm: tuple[float, float]
    index_ends_mm: tuple[float, float]
    feret_ends_mm: tuple[tuple[float, float], tuple[float, float]]
    width_mm: float


def _signed_area(p: np.ndarray) -> float:
    x, y = p[:, 0], p[:, 1]
    return 0.5 * float(np.dot(x, np.roll(y, -1)) - np.dot(np.roll(x, -1), y))


def _feret(points: np.ndarray) -> tuple[float, int, int]:
    """Largest pairwise distance of `points` (searched on the convex hull) and the two indices."""
    candidates = np.arange(len(points))
    if len(points) > 3:
        try:
            candidates = ConvexHull(points).vertices
        except QhullError:  # all on a line: every point is a candidate
            pass
    p = points[candidates]
    d2 = ((p[:, None, :] - p[None, :, :]) ** 2).sum(axis=-1)
    a, b = np.unravel_index(int(np.argmax(d2)), d2.shape)
    return math.sqrt(float(d2[a, b])), int(candidates[a]), int(candidates[b])


def outline_properties(polygons: Sequence[Any]) -> OutlineProperties:
    """Extents, largest dimension (Feret) and its orientation, area and perimeter of closed polygons, mm.

    Parameters
    ----------
    polygons : sequence of array_like (n, 2)
        Closed loops of (scan_mm, index_mm) vertices, first vertex not
        repeated; outer boundaries and holes wound in opposite senses (as
        :func:`contour_outline` gives them).

    Returns
    -------
    OutlineProperties

    Raises
    ------
    ParameterError
        When there is no polygon with at least one vertex.

    Examples
    --------
    >>> p = outline_properties([[(0.0, 0.0), (4.0, 0.0), (4.0, 3.0), (0.0, 3.0)]])
    >>> p.length_scan_mm, p.length_index_mm, p.length_mm, p.area_mm2, p.perimeter_mm
    (4.0, 3.0, 5.0, 12.0, 14.0)
    >>> round(abs(p.orientation_deg), 2)  # the diagonal of a 4 x 3 rectangle
    36.87
    """
    loops = [np.asarray(p, dtype=np.float64).reshape(-1, 2) for p in polygons]
    loops = [p for p in loops if len(p)]
    if not loops:
        raise ParameterError(f"`polygons` must hold at least one polygon with vertices, got {len(polygons)} empty")
    pts = np.vstack(loops)
    length, a, b = _feret(pts)
    ds, di = pts[b] - pts[a]
    if ds < 0 or (ds == 0 and di < 0):
        ds, di = -ds, -di
    angle = math.degrees(math.atan2(di, ds)) if length > 0 else 0.0
    if angle <= -90.0:
        angle += 180.0
    across = (-pts[:, 0] * di + pts[:, 1] * ds) / length if length > 0 else pts[:, 1]
    perimeter = sum(float(np.hypot(*(np.roll(p, -1, axis=0) - p).T).sum()) for p in loops if len(p) > 1)
    return OutlineProperties(
        length_scan_mm=float(np.ptp(pts[:, 0])), length_index_mm=float(np.ptp(pts[:, 1])),
        length_mm=length, orientation_deg=angle, area_mm2=abs(sum(_signed_area(p) for p in loops)),
        perimeter_mm=perimeter,
        scan_ends_mm=(float(pts[:, 0].min()), float(pts[:, 0].max())),
        index_ends_mm=(float(pts[:, 1].min()), float(pts[:, 1].max())),
        feret_ends_mm=((float(pts[a, 0]), float(pts[a, 1])), (float(pts[b, 0]), float(pts[b, 1]))),
        width_mm=float(np.ptp(across)),
    )


@dataclass(frozen=True)
class SizedOutline:
    """The outline of one sizing method on one indication, and its sizes.

    Attributes
    ----------
    polygons : tuple of numpy.ndarray (n, 2)
        Closed loops of (scan_mm, index_mm), first vertex not repeated;
        outer boundaries counter-clockwise in (scan, index), holes clockwise.
    region : numpy.ndarray of bool
        The map cells inside the outline (the sized region).
    method : str
        The sizing method, e.g. ``"6 dB drop"``.
    level_fsh : float or None
        The level in map units when it is one number.
    length_scan_mm, length_index_mm, length_mm, orientation_deg, area_mm2, width_mm
        As in :class:`OutlineProperties`; None where they cannot be measured
        (no region, an axis with a single position).
    length_scan_uncertainty_mm, length_index_uncertainty_mm, length_uncertainty_mm, area_uncertainty_mm2
        Estimates of the sampling error (see the module notes).
    scan_ends_mm, index_ends_mm : (float, float) or None
        The ends of the two extents.
    lower_bound : bool
        The region reaches the end of the map: sizes are lower bounds.
    data_gap : bool
        Missing samples inside or next to the region.
    notes : tuple of str
    """

    polygons: tuple[np.ndarray, ...] = field(repr=False)
    region: np.ndarray = field(repr=False, compare=False)
    method: str
    level_fsh: float | None = None
    length_scan_mm: float | None = None
    length_index_mm: float | None = None
    length_mm: float | None = None
    orientation_deg: float | None = None
    area_mm2: float | None = None
    width_mm: float | None = None
    length_scan_uncertainty_mm: float | None = None
    length_index_uncertainty_mm: float | None = None
    length_uncertainty_mm: float | None = None
    area_uncertainty_mm2: float | None = None
    scan_ends_mm: tuple[float, float] | None = None
    index_ends_mm: tuple[float, float] | None = None
    lower_bound: bool = False
    data_gap: bool = False
    notes: tuple[str, ...] = ()


def _filled_values(values: np.ndarray) -> np.ndarray:
    """`values` with each NaN replaced by the nearest valid sample (for the contour only)."""
    bad = ~np.isfinite(values)
    if not bad.any() or bad.all():
        return np.where(bad, 0.0, values)
    _, (ii, jj) = ndimage.distance_transform_edt(bad, return_indices=True)
    return values[ii, jj]


def _contour_field(g: np.ndarray, member: np.ndarray) -> np.ndarray:
    """`g` with its sign forced to agree with `member` (positive inside, negative outside)."""
    scale = float(np.nanmax(np.abs(g))) if np.isfinite(g).any() else 1.0
    tiny = 1e-9 * max(scale, 1.0)
    inside = np.maximum(np.abs(g), tiny)
    return np.where(member, np.where(g >= 0, np.maximum(g, tiny), inside), -inside)


def _bracket(frac: np.ndarray, coords: np.ndarray) -> np.ndarray:
    """Spacing of the two samples around each fractional index (the cell width at a sample)."""
    if coords.size < 2:
        return np.full(frac.shape, np.nan)
    k = np.clip(np.floor(frac).astype(int), 0, coords.size - 2)
    return coords[k + 1] - coords[k]


def _loops_mm(member: np.ndarray, g: np.ndarray, scan: np.ndarray, index: np.ndarray
              ) -> tuple[list[np.ndarray], list[np.ndarray]]:
    """Contour loops of `member` in mm and in fractional indices (traced on its bounding box and one cell more)."""
    rows, cols = np.flatnonzero(member.any(axis=1)), np.flatnonzero(member.any(axis=0))
    r0, r1 = max(0, rows[0] - 1), min(member.shape[0], rows[-1] + 2)
    c0, c1 = max(0, cols[0] - 1), min(member.shape[1], cols[-1] + 2)
    h = _contour_field(g[r0:r1, c0:c1], member[r0:r1, c0:c1])
    big = float(np.abs(h).max()) + 1.0
    padded = np.pad(h, 1, constant_values=-big)
    loops = measure.find_contours(padded, 0.0, fully_connected="high", positive_orientation="high")
    frac, mm = [], []
    for c in loops:
        c = c[:-1] if len(c) > 1 and np.array_equal(c[0], c[-1]) else c
        if len(c) < 3:
            continue
        r = np.clip(c[:, 0] - 1.0 + r0, 0.0, scan.size - 1.0)
        q = np.clip(c[:, 1] - 1.0 + c0, 0.0, index.size - 1.0)
        frac.append(np.column_stack([r, q]))
        mm.append(np.column_stack([np.interp(r, np.arange(scan.size), scan),
                                   np.interp(q, np.arange(index.size), index)]))
    return mm, frac


def _uncertainties(props: OutlineProperties, mm: list[np.ndarray], frac: list[np.ndarray],
                   scan: np.ndarray, index: np.ndarray) -> dict[str, float]:
    pts, fr = np.vstack(mm), np.vstack(frac)
    bs, bi = _bracket(fr[:, 0], scan), _bracket(fr[:, 1], index)

    def at(k_mm: float, col: int, b: np.ndarray) -> float:
        return float(b[int(np.argmin(np.abs(pts[:, col] - k_mm)))])

    def vertex(p: tuple[float, float]) -> int:
        return int(np.argmin(np.hypot(pts[:, 0] - p[0], pts[:, 1] - p[1])))

    u_len = sum(max(bs[vertex(p)], bi[vertex(p)]) for p in props.feret_ends_mm)
    u_area = 0.0
    for p, f in zip(mm, frac, strict=True):
        seg = np.hypot(*(np.roll(p, -1, axis=0) - p).T)
        local = np.sqrt(_bracket(f[:, 0], scan) * _bracket(f[:, 1], index))
        u_area += float(np.sum(seg * 0.5 * local))
    return dict(
        length_scan_uncertainty_mm=at(props.scan_ends_mm[0], 0, bs) + at(props.scan_ends_mm[1], 0, bs),
        length_index_uncertainty_mm=at(props.index_ends_mm[0], 1, bi) + at(props.index_ends_mm[1], 1, bi),
        length_uncertainty_mm=float(u_len), area_uncertainty_mm2=u_area,
    )


def contour_outline(
    amp: xr.DataArray,
    levels: np.ndarray,
    member: np.ndarray,
    *,
    method: str,
    level_fsh: float | None = None,
) -> SizedOutline:
    """The sub-cell outline of the cells `member` at the level `levels`, and its sizes.

    Parameters
    ----------
    amp : xarray.DataArray (scan, index)
        The map (checked by :func:`ndtmap._shared.mapgeom.as_map`), coordinates in mm.
    levels : numpy.ndarray
        The level at each cell (same shape), in the map's units.
    member : numpy.ndarray of bool
        The cells of the sized region (at or above the level, connected, other
        indications left out; cells below the level inside it are filled holes).
    method : str
        The method's name, kept on the result.
    level_fsh : float, optional
        The level when it is one number.

    Returns
    -------
    SizedOutline
    """
    scan, index = mg.coords_mm(amp)
    member = np.asarray(member, dtype=bool)
    values = np.asarray(amp.values, dtype=np.float64)
    region = member.copy()
    region.setflags(write=False)
    gap = mg.adjacent_missing(member, ~np.isfinite(values)) > 0
    notes = [f"missing A-scans inside or next to the {method} outline"] if gap else []
    if not member.any():
        return SizedOutline((), region, method, level_fsh, data_gap=gap,
                            notes=(f"the peak is below the {method} level: no outline",))
    lower = mg.touches_edge(member)
    if lower:
        notes.append(f"the {method} outline reaches the end of the map: its sizes are lower bounds")
    mm, frac = _loops_mm(member, _filled_values(values) - levels, scan, index)
    if not mm:
        return SizedOutline((), region, method, level_fsh, lower_bound=lower, data_gap=gap,
                            notes=(*notes, f"no {method} outline could be traced"))
    props = outline_properties(mm)
    unc = _uncertainties(props, mm, frac, scan, index)
    single = [name for name, c in (("scan", scan), ("index", index)) if c.size < 2]
    if single:
        notes.append(f"the map has a single position along {' and '.join(single)}: no length there and no area")
    sizes = dict(
        length_scan_mm=None if scan.size < 2 else props.length_scan_mm,
        length_index_mm=None if index.size < 2 else props.length_index_mm,
        length_mm=props.length_mm, orientation_deg=props.orientation_deg,
        area_mm2=None if single else props.area_mm2, width_mm=None if single else props.width_mm,
        length_scan_uncertainty_mm=None if scan.size < 2 else unc["length_scan_uncertainty_mm"],
        length_index_uncertainty_mm=None if index.size < 2 else unc["length_index_uncertainty_mm"],
        length_uncertainty_mm=None if single else unc["length_uncertainty_mm"],
        area_uncertainty_mm2=None if single else unc["area_uncertainty_mm2"],
    )
    return SizedOutline(tuple(mm), region, method, level_fsh, **sizes, scan_ends_mm=props.scan_ends_mm,
                        index_ends_mm=props.index_ends_mm, lower_bound=lower, data_gap=gap, notes=tuple(notes))
