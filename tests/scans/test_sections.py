"""B-scans, D-scans, polyline and true-geometry sections."""

import math

import numpy as np
import pytest
import xarray as xr
from helpers.burst_grids import STEEL_L, STEEL_S, grid_from, is_dask, to_backend, with_missing

from ndtmap.errors import ParameterError
from ndtmap.scans import angle_beam_section, b_scan, d_scan, polyline_section


@pytest.fixture(params=["numpy", "dask"])
def backend(request):
    return request.param


def ramp_grid():
    # each A-scan's amplitude is linear in scan and index, so bilinear interpolation is exact
    return grid_from(lambda s, x: [(3.0, 10.0 + 5.0 * s + 3.0 * x)], scan_mm=[0.0, 1.0, 2.0, 4.0],
                     index_mm=[0.0, 1.5, 3.0], duration_us=6.0)


def test_b_scan_nearest_and_linear(backend):
    g0 = ramp_grid()
    g = to_backend(g0, backend)
    near = b_scan(g, 1.2)
    assert is_dask(near) == (backend == "dask")
    assert near.dims == ("scan", "time") and near.attrs["index_mm_used"] == 1.5
    np.testing.assert_array_equal(near.values, np.abs(g0["ascan"].sel(index=1.5).values))
    # linear interpolation of the signed signal between lines 0 and 1.5 mm; at 0.5 mm: 2/3 and 1/3 weights
    lin = b_scan(g, 0.5, method="linear", detect="none")
    a = g0["ascan"].values.astype(np.float64)
    np.testing.assert_allclose(lin.values, a[:, 0] * (2 / 3) + a[:, 1] * (1 / 3), atol=1e-4)
    # the depth coordinate is the calibrated one
    np.testing.assert_allclose(near.depth.values, STEEL_L * 1e-3 * g0.time.values / 2)
    with pytest.raises(ParameterError, match="index_mm"):
        b_scan(g, 3.5)


def test_d_scan(backend):
    g0 = ramp_grid()
    d = d_scan(to_backend(g0, backend), 2.9)  # nearest is 2 mm (4 mm is farther)
    assert d.dims == ("index", "time") and d.attrs["scan_mm_used"] == 2.0
    np.testing.assert_array_equal(d.values, np.abs(g0["ascan"].sel(scan=2.0).values))


def test_polyline_section_distance_and_values(backend):
    g0 = ramp_grid()
    g = to_backend(g0, backend)
    # along the scan axis on a recorded index line: the same as the B-scan at the recorded positions
    sec = polyline_section(g, [(0.0, 1.5), (4.0, 1.5)], step_mm=1.0, detect="none")
    assert is_dask(sec) == (backend == "dask")
    assert sec.dims == ("distance", "time") and sec.distance.attrs["units"] == "mm"
    np.testing.assert_allclose(sec.distance.values, [0.0, 1.0, 2.0, 3.0, 4.0])
    a = g0["ascan"].values.astype(np.float64)
    np.testing.assert_allclose(sec.values[[0, 1, 2, 4]], a[:, 1], atol=1e-4)
    np.testing.assert_allclose(sec.values[3], (a[2, 1] + a[3, 1]) / 2, atol=1e-4)  # 3 mm: halfway 2 .. 4 mm
    # a diagonal with a bend: distances add up along the segments (Pythagoras)
    pts = [(0.0, 0.0), (3.0, 3.0), (4.0, 3.0)]
    sec = polyline_section(g, pts, step_mm=0.25)
    total = 3 * math.sqrt(2) + 1.0
    assert sec.distance.values[-1] == pytest.approx(total)
    assert np.diff(sec.distance.values).max() <= 0.25 + 1e-12
    np.testing.assert_allclose([sec.scan.values[-1], sec["index"].values[-1]], [4.0, 3.0])
    # envelope amplitudes are bilinear in (scan, index) here, so interpolation is exact
    env = polyline_section(g, pts, step_mm=0.25, detect="envelope")
    amp = env.max("time").values
    np.testing.assert_allclose(amp, 10.0 + 5.0 * env.scan.values + 3.0 * env["index"].values, rtol=2e-3)
    with pytest.raises(ParameterError, match="points_mm"):
        polyline_section(g, [(0.0, 0.0)])
    with pytest.raises(ParameterError, match="scan range"):
        polyline_section(g, [(0.0, 0.0), (9.0, 0.0)])


