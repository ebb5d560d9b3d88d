"""From gated maps to a list of sized, flagged (and optionally screened) indication records.

:func:`size_indications` runs the steps in order, each in its module, and
builds one :class:`~ndtmap.indications.record.IndicationRecord` per
indication, once:

1. detect (:mod:`ndtmap.indications.detection`), at the level given or that
   of the gate that made the map;
2. the back-wall reference and the back-wall-loss map
   (:mod:`ndtmap.indications.backwall`);
3. size amplitude indications (:mod:`ndtmap.indications.amplitude_sizing`)
   and loss indications (:mod:`ndtmap.indications.loss_sizing`);
4. the DGS equivalent size (:mod:`ndtmap.indications.equivalent_size`);
5. the validity flags (:mod:`ndtmap.indications.flags`) and, with
   ``echoes=EchoCheck(grid)``, the A-scan checks of
   :mod:`ndtmap.indications.echoes`;
6. screening when rules are given (:mod:`ndtmap.indications.screening`).
"""

from __future__ import annotations

import json
import os
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import xarray as xr

from ndtmap._shared import mapgeom as mg
from ndtmap.errors import NdtmapError, ParameterError, ParameterTypeError
from ndtmap.gates import Gate
from ndtmap.indications.amplitude_sizing import finite_or_none, size_amplitude_indication
from ndtmap.indications.backwall import (
    BackwallReference,
    backwall_reference,
    loss_map_db,
    loss_under_flaws,
    merge_loss_into_flaws,
)
from ndtmap.indications.depth_layers import DepthLayer, map_layer, touching_indications
from ndtmap.indications.detection import Indication, detect_backwall_loss, detect_indications, reference_map
from ndtmap.indications.echoes import EchoCheck, EchoFindings
from ndtmap.indications.equivalent_size import DgsInputs, dgs_equivalent_size
from ndtmap.indications.flags import amplitude_flags, noise_level_fsh, ordered_flags, repeat_echo_notes
from ndtmap.indications.hidden_echoes import depth_layers_from_ascans
from ndtmap.indications.loss_sizing import size_loss_indication
from ndtmap.indications.options import (
    DetectionOptions,
    DgsOptions,
    FlagOptions,
    LossOptions,
    SizingOptions,
    checked_options,
)
from ndtmap.indications.outline import SizedOutline
from ndtmap.indications.record import RECORD_KEYS, IndicationRecord
from ndtmap.indications.rules import Rules, load_rules
from ndtmap.indications.screening import screen_records

__all__ = ["size_indications", "scanned_area_mm2", "map_detection_level", "RECORD_KEYS"]

_NOISE_UNKNOWN = "noise level unknown (too few valid positions outside the indications): low_snr not evaluated"


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


