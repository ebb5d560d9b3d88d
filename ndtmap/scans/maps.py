"""C-scan maps and projections of a scan grid.

Every map is an :class:`xarray.DataArray` on ``(scan, index)`` (the
projections on ``(scan, time)`` or ``(index, time)``) whose attributes hold
``units``, ``long_name``, all the grid's global attributes (so the probe and
material can be found from the map alone), the gate definition where a gate
was used, and a provenance step. Missing A-scans are NaN in every map.

* :func:`amplitude_map`: peak amplitude in a gate, %FSH (or dB re a level or
  a DAC).
* :func:`depth_map`: depth of the gate event, mm; NaN where the gate did not
  trigger.
* :func:`thickness_map`: wall thickness from the back-wall echo ('first-echo',
  contact, from the zero offset), from two successive back-wall echoes
  ('echo-to-echo', independent of the zero offset) or from the interface echo
  to the back-wall echo ('interface-to-backwall', immersion).
* :func:`backwall_loss_map`: dB by which the back-wall echo falls below its
  nominal level, by the one definition :func:`backwall_loss_db` against
  :func:`nominal_backwall_fsh`.
* :func:`side_view` / :func:`end_view`: maximum of the rectified A-scans over
  ``index`` / ``scan``, on a depth axis.
* :func:`map_by_kind`: one entry point by name, for the command line.
"""

from __future__ import annotations

import json
from collections.abc import Iterable, Mapping
from typing import Any

import numpy as np
import xarray as xr

from ndtmap._shared.arrays import is_lazy, netcdf_safe, result_attrs
from ndtmap._shared.validate import interval, one_of, positive_float
from ndtmap.errors import CalibrationError, ParameterError, ParameterTypeError
from ndtmap.gates import Gate, evaluate_gate, evaluate_gates
from ndtmap.grid.geometry import depth_axis, leg_and_folded_depth, part_constants, sound_path_axis
from ndtmap.grid.provenance import with_step
from ndtmap.grid.schema import check_grid, missing_ascans
from ndtmap.signal import DacCurve, db_re, detected_signal

__all__ = [
    "MAP_KINDS",
    "THICKNESS_METHODS",
    "amplitude_map",
    "depth_map",
    "thickness_map",
    "backwall_loss_map",
    "backwall_loss_db",
    "nominal_backwall_fsh",
    "side_view",
    "end_view",
    "map_by_kind",
    "map_dataset",
]

MAP_KINDS = ("amplitude", "depth", "thickness", "backwall-loss")
THICKNESS_METHODS = ("first-echo", "echo-to-echo", "interface-to-backwall")
_GATE_RESULT_KEYS = ("gate", "gate_name", "gate_start", "gate_end", "gate_unit", "gate_threshold_fsh", "gate_mode",
                     "gate_follows", "detect", "depth_reference", "gate_window_us", "gate_window_relative_us",
                     "positions_outside_record", "dac")


def _finish(values: xr.DataArray, grid: xr.Dataset, *, name: str, units: str, long_name: str, step: str,
            params: Mapping[str, Any], source: Any, gate_result: xr.Dataset | None = None,
            **extra: Any) -> xr.DataArray:
    out = values.copy(deep=False).rename(name)
    attrs = result_attrs(grid)
    if gate_result is not None:
        attrs.update({k: gate_result.attrs[k] for k in _GATE_RESULT_KEYS if k in gate_result.attrs})
    attrs.update(extra)
    attrs["units"] = units
    attrs["long_name"] = long_name
    out.attrs = attrs
    return with_step(out, step, params, source=source)


def _gate_result(grid: xr.Dataset, gate: Gate, result: xr.Dataset | None, need: str, detect: str,
                 **evaluate: Any) -> xr.Dataset:
    """The gate's result: `result` when given (checked to be this gate's), else a new evaluation.

    Passing the result of :func:`ndtmap.gates.evaluate.evaluate_gates` lets several maps of one gate share a
    single pass over the A-scans.
    """
    if result is None:
        return evaluate_gate(grid, gate, detect=detect, **evaluate)
    if not isinstance(result, xr.Dataset) or result.attrs.get("gate") != json.dumps(gate.to_dict()):
        raise ParameterError(
            f"`result` must be the evaluate_gate result of gate {gate.name!r} itself (same definition); "
            "leave it out to evaluate the gate here"
        )
    if result.attrs.get("detect") != detect:
        raise ParameterError(
            f"`result` was evaluated with detect={result.attrs.get('detect')!r}, not {detect!r}"
        )
    if need not in result.data_vars:
        raise ParameterError(f"`result` holds no `{need}`; evaluate the gate with the options this map needs")
    return result


