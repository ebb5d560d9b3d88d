"""Tests of the scan-grid model: make_grid, the validator and canonical_grid.

Physical values used below (steel, longitudinal wave 5920 m/s; shear 3255 m/s) are
typical handbook values: Krautkramer, Ultrasonic Testing of Materials, 4th ed.,
table of sound velocities (values from memory). Rules of the format itself are
stated in docs/grid-format.md; a check of such a rule is marked "format rule".
"""

from __future__ import annotations

import dask.array as da
import numpy as np
import pytest
import xarray as xr

import ndtmap
from ndtmap.errors import GridError, NdtmapError, ParameterError
from ndtmap.grid import (
    DIMS,
    ascan_in_fsh,
    canonical_grid,
    count_missing_ascans,
    grid_attr,
    grid_problems,
    make_grid,
    missing_ascans,
    read_provenance,
    time_step_us,
    validate_grid,
)
from ndtmap.grid.schema import ALLOWED_DTYPES, GRID_FORMAT_VERSION

STEEL_L_M_S = 5920.0  # Krautkramer, Ultrasonic Testing of Materials, table of velocities (from memory)
STEEL_T_M_S = 3255.0  # same source (from memory)


def tone_burst(t_us: np.ndarray, t0_us: float, f_mhz: float, cycles: float = 3.0) -> np.ndarray:
    """Gaussian-windowed sine burst centred on t0 (a common model of a broadband echo, no source)."""
    sigma = cycles / (f_mhz * 2.0 * np.sqrt(2.0 * np.log(2.0)))  # -6 dB width = `cycles` periods
    return np.exp(-0.5 * ((t_us - t0_us) / sigma) ** 2) * np.sin(2 * np.pi * f_mhz * (t_us - t0_us))


def plate_grid(n_scan: int = 4, n_index: int = 3, n_time: int = 200, thickness_mm: float = 10.0) -> xr.Dataset:
    """A straight-beam scan of a steel plate: one back-wall echo per A-scan at 80 %FSH."""
    t = np.arange(n_time) * 0.02  # 50 MHz sampling
    t_bw = 2 * thickness_mm / (STEEL_L_M_S * 1e-3)  # pulse-echo time of flight, s = v t / 2 (common practice)
    a = np.broadcast_to(80 * tone_burst(t, t_bw, 5.0), (n_scan, n_index, n_time)).astype(np.float32)
    return make_grid(
        a,
        scan_mm=np.arange(n_scan) * 1.0,
        index_mm=np.arange(n_index) * 2.0,
        time_us=t,
        velocity_m_s=STEEL_L_M_S,
        probe_frequency_mhz=5.0,
        probe_diameter_mm=10.0,
        attrs={"part_thickness_mm": thickness_mm, "part_id": "KFP-1001", "material": "S355 plate"},
    )


# --------------------------------------------------------------------------- make_grid


def test_make_grid_builds_the_documented_layout():
    g = plate_grid()
    # format rule: dims, coords with units and long names, ascan in %FSH with `signal`
    assert g["ascan"].dims == DIMS == ("scan", "index", "time")
    assert {n: g[n].attrs["units"] for n in DIMS} == {"scan": "mm", "index": "mm", "time": "us"}
    assert all("long_name" in g[n].attrs for n in DIMS)
    assert g["ascan"].attrs["units"] == "%FSH" and g["ascan"].attrs["signal"] == "rf"
    assert g["ascan"].dtype == np.float32
    assert g.attrs["velocity_m_s"] == STEEL_L_M_S and isinstance(g.attrs["velocity_m_s"], float)
    # a flat part using no version-2 feature is written as version 1, readable by older releases
    assert g.attrs["grid_format"] == "ndtmap-grid 1" != GRID_FORMAT_VERSION
    assert read_provenance(g) == []
    assert grid_problems(g) == []
    # the back-wall echo sits at 2 d / v (pulse-echo time of flight; common practice, no source)
    t_peak = float(g.time[int(np.argmax(np.abs(g.ascan.values[0, 0])))])
    assert t_peak == pytest.approx(2 * 10.0 / (STEEL_L_M_S * 1e-3), abs=0.05)


