"""Recording levels that depend on depth: a DAC from reference reflectors or a DGS curve for an equivalent FBH.

A recording level says from which echo amplitude on an indication is
recorded. Where it depends on depth it is a curve of level against depth,
:class:`ndtmap.signal.DacCurve`, and a gate states its level in dB re that
curve (``Gate(..., threshold_db=0.0, reference="dac")``: 0 dB = 100 % of the
curve); the gate reads the maximum of ``A(t) / curve(t)`` over its window
(:mod:`ndtmap.gates.evaluate`).

* :class:`RecordingCurve`: what a procedure states, either DAC points
  (``kind='dac'``) or a DGS level (``kind='dgs'``: an equivalent flat-bottom
  hole diameter and the reference echo that sets the gain);
* :func:`dgs_recording_curve`: the level an FBH of the given diameter gives
  at each depth, from a back-wall echo or a reference FBH echo.

The DGS curve
-------------
Far field (sound paths at least ``near_field_factor`` near-field lengths
``N``, reference too): ``H_FBH / H_BW = pi d**2 z_BW / (2 lambda z**2)``
(Krautkramer, *Ultrasonic Testing of Materials*, ch. 5), or against a
reference FBH ``d_ref`` at ``z_ref``: ``(d / d_ref)**2 (z_ref / z)**2``.
Closer to the probe the echoes come from the broadband piston model: the
hole from :func:`ndtmap.physics.piston_field.disc_echo_relative` (the
field integrated over the hole's face, envelope peak over the probe's
band), the back wall from :func:`ndtmap.physics.beam.backwall_echo_relative`.
Attenuation ``alpha`` (dB/mm one way) lowers the level by
``2 alpha (z - z_ref)``; a transfer correction (dB, added to indication
amplitudes as in :func:`ndtmap.indications.dgs.equivalent_fbh_diameter`)
lowers it by that much. The curve is sampled densely enough that linear
interpolation in dB between its points stays within 0.05 dB of the model.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

from ndtmap._shared.validate import finite_float, float_in_range, nonnegative_float, one_of, positive_float
from ndtmap.errors import CalibrationError, ParameterError
from ndtmap.physics import beam
from ndtmap.physics.piston_field import disc_echo_relative
from ndtmap.signal import DAC_OUTSIDE_RULES, DacCurve, dac_curve

__all__ = ["RECORDING_KINDS", "DGS_REFERENCES", "RecordingCurve", "dgs_recording_curve"]

RECORDING_KINDS = ("dac", "dgs")
#: What sets the gain of a DGS recording level: the nominal back-wall echo or a reference flat-bottom hole.
DGS_REFERENCES = ("backwall", "fbh")


def _far_field_ratio(d: float, z: np.ndarray, zb: float, lam: float, ref_fbh: float | None) -> np.ndarray:
    if ref_fbh is None:
        return np.pi * d * d * zb / (2.0 * lam * z * z)  # Krautkramer ch. 5 (see the module notes)
    return (d / ref_fbh) ** 2 * (zb / z) ** 2


def _piston_ratio(d: float, z: np.ndarray, zb: float, probe: tuple[float, float, float, float],
                  ref_fbh: float | None) -> np.ndarray:
    dprobe, f, c, bw = probe
    hole = disc_echo_relative(z, d, dprobe, f, c, bandwidth=bw)
    if ref_fbh is None:
        ref = float(beam.backwall_echo_relative(zb, dprobe, f, c, bandwidth=bw))
    else:
        ref = float(disc_echo_relative(zb, ref_fbh, dprobe, f, c, bandwidth=bw))
    return np.asarray(hole, dtype=np.float64) / ref


def dgs_recording_curve(
    fbh_mm: float,
    *,
    reference_fsh: float,
    reference_depth_mm: float,
    depths_mm: Any,
    probe_diameter_mm: float,
    frequency_mhz: float,
    velocity_m_s: float,
    bandwidth: float = 0.0,
    reference_fbh_mm: float | None = None,
    attenuation_db_per_mm: float = 0.0,
    transfer_correction_db: float = 0.0,
    near_field_factor: float = 3.0,
    outside: str = "conservative",
) -> DacCurve:
    """The echo level of a flat-bottom hole of diameter `fbh_mm` at each depth: a DGS recording curve.

    Parameters
    ----------
    fbh_mm : float
        Equivalent FBH diameter of the recording level, mm.
    reference_fsh : float
        The reference echo, %FSH (> 0): the back-wall echo of a sound area,
        or a reference FBH's echo.
    reference_depth_mm : float
        Sound path to the reference (the wall thickness for a straight beam), mm.
    depths_mm : array_like
        Sound paths at which the curve is wanted (its range; > 0), mm. The
        curve is sampled between their minimum and maximum.
    probe_diameter_mm, frequency_mhz, velocity_m_s : float
        Probe element diameter, centre frequency, sound velocity.
    bandwidth : float, default 0
        The probe's fractional -6 dB bandwidth (the piston model inside the
        near field; give the probe's, a single frequency has deep on-axis zeros).
    reference_fbh_mm : float, optional
        Diameter of the reference FBH; None: the reference is a back wall.
    attenuation_db_per_mm : float, default 0
        One-way attenuation, dB/mm.
    transfer_correction_db : float, default 0
        dB added to indication amplitudes (reference and part differ).
    near_field_factor : float, default 3
        Below this many near-field lengths (hole or reference) the piston model is used.
    outside : {'conservative', 'extrapolate', 'refuse'}, default 'conservative'
        The curve's rule beyond `depths_mm`.

    Returns
    -------
    DacCurve
        Labelled ``'DGS <d> mm FBH'``, in sound path (= depth for a straight beam).

    Raises
    ------
    ParameterError, CalibrationError
        Non-positive sizes, depths or reference level.

    Examples
    --------
    A 2 mm FBH at 100 mm with a back wall at 100 mm read at 80 %FSH, 5 MHz, 10 mm probe, steel (far field):

    >>> c = dgs_recording_curve(2.0, reference_fsh=80.0, reference_depth_mm=100.0, depths_mm=[90, 110],
    ...                         probe_diameter_mm=10, frequency_mhz=5, velocity_m_s=5920)
    >>> lam = 5.920 / 5
    >>> round(float(c.level_fsh(100.0)), 2), round(80 * math.pi * 2.0**2 * 100 / (2 * lam * 100.0**2), 2)
    (4.25, 4.25)
    """
    d = positive_float("fbh_mm", fbh_mm)
    ref = positive_float("reference_fsh", reference_fsh)
    zb = positive_float("reference_depth_mm", reference_depth_mm)
    ref_fbh = None if reference_fbh_mm is None else positive_float("reference_fbh_mm", reference_fbh_mm)
    dprobe = positive_float("probe_diameter_mm", probe_diameter_mm)
    f = positive_float("frequency_mhz", frequency_mhz)
    c = positive_float("velocity_m_s", velocity_m_s)
    bw = float_in_range("bandwidth", bandwidth, 0.0, 1.5)
    alpha = nonnegative_float("attenuation_db_per_mm", attenuation_db_per_mm)
    transfer = finite_float("transfer_correction_db", transfer_correction_db)
    nf = positive_float("near_field_factor", near_field_factor)
    one_of("outside", outside, DAC_OUTSIDE_RULES)
    try:
        z_in = np.asarray(depths_mm, dtype=np.float64).ravel()
    except (TypeError, ValueError):
        raise ParameterError(f"`depths_mm` must be numbers in mm, got {depths_mm!r}") from None
    if z_in.size == 0 or not np.all(np.isfinite(z_in)) or np.any(z_in <= 0):
        raise ParameterError(f"`depths_mm` must be finite sound paths above 0 mm, got {z_in.tolist()}")
    lam = beam.wavelength_mm(c, f)
    n = beam.near_field_length_mm(dprobe, f, c)
    z0, z1 = float(z_in.min()), float(z_in.max())
    if z1 - z0 < 1e-6:
        z0, z1 = 0.95 * z0, 1.05 * z1
    # geometric steps of at most 1 %: a 40 log z fall then deviates from its chords by < 0.01 dB
    count = int(min(600, max(8, math.ceil(math.log(z1 / z0) / math.log(1.01)) + 1)))
    z = np.geomspace(z0, z1, count)
    far = (z >= nf * n) & (zb >= nf * n)
    ratio = np.empty_like(z)
    ratio[far] = _far_field_ratio(d, z[far], zb, lam, ref_fbh)
    if np.any(~far):
        ratio[~far] = _piston_ratio(d, z[~far], zb, (dprobe, f, c, bw), ref_fbh)
    level_db = 20.0 * np.log10(ref * ratio) - 2.0 * alpha * (z - zb) - transfer
    if not np.all(np.isfinite(level_db)):
        raise CalibrationError(f"the DGS model gave no level for a {d:g} mm FBH at some of {z0:g} to {z1:g} mm")
    curve = dac_curve(z, 10.0 ** (level_db / 20.0), outside=outside, source=f"DGS curve of a {d:g} mm FBH")
    return DacCurve(curve.depths_mm, curve.amplitudes_fsh, outside=outside, label=f"DGS {d:g} mm FBH")


@dataclass(frozen=True)
class RecordingCurve:
    """A depth-dependent recording level (a curve), as a procedure states it.

    Parameters
    ----------
    kind : {'dac', 'dgs'}
        'dac': the DAC points; 'dgs': an equivalent FBH diameter.
    dac : DacCurve, optional
        The DAC (kind 'dac').
    fbh_mm : float, optional
        The equivalent FBH diameter of the level, mm (kind 'dgs').
    reference : {'backwall', 'fbh'}
        What sets the DGS gain: the procedure's nominal back-wall echo (its
        [backwall] gate), or a reference FBH (`reference_fbh_mm` at
        `reference_depth_mm` read at `reference_fsh`).
    reference_fbh_mm, reference_depth_mm, reference_fsh : float, optional
        The reference FBH echo (reference 'fbh').

    Examples
    --------
    >>> RecordingCurve("dgs", fbh_mm=2.0).describe()
    'DGS level: 2 mm equivalent FBH, gain from the nominal back-wall echo'
    """

    kind: str
    dac: DacCurve | None = None
    fbh_mm: float | None = None
    reference: str = "backwall"
    reference_fbh_mm: float | None = None
    reference_depth_mm: float | None = None
    reference_fsh: float | None = None

    def __post_init__(self) -> None:
        one_of("recording.kind", self.kind, RECORDING_KINDS)
        if self.kind == "dac":
            if not isinstance(self.dac, DacCurve):
                raise ParameterError("a recording level of kind 'dac' needs `dac`, a DacCurve (points or a CSV file)")
            extra = [k for k in ("fbh_mm", "reference_fbh_mm", "reference_depth_mm", "reference_fsh")
                     if getattr(self, k) is not None]
            if extra:
                raise ParameterError(f"a recording level of kind 'dac' takes no {extra}; they belong to kind 'dgs'")
            return
        if self.dac is not None:
            raise ParameterError("a recording level of kind 'dgs' takes no `dac` points; give `fbh_mm`")
        object.__setattr__(self, "fbh_mm", positive_float("recording.fbh_mm", self.fbh_mm))
        one_of("recording.reference", self.reference, DGS_REFERENCES)
        names = ("reference_fbh_mm", "reference_depth_mm", "reference_fsh")
        if self.reference == "fbh":
            for k in names:
                object.__setattr__(self, k, positive_float(f"recording.{k}", getattr(self, k)))
        elif any(getattr(self, k) is not None for k in names):
            raise ParameterError(f"`recording.reference` is 'backwall': leave out {list(names)} (they describe a "
                                 "reference FBH; set reference = 'fbh' to use one)")

    def describe(self) -> str:
        """The level in words."""
        if self.kind == "dac":
            pts = ", ".join(f"{z:g} mm {a:g} %FSH" for z, a in zip(self.dac.depths_mm, self.dac.amplitudes_fsh,
                                                                   strict=True))
            return f"DAC through {pts} (linear in dB; outside: {self.dac.outside})"
        ref = ("the nominal back-wall echo" if self.reference == "backwall" else
               f"a {self.reference_fbh_mm:g} mm FBH at {self.reference_depth_mm:g} mm read at "
               f"{self.reference_fsh:g} %FSH")
        return f"DGS level: {self.fbh_mm:g} mm equivalent FBH, gain from {ref}"

    def curve(self, *, depths_mm: Any, attrs: Mapping[str, Any], backwall_fsh: float | None = None,
              backwall_depth_mm: float | None = None, transfer_correction_db: float = 0.0) -> DacCurve:
        """The curve: the DAC itself, or the DGS curve over `depths_mm` from the probe in `attrs` (grid attributes).

        Raises
        ------
        CalibrationError
            A DGS level from the back wall without a measured back-wall level
            and depth, or a grid without the probe's diameter and frequency.
        """
        if self.kind == "dac":
            return self.dac
        if self.reference == "backwall":
            if backwall_fsh is None or backwall_depth_mm is None:
                raise CalibrationError(
                    "a DGS recording level from the back wall needs the back-wall level and depth: give the "
                    "procedure a [backwall] gate (and the grid a part_thickness_mm or a back-wall echo)"
                )
            ref_fsh, ref_depth, ref_fbh = backwall_fsh, backwall_depth_mm, None
        else:
            ref_fsh, ref_depth, ref_fbh = self.reference_fsh, self.reference_depth_mm, self.reference_fbh_mm
        angle = float(attrs.get("beam_angle_deg", 0.0) or 0.0)
        if abs(angle) > 1e-9:
            raise CalibrationError(f"a DGS recording level is built for straight beams here; the grid's beam angle "
                                   f"is {angle:g} deg: use a DAC from reference reflectors instead")
        probe = {k: attrs.get(k) for k in ("probe_diameter_mm", "probe_frequency_mhz", "velocity_m_s")}
        missing = [k for k, v in probe.items() if v is None]
        if missing:
            raise CalibrationError(f"a DGS recording level needs the grid attributes {missing}")
        bw = attrs.get("probe_bandwidth")
        return dgs_recording_curve(
            self.fbh_mm, reference_fsh=ref_fsh, reference_depth_mm=ref_depth, reference_fbh_mm=ref_fbh,
            depths_mm=depths_mm, probe_diameter_mm=float(probe["probe_diameter_mm"]),
            frequency_mhz=float(probe["probe_frequency_mhz"]), velocity_m_s=float(probe["velocity_m_s"]),
            bandwidth=float(bw) if isinstance(bw, int | float) and math.isfinite(bw) else 0.0,
            attenuation_db_per_mm=float(attrs.get("attenuation_db_per_mm", 0.0) or 0.0),
            transfer_correction_db=transfer_correction_db,
        )

    def to_dict(self) -> dict[str, Any]:
        """The level as written to a procedure file's [recording] table (no empty fields)."""
        if self.kind == "dac":
            return {"kind": "dac", "points": [[z, a] for z, a in zip(self.dac.depths_mm, self.dac.amplitudes_fsh,
                                                                      strict=True)],
                    "outside": self.dac.outside}
        out: dict[str, Any] = {"kind": "dgs", "fbh_mm": self.fbh_mm, "reference": self.reference}
        for k in ("reference_fbh_mm", "reference_depth_mm", "reference_fsh"):
            if getattr(self, k) is not None:
                out[k] = getattr(self, k)
        return out
