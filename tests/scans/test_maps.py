"""C-scan maps and projections against synthetic plates of known thickness and echo heights."""

import math

import numpy as np
import pytest
import xarray as xr
from helpers.burst_grids import STEEL_L, WATER, grid_from, is_dask, plate_grid, to_backend, with_missing

from ndtmap.errors import GateError, ParameterError
from ndtmap.gates import Gate
from ndtmap.grid import read_provenance
from ndtmap.scans import (
    amplitude_map,
    backwall_loss_map,
    depth_map,
    end_view,
    map_by_kind,
    map_dataset,
    side_view,
    thickness_map,
)
from ndtmap.signal import dac_curve


@pytest.fixture(params=["numpy", "dask"])
def backend(request):
    return request.param


SCANS = np.arange(0.0, 10.0, 1.0)
INDEXES = np.arange(0.0, 6.0, 1.5)


def corroded(s, x):
    """Wall thickness of a plate with a shallow elliptical corrosion patch (mm)."""
    r2 = ((s - 5.0) / 3.0) ** 2 + ((x - 3.0) / 2.0) ** 2
    return 12.0 - 3.0 * max(0.0, 1.0 - r2)


def corroded_grid(zero=0.0, **kw):
    def echoes(s, x):
        t = corroded(s, x)
        dt = 2 * t / (STEEL_L * 1e-3)
        return [(zero + dt, 80.0), (zero + 2 * dt, 48.0)]

    return grid_from(echoes, scan_mm=SCANS, index_mm=INDEXES, duration_us=10.0, **kw)


def truth():
    return np.array([[corroded(s, x) for x in INDEXES] for s in SCANS])


def test_thickness_first_echo_on_a_corroded_plate(backend):
    g = to_backend(corroded_grid(attrs={"part_id": "KFP-7781"}), backend)
    m = thickness_map(g, Gate("bw", 7.0, 14.0))
    assert is_dask(m) == (backend == "dask")
    assert m.dims == ("scan", "index") and m.attrs["units"] == "mm" and m.name == "thickness_mm"
    np.testing.assert_allclose(m.values, truth(), atol=0.05)
    for key in ("velocity_m_s", "probe_frequency_mhz", "probe_diameter_mm", "beam_angle_deg", "part_id"):
        assert m.attrs[key] == g.attrs[key]
    assert read_provenance(m)[-1]["step"] == "thickness_map"


def test_echo_to_echo_thickness_does_not_depend_on_the_zero(backend):
    # zero offset 0.3 us present in the data but not in the calibration: first-echo is biased by
    # c * 0.3 / 2 = 0.89 mm, echo-to-echo (multiple-echo method) is not
    g = to_backend(corroded_grid(zero=0.3), backend)
    bw1 = Gate("bw1", 7.0, 14.5)
    bw2 = Gate("bw2", 7.0, 14.5, follows="bw1")
    first = thickness_map(g, bw1).values
    e2e = thickness_map(g, bw2, reference_gate=bw1, method="echo-to-echo").values
    np.testing.assert_allclose(first - truth(), STEEL_L * 1e-3 * 0.3 / 2, atol=0.05)
    np.testing.assert_allclose(e2e, truth(), atol=0.05)


def test_interface_to_backwall_thickness_in_immersion(backend):
    # tilted immersion part: water path 15 .. 19.5 mm (water 1483 m/s, from memory), wall 10 mm steel
    def echoes(s, x):
        t_ifc = 2 * (15.0 + 0.5 * s) / (WATER * 1e-3)
        return [(t_ifc, 95.0), (t_ifc + 2 * 10.0 / (STEEL_L * 1e-3), 60.0)]

    g = to_backend(grid_from(echoes, scan_mm=SCANS, index_mm=INDEXES, duration_us=32.0,
                             attrs={"water_velocity_m_s": WATER}), backend)
    ifc = Gate("ifc", 19.0, 28.0, unit="us", threshold_fsh=50.0)
    bw = Gate("bw", 5.0, 15.0, follows="ifc")
    m = thickness_map(g, bw, reference_gate=ifc, method="interface-to-backwall")
    np.testing.assert_allclose(m.values, 10.0, atol=0.05)
    # the depth map of the following gate is the same thing (depth from the interface on immersion grids)
    np.testing.assert_allclose(depth_map(g, bw, others=[ifc]).values, 10.0, atol=0.05)


def test_thickness_map_refuses_inconsistent_arguments():
    g = plate_grid()
    bw = Gate("bw", 10.0, 14.0)
    with pytest.raises(ParameterError, match="reference_gate"):
        thickness_map(g, bw, method="echo-to-echo")
    with pytest.raises(ParameterError, match="not used"):
        thickness_map(g, bw, reference_gate=bw)
    with pytest.raises(ParameterError, match="method"):
        thickness_map(g, bw, method="ultrasound")


