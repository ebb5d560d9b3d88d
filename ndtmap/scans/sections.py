"""Sections through a scan grid: B-scans, D-scans, polyline sections and true-geometry angle-beam sections.

* :func:`b_scan`: ``(scan, time)`` at one index position;
* :func:`d_scan`: ``(index, time)`` at one scan position;
* :func:`polyline_section`: ``(distance, time)`` along any polyline on the scan
  plane, with the distance along the line in mm;
* :func:`angle_beam_section`: the A-scans of a B-scan (or D-scan) placed along
  their true beam paths on a regular ``(depth, x)`` raster.

Sections carry the calibrated axes as coordinates along ``time``: ``depth``
(``s cos(theta)``, unfolded) and ``sound_path`` (mm). Values are the
detection signal in %FSH ('rectified' by default; 'envelope' or 'none' for
the signal as recorded). Missing A-scans stay NaN, and an interpolated value
to which a missing A-scan contributes (a neighbour with a positive weight)
is NaN.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import xarray as xr
from scipy.interpolate import RegularGridInterpolator

from ndtmap._shared.arrays import result_attrs
from ndtmap._shared.validate import finite_float, one_of, positive_float
from ndtmap.errors import ParameterError, ParameterTypeError
from ndtmap.grid.geometry import depth_axis, part_constants, sound_path_axis
from ndtmap.grid.provenance import with_step
from ndtmap.grid.schema import check_grid
from ndtmap.signal import DETECTIONS, detected_signal

__all__ = ["SECTION_METHODS", "b_scan", "d_scan", "polyline_section", "angle_beam_section"]

SECTION_METHODS = ("nearest", "linear")
_TOL = 1e-9


def _signal(grid: xr.Dataset, detect: str, picked: xr.Dataset | None = None) -> xr.DataArray:
    """The detection signal of the A-scans `picked` from `grid` (default all), with depth and sound path."""
    one_of("detect", detect, DETECTIONS)
    sig = detected_signal(grid if picked is None else picked, detect)
    return sig.assign_coords(depth=depth_axis(grid), sound_path=sound_path_axis(grid))


def _check_position(grid: xr.Dataset, axis: str, value: Any, name: str) -> float:
    v = finite_float(name, value)
    c = np.asarray(grid[axis].values, dtype=np.float64)
    span = max(1.0, abs(c[-1] - c[0]))
    if v < c[0] - _TOL * span or v > c[-1] + _TOL * span:
        raise ParameterError(
            f"`{name}` must lie within the scanned {axis} range {c[0]:g} to {c[-1]:g} mm, got {v:g}"
        )
    return float(np.clip(v, c[0], c[-1]))


def _brackets(coord: np.ndarray, q: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Lower and upper neighbour and the weight of the upper one for each query position."""
    n = coord.size
    if n == 1:
        zero = np.zeros(q.shape, dtype=np.int64)
        return zero, zero, np.zeros(q.shape)
    k = np.clip(np.searchsorted(coord, q, side="right") - 1, 0, n - 2)
    frac = np.clip((q - coord[k]) / (coord[k + 1] - coord[k]), 0.0, 1.0)
    return k, k + 1, frac


def _interpolate(grid: xr.Dataset, detect: str, queries: dict[str, np.ndarray], method: str,
                 dim: str | None) -> xr.DataArray:
    """Interpolate the detection signal at positions along ``scan``/``index`` (linear: bilinear weights; nearest).

    Only neighbours with a positive weight take part, so a missing neighbour
    makes the result missing only where it actually contributes. The
    neighbouring A-scans are picked from the grid first and only they are
    detected (rectified, enveloped), so a section costs what its A-scans
    cost, not what the grid costs.
    """
    corners: list[tuple[dict[str, Any], Any]] = [({}, 1.0)]
    for axis, q in queries.items():
        lo, hi, frac = _brackets(np.asarray(grid[axis].values, dtype=np.float64), np.asarray(q, dtype=np.float64))
        if method == "nearest":
            pick = np.where(frac > 0.5, hi, lo)
            options = [(pick, np.ones(np.shape(q)))]
        else:
            options = [(lo, 1.0 - frac), (hi, frac)]
        new = []
        for idx, w in corners:
            for k, wk in options:
                new.append(({**idx, axis: k}, w * wk))
        corners = new

    def indexer(k: np.ndarray) -> Any:
        return int(k) if dim is None else xr.DataArray(k, dims=dim)

    out = None
    for idx, w in corners:
        w_da = w if dim is None else xr.DataArray(np.asarray(w), dims=dim)
        if dim is None and float(w) <= 0.0:
            continue
        part = _signal(grid, detect, grid.isel({a: indexer(k) for a, k in idx.items()}))
        part = part * w_da if dim is None else xr.where(w_da > 0, part * w_da, 0.0)
        out = part if out is None else out + part
    assert out is not None
    return out.drop_vars([a for a in queries if a in out.coords])


