"""Sizing of one back-wall-loss indication: the outline where the loss reaches the detection level.

A step of :func:`ndtmap.size_indications`. A lamination or other planar
reflector that shadows the back wall is sized on the back-wall-loss map by
the boundary of the loss at the level it was detected at
(:func:`ndtmap.indications.sizing_methods.level_outline` in dB): its
extents, largest dimension and area.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import xarray as xr

from ndtmap.indications.detection import Indication
from ndtmap.indications.outline import SizedOutline
from ndtmap.indications.sizing_methods import level_outline

__all__ = ["LossSizes", "size_loss_indication"]

AXES = ("scan", "index")


@dataclass(frozen=True)
class LossSizes:
    """The sizes of one back-wall-loss indication at `level_db`, with flags and notes."""

    level_db: float
    outline: SizedOutline
    flags: tuple[str, ...] = ()
    notes: tuple[str, ...] = ()

    @property
    def sizing_method(self) -> str:
        return f"back-wall loss >= {self.level_db:g} dB"

    def ends_mm(self, axis: str) -> tuple[float, float] | None:
        """Positions (mm along `axis`) of the two ends of the outline's extent along `axis`."""
        return self.outline.scan_ends_mm if axis == "scan" else self.outline.index_ends_mm


def size_loss_indication(loss_map: xr.DataArray, ind: Indication, *, level_db: float, edge: str) -> LossSizes:
    """The outline where loss >= `level_db` (connected to the peak) and its sizes.

    Parameters
    ----------
    loss_map : xarray.DataArray (scan, index)
        Back-wall loss, dB.
    ind : Indication
        A back-wall-loss indication of that map.
    level_db : float
        The level, dB of loss (the detection level).
    edge : {'first', 'outermost'}
        Kept for the record (the outline needs no walking rule).

    Returns
    -------
    LossSizes
    """
    flags: list[str] = []
    outline = level_outline(loss_map.assign_attrs(units="dB"), ind, level_db=level_db)  # a loss map is in dB
    notes = [n.replace("fixed level", "back-wall loss") for n in outline.notes]
    if outline.lower_bound or ind.touches_edge:
        flags.append("at_scan_edge")
    if outline.data_gap or ind.missing_adjacent > 0:
        flags.append("data_gap")
    if ind.backwall_loss_db is not None and math.isinf(ind.backwall_loss_db):
        notes.append("the back wall vanished completely at the peak (total loss)")
    notes.append("sized by the back-wall-loss level (the outline where loss >= the detection level)")
    return LossSizes(level_db, outline, tuple(flags), tuple(notes))
