"""Physics of ultrasonic testing: the piston-probe beam and handbook material values.

* :mod:`ndtmap.physics.beam`: wavelength, near-field length, beam spread and
  width, the lateral sensitivity in pulse-echo, and the echo laws of the back
  wall and of a flat-bottomed hole (the DGS relation), for a circular
  single-element probe, with the probe's bandwidth averaged over where it
  matters;
* :mod:`ndtmap.physics.piston_field`: the piston's field at every point in
  front of it (the Rayleigh integral reduced to a line integral), the
  band-averaged pulse-echo sensitivity, beam widths at every depth (near
  field included), the range of drop lengths a point reflector gives, and the
  echo of a flat disc of finite size (broadband DGS in the near field);
* :mod:`ndtmap.physics.materials`: typical sound velocities and densities of
  common materials (:func:`material`), the one table of these values in
  ndtmap. They are recalled handbook figures; a calibration on a reference
  block of the part's material always takes precedence
  (:mod:`ndtmap.grid.calibration`).

Units: lengths in mm, velocities in m/s, frequencies in MHz, angles in
degrees.
"""

from ndtmap.physics.beam import (
    backwall_echo_relative,
    beam_spread_constant,
    beam_spread_half_angle_deg,
    beam_width_mm,
    dgs_fbh_backwall_ratio,
    far_field_directivity,
    fbh_echo_relative,
    lateral_sensitivity,
    near_field_length_mm,
    on_axis_pressure,
    spectrum_frequencies,
    wavelength_mm,
)
from ndtmap.physics.materials import MATERIALS, MaterialData, material
from ndtmap.physics.piston_field import (
    FAR_FIELD_LIMIT_N,
    disc_echo_relative,
    far_field_limit_mm,
    piston_pressure,
    point_reflector_length_range_mm,
    pulse_echo_beam_width_mm,
    pulse_echo_beam_widths,
    pulse_echo_sensitivity,
)

__all__ = [
    # beam
    "wavelength_mm",
    "near_field_length_mm",
    "on_axis_pressure",
    "far_field_directivity",
    "beam_spread_constant",
    "beam_spread_half_angle_deg",
    "beam_width_mm",
    "lateral_sensitivity",
    "backwall_echo_relative",
    "fbh_echo_relative",
    "dgs_fbh_backwall_ratio",
    "spectrum_frequencies",
    # piston field
    "FAR_FIELD_LIMIT_N",
    "far_field_limit_mm",
    "piston_pressure",
    "pulse_echo_sensitivity",
    "pulse_echo_beam_widths",
    "pulse_echo_beam_width_mm",
    "point_reflector_length_range_mm",
    "disc_echo_relative",
    # materials
    "MaterialData",
    "MATERIALS",
    "material",
]