def map_detection_level(amplitude_map: xr.DataArray) -> dict[str, Any]:
    """The detection level of the gate that made `amplitude_map`, from the map's attributes.

    The gate's JSON definition (attr ``gate``) gives ``threshold_fsh``, or
    ``threshold_db`` with a numeric ``reference``, or for a level in dB re
    the back wall the back-wall level it was evaluated with, or for a level
    in dB re the DAC the curve's level at each position (the map's
    coordinate ``dac_level_fsh``); without it the attribute
    ``gate_threshold_fsh``.

    Returns
    -------
    dict
        ``{'threshold_fsh': ...}`` or ``{'threshold_db': ..., 'reference': ...}``, the keywords of
        :func:`ndtmap.indications.detection.detect_indications`.

    Raises
    ------
    ParameterError
        When the map carries no gate level.

    Examples
    --------
    >>> from ndtmap.grid.examples import example_grid
    >>> from ndtmap.scans import amplitude_map
    >>> map_detection_level(amplitude_map(example_grid(), Gate("flaw", 5.0, 20.0, threshold_fsh=30.0)))
    {'threshold_fsh': 30.0}
    """
    attrs = amplitude_map.attrs
    text = attrs.get("gate")
    if isinstance(text, str) and text:
        try:
            gate = Gate.from_dict(json.loads(text))
        except (ValueError, NdtmapError) as exc:
            raise ParameterError(
                f"the map's `gate` attribute is not a gate definition ({exc}); give `threshold_fsh`"
            ) from None
        if gate.threshold_db is None:
            return {"threshold_fsh": float(gate.threshold_fsh)}
        if gate.reference == "dac":
            if "dac_level_fsh" not in amplitude_map.coords:
                raise ParameterError(
                    "the map's gate has its level in dB re the DAC but the map carries no `dac_level_fsh`; make it "
                    "with amplitude_map(..., result=evaluate_gate(..., dac=curve)) or give `threshold_db` and "
                    "`reference` (the DAC level at each position)"
                )
            level_map = amplitude_map.coords["dac_level_fsh"].reset_coords(drop=True)
            return {"threshold_db": float(gate.threshold_db), "reference": level_map}
        if isinstance(gate.reference, float):
            return {"threshold_db": float(gate.threshold_db), "reference": gate.reference}
        if gate.threshold_fsh is not None:  # re the back wall, evaluated with its level
            return {"threshold_db": float(gate.threshold_db),
                    "reference": gate.threshold_fsh / 10.0 ** (gate.threshold_db / 20.0)}
    level = attrs.get("gate_threshold_fsh")
    if isinstance(level, int | float | np.number) and np.isfinite(level):
        return {"threshold_fsh": float(level)}
    raise ParameterError(
        "the map carries no detection level of its gate (attrs `gate`, `gate_threshold_fsh`); give `threshold_fsh` "
        "(or `threshold_db` with `reference`)"
    )