def amplitude_map(
    grid: xr.Dataset,
    gate: Gate,
    *,
    others: Iterable[Gate] | Mapping[str, Gate] = (),
    detect: str = "rectified",
    reference_fsh: float | None = None,
    dac: DacCurve | None = None,
    result: xr.Dataset | None = None,
) -> xr.DataArray:
    """C-scan of the peak amplitude in a gate.

    Parameters
    ----------
    grid : xarray.Dataset
        A scan grid (lazy results for dask-backed grids).
    gate : Gate
        The gate; `others` the gates it follows.
    detect : {'rectified', 'envelope'}, default 'rectified'
        Detection signal (see :mod:`ndtmap.gates.evaluate`).
    reference_fsh : float, optional
        Give the map in dB re this level instead of %FSH.
    dac : DacCurve, optional
        Give the map in dB re the DAC: the maximum over the window of
        ``A(t) / DAC(t)`` (not the highest echo converted at its own depth).
    result : xarray.Dataset, optional
        This gate's :func:`ndtmap.gates.evaluate.evaluate_gate` (or ``evaluate_gates``)
        result, to share one pass over the A-scans between several maps.

    Returns
    -------
    xarray.DataArray (scan, index)
        ``amplitude_fsh`` in %FSH (the highest sample in the window, also
        below the threshold; NaN where missing), or ``amplitude_db`` in dB.
        With `dac`: ``amplitude_db_re_dac``, the maximum of ``A(t)/DAC(t)``
        over the window in dB (a gate whose level is re the DAC needs
        `dac`; its %FSH map is the amplitude where that ratio peaks). On a
        grid through :func:`ndtmap.signal.apply_tcg` the %FSH map carries
        the coordinate ``clipped`` (the event's echo reached the digitiser
        full scale in the recorded samples); the %FSH map of a gate whose
        level is re the DAC carries ``dac_level_fsh``, the curve's level
        where ``A/DAC`` peaks.

    Examples
    --------
    >>> from ndtmap.grid.examples import example_grid
    >>> m = amplitude_map(example_grid((4.0,), (60.0,)), Gate("bw", 10, 14))
    >>> m.attrs["units"], round(float(m.max()), 0)
    ('%FSH', 60.0)
    """
    if reference_fsh is not None and dac is not None:
        raise ParameterError("give either `reference_fsh` or `dac`, not both")
    need = "amplitude_fsh"
    if reference_fsh is not None:
        need = "amplitude_db"
    elif dac is not None:
        need = "amplitude_db_re_dac"
    res = _gate_result(grid, gate, result, need, detect, others=others, reference_fsh=reference_fsh, dac=dac)
    params = {"gate": gate.to_dict(), "detect": detect, "reference_fsh": reference_fsh,
              "dac": dac.to_dict() if dac is not None else None}
    if reference_fsh is not None:
        return _finish(res["amplitude_db"], grid, name="amplitude_db", units="dB",
                       long_name=f"gate {gate.name} amplitude re {reference_fsh:g} %FSH", step="amplitude_map",
                       params=params, source=res, gate_result=res, reference_fsh=float(reference_fsh))
    if dac is not None:
        return _finish(res["amplitude_db_re_dac"], grid, name="amplitude_db_re_dac", units="dB",
                       long_name=f"gate {gate.name} amplitude re DAC", step="amplitude_map", params=params,
                       source=res, gate_result=res, dac=json.dumps(dac.to_dict()))
    values = res["amplitude_fsh"]
    if "clipped" in grid.data_vars and "clipped" in res.data_vars:  # software gain: clipping is not amplitude >= FS
        values = values.assign_coords(clipped=res["clipped"].astype(bool))
    if "dac_level_fsh" in res.data_vars:  # a level re the DAC: the curve's level where A/DAC peaks
        values = values.assign_coords(dac_level_fsh=res["dac_level_fsh"])
    return _finish(values, grid, name="amplitude_fsh", units="%FSH",
                   long_name=f"gate {gate.name} peak amplitude", step="amplitude_map", params=params,
                   source=res, gate_result=res)