def test_amplitude_and_depth_maps(backend):
    # echo heights vary across the scan; depth map is NaN where the gate does not trigger
    def echoes(s, x):
        return [(4.0, 10.0 + 10.0 * s)]

    g = to_backend(grid_from(echoes, scan_mm=SCANS, index_mm=INDEXES, duration_us=8.0), backend)
    gate = Gate("flaw", 9.0, 15.0, threshold_fsh=35.0)
    amp = amplitude_map(g, gate, detect="envelope")
    expected = (10.0 + 10.0 * SCANS)[:, None].repeat(INDEXES.size, 1)
    np.testing.assert_allclose(amp.values, expected, rtol=2e-3)
    assert amp.attrs["units"] == "%FSH" and amp.attrs["gate_name"] == "flaw"
    dep = depth_map(g, gate, detect="envelope")
    trig = expected >= 35.0
    np.testing.assert_allclose(dep.values[trig], STEEL_L * 1e-3 * 4.0 / 2, atol=0.01)
    assert np.isnan(dep.values[~trig]).all()
    db = amplitude_map(g, gate, detect="envelope", reference_fsh=50.0)
    np.testing.assert_allclose(db.values, 20 * np.log10(expected / 50.0), atol=0.02)
    assert db.attrs["units"] == "dB"
    dac = dac_curve([5.0, 20.0], [100.0, 25.0])
    dbd = amplitude_map(g, gate, detect="envelope", dac=dac)
    level = float(dac.level_fsh(STEEL_L * 1e-3 * 4.0 / 2))
    np.testing.assert_allclose(dbd.values[trig], 20 * np.log10(expected[trig] / level), atol=0.02)


def test_depth_map_folds_later_legs_for_angle_beams():
    # 45 degree shear wave (3230 m/s, from memory) in a 10 mm plate: a reflector at unfolded depth 15 mm
    # (leg 2) lies 5 mm below the surface (V path; common practice, no source)
    c = 3230.0
    s = 15.0 * math.sqrt(2)
    g = grid_from(lambda a, b: [(2 * s / (c * 1e-3), 60.0)], velocity_m_s=c, beam_angle_deg=45.0,
                  duration_us=20.0, attrs={"part_thickness_mm": 10.0})
    gate = Gate("leg2", 12.0, 18.0)
    np.testing.assert_allclose(depth_map(g, gate).values, 15.0, atol=0.03)
    np.testing.assert_allclose(depth_map(g, gate, fold=True).values, 5.0, atol=0.03)


def test_backwall_loss(backend):
    # back-wall echo 80 %FSH, reduced to 40 %FSH (-6.02 dB) at some positions and gone at one
    def echoes(s, x):
        if s == 7.0 and x == 3.0:
            return []
        return [(4.0, 40.0 if s >= 5.0 else 80.0)]

    g = to_backend(with_missing(grid_from(echoes, scan_mm=SCANS, index_mm=INDEXES, duration_us=8.0), [(0, 0)]),
                   backend)
    bw = Gate("bw", 9.0, 15.0, threshold_fsh=20.0)
    # 20 log10(80 / 40) = 6.02 dB (definition of the decibel)
    loss = backwall_loss_map(g, bw, nominal_fsh=80.0, detect="envelope")
    assert is_dask(loss) == (backend == "dask")
    v = loss.values
    assert np.isnan(v[0, 0])
    np.testing.assert_allclose(v[1:5], 0.0, atol=0.02)
    np.testing.assert_allclose(v[5:][~np.isclose(v[5:], v[7, 2])], 20 * math.log10(2), atol=0.02)
    # no back-wall echo: large but finite, bounded by the 0.1 %FSH floor
    assert np.isfinite(v[7, 2]) and 30.0 < v[7, 2] <= 20 * math.log10(80.0 / 0.1) + 1e-9
    # nominal from a sound region (scan 1..4 mm) or from the whole scan (median)
    reg = backwall_loss_map(g, bw, sound_region={"scan": (1.0, 4.0)}, detect="envelope")
    assert reg.attrs["nominal_fsh"] == pytest.approx(80.0, rel=2e-3)
    np.testing.assert_allclose(reg.values[1:5], 0.0, atol=0.02)
    whole = backwall_loss_map(g, bw, detect="envelope")
    finite = np.isfinite(loss.values)
    assert whole.attrs["nominal_fsh"] == pytest.approx(np.median(np.maximum(amplitude_map(
        g, bw, detect="envelope").values[finite], 0.1)))
    with pytest.raises(ParameterError, match="no grid position"):
        backwall_loss_map(g, bw, sound_region={"scan": (50.0, 60.0)})
    with pytest.raises(ParameterError, match="not both"):
        backwall_loss_map(g, bw, nominal_fsh=80.0, sound_region={"scan": (1.0, 4.0)})