def _detection_level(amp: xr.DataArray, threshold_fsh: Any, threshold_db: Any, reference: Any) -> dict[str, Any]:
    """The keywords of the detection level: as given, else the map's gate level."""
    if threshold_fsh is not None or threshold_db is not None:
        return {"threshold_fsh": threshold_fsh, "threshold_db": threshold_db, "reference": reference}
    level = map_detection_level(amp)
    if "threshold_db" in level and reference is not None:
        raise ParameterError(
            "`reference` was given without a level while the map's gate level is in dB re its own reference; "
            "give `threshold_db` (or `threshold_fsh`) too"
        )
    return {"threshold_fsh": None, "threshold_db": None, "reference": reference, **level}


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
    detection: DetectionOptions | None = None,
    loss: LossOptions | None = None,
    sizing: SizingOptions | None = None,
    dgs: DgsOptions | None = None,
    flags: FlagOptions | None = None,
    other_indications: Sequence[Indication] = (),
    echoes: EchoCheck | None = None,
    rules: Rules | str | os.PathLike[str] | None = None,
) -> list[IndicationRecord]:
    """Detect, size, flag (and optionally screen) the indications of a gated map.

    Parameters
    ----------
    amplitude_map : xarray.DataArray (scan, index)
        Gate amplitude, %FSH, NaN where missing; its attrs carry the grid's
        global attrs (probe, velocity, ``beam_angle_deg``,
        ``digitiser_full_scale_fsh``, ``attenuation_db_per_mm``,
        ``part_thickness_mm``) and the gate that made it.
    threshold_fsh, threshold_db, reference
        Detection level, see :func:`ndtmap.indications.detection.detect_indications`.
        Without `threshold_fsh` and `threshold_db`, the level of the gate
        that made the map (:func:`map_detection_level`).
    depth_map : xarray.DataArray, optional
        Depth of the same gate, mm (for depths, beam widths, DGS, repeats),
        and to split plan regions by depth: reflectors at different depths
        are different indications, each sized on its own depth
        (:mod:`ndtmap.indications.depth_layers`).
    backwall : float or xarray.DataArray, optional
        Back-wall reference: a level in %FSH, or a back-wall amplitude map
        whose nominal level over the sound area (outside indications) is
        used. Without it ``ers_mm`` is None.
    backwall_depth_mm : float or xarray.DataArray, optional
        Back-wall depth, mm, or a back-wall depth map (median over the sound
        area). Default: the map's ``part_thickness_mm`` attribute.
    detection : DetectionOptions, optional
        Smallest region kept, bridging of missing positions.
    loss : LossOptions, optional
        Also detect back-wall-loss indications (level in dB, loss map). A
        loss region under a flaw echo goes into the flaw's record; with a
        back-wall amplitude map (or a loss map) every amplitude record
        carries ``backwall_loss_db``, the largest loss under it
        (:mod:`ndtmap.indications.backwall`).
    sizing : SizingOptions, optional
        Walking rule of the lengths, measured beam profiles.
    dgs : DgsOptions, optional
        DGS relation, attenuation and corrections.
    flags : FlagOptions, optional
        Thresholds of ``low_snr`` and ``repeat_echo``.
    other_indications : sequence of Indication, optional
        Indications of other gates at the same positions (e.g. a shallower
        gate), checked as possible primaries of repeat echoes.
    echoes : EchoCheck, optional
        Look at the A-scans of this grid for repeat and back-wall echoes
        (:func:`ndtmap.indications.echoes.classify_echoes`), and for echoes
        at other depths that the gated map hides
        (:mod:`ndtmap.indications.hidden_echoes`: new indications numbered
        after the others, depth layers to size on).
    rules : Rules or path, optional
        Screening rules (:func:`ndtmap.indications.screening.screen_records`):
        each record then has ``screening`` and ``exceeded_rules``.

    Returns
    -------
    list of IndicationRecord
        Amplitude indications first (by decreasing peak), then
        back-wall-loss indications (by decreasing loss). ``to_dict()`` gives
        the JSON record (keys :data:`RECORD_KEYS`); flags are from
        :data:`ndtmap.indications.flags.FLAG_MEANINGS`.

    Examples
    --------
    >>> import numpy as np, xarray as xr
    >>> a = np.full((20, 20), 2.0); a[5:15, 6:12] = 80.0
    >>> m = xr.DataArray(a, dims=("scan", "index"), coords={"scan": np.arange(20.0), "index": np.arange(20.0)},
    ...                  attrs={"probe_diameter_mm": 10, "probe_frequency_mhz": 5, "velocity_m_s": 5920})
    >>> r = size_indications(m, threshold_fsh=20)[0]
    >>> r.id, r.peak_fsh, round(r.length_scan_mm, 2), round(r.length_index_mm, 2), round(r.area_mm2, 1)
    (1, 80.0, 10.03, 6.03, 59.9)
    >>> r.sizing_method, round(r.length_mm, 2)  # the largest dimension: the diagonal less the cut corners
    ('6 dB drop', 11.2)
    >>> r.flags  # no depth map: the beam checks are not made (see r.notes)
    ()
    """
    amp = mg.as_map("amplitude_map", amplitude_map)
    mg.check_mm_coords("amplitude_map", amp)
    attrs = dict(amplitude_map.attrs)
    detection = checked_options("detection", detection, DetectionOptions)
    sizing = checked_options("sizing", sizing, SizingOptions)
    flag_options = checked_options("flags", flags, FlagOptions)
    dgs_inputs = DgsInputs.from_attrs(attrs, checked_options("dgs", dgs, DgsOptions))
    if loss is not None and not isinstance(loss, LossOptions):
        raise ParameterTypeError(f"`loss` must be LossOptions or None, got {type(loss).__name__}")
    if echoes is not None and not isinstance(echoes, EchoCheck):
        raise ParameterTypeError(f"`echoes` must be an EchoCheck or None, got {type(echoes).__name__}")
    rules_obj = _rules(rules)

    level = _detection_level(amp, threshold_fsh, threshold_db, reference)
    inds = detect_indications(
        amp, **level, depth_map=depth_map, min_area_mm2=detection.min_area_mm2,
        min_positions=detection.min_positions, bridge_missing=detection.bridge_missing,
        depth_step_mm=detection.depth_step_mm,
    )
    layers: dict[int, DepthLayer] = {}
    # a level re a depth-dependent curve can judge echoes at other depths only with the curve itself
    re_curve = level.get("threshold_db") is not None and "dac_level_fsh" in amp.coords
    if echoes is not None and depth_map is not None and (echoes.curve is not None or not re_curve):
        new, layers = depth_layers_from_ascans(echoes.grid, amp, mg.as_map("depth_map", depth_map), inds, level,
                                               level_fsh=_level_fsh(amp, level),
                                               curve=echoes.curve if re_curve else None)
        inds = inds + new
    bw = backwall_reference(amp, backwall, backwall_depth_mm, exclude=inds, attrs=attrs)
    loss_whole, loss_map, loss_inds, shadow = _backwall_loss_step(amp, inds, loss, bw, depth_map, detection)
    records = _amplitude_records(amp, inds, attrs=attrs, sizing=sizing, flag_options=flag_options, bw=bw,
                                 dgs_inputs=dgs_inputs, others=list(other_indications), echoes=echoes, shadow=shadow,
                                 layers=layers,
                                 loss=None if loss is None or loss_whole is None or loss.threshold_db is None
                                 else (loss_whole, loss.threshold_db))
    records += [_loss_record(loss_map, ind, level_db=loss.threshold_db, edge=sizing.edge) for ind in loss_inds]
    if rules_obj is not None:
        records, _ = screen_records(records, rules_obj, scanned_area_mm2=scanned_area_mm2(amp))
    return records


