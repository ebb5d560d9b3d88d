"""Velocity and zero-offset calibration against the pulse-echo relation t = t0 + 2 s / c."""

import json

import numpy as np
import pytest
import xarray as xr
from helpers.burst_grids import ALUMINIUM_L, STEEL_L, plate_grid, to_backend

from ndtmap.errors import CalibrationError
from ndtmap.gates import Gate, evaluate_gates
from ndtmap.grid import (
    calibrate,
    read_provenance,
    thickness_from_echo_spacing,
    two_point_calibration,
    velocity_from_echo_spacing,
    velocity_from_thickness,
    zero_offset_from_echo,
)
from ndtmap.scans import depth_map


@pytest.fixture(params=["numpy", "dask"])
def backend(request):
    return request.param


def echo_time(s_mm, c_m_s, t0=0.0):
    # pulse-echo relation t = t0 + 2 s / c (any UT handbook; Krautkramer, Ultrasonic Testing of Materials)
    return t0 + 2.0 * s_mm / (c_m_s * 1e-3)


def test_velocity_from_a_known_thickness():
    # steel 5920 m/s and aluminium 6320 m/s (from memory)
    for c in (STEEL_L, ALUMINIUM_L):
        assert velocity_from_thickness(25.0, echo_time(25.0, c)) == pytest.approx(c, rel=1e-12)
        assert velocity_from_thickness(25.0, echo_time(25.0, c, 1.7), zero_offset_us=1.7) == pytest.approx(c)


def test_zero_offset_from_one_echo():
    assert zero_offset_from_echo(40.0, echo_time(40.0, STEEL_L, 2.25), STEEL_L) == pytest.approx(2.25, abs=1e-12)


def test_two_point_calibration_recovers_velocity_and_zero():
    t0 = 1.3
    cal = two_point_calibration(25.0, echo_time(25.0, STEEL_L, t0), 50.0, echo_time(50.0, STEEL_L, t0))
    assert cal.velocity_m_s == pytest.approx(STEEL_L, rel=1e-12)
    assert cal.zero_offset_us == pytest.approx(t0, abs=1e-12)
    # order of the two points does not matter
    cal2 = two_point_calibration(50.0, echo_time(50.0, STEEL_L, t0), 25.0, echo_time(25.0, STEEL_L, t0))
    assert cal2 == pytest.approx(cal)
    # angle beam: depths are turned into sound paths s = d / cos(theta); 60 degrees: s = 2 d (exact trig)
    c_s = 3230.0  # steel shear, from memory
    cal = two_point_calibration(10.0, echo_time(20.0, c_s, 0.8), 20.0, echo_time(40.0, c_s, 0.8), beam_angle_deg=60.0)
    assert cal.velocity_m_s == pytest.approx(c_s, rel=1e-12)
    assert cal.zero_offset_us == pytest.approx(0.8, abs=1e-12)


@pytest.mark.parametrize(
    "args, match",
    [
        ((25.0, 9.0, 25.0, 17.0), "must differ"),
        ((25.0, 17.0, 50.0, 9.0), "deeper reflector must echo later"),
        ((25.0, 9.0, 50.0, 9.0), "must differ"),
        ((25.0, 9.0, 50.0, 9.0001), "plausible range"),
        ((float("nan"), 9.0, 50.0, 17.0), "finite"),
    ],
)
def test_two_point_calibration_refuses_impossible_input(args, match):
    with pytest.raises(CalibrationError, match=match):
        two_point_calibration(*args)


def test_velocity_from_thickness_refuses_impossible_input():
    with pytest.raises(CalibrationError, match="later than"):
        velocity_from_thickness(25.0, 1.0, zero_offset_us=2.0)
    with pytest.raises(CalibrationError, match="greater than 0"):
        velocity_from_thickness(-25.0, 9.0)
    with pytest.raises(CalibrationError, match="plausible"):
        velocity_from_thickness(25.0, 1e6)


