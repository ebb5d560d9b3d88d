"""Validity flags of sized indications: where a method cannot support its result.

Every sized indication carries a list of flags from :data:`FLAG_MEANINGS`. A
flagged result is still reported, never dropped: the flag tells the
reader how far to trust it and what to do instead.

Rules used here (each also stated in the function that applies it):

``saturated``
    The peak's echo was clipped by the digitiser: the recorded peak reached
    the digitiser full scale (``digitiser_full_scale_fsh``, default 100 %FSH)
    within 0.1 % (a 150 %FSH echo on a 200 %FSH digitiser is not clipped);
    after a software gain (:func:`ndtmap.signal.apply_tcg`) the map's
    ``clipped`` state of the recorded samples decides, not the amplified
    value. The true peak is unknown, so every drop is measured from a wrong
    reference and the DGS size is a lower bound.
``smaller_than_beam``
    The 6 dB drop length along the scan or the index axis lies within the
    range of 6 dB lengths that a point reflector gives at the indication's
    sound path (from the band-averaged piston model with the probe's
    bandwidth, near field included: see
    :func:`ndtmap.indications.sizing.point_reflector_range_at`), within the
    length's own uncertainty: the drop measured the beam, not the reflector.
``at_scan_edge``
    The detected region or a sizing line or region reaches the boundary of
    the map: lengths and areas are lower bounds.
``repeat_echo``
    The depth is within ``max(tolerance_mm, tolerance_fraction * depth)``
    (default ``max(2 mm, 3 %)``) of k times the depth of a stronger indication
    that covers its peak position (k = 2, 3), or of k times the back-wall
    depth (a back-wall multiple, k = 2, 3). A repeat echo lies under its
    primary: an indication beside a stronger one (plan regions that only
    touch, as reflectors at different depths do) is not its repeat.
``near_field``
    The sound path is shorter than 3 near-field lengths, where the far-field
    relations do not hold, and a size rests on the beam there: a 6 dB length
    at or near the beam width (not above twice the -6 dB beam width), hence
    also a beam-corrected 20 dB length (given only along such lines), or the
    DGS size (see :mod:`ndtmap.indications.dgs`). Those sizes come from the
    near-field piston model: estimates.
``low_snr``
    The peak is less than `min_snr_db` (default 6 dB) above the noise level
    of the map, taken as the median amplitude of the valid positions outside
    every detected region grown by two positions.
``data_gap``
    Missing A-scans inside or next to the sized region, or bridged on a
    sizing line.
``beam_limited_20db``
    The 20 dB drop length is not larger than the -20 dB beam width: the
    beam-corrected 20 dB size is not given.
``depth_neighbour``
    The plan region borders an indication at another depth and the sizes
    come from the gated map alone: where the other echo is the stronger the
    map does not show this reflector, so a length or area there may be short
    (see :mod:`ndtmap.indications.depth_layers`).
``methods_disagree``
    Two applicable sizing methods disagree by more than their uncertainty
    (see :mod:`ndtmap.indications.amplitude_sizing`): the larger size was
    taken.
``backwall_echo``
    Straight beam only: the depth is the nominal back-wall depth within one
    echo half-length (the pulse's depth resolution), set by
    :func:`ndtmap.indications.echoes.classify_echoes`, which also adds ``repeat_echo``
    when the A-scan holds a stronger echo at 1/2 or 1/3 of the depth. With an
    angle beam an echo at the wall depth is a corner reflection (a note, no flag).
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping, Sequence
from typing import Any

import numpy as np
import xarray as xr
from scipy import ndimage

from ndtmap._shared import mapgeom as mg
from ndtmap._shared.validate import nonnegative_float, positive_float
from ndtmap.errors import ParameterTypeError
from ndtmap.indications.detection import Indication
from ndtmap.indications.sizing import LengthResult, ProbeBeam, point_reflector_range_at

__all__ = [
    "FLAG_MEANINGS",
    "FLAGS",
    "SCREENING_UNDERMINED_BY",
    "UNDERMINING_FLAGS",
    "is_saturated",
    "is_smaller_than_beam",
    "beam_size_flags",
    "noise_level_fsh",
    "is_low_snr",
    "repeat_echo_notes",
    "amplitude_flags",
    "ordered_flags",
    "explain",
]

#: Every flag and its one-line meaning.
FLAG_MEANINGS: dict[str, str] = {
    "saturated": "peak clipped at the digitiser full scale: the true peak is unknown, drop sizing is invalid "
    "and the DGS size a lower bound; rescan at lower gain",
    "smaller_than_beam": "6 dB drop length within the range a point reflector gives at that depth (piston "
    "model over the probe's band): the drop measured the beam, report the DGS equivalent size instead",
    "at_scan_edge": "the indication or its sizing reaches the edge of the scanned area: lengths and areas are lower "
    "bounds",
    "repeat_echo": "depth about 2 or 3 times that of a stronger overlapping indication or of the back wall: "
    "probably a repeat (multiple) echo, not a separate reflector",
    "near_field": "inside 3 near-field lengths, where the far-field relations do not hold, with a size resting "
    "on the beam (6 dB length near the beam width, beam-corrected 20 dB length, DGS size): it comes from the "
    "near-field piston model and is less certain",
    "low_snr": "peak less than 6 dB above the noise level of the map: may be noise",
    "data_gap": "missing A-scans inside or next to the sized region or on a sizing line: sizes may be wrong there",
    "beam_limited_20db": "20 dB drop length not larger than the -20 dB beam width: no beam-corrected 20 dB size",
    "methods_disagree": "two sizing methods that both fit the data (the 6 dB drop from the peak and from the local "
    "maximum at each edge where the indication holds several separate maxima, or the echo's outline and the "
    "boundary of back-wall loss behind it) disagree by more than their uncertainty: the larger size was taken; "
    "review whether it is one reflector or several",
    "backwall_echo": "the echo lies at the nominal back-wall depth: a geometry echo of the back wall reached by "
    "the gate, not a reflector inside the wall",
    "depth_neighbour": "the plan region borders an indication at another depth and was sized on the gated map "
    "alone: where the other echo is the stronger this reflector is not seen, a length or area there may be short",
}

#: The flag names, in report order.
FLAGS: tuple[str, ...] = tuple(FLAG_MEANINGS)

#: The flags that undermine a value screening compares with a limit, and how, per group of
#: quantities: ``"lower_bound"`` (the true value may be larger, not smaller: an exceeded limit stays
#: exceeded, "within" cannot be said) or ``"uncertain"`` (it may be larger or smaller: neither can be
#: said). Groups: ``size`` (6 dB lengths, area), ``size_20db`` (beam-corrected 20 dB lengths), ``ers``
#: (DGS size), ``amplitude`` (peak %FSH or dB, also against the recording level), ``backwall_loss``
#: and ``count`` (whether the record is a reflector of its own, for density rules). A flag not listed
#: (``low_snr``, ``beam_limited_20db``) leaves screening as it is. ``methods_disagree`` (two applicable
#: sizing methods disagree by more than their uncertainty) is read by name wherever it is set.
#: Used by :func:`ndtmap.indications.rules.screen`; see docs/indications-and-sizing.md.
SCREENING_UNDERMINED_BY: dict[str, dict[str, str]] = {
    # clipped peak: drops measured from a wrong reference (either way for a real echo dynamic); the
    # true peak, hence the DGS size and a loss re a clipped reference, is higher
    "saturated": {"size": "uncertain", "size_20db": "uncertain", "ers": "lower_bound", "amplitude": "lower_bound",
                  "backwall_loss": "lower_bound"},
    # the drop measured the beam, not the reflector
    "smaller_than_beam": {"size": "uncertain", "size_20db": "uncertain"},
    # cut by the edge of the scan: sizes, the peak and what rests on it can only be larger
    "at_scan_edge": {"size": "lower_bound", "size_20db": "lower_bound", "ers": "lower_bound",
                     "amplitude": "lower_bound", "backwall_loss": "lower_bound"},
    # missing A-scans: edges may sit anywhere in the gap; the peak may lie in it
    "data_gap": {"size": "uncertain", "size_20db": "uncertain", "ers": "lower_bound", "amplitude": "lower_bound",
                 "backwall_loss": "lower_bound"},
    # maybe not a reflector of its own: nothing about it can be said either way
    "repeat_echo": dict.fromkeys(("size", "size_20db", "ers", "amplitude", "backwall_loss", "count"), "uncertain"),
    "backwall_echo": dict.fromkeys(("size", "size_20db", "ers", "amplitude", "backwall_loss", "count"),
                                   "uncertain"),
    # two sizing methods disagree: the record holds the larger, the smaller may be right
    "methods_disagree": {"size": "uncertain", "size_20db": "uncertain"},
    # sizes resting on the near-field beam model: estimates
    "near_field": {"size": "uncertain", "size_20db": "uncertain", "ers": "uncertain"},
    # sized on the gated map beside a reflector at another depth that may hide part of it: can only be larger
    "depth_neighbour": {"size": "lower_bound", "size_20db": "lower_bound", "ers": "lower_bound",
                        "amplitude": "lower_bound"},
}

#: The names of the flags that undermine screening (:data:`SCREENING_UNDERMINED_BY`).
UNDERMINING_FLAGS: frozenset[str] = frozenset(SCREENING_UNDERMINED_BY)


def is_saturated(peak_fsh: float | None, *, full_scale_fsh: float = 100.0, rtol: float = 1e-3) -> bool:
    """True when a recorded peak is at the digitiser full scale (clipped).

    Parameters
    ----------
    peak_fsh : float or None
        Peak amplitude, %FSH (None: not saturated).
    full_scale_fsh : float, default 100
        Digitiser full scale (clipping level), %FSH.
    rtol : float, default 1e-3
        Relative tolerance below the full scale still counted as "at" it.

    Examples
    --------
    >>> is_saturated(100.0), is_saturated(99.5), is_saturated(127.0, full_scale_fsh=127.0)
    (True, False, True)
    >>> is_saturated(150.0, full_scale_fsh=200.0)
    False
    """
    if peak_fsh is None or not math.isfinite(peak_fsh):
        return False
    fs = positive_float("full_scale_fsh", full_scale_fsh)
    return bool(peak_fsh >= fs * (1.0 - rtol))


def is_smaller_than_beam(length_mm: float | None, uncertainty_mm: float | None, beam_width_mm: float | None) -> bool:
    """True when a 6 dB length is not larger than `beam_width_mm` (within its uncertainty).

    Give as `beam_width_mm` the largest 6 dB length a point reflector gives
    at that depth (the upper end of
    :func:`ndtmap.indications.sizing.point_reflector_range_at`), as
    :func:`beam_size_flags` does: a length up to it cannot be told from a
    point reflector's.

    Examples
    --------
    >>> is_smaller_than_beam(12.3, 0.5, 12.19), is_smaller_than_beam(20.0, 0.5, 12.19)
    (True, False)
    """
    if length_mm is None or beam_width_mm is None:
        return False
    return bool(length_mm <= beam_width_mm + (uncertainty_mm or 0.0))


def _near_beam_axes(lengths: Mapping[str, LengthResult], w6: float | None) -> list[str]:
    """The axes whose 6 dB length is not above twice the -6 dB beam width (the size rests on the beam)."""
    if w6 is None:
        return []
    return [ax for ax, r in lengths.items() if r.length_mm is not None and r.length_mm <= 2.0 * w6]


def beam_size_flags(
    lengths: Mapping[str, LengthResult],
    *,
    depth_mm: float,
    attrs: Mapping[str, Any],
    beam_width_6db_mm: float | None,
    beam_profile_6db: Any = None,
) -> tuple[tuple[str, ...], tuple[str, ...]]:
    """``smaller_than_beam`` and ``near_field`` of the drop sizes of one indication, with their notes.

    * ``smaller_than_beam``: a 6 dB length within the range that a point
      reflector gives at that depth (:func:`ndtmap.indications.sizing.point_reflector_range_at`),
      within its own uncertainty;
    * ``near_field``: the sound path is shorter than 3 near-field lengths and
      a 6 dB length is not above twice the -6 dB beam width (it, and the
      beam-corrected 20 dB length along it, rest on the near-field beam).
      The DGS size adds its own ``near_field``
      (:mod:`ndtmap.indications.equivalent_size`).

    Parameters
    ----------
    lengths : mapping of axis to LengthResult
        The 6 dB drop lengths (``'scan'``, ``'index'``).
    depth_mm : float
        Depth of the indication, mm.
    attrs : mapping
        The map's attributes (probe, ``probe_bandwidth``, ``beam_angle_deg``).
    beam_width_6db_mm : float or None
        The -6 dB beam width at that depth (:func:`ndtmap.indications.sizing.beam_width_at`).
    beam_profile_6db : mapping or (depths, widths), optional
        A measured -6 dB beam profile (scales the model's range).

    Returns
    -------
    (flags, notes) : tuple of tuple of str
    """
    flags: list[str] = []
    notes: list[str] = []
    w6 = beam_width_6db_mm
    rng, rnotes = point_reflector_range_at(depth_mm, drop_db=6.0, attrs=attrs, beam_profile=beam_profile_6db)
    notes.extend(n for n in rnotes if n.startswith("the range"))
    high = rng[1] if rng is not None else w6
    small = [ax for ax, r in lengths.items() if is_smaller_than_beam(r.length_mm, r.uncertainty_mm, high)]
    if small:
        flags.append("smaller_than_beam")
        where = f" ({rng[0]:.1f} to {rng[1]:.1f} mm)" if rng is not None else f" (the beam width {high:.2f} mm)"
        notes.append(
            f"6 dB length along {' and '.join(small)} is within the range a point reflector gives at this "
            f"depth{where}: the drop measured the beam; use the DGS equivalent size"
        )
    elif w6 is not None and _near_beam_axes(lengths, w6):
        notes.append(
            f"a 6 dB length is less than twice the -6 dB beam width ({w6:.2f} mm): the beam dominates "
            "the edge positions"
        )
    probe = ProbeBeam.from_attrs(attrs)
    near_axes = _near_beam_axes(lengths, w6)
    if not isinstance(probe, str) and near_axes and probe.sound_path_mm(depth_mm) < probe.far_field_limit_mm():
        flags.append("near_field")
        notes.append(
            f"sound path {probe.sound_path_mm(depth_mm):.1f} mm is inside 3 near-field lengths "
            f"({probe.far_field_limit_mm():.1f} mm) and the size along {' and '.join(near_axes)} rests on the "
            "beam: beam widths there come from the near-field piston model (an estimate; a real element's "
            "near field is smoother than a uniform piston's)"
        )
    return tuple(flags), tuple(notes)


def noise_level_fsh(
    amplitude_map: xr.DataArray, indications: Iterable[Indication] = (), *, grow: int = 2, min_positions: int = 10
) -> float | None:
    """Noise level of an amplitude map: median of the valid positions outside indications.

    Each indication's region is grown by `grow` positions (8-connected) so
    that the skirts of the echoes are left out too.

    Parameters
    ----------
    amplitude_map : xarray.DataArray (scan, index)
        Amplitude, %FSH.
    indications : iterable of Indication
        Detected on this map.
    grow : int, default 2
        Positions added around each region.
    min_positions : int, default 10
        Fewer valid positions outside: None (noise unknown).

    Returns
    -------
    float or None
        %FSH.

    Examples
    --------
    >>> import numpy as np, xarray as xr
    >>> a = np.full((8, 8), 5.0); a[3, 3] = 80.0
    >>> m = xr.DataArray(a, dims=("scan", "index"), coords={"scan": np.arange(8.0), "index": np.arange(8.0)})
    >>> noise_level_fsh(m)
    5.0
    """
    amp = mg.as_map("amplitude_map", amplitude_map)
    values = amp.values
    keep = np.isfinite(values)
    regions = np.zeros(values.shape, dtype=bool)
    for k, ind in enumerate(indications):
        if not isinstance(ind, Indication):
            raise ParameterTypeError(f"`indications[{k}]` must be an Indication, got {type(ind).__name__}")
        if ind.region.shape == values.shape:
            regions |= ind.region
    if regions.any() and grow > 0:
        regions = ndimage.binary_dilation(regions, structure=mg.STRUCTURE_8, iterations=int(grow))
    keep &= ~regions
    if np.count_nonzero(keep) < min_positions:
        return None
    return float(np.median(values[keep]))


def is_low_snr(peak_fsh: float | None, noise_fsh: float | None, *, min_snr_db: float = 6.0) -> bool:
    """True when the peak is less than `min_snr_db` above the noise level.

    Examples
    --------
    >>> is_low_snr(15.0, 10.0), is_low_snr(40.0, 10.0), is_low_snr(40.0, 0.0)
    (True, False, False)
    """
    if peak_fsh is None or noise_fsh is None or noise_fsh <= 0:
        return False
    snr = nonnegative_float("min_snr_db", min_snr_db)
    if peak_fsh <= 0:
        return True
    return bool(20.0 * math.log10(peak_fsh / noise_fsh) < snr)


def _overlap(a: Indication, b: Indication) -> bool:
    return not (
        a.scan_max_mm < b.scan_min_mm
        or b.scan_max_mm < a.scan_min_mm
        or a.index_max_mm < b.index_min_mm
        or b.index_max_mm < a.index_min_mm
    )


def _under(ind: Indication, primary: Indication) -> bool:
    """`ind` can be a repeat of `primary`: the primary covers its peak position (its extent, without regions)."""
    region = getattr(primary, "region", None)
    if isinstance(region, np.ndarray) and region.ndim == 2 and region.shape == getattr(ind.region, "shape", None):
        i, j = ind.peak_position
        if region.any() and 0 <= i < region.shape[0] and 0 <= j < region.shape[1]:
            return bool(region[i, j])
    return _overlap(ind, primary)


def _strength(ind: Indication) -> float:
    return ind.peak_fsh if ind.peak_fsh is not None else -math.inf


def repeat_echo_notes(
    indications: Sequence[Indication],
    *,
    backwall_depth_mm: float | None = None,
    multiples: Sequence[int] = (2, 3),
    tolerance_mm: float = 2.0,
    tolerance_fraction: float = 0.03,
    others: Sequence[Indication] = (),
) -> dict[int, list[str]]:
    """Find indications whose depth is a multiple of a stronger one's or of the back wall's.

    An indication is a likely repeat echo when its depth at the peak lies
    within ``max(tolerance_mm, tolerance_fraction * depth)`` of k times

    * the depth of a stronger amplitude indication (higher peak %FSH) whose
      region covers its peak position (a repeat echo lies under its primary;
      a neighbour beside it in plan is not its primary), or, for records
      without regions on the same map, whose extent rectangle overlaps its
      own, or
    * the back-wall depth (a back-wall multiple),

    for k in `multiples`.

    Parameters
    ----------
    indications : sequence of Indication
        Checked (and compared with each other).
    backwall_depth_mm : float, optional
        Back-wall depth (the part thickness), mm.
    multiples : sequence of int, default (2, 3)
        The k tried.
    tolerance_mm, tolerance_fraction : float
        Depth tolerance, see above.
    others : sequence of Indication, optional
        Further possible primaries, e.g. from another gate's map.

    Returns
    -------
    dict
        ``{id: [note, ...]}`` for every indication found to be a repeat.

    Examples
    --------
    >>> import numpy as np
    >>> from ndtmap.indications.detection import Indication
    >>> def ind(i, peak, depth):
    ...     return Indication(i, "amplitude", peak, None, None, None, 5.0, 5.0, (0, 0), depth, depth, depth,
    ...                       0.0, 10.0, 0.0, 10.0, 4, 4.0, ">= 20 %FSH", False, 0, np.zeros((1, 1), bool))
    >>> repeat_echo_notes([ind(1, 90.0, 12.0), ind(2, 30.0, 24.5)])
    {2: ['depth 24.5 mm is about 2 x the depth of indication 1 (12.0 mm)']}
    """
    tol_mm = nonnegative_float("tolerance_mm", tolerance_mm)
    tol_fr = nonnegative_float("tolerance_fraction", tolerance_fraction)
    bw = None if backwall_depth_mm is None else positive_float("backwall_depth_mm", backwall_depth_mm)
    pool = [*indications, *others]
    out: dict[int, list[str]] = {}
    for ind in indications:
        z = ind.depth_mm
        if z is None or ind.kind != "amplitude":
            continue
        tol = max(tol_mm, tol_fr * z)
        notes: list[str] = []
        for other in pool:
            if other is ind or other.kind != "amplitude" or other.depth_mm is None or other.depth_mm <= 0:
                continue
            if not (_strength(other) > _strength(ind)) or not _under(ind, other):
                continue
            for k in multiples:
                if abs(z - k * other.depth_mm) <= tol:
                    notes.append(
                        f"depth {z:.1f} mm is about {k} x the depth of indication {other.id} ({other.depth_mm:.1f} mm)"
                    )
        if bw is not None:
            for k in multiples:
                if abs(z - k * bw) <= tol:
                    notes.append(f"depth {z:.1f} mm is about {k} x the back-wall depth ({bw:.1f} mm)")
        if notes:
            out[ind.id] = notes
    return out


def amplitude_flags(
    ind: Indication,
    *,
    noise_fsh: float | None,
    full_scale_fsh: float,
    min_snr_db: float,
    repeat_notes: Sequence[str] = (),
    clipped: bool | None = None,
) -> tuple[tuple[str, ...], tuple[str, ...]]:
    """The amplitude flags of one indication (``saturated``, ``low_snr``, ``repeat_echo``) and their notes.

    Parameters
    ----------
    ind : Indication
        An amplitude indication.
    noise_fsh : float or None
        Noise level of the map (:func:`noise_level_fsh`); None: ``low_snr`` not evaluated.
    full_scale_fsh : float
        Digitiser full scale, %FSH.
    min_snr_db : float
        ``low_snr`` below this peak-to-noise ratio, dB.
    repeat_notes : sequence of str
        This indication's notes from :func:`repeat_echo_notes` (``repeat_echo`` when any).
    clipped : bool, optional
        Whether the peak's echo was clipped in the recorded samples (from the
        map's ``clipped`` coordinate after a software gain); None: judged
        from the peak against `full_scale_fsh`.

    Returns
    -------
    (flags, notes) : tuple of tuple of str
    """
    flags: list[str] = []
    notes: list[str] = []
    if clipped if clipped is not None else is_saturated(ind.peak_fsh, full_scale_fsh=full_scale_fsh):
        flags.append("saturated")
        notes.append(
            f"peak {ind.peak_fsh:.1f} %FSH: its echo was clipped at the digitiser full scale ({full_scale_fsh:g} "
            "%FSH): drop sizes are invalid and the DGS size is a lower bound; rescan at lower gain"
        )
    if is_low_snr(ind.peak_fsh, noise_fsh, min_snr_db=min_snr_db):
        flags.append("low_snr")
        notes.append(
            f"peak {ind.peak_fsh:.1f} %FSH is less than {min_snr_db:g} dB above the noise ({noise_fsh:.1f} %FSH)"
        )
    if repeat_notes:
        flags.append("repeat_echo")
        notes.extend(repeat_notes)
    return tuple(flags), tuple(notes)


def ordered_flags(flags: Iterable[str]) -> tuple[str, ...]:
    """The distinct flags of `flags` in report order (:data:`FLAGS`); unknown names are dropped.

    Examples
    --------
    >>> ordered_flags(["data_gap", "saturated", "data_gap"])
    ('saturated', 'data_gap')
    """
    given = set(flags)
    return tuple(f for f in FLAGS if f in given)


def explain(flags: Iterable[str]) -> list[str]:
    """One-line explanations of the given flags (unknown names pass through).

    Examples
    --------
    >>> explain(["saturated"])[0].startswith("saturated: peak clipped at the digitiser full scale")
    True
    """
    return [f"{f}: {FLAG_MEANINGS[f]}" if f in FLAG_MEANINGS else str(f) for f in flags]
