"""Gates against exact sub-sample timing formulas and synthetic echoes of known times."""

import json
import math

import numpy as np
import pytest
import xarray as xr
from helpers.burst_grids import DT, FREQ, STEEL_L, WATER, grid_from, is_dask, plate_grid, to_backend, with_missing
from hypothesis import given, settings
from hypothesis import strategies as st

from ndtmap.errors import GateError, ParameterTypeError
from ndtmap.gates import Gate, evaluate_gate, evaluate_gates, gate_window_us
from ndtmap.gates.kernels import reference_gate_kernel
from ndtmap.grid import make_grid, read_provenance
from ndtmap.scans import depth_map
from ndtmap.signal import dac_curve


@pytest.fixture(params=["numpy", "dask"])
def backend(request):
    return request.param


def rectified_grid(traces, dt=DT, **attrs):
    traces = np.asarray(traces, dtype=np.float32)
    if traces.ndim == 1:
        traces = traces[None, None, :]
    t = np.arange(traces.shape[-1]) * dt
    return make_grid(traces, scan_mm=np.arange(traces.shape[0], dtype=float),
                     index_mm=np.arange(traces.shape[1], dtype=float), time_us=t, velocity_m_s=STEEL_L,
                     probe_frequency_mhz=FREQ, probe_diameter_mm=10.0, signal="rectified", attrs=attrs)


# ----------------------------------------------------------------------------------------------- definitions


@pytest.mark.parametrize(
    "kwargs, match",
    [
        ({"name": "flaw", "start": 5.0, "end": 3.0}, "start.*smaller than.*end"),
        ({"name": "flaw", "start": 5.0, "end": 5.0}, "smaller than"),
        ({"name": "", "start": 1.0, "end": 3.0}, "name"),
        ({"name": "flaw", "start": 1.0, "end": 3.0, "threshold_fsh": -1.0}, "threshold_fsh"),
        ({"name": "flaw", "start": 1.0, "end": 3.0, "threshold_fsh": 1001.0}, "threshold_fsh"),
        ({"name": "flaw", "start": 1.0, "end": 3.0, "mode": "max"}, "mode"),
        ({"name": "flaw", "start": 1.0, "end": 3.0, "unit": "in"}, "unit"),
        ({"name": "flaw", "start": 1.0, "end": 3.0, "follows": "flaw"}, "itself"),
        ({"name": "flaw", "start": float("nan"), "end": 3.0}, "finite"),
        ({"name": "flaw", "start": "1", "end": 3.0}, "number"),
    ],
)
def test_gate_definitions_are_checked(kwargs, match):
    with pytest.raises(GateError, match=match):
        Gate(**kwargs)


def test_follow_chains_are_checked():
    g = plate_grid()
    a = Gate("a", 1.0, 2.0, follows="b")
    b = Gate("b", 1.0, 2.0, follows="a")
    with pytest.raises(GateError, match="cycle"):
        evaluate_gate(g, a, others=[b])
    with pytest.raises(GateError, match="not defined"):
        evaluate_gate(g, Gate("x", 1.0, 2.0, follows="nowhere"))
    with pytest.raises(GateError, match="two different gates"):
        evaluate_gates(g, [Gate("x", 1.0, 2.0), Gate("x", 3.0, 4.0)])
    with pytest.raises(ParameterTypeError):
        evaluate_gate(g, {"name": "x"})


def test_gate_round_trips_through_a_dict():
    g = Gate("bw", 10, 14, unit="mm", threshold_fsh=35, mode="first-crossing", follows="ifc")
    assert Gate.from_dict(json.loads(json.dumps(g.to_dict()))) == g
    with pytest.raises(GateError, match="unknown"):
        Gate.from_dict({"name": "x", "start": 1, "end": 2, "colour": "red"})


# ----------------------------------------------------------------------------------------------- the kernel


def test_parabolic_peak_is_exact_on_a_sampled_parabola():
    # the vertex of the parabola through (-1, y0), (0, y1), (1, y2) lies at (y0 - y2) / (2 (y0 - 2 y1 + y2))
    # (three-point parabolic interpolation; any numerical-methods text, e.g. Press et al., Numerical Recipes,
    # section 10.2): exact when the samples lie on a parabola
    t = np.arange(100) * DT
    for vertex in (0.9713, 1.0, 1.0137, 1.0299):
        trace = np.clip(90.0 - 4000.0 * (t - vertex) ** 2, 0.0, None)
        g = rectified_grid(trace)
        r = evaluate_gate(g, Gate("p", 0.5, 1.5, unit="us", threshold_fsh=10))
        assert r.time_us.item() == pytest.approx(vertex, abs=1e-6)  # float32 samples
        assert r.amplitude_fsh.item() == pytest.approx(float(trace.max()), rel=1e-6)


