"""The compiled gate kernel against the numpy reference kernel and against plain numpy definitions.

The reference kernel (``ndtmap.gates.kernels.reference_gate_kernel``) is itself checked against exact sub-sample
formulas in tests/gates/test_gates.py; here the compiled kernel must give the same numbers, bit for bit, on random
data with the awkward cases: NaN A-scans, the int16 value -32768, windows at the ends of the record, per-A-scan windows.
"""

import numpy as np
import pytest
import xarray as xr
from helpers.burst_grids import FREQ, STEEL_L, plate_grid, with_missing
from hypothesis import given, settings
from hypothesis import strategies as st

from ndtmap.errors import ParameterError
from ndtmap.gates import Gate, evaluate_gate, evaluate_gates
from ndtmap.gates import _compiled as _fastgate
from ndtmap.gates.kernels import reference_gate_kernel
from ndtmap.gates.timing import hilbert_taps
from ndtmap.grid import make_grid, missing_ascans, read_provenance
from ndtmap.scans import amplitude_map, backwall_loss_map, depth_map, thickness_map

pytestmark = pytest.mark.skipif(not _fastgate.HAVE_NUMBA, reason="numba is not importable")

OUTPUTS = ("peak", "peak_time", "cross_time", "cross_peak")


def reference(x, base, length, starts, ends, *, t0, dt, thr, hold, scale, rectify, taps=None):
    """The reference kernel on the detection signal as ndtmap.grid.schema.ascan_in_fsh and detected_signal build it.

    With `taps` (and `rectify`) it gets the RF samples and times the peak on the envelope.
    """
    part = x[..., base:base + length]
    if np.issubdtype(x.dtype, np.integer):
        f = part.astype(np.float32) * np.float32(scale)
    else:
        f = part.astype(np.float32)
    if rectify and taps is not None:
        return reference_gate_kernel(f, t0, dt, thr, hold, i_start=starts, i_end=ends, rectify=True,
                                     hilbert_taps=taps)
    if rectify:
        f = np.abs(f)
    return reference_gate_kernel(f, t0, dt, thr, hold, i_start=starts, i_end=ends)


def assert_same_result(a, b):
    """Identical values, coordinates and attributes; provenance compared without its time stamps."""
    xr.testing.assert_identical(a.drop_attrs(), b.drop_attrs())
    strip = {k: v for k, v in a.attrs.items() if k != "provenance"}
    assert strip == {k: v for k, v in b.attrs.items() if k != "provenance"}
    assert [s["step"] for s in read_provenance(a)] == [s["step"] for s in read_provenance(b)]
    for var in (a.variables if isinstance(a, xr.Dataset) else a.coords):
        assert a[var].attrs == b[var].attrs, var


def assert_same(got, want, context=""):
    for name, g, w in zip(OUTPUTS, got, want, strict=True):
        np.testing.assert_array_equal(g, w, err_msg=f"{name} {context}")


def random_case(rng):
    n = int(rng.integers(2, 400))
    shape = (int(rng.integers(1, 5)), int(rng.integers(1, 9)), n)
    dtype = rng.choice(["int16", "float32", "uint8", "float64", "int8", "uint16"])
    if dtype == "int16":
        x = rng.integers(-32768, 32768, size=shape).astype(np.int16)
        x[rng.random(shape) < 0.03] = -32768  # |-32768| does not fit int16
        scale = 100 / 32767 if rng.random() < 0.5 else float(rng.uniform(1e-3, 0.05))
    elif dtype in ("uint8", "int8", "uint16"):
        info = np.iinfo(dtype)
        x = rng.integers(info.min, info.max + 1, size=shape).astype(dtype)
        scale = float(rng.uniform(0.05, 1.0))
    else:
        x = rng.normal(0.0, 40.0, size=shape).astype(dtype)
        if rng.random() < 0.3:
            x = np.round(x / 8.0) * 8.0  # ties: equal peaks, samples exactly at the threshold
        x[rng.random(shape[:2]) < 0.15] = np.nan  # missing A-scans
        pick = rng.random(shape) < 0.005
        x[pick] = np.nan  # stray NaN samples
        if rng.random() < 0.2:
            x[..., 0] = -0.0
        scale = 1.0
    rectify = bool(rng.random() < 0.6)
    base = int(rng.integers(0, n))
    length = int(rng.integers(1, n - base + 1))
    if rng.random() < 0.3:  # a window at the start or at the end of the record
        base, length = (0, n) if rng.random() < 0.5 else (base, n - base)
    lead = shape[:-1]
    if rng.random() < 0.4:  # one window for all (a fixed gate)
        s = float(rng.integers(0, length))
        e = float(rng.integers(int(s), length))
        starts, ends = np.full(lead, s), np.full(lead, e)
    else:  # per-A-scan windows (a following gate), some invalid or cut by the slice
        starts = rng.integers(-3, length + 2, size=lead).astype(float)
        ends = starts + rng.integers(-2, length + 1, size=lead)
        starts[rng.random(lead) < 0.1] = np.nan
        edge = rng.random(lead) < 0.2
        starts[edge], ends[edge] = 0.0, float(length - 1)
    thr = float(rng.choice([0.0, rng.uniform(0.0, 120.0), 5000.0]))
    hold = int(rng.integers(0, 15))
    return x, base, length, starts, ends, dict(t0=float(rng.uniform(-5, 20)), dt=float(rng.choice([0.02, 0.01])),
                                               thr=thr, hold=hold, scale=scale, rectify=rectify)