def _line(grid: xr.Dataset, axis: str, position_mm: Any, name: str, method: str, detect: str,
          step: str) -> xr.DataArray:
    grid = check_grid(grid)
    one_of("method", method, SECTION_METHODS)
    pos = _check_position(grid, axis, position_mm, name)
    one_of("detect", detect, DETECTIONS)
    if method == "nearest" or grid.sizes[axis] == 1:
        c = np.asarray(grid[axis].values, dtype=np.float64)
        k = int(np.argmin(np.abs(c - pos)))  # ties go to the lower position
        out = _signal(grid, detect, grid.isel({axis: k}))  # pick the line, then detect only its A-scans
        used = float(c[k])
    else:
        out = _interpolate(grid, detect, {axis: np.asarray(pos)}, "linear", None).assign_coords({axis: pos})
        used = pos
    other = "index" if axis == "scan" else "scan"
    out = out.transpose(other, "time").rename("amplitude_fsh")
    out.attrs = result_attrs(grid, units="%FSH", long_name=f"{'B' if axis == 'index' else 'D'}-scan ({detect})",
                             detect=detect, method=method, **{f"{axis}_mm_requested": pos, f"{axis}_mm_used": used})
    return with_step(out, step, {name: pos, "method": method, "detect": detect, f"{axis}_mm_used": used},
                     source=grid)


def b_scan(grid: xr.Dataset, index_mm: float, *, method: str = "nearest", detect: str = "rectified") -> xr.DataArray:
    """B-scan: the A-scans along the scan axis at one index position, ``(scan, time)``.

    Parameters
    ----------
    grid : xarray.Dataset
        A scan grid (a dask grid gives a lazy section).
    index_mm : float
        Index position, mm, within the scanned range.
    method : {'nearest', 'linear'}, default 'nearest'
        'nearest': the recorded line closest to `index_mm` (the lower one on
        a tie); 'linear': interpolated between the two neighbouring lines.
    detect : {'rectified', 'envelope', 'none'}, default 'rectified'
        Detection signal ('none': as recorded, signed for RF).

    Returns
    -------
    xarray.DataArray (scan, time)
        %FSH, with coordinates ``depth`` and ``sound_path`` (mm) along
        ``time`` and the scalar ``index`` used (attrs ``index_mm_used``).

    Examples
    --------
    >>> from ndtmap.grid.examples import example_grid
    >>> b = b_scan(example_grid(), 0.4)
    >>> b.dims, b.attrs["index_mm_used"]
    (('scan', 'time'), 0.0)
    """
    return _line(grid, "index", index_mm, "index_mm", method, detect, "b_scan")


def d_scan(grid: xr.Dataset, scan_mm: float, *, method: str = "nearest", detect: str = "rectified") -> xr.DataArray:
    """D-scan: the A-scans along the index axis at one scan position, ``(index, time)``.

    Parameters and returns as for :func:`b_scan`, with the roles of scan and
    index exchanged.

    Examples
    --------
    >>> from ndtmap.grid.examples import example_grid
    >>> d_scan(example_grid(), 1.0).dims
    ('index', 'time')
    """
    return _line(grid, "scan", scan_mm, "scan_mm", method, detect, "d_scan")