def depth_map(
    grid: xr.Dataset,
    gate: Gate,
    *,
    others: Iterable[Gate] | Mapping[str, Gate] = (),
    detect: str = "rectified",
    depth_from: str = "auto",
    fold: bool = False,
    result: xr.Dataset | None = None,
) -> xr.DataArray:
    """C-scan of the depth of the gate event, mm (NaN where not triggered or missing).

    Parameters
    ----------
    grid, gate, others, detect, depth_from
        As for :func:`ndtmap.gates.evaluate.evaluate_gate`.
    fold : bool, default False
        For angle beams in a plate: the true depth folded at the back wall
        and the surface (needs ``part_thickness_mm``); else the unfolded
        depth ``s cos(theta)`` (a repeat echo of a reflector at depth z
        shows at 2 z).
    result : xarray.Dataset, optional
        This gate's evaluation, as for :func:`amplitude_map`.

    Returns
    -------
    xarray.DataArray (scan, index), ``depth_mm``

    Examples
    --------
    >>> from ndtmap.grid.examples import example_grid
    >>> m = depth_map(example_grid((4.0,)), Gate("bw", 10, 14))
    >>> m.attrs["units"], round(float(m[0, 0]), 2)
    ('mm', 11.84)
    """
    res = _gate_result(grid, gate, result, "depth_mm", detect, others=others, depth_from=depth_from)
    if result is not None and depth_from != "auto" and res.attrs.get("depth_reference") != depth_from:
        raise ParameterError(
            f"`result` measures depth from {res.attrs.get('depth_reference')!r}, not {depth_from!r}"
        )
    depth = res["depth_mm"]
    extra: dict[str, Any] = {}
    if fold:
        thickness = grid.attrs.get("part_thickness_mm")
        if thickness is None:
            raise ParameterError("`fold` needs the grid attribute `part_thickness_mm`; set it or use fold=False")
        t = float(thickness)
        depth = xr.apply_ufunc(lambda d: leg_and_folded_depth(d, t)[1], depth, dask="parallelized",
                               output_dtypes=[np.float64])
        extra["folded_at_thickness_mm"] = t
    params = {"gate": gate.to_dict(), "detect": detect, "depth_from": res.attrs["depth_reference"], "fold": fold}
    return _finish(depth, grid, name="depth_mm", units="mm",
                   long_name=f"gate {gate.name} event depth" + (" (folded)" if fold else ""), step="depth_map",
                   params=params, source=res, gate_result=res, **extra)