def run_compiled(x, base, length, starts, ends, *, t0, dt, thr, hold, scale, rectify, check_record=False, taps=None):
    return _fastgate.gate_kernel(x, starts, ends, t0_us=t0, dt_us=dt, threshold=thr, hold=hold, base=base,
                                 length=length, scale=scale, rectify=rectify, check_record=check_record,
                                 hilbert_taps=taps)


def test_compiled_kernel_equals_the_reference_on_random_data():
    rng = np.random.default_rng(20240611)
    for trial in range(400):
        x, base, length, starts, ends, kw = random_case(rng)
        assert_same(run_compiled(x, base, length, starts, ends, **kw),
                    reference(x, base, length, starts, ends, **kw), f"trial {trial} dtype {x.dtype} {kw}")


def test_compiled_envelope_timing_equals_the_reference_on_random_data():
    # the envelope timing (FIR Hilbert filter, climb, parabola) of both kernels, bit for bit, on the awkward cases
    # above and on bursts whose envelope peak lies near the window edges
    rng = np.random.default_rng(20261202)
    for trial in range(300):
        x, base, length, starts, ends, kw = random_case(rng)
        kw["rectify"] = True
        if trial % 3 == 0 and x.dtype.kind == "f":  # smooth bursts: the climb walks several samples
            n = x.shape[-1]
            j = np.arange(n)
            centre = rng.uniform(0, n, size=x.shape[:-1] + (1,))
            burst = 80.0 * np.exp(-0.5 * ((j - centre) / 6.0) ** 2) * np.sin(2 * np.pi * (j - centre) / 9.0)
            x = np.where(np.isnan(x), x, burst + 0.5 * x / 40.0).astype(x.dtype)
        taps = hilbert_taps(float(rng.uniform(2.0, 12.0)), float(rng.uniform(0.5, 4.0)))
        assert_same(run_compiled(x, base, length, starts, ends, taps=taps, **kw),
                    reference(x, base, length, starts, ends, taps=taps, **kw),
                    f"trial {trial} dtype {x.dtype} {kw} taps {taps.size}")


traces_f32 = st.lists(st.floats(-150.0, 150.0, allow_nan=False, width=32), min_size=2, max_size=300)


@settings(max_examples=80, deadline=None)
@given(trace=traces_f32, data=st.data(), thr=st.floats(0.0, 150.0), hold=st.integers(0, 12),
       rectify=st.booleans())
def test_compiled_kernel_equals_the_reference_property(trace, data, thr, hold, rectify):
    x = np.array(trace, dtype=np.float32)[None, :]
    n = x.shape[-1]
    base = data.draw(st.integers(0, n - 1))
    length = data.draw(st.integers(1, n - base))
    s = data.draw(st.integers(0, length - 1))
    e = data.draw(st.integers(s, length - 1))
    kw = dict(t0=0.0, dt=0.02, thr=thr, hold=hold, scale=1.0, rectify=rectify)
    assert_same(run_compiled(x, base, length, float(s), float(e), **kw),
                reference(x, base, length, np.array([float(s)]), np.array([float(e)]), **kw))


def test_int16_full_negative_scale_does_not_overflow():
    # |-32768| = 32768 counts (two's complement int16 range -32768 .. 32767; numpy documentation of integer types)
    x = np.zeros((1, 1, 50), dtype=np.int16)
    x[0, 0, 20] = -32768
    x[0, 0, 21] = 32767
    scale = 100.0 / 32767
    peak, t_peak, t_cross, cross_peak = _fastgate.gate_kernel(
        x, 0.0, 49.0, t0_us=0.0, dt_us=1.0, threshold=50.0, hold=2, scale=scale, rectify=True)
    assert peak[0, 0] == pytest.approx(32768 * scale, rel=1e-6)
    assert cross_peak[0, 0] == pytest.approx(32768 * scale, rel=1e-6)
    assert 19.0 < t_cross[0, 0] <= 20.0  # linear interpolation between samples 19 (0) and 20
    assert 20.0 <= t_peak[0, 0] <= 20.5


