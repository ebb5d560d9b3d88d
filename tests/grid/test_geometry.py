"""Depth geometry against trigonometry and the pulse-echo relation."""

import math

import numpy as np
import pytest
from helpers.burst_grids import STEEL_L, STEEL_S, plate_grid

from ndtmap.errors import ParameterError
from ndtmap.grid import (
    depth_axis,
    depth_from_sound_path_mm,
    leg_and_folded_depth,
    skip_distance_mm,
    sound_path_axis,
    sound_path_from_depth_mm,
    sound_path_mm,
    surface_distance_axis,
    surface_distance_from_sound_path_mm,
    surface_position_mm,
    time_from_sound_path_us,
)


def test_sound_path_pulse_echo_steel():
    # pulse-echo: s = c t / 2; 10 us in steel at 5920 m/s (from memory) -> 29.6 mm
    assert sound_path_mm(10.0, STEEL_L) == pytest.approx(29.6, abs=1e-12)
    # with a zero offset the time is counted from pulse entry
    assert sound_path_mm(11.0, STEEL_L, zero_offset_us=1.0) == pytest.approx(29.6, abs=1e-12)
    # and back
    assert time_from_sound_path_us(29.6, STEEL_L, zero_offset_us=1.0) == pytest.approx(11.0, abs=1e-12)


def test_angle_beam_45_and_60_degrees():
    s = np.array([10.0, 50.0, 100.0])
    # 45 degrees: depth = s / sqrt(2) (right isosceles triangle, elementary trigonometry)
    np.testing.assert_allclose(depth_from_sound_path_mm(s, 45.0), s / math.sqrt(2.0), rtol=1e-14)
    np.testing.assert_allclose(surface_distance_from_sound_path_mm(s, 45.0), s / math.sqrt(2.0), rtol=1e-14)
    # 60 degrees: surface distance = s sin 60 = s sqrt(3)/2, depth = s cos 60 = s/2 (exact trig values)
    np.testing.assert_allclose(surface_distance_from_sound_path_mm(s, 60.0), s * math.sqrt(3.0) / 2.0, rtol=1e-14)
    np.testing.assert_allclose(depth_from_sound_path_mm(s, 60.0), s / 2.0, rtol=1e-14)
    np.testing.assert_allclose(sound_path_from_depth_mm(s / 2.0, 60.0), s, rtol=1e-14)
    # straight beam: depth = sound path, no surface distance
    np.testing.assert_allclose(depth_from_sound_path_mm(s), s)
    np.testing.assert_allclose(surface_distance_from_sound_path_mm(s, 0.0), 0.0)


def test_skip_distance():
    # full skip = 2 T tan(theta); tan 45 = 1, tan 60 = sqrt(3) (exact trig values)
    assert skip_distance_mm(20.0, 45.0) == pytest.approx(40.0, rel=1e-14)
    assert skip_distance_mm(20.0, 60.0) == pytest.approx(40.0 * math.sqrt(3.0), rel=1e-14)
    assert skip_distance_mm(15.0, 70.0) == pytest.approx(30.0 * math.tan(math.radians(70.0)), rel=1e-14)


def test_legs_and_folded_depth_on_the_v_path():
    # 45 degrees in a 20 mm plate: the beam meets the back wall at sound path 20 sqrt(2) and the surface
    # again at 40 sqrt(2) (the skip); a reflector at sound path 30 sqrt(2) lies in leg 2, 10 mm above the
    # back wall, i.e. at depth 10 mm; one at 50 sqrt(2) in leg 3 at depth 10 mm again
    # (V-path geometry, elementary trigonometry; common practice, no source)
    t = 20.0
    s = np.array([10.0, 30.0, 50.0, 70.0]) * math.sqrt(2.0)
    leg, depth = leg_and_folded_depth(depth_from_sound_path_mm(s, 45.0), t)
    np.testing.assert_array_equal(leg, [1, 2, 3, 4])
    np.testing.assert_allclose(depth, [10.0, 10.0, 10.0, 10.0], atol=1e-12)
    # asymmetric points: leg 2 counts back up from the back wall
    leg, depth = leg_and_folded_depth([5.0, 35.0, 42.0], t)
    np.testing.assert_array_equal(leg, [1, 2, 3])
    np.testing.assert_allclose(depth, [5.0, 5.0, 2.0])
    # the surface distance of the first skip equals skip_distance_mm
    s_skip = 2 * t / math.cos(math.radians(45.0))
    assert surface_distance_from_sound_path_mm(s_skip, 45.0) == pytest.approx(skip_distance_mm(t, 45.0))
    # before pulse entry there is no leg
    leg, depth = leg_and_folded_depth([-1.0, np.nan], t)
    assert np.isnan(leg).all() and np.isnan(depth).all()


def test_surface_position_with_index_point_offset():
    # x = encoder + offset + direction * s sin(theta); 30 degrees: sin = 1/2 (exact)
    x = surface_position_mm([0.0, 10.0], 40.0, 30.0, index_point_offset_mm=5.0)
    np.testing.assert_allclose(x, [25.0, 35.0])
    x = surface_position_mm(10.0, 40.0, 30.0, index_point_offset_mm=-5.0, beam_direction=-1)
    assert float(x) == pytest.approx(-15.0)
    with pytest.raises(ParameterError, match="beam_direction"):
        surface_position_mm(0.0, 1.0, 45.0, beam_direction=2)


def test_depth_axis_of_a_grid_uses_the_calibration():
    g = plate_grid(zero_offset_us=0.5, attrs={"beam_angle_deg": 0.0})
    t = g["time"].values
    np.testing.assert_allclose(sound_path_axis(g).values, STEEL_L * 1e-3 * (t - 0.5) / 2.0, rtol=1e-12)
    d = depth_axis(g)
    assert d.dims == ("time",) and d.attrs["units"] == "mm"
    np.testing.assert_allclose(d.values, STEEL_L * 1e-3 * (t - 0.5) / 2.0, rtol=1e-12)
    # a 45 degree shear-wave grid (3230 m/s, from memory)
    g45 = plate_grid(velocity_m_s=STEEL_S, beam_angle_deg=45.0, duration_us=20.0)
    s = STEEL_S * 1e-3 * g45["time"].values / 2.0
    np.testing.assert_allclose(depth_axis(g45).values, s / math.sqrt(2.0), rtol=1e-12)
    np.testing.assert_allclose(surface_distance_axis(g45).values, s / math.sqrt(2.0), rtol=1e-12)


def test_depth_axis_fold_needs_a_thickness():
    g = plate_grid(thickness_mm=5.0, beam_angle_deg=45.0, velocity_m_s=STEEL_S, duration_us=20.0)
    folded = depth_axis(g, fold=True).values
    ok = np.isfinite(folded)
    assert ok.any() and folded[ok].min() >= 0 and folded[ok].max() <= 5.0
    g2 = g.copy()
    g2.attrs = {k: v for k, v in g.attrs.items() if k != "part_thickness_mm"}
    with pytest.raises(ParameterError, match="part_thickness_mm"):
        depth_axis(g2, fold=True)


@pytest.mark.parametrize("angle", [-1.0, 90.0, float("nan")])
def test_bad_angles_raise(angle):
    with pytest.raises(ParameterError, match="beam_angle_deg"):
        depth_from_sound_path_mm(10.0, angle)