def thickness_map(
    grid: xr.Dataset,
    backwall_gate: Gate,
    *,
    reference_gate: Gate | None = None,
    method: str = "first-echo",
    others: Iterable[Gate] | Mapping[str, Gate] = (),
    detect: str = "rectified",
    result: xr.Dataset | None = None,
) -> xr.DataArray:
    """C-scan of the wall thickness, mm.

    ``T = c (t_backwall - t_reference) / 2 * cos(theta)``, with

    * 'first-echo': ``t_reference`` = the zero offset (contact testing; the
      thickness depends on the calibration of the zero);
    * 'echo-to-echo': `reference_gate` finds back-wall echo n and
      `backwall_gate` echo n + 1; the zero offset drops out (the
      multiple-echo method);
    * 'interface-to-backwall': `reference_gate` finds the water/part
      interface echo and `backwall_gate` the back-wall echo (immersion).

    Use the same mode for both gates ('peak' gives the most stable timing of
    echoes of different heights: on RF grids each echo is timed on its
    envelope, so a carrier phase that differs between the two echoes does
    not enter; see :mod:`ndtmap.gates.evaluate`). Positions where either gate did not
    trigger, or where the back-wall event is not later than the reference
    event, are NaN.

    Parameters
    ----------
    grid : xarray.Dataset
        A scan grid.
    backwall_gate : Gate
        Gate on the (later) back-wall echo.
    reference_gate : Gate, optional
        Required for 'echo-to-echo' and 'interface-to-backwall'; must be None
        for 'first-echo'.
    method : {'first-echo', 'echo-to-echo', 'interface-to-backwall'}
    others : gates followed by either gate.
    detect : {'rectified', 'envelope'}, default 'rectified'
    result : xarray.Dataset, optional
        For 'first-echo': the back-wall gate's evaluation, as for
        :func:`amplitude_map` (no second pass over the A-scans).

    Returns
    -------
    xarray.DataArray (scan, index), ``thickness_mm``

    Examples
    --------
    >>> from ndtmap.grid.examples import example_grid
    >>> g = example_grid((4.0, 8.0), attrs={"zero_offset_us": 0.1})     # a wrong zero
    >>> bw1, bw2 = Gate("bw1", 10, 14), Gate("bw2", 22, 26)
    >>> round(float(thickness_map(g, bw1)[0, 0]), 2)                    # biased by the zero
    11.54
    >>> round(float(thickness_map(g, bw2, reference_gate=bw1, method="echo-to-echo")[0, 0]), 2)
    11.84
    """
    grid = check_grid(grid)
    one_of("method", method, THICKNESS_METHODS)
    if not isinstance(backwall_gate, Gate):
        raise ParameterTypeError(f"`backwall_gate` must be a Gate, got {type(backwall_gate).__name__}")
    if method == "first-echo":
        if reference_gate is not None:
            raise ParameterError("`reference_gate` is not used by method 'first-echo'; leave it None")
    elif not isinstance(reference_gate, Gate):
        raise ParameterError(
            f"method {method!r} needs `reference_gate` (a Gate on the "
            f"{'first back-wall' if method == 'echo-to-echo' else 'interface'} echo), got {reference_gate!r}"
        )
    if result is not None:
        if method != "first-echo":
            raise ParameterError("`result` can stand in only for method 'first-echo'; leave it out")
        res = _gate_result(grid, backwall_gate, result, "time_us", detect)
        thickness = part_constants(grid).depth_mm(res["time_us"])
    else:
        extra = [] if reference_gate is None else [reference_gate]
        others_list = list(others.values()) if isinstance(others, Mapping) else list(others)
        results = evaluate_gates(grid, [backwall_gate, *extra, *others_list], detect=detect, depth_from="entry")
        res = results[backwall_gate.name]
        t_ref = None if reference_gate is None else results[reference_gate.name]["time_us"]
        thickness = part_constants(grid).depth_mm(res["time_us"], from_us=t_ref)
    thickness = thickness.where(thickness > 0)
    params = {"method": method, "backwall_gate": backwall_gate.to_dict(),
              "reference_gate": reference_gate.to_dict() if reference_gate is not None else None, "detect": detect}
    ref_attrs = {"reference_gate": json.dumps(reference_gate.to_dict())} if reference_gate is not None else {}
    return _finish(thickness, grid, name="thickness_mm", units="mm", long_name=f"wall thickness ({method})",
                   step="thickness_map", params=params, source=grid, gate_result=res,
                   thickness_method=method, **ref_attrs)


def _region_mask(grid: xr.Dataset, sound_region: Mapping[str, Any]) -> xr.DataArray:
    if not isinstance(sound_region, Mapping):
        raise ParameterTypeError(
            "`sound_region` must be a mapping like {'scan': (start_mm, end_mm), 'index': (start_mm, end_mm)}, "
            f"got {type(sound_region).__name__}"
        )
    unknown = sorted(set(sound_region) - {"scan", "index"})
    if unknown or not sound_region:
        raise ParameterError(f"`sound_region` keys must be 'scan' and/or 'index', got {sorted(sound_region)}")
    mask = xr.ones_like(grid["scan"], dtype=bool) & xr.ones_like(grid["index"], dtype=bool)
    for axis, value in sound_region.items():
        lo, hi = interval(f"sound_region[{axis!r}]", value, unit="mm")
        c = grid[axis]
        mask = mask & (c >= lo) & (c <= hi)
    if not bool(mask.any()):
        raise ParameterError(f"`sound_region` {dict(sound_region)} contains no grid position; check the mm ranges")
    return mask.transpose("scan", "index")


