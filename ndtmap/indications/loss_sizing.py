"""Sizing of one back-wall-loss indication: lengths and area where the loss reaches the detection level.

A step of :func:`ndtmap.size_indications`. A lamination or other planar
reflector that shadows the back wall is sized on the back-wall-loss map by
the level it was detected at (:func:`ndtmap.indications.sizing.level_length`
and :func:`~ndtmap.indications.sizing.level_area` in dB).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import xarray as xr

from ndtmap.indications.detection import Indication
from ndtmap.indications.sizing import AreaResult, LengthResult, level_area, level_length

__all__ = ["LossSizes", "size_loss_indication"]

AXES = ("scan", "index")


@dataclass(frozen=True)
class LossSizes:
    """The sizes of one back-wall-loss indication at `level_db`, with flags and notes."""

    level_db: float
    lengths: dict[str, LengthResult]
    area: AreaResult
    flags: tuple[str, ...] = ()
    notes: tuple[str, ...] = ()

    @property
    def sizing_method(self) -> str:
        return f"back-wall loss >= {self.level_db:g} dB"

    def ends_mm(self, axis: str) -> tuple[float, float] | None:
        """Positions (mm along `axis`) of the two ends of the length along `axis`."""
        r = self.lengths[axis]
        if r.start_mm is None or r.end_mm is None:
            return None
        k = AXES.index(axis)
        return float(r.start_mm[k]), float(r.end_mm[k])


def size_loss_indication(loss_map: xr.DataArray, ind: Indication, *, level_db: float, edge: str) -> LossSizes:
    """Lengths along both axes through the peak and the area where loss >= `level_db`.

    Parameters
    ----------
    loss_map : xarray.DataArray (scan, index)
        Back-wall loss, dB.
    ind : Indication
        A back-wall-loss indication of that map.
    level_db : float
        The level, dB of loss (the detection level).
    edge : {'first', 'outermost'}
        Walking rule of the lengths.

    Returns
    -------
    LossSizes
    """
    flags: list[str] = []
    notes: list[str] = []
    lengths = {}
    for axis in AXES:
        r = level_length(loss_map, ind, level_fsh=level_db, axis=axis, edge=edge)
        lengths[axis] = r
        notes.extend(n.replace("fixed level", "back-wall loss").replace(" %FSH", " dB") for n in r.notes)
        if r.lower_bound:
            flags.append("at_scan_edge")
        if r.data_gap:
            flags.append("data_gap")
    area = level_area(loss_map, ind, level_fsh=level_db)
    if area.lower_bound or ind.touches_edge:
        flags.append("at_scan_edge")
    if area.data_gap or ind.missing_adjacent > 0:
        flags.append("data_gap")
    if ind.backwall_loss_db is not None and math.isinf(ind.backwall_loss_db):
        notes.append("the back wall vanished completely at the peak (total loss)")
    notes.append("sized by the back-wall-loss level (lengths and area where loss >= the detection level)")
    return LossSizes(level_db, lengths, area, tuple(flags), tuple(notes))
