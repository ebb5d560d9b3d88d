"""Sizing of one amplitude indication: 6 dB drop lengths and area, beam widths, beam-corrected 20 dB lengths.

A step of :func:`ndtmap.size_indications`: it measures with the functions
of :mod:`ndtmap.indications.sizing` and states, as flags and notes, where
the beam or the map limits what was measured (``at_scan_edge``,
``data_gap``, ``smaller_than_beam``, ``beam_limited_20db``).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import xarray as xr

from ndtmap.indications.detection import Indication
from ndtmap.indications.flags import beam_size_flags
from ndtmap.indications.options import SizingOptions
from ndtmap.indications.sizing import (
    AreaResult,
    LengthResult,
    beam_corrected_length,
    beam_width_at,
    drop_area,
    drop_length,
)

__all__ = ["AmplitudeSizes", "size_amplitude_indication", "finite_or_none"]

AXES = ("scan", "index")


def finite_or_none(value: Any) -> float | None:
    """`value` as a float, None when it is missing or not finite."""
    if value is None:
        return None
    value = float(value)
    return value if math.isfinite(value) else None


@dataclass(frozen=True)
class AmplitudeSizes:
    """The drop sizes of one amplitude indication, with the flags and notes the measurement raised.

    Attributes
    ----------
    lengths : dict of str to LengthResult
        6 dB drop lengths along ``'scan'`` and ``'index'`` through the peak.
    area : AreaResult
        The -6 dB area.
    beam_width_6db_mm, beam_width_20db_mm : float or None
        Beam widths at the indication's depth (None without a depth).
    length_20db_mm, length_20db_raw_mm : dict of str to float or None
        Beam-corrected and measured 20 dB lengths by axis (empty without a depth).
    length_20db_uncertainty_mm : float or None
        The larger of the two 20 dB uncertainties.
    flags, notes : tuple of str
    """

    lengths: dict[str, LengthResult]
    area: AreaResult
    beam_width_6db_mm: float | None = None
    beam_width_20db_mm: float | None = None
    length_20db_mm: Mapping[str, float | None] = None  # type: ignore[assignment]
    length_20db_raw_mm: Mapping[str, float | None] = None  # type: ignore[assignment]
    length_20db_uncertainty_mm: float | None = None
    flags: tuple[str, ...] = ()
    notes: tuple[str, ...] = ()

    def much_larger_than_beam(self) -> bool:
        """Both 6 dB lengths are above twice the -6 dB beam width (the beam no longer matters)."""
        return _much_larger_than_beam(self.lengths, self.beam_width_6db_mm)

    def ends_mm(self, axis: str) -> tuple[float, float] | None:
        """Positions (mm along `axis`) of the two ends of the 6 dB length along `axis`."""
        r = self.lengths[axis]
        if r.start_mm is None or r.end_mm is None:
            return None
        k = AXES.index(axis)
        return float(r.start_mm[k]), float(r.end_mm[k])


def _much_larger_than_beam(lengths: Mapping[str, LengthResult], w6: float | None) -> bool:
    return w6 is not None and all(
        lengths[ax].length_mm is not None and lengths[ax].length_mm > 2.0 * w6 for ax in AXES
    )


def _drop_sizes(amp: xr.DataArray, ind: Indication, edge: str, flags: list[str], notes: list[str]
                ) -> tuple[dict[str, LengthResult], AreaResult]:
    """6 dB lengths along both axes and the -6 dB area; the edge and gap flags they raise."""
    lengths = {}
    for axis in AXES:
        r = drop_length(amp, ind, drop_db=6.0, axis=axis, edge=edge)
        lengths[axis] = r
        notes.extend(r.notes)
        if r.lower_bound:
            flags.append("at_scan_edge")
        if r.data_gap:
            flags.append("data_gap")
    area = drop_area(amp, ind, drop_db=6.0)
    notes.extend(area.notes)
    if area.lower_bound or ind.touches_edge:
        flags.append("at_scan_edge")
    if area.data_gap or ind.missing_adjacent > 0:
        flags.append("data_gap")
    if ind.missing_adjacent > 0:
        notes.append(f"{ind.missing_adjacent} missing A-scan(s) inside or next to the detected region")
    return lengths, area


def _beam_width_checks(lengths: dict[str, LengthResult], w6: float | None, flags: list[str], notes: list[str],
                       *, depth_mm: float, attrs: Mapping[str, Any], options: SizingOptions) -> None:
    """``smaller_than_beam`` and ``near_field`` of the drop sizes (:func:`ndtmap.indications.flags.beam_size_flags`)."""
    beam_flags, beam_notes = beam_size_flags(lengths, depth_mm=depth_mm, attrs=attrs, beam_width_6db_mm=w6,
                                             beam_profile_6db=options.beam_profile_6db)
    flags.extend(beam_flags)
    notes.extend(beam_notes)


def _twenty_db(amp: xr.DataArray, ind: Indication, depth_mm: float, options: SizingOptions,
               flags: list[str], notes: list[str]) -> tuple[float | None, dict[str, Any], dict[str, Any], float | None]:
    """Beam-corrected 20 dB lengths: (-20 dB beam width, corrected and raw lengths by axis, uncertainty)."""
    corrected: dict[str, float | None] = {}
    raw: dict[str, float | None] = {}
    unc20 = []
    w20 = None
    for axis in AXES:
        b = beam_corrected_length(amp, ind, drop_db=20.0, depth_mm=depth_mm, beam_profile=options.beam_profile_20db,
                                  axis=axis, edge=options.edge)
        w20 = finite_or_none(b.beam_width_mm)
        corrected[axis] = finite_or_none(b.length_mm)
        raw[axis] = finite_or_none(b.raw.length_mm)
        if b.uncertainty_mm is not None:
            unc20.append(b.uncertainty_mm)
        notes.extend(b.notes)
        if b.not_larger_than_beam:
            flags.append("beam_limited_20db")
        if b.raw.lower_bound:
            # The -20 dB level was not reached before the map boundary. When the region and its 6 dB
            # lines are clear of the edge this is a 20 dB matter only (often: the level lies in the noise),
            # so it is a note on the 20 dB size, not the `at_scan_edge` flag of the indication.
            corrected[axis] = None
            notes.append(
                f"along {axis} the amplitude does not fall to -20 dB ({0.1 * ind.peak_fsh:.2f} %FSH) before the "
                "edge of the map (or the noise stays above that level): no 20 dB size"
            )
        if b.raw.data_gap:
            flags.append("data_gap")
    return w20, corrected, raw, (finite_or_none(max(unc20)) if unc20 else None)


def size_amplitude_indication(
    amp: xr.DataArray, ind: Indication, *, attrs: Mapping[str, Any], options: SizingOptions
) -> AmplitudeSizes:
    """Drop-size one amplitude indication on its map.

    Parameters
    ----------
    amp : xarray.DataArray (scan, index)
        The amplitude map, %FSH.
    ind : Indication
        The indication (from :func:`ndtmap.indications.detection.detect_indications` on `amp`).
    attrs : mapping
        The map's attributes (probe and material, for the beam widths).
    options : SizingOptions
        Walking rule and measured beam profiles.

    Returns
    -------
    AmplitudeSizes
    """
    flags: list[str] = []
    notes: list[str] = []
    lengths, area = _drop_sizes(amp, ind, options.edge, flags, notes)
    z = ind.depth_mm
    if z is None:
        notes.append("no depth at the peak: no beam width, no 20 dB beam correction, no DGS size")
        return AmplitudeSizes(lengths, area, length_20db_mm={}, length_20db_raw_mm={}, flags=tuple(flags),
                              notes=tuple(notes))
    w6, n6 = beam_width_at(z, drop_db=6.0, attrs=attrs, beam_profile=options.beam_profile_6db)
    notes.extend(n6)
    _beam_width_checks(lengths, w6, flags, notes, depth_mm=z, attrs=attrs, options=options)
    w20, corrected, raw, unc20 = _twenty_db(amp, ind, z, options, flags, notes)
    return AmplitudeSizes(
        lengths, area, beam_width_6db_mm=finite_or_none(w6), beam_width_20db_mm=w20, length_20db_mm=corrected,
        length_20db_raw_mm=raw, length_20db_uncertainty_mm=unc20, flags=tuple(flags), notes=tuple(notes),
    )
