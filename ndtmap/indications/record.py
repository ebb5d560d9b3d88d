"""The indication record: one sized, flagged (and optionally screened) indication.

:func:`ndtmap.indications.pipeline.size_indications` makes one
:class:`IndicationRecord` per indication, once, with everything its consumers
need: the values of the indication table (:data:`RECORD_KEYS`), and for
figures the detected and sized regions, the peak's array index, the sizing
level actually used and the end points of the two lengths as measured, so
that nothing has to be parsed back from the prose or measured again.

:meth:`IndicationRecord.to_dict` gives the plain JSON record of
``ndtmap indications --format json`` (keys :data:`RECORD_KEYS`, then
``total_backwall_loss``, ``screening`` and ``exceeded_rules`` when they
apply). :func:`largest_indication` is the one rule for "the largest
indication" of a list.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Iterator, Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ndtmap.errors import ParameterTypeError
from ndtmap.grid.provenance import jsonable

__all__ = ["RECORD_KEYS", "OPTIONAL_KEYS", "NESTED_KEYS", "IndicationRecord", "largest_indication"]

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
    "length_mm",
    "length_uncertainty_mm",
    "length_orientation_deg",
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
    "outline_mm",
    "flags",
    "notes",
)

#: Keys of :data:`RECORD_KEYS` that are not flat values (left out of CSV tables).
NESTED_KEYS: tuple[str, ...] = ("outline_mm",)

#: Keys a record has only where they apply, in this order after :data:`RECORD_KEYS`:
#: ``total_backwall_loss`` (True, where the back wall vanished completely), ``screening`` and
#: ``exceeded_rules`` (when the indications were screened).
OPTIONAL_KEYS: tuple[str, ...] = ("total_backwall_loss", "screening", "exceeded_rules")


def _read_only(region: Any) -> np.ndarray | None:
    if region is None:
        return None
    out = np.array(region, dtype=bool)
    out.setflags(write=False)
    return out


@dataclass(frozen=True, kw_only=True)
class IndicationRecord(Mapping[str, Any]):
    """One sized indication, as made by :func:`ndtmap.size_indications`.

    The attributes named like the keys of :data:`RECORD_KEYS` hold the values
    of the indication table (mm, %FSH, dB, mm^2 as their names say; None
    where a value is missing): peak position and depth, peak amplitude and
    reference level, 6 dB (or back-wall-loss level) lengths and area with
    their uncertainties, beam-corrected 20 dB lengths, beam widths, the DGS
    equivalent size, extents of the detected region, ``flags`` (from
    :data:`ndtmap.indications.flags.FLAG_MEANINGS`) and ``notes``. Read them
    as attributes (``rec.area_mm2``).

    Attributes
    ----------
    total_backwall_loss : bool
        The back wall vanished completely at the peak (``backwall_loss_db``
        is then None).
    screening : str or None
        The screening statement ("within rules", "exceeds rule <name>" ...)
        when the indications were screened.
    exceeded_rules : tuple of str or None
        Names of the rules this indication exceeds, when screened.
    peak_index : tuple of int
        (scan, index) array index of the peak in the map it was found on.
    detected_region : numpy.ndarray of bool
        The detected region on the map's (scan, index) cells (read-only).
    sized_region : numpy.ndarray of bool or None
        The region the area was measured on: connected to the peak at or
        above the sizing level (read-only).
    sizing_level_fsh : float or None
        Level of the drop sizing, %FSH (half the peak for the 6 dB drop);
        amplitude indications.
    sizing_level_db : float or None
        Back-wall-loss level the lengths and area were measured at, dB;
        back-wall-loss indications.
    length_scan_ends_mm, length_index_ends_mm : tuple of float or None
        Positions (mm along the scan / index axis) of the two ends of the
        outline's extents.
    edge_rule : {'first', 'outermost'}
        Walking rule of the lengths (:mod:`ndtmap.indications.sizing`).
    outline_polygons : tuple of numpy.ndarray (n, 2)
        The sized outline (:mod:`ndtmap.indications.outline`): closed loops
        of (scan_mm, index_mm), outer boundaries counter-clockwise, holes
        clockwise (read-only); ``length_scan_mm``, ``length_index_mm``,
        ``length_mm``, ``length_orientation_deg`` and ``area_mm2`` are its
        extents, largest dimension and its direction, and enclosed area.

    Notes
    -----
    The record is also a read-only mapping over :meth:`to_dict`'s keys, in
    the manner of scikit-image's ``RegionProperties``: ``rec["area_mm2"]``,
    ``rec.get("screening")`` and ``"screening" in rec`` give the JSON
    record's values, so code written for the plain dicts of earlier releases
    keeps working. New code reads attributes.

    Examples
    --------
    >>> import numpy as np, xarray as xr
    >>> from ndtmap.indications import size_indications
    >>> a = np.full((20, 20), 2.0); a[5:15, 6:12] = 80.0
    >>> m = xr.DataArray(a, dims=("scan", "index"), coords={"scan": np.arange(20.0), "index": np.arange(20.0)})
    >>> rec = size_indications(m, threshold_fsh=20)[0]
    >>> round(rec.area_mm2, 2), rec["area_mm2"] == rec.area_mm2, rec.sizing_level_fsh
    (59.88, True, 40.0)
    >>> [round(e, 2) for e in rec.length_scan_ends_mm]  # 40 %FSH lies 0.49 of the way from 80 to 2
    [4.49, 14.51]
    >>> list(rec.to_dict())[:3]
    ['id', 'kind', 'scan_mm']
    """

    id: int
    kind: str
    scan_mm: float
    index_mm: float
    depth_mm: float | None = None
    depth_min_mm: float | None = None
    depth_max_mm: float | None = None
    peak_fsh: float | None = None
    peak_db: float | None = None
    reference_fsh: float | None = None
    backwall_loss_db: float | None = None
    length_scan_mm: float | None = None
    length_scan_uncertainty_mm: float | None = None
    length_index_mm: float | None = None
    length_index_uncertainty_mm: float | None = None
    length_mm: float | None = None
    length_uncertainty_mm: float | None = None
    length_orientation_deg: float | None = None
    area_mm2: float | None = None
    area_uncertainty_mm2: float | None = None
    sizing_method: str
    length_scan_20db_mm: float | None = None
    length_index_20db_mm: float | None = None
    length_scan_20db_raw_mm: float | None = None
    length_index_20db_raw_mm: float | None = None
    length_20db_uncertainty_mm: float | None = None
    beam_width_6db_mm: float | None = None
    beam_width_20db_mm: float | None = None
    ers_mm: float | None = None
    ers_method: str | None = None
    ers_ratio_db: float | None = None
    scan_min_mm: float
    scan_max_mm: float
    index_min_mm: float
    index_max_mm: float
    n_positions: int
    detected_area_mm2: float | None = None
    detection_level: str
    flags: tuple[str, ...] = ()
    notes: tuple[str, ...] = ()
    total_backwall_loss: bool = False
    screening: str | None = None
    exceeded_rules: tuple[str, ...] | None = None
    peak_index: tuple[int, int]
    detected_region: np.ndarray = field(compare=False, repr=False)
    sized_region: np.ndarray | None = field(default=None, compare=False, repr=False)
    sizing_level_fsh: float | None = None
    sizing_level_db: float | None = None
    length_scan_ends_mm: tuple[float, float] | None = None
    length_index_ends_mm: tuple[float, float] | None = None
    edge_rule: str = "first"
    outline_polygons: tuple[np.ndarray, ...] = field(default=(), compare=False, repr=False)

    def __post_init__(self) -> None:
        object.__setattr__(self, "flags", tuple(self.flags))
        object.__setattr__(self, "notes", tuple(self.notes))
        if self.exceeded_rules is not None:
            object.__setattr__(self, "exceeded_rules", tuple(self.exceeded_rules))
        object.__setattr__(self, "peak_index", (int(self.peak_index[0]), int(self.peak_index[1])))
        object.__setattr__(self, "detected_region", _read_only(self.detected_region))
        object.__setattr__(self, "sized_region", _read_only(self.sized_region))
        object.__setattr__(self, "outline_polygons", tuple(_read_only_polygon(p) for p in self.outline_polygons))

    # ------------------------------------------------------------------ derived values
    @property
    def outline_mm(self) -> list[list[float]] | None:
        """The outer boundary of the sized outline as [[scan_mm, index_mm], ...] (first vertex not repeated).

        The largest outer loop of :attr:`outline_polygons`, vertices rounded to
        0.001 mm; None without an outline. Holes (subtracted in ``area_mm2``)
        are not listed.
        """
        outer = [p for p in self.outline_polygons if _signed_area(p) > 0]
        if not outer:
            return None
        return [[round(float(s), 3), round(float(i), 3)] for s, i in max(outer, key=_signed_area)]

    @property
    def length_axis(self) -> str | None:
        """``'scan'`` or ``'index'``: the axis of the longer extent (scan on a tie)."""
        lengths = [v for v in (self.length_scan_mm, self.length_index_mm) if v is not None and math.isfinite(v)]
        if not lengths:
            return None
        return "scan" if self.length_scan_mm == max(lengths) else "index"

    @property
    def length_20db_mm(self) -> float | None:
        """The longer of the two beam-corrected 20 dB lengths, mm, if any."""
        lengths = [v for v in (self.length_scan_20db_mm, self.length_index_20db_mm)
                   if v is not None and math.isfinite(v)]
        return max(lengths) if lengths else None

    # ------------------------------------------------------------------ the JSON record
    def _keys(self) -> tuple[str, ...]:
        optional = (
            ("total_backwall_loss",) * bool(self.total_backwall_loss)
            + ("screening",) * (self.screening is not None)
            + ("exceeded_rules",) * (self.exceeded_rules is not None)
        )
        return RECORD_KEYS + optional

    def to_dict(self) -> dict[str, Any]:
        """The record as plain JSON values: keys :data:`RECORD_KEYS`, then those of :data:`OPTIONAL_KEYS` that apply.

        Floats are finite or None, sequences are lists; a new dict each call.
        """
        return {key: jsonable(getattr(self, key)) for key in self._keys()}

    def __getitem__(self, key: str) -> Any:
        """The value of `key` in :meth:`to_dict` (read-only; KeyError for a key the record does not have)."""
        if not isinstance(key, str) or key not in self._keys():
            raise KeyError(key)
        return jsonable(getattr(self, key))

    def __iter__(self) -> Iterator[str]:
        return iter(self._keys())

    def __len__(self) -> int:
        return len(self._keys())


def _signed_area(p: np.ndarray) -> float:
    x, y = p[:, 0], p[:, 1]
    return 0.5 * float(np.dot(x, np.roll(y, -1)) - np.dot(np.roll(x, -1), y))


def _read_only_polygon(p: Any) -> np.ndarray:
    out = np.array(p, dtype=np.float64).reshape(-1, 2)
    out.setflags(write=False)
    return out


def _largest_key(rec: IndicationRecord) -> tuple[float, float, int]:
    return (rec.length_mm or 0.0, rec.peak_fsh if rec.peak_fsh is not None else -math.inf, -rec.id)


def largest_indication(records: Iterable[IndicationRecord]) -> IndicationRecord | None:
    """The largest indication of a list, by one rule used everywhere (reports, the demonstration).

    The largest is the amplitude indication (not flagged ``repeat_echo``)
    with the largest dimension of its sized outline in any direction
    (:attr:`IndicationRecord.length_mm`); ties go to the
    higher peak amplitude, then to the lower id. Back-wall-loss indications,
    repeat echoes and indications without a measured length are not
    candidates.

    Parameters
    ----------
    records : iterable of IndicationRecord
        From :func:`ndtmap.size_indications` (or ``Analysis.indications``).

    Returns
    -------
    IndicationRecord or None
        None when no record qualifies.

    Raises
    ------
    ParameterTypeError
        When an item is not an IndicationRecord.

    Examples
    --------
    >>> import numpy as np, xarray as xr
    >>> from ndtmap.indications import size_indications
    >>> a = np.full((30, 30), 2.0); a[2:6, 2:20] = 90.0; a[10:25, 10:16] = 60.0
    >>> m = xr.DataArray(a, dims=("scan", "index"), coords={"scan": np.arange(30.0), "index": np.arange(30.0)})
    >>> recs = size_indications(m, threshold_fsh=20)
    >>> [(r.id, round(r.length_mm, 1)) for r in recs]  # the largest dimension: nearly the diagonal
    [(1, 18.3), (2, 15.8)]
    >>> largest_indication(recs).id
    1
    """
    best: IndicationRecord | None = None
    for k, rec in enumerate(records):
        if not isinstance(rec, IndicationRecord):
            raise ParameterTypeError(
                f"`records[{k}]` must be an IndicationRecord (from size_indications), got {type(rec).__name__}"
            )
        if rec.kind != "amplitude" or "repeat_echo" in rec.flags or rec.length_mm is None:
            continue
        if best is None or _largest_key(rec) > _largest_key(best):
            best = rec
    return best