def _default_step(grid: xr.Dataset) -> float:
    steps = [float(np.median(np.diff(grid[a].values))) for a in ("scan", "index") if grid.sizes[a] > 1]
    if not steps:
        raise ParameterError("`grid` has a single probe position; a polyline section needs a line of positions")
    return min(steps)


def polyline_section(
    grid: xr.Dataset,
    points_mm: Any,
    *,
    step_mm: float | None = None,
    method: str = "linear",
    detect: str = "rectified",
) -> xr.DataArray:
    """Section along a polyline on the scan plane, ``(distance, time)``.

    The polyline is sampled at equal distances along its length (the whole
    length divided into the fewest equal parts no longer than `step_mm`; the
    vertices are on the line but not necessarily samples), and the A-scans
    are interpolated there on the ``(scan, index)`` grid: bilinearly from
    the four neighbouring A-scans (only those with a positive weight take
    part, so a sample exactly on a recorded line ignores the next line), or
    from the nearest one.

    Parameters
    ----------
    grid : xarray.Dataset
        A scan grid.
    points_mm : array_like, shape (n, 2)
        Vertices ``(scan_mm, index_mm)``, at least two, inside the scanned
        area.
    step_mm : float, optional
        Largest spacing of the samples along the line, mm; default the
        smaller median grid step.
    method : {'linear', 'nearest'}, default 'linear'
        Bilinear interpolation between the four neighbouring A-scans, or the
        nearest A-scan.
    detect : {'rectified', 'envelope', 'none'}, default 'rectified'

    Returns
    -------
    xarray.DataArray (distance, time)
        %FSH; coordinates ``distance`` (mm along the line), ``scan`` and
        ``index`` (mm, along ``distance``), ``depth`` and ``sound_path``.

    Examples
    --------
    >>> from ndtmap.grid.examples import example_grid
    >>> sec = polyline_section(example_grid(n_scan=4, n_index=4), [(0, 0), (3, 3)], step_mm=0.5)
    >>> sec.sizes["distance"], round(float(sec.distance[-1]), 4)  # 3 sqrt(2) mm in 9 steps
    (10, 4.2426)
    """
    grid = check_grid(grid)
    one_of("method", method, SECTION_METHODS)
    try:
        pts = np.asarray(points_mm, dtype=np.float64)
    except (TypeError, ValueError):
        raise ParameterTypeError(
            f"`points_mm` must be a sequence of (scan_mm, index_mm) pairs, got {points_mm!r}"
        ) from None
    if pts.ndim != 2 or pts.shape[1] != 2 or pts.shape[0] < 2:
        raise ParameterError(f"`points_mm` must have shape (n >= 2, 2) as (scan_mm, index_mm) pairs, got {pts.shape}")
    if not np.all(np.isfinite(pts)):
        raise ParameterError("`points_mm` must be finite")
    for k, axis in enumerate(("scan", "index")):
        for p in pts[:, k]:
            _check_position(grid, axis, p, f"points_mm ({axis})")
    seg = np.hypot(np.diff(pts[:, 0]), np.diff(pts[:, 1]))
    total = float(seg.sum())
    if total <= 0:
        raise ParameterError("`points_mm` has zero length: all points coincide")
    step = _default_step(grid) if step_mm is None else positive_float("step_mm", step_mm)
    n = int(math.ceil(total / step - 1e-9)) + 1
    dist = np.linspace(0.0, total, n)
    cum = np.concatenate([[0.0], np.cumsum(seg)])
    s_pos = np.interp(dist, cum, pts[:, 0])
    i_pos = np.interp(dist, cum, pts[:, 1])
    one_of("detect", detect, DETECTIONS)
    coords = {}
    for axis, values in (("scan", s_pos), ("index", i_pos)):
        coords[axis] = np.clip(values, grid[axis].values[0], grid[axis].values[-1])
    out = _interpolate(grid, detect, coords, method, "distance")
    out = out.assign_coords(
        distance=xr.DataArray(dist, dims="distance", attrs={"units": "mm", "long_name": "distance along the line"}),
        scan=xr.DataArray(coords["scan"], dims="distance", attrs={"units": "mm", "long_name": "scan axis position"}),
        index=xr.DataArray(coords["index"], dims="distance",
                           attrs={"units": "mm", "long_name": "index axis position"}),
    )
    out = out.transpose("distance", "time").rename("amplitude_fsh")
    out.attrs = result_attrs(grid, units="%FSH", long_name=f"section along a polyline ({detect})", detect=detect,
                             method=method, points_mm=pts.tolist(), step_mm=float(dist[1] - dist[0]) if n > 1 else 0.0)
    return with_step(out, "polyline_section", {"points_mm": pts.tolist(), "step_mm": step, "method": method,
                                               "detect": detect}, source=grid)