def backwall_loss_db(amplitude_fsh: Any, nominal_fsh: Any, *, floor_fsh: float = 0.1) -> Any:
    """Back-wall echo loss in dB: ``20 log10(nominal / max(A, floor))``, positive where the echo is weaker.

    The one definition of back-wall loss in ndtmap (maps, indications, the
    workbench). The floor keeps a vanished back-wall echo at a large but
    finite loss (``20 log10(nominal / floor)``, about 58 dB for an 80 %FSH
    nominal and the default floor of 0.1 %FSH).

    Parameters
    ----------
    amplitude_fsh : float, numpy.ndarray or xarray.DataArray
        Back-wall echo amplitude, %FSH (the highest sample in the back-wall
        gate); NaN where the A-scan is missing (the loss is NaN there).
    nominal_fsh : float or array_like
        Nominal back-wall echo, %FSH (> 0), e.g. from
        :func:`nominal_backwall_fsh`.
    floor_fsh : float, default 0.1
        Least amplitude used in the ratio, %FSH (> 0).

    Returns
    -------
    float, numpy.ndarray or xarray.DataArray
        dB, of the kind of `amplitude_fsh` (DataArrays stay lazy).

    Examples
    --------
    >>> round(backwall_loss_db(40.0, 80.0), 2), round(backwall_loss_db(0.0, 80.0), 1)
    (6.02, 58.1)
    >>> backwall_loss_db(np.array([20.0, np.nan]), 80.0).round(2).tolist()
    [12.04, nan]
    """
    floor = positive_float("floor_fsh", floor_fsh)
    if not isinstance(amplitude_fsh, xr.DataArray):
        amplitude_fsh = np.asarray(amplitude_fsh, dtype=np.float64)
    out = -db_re(np.maximum(amplitude_fsh, floor), nominal_fsh)
    if isinstance(out, np.ndarray) and out.ndim == 0:
        return float(out)
    return out


def nominal_backwall_fsh(amplitude_fsh: Any, *, mask: Any = None, floor_fsh: float = 0.1) -> float:
    """Nominal back-wall echo level: the median of ``max(A, floor)`` over the valid positions of `mask`, %FSH.

    The reference of :func:`backwall_loss_db` and of the DGS evaluation when
    no level is given.

    Parameters
    ----------
    amplitude_fsh : numpy.ndarray or xarray.DataArray
        Back-wall echo amplitude, %FSH, NaN where missing (a dask-backed
        DataArray is computed).
    mask : bool array or xarray.DataArray of the same shape, optional
        Positions known to be sound; default every position.
    floor_fsh : float, default 0.1
        Least amplitude counted, %FSH (> 0), as in :func:`backwall_loss_db`.

    Returns
    -------
    float
        %FSH.

    Raises
    ------
    CalibrationError
        When the mask holds no valid position, or when the median is at the
        floor (no back-wall echo in the gate).

    Examples
    --------
    >>> a = np.array([[80.0, 82.0], [np.nan, 5.0]])
    >>> nominal_backwall_fsh(a), nominal_backwall_fsh(a, mask=np.array([[True, False], [True, True]]))
    (80.0, 42.5)
    """
    floor = positive_float("floor_fsh", floor_fsh)
    values = np.asarray(
        amplitude_fsh.values if isinstance(amplitude_fsh, xr.DataArray) else amplitude_fsh, dtype=np.float64
    )
    keep = np.isfinite(values)
    if mask is not None:
        m = np.asarray(mask.values if isinstance(mask, xr.DataArray) else mask)
        if m.shape != values.shape:
            raise ParameterError(f"`mask` must have the shape of the amplitudes {values.shape}, got {m.shape}")
        keep &= m.astype(bool)
    chosen = values[keep]
    if chosen.size == 0:
        raise CalibrationError(
            "the sound region holds only missing A-scans; mark another region or give the nominal back-wall "
            "level (`nominal_fsh`)"
        )
    nominal = float(np.median(np.maximum(chosen, floor)))
    if nominal <= floor:
        raise CalibrationError(
            f"the back-wall gate finds no echo in the sound region (median {nominal:g} %FSH); check the gate "
            "or give the nominal back-wall level (`nominal_fsh`)"
        )
    return nominal