def test_make_grid_stores_float64_as_float32_and_keeps_int16():
    t = np.arange(5) * 0.01
    g64 = make_grid(np.ones((1, 1, 5)), scan_mm=[0], index_mm=[0], time_us=t, velocity_m_s=STEEL_L_M_S,
                    probe_frequency_mhz=5, probe_diameter_mm=10)
    assert g64["ascan"].dtype == np.float32
    counts = np.array([[[0, 100, -32767, 32767, 5]]], dtype=np.int16)
    g16 = make_grid(counts, scan_mm=[0], index_mm=[0], time_us=t, velocity_m_s=STEEL_L_M_S,
                    probe_frequency_mhz=5, probe_diameter_mm=10, fsh_per_count=100 / 32767)
    assert g16["ascan"].dtype == np.int16
    np.testing.assert_array_equal(g16["ascan"].values, counts)
    # %FSH = counts * fsh_per_count (format rule)
    np.testing.assert_allclose(ascan_in_fsh(g16).values, counts * (100 / 32767), rtol=1e-6)
    assert ascan_in_fsh(g16).dtype == np.float32


def test_make_grid_keeps_dask_input_lazy():
    a = da.zeros((4, 3, 50), chunks=(2, 3, 50), dtype=np.float32)
    g = make_grid(a, scan_mm=np.arange(4.0), index_mm=np.arange(3.0), time_us=np.arange(50) * 0.02,
                  velocity_m_s=STEEL_L_M_S, probe_frequency_mhz=5, probe_diameter_mm=10)
    assert isinstance(g["ascan"].data, da.Array)
    assert isinstance(missing_ascans(g).data, da.Array)


def test_make_grid_rejects_bad_shapes_and_signal():
    t = np.arange(4) * 0.02
    kw = dict(velocity_m_s=STEEL_L_M_S, probe_frequency_mhz=5, probe_diameter_mm=10)
    with pytest.raises(GridError, match=r"`ascan` must be 3-D \(scan, index, time\), got 2-D"):
        make_grid(np.zeros((3, 4)), scan_mm=[0, 1, 2], index_mm=[0], time_us=t, **kw)
    with pytest.raises(GridError, match=r"does not match the coordinates \(scan=2, index=1, time=4\)"):
        make_grid(np.zeros((3, 1, 4)), scan_mm=[0, 1], index_mm=[0], time_us=t, **kw)
    with pytest.raises(ParameterError, match=r"`signal` must be one of .*got 'log'"):
        make_grid(np.zeros((1, 1, 4)), scan_mm=[0], index_mm=[0], time_us=t, signal="log", **kw)


def test_make_grid_reports_bad_attributes_as_grid_error():
    with pytest.raises(GridError) as info:
        make_grid(np.zeros((1, 1, 4)), scan_mm=[0], index_mm=[0], time_us=[0, 1, 2, 3], velocity_m_s=-5920,
                  probe_frequency_mhz=5, probe_diameter_mm=10, beam_angle_deg=95)
    assert len(info.value.problems) == 2
    assert isinstance(info.value, ValueError) and isinstance(info.value, NdtmapError)


# --------------------------------------------------------------------------- the validator, one problem class each


def only_problem(ds: xr.Dataset) -> str:
    problems = grid_problems(ds)
    assert len(problems) == 1, problems
    return problems[0]


def test_not_a_dataset():
    assert grid_problems(np.zeros(3)) == ["expected an xarray.Dataset, got ndarray"]
    with pytest.raises(GridError, match="expected an xarray.Dataset, got DataArray"):
        validate_grid(xr.DataArray([1.0]))


