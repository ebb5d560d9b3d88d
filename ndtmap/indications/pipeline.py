"""From gated maps to a table of sized, flagged indications.

:func:`size_indications` runs detection (:mod:`ndtmap.indications.detection`), drop
sizing (:mod:`ndtmap.indications.sizing`), DGS evaluation (:mod:`ndtmap.indications.dgs`), the
validity flags (:mod:`ndtmap.indications.flags`) and, if rules are given, screening
(:mod:`ndtmap.indications.rules`), and returns one plain, JSON-serialisable dict per
indication.
"""

from __future__ import annotations

import math
import os
from typing import Any

import numpy as np
import xarray as xr

from ndtmap._shared import mapgeom as mg
from ndtmap._shared.validate import finite_float, nonnegative_float, positive_float
from ndtmap.errors import CalibrationError, ParameterError, ParameterTypeError
from ndtmap.grid.provenance import jsonable
from ndtmap.indications.detection import Indication, detect_backwall_loss, detect_indications
from ndtmap.indications.dgs import backwall_reference_fsh, equivalent_fbh_diameter
from ndtmap.indications.flags import (
    FLAGS,
    is_low_snr,
    is_saturated,
    is_smaller_than_beam,
    noise_level_fsh,
    repeat_echo_notes,
)
from ndtmap.indications.rules import Rules, load_rules, screen
from ndtmap.indications.sizing import (
    beam_corrected_length,
    beam_width_at,
    drop_area,
    drop_length,
    level_area,
    level_length,
)

__all__ = ["size_indications", "scanned_area_mm2", "RECORD_KEYS"]

#: Keys of every record, in print order.
RECORD_KEYS: tuple[str, ...] = (
    "id",
    "kind",
    "scan_mm",
    "index_mm",
    "depth_mm",
    "depth_min_mm",
    "depth_max_mm",
    "peak_fsh",
    "peak_db",
    "reference_fsh",
    "backwall_loss_db",
    "length_scan_mm",
    "length_scan_uncertainty_mm",
    "length_index_mm",
    "length_index_uncertainty_mm",
    "area_mm2",
    "area_uncertainty_mm2",
    "sizing_method",
    "length_scan_20db_mm",
    "length_index_20db_mm",
    "length_scan_20db_raw_mm",
    "length_index_20db_raw_mm",
    "length_20db_uncertainty_mm",
    "beam_width_6db_mm",
    "beam_width_20db_mm",
    "ers_mm",
    "ers_method",
    "ers_ratio_db",
    "scan_min_mm",
    "scan_max_mm",
    "index_min_mm",
    "index_max_mm",
    "n_positions",
    "detected_area_mm2",
    "detection_level",
    "flags",
    "notes",
)


def scanned_area_mm2(amplitude_map: xr.DataArray) -> float:
    """Area covered by valid (not missing) positions: sum of their cell areas, mm^2.

    Examples
    --------
    >>> import numpy as np, xarray as xr
    >>> m = xr.DataArray(np.ones((3, 4)), dims=("scan", "index"),
    ...                  coords={"scan": [0.0, 1, 2], "index": [0.0, 2, 4, 6]})
    >>> scanned_area_mm2(m)
    24.0
    """
    amp = mg.as_map("amplitude_map", amplitude_map)
    areas = mg.cell_areas(amp)
    ok = np.isfinite(amp.values) & np.isfinite(areas)
    return float(areas[ok].sum())


def _opt(v: Any) -> float | None:
    if v is None:
        return None
    v = float(v)
    return v if math.isfinite(v) else None


def _median_depth(depth: Any, name: str, amp: xr.DataArray, exclude: list[Indication]) -> float | None:
    if depth is None:
        return None
    if isinstance(depth, xr.DataArray):
        dm = mg.as_map(name, depth)
        mg.check_same_grid(name, dm, "amplitude_map", amp)
        try:
            return backwall_reference_fsh(dm, exclude=exclude)  # the same sound-region median
        except CalibrationError:
            raise CalibrationError(f"`{name}` has no valid value in the sound region") from None
    return positive_float(name, depth)