def backwall_loss_map(
    grid: xr.Dataset,
    backwall_gate: Gate,
    *,
    nominal_fsh: float | None = None,
    sound_region: Mapping[str, Any] | None = None,
    others: Iterable[Gate] | Mapping[str, Gate] = (),
    detect: str = "rectified",
    floor_fsh: float = 0.1,
    result: xr.Dataset | None = None,
) -> xr.DataArray:
    """C-scan of the back-wall echo loss in dB (positive where the echo is weaker than nominal).

    ``loss = 20 log10(nominal / max(A, floor))`` with ``A`` the highest
    sample in the back-wall gate (also where it stays below the threshold),
    so a vanished back-wall echo gives a large but finite loss (with the
    default floor of 0.1 %FSH at most ``20 log10(nominal / 0.1)``, i.e.
    about 58 dB for an 80 %FSH nominal). Missing A-scans are NaN.

    Parameters
    ----------
    grid : xarray.Dataset
        A scan grid.
    backwall_gate : Gate
        Gate on the back-wall echo.
    nominal_fsh : float, optional
        Nominal back-wall echo in %FSH. If omitted, the median amplitude over
        `sound_region` (or over the whole scan when that is omitted too).
    sound_region : mapping, optional
        A user-marked sound area, ``{'scan': (lo_mm, hi_mm), 'index': (lo_mm,
        hi_mm)}`` (either key may be left out), bounds included.
    others, detect
        As for :func:`amplitude_map`.
    floor_fsh : float, default 0.1
        Least amplitude used in the ratio, %FSH.
    result : xarray.Dataset, optional
        The back-wall gate's evaluation, as for :func:`amplitude_map`.

    Returns
    -------
    xarray.DataArray (scan, index), ``backwall_loss_db``
        attrs ``nominal_fsh`` (the value used), ``nominal_source``,
        ``floor_fsh``. When the nominal level is taken from the data the
        amplitude map is computed (also for a dask grid), and the result is
        in memory; with `nominal_fsh` given it stays lazy.

    Examples
    --------
    >>> from ndtmap.grid.examples import example_grid
    >>> m = backwall_loss_map(example_grid((4.0,), (40.0,)), Gate("bw", 10, 14), nominal_fsh=80.0)
    >>> m.attrs["units"], round(float(m[0, 0]), 2)
    ('dB', 6.02)
    """
    grid = check_grid(grid)
    floor = positive_float("floor_fsh", floor_fsh)
    if nominal_fsh is not None and sound_region is not None:
        raise ParameterError("give either `nominal_fsh` or `sound_region`, not both")
    res = _gate_result(grid, backwall_gate, result, "amplitude_fsh", detect, others=others)
    amp = res["amplitude_fsh"]
    if nominal_fsh is not None:
        nominal = positive_float("nominal_fsh", nominal_fsh)
        source = "given"
    else:
        if is_lazy(amp):
            amp = amp.compute()
        if sound_region is not None:
            mask = _region_mask(grid, sound_region).values
            source = f"median over the sound region {json.dumps({k: list(v) for k, v in sound_region.items()})}"
        else:
            mask = None
            source = "median over the whole scan"
        nominal = nominal_backwall_fsh(amp, mask=mask, floor_fsh=floor)
    loss = backwall_loss_db(amp, nominal, floor_fsh=floor)
    params = {"backwall_gate": backwall_gate.to_dict(), "nominal_fsh": nominal, "nominal_source": source,
              "floor_fsh": floor, "detect": detect}
    return _finish(loss, grid, name="backwall_loss_db", units="dB",
                   long_name=f"back-wall echo loss (gate {backwall_gate.name}) re {nominal:.4g} %FSH",
                   step="backwall_loss_map", params=params, source=res, gate_result=res,
                   nominal_fsh=nominal, nominal_source=source, floor_fsh=floor)


def _projection(grid: xr.Dataset, over: str, detect: str, step: str, long_name: str) -> xr.DataArray:
    grid = check_grid(grid)
    one_of("detect", detect, ("rectified", "envelope"))
    sig = detected_signal(grid, detect)
    miss = missing_ascans(grid)
    filled = sig.where(~miss, -np.inf)
    proj = filled.max(over)
    proj = proj.where(proj > -np.inf)
    proj = proj.assign_coords(depth=depth_axis(grid), sound_path=sound_path_axis(grid))
    return _finish(proj, grid, name="amplitude_fsh", units="%FSH", long_name=long_name, step=step,
                   params={"detect": detect, "max_over": over}, source=grid, detect=detect)


