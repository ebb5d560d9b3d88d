"""Sizing of one amplitude indication: its sized outline, beam widths, beam-corrected 20 dB lengths.

A step of :func:`ndtmap.size_indications`: it measures the outline of the
6 dB drop from the peak and of the 6 dB drop from the local maximum at each
edge (:mod:`ndtmap.indications.sizing_methods`), takes the one the data
call for, and states, as flags and notes, which method gave the size and
why, and where the beam or the map limits what was measured
(``at_scan_edge``, ``data_gap``, ``smaller_than_beam``, ``beam_limited_20db``,
``methods_disagree``).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, replace
from typing import Any

import numpy as np
import xarray as xr

from ndtmap._shared import mapgeom as mg
from ndtmap.indications.detection import Indication
from ndtmap.indications.flags import beam_size_flags
from ndtmap.indications.options import SizingOptions
from ndtmap.indications.outline import SizedOutline
from ndtmap.indications.sizing import LengthResult, beam_corrected_length, beam_width_at
from ndtmap.indications.sizing_methods import (
    EDGE_METHOD,
    drop_outline,
    edge_maximum_outline,
    level_outline,
    significant_maxima,
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
    """The sizes of one amplitude indication from its sized outline, with the flags and notes the measurement raised.

    Attributes
    ----------
    lengths : dict of str to LengthResult
        The outline's extents along ``'scan'`` and ``'index'``, and its width
        across its largest dimension (for the beam checks).
    outline : SizedOutline
        The sized outline (:mod:`ndtmap.indications.outline`) of the method
        that gave the size.
    sizing_method : str
        That method (``"6 dB drop"`` or :data:`ndtmap.indications.sizing_methods.EDGE_METHOD`).
    beam_width_6db_mm, beam_width_20db_mm : float or None
        Beam widths at the indication's depth (None without a depth).
    length_20db_mm, length_20db_raw_mm : dict of str to float or None
        Beam-corrected and measured 20 dB lengths by axis, through the peak (empty without a depth).
    length_20db_uncertainty_mm : float or None
        The larger of the two 20 dB uncertainties.
    flags, notes : tuple of str
    """

    lengths: dict[str, LengthResult]
    outline: SizedOutline
    sizing_method: str = "6 dB drop"
    beam_width_6db_mm: float | None = None
    beam_width_20db_mm: float | None = None
    length_20db_mm: Mapping[str, float | None] = None  # type: ignore[assignment]
    length_20db_raw_mm: Mapping[str, float | None] = None  # type: ignore[assignment]
    length_20db_uncertainty_mm: float | None = None
    flags: tuple[str, ...] = ()
    notes: tuple[str, ...] = ()

    def much_larger_than_beam(self) -> bool:
        """Both extents are above twice the -6 dB beam width (the beam no longer matters)."""
        return _much_larger_than_beam(self.lengths, self.beam_width_6db_mm)

    def ends_mm(self, axis: str) -> tuple[float, float] | None:
        """Positions (mm along `axis`) of the two ends of the outline's extent along `axis`."""
        return self.outline.scan_ends_mm if axis == "scan" else self.outline.index_ends_mm


def _much_larger_than_beam(lengths: Mapping[str, LengthResult], w6: float | None) -> bool:
    return w6 is not None and all(
        lengths[ax].length_mm is not None and lengths[ax].length_mm > 2.0 * w6 for ax in AXES
    )


def _outline_lengths(o: SizedOutline) -> dict[str, LengthResult]:
    """The outline's extents (and its width across the largest dimension) as lengths, for the beam checks."""
    out = {}
    for axis, length, unc in (("scan", o.length_scan_mm, o.length_scan_uncertainty_mm),
                              ("index", o.length_index_mm, o.length_index_uncertainty_mm)):
        out[axis] = LengthResult(length, unc, None, None, o.level_fsh, o.method, axis, "outline", o.lower_bound,
                                 o.data_gap)
    if o.width_mm is not None:
        width = "the width across the largest dimension"
        out[width] = LengthResult(o.width_mm, o.length_uncertainty_mm, None, None, o.level_fsh, o.method, "line",
                                  "outline", o.lower_bound, o.data_gap)
    return out