def _rules(rules: Any) -> Rules | None:
    if rules is None or isinstance(rules, Rules):
        return rules
    if isinstance(rules, str | os.PathLike):
        return load_rules(rules)
    raise ParameterTypeError(f"`rules` must be Rules, a path to a rules file or None, got {type(rules).__name__}")


def size_indications(
    amplitude_map: xr.DataArray,
    *,
    threshold_fsh: float | None = None,
    threshold_db: float | None = None,
    reference: float | xr.DataArray | None = None,
    depth_map: xr.DataArray | None = None,
    backwall: float | xr.DataArray | None = None,
    backwall_depth_mm: float | xr.DataArray | None = None,
    backwall_loss_map: xr.DataArray | None = None,
    loss_threshold_db: float | None = None,
    min_area_mm2: float = 0.0,
    min_positions: int = 1,
    edge: str = "first",
    bridge_missing: bool = False,
    beam_profile_6db: Any = None,
    beam_profile_20db: Any = None,
    attenuation_db_per_mm: float | None = None,
    transfer_correction_db: float = 0.0,
    backwall_gain_reduction_db: float = 0.0,
    dgs_model: str = "auto",
    min_snr_db: float = 6.0,
    repeat_tolerance_mm: float = 2.0,
    repeat_tolerance_fraction: float = 0.03,
    other_indications: Any = (),
    rules: Rules | str | os.PathLike[str] | None = None,
) -> list[dict[str, Any]]:
    """Detect, size, flag (and optionally screen) the indications of a gated map.

    Parameters
    ----------
    amplitude_map : xarray.DataArray (scan, index)
        Gate amplitude, %FSH, NaN where missing; its attrs carry the grid's
        global attrs (probe, velocity, ``beam_angle_deg``,
        ``digitiser_full_scale_fsh``, ``attenuation_db_per_mm``,
        ``part_thickness_mm``).
    threshold_fsh, threshold_db, reference
        Detection level, see :func:`ndtmap.indications.detection.detect_indications`.
    depth_map : xarray.DataArray, optional
        Depth of the same gate, mm (for depths, beam widths, DGS, repeats).
    backwall : float or xarray.DataArray, optional
        Back-wall reference: a level in %FSH, or a back-wall amplitude map
        whose median over the sound area (outside indications) is used.
        Without it ``ers_mm`` is None.
    backwall_depth_mm : float or xarray.DataArray, optional
        Back-wall depth, mm, or a back-wall depth map (median over the sound
        area). Default: the map's ``part_thickness_mm`` attribute.
    backwall_loss_map : xarray.DataArray, optional
        Back-wall loss, dB. Default: computed from a `backwall` map as
        ``20 log10(reference / backwall)`` when `loss_threshold_db` is given.
    loss_threshold_db : float, optional
        Detect back-wall-loss indications where loss >= this (dB).
    min_area_mm2, min_positions, bridge_missing
        Detection options.
    edge : {'first', 'outermost'}, default 'first'
        Walking rule of the drop lengths (see :mod:`ndtmap.indications.sizing`).
    beam_profile_6db, beam_profile_20db : mapping or (depths, widths), optional
        Measured beam widths (mm) by depth, instead of the piston model.
    attenuation_db_per_mm : float, optional
        One-way attenuation for DGS (default: the map's attribute, else 0).
    transfer_correction_db, backwall_gain_reduction_db : float
        DGS corrections, see :func:`ndtmap.indications.dgs.equivalent_fbh_diameter`.
    dgs_model : {'auto', 'far-field', 'piston'}
        DGS relation.
    min_snr_db : float, default 6
        ``low_snr`` below this peak-to-noise ratio.
    repeat_tolerance_mm, repeat_tolerance_fraction : float
        Depth tolerance of ``repeat_echo``.
    other_indications : sequence of Indication, optional
        Indications of other gates at the same positions (e.g. a shallower
        gate), checked as possible primaries of repeat echoes.
    rules : Rules or path, optional
        Screening rules; each record then has ``screening`` and
        ``exceeded_rules``.

    Returns
    -------
    list of dict
        One record per indication with the keys in :data:`RECORD_KEYS`
        (plus ``screening`` and ``exceeded_rules`` with rules): floats, None
        for missing values, lists of strings. Amplitude indications come
        first (by decreasing peak), then back-wall-loss indications (by
        decreasing loss). Flags are from :data:`ndtmap.indications.flags.FLAG_MEANINGS`.

    Examples
    --------
    >>> import numpy as np, xarray as xr
    >>> a = np.full((20, 20), 2.0); a[5:15, 6:12] = 80.0
    >>> m = xr.DataArray(a, dims=("scan", "index"), coords={"scan": np.arange(20.0), "index": np.arange(20.0)},
    ...                  attrs={"probe_diameter_mm": 10, "probe_frequency_mhz": 5, "velocity_m_s": 5920})
    >>> r = size_indications(m, threshold_fsh=20)[0]
    >>> r["id"], r["peak_fsh"], round(r["length_scan_mm"], 2), round(r["length_index_mm"], 2), r["area_mm2"]
    (1, 80.0, 10.03, 6.03, 60.0)
    >>> r["flags"]  # no depth map: the beam checks are not made (see r["notes"])
    []
    """
    amp = mg.as_map("amplitude_map", amplitude_map)
    attrs = dict(amplitude_map.attrs)
    rules_obj = _rules(rules)
    inds = detect_indications(
        amp,
        threshold_fsh=threshold_fsh,
        threshold_db=threshold_db,
        reference=reference,
        depth_map=depth_map,
        min_area_mm2=min_area_mm2,
        min_positions=min_positions,
        bridge_missing=bridge_missing,
    )
    full_scale = mg.map_attr(attrs, "digitiser_full_scale_fsh", 100.0)
    alpha = (
        nonnegative_float("attenuation_db_per_mm", attenuation_db_per_mm)
        if attenuation_db_per_mm is not None
        else mg.map_attr(attrs, "attenuation_db_per_mm", 0.0)
    )
    finite_float("transfer_correction_db", transfer_correction_db)
    finite_float("backwall_gain_reduction_db", backwall_gain_reduction_db)
    theta = math.radians(mg.map_attr(attrs, "beam_angle_deg", 0.0) or 0.0)
    probe = {k: mg.map_attr(attrs, k) for k in ("probe_diameter_mm", "probe_frequency_mhz", "velocity_m_s")}
    probe_known = all(v is not None for v in probe.values())

    # back-wall reference, depth and loss
    bw_map = None
    bw_ref = None
    dgs_problem = None
    if isinstance(backwall, xr.DataArray):
        bw_map = mg.as_map("backwall", backwall)
        mg.check_same_grid("backwall", bw_map, "amplitude_map", amp)
        bw_ref = backwall_reference_fsh(bw_map, exclude=inds)
    elif backwall is not None:
        bw_ref = finite_float("backwall", backwall)
        if bw_ref <= 0:
            raise CalibrationError(f"`backwall` must be greater than 0 %FSH, got {backwall!r}")
    if bw_ref is not None and is_saturated(bw_ref, full_scale_fsh=full_scale):
        dgs_problem = (
            f"back-wall reference {bw_ref:.1f} %FSH is saturated: no DGS size (take the back wall at lower gain "
            "and give `backwall_gain_reduction_db`)"
        )
    if backwall_depth_mm is None:
        zbw_depth = mg.map_attr(attrs, "part_thickness_mm")
    else:
        zbw_depth = _median_depth(backwall_depth_mm, "backwall_depth_mm", amp, inds)

    loss_inds: list[Indication] = []
    loss_map = None
    if loss_threshold_db is not None:
        if backwall_loss_map is not None:
            loss_map = mg.as_map("backwall_loss_map", backwall_loss_map)
            mg.check_same_grid("backwall_loss_map", loss_map, "amplitude_map", amp)
        elif bw_map is not None:
            with np.errstate(divide="ignore", invalid="ignore"):
                loss = 20.0 * np.log10(bw_ref / np.maximum(bw_map.values, 0.0))
            loss_map = bw_map.copy(data=loss)
        else:
            raise ParameterError(
                "`loss_threshold_db` needs a `backwall_loss_map` or a back-wall amplitude map as `backwall`"
            )
        loss_inds = detect_backwall_loss(
            loss_map,
            threshold_db=loss_threshold_db,
            depth_map=depth_map,
            min_area_mm2=min_area_mm2,
            min_positions=min_positions,
            bridge_missing=bridge_missing,
            first_id=len(inds) + 1,
        )
    elif backwall_loss_map is not None:
        raise ParameterError("`backwall_loss_map` was given without `loss_threshold_db`; give the loss level in dB")

    noise = noise_level_fsh(amp, inds)
    repeats = repeat_echo_notes(
        inds,
        backwall_depth_mm=zbw_depth,
        tolerance_mm=repeat_tolerance_mm,
        tolerance_fraction=repeat_tolerance_fraction,
        others=list(other_indications),
    )
    noise_note = None
    if noise is None and inds:
        noise_note = "noise level unknown (too few valid positions outside the indications): low_snr not evaluated"
    records = []
    for ind in inds:
        records.append(
            _amplitude_record(
                amp, attrs, ind,
                edge=edge, noise=noise, min_snr_db=min_snr_db, full_scale=full_scale,
                repeats=repeats.get(ind.id, []), beam_profile_6db=beam_profile_6db,
                beam_profile_20db=beam_profile_20db, bw_ref=bw_ref, zbw_depth=zbw_depth, theta=theta,
                probe=probe if probe_known else None, alpha=alpha, transfer=transfer_correction_db,
                gain_red=backwall_gain_reduction_db, dgs_model=dgs_model, dgs_problem=dgs_problem,
            )
        )
    if noise_note:
        for rec in records:
            rec["notes"].append(noise_note)
    for ind in loss_inds:
        records.append(_loss_record(loss_map, ind, level=float(loss_threshold_db), edge=edge))
    if rules_obj is not None:
        res = screen(records, rules_obj, scanned_area_mm2=scanned_area_mm2(amp))
        for rec, s in zip(records, res.indications, strict=True):
            rec["screening"] = s.statement
            rec["exceeded_rules"] = list(s.exceeded)
            rec["notes"].extend(s.notes)
    return [jsonable(r) for r in records]