def test_multiple_echo_method_is_independent_of_the_zero():
    # echo n at t0 + n 2T/c: the spacing gives T = c * spacing / 2 whatever t0
    # (multiple-echo method; Krautkramer, Ultrasonic Testing of Materials, thickness measurement)
    thickness = 17.35
    for t0 in (0.0, 0.9, 3.4):
        times = [t0 + n * 2 * thickness / (STEEL_L * 1e-3) for n in (1, 2, 3, 4)]
        assert thickness_from_echo_spacing(times, STEEL_L) == pytest.approx(thickness, rel=1e-12)
        assert velocity_from_echo_spacing(times, thickness) == pytest.approx(STEEL_L, rel=1e-12)
    # skipped echoes are numbered explicitly
    times = [n * 2 * thickness / (STEEL_L * 1e-3) for n in (1, 3, 4)]
    assert thickness_from_echo_spacing(times, STEEL_L, echo_numbers=[1, 3, 4]) == pytest.approx(thickness)
    # and without numbers they would be read as consecutive: a different (wrong) answer
    assert thickness_from_echo_spacing(times, STEEL_L) != pytest.approx(thickness, rel=1e-3)


def test_multiple_echo_method_refuses_bad_input():
    with pytest.raises(CalibrationError, match="at least two"):
        thickness_from_echo_spacing([3.0], STEEL_L)
    with pytest.raises(CalibrationError, match="increase"):
        thickness_from_echo_spacing([6.0, 3.0], STEEL_L)
    with pytest.raises(CalibrationError, match="echo_numbers"):
        thickness_from_echo_spacing([3.0, 6.0], STEEL_L, echo_numbers=[2, 2])


def test_calibrate_returns_a_new_grid_with_a_record(backend):
    g = to_backend(plate_grid(), backend)
    before = g.copy(deep=True)
    out = calibrate(g, velocity_m_s=5900.0, zero_offset_us=0.12, note="KFP-2231 step wedge, 2 echoes")
    xr.testing.assert_identical(g, before)
    assert out.attrs["velocity_m_s"] == 5900.0 and out.attrs["zero_offset_us"] == 0.12
    record = json.loads(out.attrs["calibration"])
    assert record["previous"]["velocity_m_s"] == STEEL_L
    assert record["note"].startswith("KFP-2231")
    assert read_provenance(out)[-1]["step"] == "calibrate"
    assert (out["ascan"].chunks is not None) == (backend == "dask")


def test_calibrate_refuses_impossible_values():
    g = plate_grid()
    with pytest.raises(CalibrationError, match="neither"):
        calibrate(g)
    with pytest.raises(CalibrationError, match="greater than 0"):
        calibrate(g, velocity_m_s=-5920.0)
    with pytest.raises(CalibrationError, match="plausible"):
        calibrate(g, velocity_m_s=5.92)  # km/s by mistake


def test_calibration_from_the_grid_fixes_the_depth_map(backend):
    # a plate of 12.3 mm recorded with an unknown zero offset of 0.45 us and the velocity set wrongly:
    # the two back-wall echoes measured by gates give both back, then the depth map is right
    t_true, t0 = 12.3, 0.45
    g = plate_grid(t_true, zero_offset_us=t0, attrs={"zero_offset_us": 0.0}, velocity_m_s=STEEL_L)
    g = g.assign_attrs(velocity_m_s=6100.0)
    g = to_backend(g, backend)
    gates = [Gate("bw1", 3.0, 5.5, unit="us"), Gate("bw2", 7.0, 10.0, unit="us")]
    res = evaluate_gates(g, gates)
    t1 = float(res["bw1"].time_us.mean())
    t2 = float(res["bw2"].time_us.mean())
    # echoes 1 and 2 come from sound paths T and 2T
    cal = two_point_calibration(t_true, t1, 2 * t_true, t2)
    assert cal.velocity_m_s == pytest.approx(STEEL_L, rel=2e-4)
    assert cal.zero_offset_us == pytest.approx(t0, abs=5e-3)
    fixed = calibrate(g, velocity_m_s=cal.velocity_m_s, zero_offset_us=cal.zero_offset_us)
    d = depth_map(fixed, Gate("bw", 10.0, 14.0))
    np.testing.assert_allclose(d.values, t_true, atol=0.02)