def angle_beam_section(
    grid: xr.Dataset,
    position_mm: float,
    *,
    along: str = "scan",
    x_step_mm: float | None = None,
    z_step_mm: float | None = None,
    index_point_offset_mm: float = 0.0,
    beam_direction: int = 1,
    fold: bool = False,
    method: str = "nearest",
    detect: str = "rectified",
) -> xr.DataArray:
    """True-geometry section: every A-scan placed along its beam path in the (x, depth) plane.

    The sample at sound path ``s`` of the A-scan taken at probe position
    ``p`` lies at ``x = p + index_point_offset + direction * s sin(theta)``
    and depth ``z = s cos(theta)``. The output is a regular raster filled by
    inverse mapping: for each pixel ``(x, z)`` the probe position
    ``p = x - offset - direction * z tan(theta)`` and sound path
    ``s = z / cos(theta)`` are found and the section is interpolated there,
    linearly between the two neighbouring A-scans and between the two
    neighbouring samples (bilinear in ``(p, s)``). Pixels that no beam
    reaches, or next to a missing A-scan, are NaN. With ``fold=True`` the
    later legs of the V path in a plate of thickness ``T``
    (``part_thickness_mm``) are folded back into ``0 <= z <= T``: a pixel
    gathers the legs at unfolded depths ``z, 2T - z, 2T + z, ...`` and keeps
    the highest value (for the default rectified signal).

    Parameters
    ----------
    grid : xarray.Dataset
        A scan grid (the section is computed in memory).
    position_mm : float
        Index position (``along='scan'``) or scan position (``along='index'``)
        of the section, mm.
    along : {'scan', 'index'}, default 'scan'
        The axis the beam points along.
    x_step_mm, z_step_mm : float, optional
        Raster steps, mm; default the depth step of one time sample, enlarged
        if needed to keep the raster under about two million pixels.
    index_point_offset_mm : float, default 0
        Beam exit point minus encoder reference along `along`, mm.
    beam_direction : {1, -1}, default 1
        Sense of the beam along `along`.
    fold : bool, default False
        Fold later legs into the plate (needs ``part_thickness_mm``).
    method : {'nearest', 'linear'}, default 'nearest'
        How the line at `position_mm` is picked (see :func:`b_scan`).
    detect : {'rectified', 'envelope', 'none'}, default 'rectified'

    Returns
    -------
    xarray.DataArray (depth, x)
        %FSH on the raster; ``depth`` and ``x`` in mm.

    Examples
    --------
    >>> from ndtmap.grid.examples import example_grid
    >>> sec = angle_beam_section(example_grid(beam_angle_deg=45.0), 0.0, x_step_mm=0.5, z_step_mm=0.5)
    >>> sec.dims, sec.attrs["units"]
    (('depth', 'x'), '%FSH')
    """
    grid = check_grid(grid)
    one_of("along", along, ("scan", "index"))
    if beam_direction not in (1, -1):
        raise ParameterError(f"`beam_direction` must be 1 or -1, got {beam_direction!r}")
    offset = finite_float("index_point_offset_mm", index_point_offset_mm)
    line = (b_scan if along == "scan" else d_scan)(grid, position_mm, method=method, detect=detect)
    pos = np.asarray(line[along].values, dtype=np.float64)
    data = np.asarray(line.values, dtype=np.float64)  # (positions, time)
    pc = part_constants(grid)
    s = pc.sound_path_mm(pc.time_us)
    keep = s >= 0
    if keep.sum() < 2:
        raise ParameterError("the record holds fewer than two samples after pulse entry; check `zero_offset_us`")
    s, data = s[keep], data[:, keep]
    theta = math.radians(pc.beam_angle_deg)
    cos_t, sin_t, tan_t = math.cos(theta), math.sin(theta), math.tan(theta)
    z_max_unfolded = float(s[-1]) * cos_t
    if fold:
        thickness = grid.attrs.get("part_thickness_mm")
        if thickness is None:
            raise ParameterError("`fold` needs the grid attribute `part_thickness_mm`; set it or use fold=False")
        t_plate = float(thickness)
        z_lo, z_hi = 0.0, min(t_plate, z_max_unfolded)
    else:
        t_plate = float("nan")
        z_lo, z_hi = float(s[0]) * cos_t, z_max_unfolded
    reach = [d * float(s[k]) * sin_t for d in (beam_direction,) for k in (0, -1)]
    x_lo = float(pos[0]) + offset + min(reach)
    x_hi = float(pos[-1]) + offset + max(reach)
    sample_depth = max(pc.depth_per_us() * pc.dt_us, 1e-6)
    area = max(x_hi - x_lo, sample_depth) * max(z_hi - z_lo, sample_depth)
    default = max(sample_depth, math.sqrt(area / 2e6))
    dx = default if x_step_mm is None else positive_float("x_step_mm", x_step_mm)
    dz = default if z_step_mm is None else positive_float("z_step_mm", z_step_mm)
    x = x_lo + dx * np.arange(int(math.floor((x_hi - x_lo) / dx + 1e-9)) + 1)
    z = z_lo + dz * np.arange(int(math.floor((z_hi - z_lo) / dz + 1e-9)) + 1)
    if x.size * z.size > 2e7:
        raise ParameterError(f"the raster would have {x.size * z.size} pixels; give larger `x_step_mm`/`z_step_mm`")
    if pos.size == 1:  # a single A-scan: duplicate it so the interpolator has two nodes along the probe axis
        pos = np.array([pos[0], pos[0] + 1e-9])
        data = np.vstack([data, data])
    interp = RegularGridInterpolator((pos, s), data, method="linear", bounds_error=False, fill_value=np.nan)
    zz, xx = np.meshgrid(z, x, indexing="ij")
    if fold:
        legs = []
        k = 0
        while True:
            depths = [2 * k * t_plate + zz, 2 * (k + 1) * t_plate - zz]
            if 2 * k * t_plate > z_max_unfolded:
                break
            legs.extend(depths)
            k += 1
    else:
        legs = [zz]
    image = np.full(zz.shape, np.nan)
    for u in legs:
        p = xx - offset - beam_direction * u * tan_t
        vals = interp(np.stack([p.ravel(), (u / cos_t).ravel()], axis=-1)).reshape(zz.shape)
        image = np.fmax(image, vals)
    long_x = f"surface position along the {along} axis"
    out = xr.DataArray(
        image.astype(np.float32), dims=("depth", "x"),
        coords={"depth": ("depth", z, {"units": "mm", "long_name": "depth below the scanning surface"}),
                "x": ("x", x, {"units": "mm", "long_name": long_x})},
        name="amplitude_fsh",
    )
    out.attrs = result_attrs(
        grid, units="%FSH", long_name=f"true-geometry section ({detect})", detect=detect, along=along,
        position_mm=float(line.attrs[f"{'index' if along == 'scan' else 'scan'}_mm_used"]),
        index_point_offset_mm=offset, beam_direction=beam_direction, folded=int(bool(fold)),
        interpolation="inverse mapping, bilinear in (probe position, sound path); legs combined by maximum",
    )
    params = {"position_mm": position_mm, "along": along, "x_step_mm": dx, "z_step_mm": dz,
              "index_point_offset_mm": offset, "beam_direction": beam_direction, "fold": fold, "method": method,
              "detect": detect}
    return with_step(out, "angle_beam_section", params, source=grid)
