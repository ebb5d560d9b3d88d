"""Handbook sound velocities and acoustic impedances of common materials.

Values are typical room-temperature figures as tabulated in the general
ultrasonic-testing literature (e.g. J. and H. Krautkramer, *Ultrasonic
Testing of Materials*, appendix tables). They were recalled, not read from
the table while writing (``# from memory``); a real calibration on a
reference block of the part's material always takes precedence (see
:mod:`ndtmap.grid.calibration`).
"""

from __future__ import annotations

from dataclasses import dataclass

from ndtmap.errors import ParameterError

__all__ = ["MaterialData", "MATERIALS", "material"]


@dataclass(frozen=True)
class MaterialData:
    """Acoustic properties of a material.

    Attributes
    ----------
    name : str
        Short name used in scan metadata.
    longitudinal_m_s, shear_m_s : float
        Sound velocities in m/s (shear: NaN for liquids).
    density_kg_m3 : float
        Density in kg/m^3.
    """

    name: str
    longitudinal_m_s: float
    shear_m_s: float
    density_kg_m3: float

    @property
    def impedance_mrayl(self) -> float:
        """Longitudinal acoustic impedance in MRayl (10^6 kg m^-2 s^-1)."""
        return self.longitudinal_m_s * self.density_kg_m3 * 1e-6

    def velocity(self, wave_mode: str) -> float:
        """Velocity in m/s of ``'longitudinal'`` or ``'shear'`` waves (NaN: the mode does not propagate).

        Raises
        ------
        ParameterError
            For another `wave_mode`.

        Examples
        --------
        >>> MATERIALS["steel"].velocity("shear")
        3230.0
        """
        if wave_mode == "longitudinal":
            return self.longitudinal_m_s
        if wave_mode == "shear":
            return self.shear_m_s
        raise ParameterError(f"`wave_mode` must be 'longitudinal' or 'shear', got {wave_mode!r}")


#: Typical velocities (m/s) and densities; from memory of handbook tables.
MATERIALS: dict[str, MaterialData] = {
    m.name: m
    for m in (
        MaterialData("steel", 5920.0, 3230.0, 7850.0),  # from memory
        MaterialData("stainless steel", 5740.0, 3130.0, 7900.0),  # from memory
        MaterialData("aluminium", 6320.0, 3130.0, 2700.0),  # from memory
        MaterialData("cast iron", 4600.0, 2500.0, 7200.0),  # from memory, varies widely
        MaterialData("copper", 4700.0, 2260.0, 8900.0),  # from memory
        MaterialData("acrylic", 2730.0, 1430.0, 1180.0),  # from memory
        MaterialData("water", 1483.0, float("nan"), 998.0),  # from memory, at 20 degC
    )
}


def material(name: str) -> MaterialData:
    """Look up a material of :data:`MATERIALS` by name.

    Parameters
    ----------
    name : str
        Name of the material, e.g. ``"steel"`` or ``"aluminium"`` (case and
        surrounding spaces do not matter).

    Returns
    -------
    MaterialData

    Raises
    ------
    ParameterError
        For a name not in the table; the message lists the known names.

    Examples
    --------
    >>> material("steel").longitudinal_m_s
    5920.0
    >>> material(" Stainless Steel ").name
    'stainless steel'
    """
    key = str(name).strip().lower()
    if key not in MATERIALS:
        raise ParameterError(
            f"`name` {name!r} is not a known material; known: {', '.join(MATERIALS)}. "
            "For another material give its velocity, measured on a reference block"
        )
    return MATERIALS[key]