def _amplitude_records(
    amp: xr.DataArray,
    inds: list[Indication],
    *,
    attrs: Mapping[str, Any],
    sizing: SizingOptions,
    flag_options: FlagOptions,
    bw: BackwallReference,
    dgs_inputs: DgsInputs,
    others: list[Indication],
    echoes: EchoCheck | None,
    shadow: Mapping[int, tuple[float | None, tuple[str, ...]]],
    layers: Mapping[int, DepthLayer],
    loss: tuple[xr.DataArray, float] | None = None,
) -> list[IndicationRecord]:
    """The records of the amplitude indications: sizes, DGS, flags, map-wide notes, A-scan findings, back-wall loss.

    `shadow` gives by id the back-wall loss under the indication (dB, None: unknown) and its notes;
    `layers` the depth layers from the A-scans to size on (the others that border an indication at
    another depth are sized on the gated map without the other's positions).
    """
    noise = noise_level_fsh(amp, inds)
    repeats = repeat_echo_notes(
        inds, backwall_depth_mm=bw.depth_mm, tolerance_mm=flag_options.repeat_tolerance_mm,
        tolerance_fraction=flag_options.repeat_tolerance_fraction, others=others,
    )
    found = echoes.findings(inds) if echoes is not None else {}
    layers = {**_depth_layers(amp, inds), **layers}
    records = []
    everything = np.zeros(amp.shape, dtype=bool)
    for ind in inds:
        everything |= ind.region
    for ind in inds:
        layer = layers.get(ind.id, DepthLayer(amp))
        # other regions are masked on the gated map; a depth layer holds only this reflector's echoes
        exclude = everything & ~ind.region if layer.amplitude_map is amp else None
        sizes = size_amplitude_indication(layer.amplitude_map, ind, attrs=attrs, options=sizing, exclude=exclude,
                                          loss=loss)
        ers = dgs_equivalent_size(ind, sizes, backwall=bw, inputs=dgs_inputs)
        validity, validity_notes = amplitude_flags(
            ind, noise_fsh=noise, full_scale_fsh=dgs_inputs.full_scale_fsh, min_snr_db=flag_options.min_snr_db,
            repeat_notes=repeats.get(ind.id, ()), clipped=_clipped_at(amp, ind),
        )
        notes = _distinct(layer.notes + sizes.notes + ers.notes + validity_notes) + (
            (_NOISE_UNKNOWN,) if noise is None else ())
        echo = found.get(ind.id, EchoFindings())
        flags = ordered_flags(layer.flags + sizes.flags + ers.flags + validity)
        loss_db, loss_notes = shadow.get(ind.id, (None, ()))
        records.append(IndicationRecord(
            **_detected_fields(ind, loss_db),
            sizing_method=sizes.sizing_method,
            **_outline_fields(sizes.outline),
            length_scan_20db_mm=sizes.length_20db_mm.get("scan"),
            length_index_20db_mm=sizes.length_20db_mm.get("index"),
            length_scan_20db_raw_mm=sizes.length_20db_raw_mm.get("scan"),
            length_index_20db_raw_mm=sizes.length_20db_raw_mm.get("index"),
            length_20db_uncertainty_mm=sizes.length_20db_uncertainty_mm,
            beam_width_6db_mm=sizes.beam_width_6db_mm,
            beam_width_20db_mm=sizes.beam_width_20db_mm,
            ers_mm=ers.ers_mm, ers_method=ers.ers_method, ers_ratio_db=ers.ers_ratio_db,
            flags=flags + tuple(f for f in echo.flags if f not in flags),
            notes=notes + echo.notes + loss_notes,
            sizing_level_fsh=finite_or_none(sizes.outline.level_fsh),
            length_scan_ends_mm=sizes.ends_mm("scan"),
            length_index_ends_mm=sizes.ends_mm("index"),
            edge_rule=sizing.edge,
        ))
    return records


