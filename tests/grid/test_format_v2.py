"""Grid format version 2: part shape, cylinder diameters, scanned surface, beam skew, rotary index in degrees."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr
from helpers.plate_files import plate

from ndtmap.errors import FileFormatError, GridError, ParameterError
from ndtmap.grid import (
    echo_positions,
    format_summary,
    grid_problems,
    grid_summary,
    make_grid,
    part_geometry,
    reflector_position,
)
from ndtmap.grid.schema import GRID_FORMAT_VERSION, grid_format_version
from ndtmap.io import export_raw, open_grid, save_grid

SHAFT = {"part_shape": "cylinder", "outer_diameter_mm": 160.0, "inner_diameter_mm": 60.0,
         "scanned_surface": "inner", "beam_skew_deg": 90.0}


def plate_like(a: np.ndarray) -> xr.Dataset:
    """A grid written with plain xarray, as another program would: 45 deg shear beam, index every 45 (mm)."""
    return xr.Dataset(
        {"ascan": (("scan", "index", "time"), a, {"units": "%FSH", "signal": "rf"})},
        coords={"scan": ("scan", [0.0, 2.0, 4.0], {"units": "mm"}),
                "index": ("index", np.arange(a.shape[1]) * 45.0, {"units": "mm"}),
                "time": ("time", np.arange(a.shape[2]) * 0.05, {"units": "us"})},
        attrs={"velocity_m_s": 3230.0, "beam_angle_deg": 45.0, "probe_frequency_mhz": 4.0,
               "probe_diameter_mm": 8.0, "provenance": "[]"},
    )


def shaft_grid(index_units: str = "deg", **attrs) -> xr.Dataset:
    """A hollow shaft scanned from its bore with a 45 deg shear beam toward +index."""
    a = np.zeros((3, 8, 100), np.float32)
    if index_units == "mm":  # built by ndtmap, index in mm of arc on the bore
        return make_grid(a, scan_mm=[0.0, 2.0, 4.0], index_mm=np.arange(8) * 45.0, time_us=np.arange(100) * 0.05,
                         velocity_m_s=3230.0, probe_frequency_mhz=4.0, probe_diameter_mm=8.0, beam_angle_deg=45.0,
                         attrs={**SHAFT, **attrs})
    ds = plate_like(a)  # written by another program, rotary index in degrees
    ds.attrs.update({**SHAFT, **attrs})
    ds["index"].attrs["units"] = "deg"
    return ds


def test_a_rotary_shaft_is_a_valid_version_2_grid():
    g = shaft_grid()
    assert grid_problems(g) == []
    assert grid_format_version(g) == GRID_FORMAT_VERSION == "ndtmap-grid 2"
    geo = part_geometry(g)
    assert (geo.beam_path, geo.index_units, geo.scanned_radius_mm) == ("circumferential", "deg", 30.0)
    # the worked example: 55.92 mm of sound path from the probe at 90 deg reaches the outer surface at 119.6 deg
    r = reflector_position(2.0, 90.0, 55.923, geo)
    assert float(r.index_deg) == pytest.approx(119.623, abs=1e-3) and float(r.depth_mm) == pytest.approx(50, abs=1e-3)


def test_every_problem_of_a_bad_cylinder_is_listed():
    g = shaft_grid(inner_diameter_mm=170.0, scanned_surface="bore", beam_skew_deg=45.0)
    problems = grid_problems(g)
    assert any("must be smaller than `outer_diameter_mm`" in p for p in problems)
    assert any("`scanned_surface` = 'outer' or 'inner'" in p and "'bore'" in p for p in problems)
    assert any("helical" in p and "45" in p for p in problems)
    bad_shape = shaft_grid(part_shape="cone")
    assert any("`part_shape` must be 'plate' or 'cylinder', got 'cone'" in p for p in grid_problems(bad_shape))


def test_missing_cylinder_attributes_are_named():
    g = shaft_grid()
    for name in ("inner_diameter_mm", "outer_diameter_mm", "scanned_surface"):
        del g.attrs[name]
    problems = " | ".join(grid_problems(g))
    assert "`outer_diameter_mm` in mm; it is missing" in problems
    assert "`inner_diameter_mm` in mm (0 for a solid shaft)" in problems
    assert "`scanned_surface`" in problems


def test_skew_range_and_plate_rules():
    g = plate().assign_attrs(beam_skew_deg=360.0)
    assert any("`beam_skew_deg` is 360 deg, outside the plausible range [0, 360)" in p for p in grid_problems(g))
    # any skew is fine on a plate; cylinder attributes are not
    assert grid_problems(plate().assign_attrs(beam_skew_deg=45.0)) == []
    on_plate = plate().assign_attrs(outer_diameter_mm=100.0)
    assert any("`outer_diameter_mm` describes a cylinder but `part_shape` is 'plate'" in p
               for p in grid_problems(on_plate))
    degrees = plate()
    degrees["index"].attrs["units"] = "deg"
    assert any("only a cylinder's rotary index" in p for p in grid_problems(degrees))
    # a solid shaft cannot be scanned from its bore
    solid = shaft_grid(inner_diameter_mm=0.0)
    assert any("the shaft is solid" in p for p in grid_problems(solid))


def test_straight_beam_on_a_cylinder_may_have_any_skew():
    g = shaft_grid(beam_skew_deg=30.0)
    g.attrs["beam_angle_deg"] = 0.0
    assert grid_problems(g) == []
    assert part_geometry(g).beam_path == "radial"


def test_index_in_mm_of_arc_on_a_cylinder():
    g = shaft_grid("mm")
    assert g.attrs["grid_format"] == "ndtmap-grid 2"
    geo = part_geometry(g)
    assert geo.index_units == "mm"
    # 30 mm of arc on the 30 mm bore radius is 1 rad
    assert float(reflector_position(0.0, 30.0, 0.0, geo).index_deg) == pytest.approx(np.degrees(1.0))


def test_writers_stamp_the_version_the_content_needs(tmp_path):
    # a flat plate stays version 1 (older releases read it); a shaft is version 2, also when its attributes
    # were set after the grid was made with a version-1 stamp
    plain = open_grid(save_grid(plate(), tmp_path / "plate.nc"))
    assert plain.attrs["grid_format"] == "ndtmap-grid 1"
    late = plate_like(np.zeros((3, 8, 100), np.float32))
    late.attrs["grid_format"] = "ndtmap-grid 1"
    late.attrs.update(SHAFT)
    late["index"].attrs["units"] = "degrees"
    for name in ("shaft.nc", "shaft.zarr"):
        back = open_grid(save_grid(late, tmp_path / name))
        assert back.attrs["grid_format"] == "ndtmap-grid 2"
        assert back["index"].attrs["units"] == "deg"  # spelling mended on reading
        assert part_geometry(back).beam_path == "circumferential"
    assert late.attrs["grid_format"] == "ndtmap-grid 1"  # the input is not modified


def test_version_1_files_are_read_as_plates(tmp_path):
    path = save_grid(plate().assign_attrs(grid_format="ndtmap-grid 1", beam_angle_deg=45.0), tmp_path / "v1.nc")
    geo = part_geometry(open_grid(path))
    assert (geo.shape, geo.beam_skew_deg, geo.beam_path) == ("plate", 0.0, "plate")


def test_newer_than_version_2_is_refused(tmp_path):
    path = save_grid(shaft_grid().assign_attrs(grid_format="ndtmap-grid 3"), tmp_path / "v3.nc")
    with pytest.raises(FileFormatError, match="version 3, newer than this ndtmap reads \\(2\\)"):
        open_grid(path)


def test_raw_sidecar_refuses_an_index_in_degrees(tmp_path):
    with pytest.raises(ParameterError, match="holds the index in mm"):
        export_raw(shaft_grid(), tmp_path / "shaft.json")


def test_make_grid_refuses_a_bad_cylinder_with_every_problem():
    with pytest.raises(GridError) as err:
        make_grid(np.zeros((1, 1, 4)), scan_mm=[0], index_mm=[0], time_us=[0, 1, 2, 3], velocity_m_s=3230,
                  probe_frequency_mhz=4, probe_diameter_mm=8, beam_angle_deg=45,
                  attrs={"part_shape": "cylinder", "outer_diameter_mm": 100.0, "inner_diameter_mm": 120.0,
                         "scanned_surface": "outer", "beam_skew_deg": 10.0})
    assert len(err.value.problems) == 2


def test_summary_names_shape_and_skew():
    s = grid_summary(shaft_grid(), source="shaft.nc")
    assert s["part"] == {"shape": "cylinder", "beam_skew_deg": 90.0, "beam_path": "circumferential",
                         "outer_diameter_mm": 160.0, "inner_diameter_mm": 60.0, "scanned_surface": "inner",
                         "index_units": "deg"}
    text = format_summary(s)
    assert "cylinder D 160 mm, bore 60 mm, scanned from the bore; beam circumferential (skew 90 deg)" in text
    assert "index axis   0.000 .. 315.000 deg" in text
    plain = grid_summary(plate(), source="plate.nc")
    assert plain["part"]["shape"] == "plate" and "plate; beam skew 0 deg" in format_summary(plain)


def test_wall_thickness_must_agree_with_the_diameters():
    assert grid_problems(shaft_grid(part_thickness_mm=50.2)) == []  # (160 - 60) / 2 = 50 within 1 %
    problems = grid_problems(shaft_grid(part_thickness_mm=25.0))
    assert any("`part_thickness_mm` (25 mm) differs from the wall (D - d)/2 = 50 mm" in p for p in problems)


def test_echo_positions_from_a_shaft_grid():
    # the worked example through the grid's calibration: 2 L / v after pulse entry, shear velocity 3230 m/s
    # (handbook, from memory), probe at 135 deg toward +index
    g = shaft_grid()
    t_us = 2 * 55.923 / 3.230
    r = echo_positions(g, 4.0, 135.0, t_us)
    assert float(r.sound_path_mm) == pytest.approx(55.923, abs=1e-9)
    assert float(r.index_deg) == pytest.approx(135.0 + 29.623, abs=1e-3)
    assert (str(r.toward), float(r.scan_mm)) == ("opposite", 4.0)
    assert float(r.incidence_deg) == pytest.approx(15.377, abs=1e-3)