def side_view(grid: xr.Dataset, *, detect: str = "rectified") -> xr.DataArray:
    """Side view: the maximum of the rectified A-scans over ``index``, on ``(scan, time)``.

    Missing A-scans are left out of the maximum; a column whose A-scans are
    all missing is NaN. Coordinates ``depth`` and ``sound_path`` (mm) run
    along ``time``.

    Examples
    --------
    >>> from ndtmap.grid.examples import example_grid
    >>> sv = side_view(example_grid())
    >>> sv.dims, sv.attrs["units"]
    (('scan', 'time'), '%FSH')
    """
    return _projection(grid, "index", detect, "side_view", "maximum amplitude over the index axis")


def end_view(grid: xr.Dataset, *, detect: str = "rectified") -> xr.DataArray:
    """End view: the maximum of the rectified A-scans over ``scan``, on ``(index, time)``.

    Examples
    --------
    >>> from ndtmap.grid.examples import example_grid
    >>> end_view(example_grid()).dims
    ('index', 'time')
    """
    return _projection(grid, "scan", detect, "end_view", "maximum amplitude over the scan axis")


_KIND_OPTIONS = {
    "amplitude": ("others", "detect", "reference_fsh", "dac"),
    "depth": ("others", "detect", "depth_from", "fold"),
    "thickness": ("others", "detect", "reference_gate", "method"),
    "backwall-loss": ("others", "detect", "nominal_fsh", "sound_region", "floor_fsh"),
}


def map_by_kind(grid: xr.Dataset, kind: str, gate: Gate, **options: Any) -> xr.DataArray:
    """Make a C-scan map by name: the entry point of the command line's ``map``.

    Parameters
    ----------
    grid : xarray.Dataset
        A scan grid.
    kind : {'amplitude', 'depth', 'thickness', 'backwall-loss'}
        Which map.
    gate : Gate
        The gate (the back-wall gate for 'thickness' and 'backwall-loss').
    **options
        Keyword options of :func:`amplitude_map`, :func:`depth_map`,
        :func:`thickness_map` or :func:`backwall_loss_map`.

    Returns
    -------
    xarray.DataArray (scan, index)
        One 2-D map with ``units`` in its attrs; :func:`map_dataset` turns it
        into a one-variable dataset ready to write.

    Examples
    --------
    >>> from ndtmap.grid.examples import example_grid
    >>> m = map_by_kind(example_grid(), "thickness", Gate("bw", 10, 14))
    >>> m.name, m.attrs["units"]
    ('thickness_mm', 'mm')
    """
    one_of("kind", kind, MAP_KINDS)
    allowed = _KIND_OPTIONS[kind]
    unknown = sorted(set(options) - set(allowed))
    if unknown:
        raise ParameterError(f"option(s) {unknown} do not apply to kind {kind!r}; it takes {list(allowed)}")
    func = {"amplitude": amplitude_map, "depth": depth_map, "thickness": thickness_map,
            "backwall-loss": backwall_loss_map}[kind]
    return func(grid, gate, **options)


def map_dataset(map_: xr.DataArray) -> xr.Dataset:
    """A dataset holding exactly one 2-D map, with attributes that netCDF can store.

    The map's attributes are kept on the variable (``units``,
    ``long_name``) and the grid's global attributes and provenance are also
    set on the dataset.

    Examples
    --------
    >>> from ndtmap.grid.examples import example_grid
    >>> ds = map_dataset(map_by_kind(example_grid(), "amplitude", Gate("bw", 10, 14)))
    >>> list(ds.data_vars), ds["amplitude_fsh"].attrs["units"]
    (['amplitude_fsh'], '%FSH')
    """
    if not isinstance(map_, xr.DataArray) or map_.name is None:
        raise ParameterTypeError("`map_` must be a named DataArray from one of the map functions")
    attrs = {k: netcdf_safe(v) for k, v in map_.attrs.items()}
    var = map_.copy(deep=False)
    var.attrs = attrs
    ds = var.to_dataset()
    ds.attrs = {k: v for k, v in attrs.items() if k not in ("units", "long_name")}
    return ds
