"""Echoes placed at their reflectors: plates with legs and skews, shafts and hollow shafts on exact chords.

The code under test is ndtmap.grid.geometry (PartGeometry, reflector_position, chord_path and their
inverses). Every figure is checked against something ndtmap did not write: trigonometry and worked
examples by hand, and a ray tracer written here with plain numpy (line-circle intersections and
specular reflection), which shares no code with the module.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from ndtmap.errors import ParameterError
from ndtmap.grid.geometry import (
    PartGeometry,
    bore_limit_angle_deg,
    chord_path,
    chord_sound_path_mm,
    plate_sound_path_mm,
    reflector_position,
    sound_path_mm,
)
from ndtmap.physics.materials import MATERIALS

# --------------------------------------------------------------------------- an independent ray tracer


def trace_ray(start_radius, theta_deg, outward, big, small, path_mm, step_limit=200):
    """March a ray in an annulus (or a disc if small == 0) by line-circle intersections and mirror reflections.

    Elementary geometry: the ray P + L u meets the circle |X| = rho where L^2 + 2 (P.u) L + |P|^2 - rho^2 = 0;
    at a wall the direction is mirrored about the normal, u' = u - 2 (u.n) n. Returns the point reached
    after `path_mm` and the number of walls met before it.
    """
    th = math.radians(theta_deg)
    pos = np.array([start_radius, 0.0])
    radial = 1.0 if outward else -1.0
    u = np.array([radial * math.cos(th), math.sin(th)])  # sin > 0: toward +angle
    left, walls = float(path_mm), 0
    for _ in range(step_limit):
        hits = []
        for rho in (big, small) if small > 0 else (big,):
            b = float(pos @ u)
            c = float(pos @ pos) - rho * rho
            disc = b * b - c
            if disc < 0:
                continue
            for root in (-b - math.sqrt(disc), -b + math.sqrt(disc)):
                if root > 1e-9:
                    hits.append(root)
        step = min(hits)
        if step >= left:
            return pos + left * u, walls
        pos = pos + step * u
        left -= step
        normal = pos / np.linalg.norm(pos)
        u = u - 2.0 * float(u @ normal) * normal
        walls += 1
    raise AssertionError("ray did not finish")


# --------------------------------------------------------------------------- the worked example of the issue


def test_worked_example_from_the_bore_by_hand():
    # 60 mm bore in a 160 mm shaft: r = 30, R = 80; 45 deg shear beam from the bore.
    # Law of cosines (elementary geometry) in the triangle axis - entry point - exit point, the angle at the entry
    # point being 180 - 45 = 135 deg: R^2 = r^2 + L^2 - 2 r L cos(135) = r^2 + L^2 + 2 r L cos(45);
    # solved by hand: L = -r cos45 + sqrt(R^2 - r^2 sin^2 45) = -21.2132 + sqrt(6400 - 450) = 55.9230 mm.
    # Law of sines: sin(alpha) / r = sin(135) / R -> alpha = asin(30 * 0.70711 / 80) = asin(0.26517) = 15.377 deg.
    # Angle at the axis: 180 - 135 - 15.377 = 29.623 deg.
    c = chord_path(55.9230, 45.0, 160.0, 60.0, "inner")
    assert c.leg_mm == pytest.approx(55.9230, abs=1e-3)
    assert c.leg_angle_deg == pytest.approx(29.623, abs=1e-3)
    assert float(c.incidence_deg) == pytest.approx(15.377, abs=1e-3)
    assert float(c.depth_mm) == pytest.approx(50.0, abs=1e-3) and float(c.leg) in (1.0, 2.0)
    # the flat-plate model of the same 50 mm wall: 50 / cos 45 = 70.71 mm, 15 mm more than the chord
    assert 50.0 / math.cos(math.radians(45.0)) - c.leg_mm == pytest.approx(14.79, abs=0.01)
    # the rounded figures: 55.9 mm, 30 deg round, 15 deg incidence
    assert (round(c.leg_mm, 1), round(c.leg_angle_deg), round(float(c.incidence_deg))) == (55.9, 30, 15)


def test_worked_example_placed_on_a_rotary_index():
    shaft = PartGeometry(45.0, 90.0, "cylinder", outer_diameter_mm=160.0, inner_diameter_mm=60.0,
                         scanned_surface="inner", index_units="deg")
    half = reflector_position(250.0, [100.0, 100.0], [20.0, 55.0], shaft)
    # at 20 mm the point is at distance sqrt(30^2 + 20^2 + 2*30*20*cos45) = 46.352 mm from the axis (law of cosines)
    assert half.radius_mm[0] == pytest.approx(math.sqrt(900 + 400 + 1200 * math.cos(math.radians(45))), abs=1e-9)
    assert half.depth_mm[0] == pytest.approx(half.radius_mm[0] - 30.0, abs=1e-12)
    # the axial position stays; the angle grows toward +index; the arc at the reflector is angle * radius
    assert np.all(half.scan_mm == 250.0) and np.all(half.index_deg > 100.0)
    np.testing.assert_allclose(half.arc_mm, np.radians(half.index_deg) * half.radius_mm, rtol=1e-12)
    toward_minus = reflector_position(250.0, 100.0, 55.923, PartGeometry(
        45.0, 270.0, "cylinder", outer_diameter_mm=160.0, inner_diameter_mm=60.0, scanned_surface="inner",
        index_units="deg"))
    assert float(toward_minus.index_deg) == pytest.approx(100.0 - 29.623, abs=1e-3)
    # an index in mm of arc on the bore: 30 mm of arc at r = 30 mm is 1 rad
    in_mm = reflector_position(0.0, 30.0, 0.0, PartGeometry(
        45.0, 90.0, "cylinder", outer_diameter_mm=160.0, inner_diameter_mm=60.0, scanned_surface="inner"))
    assert float(in_mm.index_deg) == pytest.approx(math.degrees(1.0), abs=1e-9)
    assert float(in_mm.index_mm) == pytest.approx(30.0, abs=1e-9)


def test_shear_velocity_time_to_chord():
    # handbook shear velocity in steel about 3230-3250 m/s (from memory); the library's table agrees
    v = MATERIALS["steel"].velocity("shear")
    assert 3200.0 <= v <= 3260.0
    # the 55.92 mm chord is a pulse-echo time of 2 L / v = 34.6 us at 3230 m/s
    t_us = 2 * 55.923 / (v * 1e-3)
    assert float(sound_path_mm(t_us, v)) == pytest.approx(55.923, abs=1e-9)
    assert t_us == pytest.approx(34.63, abs=0.01)


# --------------------------------------------------------------------------- the ray tracer as referee


@settings(max_examples=60, deadline=None)
@given(
    inner=st.floats(10.0, 70.0),
    wall=st.floats(5.0, 60.0),
    theta=st.floats(0.0, 80.0),
    from_bore=st.booleans(),
    path_frac=st.floats(0.0, 4.0),
)
def test_chord_path_agrees_with_ray_tracing(inner, wall, theta, from_bore, path_frac):
    r, big = inner, inner + wall
    s = path_frac * wall
    start = r if from_bore else big
    end, _ = trace_ray(start, theta, from_bore, big, r, s)
    c = chord_path(s, theta, 2 * big, 2 * r, "inner" if from_bore else "outer")
    rho = float(np.hypot(*end))
    assert float(c.radius_mm) == pytest.approx(rho, abs=1e-6)
    depth = rho - r if from_bore else big - rho
    assert float(c.depth_mm) == pytest.approx(depth, abs=1e-6)
    # angles unwrap: the tracer's polar angle modulo 360
    got = float(c.angle_deg) % 360.0
    want = math.degrees(math.atan2(end[1], end[0])) % 360.0
    assert min(abs(got - want), 360.0 - abs(got - want)) < 1e-5


def test_chord_path_legs_count_the_walls_met():
    s = np.linspace(0.5, 400.0, 60)
    c = chord_path(s, 40.0, 200.0, 80.0, "inner")
    walls = np.array([trace_ray(40.0, 40.0, True, 100.0, 40.0, x)[1] for x in s])
    np.testing.assert_array_equal(c.leg, walls + 1)
    # odd legs run from the bore to the outer surface
    assert set(c.leg_ends_on[c.leg % 2 == 1]) == {"outer"} and set(c.leg_ends_on[c.leg % 2 == 0]) == {"inner"}


# --------------------------------------------------------------------------- from the outer surface of a tube


@pytest.mark.parametrize("outer,inner", [(160.0, 60.0), (100.0, 80.0), (60.0, 20.0)])
def test_limit_angle_from_outside(outer, inner):
    # a beam from the outer surface of a tube reaches the bore only while sin(theta) <= r_i / R
    # (common practice in tube testing, from memory)
    limit = math.degrees(math.asin(inner / outer))
    assert bore_limit_angle_deg(outer, inner) == pytest.approx(limit, rel=1e-15)
    below = chord_path(1.0, limit - 0.5, outer, inner, "outer")
    above = chord_path(1.0, limit + 0.5, outer, inner, "outer")
    assert below.reaches_opposite and not above.reaches_opposite
    assert below.deepest_mm == pytest.approx((outer - inner) / 2)
    # beyond the limit the beam skims past the bore: nearest approach R sin(theta) (perpendicular from the axis
    # to the chord), checked by the tracer's closest point along the chord
    theta = limit + 0.5
    big = outer / 2
    chord = 2 * big * math.cos(math.radians(theta))
    assert above.leg_mm == pytest.approx(chord, rel=1e-12)
    assert above.leg_angle_deg == pytest.approx(180.0 - 2 * theta, rel=1e-12)
    samples = np.linspace(0, chord, 2001)
    nearest = min(float(np.hypot(*trace_ray(big, theta, False, big, inner / 2, x)[0])) for x in samples)
    assert big - above.deepest_mm == pytest.approx(nearest, abs=1e-3)
    # it comes back to the outer surface at the same incidence, 180 - 2 theta further round
    back = chord_path(chord, theta, outer, inner, "outer")
    assert float(back.depth_mm) == pytest.approx(0.0, abs=1e-9)
    assert float(back.incidence_deg) == pytest.approx(theta, abs=1e-9)


def test_incidence_at_the_bore_from_outside_by_the_law_of_sines():
    # from R = 80 at 20 deg: p = 80 sin 20 = 27.36 <= r = 30, so the bore is met at asin(27.36 / 30) = 65.8 deg
    c = chord_path(1.0, 20.0, 160.0, 60.0, "outer")
    assert c.reaches_opposite
    assert float(c.incidence_deg) == pytest.approx(math.degrees(math.asin(80 * math.sin(math.radians(20)) / 30)))
    # chord by the law of cosines: r^2 = R^2 + L^2 - 2 R L cos 20 -> L = R cos20 - sqrt(r^2 - R^2 sin^2 20)
    by_hand = 80 * math.cos(math.radians(20)) - math.sqrt(900 - 6400 * math.sin(math.radians(20)) ** 2)
    assert c.leg_mm == pytest.approx(by_hand, rel=1e-12)


# --------------------------------------------------------------------------- plates


def test_plate_angle_beam_legs_and_skip_krautkramer():
    # Krautkramer, Ultrasonic Testing of Materials, angle-beam chapter: in a plate of thickness T a beam at theta
    # meets the back wall after s = T / cos(theta), T tan(theta) ahead (half skip), and the surface again after
    # the full skip 2 T tan(theta). 45 deg, T = 20: half skip 20 mm at s = 28.28 mm, full skip 40 mm.
    plate = PartGeometry(45.0, 0.0, thickness_mm=20.0)
    s = np.array([10.0, 20 * math.sqrt(2), 35.0, 40 * math.sqrt(2), 60.0])
    r = reflector_position(0.0, 0.0, s, plate)
    np.testing.assert_allclose(r.scan_mm, s / math.sqrt(2), rtol=1e-12)
    np.testing.assert_allclose(r.depth_mm, [10 / math.sqrt(2), 20.0, 40 - 35 / math.sqrt(2), 0.0,
                                            60 / math.sqrt(2) - 40], atol=1e-9)
    np.testing.assert_array_equal(r.leg, [1, 2, 2, 3, 3])
    assert np.isnan(r.index_deg).all() and np.all(r.index_mm == 0.0)


@pytest.mark.parametrize(
    "skew,dscan,dindex", [(0, 1, 0), (90, 0, 1), (180, -1, 0), (270, 0, -1), (45, 0.5**0.5, 0.5**0.5)]
)
def test_plate_skew_moves_the_reflector_along_the_beam(skew, dscan, dindex):
    # 60 deg beam: the reflector lies s sin60 = 43.30 mm ahead along the skew direction (trigonometry)
    r = reflector_position(100.0, 50.0, 50.0, PartGeometry(60.0, float(skew), thickness_mm=30.0))
    ahead = 50.0 * math.sin(math.radians(60.0))
    assert float(r.scan_mm) == pytest.approx(100.0 + dscan * ahead, abs=1e-9)
    assert float(r.index_mm) == pytest.approx(50.0 + dindex * ahead, abs=1e-9)
    assert float(r.depth_mm) == pytest.approx(25.0, abs=1e-9)


@settings(max_examples=80, deadline=None)
@given(theta=st.floats(0.0, 75.0), thickness=st.floats(2.0, 200.0), frac=st.floats(0.0, 5.0))
def test_plate_round_trip(theta, thickness, frac):
    s = frac * thickness / math.cos(math.radians(theta))
    r = reflector_position(0.0, 0.0, s, PartGeometry(theta, 0.0, thickness_mm=thickness))
    back = plate_sound_path_mm(r.depth_mm, r.leg, thickness, theta)
    assert float(back) == pytest.approx(s, abs=1e-9 * max(1.0, s))


@settings(max_examples=80, deadline=None)
@given(inner=st.floats(5.0, 80.0), wall=st.floats(3.0, 80.0), theta=st.floats(5.0, 80.0),
       from_bore=st.booleans(), frac=st.floats(0.0, 3.0))
def test_chord_round_trip(inner, wall, theta, from_bore, frac):
    args = (theta, 2 * (inner + wall), 2 * inner, "inner" if from_bore else "outer")
    s = frac * wall
    c = chord_path(s, *args)
    assert float(chord_sound_path_mm(c.angle_deg, *args)) == pytest.approx(s, abs=1e-7 * max(1.0, s))


def test_angle_beam_on_a_plate_needs_its_thickness():
    with pytest.raises(ParameterError, match="part_thickness_mm"):
        reflector_position(0.0, 0.0, 30.0, PartGeometry(45.0))
    # a straight beam on a plate of unknown thickness: depth = sound path, leg 1
    r = reflector_position(0.0, 0.0, 12.0, PartGeometry(0.0))
    assert (float(r.depth_mm), float(r.leg)) == (12.0, 1.0)


# --------------------------------------------------------------------------- cylinders, axial and radial


def test_axial_beam_in_a_hollow_shaft_is_a_plate_of_the_wall():
    # in the plane through the axis the wall is a strip (D - d)/2 = 25 mm wide: 45 deg, corner at s = 25 sqrt2,
    # 25 mm further along the axis (Krautkramer, angle-beam chapter, with T = wall)
    shaft = PartGeometry(45.0, 180.0, "cylinder", outer_diameter_mm=150.0, inner_diameter_mm=100.0,
                         scanned_surface="outer", index_units="deg")
    r = reflector_position(300.0, 40.0, [25 * math.sqrt(2), 40.0], shaft)
    np.testing.assert_allclose(r.scan_mm, 300.0 - np.array([25.0, 40 / math.sqrt(2)]), atol=1e-9)
    np.testing.assert_allclose(r.depth_mm, [25.0, 50 - 40 / math.sqrt(2)], atol=1e-9)
    np.testing.assert_allclose(r.radius_mm, 75.0 - r.depth_mm, atol=1e-12)
    assert np.all(r.index_deg == 40.0) and list(r.leg) == [2.0, 2.0]


def test_axial_beam_in_a_solid_shaft_crosses_the_axis():
    # solid shaft D = 100: the strip through the axis is 100 mm wide; at 30 deg the far side is met at
    # s = 100 / cos30, the point 180 deg round from the probe, radial depth 0 (trigonometry)
    shaft = PartGeometry(30.0, 0.0, "cylinder", outer_diameter_mm=100.0, inner_diameter_mm=0.0,
                         index_units="deg")
    s_far = 100.0 / math.cos(math.radians(30.0))
    r = reflector_position(0.0, 10.0, [0.5 * s_far, 0.75 * s_far], shaft)
    np.testing.assert_allclose(r.radius_mm, [0.0, 25.0], atol=1e-9)
    np.testing.assert_allclose(r.depth_mm, [50.0, 25.0], atol=1e-9)
    assert float(r.index_deg[1]) == pytest.approx(190.0)


def test_straight_beam_on_a_cylinder_is_radial():
    shaft = PartGeometry(0.0, 0.0, "cylinder", outer_diameter_mm=160.0, inner_diameter_mm=60.0,
                         scanned_surface="outer", index_units="deg")
    r = reflector_position(0.0, 33.0, [20.0, 50.0, 70.0], shaft)
    np.testing.assert_allclose(r.depth_mm, [20.0, 50.0, 30.0])  # back wall at the 50 mm wall, then the repeat
    assert np.all(r.index_deg == 33.0) and list(r.leg) == [1.0, 2.0, 2.0]


def test_negative_or_nan_sound_paths_are_nan():
    shaft = PartGeometry(45.0, 90.0, "cylinder", outer_diameter_mm=160.0, inner_diameter_mm=60.0,
                         scanned_surface="inner", index_units="deg")
    r = reflector_position(0.0, 0.0, [-1.0, np.nan], shaft)
    assert np.isnan(r.depth_mm).all() and np.isnan(r.leg).all() and np.isnan(r.index_deg).all()


@pytest.mark.parametrize(
    "kwargs,match",
    [
        ({"beam_skew_deg": 45.0}, "helical"),
        ({"inner_diameter_mm": 200.0}, "must be smaller"),
        ({"inner_diameter_mm": 0.0, "scanned_surface": "inner"}, "needs a bore"),
        ({"outer_diameter_mm": None}, "outer_diameter_mm"),
        ({"scanned_surface": "bore"}, "scanned_surface"),
    ],
)
def test_impossible_cylinders_are_refused(kwargs, match):
    base = {"beam_angle_deg": 45.0, "beam_skew_deg": 90.0, "shape": "cylinder", "outer_diameter_mm": 160.0,
            "inner_diameter_mm": 60.0, "scanned_surface": "inner"}
    with pytest.raises(ParameterError, match=match):
        PartGeometry(**{**base, **kwargs})


def test_degrees_on_a_plate_are_refused():
    with pytest.raises(ParameterError, match="index_units"):
        PartGeometry(0.0, index_units="deg")


def test_toward_and_incidence_name_the_surface_each_leg_runs_to():
    # plate, 45 deg, T = 20: leg 1 runs to the back wall (the opposite surface), leg 2 back up
    plate = reflector_position(0.0, 0.0, [10.0, 35.0, np.nan], PartGeometry(45.0, thickness_mm=20.0))
    assert plate.toward.tolist() == ["opposite", "scanned", ""]
    np.testing.assert_allclose(plate.incidence_deg, [45.0, 45.0, np.nan])
    # from outside a 160/60 tube at 20 deg: to the bore at asin(80 sin20 / 30) (law of sines), then back out at 20
    tube = PartGeometry(20.0, 90.0, "cylinder", outer_diameter_mm=160.0, inner_diameter_mm=60.0)
    first = float(chord_path(0.0, 20.0, 160.0, 60.0, "outer").leg_mm)
    r = reflector_position(0.0, 0.0, [0.5 * first, 1.5 * first], tube)
    assert r.toward.tolist() == ["opposite", "scanned"] and r.reaches_opposite
    np.testing.assert_allclose(r.incidence_deg, [math.degrees(math.asin(80 * math.sin(math.radians(20)) / 30)), 20.0])
    # beyond the limit angle every chord returns to the scanned (outer) surface
    skim = reflector_position(0.0, 0.0, [10.0, 200.0], PartGeometry(
        45.0, 90.0, "cylinder", outer_diameter_mm=160.0, inner_diameter_mm=60.0))
    assert skim.toward.tolist() == ["scanned", "scanned"] and not skim.reaches_opposite