def _edge_radius_mm(amp: xr.DataArray, w6: float | None) -> tuple[float, tuple[str, ...]]:
    """How far local maxima are sought for the edge method: the -6 dB beam width, at least two grid steps."""
    steps = [float(np.max(np.diff(c))) for c in mg.coords_mm(amp) if c.size > 1]
    step = max(steps) if steps else 1.0
    if w6 is None:
        return 3.0 * step, (f"no beam width: the local maximum at an edge is sought within three grid steps "
                            f"({3.0 * step:.1f} mm)",)
    return max(float(w6), 2.0 * step), ()


def _disagree(a: SizedOutline, b: SizedOutline) -> bool:
    """The two outlines' extents, largest dimension or area differ by more than the larger of their uncertainties.

    The larger, not the sum: both outlines are read from the same samples, so
    their sampling errors are largely shared.
    """
    for value, unc in (("length_scan_mm", "length_scan_uncertainty_mm"),
                       ("length_index_mm", "length_index_uncertainty_mm"),
                       ("length_mm", "length_uncertainty_mm"), ("area_mm2", "area_uncertainty_mm2")):
        va, vb = getattr(a, value), getattr(b, value)
        if va is not None and vb is not None and abs(va - vb) > max(getattr(a, unc) or 0.0, getattr(b, unc) or 0.0):
            return True
    return False


def _size_text(o: SizedOutline) -> str:
    return (f"{_fmt(o.length_scan_mm)} x {_fmt(o.length_index_mm)} mm, largest dimension {_fmt(o.length_mm)} mm, "
            f"{_fmt(o.area_mm2, '.0f')} mm2")


def _fmt(v: float | None, spec: str = ".1f") -> str:
    return "-" if v is None else format(v, spec)


def _sized_outline(amp: xr.DataArray, ind: Indication, *, exclude: Any, w6: float | None,
                   flags: list[str], notes: list[str]) -> SizedOutline:
    """The outline that gives the size: the 6 dB drop from the peak, or from the local maximum at each edge.

    Both are measured. Where they agree within their uncertainty the echo
    is even enough for the drop from the peak. Where the edge method gives
    more, the echo is uneven over an extended reflector and the drop from
    the one peak would shrink it: the edge method gives the size (noted).
    When the indication also holds several separate maxima (6 dB or more
    above the saddles between them), one uneven reflector and several
    reflectors side by side both fit: the larger size (the edge method's)
    is taken and ``methods_disagree`` says so.
    """
    peak = drop_outline(amp, ind, exclude=exclude)
    radius, rnotes = _edge_radius_mm(amp, w6)
    edge = edge_maximum_outline(amp, ind, radius_mm=radius, exclude=exclude)
    if edge.area_mm2 is None or not _disagree(edge, peak):
        return peak
    notes.extend(rnotes)
    notes.append(
        f"the echo is uneven over the reflector: the 6 dB drop from the peak ({ind.peak_fsh:.1f} %FSH) gives "
        f"{_size_text(peak)}, leaving out parts whose echo is below half the peak but at or above half their "
        f"local maximum; sized by the {EDGE_METHOD} (maximum amplitude at the edge, local maxima within "
        f"{radius:.1f} mm): {_size_text(edge)}"
    )
    n_max = significant_maxima(amp.values, ind.region)
    if n_max > 1:
        flags.append("methods_disagree")
        notes.append(
            f"{n_max} separate maxima in the indication (each 6 dB or more above the saddle to a higher one): one "
            "reflector with an uneven echo or several reflectors side by side; the methods disagree and the larger "
            "size (the drop from the local maximum at each edge) is taken"
        )
    return edge


def _drop_sizes(amp: xr.DataArray, ind: Indication, outline: SizedOutline, flags: list[str], notes: list[str]
                ) -> dict[str, LengthResult]:
    """The outline's lengths; the edge and gap flags they raise."""
    notes.extend(outline.notes)
    if outline.lower_bound or ind.touches_edge:
        flags.append("at_scan_edge")
    if outline.data_gap or ind.missing_adjacent > 0:
        flags.append("data_gap")
    if ind.missing_adjacent > 0:
        notes.append(f"{ind.missing_adjacent} missing A-scan(s) inside or next to the detected region")
    return _outline_lengths(outline)


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