@pytest.mark.parametrize("name", DIMS)
def test_missing_coordinate(name):
    g = plate_grid().drop_vars(name)
    # format rule: scan, index and time are required coordinates
    with pytest.raises(GridError, match=rf"coordinate `{name}` is missing; add it in (mm|us)"):
        validate_grid(g)


def test_wrong_dims():
    g = plate_grid().rename({"time": "sample"})
    problems = grid_problems(g)
    assert any(p.startswith("`ascan` must have the dimensions ('scan', 'index', 'time'), has ('scan', 'index', "
                            "'sample')") for p in problems), problems
    assert "coordinate `time` is missing; add it in us (e.g. ds.assign_coords(time=values))" in problems


def test_wrong_dim_order_is_reported_and_mended():
    g = plate_grid()
    swapped = g.assign(ascan=g["ascan"].transpose("time", "scan", "index"))
    assert "dimensions must be in the order ('scan', 'index', 'time'), are ('time', 'scan', 'index')" in only_problem(
        swapped
    )
    mended = canonical_grid(swapped)
    assert mended["ascan"].dims == DIMS and grid_problems(mended) == []
    xr.testing.assert_identical(mended["ascan"], g["ascan"])
    assert swapped["ascan"].dims == ("time", "scan", "index")  # the input is not modified


def test_decreasing_coordinate():
    g = plate_grid()
    g = g.assign_coords(scan=("scan", [0.0, 2.0, 1.0, 3.0], g.scan.attrs))
    # format rule: scan and index strictly increasing; the message names the place and both values
    with pytest.raises(GridError, match=r"coordinate `scan` must be strictly increasing but decreases at position "
                                        r"2 \(2\.0 then 1\.0\); sort with ds\.sortby\('scan'\)"):
        validate_grid(g)


def test_duplicate_coordinate():
    g = plate_grid()
    g = g.assign_coords(index=("index", [0.0, 2.0, 2.0], g["index"].attrs))
    with pytest.raises(GridError, match=r"coordinate `index` must be strictly increasing but repeats a value at "
                                        r"position 2 \(2\.0 then 2\.0\)"):
        validate_grid(g)


def test_nan_coordinate():
    g = plate_grid()
    g = g.assign_coords(scan=("scan", [0.0, np.nan, 2.0, np.inf], g.scan.attrs))
    assert only_problem(g) == "coordinate `scan` has 2 NaN or infinite value(s); every position must be finite"


def test_non_uniform_time():
    g = plate_grid(n_time=5)
    g = g.assign_coords(time=("time", [0.0, 0.02, 0.04, 0.07, 0.09], g.time.attrs))
    assert "coordinate `time` must be uniformly sampled" in only_problem(g)


def test_uneven_scan_spacing_is_allowed():
    # format rule: scan/index spacing may vary (sizes use the coordinates, not sample counts)
    g = plate_grid()
    g = g.assign_coords(scan=("scan", [0.0, 0.5, 2.0, 2.1], g.scan.attrs))
    assert grid_problems(g) == []


def test_missing_units():
    g = plate_grid()
    g["index"].attrs.pop("units")
    assert only_problem(g) == "coordinate `index` has no `units` attribute; set units='mm'"
    g2 = plate_grid()
    g2["ascan"].attrs.pop("units")
    assert only_problem(g2) == "`ascan` has no `units` attribute; set units='%FSH'"


def test_unknown_units():
    g = plate_grid()
    g["scan"].attrs["units"] = "inch"
    assert only_problem(g) == (
        "coordinate `scan` has units 'inch'; expected 'mm' (convert the values and set the attribute)"
    )
    g2 = plate_grid()
    g2["time"].attrs["units"] = "s"  # seconds are a different unit, not a spelling of us
    assert "coordinate `time` has units 's'; expected 'us'" in only_problem(g2)
    g3 = plate_grid()
    g3["ascan"].attrs["units"] = "V"
    assert only_problem(g3) == "`ascan` has units 'V'; amplitudes must be in '%FSH'"


