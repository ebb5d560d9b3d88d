"""The options of :func:`ndtmap.size_indications`, grouped by step.

Each group is a small frozen dataclass whose defaults are those of the
trade-neutral first run; give only the groups whose defaults you change::

    size_indications(amp, threshold_fsh=20.0, depth_map=depth,
                     detection=DetectionOptions(min_positions=2),
                     sizing=SizingOptions(edge="outermost"))

* :class:`DetectionOptions`: which regions count as indications;
* :class:`LossOptions`: back-wall-loss indications (level, loss map);
* :class:`SizingOptions`: how lengths are walked, measured beam profiles;
* :class:`DgsOptions`: the DGS equivalent size;
* :class:`FlagOptions`: the ``low_snr`` and ``repeat_echo`` checks.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import xarray as xr

from ndtmap._shared.validate import finite_float, nonnegative_float, one_of, positive_float, positive_int
from ndtmap.errors import ParameterTypeError

__all__ = ["DetectionOptions", "LossOptions", "SizingOptions", "DgsOptions", "FlagOptions"]

EDGE_RULES = ("first", "outermost")
DGS_MODELS = ("auto", "far-field", "piston")


@dataclass(frozen=True)
class DetectionOptions:
    """Which detected regions are kept (see :func:`ndtmap.indications.detection.detect_indications`).

    Parameters
    ----------
    min_area_mm2 : float, default 0
        Regions with a smaller detected area are dropped, mm^2.
    min_positions : int, default 1
        Regions with fewer probe positions are dropped.
    bridge_missing : bool, default False
        Missing positions join the regions they touch for labelling.
    depth_step_mm : float, optional
        Largest depth step between neighbouring positions of one reflector
        (plan regions are split by depth); default from the pulse's depth
        resolution and the map's depth noise, ``math.inf``: no split (see
        :func:`ndtmap.indications.detection.detect_indications`).
    """

    min_area_mm2: float = 0.0
    min_positions: int = 1
    bridge_missing: bool = False
    depth_step_mm: float | None = None

    def __post_init__(self) -> None:
        object.__setattr__(self, "min_area_mm2", nonnegative_float("detection.min_area_mm2", self.min_area_mm2))
        object.__setattr__(self, "min_positions", positive_int("detection.min_positions", self.min_positions))
        object.__setattr__(self, "bridge_missing", bool(self.bridge_missing))


@dataclass(frozen=True, eq=False)
class LossOptions:
    """Back-wall-loss indications: where the back-wall echo drops by `threshold_db` or more.

    Parameters
    ----------
    threshold_db : float or None
        Detection level, dB of back-wall loss (> 0). None: no back-wall-loss
        indications; the loss map then only gives the ``backwall_loss_db``
        of the flaw records.
    loss_map : xarray.DataArray, optional
        Back-wall loss, dB, on the amplitude map's positions (as from
        :func:`ndtmap.scans.backwall_loss_map`). Default: computed from the
        back-wall amplitude map given as `backwall` with
        :func:`ndtmap.scans.backwall_loss_db` against its median over the
        sound area.
    merge : bool, default True
        One reflector, one record: a loss region under a flaw echo is that
        flaw's shadow and goes into the flaw's record (``backwall_loss_db``
        and a note), not into a record of its own; only the loss positions
        away from flaw echoes are back-wall-loss indications. False reports
        every loss region on its own, as before.
    """

    threshold_db: float | None
    loss_map: xr.DataArray | None = None
    merge: bool = True

    def __post_init__(self) -> None:
        if self.threshold_db is not None:
            object.__setattr__(self, "threshold_db", positive_float("loss.threshold_db", self.threshold_db))
        object.__setattr__(self, "merge", bool(self.merge))
        if self.loss_map is not None and not isinstance(self.loss_map, xr.DataArray):
            raise ParameterTypeError(
                f"`loss.loss_map` must be an xarray.DataArray of dB or None, got {type(self.loss_map).__name__}"
            )


@dataclass(frozen=True)
class SizingOptions:
    """How the drop lengths are measured (see :mod:`ndtmap.indications.sizing`).

    Parameters
    ----------
    edge : {'first', 'outermost'}, default 'first'
        Walking rule of the lengths.
    beam_profile_6db, beam_profile_20db : mapping or (depths, widths), optional
        Measured -6 dB / -20 dB beam widths (mm) by depth, instead of the
        piston model.
    """

    edge: str = "first"
    beam_profile_6db: Any = None
    beam_profile_20db: Any = None

    def __post_init__(self) -> None:
        one_of("sizing.edge", self.edge, EDGE_RULES)


@dataclass(frozen=True)
class DgsOptions:
    """The DGS equivalent size (see :func:`ndtmap.indications.dgs.equivalent_fbh_diameter`).

    Parameters
    ----------
    model : {'auto', 'far-field', 'piston'}, default 'auto'
        DGS relation.
    attenuation_db_per_mm : float, optional
        One-way attenuation, dB/mm; default the map's
        ``attenuation_db_per_mm`` attribute, else 0.
    transfer_correction_db : float, default 0
        Transfer correction, dB.
    backwall_gain_reduction_db : float, default 0
        Gain by which the back-wall reference was taken lower than the
        indication, dB.
    """

    model: str = "auto"
    attenuation_db_per_mm: float | None = None
    transfer_correction_db: float = 0.0
    backwall_gain_reduction_db: float = 0.0

    def __post_init__(self) -> None:
        one_of("dgs.model", self.model, DGS_MODELS)
        if self.attenuation_db_per_mm is not None:
            object.__setattr__(self, "attenuation_db_per_mm",
                               nonnegative_float("dgs.attenuation_db_per_mm", self.attenuation_db_per_mm))
        object.__setattr__(self, "transfer_correction_db",
                           finite_float("dgs.transfer_correction_db", self.transfer_correction_db))
        object.__setattr__(self, "backwall_gain_reduction_db",
                           finite_float("dgs.backwall_gain_reduction_db", self.backwall_gain_reduction_db))


@dataclass(frozen=True)
class FlagOptions:
    """Thresholds of the ``low_snr`` and ``repeat_echo`` flags (see :mod:`ndtmap.indications.flags`).

    Parameters
    ----------
    min_snr_db : float, default 6
        ``low_snr`` below this peak-to-noise ratio, dB.
    repeat_tolerance_mm, repeat_tolerance_fraction : float, default 2 mm and 0.03
        Depth tolerance of ``repeat_echo``: ``max(mm, fraction * depth)``.
    """

    min_snr_db: float = 6.0
    repeat_tolerance_mm: float = 2.0
    repeat_tolerance_fraction: float = 0.03

    def __post_init__(self) -> None:
        object.__setattr__(self, "min_snr_db", finite_float("flags.min_snr_db", self.min_snr_db))
        object.__setattr__(self, "repeat_tolerance_mm",
                           nonnegative_float("flags.repeat_tolerance_mm", self.repeat_tolerance_mm))
        object.__setattr__(self, "repeat_tolerance_fraction",
                           nonnegative_float("flags.repeat_tolerance_fraction", self.repeat_tolerance_fraction))


def checked_options(name: str, value: Any, cls: type) -> Any:
    """`value` when it is a `cls`, the defaults for None, else ParameterTypeError naming `name`."""
    if value is None:
        return cls()
    if not isinstance(value, cls):
        raise ParameterTypeError(f"`{name}` must be {cls.__name__} or None, got {type(value).__name__}")
    return value
