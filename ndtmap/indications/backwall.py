"""The back-wall reference of a sizing run: level and depth of the back wall, and the back-wall-loss map.

A step of :func:`ndtmap.size_indications`. The back wall is given as a
level in %FSH or as a back-wall amplitude map (its nominal level is then
:func:`ndtmap.scans.nominal_backwall_fsh` over the sound area, outside the
indications), its depth as a number or a depth map (median over the same
sound area; default the map's ``part_thickness_mm``). The loss map of the
back-wall-loss indications is :func:`ndtmap.scans.backwall_loss_db` of the
back-wall amplitude against that nominal level, unless one is given.

One reflector, one record (:func:`loss_under_flaws`, :func:`merge_loss_into_flaws`):
a flaw echo that shadows the back wall carries the back-wall loss under it
(``backwall_loss_db``: the largest loss over the flaw's detected region,
its median in a note); a back-wall-loss region under a flaw echo is that
flaw's shadow and is not reported again as a back-wall-loss indication;
loss away from any flaw echo stays a back-wall-loss indication of its own.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import xarray as xr
from scipy import ndimage

from ndtmap._shared import mapgeom as mg
from ndtmap._shared.validate import finite_float, positive_float
from ndtmap.errors import CalibrationError, ParameterError
from ndtmap.indications.detection import Indication
from ndtmap.indications.dgs import backwall_reference_fsh, sound_region_mask
from ndtmap.indications.flags import is_saturated
from ndtmap.indications.options import LossOptions
from ndtmap.scans import backwall_loss_db

__all__ = ["BackwallReference", "backwall_reference", "loss_map_db", "loss_under_flaws", "merge_loss_into_flaws"]

#: Positions by which the flaw regions are grown when the loss regions under them are merged into their records.
MERGE_GROW = 2


@dataclass(frozen=True, eq=False)
class BackwallReference:
    """The back wall as the sizing sees it.

    Attributes
    ----------
    level_fsh : float or None
        Back-wall reference level, %FSH (the DGS reference; None: not given).
    depth_mm : float or None
        Back-wall depth, mm (DGS, repeat echoes).
    amplitude_map : xarray.DataArray or None
        The back-wall amplitude map when one was given.
    dgs_problem : str or None
        Why the reference cannot serve DGS (a saturated back wall).
    """

    level_fsh: float | None = None
    depth_mm: float | None = None
    amplitude_map: xr.DataArray | None = None
    dgs_problem: str | None = None


def _median_depth(depth: Any, name: str, amp: xr.DataArray, exclude: Sequence[Indication]) -> float | None:
    if depth is None:
        return None
    if isinstance(depth, xr.DataArray):
        dm = mg.as_map(name, depth)
        mg.check_same_grid(name, dm, "amplitude_map", amp)
        keep = sound_region_mask(dm, exclude=exclude, name=name)
        if not keep.any():
            raise CalibrationError(f"`{name}` has no valid value in the sound region")
        return float(np.median(dm.values[keep]))
    return positive_float(name, depth)


def backwall_reference(
    amp: xr.DataArray,
    backwall: float | xr.DataArray | None,
    backwall_depth_mm: float | xr.DataArray | None,
    *,
    exclude: Sequence[Indication],
    attrs: Mapping[str, Any],
) -> BackwallReference:
    """The back-wall reference of a sizing run.

    Parameters
    ----------
    amp : xarray.DataArray (scan, index)
        The amplitude map (maps given must be on its positions).
    backwall : float or xarray.DataArray or None
        Back-wall level in %FSH, or a back-wall amplitude map.
    backwall_depth_mm : float or xarray.DataArray or None
        Back-wall depth, mm, or a back-wall depth map; default the map's
        ``part_thickness_mm`` attribute.
    exclude : sequence of Indication
        The indications, left out of the sound area (grown by 2 positions).
    attrs : mapping
        The map's attributes.

    Returns
    -------
    BackwallReference
    """
    bw_map = None
    level = None
    if isinstance(backwall, xr.DataArray):
        bw_map = mg.as_map("backwall", backwall)
        mg.check_same_grid("backwall", bw_map, "amplitude_map", amp)
        level = backwall_reference_fsh(bw_map, exclude=exclude)
    elif backwall is not None:
        level = finite_float("backwall", backwall)
        if level <= 0:
            raise CalibrationError(f"`backwall` must be greater than 0 %FSH, got {backwall!r}")
    problem = None
    full_scale = mg.map_attr(attrs, "digitiser_full_scale_fsh", 100.0)
    if level is not None and is_saturated(level, full_scale_fsh=full_scale):
        problem = (
            f"back-wall reference {level:.1f} %FSH is saturated: no DGS size (take the back wall at lower gain "
            "and give `backwall_gain_reduction_db`)"
        )
    if backwall_depth_mm is None:
        depth = mg.map_attr(attrs, "part_thickness_mm")
    else:
        depth = _median_depth(backwall_depth_mm, "backwall_depth_mm", amp, exclude)
    return BackwallReference(level_fsh=level, depth_mm=depth, amplitude_map=bw_map, dgs_problem=problem)


def loss_map_db(amp: xr.DataArray, loss: LossOptions | None, backwall: BackwallReference) -> xr.DataArray | None:
    """The back-wall-loss map, dB: for the loss indications and the ``backwall_loss_db`` of the flaw records.

    The given ``loss.loss_map``, else :func:`ndtmap.scans.backwall_loss_db`
    of the back-wall amplitude map against the reference level; None
    without `loss` when there is no back-wall amplitude map.

    Raises
    ------
    ParameterError
        When `loss` is given with neither a loss map nor a back-wall amplitude map.
    """
    if loss is None:
        if backwall.amplitude_map is None or backwall.level_fsh is None:
            return None
        return backwall_loss_db(backwall.amplitude_map, backwall.level_fsh)
    if loss.loss_map is not None:
        loss_map = mg.as_map("loss.loss_map", loss.loss_map)
        mg.check_same_grid("loss.loss_map", loss_map, "amplitude_map", amp)
        return loss_map
    if backwall.amplitude_map is None:
        raise ParameterError(
            "back-wall-loss indications (`loss`) need `loss.loss_map` or a back-wall amplitude map as `backwall`"
        )
    return backwall_loss_db(backwall.amplitude_map, backwall.level_fsh)


def loss_under_flaws(loss_map: xr.DataArray, flaws: Sequence[Indication]) -> dict[int, tuple[float, str]]:
    """The back-wall loss under each flaw indication: (largest loss over its detected region in dB, a note).

    The largest is the record's ``backwall_loss_db`` (``inf`` where the back
    wall vanished); the note gives it with the median over the region.
    Flaws without a known loss under them are left out.
    """
    values = np.asarray(loss_map.values, dtype=np.float64)
    out: dict[int, tuple[float, str]] = {}
    for ind in flaws:
        if ind.region.shape != values.shape:
            continue
        under = values[ind.region]
        under = under[~np.isnan(under)]
        if not under.size:
            continue
        largest, median = float(under.max()), float(np.median(under))
        text = "the back wall vanished" if np.isinf(largest) else f"largest {largest:.1f} dB"
        out[ind.id] = (largest, f"back-wall loss under this indication: {text} (median {median:.1f} dB) over its "
                                f"{under.size} positions (backwall_loss_db is the largest)")
    return out


def merge_loss_into_flaws(
    loss_map: xr.DataArray, loss_inds: Sequence[Indication], flaws: Sequence[Indication]
) -> tuple[xr.DataArray, dict[int, list[str]]]:
    """The loss map without the loss regions that flaw echoes explain, and the notes for the flaws' records.

    A back-wall-loss region that overlaps a flaw indication and lies within
    the flaw regions grown by :data:`MERGE_GROW` positions is that flaw's
    shadow: it is set to 0 dB on the returned map (so that it is not detected
    again) and the flaw's record says so. A loss region that reaches further
    than that is not merged: the loss extends beyond the flaw echo (a larger
    or tilted reflector), so it stays a back-wall-loss indication with its
    own size, and the flaw's record says that too.

    Returns
    -------
    (loss_map, notes)
        The map to detect the remaining loss indications on, and notes by flaw id.
    """
    values = np.array(loss_map.values, dtype=np.float64)
    flaws = [f for f in flaws if f.kind == "amplitude" and f.region.shape == values.shape]
    grown = {f.id: ndimage.binary_dilation(f.region, structure=mg.STRUCTURE_8, iterations=MERGE_GROW)
             for f in flaws}
    notes: dict[int, list[str]] = {}
    for loss in loss_inds:
        under = [f.id for f in flaws if np.any(loss.region & f.region)]
        if not under:
            continue
        beyond = loss.region & ~np.logical_or.reduce([grown[fid] for fid in under])
        area = f", {loss.area_mm2:.0f} mm2" if loss.area_mm2 is not None else ""
        for fid in under:
            notes.setdefault(fid, []).append(
                f"the back-wall-loss region under it ({loss.detection_level}, {loss.n_positions} positions{area}) "
                + ("reaches beyond its echo region: it is also reported as a back-wall-loss indication with its own "
                   "size (the larger extent of this reflector may be that of the loss)" if beyond.any() else
                   "is its shadow: reported in this record, not as a separate back-wall-loss indication")
            )
        if not beyond.any():
            values[loss.region] = 0.0
    return loss_map.copy(data=values), notes