def _backwall_loss_step(
    amp: xr.DataArray, inds: list[Indication], loss: LossOptions | None, bw: BackwallReference,
    depth_map: xr.DataArray | None, detection: DetectionOptions,
) -> tuple[xr.DataArray | None, xr.DataArray | None, list[Indication], dict[int, tuple[float | None, tuple[str, ...]]]]:
    """The loss map as measured and after merging, the back-wall-loss indications and, by flaw id, the loss under
    the flaw with its notes (the map as measured gives the loss boundary a flaw is sized against).

    With ``loss.merge`` the loss regions under flaw echoes go into the flaws' records
    (:func:`ndtmap.indications.backwall.merge_loss_into_flaws`) and the remaining loss is detected again.
    """
    loss_map = whole = loss_map_db(amp, loss, bw)
    if loss_map is None:
        return None, None, [], {}
    under = loss_under_flaws(loss_map, inds)
    loss_inds: list[Indication] = []
    merged: dict[int, list[str]] = {}
    if loss is not None and loss.threshold_db is not None:
        def detect_loss(m: xr.DataArray) -> list[Indication]:
            return detect_backwall_loss(
                m, threshold_db=loss.threshold_db, depth_map=depth_map, min_area_mm2=detection.min_area_mm2,
                min_positions=detection.min_positions, bridge_missing=detection.bridge_missing,
                first_id=len(inds) + 1,
            )
        loss_inds = detect_loss(loss_map)
        if loss.merge and loss_inds and inds:
            loss_map, merged = merge_loss_into_flaws(loss_map, loss_inds, inds)
            loss_inds = detect_loss(loss_map) if merged else loss_inds
    shadow = {}
    for i in set(under) | set(merged):
        db, note = under.get(i, (None, None))
        shadow[i] = (db, ((note,) if note else ()) + tuple(merged.get(i, ())))
    return whole, loss_map, loss_inds, shadow


def _level_fsh(amp: xr.DataArray, level: Mapping[str, Any]) -> np.ndarray:
    """The detection level at every position, %FSH."""
    if level.get("threshold_fsh") is not None:
        return np.full(amp.shape, float(level["threshold_fsh"]))
    return reference_map(level["reference"], amp) * 10.0 ** (float(level["threshold_db"]) / 20.0)