def test_straightforward_numpy_definitions():
    # the gate outputs as a user would compute them with numpy (module docstring of ndtmap.gates.evaluate): window max,
    # first sample at or above the threshold; the compiled kernel agrees on noise with a clear echo
    rng = np.random.default_rng(5)
    x = (rng.normal(0, 300, (40, 600))).astype(np.int16)
    x[:, 300:305] = [8000, -12000, 15000, -9000, 4000]
    scale = 100 / 32767
    lo, hi = 100, 499
    w = np.abs(x[:, lo:hi + 1].astype(np.float32) * np.float32(scale))
    peak, _, t_cross, _ = _fastgate.gate_kernel(x, 0.0, float(hi - lo), t0_us=lo * 0.02, dt_us=0.02,
                                                threshold=20.0, hold=5, base=lo, length=hi - lo + 1, scale=scale,
                                                rectify=True)
    np.testing.assert_array_equal(peak, w.max(axis=-1))
    first = np.argmax(w >= 20.0, axis=-1)
    assert np.all((t_cross > (lo + first - 1) * 0.02 - 1e-12) & (t_cross <= (lo + first) * 0.02 + 1e-12))


def test_check_record_marks_ascans_with_a_non_finite_sample_anywhere():
    # missing A-scan: any NaN or infinite sample (ndtmap.grid.schema.missing_ascans), also outside the gate window
    rng = np.random.default_rng(3)
    x = rng.normal(0, 30, (3, 4, 200)).astype(np.float32)
    x[0, 1, 5] = np.nan
    x[2, 3, 199] = np.inf
    x[1, 2, 120] = -np.inf
    got = _fastgate.gate_kernel(x, 50.0, 99.0, t0_us=0.0, dt_us=0.02, threshold=10.0, hold=3, base=0,
                                length=200, rectify=True, check_record=True)
    want_missing = ~np.isfinite(x).all(axis=-1)
    for out in got:
        np.testing.assert_array_equal(np.isnan(out[want_missing]), True)
    plain = _fastgate.gate_kernel(x, 50.0, 99.0, t0_us=0.0, dt_us=0.02, threshold=10.0, hold=3, rectify=True)
    np.testing.assert_array_equal(got[0][~want_missing], plain[0][~want_missing])
    out = np.empty(12, dtype=bool)
    _fastgate.nonfinite_rows(x.reshape(12, 200).view(np.int32), out)
    np.testing.assert_array_equal(out.reshape(3, 4), want_missing)


# ----------------------------------------------------------------------------------------------- on grids


def int16_grid(missing=()):
    base = plate_grid(12.3, scan_mm=np.arange(6.0), index_mm=np.arange(5.0), noise_fsh=2.0)
    counts = np.round(base["ascan"].values / 100.0 * 32767).astype(np.int16)
    counts[0, 0, 100] = -32768
    g = make_grid(counts, scan_mm=base.scan.values, index_mm=base["index"].values, time_us=base.time.values,
                  velocity_m_s=STEEL_L, probe_frequency_mhz=FREQ, probe_diameter_mm=10.0,
                  fsh_per_count=100.0 / 32767, attrs={"part_thickness_mm": 12.3})
    if missing:
        mask = np.zeros(counts.shape[:2], dtype=bool)
        for i, j in missing:
            mask[i, j] = True
        g["missing"] = (("scan", "index"), mask)
    return g


GATES = [Gate("bw1", 10.0, 14.0, threshold_fsh=30.0), Gate("bw2", 10.0, 14.0, follows="bw1", mode="first-crossing"),
         Gate("fc", 2.0, 16.0, mode="first-crossing", threshold_fsh=25.0), Gate("whole", 0.0, 11.98, unit="us")]