def test_first_crossing_is_exact_on_a_ramp():
    # linear interpolation between the two samples that bracket the threshold is exact for a straight line
    t = np.arange(200) * DT
    start, slope = 1.2345, 40.0  # %FSH per us
    trace = np.clip(slope * (t - start), 0.0, 100.0)
    g = rectified_grid(trace)
    for thr in (10.0, 33.3, 57.0):
        r = evaluate_gate(g, Gate("f", 0.5, 3.8, unit="us", threshold_fsh=thr, mode="first-crossing"))
        assert r.time_us.item() == pytest.approx(start + thr / slope, abs=1e-5)  # float32 samples
        assert r.triggered.item()


def test_first_crossing_amplitude_is_the_peak_of_the_crossing_echo():
    # two echoes in one window: the first crosses the threshold, the second is higher.
    # first-crossing reports the first echo (its time and its own peak), peak mode the higher one
    g = grid_from(lambda s, x: [(3.0, 40.0), (5.0, 90.0)], scan_mm=[0.0], index_mm=[0.0], duration_us=8.0)
    fc = evaluate_gate(g, Gate("g", 2.0, 6.0, unit="us", threshold_fsh=25.0, mode="first-crossing"))
    pk = evaluate_gate(g, Gate("g", 2.0, 6.0, unit="us", threshold_fsh=25.0, mode="peak"))
    assert 2.5 < fc.time_us.item() < 3.0
    assert fc.amplitude_fsh.item() == pytest.approx(40.0, rel=0.06)  # sampled peak of |rf|, 10 samples per period
    assert pk.amplitude_fsh.item() == pytest.approx(90.0, rel=0.06)
    assert pk.time_us.item() == pytest.approx(5.0, abs=0.01)


def test_kernel_respects_per_ascan_windows():
    x = np.tile(np.arange(10, dtype=float), (3, 1))
    peak, tpk, tcr, _ = reference_gate_kernel(x, 0.0, 1.0, 4.5, 1, i_start=np.array([0.0, 2.0, np.nan]),
                                     i_end=np.array([3.0, 6.0, 5.0]))
    np.testing.assert_array_equal(peak[:2], [3.0, 6.0])
    assert np.isnan(tcr[0]) and tcr[1] == pytest.approx(4.5)
    assert np.isnan(peak[2]) and np.isnan(tpk[2])


# ----------------------------------------------------------------------------------------------- on synthetic plates


@pytest.mark.parametrize("detect", ["rectified", "envelope"])
def test_plate_thickness_with_sub_sample_timing(backend, detect):
    # back-wall echoes at 2T/c and 4T/c (pulse-echo relation); 5 MHz bursts sampled at 50 MHz (10 samples a
    # period): the echo times are not on samples, so this needs sub-sample timing to reach 0.05 mm
    for thickness in (8.137, 12.3, 19.96):
        g = to_backend(plate_grid(thickness, duration_us=16.0), backend)
        bw1 = Gate("bw1", thickness - 2.0, thickness + 2.0)
        bw2 = Gate("bw2", thickness - 2.0, thickness + 2.0, follows="bw1")
        res = evaluate_gates(g, [bw1, bw2], detect=detect)
        d1 = res["bw1"].depth_mm.values
        d2 = res["bw2"].depth_mm.values
        assert np.abs(d1 - thickness).max() < 0.05
        assert np.abs(d2 - 2 * thickness).max() < 0.05
        assert res["bw1"].triggered.values.all()


def test_result_is_lazy_on_dask_and_equals_numpy():
    g = plate_grid(12.3)
    gd = g.chunk({"scan": 2})
    gates = [Gate("bw1", 10.0, 14.0), Gate("bw2", 10.0, 14.0, follows="bw1", mode="first-crossing")]
    lazy = evaluate_gates(gd, gates)
    eager = evaluate_gates(g, gates)
    for name in ("bw1", "bw2"):
        for var in ("triggered", "amplitude_fsh", "time_us", "depth_mm"):
            assert is_dask(lazy[name][var]), (name, var)
        xr.testing.assert_allclose(lazy[name].compute(), eager[name])
    # envelope detection stays lazy too
    assert is_dask(evaluate_gate(gd, gates[0], detect="envelope").time_us)


