"""Handbook material values: lookups, errors, and the values themselves.

References
----------
- J. and H. Krautkramer, *Ultrasonic Testing of Materials*, appendix tables of
  sound velocities, densities and acoustic impedances (the values below were
  recalled, not read from the table: ``# from memory``).
- Elasticity of an isotropic solid (Krautkramer ch. 2; J. D. Achenbach, *Wave
  Propagation in Elastic Solids*, ch. 2): ``(c_l / c_t)**2 = 2 (1 - nu) / (1 - 2 nu)``
  with Poisson's ratio ``0 <= nu < 0.5``, so ``c_t / c_l <= 1 / sqrt(2)``.
"""

from __future__ import annotations

import math

import pytest

from ndtmap import physics
from ndtmap.errors import NdtmapError, ParameterError
from ndtmap.physics.materials import MATERIALS, MaterialData, material


@pytest.mark.parametrize(
    ("name", "longitudinal_m_s", "shear_m_s", "density_kg_m3"),
    [
        ("steel", 5920.0, 3230.0, 7850.0),  # from memory
        ("stainless steel", 5740.0, 3130.0, 7900.0),  # from memory
        ("aluminium", 6320.0, 3130.0, 2700.0),  # from memory
        ("copper", 4700.0, 2260.0, 8900.0),  # from memory
        ("acrylic", 2730.0, 1430.0, 1180.0),  # from memory
    ],
)
def test_handbook_values_of_solids(name, longitudinal_m_s, shear_m_s, density_kg_m3):
    m = material(name)
    assert (m.longitudinal_m_s, m.shear_m_s, m.density_kg_m3) == (longitudinal_m_s, shear_m_s, density_kg_m3)


def test_cast_iron_lies_in_its_wide_handbook_range():
    # grey to nodular cast iron spans roughly 3500 to 5600 m/s longitudinal  # from memory
    assert 3500.0 <= material("cast iron").longitudinal_m_s <= 5600.0


def test_water_has_no_shear_velocity():
    # a liquid carries no shear waves; water at 20 degC: 1483 m/s, 998 kg/m^3  # from memory
    water = material("water")
    assert (water.longitudinal_m_s, water.density_kg_m3) == (1483.0, 998.0)
    assert math.isnan(water.shear_m_s)
    assert math.isnan(water.velocity("shear"))


def test_impedance_is_density_times_velocity():
    # Z = rho c (Krautkramer ch. 2); steel about 46 MRayl, water about 1.5 MRayl  # from memory
    assert material("steel").impedance_mrayl == pytest.approx(5920.0 * 7850.0 * 1e-6)
    assert material("steel").impedance_mrayl == pytest.approx(46.0, abs=1.0)
    assert material("water").impedance_mrayl == pytest.approx(1.48, abs=0.01)


@pytest.mark.parametrize("name", [n for n, m in MATERIALS.items() if not math.isnan(m.shear_m_s)])
def test_solids_obey_the_elastic_bound_on_the_velocity_ratio(name):
    # Poisson's ratio between 0 and 0.5: c_t / c_l <= 1/sqrt(2) (see the module docstring)
    m = material(name)
    ratio = m.shear_m_s / m.longitudinal_m_s
    assert 0.3 < ratio <= 1.0 / math.sqrt(2.0)
    nu = (1 - 2 * ratio**2) / (2 * (1 - ratio**2))
    assert 0.0 <= nu < 0.5


def test_lookup_ignores_case_and_spaces_and_returns_the_table_entry():
    assert material(" Steel ") is MATERIALS["steel"]
    assert material("STAINLESS STEEL").name == "stainless steel"
    assert all(isinstance(m, MaterialData) and m.name == key for key, m in MATERIALS.items())


def test_velocity_by_wave_mode():
    steel = material("steel")
    assert steel.velocity("longitudinal") == steel.longitudinal_m_s
    assert steel.velocity("shear") == steel.shear_m_s
    with pytest.raises(ParameterError, match=r"`wave_mode` must be 'longitudinal' or 'shear', got 'surface'"):
        steel.velocity("surface")


def test_unknown_material_names_the_value_and_lists_the_known_names():
    with pytest.raises(NdtmapError) as err:
        material("unobtainium")
    message = str(err.value)
    assert "`name` 'unobtainium' is not a known material" in message
    for known in MATERIALS:
        assert known in message
    assert isinstance(err.value, ParameterError)


def test_physics_package_re_exports_beam_and_materials():
    assert physics.material is material and physics.MATERIALS is MATERIALS
    assert physics.wavelength_mm(5920.0, 5.0) == pytest.approx(1.184)  # lambda = c / f
    assert set(physics.beam.__all__) <= set(physics.__all__)
    assert {"MaterialData", "MATERIALS", "material"} <= set(physics.__all__)