def _base(ind: Indication) -> dict[str, Any]:
    d = ind.as_dict()
    rec = {k: None for k in RECORD_KEYS}
    for k in RECORD_KEYS:
        if k in d:
            rec[k] = d[k]
    rec["detected_area_mm2"] = d["area_mm2"]
    rec["area_mm2"] = None
    rec["flags"] = []
    rec["notes"] = []
    if d.get("total_backwall_loss"):
        rec["total_backwall_loss"] = True
    return rec


def _add_flag(rec: dict[str, Any], flag: str) -> None:
    if flag not in rec["flags"]:
        rec["flags"].append(flag)


def _finish_flags(rec: dict[str, Any]) -> None:
    rec["flags"] = [f for f in FLAGS if f in rec["flags"]]
    seen: list[str] = []
    for n in rec["notes"]:
        if n not in seen:
            seen.append(n)
    rec["notes"] = seen


def _amplitude_record(
    amp: xr.DataArray,
    attrs: dict[str, Any],
    ind: Indication,
    *,
    edge: str,
    noise: float | None,
    min_snr_db: float,
    full_scale: float,
    repeats: list[str],
    beam_profile_6db: Any,
    beam_profile_20db: Any,
    bw_ref: float | None,
    zbw_depth: float | None,
    theta: float,
    probe: dict[str, float] | None,
    alpha: float,
    transfer: float,
    gain_red: float,
    dgs_model: str,
    dgs_problem: str | None,
) -> dict[str, Any]:
    rec = _base(ind)
    rec["sizing_method"] = "6 dB drop"
    notes = rec["notes"]
    lengths = {}
    w6 = None
    for axis in ("scan", "index"):
        r = drop_length(amp, ind, drop_db=6.0, axis=axis, edge=edge)
        lengths[axis] = r
        rec[f"length_{axis}_mm"] = _opt(r.length_mm)
        rec[f"length_{axis}_uncertainty_mm"] = _opt(r.uncertainty_mm)
        notes.extend(r.notes)
        if r.lower_bound:
            _add_flag(rec, "at_scan_edge")
        if r.data_gap:
            _add_flag(rec, "data_gap")
    area = drop_area(amp, ind, drop_db=6.0)
    rec["area_mm2"] = _opt(area.area_mm2)
    rec["area_uncertainty_mm2"] = _opt(area.uncertainty_mm2)
    notes.extend(area.notes)
    if area.lower_bound or ind.touches_edge:
        _add_flag(rec, "at_scan_edge")
    if area.data_gap or ind.missing_adjacent > 0:
        _add_flag(rec, "data_gap")
    if ind.missing_adjacent > 0:
        notes.append(f"{ind.missing_adjacent} missing A-scan(s) inside or next to the detected region")

    # beam widths, 20 dB drop
    z = ind.depth_mm
    if z is None:
        notes.append("no depth at the peak: no beam width, no 20 dB beam correction, no DGS size")
    else:
        w6, n6 = beam_width_at(z, drop_db=6.0, attrs=attrs, beam_profile=beam_profile_6db)
        rec["beam_width_6db_mm"] = _opt(w6)
        notes.extend(n6)
        small = [ax for ax in ("scan", "index")
                 if is_smaller_than_beam(lengths[ax].length_mm, lengths[ax].uncertainty_mm, w6)]
        if small:
            _add_flag(rec, "smaller_than_beam")
            notes.append(
                f"6 dB length along {' and '.join(small)} is not larger than the -6 dB beam width ({w6:.2f} mm): "
                "the drop measured the beam; use the DGS equivalent size"
            )
        elif w6 is not None and any(
            lengths[ax].length_mm is not None and lengths[ax].length_mm < 2.0 * w6 for ax in ("scan", "index")
        ):
            notes.append(
                f"a 6 dB length is less than twice the -6 dB beam width ({w6:.2f} mm): the beam dominates "
                "the edge positions"
            )
        unc20 = []
        for axis in ("scan", "index"):
            b = beam_corrected_length(amp, ind, drop_db=20.0, depth_mm=z, beam_profile=beam_profile_20db,
                                      axis=axis, edge=edge)
            rec["beam_width_20db_mm"] = _opt(b.beam_width_mm)
            rec[f"length_{axis}_20db_mm"] = _opt(b.length_mm)
            rec[f"length_{axis}_20db_raw_mm"] = _opt(b.raw.length_mm)
            if b.uncertainty_mm is not None:
                unc20.append(b.uncertainty_mm)
            notes.extend(b.notes)
            if b.not_larger_than_beam:
                _add_flag(rec, "beam_limited_20db")
            if b.raw.lower_bound:
                # The -20 dB level was not reached before the map boundary. When the region and its 6 dB
                # lines are clear of the edge this is a 20 dB matter only (often: the level lies in the noise),
                # so it is a note on the 20 dB size, not the `at_scan_edge` flag of the indication.
                rec[f"length_{axis}_20db_mm"] = None
                notes.append(
                    f"along {axis} the amplitude does not fall to -20 dB ({0.1 * ind.peak_fsh:.2f} %FSH) before the "
                    "edge of the map (or the noise stays above that level): no 20 dB size"
                )
            if b.raw.data_gap:
                _add_flag(rec, "data_gap")
        rec["length_20db_uncertainty_mm"] = max(unc20) if unc20 else None
        big = w6 is not None and all(
            lengths[ax].length_mm is not None and lengths[ax].length_mm > 2.0 * w6 for ax in ("scan", "index")
        )
        if big and any(rec[f"length_{ax}_20db_mm"] is not None for ax in ("scan", "index")):
            notes.append(
                "the reflector is much larger than the beam: the beam-corrected 20 dB size is biased low, "
                "prefer the 6 dB drop"
            )

    # DGS: an equivalent flat-bottom-hole size describes reflectors smaller than the beam; for one much
    # larger than the beam (both 6 dB lengths above twice the -6 dB beam width) it would understate the
    # reflector, so none is given (the drop sizes are the measurement then).
    larger_than_beam = w6 is not None and all(
        lengths[ax].length_mm is not None and lengths[ax].length_mm > 2.0 * w6 for ax in ("scan", "index")
    )
    if bw_ref is not None and z is not None and larger_than_beam:
        rec["ers_method"] = "not applicable"
        notes.append(
            f"no DGS equivalent size: the reflector is much larger than the beam (6 dB lengths above twice the "
            f"-6 dB beam width, {w6:.1f} mm); the 6 dB drop sizes describe it"
        )
    elif bw_ref is not None and z is not None:
        if dgs_problem is not None:
            notes.append(dgs_problem)
        elif probe is None:
            notes.append("no DGS size: the map lacks probe_diameter_mm, probe_frequency_mhz or velocity_m_s")
        elif zbw_depth is None:
            notes.append("no DGS size: give `backwall_depth_mm` (or part_thickness_mm in the map's attrs)")
        elif ind.peak_fsh is None or ind.peak_fsh <= 0 or z <= 0:
            notes.append("no DGS size: no positive peak amplitude or depth")
        else:
            cos = math.cos(theta)
            res = equivalent_fbh_diameter(
                ind.peak_fsh,
                z / cos,
                backwall_fsh=bw_ref,
                backwall_sound_path_mm=zbw_depth / cos,
                probe_diameter_mm=probe["probe_diameter_mm"],
                frequency_mhz=probe["probe_frequency_mhz"],
                velocity_m_s=probe["velocity_m_s"],
                attenuation_db_per_mm=alpha,
                transfer_correction_db=transfer,
                backwall_gain_reduction_db=gain_red,
                model=dgs_model,
                full_scale_fsh=full_scale,
            )
            rec["ers_mm"] = _opt(res.ers_mm)
            rec["ers_method"] = res.method
            rec["ers_ratio_db"] = _opt(res.ratio_db)
            notes.extend(res.notes)
            if res.near_field:
                _add_flag(rec, "near_field")
            if theta > 0:
                notes.append("DGS with an angle beam: the back-wall reference of a straight-beam relation was used; "
                             "use a reference block for angle-beam DGS")
    elif bw_ref is None:
        notes.append("no back-wall reference: no DGS size")

    # amplitude flags
    if is_saturated(ind.peak_fsh, full_scale_fsh=full_scale):
        _add_flag(rec, "saturated")
        notes.append(
            f"peak {ind.peak_fsh:.1f} %FSH is at full scale: drop sizes are invalid and the DGS size is a lower "
            "bound; rescan at lower gain"
        )
    if is_low_snr(ind.peak_fsh, noise, min_snr_db=min_snr_db):
        _add_flag(rec, "low_snr")
        notes.append(f"peak {ind.peak_fsh:.1f} %FSH is less than {min_snr_db:g} dB above the noise ({noise:.1f} %FSH)")
    if repeats:
        _add_flag(rec, "repeat_echo")
        notes.extend(repeats)
    _finish_flags(rec)
    return rec