def test_repeat_echo_appears_at_twice_the_depth(backend):
    # a reflector at depth z gives a repeat echo at 2z (sound bounces reflector -> surface -> reflector;
    # common practice, no source); a gate over the second echo finds 2z in the depth map
    z = 7.5
    t1 = 2 * z / (STEEL_L * 1e-3)
    g = to_backend(grid_from(lambda s, x: [(t1, 70.0), (2 * t1, 35.0)], duration_us=8.0), backend)
    d1 = depth_map(g, Gate("first", 5.0, 10.0))
    d2 = depth_map(g, Gate("repeat", 12.5, 17.5))
    np.testing.assert_allclose(d1.values, z, atol=0.02)
    np.testing.assert_allclose(d2.values, 2 * z, atol=0.02)


def test_interface_following_gate_keeps_the_true_depth_on_a_tilted_immersion_part(backend):
    # immersion: the water path w(x) grows linearly across the scan (tilted part). Interface echo at 2 w / c_water,
    # reflector echo at 2 w / c_water + 2 z / c_steel (pulse-echo relation in each medium; water 1483 m/s and
    # steel 5920 m/s from memory). A gate following the interface gate measures depth from the interface.
    z = 6.0
    scans = np.arange(0.0, 21.0, 2.0)

    def water_mm(s):
        return 20.0 + 0.2 * s

    def echoes(s, x):
        t_ifc = 2 * water_mm(s) / (WATER * 1e-3)
        return [(t_ifc, 95.0), (t_ifc + 2 * z / (STEEL_L * 1e-3), 40.0)]

    g = grid_from(echoes, scan_mm=scans, index_mm=[0.0, 1.0], duration_us=40.0,
                  attrs={"water_path_mm": 20.0, "water_velocity_m_s": WATER})
    g = to_backend(g, backend)
    ifc = Gate("interface", 25.0, 36.0, unit="us", threshold_fsh=50.0)
    flaw = Gate("flaw", 2.0, 15.0, follows="interface", threshold_fsh=20.0)
    r = evaluate_gate(g, flaw, others=[ifc])
    assert r.attrs["depth_reference"] == "interface"
    np.testing.assert_allclose(r.depth_mm.values, z, atol=0.03)
    # without following, a fixed gate's depth drifts with the water path (the check above would fail)
    fixed = evaluate_gate(g, Gate("fixed", 27.0 + 2 * z / (STEEL_L * 1e-3) - 0.1, 37.0, unit="us",
                                  threshold_fsh=20.0), depth_from="entry")
    spread = np.nanmax(fixed.depth_mm.values) - np.nanmin(fixed.depth_mm.values)
    assert spread > 5.0
    # explicit reference: the same answer
    r2 = evaluate_gate(g, flaw, others=[ifc], depth_from="interface")
    np.testing.assert_allclose(r2.depth_mm.values, r.depth_mm.values)
    with pytest.raises(GateError, match="depth_from"):
        evaluate_gate(g, flaw, others=[ifc], depth_from="nowhere")


def test_following_gate_is_missing_where_the_followed_gate_did_not_trigger(backend):
    # interface echo only on some positions
    def echoes(s, x):
        if s >= 2.0:
            return [(2.0, 10.0), (4.0, 60.0)]  # weak interface: no trigger
        return [(2.0, 90.0), (4.0, 60.0)]

    g = to_backend(grid_from(echoes, duration_us=8.0), backend)
    ifc = Gate("ifc", 1.0, 3.0, unit="us", threshold_fsh=50.0)
    bw = Gate("bw", 1.0, 3.0, unit="us", follows="ifc")
    r = evaluate_gate(g, bw, others=[ifc])
    trig = r.triggered.values
    assert trig[:2].all() and not trig[2:].any()
    assert np.isnan(r.amplitude_fsh.values[2:]).all() and np.isnan(r.time_us.values[2:]).all()
    np.testing.assert_allclose(r.time_us.values[:2], 4.0, atol=0.01)


def test_missing_ascans_give_missing_results(backend):
    g = to_backend(with_missing(plate_grid(12.3), [(0, 1), (2, 2)]), backend)
    gates = [Gate("bw1", 10.0, 14.0), Gate("bw2", 10.0, 14.0, follows="bw1"),
             Gate("fc", 10.0, 14.0, mode="first-crossing")]
    for name, r in evaluate_gates(g, gates).items():
        for i, j in [(0, 1), (2, 2)]:
            assert not bool(r.triggered[i, j]), name
            for var in ("amplitude_fsh", "time_us", "depth_mm", "sound_path_mm"):
                assert np.isnan(float(r[var][i, j])), (name, var)
        assert int(r.triggered.sum()) == r.triggered.size - 2


