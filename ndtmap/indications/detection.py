"""Detection of indications on C-scan maps.

An *indication* is a connected region of probe positions where a gated map
reaches a detection level. Two kinds are detected the same way:

* ``"amplitude"``: positions where the echo amplitude of a gate reaches a
  threshold, given in %FSH or in dB re a reference level (a DAC value per
  position, a nominal back-wall level or a reference reflector level);
* ``"backwall_loss"``: positions where the back-wall echo has dropped by at
  least a given number of dB (laminations and other planar reflectors that
  shadow the back wall).

Regions are 8-connected (:func:`scipy.ndimage.label` with a 3x3 structure):
positions that touch by a corner belong to the same indication. With a
depth map, a region is then split by depth: reflectors at different depths
are different indications even where their plan regions touch
(:func:`ndtmap.indications.depth_layers.split_by_depth`: neighbours are one
reflector when their depths agree within the pulse's depth resolution and
the map's depth noise, or when the step continues the slope of an inclined
reflector). Missing
positions (NaN, encoder drop-outs) are never part of a region; by default
a region split by missing data is reported as two indications, each
carrying the number of missing positions next to it (see
``bridge_missing`` to join them instead).

Indications are numbered 1..n in order of decreasing peak value (peak
amplitude, or peak back-wall loss); ties are broken by increasing scan
position, then increasing index position of the peak. ``order="scan"``
numbers them by increasing scan, then index position of the peak.

Extents (``scan_min_mm`` ...) are the positions of the outermost probe
positions in the region (not the cell edges); ``area_mm2`` is the sum of
the midpoint cell areas of the region's positions, computed from the
coordinates, so non-uniform spacing is handled.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import xarray as xr
from scipy import ndimage

from ndtmap._shared import mapgeom as mg
from ndtmap._shared.validate import finite_float, nonnegative_float, one_of, positive_int
from ndtmap.errors import CalibrationError, ParameterError, ParameterTypeError
from ndtmap.grid.provenance import jsonable
from ndtmap.indications.depth_layers import depth_step_tolerance_mm, merge_repeat_fragments, split_by_depth
from ndtmap.signal import DacCurve

__all__ = [
    "Indication",
    "detect_indications",
    "detect_backwall_loss",
    "indications_table",
    "reference_from_curve",
    "reference_map",
]

KINDS = ("amplitude", "backwall_loss")


@dataclass(frozen=True)
class Indication:
    """One detected indication.

    Attributes
    ----------
    id : int
        Number 1..n, see the module notes for the ordering rule.
    kind : {'amplitude', 'backwall_loss'}
        What was thresholded.
    peak_fsh : float or None
        Highest amplitude in the region, %FSH (amplitude indications).
    peak_db : float or None
        Peak amplitude in dB re the reference level at the peak position
        (None without a reference).
    reference_fsh : float or None
        Reference level at the peak position, %FSH.
    backwall_loss_db : float or None
        Largest back-wall loss in the region, dB (back-wall-loss
        indications; ``inf`` when the back wall vanished completely).
    scan_mm, index_mm : float
        Position of the peak, mm.
    peak_position : tuple of int
        (scan, index) array indices of the peak in the map.
    depth_mm : float or None
        Depth at the peak from the depth map (None without one or where it
        is missing).
    depth_min_mm, depth_max_mm : float or None
        Depth range over the region.
    scan_min_mm, scan_max_mm, index_min_mm, index_max_mm : float
        Outermost positions of the region, mm.
    n_positions : int
        Number of probe positions in the region.
    area_mm2 : float or None
        Detected area: sum of the cell areas of the region, mm^2 (None when
        an axis has a single position).
    detection_level : str
        The detection rule in words, e.g. ``">= 20 %FSH"``.
    touches_edge : bool
        The region includes a position on the boundary of the map.
    missing_adjacent : int
        Missing positions inside or 8-adjacent to the region.
    region : numpy.ndarray of bool
        The region as a read-only mask on the map (not compared, not
        printed).
    """

    id: int
    kind: str
    peak_fsh: float | None
    peak_db: float | None
    reference_fsh: float | None
    backwall_loss_db: float | None
    scan_mm: float
    index_mm: float
    peak_position: tuple[int, int]
    depth_mm: float | None
    depth_min_mm: float | None
    depth_max_mm: float | None
    scan_min_mm: float
    scan_max_mm: float
    index_min_mm: float
    index_max_mm: float
    n_positions: int
    area_mm2: float | None
    detection_level: str
    touches_edge: bool
    missing_adjacent: int
    region: np.ndarray = field(compare=False, repr=False)

    def as_dict(self) -> dict[str, Any]:
        """The record as plain JSON-serialisable values (without `region`)."""
        out: dict[str, Any] = {}
        for name in self.__dataclass_fields__:
            if name == "region":
                continue
            out[name] = getattr(self, name)
        out["peak_position"] = list(self.peak_position)
        if out["backwall_loss_db"] is not None and math.isinf(out["backwall_loss_db"]):
            out["backwall_loss_db"] = None
            out["total_backwall_loss"] = True
        return jsonable(out)


def _opt_float(value: float) -> float | None:
    return float(value) if value is not None and math.isfinite(value) else None


def reference_map(reference: Any, amplitude_map: xr.DataArray, *, name: str = "reference") -> np.ndarray:
    """Reference level (%FSH) at every map position, as a float64 array.

    `reference` is a number in %FSH (the same everywhere) or a map of
    per-position levels on the same positions (e.g. a DAC curve evaluated
    at the depth of the gate, see :func:`reference_from_curve`); NaN marks
    positions where no reference is known.
    """
    shape = amplitude_map.shape
    if isinstance(reference, xr.DataArray):
        ref = mg.as_map(name, reference)
        mg.check_same_grid(name, ref, "amplitude_map", amplitude_map)
        values = ref.values
        if np.any(values[np.isfinite(values)] <= 0):
            raise CalibrationError(f"`{name}` must be greater than 0 %FSH wherever it is given")
        return values
    level = finite_float(name, reference)
    if level <= 0:
        raise CalibrationError(f"`{name}` must be greater than 0 %FSH, got {reference!r}")
    return np.full(shape, level)


def reference_from_curve(depth_map: xr.DataArray, curve_depth_mm: Any, curve_fsh: Any = None) -> xr.DataArray:
    """Evaluate a reference curve (e.g. a DAC) at the depth of every position.

    The curve is interpolated linearly in dB between its points (a DAC of an
    attenuating material is close to a straight line in dB). Positions whose
    depth is missing get NaN (no reference there). Depths outside the curve
    are not extrapolated.

    Parameters
    ----------
    depth_map : xarray.DataArray (scan, index)
        Depth of the gate event, mm.
    curve_depth_mm : array_like or DacCurve
        Depths of the curve points, mm, strictly increasing; or a
        :class:`ndtmap.signal.DacCurve`, whose own rule then applies outside
        its depths (refused depths raise, as for points).
    curve_fsh : array_like
        Reference amplitude at those depths, %FSH (> 0); not with a DacCurve.

    Returns
    -------
    xarray.DataArray (scan, index)
        Reference level in %FSH.

    Raises
    ------
    CalibrationError
        When the curve is malformed or a depth of the map lies outside it.

    Examples
    --------
    >>> import numpy as np, xarray as xr
    >>> d = xr.DataArray([[10.0, 30.0]], dims=("scan", "index"), coords={"scan": [0.0], "index": [0.0, 1.0]})
    >>> reference_from_curve(d, [10, 30], [80, 20]).values.round(1).tolist()
    [[80.0, 20.0]]
    """
    dm = mg.as_map("depth_map", depth_map)
    if isinstance(curve_depth_mm, DacCurve):
        if curve_fsh is not None:
            raise ParameterError("give either a DacCurve or the points `curve_depth_mm` and `curve_fsh`, not both")
        return _reference_from_dac(dm, depth_map, curve_depth_mm)
    try:
        z = np.asarray(curve_depth_mm, dtype=np.float64).reshape(-1)
        a = np.asarray(curve_fsh, dtype=np.float64).reshape(-1)
    except (TypeError, ValueError):
        raise ParameterTypeError("`curve_depth_mm` and `curve_fsh` must be sequences of numbers") from None
    if z.size < 1 or z.size != a.size:
        raise CalibrationError(
            f"`curve_depth_mm` and `curve_fsh` must have the same number (>= 1) of points, got {z.size} and {a.size}"
        )
    if not (np.all(np.isfinite(z)) and np.all(np.isfinite(a))) or np.any(a <= 0):
        raise CalibrationError("reference curve points must be finite, with amplitudes > 0 %FSH")
    if z.size > 1 and np.any(np.diff(z) <= 0):
        raise CalibrationError("`curve_depth_mm` must be strictly increasing")
    d = dm.values
    known = np.isfinite(d)
    tol = 1e-9 * max(1.0, float(np.abs(z).max()))
    outside = known & ((d < z[0] - tol) | (d > z[-1] + tol))
    if outside.any():
        raise CalibrationError(
            f"depths from {np.nanmin(d[outside]):g} to {np.nanmax(d[outside]):g} mm lie outside the reference "
            f"curve ({z[0]:g} to {z[-1]:g} mm); extend the curve or narrow the gate"
        )
    out = np.full(d.shape, np.nan)
    if z.size == 1:
        out[known] = a[0]
    else:
        out[known] = 10.0 ** (np.interp(d[known], z, 20.0 * np.log10(a)) / 20.0)
    return xr.DataArray(
        out,
        dims=mg.MAP_DIMS,
        coords={"scan": dm.coords["scan"], "index": dm.coords["index"]},
        attrs={**dict(depth_map.attrs), "units": "%FSH", "long_name": "reference level at the gate depth"},
    )


def _reference_from_dac(dm: xr.DataArray, depth_map: xr.DataArray, curve: DacCurve) -> xr.DataArray:
    """:func:`reference_from_curve` for a DacCurve: its level at every known depth, by its own outside rule."""
    d = dm.values
    known = np.isfinite(d)
    out = np.full(d.shape, np.nan)
    out[known] = curve.level_fsh(d[known])
    refused = known & ~np.isfinite(out)
    if refused.any():
        lo, hi = curve.range_mm
        raise CalibrationError(
            f"depths from {np.nanmin(d[refused]):g} to {np.nanmax(d[refused]):g} mm lie outside the reference "
            f"curve ({lo:g} to {hi:g} mm), which refuses them; extend the curve or narrow the gate"
        )
    return xr.DataArray(
        out, dims=mg.MAP_DIMS, coords={"scan": dm.coords["scan"], "index": dm.coords["index"]},
        attrs={**dict(depth_map.attrs), "units": "%FSH", "long_name": f"{curve.label} level at the gate depth"},
    )


def _regions(
    above: np.ndarray, missing: np.ndarray, *, bridge_missing: bool, depth: np.ndarray | None = None,
    depth_step_mm: float | None = None, values: np.ndarray | None = None,
) -> tuple[list[np.ndarray], np.ndarray]:
    """Boolean masks of the 8-connected regions of `above`, each split by depth when a depth step is given.

    Also the positions whose depth is a repeat echo of their region's reflector (not used for its depth range).
    """
    to_label = above | missing if bridge_missing else above
    labels, n = ndimage.label(to_label, structure=mg.STRUCTURE_8)
    out = []
    repeat = np.zeros(above.shape, dtype=bool)
    for lab in range(1, n + 1):
        region = (labels == lab) & above
        if not region.any():
            continue
        if depth is None or depth_step_mm is None or values is None or np.count_nonzero(region) < 2:
            out.append(region)
        else:
            parts, rep = merge_repeat_fragments(split_by_depth(region, depth, depth_step_mm), depth, values,
                                                depth_step_mm)
            out.extend(parts)
            repeat |= rep
    return out, repeat


def _build(
    kind: str,
    value_map: xr.DataArray,
    values: np.ndarray,
    above: np.ndarray,
    *,
    depth: np.ndarray | None,
    ref: np.ndarray | None,
    detection_level: str,
    min_area_mm2: float,
    min_positions: int,
    bridge_missing: bool,
    order: str,
    first_id: int,
    rank: np.ndarray | None = None,
    depth_step_mm: float | None = None,
) -> list[Indication]:
    scan, index = mg.coords_mm(value_map)
    areas = mg.cell_areas(value_map)
    missing = np.isnan(values)
    found = []
    regions, repeat = _regions(above, missing, bridge_missing=bridge_missing, depth=depth,
                               depth_step_mm=depth_step_mm, values=values)
    if repeat.any():  # depths of repeat echoes are not the reflector's
        depth = np.where(repeat, np.nan, depth)
    for region in regions:
        n = int(np.count_nonzero(region))
        area = float(np.sum(areas[region])) if np.all(np.isfinite(areas[region])) else None
        if n < min_positions:
            continue
        if min_area_mm2 > 0 and (area is None or area < min_area_mm2):
            continue
        v = np.where(region, values, -np.inf) if rank is None else np.where(region & np.isfinite(rank), rank, -np.inf)
        flat = int(np.argmax(v))  # first maximum in C order: lowest scan, then lowest index
        pk = np.unravel_index(flat, values.shape)
        pk = (int(pk[0]), int(pk[1]))
        rows, cols = np.nonzero(region)
        peak_value = float(values[pk])
        d_peak = d_min = d_max = None
        if depth is not None:
            d_peak = _opt_float(depth[pk])
            dr = depth[region]
            dr = dr[np.isfinite(dr)]
            if dr.size:
                d_min, d_max = float(dr.min()), float(dr.max())
        peak_fsh = peak_db = ref_fsh = loss = None
        if kind == "amplitude":
            peak_fsh = peak_value
            if ref is not None and math.isfinite(ref[pk]):
                ref_fsh = float(ref[pk])
                peak_db = 20.0 * math.log10(peak_value / ref_fsh) if peak_value > 0 else None
        else:
            loss = peak_value
        found.append(
            dict(
                kind=kind,
                peak_fsh=peak_fsh,
                peak_db=peak_db,
                reference_fsh=ref_fsh,
                backwall_loss_db=loss,
                scan_mm=float(scan[pk[0]]),
                index_mm=float(index[pk[1]]),
                peak_position=pk,
                depth_mm=d_peak,
                depth_min_mm=d_min,
                depth_max_mm=d_max,
                scan_min_mm=float(scan[rows.min()]),
                scan_max_mm=float(scan[rows.max()]),
                index_min_mm=float(index[cols.min()]),
                index_max_mm=float(index[cols.max()]),
                n_positions=n,
                area_mm2=area,
                detection_level=detection_level,
                touches_edge=mg.touches_edge(region),
                missing_adjacent=mg.adjacent_missing(region, missing),
                region=region,
                _peak=peak_value if rank is None else float(rank[pk]),
            )
        )
    if order == "peak":
        found.sort(key=lambda r: (-r["_peak"], r["scan_mm"], r["index_mm"]))
    else:
        found.sort(key=lambda r: (r["scan_mm"], r["index_mm"], -r["_peak"]))
    out = []
    for k, rec in enumerate(found):
        rec.pop("_peak")
        rec["region"].setflags(write=False)
        out.append(Indication(id=first_id + k, **rec))
    return out


def _common_options(min_area_mm2: Any, min_positions: Any, order: Any, first_id: Any) -> tuple[float, int, str, int]:
    return (
        nonnegative_float("min_area_mm2", min_area_mm2),
        positive_int("min_positions", min_positions),
        one_of("order", order, ("peak", "scan")),
        positive_int("first_id", first_id),
    )


def detect_indications(
    amplitude_map: xr.DataArray,
    *,
    threshold_fsh: float | None = None,
    threshold_db: float | None = None,
    reference: float | xr.DataArray | None = None,
    depth_map: xr.DataArray | None = None,
    min_area_mm2: float = 0.0,
    min_positions: int = 1,
    bridge_missing: bool = False,
    order: str = "peak",
    first_id: int = 1,
    depth_step_mm: float | None = None,
) -> list[Indication]:
    """Find the indications of an amplitude map.

    Parameters
    ----------
    amplitude_map : xarray.DataArray (scan, index)
        Gate amplitude in %FSH, NaN where the A-scan is missing.
    threshold_fsh : float, optional
        Detection level in %FSH: positions with amplitude >= it are detected.
    threshold_db : float, optional
        Detection level in dB re `reference` (e.g. -6 for "half the DAC").
        Give exactly one of `threshold_fsh` and `threshold_db`. With it the
        peak of an indication (and the numbering) is the position of the
        highest amplitude re the reference, not the highest %FSH.
    reference : float or xarray.DataArray, optional
        Reference level in %FSH: one number (a nominal back-wall level or a
        reference reflector echo) or a map of per-position levels (e.g. a DAC
        at the gate depth, see :func:`reference_from_curve`). Needed with
        `threshold_db`; with `threshold_fsh` it is used only to report the
        peak in dB re reference.
    depth_map : xarray.DataArray (scan, index), optional
        Depth of the gate event, mm, for the depth at the peak and the depth
        range, and to split plan regions by depth (reflectors at different
        depths are different indications).
    min_area_mm2 : float, default 0
        Regions with a smaller detected area are dropped.
    min_positions : int, default 1
        Regions with fewer positions are dropped.
    bridge_missing : bool, default False
        If True, missing positions join the regions they touch for labelling
        (they never count as detected positions); two parts of one reflector
        split by a drop-out then give one indication.
    order : {'peak', 'scan'}, default 'peak'
        Numbering rule: decreasing peak amplitude, or increasing scan then
        index position of the peak.
    first_id : int, default 1
        Number of the first indication.
    depth_step_mm : float, optional
        Largest depth step between neighbouring positions of one reflector,
        mm (with `depth_map`). Default: the pulse's depth resolution from the
        map's attributes (``probe_frequency_mhz``, ``probe_bandwidth``,
        ``velocity_m_s``, ``beam_angle_deg``) plus 3 x the depth noise of the
        map (:func:`ndtmap.indications.depth_layers.depth_step_tolerance_mm`);
        without those attributes regions are not split. ``math.inf``: never
        split by depth.

    Returns
    -------
    list of Indication
        Sorted by `id`.

    Raises
    ------
    ParameterError, CalibrationError
        For a malformed map, a missing or double threshold or a bad reference.

    Examples
    --------
    >>> import numpy as np, xarray as xr
    >>> a = np.zeros((5, 5)); a[1:3, 1:3] = 50.0; a[4, 4] = 30.0
    >>> m = xr.DataArray(a, dims=("scan", "index"), coords={"scan": np.arange(5.0), "index": np.arange(5.0)})
    >>> [(i.id, i.peak_fsh, i.n_positions) for i in detect_indications(m, threshold_fsh=20)]
    [(1, 50.0, 4), (2, 30.0, 1)]
    """
    amp = mg.as_map("amplitude_map", amplitude_map)
    min_area, min_pos, order, first = _common_options(min_area_mm2, min_positions, order, first_id)
    if (threshold_fsh is None) == (threshold_db is None):
        raise ParameterError(
            "give exactly one of `threshold_fsh` (%FSH) and `threshold_db` (dB re `reference`), got "
            f"threshold_fsh={threshold_fsh!r}, threshold_db={threshold_db!r}"
        )
    ref = reference_map(reference, amp) if reference is not None else None
    rank = None
    values = np.where(np.isfinite(amp.values), amp.values, np.nan)  # +-inf amplitude is not a reading
    with np.errstate(invalid="ignore"):
        if threshold_fsh is not None:
            level = finite_float("threshold_fsh", threshold_fsh)
            if level <= 0:
                raise ParameterError(f"`threshold_fsh` must be greater than 0 %FSH, got {threshold_fsh!r}")
            above = np.isfinite(values) & (values >= level)
            text = f">= {level:g} %FSH"
        else:
            db = finite_float("threshold_db", threshold_db)
            if ref is None:
                raise ParameterError("`threshold_db` needs a `reference` level (a number in %FSH or a map)")
            above = np.isfinite(values) & np.isfinite(ref) & (values >= ref * 10.0 ** (db / 20.0))
            text = f">= {db:+g} dB re reference"
            rank = values / ref  # the peak of a level in dB is the highest amplitude re the reference
    depth = None
    step = None
    if depth_map is not None:
        dm = mg.as_map("depth_map", depth_map)
        mg.check_same_grid("depth_map", dm, "amplitude_map", amp)
        depth = dm.values
        step = _depth_step(depth_step_mm, amplitude_map.attrs, depth, above)
    return _build(
        "amplitude",
        amp,
        values,
        above,
        depth=depth,
        ref=ref,
        detection_level=text,
        min_area_mm2=min_area,
        min_positions=min_pos,
        bridge_missing=bool(bridge_missing),
        order=order,
        first_id=first,
        rank=rank,
        depth_step_mm=step,
    )


def _depth_step(depth_step_mm: Any, attrs: Any, depth: np.ndarray, above: np.ndarray) -> float | None:
    """The depth step of the split by depth (None: no split)."""
    if depth_step_mm is None:
        return depth_step_tolerance_mm(attrs, depth, above)
    if isinstance(depth_step_mm, float | int) and depth_step_mm == math.inf:
        return None
    return nonnegative_float("depth_step_mm", depth_step_mm)


def detect_backwall_loss(
    loss_map: xr.DataArray,
    *,
    threshold_db: float,
    depth_map: xr.DataArray | None = None,
    min_area_mm2: float = 0.0,
    min_positions: int = 1,
    bridge_missing: bool = False,
    order: str = "peak",
    first_id: int = 1,
) -> list[Indication]:
    """Find regions where the back-wall echo has dropped by `threshold_db` or more.

    Parameters
    ----------
    loss_map : xarray.DataArray (scan, index)
        Back-wall loss in dB (positive = weaker than the reference; ``+inf``
        where the back wall vanished), NaN where missing.
    threshold_db : float
        Positions with loss >= this value are detected (> 0 dB).
    depth_map : xarray.DataArray, optional
        Depth of a flaw-gate event at the same positions (e.g. the lamination
        echo), mm.
    min_area_mm2, min_positions, bridge_missing, order, first_id
        As in :func:`detect_indications`; `order='peak'` sorts by decreasing
        loss.

    Returns
    -------
    list of Indication
        With ``kind='backwall_loss'``.

    Examples
    --------
    >>> import numpy as np, xarray as xr
    >>> loss = np.zeros((4, 4)); loss[1:3, 1:3] = 12.0
    >>> m = xr.DataArray(loss, dims=("scan", "index"), coords={"scan": np.arange(4.0), "index": np.arange(4.0)})
    >>> [(i.kind, i.backwall_loss_db, i.area_mm2) for i in detect_backwall_loss(m, threshold_db=6)]
    [('backwall_loss', 12.0, 4.0)]
    """
    lm = mg.as_map("loss_map", loss_map)  # +inf (total loss) is kept
    min_area, min_pos, order, first = _common_options(min_area_mm2, min_positions, order, first_id)
    level = finite_float("threshold_db", threshold_db)
    if level <= 0:
        raise ParameterError(f"`threshold_db` must be greater than 0 dB of back-wall loss, got {threshold_db!r}")
    values = lm.values
    with np.errstate(invalid="ignore"):
        above = ~np.isnan(values) & (values >= level)
    depth = None
    if depth_map is not None:
        dm = mg.as_map("depth_map", depth_map)
        mg.check_same_grid("depth_map", dm, "loss_map", lm)
        depth = dm.values
    return _build(
        "backwall_loss",
        lm,
        values,
        above,
        depth=depth,
        ref=None,
        detection_level=f"back-wall loss >= {level:g} dB",
        min_area_mm2=min_area,
        min_positions=min_pos,
        bridge_missing=bool(bridge_missing),
        order=order,
        first_id=first,
    )


def indications_table(indications: Any) -> list[dict[str, Any]]:
    """The indications as a list of plain dicts (JSON-serialisable), one per indication.

    Examples
    --------
    >>> indications_table([])
    []
    """
    out = []
    for k, ind in enumerate(indications):
        if not isinstance(ind, Indication):
            raise ParameterTypeError(
                f"`indications[{k}]` must be an Indication (from detect_indications), got {type(ind).__name__}"
            )
        out.append(ind.as_dict())
    return out
