"""The DGS equivalent size of one amplitude indication, where DGS applies.

A step of :func:`ndtmap.size_indications`. An equivalent flat-bottom-hole
size describes reflectors smaller than the beam; for one much larger than
the beam (both 6 dB lengths above twice the -6 dB beam width) it would
understate the reflector, so none is given (the drop sizes are the
measurement then). Every reason for a missing size is stated in a note.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

from ndtmap._shared import mapgeom as mg
from ndtmap.indications.amplitude_sizing import AmplitudeSizes, finite_or_none
from ndtmap.indications.backwall import BackwallReference
from ndtmap.indications.detection import Indication
from ndtmap.indications.dgs import equivalent_fbh_diameter
from ndtmap.indications.options import DgsOptions
from ndtmap.indications.sizing import ASSUMED_BANDWIDTH

__all__ = ["DgsInputs", "EquivalentSize", "dgs_equivalent_size"]

_PROBE_KEYS = ("probe_diameter_mm", "probe_frequency_mhz", "velocity_m_s")


@dataclass(frozen=True)
class DgsInputs:
    """What the DGS relation needs from the map's attributes and the options.

    Attributes
    ----------
    probe : dict or None
        ``probe_diameter_mm``, ``probe_frequency_mhz``, ``velocity_m_s``
        (None when any is missing).
    bandwidth : float
        The probe's fractional -6 dB bandwidth (``probe_bandwidth``, else
        :data:`ndtmap.indications.sizing.ASSUMED_BANDWIDTH`, noted): the
        piston model inside the near field averages over it.
    attenuation_db_per_mm : float
        One-way attenuation (the option, else the map's attribute, else 0).
    beam_angle_rad : float
    full_scale_fsh : float
        The digitiser full scale, %FSH.
    options : DgsOptions
    """

    probe: dict[str, float] | None
    attenuation_db_per_mm: float
    beam_angle_rad: float
    full_scale_fsh: float
    options: DgsOptions
    bandwidth: float = ASSUMED_BANDWIDTH
    bandwidth_assumed: bool = True

    @classmethod
    def from_attrs(cls, attrs: Mapping[str, Any], options: DgsOptions) -> DgsInputs:
        """Read the probe, attenuation, beam angle and full scale from a map's attributes."""
        probe = {k: mg.map_attr(attrs, k) for k in _PROBE_KEYS}
        alpha = options.attenuation_db_per_mm
        bw = mg.map_attr(attrs, "probe_bandwidth")
        usable = bw is not None and 0.0 <= bw <= 1.5
        return cls(
            probe=probe if all(v is not None for v in probe.values()) else None,
            attenuation_db_per_mm=alpha if alpha is not None else mg.map_attr(attrs, "attenuation_db_per_mm", 0.0),
            beam_angle_rad=math.radians(mg.map_attr(attrs, "beam_angle_deg", 0.0) or 0.0),
            full_scale_fsh=mg.map_attr(attrs, "digitiser_full_scale_fsh", 100.0),
            options=options,
            bandwidth=float(bw) if usable else ASSUMED_BANDWIDTH,
            bandwidth_assumed=not usable,
        )


@dataclass(frozen=True)
class EquivalentSize:
    """The DGS result of one indication: ``ers_mm``, ``ers_method``, ``ers_ratio_db`` (None where not given)."""

    ers_mm: float | None = None
    ers_method: str | None = None
    ers_ratio_db: float | None = None
    flags: tuple[str, ...] = ()
    notes: tuple[str, ...] = ()


def _why_not(ind: Indication, backwall: BackwallReference, inputs: DgsInputs) -> str | None:
    """The reason no DGS size can be computed, or None when it can."""
    if backwall.dgs_problem is not None:
        return backwall.dgs_problem
    if inputs.probe is None:
        return "no DGS size: the map lacks probe_diameter_mm, probe_frequency_mhz or velocity_m_s"
    if backwall.depth_mm is None:
        return "no DGS size: give `backwall_depth_mm` (or part_thickness_mm in the map's attrs)"
    if ind.peak_fsh is None or ind.peak_fsh <= 0 or ind.depth_mm <= 0:
        return "no DGS size: no positive peak amplitude or depth"
    return None


def dgs_equivalent_size(
    ind: Indication, sizes: AmplitudeSizes, *, backwall: BackwallReference, inputs: DgsInputs
) -> EquivalentSize:
    """The DGS equivalent size of an amplitude indication, or the reason there is none.

    Parameters
    ----------
    ind : Indication
    sizes : AmplitudeSizes
        Its drop sizes (the beam-size test).
    backwall : BackwallReference
        The back-wall reference level and depth.
    inputs : DgsInputs

    Returns
    -------
    EquivalentSize
        With the ``near_field`` flag where the size was found inside 3
        near-field lengths (by the broadband piston model of a hole of finite
        size, unless the far-field relation was asked for).
    """
    z = ind.depth_mm
    if backwall.level_fsh is None:
        return EquivalentSize(notes=("no back-wall reference: no DGS size",))
    if z is None:
        return EquivalentSize()
    if sizes.much_larger_than_beam():
        return EquivalentSize(ers_method="not applicable", notes=(
            f"no DGS equivalent size: the reflector is much larger than the beam (6 dB lengths above twice the "
            f"-6 dB beam width, {sizes.beam_width_6db_mm:.1f} mm); the 6 dB drop sizes describe it",
        ))
    problem = _why_not(ind, backwall, inputs)
    if problem is not None:
        return EquivalentSize(notes=(problem,))
    cos = math.cos(inputs.beam_angle_rad)
    opts = inputs.options
    res = equivalent_fbh_diameter(
        ind.peak_fsh,
        z / cos,
        backwall_fsh=backwall.level_fsh,
        backwall_sound_path_mm=backwall.depth_mm / cos,
        probe_diameter_mm=inputs.probe["probe_diameter_mm"],
        frequency_mhz=inputs.probe["probe_frequency_mhz"],
        velocity_m_s=inputs.probe["velocity_m_s"],
        attenuation_db_per_mm=inputs.attenuation_db_per_mm,
        transfer_correction_db=opts.transfer_correction_db,
        backwall_gain_reduction_db=opts.backwall_gain_reduction_db,
        model=opts.model,
        full_scale_fsh=inputs.full_scale_fsh,
        bandwidth=inputs.bandwidth,
    )
    notes = list(res.notes)
    if res.method == "piston" and inputs.bandwidth_assumed:
        notes.append(f"the map carries no usable probe_bandwidth: the DGS piston model assumes "
                     f"{ASSUMED_BANDWIDTH:g}")
    if inputs.beam_angle_rad > 0:
        notes.append("DGS with an angle beam: the back-wall reference of a straight-beam relation was used; "
                     "use a reference block for angle-beam DGS")
    return EquivalentSize(
        ers_mm=finite_or_none(res.ers_mm),
        ers_method=res.method,
        ers_ratio_db=finite_or_none(res.ratio_db),
        flags=("near_field",) if res.near_field else (),
        notes=tuple(notes),
    )