def test_missing_flag_on_an_int16_grid():
    base = plate_grid(12.3)
    counts = np.round(base["ascan"].values / 100.0 * 32767).astype(np.int16)
    missing = np.zeros(counts.shape[:2], dtype=bool)
    missing[1, 1] = True
    g = make_grid(counts, scan_mm=base.scan.values, index_mm=base["index"].values, time_us=base.time.values,
                  velocity_m_s=STEEL_L, probe_frequency_mhz=FREQ, probe_diameter_mm=10.0,
                  fsh_per_count=100.0 / 32767)
    g["missing"] = (("scan", "index"), missing)
    r = evaluate_gate(g, Gate("bw", 10.0, 14.0))
    assert not bool(r.triggered[1, 1]) and np.isnan(float(r.amplitude_fsh[1, 1]))
    assert float(r.amplitude_fsh[0, 0]) == pytest.approx(80.0, rel=0.06)


def test_gate_outside_the_record_raises_naming_gate_window_and_record():
    g = plate_grid(12.3, duration_us=6.0)  # record 0 .. 5.98 us = 0 .. 17.7 mm
    with pytest.raises(GateError, match=r"gate 'deep'.*20 to 25 mm.*entirely outside.*0 to 5\.98 us"):
        evaluate_gate(g, Gate("deep", 20.0, 25.0))
    with pytest.raises(GateError, match=r"gate 'edge'.*partly outside"):
        evaluate_gate(g, Gate("edge", 15.0, 19.0))
    with pytest.raises(GateError, match="less than one sample"):
        evaluate_gate(g, Gate("thin", 1.0, 1.01, unit="us"))
    with pytest.raises(GateError, match=r"gate 'far'.*follows 'bw'.*lies outside"):
        evaluate_gate(g, Gate("far", 30.0, 40.0, follows="bw"), others=[Gate("bw", 10.0, 14.0)])
    # a window that starts before the record at every position
    with pytest.raises(GateError, match=r"gate 'early'.*follows 'ifc'.*lies outside"):
        evaluate_gate(g, Gate("early", -1.0, 0.5, unit="us", follows="ifc"),
                      others=[Gate("ifc", 0.1, 0.6, unit="us", threshold_fsh=0.0)])


def test_following_gate_partly_outside_at_some_positions_is_missing_there(backend):
    # the first echo moves from 2.0 to 5.0 us across the scan; the following window 1.0 .. 1.5 us after it leaves
    # the 6 us record where the echo is late
    def echoes(s, x):
        t1 = 2.0 + s
        return [(t1, 80.0), (t1 + 1.2, 50.0)] if t1 + 1.2 < 5.9 else [(t1, 80.0)]

    g = to_backend(grid_from(echoes, duration_us=6.0), backend)
    first = Gate("first", 1.5, 5.5, unit="us", threshold_fsh=60.0)
    second = Gate("second", 1.0, 1.5, unit="us", follows="first")
    r = evaluate_gate(g, second, others=[first])
    outside = r.outside_record.values
    np.testing.assert_array_equal(outside[:, 0], [False, False, False, True])  # 5.0 + 1.5 > 5.98
    assert not r.triggered.values[outside].any()
    assert np.isnan(r.amplitude_fsh.values[outside]).all()
    np.testing.assert_allclose(r.time_us.values[~outside], (2.0 + g.scan.values[:3, None] + 1.2).repeat(3, 1).ravel(),
                               atol=0.01)
    if backend == "numpy":
        assert r.attrs["positions_outside_record"] == int(outside.sum())
    assert "outside_record" in r.attrs["outside_record_note"]


def test_result_attrs_units_provenance_and_input_untouched(backend):
    g = to_backend(plate_grid(12.3, attrs={"material": "steel", "part_id": "KFP-0412"}), backend)
    before = g.copy(deep=True)
    gate = Gate("bw", 10.0, 14.0, threshold_fsh=30.0)
    r = evaluate_gate(g, gate, reference_fsh=80.0, dac=dac_curve([5.0, 20.0], [80.0, 40.0]))
    xr.testing.assert_identical(g, before)
    for key in ("velocity_m_s", "beam_angle_deg", "probe_frequency_mhz", "probe_diameter_mm", "material", "part_id"):
        assert r.attrs[key] == g.attrs[key]
    assert json.loads(r.attrs["gate"]) == gate.to_dict()
    units = {"triggered": "1", "amplitude_fsh": "%FSH", "time_us": "us", "sound_path_mm": "mm", "depth_mm": "mm",
             "amplitude_db": "dB", "amplitude_db_re_dac": "dB"}
    for var, unit in units.items():
        assert r[var].attrs["units"] == unit
        assert r[var].attrs["long_name"]
    assert r.scan.attrs["units"] == "mm" and r["index"].attrs["units"] == "mm"
    assert read_provenance(r)[-1]["step"] == "gate"
    # dB re 80 %FSH of the sampled peak amplitude: 20 log10(A / 80) (definition of the decibel)
    np.testing.assert_allclose(r.amplitude_db.values, 20 * np.log10(r.amplitude_fsh.values / 80.0))