def _depth_layers(amp: xr.DataArray, inds: list[Indication]) -> dict[int, DepthLayer]:
    """The maps of the indications that border others at another depth (each sized on its own depth)."""
    by_id = {ind.id: ind for ind in inds}
    return {i: map_layer(amp, by_id[i], near) for i, near in touching_indications(inds).items()}


def _loss_record(loss_map: xr.DataArray, ind: Indication, *, level_db: float, edge: str) -> IndicationRecord:
    sizes = size_loss_indication(loss_map, ind, level_db=level_db, edge=edge)
    return IndicationRecord(
        **_detected_fields(ind),
        sizing_method=sizes.sizing_method,
        **_outline_fields(sizes.outline),
        flags=ordered_flags(sizes.flags),
        notes=_distinct(sizes.notes),
        sizing_level_db=level_db,
        length_scan_ends_mm=sizes.ends_mm("scan"),
        length_index_ends_mm=sizes.ends_mm("index"),
        edge_rule=edge,
    )


def _outline_fields(o: SizedOutline) -> dict[str, Any]:
    """The record fields that come from the sized outline (sizes, the polygons, the sized region)."""
    return dict(
        length_scan_mm=finite_or_none(o.length_scan_mm),
        length_scan_uncertainty_mm=finite_or_none(o.length_scan_uncertainty_mm),
        length_index_mm=finite_or_none(o.length_index_mm),
        length_index_uncertainty_mm=finite_or_none(o.length_index_uncertainty_mm),
        length_mm=finite_or_none(o.length_mm), length_uncertainty_mm=finite_or_none(o.length_uncertainty_mm),
        length_orientation_deg=finite_or_none(o.orientation_deg),
        area_mm2=finite_or_none(o.area_mm2), area_uncertainty_mm2=finite_or_none(o.area_uncertainty_mm2),
        sized_region=o.region, outline_polygons=o.polygons,
    )


def _detected_fields(ind: Indication, backwall_loss_db: float | None = None) -> dict[str, Any]:
    """The record fields that come from detection (``area_mm2`` of detection is ``detected_area_mm2``).

    `backwall_loss_db`: the back-wall loss under a flaw indication (its own for loss indications).
    """
    loss = ind.backwall_loss_db if backwall_loss_db is None else backwall_loss_db
    total = loss is not None and np.isinf(loss)
    return dict(
        id=ind.id, kind=ind.kind, scan_mm=ind.scan_mm, index_mm=ind.index_mm,
        depth_mm=finite_or_none(ind.depth_mm), depth_min_mm=finite_or_none(ind.depth_min_mm),
        depth_max_mm=finite_or_none(ind.depth_max_mm), peak_fsh=finite_or_none(ind.peak_fsh),
        peak_db=finite_or_none(ind.peak_db), reference_fsh=finite_or_none(ind.reference_fsh),
        backwall_loss_db=finite_or_none(loss), total_backwall_loss=bool(total),
        scan_min_mm=ind.scan_min_mm, scan_max_mm=ind.scan_max_mm, index_min_mm=ind.index_min_mm,
        index_max_mm=ind.index_max_mm, n_positions=ind.n_positions,
        detected_area_mm2=finite_or_none(ind.area_mm2), detection_level=ind.detection_level,
        peak_index=ind.peak_position, detected_region=ind.region,
    )


def _clipped_at(amp: xr.DataArray, ind: Indication) -> bool | None:
    """The clipped state at the peak from the map's ``clipped`` coordinate (software gain), else None."""
    if "clipped" not in amp.coords:
        return None
    return bool(amp.coords["clipped"].values[ind.peak_position])


def _distinct(notes: Sequence[str]) -> tuple[str, ...]:
    """The notes without repeats, in first-seen order."""
    return tuple(dict.fromkeys(notes))