def _loss_record(loss_map: xr.DataArray, ind: Indication, *, level: float, edge: str) -> dict[str, Any]:
    rec = _base(ind)
    rec["sizing_method"] = f"back-wall loss >= {level:g} dB"
    notes = rec["notes"]
    for axis in ("scan", "index"):
        r = level_length(loss_map, ind, level_fsh=level, axis=axis, edge=edge)
        rec[f"length_{axis}_mm"] = _opt(r.length_mm)
        rec[f"length_{axis}_uncertainty_mm"] = _opt(r.uncertainty_mm)
        notes.extend(n.replace("fixed level", "back-wall loss").replace(" %FSH", " dB") for n in r.notes)
        if r.lower_bound:
            _add_flag(rec, "at_scan_edge")
        if r.data_gap:
            _add_flag(rec, "data_gap")
    area = level_area(loss_map, ind, level_fsh=level)
    rec["area_mm2"] = _opt(area.area_mm2)
    rec["area_uncertainty_mm2"] = _opt(area.uncertainty_mm2)
    if area.lower_bound or ind.touches_edge:
        _add_flag(rec, "at_scan_edge")
    if area.data_gap or ind.missing_adjacent > 0:
        _add_flag(rec, "data_gap")
    if rec.get("total_backwall_loss"):
        notes.append("the back wall vanished completely at the peak (total loss)")
    notes.append("sized by the back-wall-loss level (lengths and area where loss >= the detection level)")
    _finish_flags(rec)
    return rec