@pytest.mark.parametrize("velocity", [0.0, -5920.0, 100.0, np.nan, np.inf, 20000.1])
def test_velocity_out_of_range(velocity):
    g = plate_grid()
    g.attrs["velocity_m_s"] = velocity
    assert "global attribute `velocity_m_s` is" in only_problem(g)
    assert "outside the plausible range (100, 20000] m/s" in only_problem(g)


def test_velocity_in_range_limits():
    # 20000 m/s is inside the inclusive upper limit; shear velocity in steel is plausible
    for v in (20000.0, STEEL_T_M_S, 1483.0):  # 1483 m/s: water at 20 degC (Kaye & Laby, from memory)
        g = plate_grid()
        g.attrs["velocity_m_s"] = v
        assert grid_problems(g) == [], v


def test_velocity_not_a_number():
    g = plate_grid()
    g.attrs["velocity_m_s"] = "5920 m/s"
    assert only_problem(g) == "global attribute `velocity_m_s` must be a number in m/s, got '5920 m/s'"
    g.attrs["velocity_m_s"] = True  # a boolean is not a velocity
    assert "must be a number in m/s, got True" in only_problem(g)


@pytest.mark.parametrize("angle", [90.0, 120.0, -1.0])
def test_beam_angle_out_of_range(angle):
    g = plate_grid()
    g.attrs["beam_angle_deg"] = angle
    # a refracted angle of 90 degrees or more has no pulse-echo depth (depth = s cos(theta); common practice)
    assert "global attribute `beam_angle_deg`" in only_problem(g)
    assert "outside the plausible range [0, 90) deg" in only_problem(g)


def test_beam_angle_just_below_90_is_allowed():
    g = plate_grid()
    g.attrs["beam_angle_deg"] = 89.9
    assert grid_problems(g) == []


@pytest.mark.parametrize("name", ["velocity_m_s", "beam_angle_deg", "probe_frequency_mhz", "probe_diameter_mm"])
def test_required_attribute_missing(name):
    g = plate_grid()
    del g.attrs[name]
    assert only_problem(g).startswith(f"global attribute `{name}` (")
    assert only_problem(g).endswith(") is missing")


def test_optional_attribute_checks():
    g = plate_grid()
    g.attrs["wave_mode"] = "lamb"
    g.attrs["part_thickness_mm"] = 0.0
    problems = grid_problems(g)
    assert "global attribute `wave_mode` must be one of ('longitudinal', 'shear'), got 'lamb'" in problems
    assert any("`part_thickness_mm` is 0 mm, outside the plausible range (0, 100000] mm" in p for p in problems)


@pytest.mark.parametrize("dtype", [np.int32, np.complex64, np.int64])
def test_wrong_dtype(dtype):
    g = plate_grid()
    g["ascan"] = g["ascan"].astype(dtype)
    assert only_problem(g).startswith(f"`ascan` has dtype {np.dtype(dtype)}; use float32 or int16")


@pytest.mark.parametrize("dtype", ALLOWED_DTYPES)
def test_allowed_dtypes(dtype):
    g = plate_grid()
    g["ascan"] = g["ascan"].astype(dtype)
    assert grid_problems(g) == []


def test_bad_signal_and_scale():
    g = plate_grid()
    g["ascan"].attrs["signal"] = "log"
    assert only_problem(g) == "`ascan` attribute `signal` must be 'rf' or 'rectified', got 'log'"
    g16 = plate_grid()
    g16["ascan"] = g16["ascan"].astype(np.int16)
    g16["ascan"].attrs["fsh_per_count"] = 0.0
    assert only_problem(g16) == "`ascan` attribute `fsh_per_count` must be a number > 0, got 0.0"


def test_missing_ascan_variable():
    g = plate_grid().rename({"ascan": "amplitude"})
    assert only_problem(g) == "data variable `ascan` is missing (data variables present: amplitude)"