def test_angle_beam_depth_and_surface_distance():
    # 45 degree shear wave in steel (3230 m/s, from memory): an echo at sound path 40 mm lies at depth and surface
    # distance 40 / sqrt(2)
    c = 3230.0
    s = 40.0
    g = grid_from(lambda a, b: [(2 * s / (c * 1e-3), 70.0)], velocity_m_s=c, beam_angle_deg=45.0, duration_us=40.0)
    r = evaluate_gate(g, Gate("sdh", 20.0, 35.0))  # mm of depth
    np.testing.assert_allclose(r.sound_path_mm.values, s, atol=0.03)
    np.testing.assert_allclose(r.depth_mm.values, s / math.sqrt(2), atol=0.03)
    np.testing.assert_allclose(r.surface_distance_mm.values, s / math.sqrt(2), atol=0.03)
    a, b = gate_window_us(g, Gate("sdh", 20.0, 35.0))
    assert a == pytest.approx(2 * 20.0 * math.sqrt(2) / (c * 1e-3))


# ----------------------------------------------------------------------------------------------- properties


traces = st.lists(st.floats(0.0, 120.0, allow_nan=False, width=32), min_size=12, max_size=40)


@settings(max_examples=50, deadline=None)
@given(trace=traces, lo=st.integers(0, 5), width=st.integers(1, 6), thr=st.floats(0.0, 100.0),
       mode=st.sampled_from(["peak", "first-crossing"]), missing=st.booleans())
def test_gate_properties(trace, lo, width, thr, mode, missing):
    x = np.array(trace, dtype=np.float32)
    data = np.stack([x, x[::-1]])[None, :, :].repeat(2, axis=0)
    if missing:
        data[1, 0, :] = np.nan
    g = rectified_grid(data)
    start, end = lo * DT, (lo + width) * DT
    r = evaluate_gate(g, Gate("p", start, end, unit="us", threshold_fsh=thr, mode=mode))
    window = data[..., lo:lo + width + 1]
    tt = r.time_us.values
    amp = r.amplitude_fsh.values
    trig = r.triggered.values
    finite = np.isfinite(tt)
    # event times never leave the window
    assert np.all(tt[finite] >= start - 1e-9) and np.all(tt[finite] <= end + 1e-9)
    # amplitudes never exceed the window's maximum
    with np.errstate(invalid="ignore"):
        wmax = np.nanmax(np.where(np.isnan(window), -np.inf, window), axis=-1)
    ok = np.isfinite(amp)
    assert np.all(amp[ok] <= wmax[ok] + 1e-4)
    # triggered exactly where the rule says
    if mode == "peak":
        np.testing.assert_array_equal(trig[ok], amp[ok] >= thr)
    else:
        # the kernel compares each float32 sample with the threshold in float64, as the peak mode does
        np.testing.assert_array_equal(trig[ok], (window[ok].astype(np.float64) >= thr).any(axis=-1))
    np.testing.assert_array_equal(finite, trig)
    # missing A-scans stay missing
    if missing:
        assert not trig[1, 0] and np.isnan(amp[1, 0]) and np.isnan(tt[1, 0])
        assert np.isfinite(amp[0, 0])


def test_blocked_kernel_equals_one_pass(monkeypatch):
    # the in-memory path splits large grids into slabs; the answer must not change
    import ndtmap.gates.kernels as gates_module

    g = plate_grid(12.3, scan_mm=np.arange(7.0), index_mm=np.arange(5.0))
    gates = [Gate("bw1", 10.0, 14.0), Gate("bw2", 10.0, 14.0, follows="bw1", mode="first-crossing")]
    whole = evaluate_gates(g, gates)
    monkeypatch.setattr(gates_module, "BLOCK_ELEMENTS", 700)  # a few A-scans per slab
    sliced = evaluate_gates(g, gates)
    for name in whole:
        xr.testing.assert_identical(whole[name].drop_attrs(), sliced[name].drop_attrs())