def _loss_boundary(outline: SizedOutline, ind: Indication, loss: tuple[xr.DataArray, float] | None, exclude: Any,
                   flags: list[str], notes: list[str]) -> SizedOutline:
    """Where the flaw echo shadows the back wall, compare the outline with the boundary of back-wall loss.

    Both methods apply there (a lamination sized by its echo and by the loss
    of the back wall behind it). When they disagree by more than the larger
    of their uncertainties the larger (by area) is taken and
    ``methods_disagree`` says so.
    """
    if loss is None:
        return outline
    loss_map, level_db = loss
    peak_loss = float(loss_map.values[ind.peak_position])
    if not peak_loss >= level_db:  # NaN too: the back wall is not lost behind the peak
        return outline
    method = f"back-wall loss >= {level_db:g} dB"
    boundary = replace(level_outline(loss_map.assign_attrs(units="dB"), ind, level_db=level_db, exclude=exclude),
                       method=method, level_fsh=None)
    if boundary.area_mm2 is None or outline.area_mm2 is None or not _disagree(boundary, outline):
        notes.append(f"the flaw echo shadows the back wall; the boundary of {method} ({_size_text(boundary)}) "
                     f"agrees with the {outline.method} within the uncertainty")
        return outline
    larger = boundary if boundary.area_mm2 > outline.area_mm2 else outline
    flags.append("methods_disagree")
    notes.append(
        f"the flaw echo shadows the back wall: the boundary of {method} gives {_size_text(boundary)}, the "
        f"{outline.method} {_size_text(outline)}; the methods disagree by more than their uncertainty and the "
        f"larger ({larger.method}) is taken"
    )
    return larger


def size_amplitude_indication(
    amp: xr.DataArray, ind: Indication, *, attrs: Mapping[str, Any], options: SizingOptions, exclude: Any = None,
    loss: tuple[xr.DataArray, float] | None = None,
) -> AmplitudeSizes:
    """Size one amplitude indication on its map by its sized outline (the method chosen as the data show).

    Parameters
    ----------
    amp : xarray.DataArray (scan, index)
        The amplitude map, %FSH.
    ind : Indication
        The indication (from :func:`ndtmap.indications.detection.detect_indications` on `amp`).
    attrs : mapping
        The map's attributes (probe and material, for the beam widths).
    options : SizingOptions
        Walking rule (20 dB lengths) and measured beam profiles.
    exclude : numpy.ndarray of bool, optional
        Cells of the other indications (kept out of this one's outline).
    loss : (xarray.DataArray, float), optional
        The back-wall-loss map (dB, same positions) and its detection level,
        dB: where the back wall is lost behind the peak, the loss boundary is
        compared with the echo's outline.

    Returns
    -------
    AmplitudeSizes
    """
    flags: list[str] = []
    notes: list[str] = []
    z = ind.depth_mm
    w6 = None
    if z is not None:
        w6, n6 = beam_width_at(z, drop_db=6.0, attrs=attrs, beam_profile=options.beam_profile_6db)
        notes.extend(n6)
    outline = _sized_outline(amp, ind, exclude=exclude, w6=w6, flags=flags, notes=notes)
    outline = _loss_boundary(outline, ind, loss, exclude, flags, notes)
    lengths = _drop_sizes(amp, ind, outline, flags, notes)
    if z is None:
        notes.append("no depth at the peak: no beam width, no 20 dB beam correction, no DGS size")
        return AmplitudeSizes(lengths, outline, outline.method, length_20db_mm={}, length_20db_raw_mm={},
                              flags=tuple(flags), notes=tuple(notes))
    _beam_width_checks(lengths, w6, flags, notes, depth_mm=z, attrs=attrs, options=options)
    w20, corrected, raw, unc20 = _twenty_db(amp, ind, z, options, flags, notes)
    return AmplitudeSizes(
        lengths, outline, outline.method, beam_width_6db_mm=finite_or_none(w6), beam_width_20db_mm=w20,
        length_20db_mm=corrected, length_20db_raw_mm=raw, length_20db_uncertainty_mm=unc20, flags=tuple(flags),
        notes=tuple(notes),
    )
