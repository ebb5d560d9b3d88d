"""Sizing of indications: 6 dB / 20 dB drop, fixed level, -6 dB area.

All sizes come from the map coordinates (mm), so non-uniform scan or index
spacing is handled; level crossings are found by linear interpolation
between neighbouring samples, never rounded to the grid.

Lengths along a line
--------------------
A length is measured along a line through the indication: the scan axis or
the index axis through the peak position (the map's own samples are used),
or any line given by two end points in mm (the map is sampled along it by
bilinear interpolation at a step finer than the grid, by default a quarter
of the smallest spacing). The *level* is a drop from the indication's peak
(``drop_db=6``: exactly half the peak, as the trade means by "6 dB";
``20``: a tenth; others ``10**(-drop_db/20)``) or a fixed level (%FSH, or
dB re a reference).

How far to walk (``edge``):

``"first"`` (default)
    Walk outward from the peak, each way, and stop at the first sample below
    the level; the end is the linearly interpolated crossing between that
    sample and the last one above. This is the usual practice of the drop
    methods: the probe is moved away from the maximum until the echo has
    fallen to the level. A dip below the level followed by a rise (a noisy
    plateau of a laminar reflector, two reflectors side by side) ends the
    length at the dip.
``"outermost"``
    Take the outermost crossing of the region that is connected (8-connected
    in 2-D) to the peak above the level: the walk starts from the last
    sample on the line that belongs to that region. A dip that the region
    goes round in 2-D is bridged; one that cuts the region in two is not.

Missing samples (NaN, drop-outs) on the line are bridged: the walk goes on
to the next valid sample, and the result carries ``data_gap=True``; if the
crossing lies across the gap, it is interpolated between the valid samples
on each side and its uncertainty is the whole bridged interval. When the
walk reaches the end of the map (or of the user's line) while still above
the level, the end is the last sample and the length is a lower bound
(``lower_bound=True``).

Uncertainty
-----------
An estimate, not a bound. Each end is the linear interpolation between the
two samples that bracket the crossing; the true crossing lies between the
same two samples when the amplitude is monotone and noise-free there, so
each end contributes the full spacing of those two samples (for user lines:
the grid cell size along the line's direction, at least), and the two ends
are added. Left out: noise, the sampling of the peak (the level's own
error) and the beam: where the beam width is comparable to the size, the
result notes it (see :mod:`ndtmap.indications.flags`).

Beam widths
-----------
:func:`beam_width_at` gives the pulse-echo beam width at the depth of an
indication from the band-averaged piston model at that sound path, near
field included (:func:`ndtmap.physics.piston_field.pulse_echo_beam_width_mm`,
with the map's ``probe_bandwidth``), or from a measured beam profile (a
table of depth -> width). :func:`point_reflector_range_at` gives the range
of drop lengths a point reflector can produce there (the echo's spectrum
anywhere in the probe's -6 dB band, near-field rings included), which the
``smaller_than_beam`` flag uses.

20 dB drop with beam correction
-------------------------------
As described in general terms in ISO 16827, the 20 dB drop length is
corrected by subtracting the -20 dB beam width at the sound path of the
indication. A corrected value that is not larger than its uncertainty is
reported as "not larger than the beam" (``not_larger_than_beam=True``,
``length_mm=None``), never as a negative number. The correction assumes
that the echo falls by 20 dB when the -20 dB edge of the beam reaches the
reflector edge, which is exact for edges smaller than the beam; where the
reflector extends beyond the beam along the line (its 6 dB length above
twice the -6 dB beam width: a plate, the long axis of an elongated
reflector) the echo falls by 20 dB before that and the correction would
undersize it (with the area-integrated piston beam model by roughly 0.15 to
0.45 of the -20 dB beam width, depending on how far out the beam's side
lobes reach): no corrected length is given there
(``extends_beyond_beam=True``); the 6 dB length is the size along that line.
The uncertainty of a corrected length is the sampling of the drop length
plus half the spread of the beam width over the probe's band: an estimate,
which leaves out the probe's tolerances, the reflector's shape and tilt and
side lobes.

-6 dB area
----------
The area of the region 8-connected to the peak where the amplitude is at
least half the peak, summed from midpoint (Voronoi) cell areas of the
positions; its uncertainty is half the area of the region's boundary cells.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import xarray as xr

from ndtmap._shared import mapgeom as mg
from ndtmap._shared.validate import finite_float, one_of, positive_float
from ndtmap.errors import ParameterError, ParameterTypeError, SizingError, UnitsError
from ndtmap.indications.detection import Indication, reference_map
from ndtmap.physics import beam, piston_field

__all__ = [
    "LengthResult",
    "AreaResult",
    "BeamCorrectedLength",
    "drop_length",
    "level_length",
    "drop_area",
    "level_area",
    "beam_corrected_length",
    "beam_width_at",
    "point_reflector_range_at",
    "ProbeBeam",
    "ASSUMED_BANDWIDTH",
    "drop_factor",
]

EDGES = ("first", "outermost")


@dataclass(frozen=True)
class LengthResult:
    """A length measured along one line.

    Attributes
    ----------
    length_mm : float or None
        Distance between the two ends, mm (None when the line never reaches
        the level).
    uncertainty_mm : float or None
        Estimate of the sampling error at the two ends, mm (see module notes).
    start_mm, end_mm : tuple of float or None
        (scan, index) positions of the two ends, mm.
    level_fsh : float or None
        The level in map units when it is one number (None for a level that
        varies with position).
    method : str
        ``"6 dB drop"``, ``"20 dB drop"``, ``"fixed level ..."``.
    direction : {'scan', 'index', 'line'}
        The line measured along.
    edge : {'first', 'outermost'}
        The walking rule.
    lower_bound : bool
        An end reached the boundary of the map or line above the level.
    data_gap : bool
        Missing samples were bridged on the line.
    notes : tuple of str
        Remarks for the report.
    """

    length_mm: float | None
    uncertainty_mm: float | None
    start_mm: tuple[float, float] | None
    end_mm: tuple[float, float] | None
    level_fsh: float | None
    method: str
    direction: str
    edge: str
    lower_bound: bool
    data_gap: bool
    notes: tuple[str, ...] = ()


@dataclass(frozen=True)
class AreaResult:
    """Area of the region connected to the peak above a level.

    Attributes
    ----------
    area_mm2 : float or None
        Sum of the cell areas, mm^2 (None when an axis has one position).
    uncertainty_mm2 : float or None
        Half the area of the boundary cells.
    n_positions : int
        Positions in the region.
    level_fsh : float or None
        Level (None when it varies with position).
    method : str
        E.g. ``"-6 dB area"``.
    lower_bound : bool
        The region touches the map boundary.
    data_gap : bool
        Missing positions inside or next to the region.
    region : numpy.ndarray of bool
        The region (not compared or printed).
    """

    area_mm2: float | None
    uncertainty_mm2: float | None
    n_positions: int
    level_fsh: float | None
    method: str
    lower_bound: bool
    data_gap: bool
    notes: tuple[str, ...] = ()
    region: np.ndarray = field(default=None, compare=False, repr=False)  # type: ignore[assignment]


@dataclass(frozen=True)
class BeamCorrectedLength:
    """A drop length minus the beam width at the indication's sound path.

    Attributes
    ----------
    raw : LengthResult
        The uncorrected drop length.
    beam_width_mm : float or None
        Beam width subtracted, mm.
    length_mm : float or None
        ``raw.length_mm - beam_width_mm``; None when it is not larger than the
        uncertainty (see `not_larger_than_beam`) or cannot be computed.
    uncertainty_mm : float or None
        The raw length's sampling uncertainty plus half the spread of the
        beam width over the probe's band (an estimate, not a bound).
    not_larger_than_beam : bool
        The corrected value is not larger than its uncertainty.
    notes : tuple of str
        Remarks.
    extends_beyond_beam : bool
        Along this line the reflector's 6 dB length is above twice the
        -6 dB beam width: the correction would undersize it, none is given.
    """

    raw: LengthResult
    beam_width_mm: float | None
    length_mm: float | None
    uncertainty_mm: float | None
    not_larger_than_beam: bool
    notes: tuple[str, ...] = ()
    extends_beyond_beam: bool = False


# --------------------------------------------------------------------------- checks


def _check_indication(ind: Any, shape: tuple[int, ...]) -> tuple[int, int]:
    if not isinstance(ind, Indication):
        raise ParameterTypeError(
            f"`indication` must be an Indication (from ndtmap.indications.detection), got {type(ind).__name__}"
        )
    i, j = ind.peak_position
    if ind.region.shape != tuple(shape) or not (0 <= i < shape[0] and 0 <= j < shape[1]):
        raise SizingError(
            f"`indication` {ind.id} has its peak at array position {ind.peak_position}, outside the map of "
            f"shape {shape}; size it on the map it was detected on"
        )
    return int(i), int(j)


def drop_factor(drop_db: float) -> float:
    """Amplitude ratio of a drop: exactly 1/2 for 6 dB (the trade's "half the peak"), else 10**(-dB/20).

    Examples
    --------
    >>> drop_factor(6), drop_factor(20)
    (0.5, 0.1)
    """
    drop = positive_float("drop_db", drop_db)
    return 0.5 if drop == 6.0 else 10.0 ** (-drop / 20.0)


def _sizing_map(amplitude_map: Any) -> xr.DataArray:
    """The map as sizing needs it: (scan, index) float64, positions in mm (angles refused)."""
    amp = mg.as_map("amplitude_map", amplitude_map)
    mg.check_mm_coords("amplitude_map", amp)
    return amp


def _drop_map(amplitude_map: Any, drop_db: Any) -> xr.DataArray:
    """A map for a drop from the peak: in %FSH (a map in dB refused), positions in mm."""
    amp = _sizing_map(amplitude_map)
    mg.check_linear_amplitude("amplitude_map", amp, f"a {drop_db!r} dB drop from the peak")
    return amp


def _drop_level(values: np.ndarray, pk: tuple[int, int], drop_db: Any, ind: Indication) -> float:
    factor = drop_factor(drop_db)
    peak = float(values[pk])
    if not math.isfinite(peak) or peak <= 0:
        raise SizingError(
            f"the map has no positive amplitude at the peak of indication {ind.id} (got {peak!r}); "
            "a drop from the maximum cannot be measured"
        )
    return peak * factor


def _fixed_level(
    amp: xr.DataArray, level_fsh: Any, level_db: Any, reference: Any
) -> tuple[np.ndarray, float | None, str]:
    if (level_fsh is None) == (level_db is None):
        raise ParameterError(
            "give exactly one of `level_fsh` and `level_db` (dB re `reference`), got "
            f"level_fsh={level_fsh!r}, level_db={level_db!r}"
        )
    if level_fsh is not None:
        lv = finite_float("level_fsh", level_fsh)
        mg.check_linear_amplitude("amplitude_map", amp, f"`level_fsh`={lv:g}")
        return np.full(amp.shape, lv), lv, f"fixed level {lv:g} %FSH"
    db = finite_float("level_db", level_db)
    if mg.in_db(amp):
        if reference is not None:
            raise UnitsError(
                f"`amplitude_map` is in {mg.units_of(amp)!r} while `reference` ({reference!r}) is a level in %FSH; "
                f"on a map in dB give `level_db` ({db:g}) alone, in the map's dB"
            )
        return np.full(amp.shape, db), db, f"fixed level {db:g} dB"
    if reference is None:
        raise ParameterError("`level_db` needs a `reference` level (a number in %FSH or a map)")
    ref = reference_map(reference, amp)
    levels = ref * 10.0 ** (db / 20.0)
    single = float(levels.flat[0]) if np.all(levels == levels.flat[0]) else None
    return levels, single, f"fixed level {db:+g} dB re reference"


# --------------------------------------------------------------------------- 1-D walk


@dataclass
class _End:
    pos: float
    u: float
    open: bool
    gap: bool


def _walk(s: np.ndarray, g: np.ndarray, start: int, step: int, half_cell: np.ndarray, fine: bool) -> _End:
    """Walk from sample `start` (g >= 0) in direction `step` to the first sample with g < 0.

    `half_cell` is half the grid cell size at each sample (the uncertainty of
    an open end; twice it is the least uncertainty of a crossing on a finely
    sampled line, `fine`); on the grid's own samples a crossing's uncertainty
    is the bracketing spacing (an estimate, see the module notes).
    """
    kv = start
    gap = False
    k = start + step
    n = s.size
    while 0 <= k < n:
        gk = g[k]
        if math.isnan(gk):
            gap = True
        elif gk >= 0:
            kv = k
        else:
            t = g[kv] / (g[kv] - gk)
            pos = s[kv] + t * (s[k] - s[kv])
            bracket = abs(s[k] - s[kv])
            across_gap = abs(k - kv) > 1 and gap
            if across_gap:
                u = bracket
            elif fine:
                u = max(bracket, 2.0 * float(half_cell[k]))
            else:
                u = bracket
            return _End(pos=float(pos), u=float(u), open=False, gap=gap)
        k += step
    return _End(pos=float(s[kv]), u=float(half_cell[kv]), open=True, gap=gap)


def _profile(
    amp: xr.DataArray,
    ind: Indication,
    pk: tuple[int, int],
    axis: str | None,
    line: Any,
    step_mm: float | None,
    levels: np.ndarray,
) -> dict[str, Any]:
    """Samples along the sizing line and the level there."""
    scan, index = mg.coords_mm(amp)
    values = amp.values
    if line is None:
        axis = one_of("axis", axis, ("scan", "index"))
        if axis == "scan":
            s = scan.copy()
            v = values[:, pk[1]].copy()
            lv = levels[:, pk[1]].copy()
            pts = np.column_stack([scan, np.full(scan.size, index[pk[1]])])
            cells = (np.arange(scan.size), np.full(scan.size, pk[1]))
            k0 = pk[0]
            half = 0.5 * mg.cell_widths(scan) if scan.size > 1 else np.zeros(1)
        else:
            s = index.copy()
            v = values[pk[0], :].copy()
            lv = levels[pk[0], :].copy()
            pts = np.column_stack([np.full(index.size, scan[pk[0]]), index])
            cells = (np.full(index.size, pk[0]), np.arange(index.size))
            k0 = pk[1]
            half = 0.5 * mg.cell_widths(index) if index.size > 1 else np.zeros(1)
        return dict(s=s, v=v, level=lv, pts=pts, cells=cells, k0=k0, half=half, direction=axis)
    p0, p1 = mg.point_pair("line", line)
    if scan.size < 2 or index.size < 2:
        raise SizingError("sizing along a line needs a map with at least two positions on both axes")
    ws, wi = mg.cell_widths(scan), mg.cell_widths(index)
    if step_mm is None:
        step = 0.25 * float(min(ws.min(), wi.min()))
    else:
        step = positive_float("step_mm", step_mm)
    s, pts, v = mg.sample_line(values, scan, index, p0, p1, step)
    with np.errstate(invalid="ignore"):
        lv = mg.sample_line(levels, scan, index, p0, p1, step)[2]
    inside = mg.inside_map(pts, scan, index)
    cells = mg.nearest_cell(pts, scan, index)
    length = s[-1]
    cs, ci = (p1[0] - p0[0]) / length, (p1[1] - p0[1]) / length
    half = 0.5 * np.hypot(cs * ws[cells[0]], ci * wi[cells[1]])
    # samples outside the map end the line: keep the inside run that holds the indication
    in_region = ind.region[cells] & inside & np.isfinite(v)
    if not in_region.any():
        raise SizingError(
            f"the line {p0} -> {p1} does not cross indication {ind.id}; draw it through the indication"
        )
    k0 = int(np.flatnonzero(in_region)[np.argmax(v[in_region])])
    lo = k0
    while lo > 0 and inside[lo - 1]:
        lo -= 1
    hi = k0
    while hi < s.size - 1 and inside[hi + 1]:
        hi += 1
    sl = slice(lo, hi + 1)
    return dict(
        s=s[sl],
        v=v[sl],
        level=lv[sl],
        pts=pts[sl],
        cells=(cells[0][sl], cells[1][sl]),
        k0=k0 - lo,
        half=half[sl],
        direction="line",
    )


def _measure(
    amp: xr.DataArray,
    ind: Indication,
    pk: tuple[int, int],
    levels: np.ndarray,
    *,
    axis: str | None,
    line: Any,
    edge: str,
    step_mm: float | None,
    method: str,
    level_fsh: float | None,
) -> LengthResult:
    edge = one_of("edge", edge, EDGES)
    prof = _profile(amp, ind, pk, axis, line, step_mm, levels)
    s, v, lv, k0 = prof["s"], prof["v"], prof["level"], prof["k0"]
    with np.errstate(invalid="ignore"):
        g = v - lv
    notes: list[str] = []
    if s.size < 2:
        return LengthResult(None, None, None, None, level_fsh, method, prof["direction"], edge, False, False,
                            (f"the map has a single position along {prof['direction']}: no {method} length",))
    if not (g[k0] >= 0):
        return LengthResult(
            length_mm=None,
            uncertainty_mm=None,
            start_mm=None,
            end_mm=None,
            level_fsh=level_fsh,
            method=method,
            direction=prof["direction"],
            edge=edge,
            lower_bound=False,
            data_gap=False,
            notes=(f"the amplitude on the line stays below the {method} level",),
        )
    starts = [k0, k0]
    if edge == "outermost":
        with np.errstate(invalid="ignore"):
            mask2d = np.isfinite(amp.values) & (amp.values - levels >= 0)
        comp = mg.connected_to(mask2d, (int(prof["cells"][0][k0]), int(prof["cells"][1][k0])))
        member = comp[prof["cells"]] & (g >= 0)
        idx = np.flatnonzero(member)
        if idx.size:
            starts = [int(min(idx.min(), k0)), int(max(idx.max(), k0))]
    fine = prof["direction"] == "line"
    lo = _walk(s, g, starts[0], -1, prof["half"], fine)
    hi = _walk(s, g, starts[1], +1, prof["half"], fine)
    length = hi.pos - lo.pos
    pts = prof["pts"]

    def at(pos: float) -> tuple[float, float]:
        return (float(np.interp(pos, s, pts[:, 0])), float(np.interp(pos, s, pts[:, 1])))

    lower = lo.open or hi.open
    gap = lo.gap or hi.gap
    if lower:
        notes.append(f"{method} length along {prof['direction']} reaches the end of the map: a lower bound")
    if gap:
        notes.append(f"missing A-scans on the {prof['direction']} line were bridged")
    return LengthResult(
        length_mm=float(length),
        uncertainty_mm=float(lo.u + hi.u),
        start_mm=at(lo.pos),
        end_mm=at(hi.pos),
        level_fsh=level_fsh,
        method=method,
        direction=prof["direction"],
        edge=edge,
        lower_bound=bool(lower),
        data_gap=bool(gap),
        notes=tuple(notes),
    )


# --------------------------------------------------------------------------- public


def drop_length(
    amplitude_map: xr.DataArray,
    indication: Indication,
    *,
    drop_db: float = 6.0,
    axis: str = "scan",
    line: Any = None,
    edge: str = "first",
    step_mm: float | None = None,
) -> LengthResult:
    """Length between the points where the echo has dropped `drop_db` below the peak.

    Parameters
    ----------
    amplitude_map : xarray.DataArray (scan, index)
        Amplitude in %FSH (the map the indication was detected on).
    indication : Indication
        The indication; its peak position is the start of the walk.
    drop_db : float, default 6
        Drop from the peak: 6 for the 6 dB drop (half the peak), 20 for the
        20 dB drop (a tenth).
    axis : {'scan', 'index'}, default 'scan'
        Measure along this axis through the peak (ignored with `line`).
    line : ((scan0, index0), (scan1, index1)), optional
        Measure along this line instead, end points in mm; it must cross the
        indication.
    edge : {'first', 'outermost'}, default 'first'
        Walking rule, see the module notes.
    step_mm : float, optional
        Sampling step along `line` (default: a quarter of the smallest grid
        spacing).

    Returns
    -------
    LengthResult

    Raises
    ------
    SizingError
        When the peak is not a positive amplitude or the line misses the
        indication.

    Examples
    --------
    >>> import numpy as np, xarray as xr
    >>> from ndtmap.indications.detection import detect_indications
    >>> a = np.array([[0, 0, 0, 0, 0], [0, 25, 100, 75, 0], [0, 0, 0, 0, 0.0]])
    >>> m = xr.DataArray(a, dims=("scan", "index"), coords={"scan": [0.0, 1, 2], "index": [0.0, 1, 2, 3, 4]})
    >>> ind = detect_indications(m, threshold_fsh=20)[0]
    >>> r = drop_length(m, ind, axis="index")
    >>> round(r.length_mm, 3), r.start_mm, r.end_mm
    (2.0, (1.0, 1.333...), (1.0, 3.333...))
    """
    amp = _drop_map(amplitude_map, drop_db)
    pk = _check_indication(indication, amp.shape)
    level = _drop_level(amp.values, pk, drop_db, indication)
    drop = float(drop_db)
    return _measure(
        amp,
        indication,
        pk,
        np.full(amp.shape, level),
        axis=axis,
        line=line,
        edge=edge,
        step_mm=step_mm,
        method=f"{drop:g} dB drop",
        level_fsh=level,
    )


def level_length(
    amplitude_map: xr.DataArray,
    indication: Indication,
    *,
    level_fsh: float | None = None,
    level_db: float | None = None,
    reference: float | xr.DataArray | None = None,
    axis: str = "scan",
    line: Any = None,
    edge: str = "first",
    step_mm: float | None = None,
) -> LengthResult:
    """Length above a fixed level (%FSH, or dB re a reference) through the indication.

    Parameters
    ----------
    amplitude_map : xarray.DataArray (scan, index)
        Amplitude in %FSH, or any map whose indication is "value >= level"
        (e.g. a back-wall loss map in dB with `level_fsh` as the dB level).
    indication : Indication
        The indication.
    level_fsh : float, optional
        Absolute level in the map's units.
    level_db, reference : float, optional
        Level in dB re `reference` (a number in %FSH or a per-position map).
    axis, line, edge, step_mm
        As in :func:`drop_length`.

    Returns
    -------
    LengthResult

    Examples
    --------
    >>> import numpy as np, xarray as xr
    >>> from ndtmap.indications.detection import detect_indications
    >>> a = np.array([[0.0, 40, 80, 40, 0]])
    >>> m = xr.DataArray(a, dims=("scan", "index"), coords={"scan": [0.0], "index": [0.0, 1, 2, 3, 4]})
    >>> ind = detect_indications(m, threshold_fsh=20)[0]
    >>> level_length(m, ind, level_fsh=20, axis="index").length_mm
    3.0
    """
    amp = _sizing_map(amplitude_map)
    pk = _check_indication(indication, amp.shape)
    levels, single, method = _fixed_level(amp, level_fsh, level_db, reference)
    return _measure(
        amp,
        indication,
        pk,
        levels,
        axis=axis,
        line=line,
        edge=edge,
        step_mm=step_mm,
        method=method,
        level_fsh=single,
    )


def _area(
    amp: xr.DataArray, pk: tuple[int, int], levels: np.ndarray, method: str, single: float | None
) -> AreaResult:
    values = amp.values
    with np.errstate(invalid="ignore"):
        mask = np.isfinite(values) & (values - levels >= 0)
    region = mg.connected_to(mask, pk)
    n = int(np.count_nonzero(region))
    areas = mg.cell_areas(amp)
    notes: list[str] = []
    if n == 0:
        return AreaResult(None, None, 0, single, method, False, False, (f"the peak is below the {method} level",),
                          region)
    if np.all(np.isfinite(areas[region])):
        area = float(areas[region].sum())
        padded = np.pad(region, 1, constant_values=True)  # the map edge is not a boundary of the region
        inner = (
            padded[:-2, 1:-1] & padded[2:, 1:-1] & padded[1:-1, :-2] & padded[1:-1, 2:]
        )
        boundary = region & ~inner
        unc = 0.5 * float(areas[boundary].sum())
    else:
        area = unc = None
        notes.append("an axis has a single position: no area")
    missing = np.isnan(values)
    gap = mg.adjacent_missing(region, missing) > 0
    lower = mg.touches_edge(region)
    if lower:
        notes.append(f"the {method} region reaches the end of the map: the area is a lower bound")
    if gap:
        notes.append(f"missing A-scans inside or next to the {method} region")
    region.setflags(write=False)
    return AreaResult(area, unc, n, single, method, bool(lower), bool(gap), tuple(notes), region)


def drop_area(amplitude_map: xr.DataArray, indication: Indication, *, drop_db: float = 6.0) -> AreaResult:
    """Area of the region 8-connected to the peak where amplitude >= peak - `drop_db`.

    Parameters
    ----------
    amplitude_map : xarray.DataArray (scan, index)
        Amplitude in %FSH.
    indication : Indication
        The indication.
    drop_db : float, default 6
        Drop from the peak defining the region (6: the -6 dB area).

    Returns
    -------
    AreaResult

    Examples
    --------
    >>> import numpy as np, xarray as xr
    >>> from ndtmap.indications.detection import detect_indications
    >>> a = np.zeros((6, 6)); a[1:4, 1:5] = 90.0; a[2, 2] = 100.0
    >>> m = xr.DataArray(a, dims=("scan", "index"), coords={"scan": np.arange(6.0) * 2, "index": np.arange(6.0)})
    >>> drop_area(m, detect_indications(m, threshold_fsh=20)[0]).area_mm2
    24.0
    """
    amp = _drop_map(amplitude_map, drop_db)
    pk = _check_indication(indication, amp.shape)
    level = _drop_level(amp.values, pk, drop_db, indication)
    return _area(amp, pk, np.full(amp.shape, level), f"-{float(drop_db):g} dB area", level)


def level_area(
    amplitude_map: xr.DataArray,
    indication: Indication,
    *,
    level_fsh: float | None = None,
    level_db: float | None = None,
    reference: float | xr.DataArray | None = None,
) -> AreaResult:
    """Area of the region 8-connected to the peak above a fixed level.

    Parameters are as in :func:`level_length`.

    Returns
    -------
    AreaResult
    """
    amp = _sizing_map(amplitude_map)
    pk = _check_indication(indication, amp.shape)
    levels, single, method = _fixed_level(amp, level_fsh, level_db, reference)
    return _area(amp, pk, levels, f"{method} area", single)


def _profile_table(beam_profile: Any) -> tuple[np.ndarray, np.ndarray]:
    try:
        if isinstance(beam_profile, Mapping):
            pairs = sorted((float(k), float(v)) for k, v in beam_profile.items())
            z = np.array([p[0] for p in pairs])
            w = np.array([p[1] for p in pairs])
        else:
            z_in, w_in = beam_profile
            z = np.asarray(z_in, dtype=np.float64).reshape(-1)
            w = np.asarray(w_in, dtype=np.float64).reshape(-1)
    except (TypeError, ValueError):
        raise ParameterError(
            "`beam_profile` must be a mapping {depth_mm: width_mm} or a pair (depths_mm, widths_mm), "
            f"got {beam_profile!r}"
        ) from None
    if z.size == 0 or z.size != w.size:
        raise ParameterError(f"`beam_profile` needs as many widths as depths (>= 1), got {z.size} and {w.size}")
    if not (np.all(np.isfinite(z)) and np.all(np.isfinite(w))) or np.any(w <= 0) or np.any(z < 0):
        raise ParameterError("`beam_profile` depths must be >= 0 and widths > 0 mm, all finite")
    if z.size > 1 and np.any(np.diff(z) <= 0):
        raise ParameterError("`beam_profile` depths must be strictly increasing (no repeats)")
    return z, w


#: Fractional bandwidth assumed when a map does not carry ``probe_bandwidth`` (a broadband contact probe).
ASSUMED_BANDWIDTH = 0.5


@dataclass(frozen=True)
class ProbeBeam:
    """The probe and material of a map, as the beam model needs them, with the remarks on what was assumed.

    Attributes
    ----------
    diameter_mm, frequency_mhz, velocity_m_s : float
    bandwidth : float
        Fractional -6 dB bandwidth (the map's ``probe_bandwidth``, else :data:`ASSUMED_BANDWIDTH`).
    beam_angle_deg : float
    notes : tuple of str
        E.g. that the bandwidth was assumed.
    """

    diameter_mm: float
    frequency_mhz: float
    velocity_m_s: float
    bandwidth: float
    beam_angle_deg: float
    notes: tuple[str, ...] = ()

    @classmethod
    def from_attrs(cls, attrs: Mapping[str, Any] | None) -> ProbeBeam | str:
        """The probe of a map's attributes, or the reason there is none (a note)."""
        attrs = dict(attrs or {})
        get = {k: mg.map_attr(attrs, k) for k in ("probe_diameter_mm", "probe_frequency_mhz", "velocity_m_s")}
        need = [k for k, v in get.items() if v is None or v <= 0]
        if need:
            return f"no beam width: the map lacks {', '.join(need)} and no `beam_profile` was given"
        bw = mg.map_attr(attrs, "probe_bandwidth")
        notes: tuple[str, ...] = ()
        if bw is None or not 0.0 <= bw <= 1.5:
            notes = (f"the map carries no usable probe_bandwidth: the beam model assumes {ASSUMED_BANDWIDTH:g}",)
            bw = ASSUMED_BANDWIDTH
        return cls(get["probe_diameter_mm"], get["probe_frequency_mhz"], get["velocity_m_s"], float(bw),
                   float(mg.map_attr(attrs, "beam_angle_deg", 0.0) or 0.0), notes)

    def sound_path_mm(self, depth_mm: float) -> float:
        """The sound path to a depth along the beam, mm."""
        return depth_mm / math.cos(math.radians(self.beam_angle_deg))

    def near_field_length_mm(self) -> float:
        """The probe's near-field length N in the material, mm."""
        return beam.near_field_length_mm(self.diameter_mm, self.frequency_mhz, self.velocity_m_s)

    def far_field_limit_mm(self) -> float:
        """The sound path from which the far-field relations hold (3 N), mm."""
        return piston_field.far_field_limit_mm(self.diameter_mm, self.frequency_mhz, self.velocity_m_s)

    def width_mm(self, depth_mm: float, drop_db: float) -> float:
        """Band-averaged pulse-echo beam width at a depth (the outer width, near field included), mm."""
        return float(piston_field.pulse_echo_beam_width_mm(
            self.sound_path_mm(depth_mm), self.diameter_mm, self.frequency_mhz, self.velocity_m_s,
            bandwidth=self.bandwidth, drop_db=drop_db))

    def point_range_mm(self, depth_mm: float, drop_db: float) -> tuple[float, float]:
        """The drop lengths a point reflector can give at a depth (see ``point_reflector_length_range_mm``)."""
        return piston_field.point_reflector_length_range_mm(
            self.sound_path_mm(depth_mm), self.diameter_mm, self.frequency_mhz, self.velocity_m_s,
            bandwidth=self.bandwidth, drop_db=drop_db)


def _angle_note(probe: ProbeBeam, depth_mm: float) -> tuple[str, ...]:
    if probe.beam_angle_deg <= 0:
        return ()
    return (
        f"beam width at sound path {probe.sound_path_mm(depth_mm):.1f} mm, perpendicular to the beam axis "
        f"({probe.beam_angle_deg:g} deg); give a measured `beam_profile` for the footprint in the plane of incidence",
    )


def beam_width_at(
    depth_mm: float,
    *,
    drop_db: float,
    attrs: Mapping[str, Any] | None = None,
    beam_profile: Any = None,
) -> tuple[float | None, tuple[str, ...]]:
    """Pulse-echo beam width at the depth of an indication, with remarks.

    From a measured `beam_profile` when given, else from the band-averaged
    piston model at that sound path, near field included
    (:func:`ndtmap.physics.piston_field.pulse_echo_beam_width_mm`, with the
    map's ``probe_bandwidth``; 0.5 assumed, and noted, when it is missing).

    Parameters
    ----------
    depth_mm : float
        Depth of the indication, mm (converted to the sound path with the
        map's ``beam_angle_deg`` for the beam model).
    drop_db : float
        Edge drop defining the width (6 or 20).
    attrs : mapping, optional
        The map's attributes: ``probe_diameter_mm``, ``probe_frequency_mhz``,
        ``velocity_m_s``, ``probe_bandwidth``, ``beam_angle_deg``.
    beam_profile : mapping or (depths, widths), optional
        Measured beam widths by depth (mm); used instead of the model,
        interpolated linearly and held constant beyond its ends (noted).

    Returns
    -------
    width_mm : float or None
        None when it cannot be computed (noted).
    notes : tuple of str

    Examples
    --------
    >>> w, _ = beam_width_at(100.0, drop_db=6, attrs={"probe_diameter_mm": 10, "probe_frequency_mhz": 5,
    ...     "velocity_m_s": 5920, "probe_bandwidth": 0.0, "beam_angle_deg": 0})
    >>> round(w, 2)  # one frequency, far field: 2 z tan(asin(0.514 lambda / D))
    12.19
    >>> w, notes = beam_width_at(12.7, drop_db=6, attrs={"probe_diameter_mm": 10, "probe_frequency_mhz": 5,
    ...     "velocity_m_s": 5920, "probe_bandwidth": 0.6})
    >>> round(w, 1), notes  # at 0.6 near-field lengths the beam is about as wide as 2/3 of the element
    (6.5, ())
    """
    z = finite_float("depth_mm", depth_mm)
    if beam_profile is not None:
        zt, wt = _profile_table(beam_profile)
        notes: tuple[str, ...] = ()
        if z < zt[0] or z > zt[-1]:
            notes = (
                f"depth {z:g} mm lies outside the beam profile ({zt[0]:g} to {zt[-1]:g} mm); "
                "the width at its nearest end is used",
            )
        return float(np.interp(z, zt, wt)), notes
    probe = ProbeBeam.from_attrs(attrs)
    if isinstance(probe, str):
        return None, (probe,)
    if z <= 0:
        return None, (f"no beam width at depth {z:g} mm",)
    return probe.width_mm(z, float(drop_db)), probe.notes + _angle_note(probe, z)


def point_reflector_range_at(
    depth_mm: float,
    *,
    drop_db: float = 6.0,
    attrs: Mapping[str, Any] | None = None,
    beam_profile: Any = None,
) -> tuple[tuple[float, float] | None, tuple[str, ...]]:
    """The range of `drop_db` drop lengths a point reflector gives at the depth of an indication, mm.

    From the band-averaged piston model
    (:func:`ndtmap.physics.piston_field.point_reflector_length_range_mm`: the
    echo's spectrum anywhere in the probe's -6 dB band, near-field rings
    included). With a measured `beam_profile` the measured width is taken as
    the model's own width and the range scaled with it (when the map carries
    the probe), else the range is the measured width alone (noted).

    Parameters
    ----------
    depth_mm : float
        Depth of the indication, mm.
    drop_db : float, default 6
        The drop of the length.
    attrs : mapping, optional
        The map's attributes (see :func:`beam_width_at`).
    beam_profile : mapping or (depths, widths), optional
        Measured beam widths at this drop by depth, mm.

    Returns
    -------
    range_mm : (low, high) or None
        None when nothing is known of the beam (noted).
    notes : tuple of str

    Examples
    --------
    >>> attrs = {"probe_diameter_mm": 10, "probe_frequency_mhz": 5, "velocity_m_s": 5920, "probe_bandwidth": 0.6}
    >>> (lo, hi), _ = point_reflector_range_at(100.0, attrs=attrs)
    >>> round(lo, 1), round(hi, 1)
    (8.5, 15.7)
    """
    z = finite_float("depth_mm", depth_mm)
    probe = ProbeBeam.from_attrs(attrs)
    if beam_profile is not None:
        measured, notes = beam_width_at(z, drop_db=drop_db, beam_profile=beam_profile)
        if isinstance(probe, str) or z <= 0:
            return (measured, measured), notes + (
                "the range of lengths a point reflector gives is taken as the measured beam width alone (the map "
                "lacks the probe for the model's range)",)
        lo, hi = probe.point_range_mm(z, float(drop_db))
        model = probe.width_mm(z, float(drop_db))
        return (measured * lo / model, measured * hi / model), notes
    if isinstance(probe, str):
        return None, (probe.replace("no beam width", "no point-reflector range"),)
    if z <= 0:
        return None, (f"no point-reflector range at depth {z:g} mm",)
    return probe.point_range_mm(z, float(drop_db)), probe.notes
def _extends_beyond_beam(
    amp: xr.DataArray, ind: Indication, z: float, beam_profile_6db: Any, **line: Any
) -> tuple[bool, str | None]:
    """Whether the reflector's 6 dB length along the line is above twice the -6 dB beam width, with a note."""
    w6, _ = beam_width_at(z, drop_db=6.0, attrs=amp.attrs, beam_profile=beam_profile_6db)
    if w6 is None:
        return False, None
    l6 = drop_length(amp, ind, drop_db=6.0, **line).length_mm
    if l6 is None or l6 <= 2.0 * w6:
        return False, None
    return True, (
        f"along {line.get('axis') if line.get('line') is None else 'the line'} the reflector extends beyond the beam "
        f"(6 dB drop length on the line through the peak {l6:.1f} mm, more than twice the -6 dB beam width "
        f"{w6:.1f} mm): the 20 dB beam correction, made for edges smaller than the beam, would undersize it there "
        "(by roughly 0.15 to 0.45 of the -20 dB beam width); no beam-corrected 20 dB length, the 6 dB drop gives "
        "the size along it"
    )


def _width_spread(z: float, drop_db: float, attrs: Mapping[str, Any], beam_profile: Any
                  ) -> tuple[float, str]:
    """Half the spread of the beam width over the probe's band (an estimate of the model's error), with a note."""
    rng, _ = point_reflector_range_at(z, drop_db=drop_db, attrs=attrs, beam_profile=beam_profile)
    spread = 0.0 if rng is None else 0.5 * (rng[1] - rng[0])
    if beam_profile is not None and spread == 0.0:
        return 0.0, (f"{drop_db:g} dB beam-corrected lengths: the uncertainty is the sampling of the measured "
                     "length only; the measured beam profile's own error is not in it")
    return spread, (
        f"{drop_db:g} dB beam-corrected lengths: the uncertainty is the sampling of the measured length plus half "
        "the spread of the beam width over the probe's band, an estimate, not a bound; it leaves out the probe's "
        "tolerances, the reflector's shape and tilt, and side lobes"
    )


def beam_corrected_length(
    amplitude_map: xr.DataArray,
    indication: Indication,
    *,
    drop_db: float = 20.0,
    depth_mm: float | None = None,
    beam_profile: Any = None,
    axis: str = "scan",
    line: Any = None,
    edge: str = "first",
    step_mm: float | None = None,
    beam_profile_6db: Any = None,
) -> BeamCorrectedLength:
    """The `drop_db` drop length minus the beam width at the same drop (the 20 dB drop method).

    The beam width is that of a point reflector (:func:`beam_width_at`), so
    the correction holds for reflectors whose edges are smaller than the
    beam. Along a line on which the reflector extends beyond the beam (its
    6 dB length above twice the -6 dB beam width: a plate, or the long axis
    of an elongated reflector) the echo falls by `drop_db` before the beam's
    edge reaches the reflector's and the corrected length would be too
    short: none is given there (``extends_beyond_beam``), the 6 dB length is
    the size along that line.

    Parameters
    ----------
    amplitude_map : xarray.DataArray (scan, index)
        Amplitude in %FSH, whose attrs carry the probe (``probe_diameter_mm``,
        ``probe_frequency_mhz``, ``velocity_m_s``, ``probe_bandwidth``,
        ``beam_angle_deg``) unless `beam_profile` is given.
    indication : Indication
        The indication.
    drop_db : float, default 20
        Drop from the peak (the beam width is taken at the same drop).
    depth_mm : float, optional
        Depth of the indication (default: its depth at the peak).
    beam_profile : mapping or (depths, widths), optional
        Measured beam widths at this drop, mm, by depth.
    axis, line, edge, step_mm
        As in :func:`drop_length`.
    beam_profile_6db : mapping or (depths, widths), optional
        Measured -6 dB beam widths, for the test of a reflector extending
        beyond the beam (default: the model).

    Returns
    -------
    BeamCorrectedLength
        Its uncertainty is the sampling of the drop length plus half the
        spread of the beam width over the probe's band: an estimate (noted).
    """
    amp = _drop_map(amplitude_map, drop_db)
    walk = dict(axis=axis, line=line, edge=edge, step_mm=step_mm)
    raw = drop_length(amp, indication, drop_db=drop_db, **walk)
    notes = list(raw.notes)
    z = indication.depth_mm if depth_mm is None else finite_float("depth_mm", depth_mm)
    if z is None:
        notes.append(f"no depth for indication {indication.id}: the {raw.method} length cannot be beam-corrected")
        return BeamCorrectedLength(raw, None, None, None, False, tuple(notes))
    width, wnotes = beam_width_at(z, drop_db=float(drop_db), attrs=amplitude_map.attrs, beam_profile=beam_profile)
    notes.extend(wnotes)
    if width is None or raw.length_mm is None:
        return BeamCorrectedLength(raw, width, None, None, False, tuple(notes))
    spread, unc_note = _width_spread(z, float(drop_db), amplitude_map.attrs, beam_profile)
    corrected = raw.length_mm - width
    unc = (raw.uncertainty_mm if raw.uncertainty_mm is not None else 0.0) + spread
    notes.append(unc_note)
    if corrected <= unc:
        notes.append(
            f"{raw.method} length along {raw.direction} ({raw.length_mm:.2f} mm) is not larger than the "
            f"beam width ({width:.2f} mm) within {unc:.2f} mm: not larger than the beam"
        )
        return BeamCorrectedLength(raw, width, None, unc, True, tuple(notes))
    extended, why = _extends_beyond_beam(amp, indication, z, beam_profile_6db, **walk)
    if extended:
        notes.append(why)
        return BeamCorrectedLength(raw, width, None, unc, False, tuple(notes), extends_beyond_beam=True)
    return BeamCorrectedLength(raw, width, float(corrected), unc, False, tuple(notes))