def test_empty_arrays():
    g = plate_grid().isel(scan=slice(0, 0))
    problems = grid_problems(g)
    assert "coordinate `scan` is empty; a grid needs at least one position" in problems
    assert "`ascan` is empty (shape {'scan': 0, 'index': 3, 'time': 200})" in problems


def test_all_nan_grid():
    g = plate_grid()
    g["ascan"][:] = np.nan
    assert only_problem(g) == "every A-scan is missing (NaN or marked in `missing`); the file holds no usable data"
    # the costly value check can be skipped (e.g. for huge lazy grids)
    assert grid_problems(g, check_values=False) == []


def test_partial_nan_ascans_are_allowed_and_marked():
    g = plate_grid()
    a = g["ascan"].values.copy()
    a[1, 2, :] = np.nan  # a lost record
    a[3, 0, 17] = np.nan  # a single bad sample marks the A-scan missing (format rule)
    g = g.assign(ascan=g["ascan"].copy(data=a))
    assert grid_problems(g) == []
    expected = np.zeros((4, 3), dtype=bool)
    expected[1, 2] = expected[3, 0] = True
    np.testing.assert_array_equal(missing_ascans(g).values, expected)
    assert missing_ascans(g).dims == ("scan", "index")


def test_missing_variable_is_combined_with_nan():
    g = plate_grid()
    mask = np.zeros((4, 3), dtype=bool)
    mask[0, 1] = True
    g["missing"] = (("scan", "index"), mask)
    g["ascan"][2, 2, 5] = np.nan
    expected = mask.copy()
    expected[2, 2] = True
    assert grid_problems(g) == []
    np.testing.assert_array_equal(missing_ascans(g).values, expected)
    # results at a missing position are missing: ascan_in_fsh gives NaN there
    assert bool(np.isnan(ascan_in_fsh(g).values[0, 1]).all())
    assert not bool(np.isnan(ascan_in_fsh(g).values[0, 0]).any())


def test_missing_variable_must_be_boolean_on_scan_index():
    g = plate_grid()
    g["missing"] = (("scan", "index"), np.zeros((4, 3), dtype=np.float32))
    assert "data variable `missing` must be boolean on ('scan', 'index'), has ('scan', 'index') float32" in (
        only_problem(g)
    )


def test_several_problems_in_one_error():
    g = plate_grid()
    g["scan"].attrs["units"] = "inch"
    g = g.assign_coords(index=("index", [0.0, 2.0, 2.0], g["index"].attrs))
    g.attrs["velocity_m_s"] = 0.0
    del g.attrs["probe_diameter_mm"]
    with pytest.raises(GridError, match=r"^invalid scan grid in KFP-1001\.nc, 4 problems: \(1\) coordinate `scan` "
                                        r"has units 'inch'.*\(2\) coordinate `index` must be strictly increasing.*"
                                        r"\(3\) global attribute `velocity_m_s` is 0 m/s.*"
                                        r"\(4\) global attribute `probe_diameter_mm` .* is missing$") as info:
        validate_grid(g, source="KFP-1001.nc")
    assert len(info.value.problems) == 4
    assert info.value.source == "KFP-1001.nc"


def test_validate_returns_the_same_object():
    g = plate_grid()
    assert validate_grid(g) is g


# --------------------------------------------------------------------------- canonical_grid and small helpers


@pytest.mark.parametrize("spelling", ["µs", "μs", "microseconds"])  # micro sign U+00B5, Greek mu U+03BC
def test_canonical_grid_mends_unit_spellings(spelling):
    g = plate_grid()
    g["time"].attrs["units"] = spelling
    g["scan"].attrs["units"] = "millimetres"
    g["ascan"].attrs["units"] = "%fsh"
    assert len(grid_problems(g)) == 0  # aliases are accepted by the validator ...
    c = canonical_grid(g)
    assert c["time"].attrs["units"] == "us"  # ... and spelled canonically by canonical_grid
    assert c["scan"].attrs["units"] == "mm"
    assert c["ascan"].attrs["units"] == "%FSH"
    assert g["time"].attrs["units"] == spelling  # input unchanged
    np.testing.assert_array_equal(c["time"].values, g["time"].values)  # nothing converted