def test_side_and_end_views(backend):
    g0 = with_missing(corroded_grid(), [(2, 1), (4, 0), (4, 1), (4, 2), (4, 3)])
    g = to_backend(g0, backend)
    sv = side_view(g)
    ev = end_view(g)
    assert sv.dims == ("scan", "time") and ev.dims == ("index", "time")
    assert sv.attrs["units"] == "%FSH" and "depth" in sv.coords
    a = np.abs(g0["ascan"].values.astype(np.float64))
    np.testing.assert_allclose(sv.values[0], a[0].max(axis=0), rtol=1e-6)
    # a missing A-scan is left out of the maximum; a column of only missing A-scans is NaN
    np.testing.assert_allclose(sv.values[2], np.nanmax(a[2], axis=0), rtol=1e-6)
    assert np.isnan(sv.values[4]).all()
    assert np.isfinite(ev.values).all()
    np.testing.assert_allclose(sv.depth.values, STEEL_L * 1e-3 * g0.time.values / 2)


def test_map_by_kind_gives_one_2d_variable_with_units(tmp_path):
    g = plate_grid(12.3)
    gate = Gate("bw", 10.0, 14.0)
    units = {"amplitude": "%FSH", "depth": "mm", "thickness": "mm", "backwall-loss": "dB"}
    for kind, unit in units.items():
        m = map_by_kind(g, kind, gate, **({"nominal_fsh": 80.0} if kind == "backwall-loss" else {}))
        ds = map_dataset(m)
        path = tmp_path / f"{kind}.nc"
        ds.to_netcdf(path, engine="h5netcdf")
        back = xr.open_dataset(path, engine="h5netcdf")
        assert len(back.data_vars) == 1
        var = back[m.name]
        assert var.dims == ("scan", "index") and var.attrs["units"] == unit
        assert back.attrs["velocity_m_s"] == STEEL_L
        back.close()
    with pytest.raises(ParameterError, match="do not apply"):
        map_by_kind(g, "amplitude", gate, method="echo-to-echo")
    with pytest.raises(ParameterError, match="kind"):
        map_by_kind(g, "colour", gate)
    with pytest.raises(GateError):
        map_by_kind(g, "depth", Gate("deep", 100.0, 120.0))


def test_maps_do_not_change_their_input(backend):
    g = to_backend(corroded_grid(), backend)
    before = g.copy(deep=True)
    bw = Gate("bw", 7.0, 14.0)
    for m in (amplitude_map(g, bw), depth_map(g, bw), thickness_map(g, bw), backwall_loss_map(g, bw),
              side_view(g), end_view(g)):
        m.load()
    xr.testing.assert_identical(g, before)


@pytest.mark.parametrize("kind", ["amplitude", "depth", "thickness", "backwall-loss"])
def test_missing_ascans_are_missing_in_every_map(kind, backend):
    holes = [(0, 0), (3, 2), (9, 3)]
    g = to_backend(with_missing(corroded_grid(), holes), backend)
    m = map_by_kind(g, kind, Gate("bw", 7.0, 14.0)).values
    mask = np.zeros(m.shape, dtype=bool)
    for i, j in holes:
        mask[i, j] = True
    assert np.isnan(m[mask]).all()
    assert np.isfinite(m[~mask]).all()


def test_maps_share_one_gate_evaluation(backend):
    # maps made from one evaluate_gates result equal maps that each evaluate the gate themselves
    from ndtmap.gates import evaluate_gates

    g = to_backend(with_missing(plate_grid(11.5), [(1, 0)]), backend)
    bw = Gate("bw", 8.0, 14.0, threshold_fsh=10.0)
    shared = evaluate_gates(g, [bw])["bw"]
    for own, from_shared in (
        (amplitude_map(g, bw), amplitude_map(g, bw, result=shared)),
        (depth_map(g, bw), depth_map(g, bw, result=shared)),
        (thickness_map(g, bw), thickness_map(g, bw, result=shared)),
        (backwall_loss_map(g, bw, nominal_fsh=80.0), backwall_loss_map(g, bw, nominal_fsh=80.0, result=shared)),
    ):
        xr.testing.assert_equal(own.compute(), from_shared.compute())
        assert own.attrs["units"] == from_shared.attrs["units"]
    with pytest.raises(ParameterError, match="result of gate 'other'"):
        amplitude_map(g, Gate("other", 8.0, 14.0), result=shared)
    with pytest.raises(ParameterError, match="only for method 'first-echo'"):
        thickness_map(g, bw, reference_gate=bw, method="echo-to-echo", result=shared)