def test_missing_ascans_stay_missing_in_sections(backend):
    g = to_backend(with_missing(ramp_grid(), [(1, 1)]), backend)
    assert np.isnan(b_scan(g, 1.5).values[1]).all()
    assert np.isfinite(b_scan(g, 1.5).values[0]).all()
    lin = b_scan(g, 1.0, method="linear").values
    assert np.isnan(lin[1]).all()  # interpolated next to a missing A-scan
    sec = polyline_section(g, [(0.0, 1.5), (2.0, 1.5)], step_mm=0.5).values
    assert np.isnan(sec[2]).all() and np.isfinite(sec[0]).all()


def test_angle_beam_section_places_a_reflector_at_its_true_position():
    # 45 degree shear wave (3230 m/s, from memory); a side-drilled hole at x = 30 mm, depth 12 mm.
    # An A-scan at probe position p sees it at sound path sqrt((30 - p)^2 + 12^2), strongest where the beam
    # axis passes through it (p = 30 - 12 tan 45 = 18 mm). Trigonometry of the angle beam; common practice.
    c = STEEL_S
    X, Z = 30.0, 12.0
    scans = np.arange(5.0, 30.0, 0.5)

    def echoes(p, _x):
        s = math.hypot(X - p, Z)
        off_axis = math.degrees(math.atan2(X - p, Z)) - 45.0
        return [(2 * s / (c * 1e-3), 80.0 * math.exp(-0.5 * (off_axis / 6.0) ** 2))]

    g = grid_from(echoes, scan_mm=scans, index_mm=[0.0], velocity_m_s=c, beam_angle_deg=45.0, duration_us=20.0)
    sec = angle_beam_section(g, 0.0, x_step_mm=0.1, z_step_mm=0.1, detect="envelope")
    assert sec.dims == ("depth", "x") and sec.attrs["units"] == "%FSH"
    k = np.unravel_index(np.nanargmax(sec.values), sec.shape)
    assert float(sec.x[k[1]]) == pytest.approx(X, abs=0.3)
    assert float(sec.depth[k[0]]) == pytest.approx(Z, abs=0.3)
    # with an index-point offset the image moves by the offset
    moved = angle_beam_section(g, 0.0, x_step_mm=0.1, z_step_mm=0.1, detect="envelope", index_point_offset_mm=-4.0)
    k = np.unravel_index(np.nanargmax(moved.values), moved.shape)
    assert float(moved.x[k[1]]) == pytest.approx(X - 4.0, abs=0.3)


def test_angle_beam_section_folds_the_second_leg():
    # 45 degrees in a 10 mm plate: a reflector reached in leg 2 at unfolded depth 15 mm lies at true depth 5 mm
    # and at surface distance 15 mm from the exit point (V path; common practice, no source)
    c = STEEL_S
    s = 15.0 * math.sqrt(2)
    scans = np.arange(0.0, 5.0, 0.5)

    def echoes(p, _x):
        return [(2 * s / (c * 1e-3), 70.0)] if p == 2.0 else []

    g = grid_from(echoes, scan_mm=scans, index_mm=[0.0], velocity_m_s=c, beam_angle_deg=45.0, duration_us=20.0,
                  attrs={"part_thickness_mm": 10.0})
    sec = angle_beam_section(g, 0.0, x_step_mm=0.1, z_step_mm=0.1, fold=True, detect="envelope")
    assert float(sec.depth.max()) <= 10.0 + 1e-9
    k = np.unravel_index(np.nanargmax(sec.values), sec.shape)
    assert float(sec.depth[k[0]]) == pytest.approx(5.0, abs=0.15)
    assert float(sec.x[k[1]]) == pytest.approx(2.0 + 15.0, abs=0.3)
    no_thickness = g.copy()
    no_thickness.attrs = {k: v for k, v in g.attrs.items() if k != "part_thickness_mm"}
    with pytest.raises(ParameterError, match="part_thickness_mm"):
        angle_beam_section(no_thickness, 0.0, fold=True)


def test_sections_do_not_change_their_input(backend):
    g = to_backend(ramp_grid(), backend)
    before = g.copy(deep=True)
    b_scan(g, 1.0, method="linear").load()
    d_scan(g, 1.0).load()
    polyline_section(g, [(0.0, 0.0), (4.0, 3.0)]).load()
    xr.testing.assert_identical(g, before)