def test_canonical_grid_adds_long_names_and_unwraps_one_element_arrays():
    g = plate_grid()
    del g["scan"].attrs["long_name"]
    g.attrs["velocity_m_s"] = np.array([5920.0])  # how some netCDF writers store a scalar
    c = canonical_grid(g)
    assert c["scan"].attrs["long_name"] == "scan axis position"
    assert c.attrs["velocity_m_s"] == 5920.0 and isinstance(c.attrs["velocity_m_s"], float)


def test_canonical_grid_does_not_convert_units():
    g = plate_grid()
    g["scan"].attrs["units"] = "inch"
    c = canonical_grid(g)
    assert c["scan"].attrs["units"] == "inch"
    assert grid_problems(c)  # still reported


def test_time_step_and_grid_attr():
    g = plate_grid()
    assert time_step_us(g) == pytest.approx(0.02)
    with pytest.raises(GridError, match="fewer than two time samples"):
        time_step_us(g.isel(time=slice(0, 1)))
    assert grid_attr(g, "velocity_m_s") == STEEL_L_M_S
    assert grid_attr(g, "digitiser_full_scale_fsh", 100.0) == 100.0  # format rule: default 100 %FSH
    assert grid_attr(g, "part_id") == "KFP-1001"


def test_public_names_are_exported():
    for name in ("make_grid", "validate_grid", "grid_problems", "canonical_grid", "missing_ascans", "ascan_in_fsh"):
        assert getattr(ndtmap, name) is globals()[name]


def test_all_missing_integer_grid_is_reported():
    # integer data cannot hold NaN; a `missing` mask that marks every position leaves no data either
    g = plate_grid()
    g["ascan"] = (g["ascan"] * 100).astype(np.int16).assign_attrs(g["ascan"].attrs, fsh_per_count=0.01)
    g["missing"] = (("scan", "index"), np.ones((4, 3), dtype=bool))
    assert only_problem(g) == "every A-scan is missing (NaN or marked in `missing`); the file holds no usable data"
    g["missing"][0, 0] = False
    assert grid_problems(g) == []


def test_immersion_attributes_are_checked():
    g = plate_grid()
    g.attrs.update(water_path_mm=25.0, water_velocity_m_s=1483.0)  # water at 20 degC (Kaye & Laby, from memory)
    assert grid_problems(g) == []
    g.attrs["water_velocity_m_s"] = 1.483  # given in mm/us by mistake
    assert "global attribute `water_velocity_m_s` is 1.483 m/s, outside the plausible range (100, 20000] m/s" in (
        only_problem(g)
    )


@pytest.mark.parametrize("lazy", [False, True])
def test_count_of_missing_ascans_is_the_sum_of_the_mask(lazy):
    a = np.ones((4, 3, 5), dtype=np.float32)
    a[1, 2, 3] = np.nan
    a[3, 0, 0] = np.inf
    g = make_grid(a, scan_mm=np.arange(4.0), index_mm=np.arange(3.0), time_us=np.arange(5.0),
                  velocity_m_s=5920, probe_frequency_mhz=5, probe_diameter_mm=10)
    g = g.assign(missing=(("scan", "index"), np.zeros((4, 3), dtype=bool)))
    g["missing"][0, 1] = True  # flagged by the acquisition although its samples are finite
    if lazy:
        g = g.chunk({"scan": 1, "time": 2})  # chunked along time too: the mask does not need whole A-scans
    mask = missing_ascans(g)
    assert mask.values.tolist() == [[False, True, False], [False, False, True], [False, False, False],
                                    [True, False, False]]
    assert count_missing_ascans(g) == int(mask.sum()) == 3
    # dims in another order give the same count
    assert count_missing_ascans(g.transpose("time", "index", "scan")) == 3