@pytest.mark.parametrize("make", [
    lambda: int16_grid(),
    lambda: int16_grid(missing=[(1, 1), (4, 0)]),
    lambda: with_missing(plate_grid(12.3, scan_mm=np.arange(6.0), noise_fsh=1.0), [(0, 1), (3, 2)]),
])
@pytest.mark.parametrize("detect", ["rectified", "envelope"])
@pytest.mark.parametrize("chunked", [False, True])
def test_evaluate_gates_compiled_equals_numpy(make, detect, chunked):
    g = make()
    if chunked:
        g = g.chunk({"scan": 2, "index": 3})
    fast = evaluate_gates(g, GATES, detect=detect, kernel="compiled")
    ref = evaluate_gates(g, GATES, detect=detect, kernel="numpy")
    for name in fast:
        if chunked:
            assert fast[name].amplitude_fsh.chunks is not None
        assert_same_result(fast[name].compute(), ref[name].compute())
    miss = missing_ascans(g).values
    assert not fast["bw1"].triggered.values[miss].any()


def test_maps_compiled_equal_numpy(monkeypatch):
    # the maps choose the kernel through NDTMAP_KERNEL
    g = int16_grid(missing=[(2, 2)])
    bw = Gate("bw", 10.0, 14.0)

    def maps():
        return [amplitude_map(g, bw), depth_map(g, bw), backwall_loss_map(g, bw), thickness_map(g, bw)]

    monkeypatch.setenv("NDTMAP_KERNEL", "numpy")
    ref = maps()
    monkeypatch.setenv("NDTMAP_KERNEL", "compiled")
    for a, b in zip(maps(), ref, strict=True):
        assert_same_result(a, b)


def test_kernel_choice_is_checked(monkeypatch):
    g = plate_grid()
    with pytest.raises(ParameterError, match="`kernel`"):
        evaluate_gate(g, Gate("bw", 10.0, 14.0), kernel="fortran")
    monkeypatch.setenv("NDTMAP_KERNEL", "gpu")
    with pytest.raises(ParameterError, match="NDTMAP_KERNEL"):
        evaluate_gate(g, Gate("bw", 10.0, 14.0))
    monkeypatch.setenv("NDTMAP_KERNEL", "numpy")
    r = evaluate_gate(g, Gate("bw", 10.0, 14.0))
    assert_same_result(r, evaluate_gate(g, Gate("bw", 10.0, 14.0), kernel="compiled"))


def test_compiled_kernel_runs_in_dask_threads():
    # dask="parallelized": the kernel runs on blocks in the threaded scheduler (it releases the GIL)
    import dask

    g = int16_grid().chunk({"scan": 1})
    with dask.config.set(scheduler="threads", num_workers=2):
        lazy = evaluate_gate(g, GATES[0], kernel="compiled").compute()
    assert_same_result(lazy, evaluate_gate(int16_grid(), GATES[0], kernel="numpy"))


def test_threads_split_the_ascans_without_changing_a_number(monkeypatch):
    monkeypatch.setattr(_fastgate, "THREAD_MIN_BYTES", 0)
    rng = np.random.default_rng(11)
    for dtype in ("int16", "float32", "float64"):
        x = (rng.normal(0, 40, (7, 13, 300)) * (300 if dtype == "int16" else 1)).astype(dtype)
        kw = dict(t0=0.5, dt=0.02, thr=25.0, hold=4, scale=100 / 32767 if dtype == "int16" else 1.0, rectify=True)
        one = run_compiled(x, 20, 250, 0.0, 249.0, **kw)
        many = _fastgate.gate_kernel(x, 0.0, 249.0, t0_us=0.5, dt_us=0.02, threshold=25.0, hold=4, base=20,
                                     length=250, scale=kw["scale"], rectify=True, threads=3)
        assert_same(many, one, dtype)
        assert_same(one, reference(x, 20, 250, np.zeros((7, 13)), np.full((7, 13), 249.0), **kw), dtype)


def test_compiled_kernel_inside_apply_ufunc_parallelized():
    # the kernel as a plain dask="parallelized" ufunc on dask chunks gives the in-memory numbers
    from ndtmap.gates.kernels import gate_kernel_compiled

    g = int16_grid()
    kw = dict(t0_us=0.0, dt_us=0.02, threshold=20.0, hold=10, base=0, length=g.sizes["time"], start=0.0,
              end=float(g.sizes["time"] - 1), scale=100.0 / 32767, rectify=True, check_record=False)
    lazy = xr.apply_ufunc(gate_kernel_compiled, g.ascan.chunk({"scan": 2}), input_core_dims=[["time"]],
                          output_core_dims=[[], [], [], []], kwargs=dict(kw), dask="parallelized",
                          output_dtypes=[np.float64] * 4)
    eager = gate_kernel_compiled(g.ascan.values, **dict(kw))
    for a, b in zip(lazy, eager, strict=True):
        assert a.chunks is not None
        np.testing.assert_array_equal(a.values, b)
