"""The simulator's set-up takes its handbook values from ndtmap.physics.materials."""

from __future__ import annotations

import math

import pytest

from ndtmap.errors import ParameterError
from ndtmap.physics.materials import MATERIALS, MaterialData, material
from ndtmap.simulate import Material, Part


def test_default_material_is_handbook_steel():
    # the defaults are the table's steel, not a second copy of its numbers
    steel = material("steel")
    m = Material()
    assert (m.name, m.velocity_m_s, m.density_kg_m3, m.wave_mode) == (
        steel.name, steel.longitudinal_m_s, steel.density_kg_m3, "longitudinal"
    )
    assert Part(10.0).water_velocity_m_s == material("water").longitudinal_m_s


def test_positional_constructor_still_works():
    m = Material(5920.0, 0.01, "steel", "longitudinal", 7850.0)
    assert m == Material.from_handbook("steel", attenuation_db_per_mm=0.01)


@pytest.mark.parametrize("name", sorted(n for n, d in MATERIALS.items() if not math.isnan(d.shear_m_s)))
@pytest.mark.parametrize("wave_mode", ["longitudinal", "shear"])
def test_from_handbook_takes_the_velocity_of_the_wave_mode(name, wave_mode):
    m = Material.from_handbook(name, wave_mode=wave_mode)
    data = material(name)
    assert (m.name, m.wave_mode, m.density_kg_m3) == (data.name, wave_mode, data.density_kg_m3)
    assert m.velocity_m_s == data.velocity(wave_mode)
    assert m.attenuation_db_per_mm == 0.0


def test_from_handbook_takes_a_material_record():
    brass = MaterialData("brass", 4400.0, 2100.0, 8500.0)  # an invented record: any values do here
    m = Material.from_handbook(brass, wave_mode="shear", attenuation_db_per_mm=0.02)
    assert (m.name, m.velocity_m_s, m.density_kg_m3, m.attenuation_db_per_mm) == ("brass", 2100.0, 8500.0, 0.02)


def test_from_handbook_errors_name_the_argument():
    with pytest.raises(ParameterError, match=r"`name` 'unobtainium' is not a known material; known: steel"):
        Material.from_handbook("unobtainium")
    with pytest.raises(ParameterError, match=r"`wave_mode` 'shear': water carries no shear waves"):
        Material.from_handbook("water", wave_mode="shear")
    with pytest.raises(ParameterError, match=r"`wave_mode` must be 'longitudinal' or 'shear', got 'lamb'"):
        Material.from_handbook("steel", wave_mode="lamb")
    with pytest.raises(ParameterError, match="attenuation_db_per_mm"):
        Material.from_handbook("steel", attenuation_db_per_mm=-1.0)
