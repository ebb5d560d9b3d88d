"""Signal conditioning against scipy's definitions and the decibel."""

import math

import numpy as np
import pytest
import xarray as xr
from helpers.burst_grids import (
    DT,
    FREQ,
    STEEL_L,
    burst,
    grid_from,
    is_dask,
    plate_grid,
    time_axis,
    to_backend,
    with_missing,
)
from scipy import signal as sps

from ndtmap.errors import CalibrationError, ParameterError
from ndtmap.grid import make_grid, read_provenance
from ndtmap.signal import apply_tcg, bandpass, dac_curve, db_re, db_re_dac, detected_signal, envelope, rectify, smooth


@pytest.fixture(params=["numpy", "dask"])
def backend(request):
    return request.param


def single(trace, *, signal="rf", dt=DT, **kw):
    t = np.arange(trace.size) * dt
    return make_grid(np.asarray(trace)[None, None, :], scan_mm=[0.0], index_mm=[0.0], time_us=t,
                     velocity_m_s=STEEL_L, probe_frequency_mhz=FREQ, probe_diameter_mm=10.0, signal=signal, **kw)


def test_envelope_of_a_gaussian_tone_burst_is_the_gaussian(backend):
    # |analytic signal| of a narrow-band Gaussian-windowed cosine is its Gaussian window
    # (scipy.signal.hilbert documentation: the envelope is the amplitude of the analytic signal)
    t = time_axis(12.0)
    sigma = 0.3
    g = to_backend(grid_from(lambda s, x: [(6.03, 70.0)], sigma_us=sigma, duration_us=12.0), backend)
    env = envelope(g)
    assert is_dask(env["ascan"]) == (backend == "dask")
    gauss = 70.0 * np.exp(-0.5 * ((t - 6.03) / sigma) ** 2)
    np.testing.assert_allclose(env["ascan"].values, np.broadcast_to(gauss, env["ascan"].shape), atol=2e-3)
    assert env["ascan"].attrs["signal"] == "rectified"
    assert read_provenance(env)[-1]["step"] == "envelope"


def test_envelope_refuses_rectified_data():
    g = rectify(plate_grid())
    with pytest.raises(ParameterError, match="rectified"):
        envelope(g)
    with pytest.raises(ParameterError, match="envelope"):
        detected_signal(g, "envelope")


def test_rectification_full_and_half_wave(backend):
    g = to_backend(plate_grid(), backend)
    a = g["ascan"].values
    np.testing.assert_array_equal(rectify(g)["ascan"].values, np.abs(a))
    np.testing.assert_array_equal(rectify(g, mode="half")["ascan"].values, np.maximum(a, 0))
    np.testing.assert_array_equal(rectify(g, mode="half", polarity="negative")["ascan"].values, np.maximum(-a, 0))


def test_rectifying_int16_full_scale_does_not_overflow():
    # int16 runs from -32768 to 32767 (two's complement); np.abs(int16(-32768)) wraps to -32768
    raw = np.array([0, -32768, 32767, -1, 5], dtype=np.int16)
    assert np.abs(raw)[1] < 0  # the trap being avoided
    g = single(raw, fsh_per_count=100.0 / 32767)
    r = rectify(g)["ascan"].values.ravel()
    assert r.dtype == np.float32
    np.testing.assert_allclose(r, np.abs(raw.astype(np.float64)) * 100.0 / 32767, rtol=1e-6)
    assert r[1] > 100.0  # -32768 counts is just over full scale, positive


def test_bandpass_is_zero_phase_and_keeps_the_pulse_time(backend):
    # sosfiltfilt runs the filter forwards and backwards: zero phase (scipy.signal.sosfiltfilt documentation),
    # so a symmetric pulse stays symmetric about its own time
    t = time_axis(10.0)
    centre = 200 * DT  # on a sample, so symmetry can be checked sample by sample
    trace = burst(t, centre, 60.0)
    g = to_backend(single(trace), backend)
    out = bandpass(g, 2.0, 8.0, order=4)["ascan"].values.ravel()
    k = 200
    np.testing.assert_allclose(out[k - 50:k], out[k + 50:k:-1], atol=1e-4)
    assert int(np.argmax(np.abs(out))) == k
    # a causal (one-pass) filter of the same design shifts the pulse: the check above can fail
    sos = sps.butter(4, [2.0, 8.0], btype="bandpass", fs=1 / DT, output="sos")
    causal = sps.sosfilt(sos, trace)
    assert int(np.argmax(np.abs(sps.hilbert(causal)))) > k + 3


def test_bandpass_gain_is_the_squared_amplitude_response():
    # forward-backward filtering squares |H(f)| (scipy.signal.sosfiltfilt documentation)
    t = time_axis(40.0)
    sos = sps.butter(3, [3.0, 7.0], btype="bandpass", fs=1 / DT, output="sos")
    for f in (5.0, 8.5):
        trace = 50.0 * np.sin(2 * np.pi * f * t)
        out = bandpass(single(trace), 3.0, 7.0, order=3)["ascan"].values.ravel()
        mid = slice(t.size // 3, 2 * t.size // 3)
        gain = np.sqrt(np.mean(out[mid] ** 2) / np.mean(trace[mid] ** 2))  # rms ratio over whole periods
        _, h = sps.sosfreqz(sos, worN=[f], fs=1 / DT)
        assert gain == pytest.approx(abs(h[0]) ** 2, rel=5e-3)


def test_bandpass_refuses_bad_corners():
    g = plate_grid()
    with pytest.raises(ParameterError, match="Nyquist"):
        bandpass(g, 2.0, 30.0)
    with pytest.raises(ParameterError, match="smaller"):
        bandpass(g, 8.0, 2.0)
    with pytest.raises(ParameterError, match="neither"):
        bandpass(g)
    with pytest.raises(ParameterError, match="bipolar"):
        bandpass(rectify(g), 2.0, 8.0)
    with pytest.raises(ParameterError, match="time samples"):
        bandpass(single(np.zeros(20)), 2.0, 8.0, order=8)


def test_gaussian_smoothing_has_the_stated_width():
    # an impulse smoothed with a Gaussian of FWHM w becomes a Gaussian of FWHM w (FWHM = 2 sqrt(2 ln 2) sigma,
    # definition of the normal distribution's half width)
    trace = np.zeros(401)
    trace[200] = 1.0
    width = 0.4
    out = smooth(single(trace, signal="rectified"), width)["ascan"].values.ravel()
    half = out.max() / 2
    above = np.nonzero(out >= half)[0]
    # linear interpolation of the two half-maximum crossings
    def cross(i, j):
        return i + (half - out[i]) / (out[j] - out[i]) * (j - i)
    fwhm = (cross(above[-1], above[-1] + 1) - cross(above[0] - 1, above[0])) * DT
    assert fwhm == pytest.approx(width, rel=0.02)
    assert out.sum() == pytest.approx(1.0, rel=1e-6)
    # moving average: a boxcar of 11 samples (0.2 us rounded to odd) with height 1/11
    box = smooth(single(trace, signal="rectified"), 0.2, kind="moving-average")["ascan"].values.ravel()
    assert np.count_nonzero(box > 1e-9) == 11
    np.testing.assert_allclose(box[box > 1e-9], 1.0 / 11, rtol=1e-6)


def test_dac_is_log_linear_and_refuses_extrapolation():
    dac = dac_curve([10.0, 30.0, 50.0], [80.0, 20.0, 10.0])
    # linear in dB between points: the midpoint level is the geometric mean
    assert dac.level_fsh(20.0) == pytest.approx(math.sqrt(80.0 * 20.0), rel=1e-12)
    assert dac.level_fsh(40.0) == pytest.approx(math.sqrt(20.0 * 10.0), rel=1e-12)
    assert dac.level_fsh(10.0) == pytest.approx(80.0)
    # outside the recorded depths: refused (NaN) unless asked to extrapolate
    assert np.isnan(dac.level_fsh(5.0)) and np.isnan(dac.level_fsh(60.0))
    ext = dac_curve([10.0, 30.0, 50.0], [80.0, 20.0, 10.0], extrapolate=True)
    assert ext.level_fsh(70.0) == pytest.approx(5.0, rel=1e-12)  # -6.02 dB per 20 mm continued
    # unsorted input is sorted
    assert dac_curve([30.0, 10.0], [20.0, 80.0]).depths_mm == (10.0, 30.0)


@pytest.mark.parametrize(
    "depths, amps, match",
    [([10.0], [80.0], "at least two"), ([10.0, 10.0], [80.0, 60.0], "repeat"),
     ([10.0, 20.0], [80.0, 0.0], "greater than 0"), ([10.0, 20.0], [80.0], "same length")],
)
def test_dac_refuses_bad_points(depths, amps, match):
    with pytest.raises(CalibrationError, match=match):
        dac_curve(depths, amps)


def test_decibels():
    # dB = 20 log10(A / A_ref) for amplitude ratios (IEC 60027-3, logarithmic quantities)
    assert db_re(40.0, 80.0) == pytest.approx(20 * math.log10(0.5), abs=1e-12)
    assert db_re(80.0, 8.0) == pytest.approx(20.0, abs=1e-12)
    np.testing.assert_allclose(db_re(np.array([10.0, 100.0]), 10.0), [0.0, 20.0], atol=1e-12)
    assert db_re(0.0, 80.0) == -np.inf
    assert np.isnan(db_re(np.nan, 80.0))
    with pytest.raises(ParameterError, match="reference_fsh"):
        db_re(10.0, 0.0)
    da = xr.DataArray(np.array([20.0, 40.0]), dims="x").chunk()
    out = db_re(da, 40.0)
    assert is_dask(out) and out.attrs["units"] == "dB"
    np.testing.assert_allclose(out.values, [20 * math.log10(0.5), 0.0])
    dac = dac_curve([10.0, 30.0], [80.0, 20.0])
    assert db_re_dac(20.0, 20.0, dac) == pytest.approx(20 * math.log10(20.0 / 40.0))
    assert np.isnan(db_re_dac(20.0, 35.0, dac))


def test_tcg_flattens_the_dac(backend):
    # three equal reflectors at 10, 20, 30 mm whose echoes fall along the DAC: after TCG all stand at the target
    depths = [10.0, 20.0, 30.0]
    amps = [80.0, 45.0, 20.0]
    times = [2 * d / (STEEL_L * 1e-3) for d in depths]
    g = grid_from(lambda s, x: list(zip(times, amps, strict=True)), duration_us=12.0)
    dac = dac_curve(depths, amps)
    out = to_backend(g, backend)
    tcg = apply_tcg(out, dac, target_fsh=50.0)
    assert is_dask(tcg["ascan"]) == (backend == "dask")
    env = envelope(tcg)["ascan"].isel(scan=0, index=0)
    for tc in times:
        peak = float(env.sel(time=slice(tc - 0.5, tc + 0.5)).max())
        # the gain varies across the echo, so allow the log-linear gain slope over +-1 sigma
        assert peak == pytest.approx(50.0, rel=0.02)
    assert tcg["ascan"].attrs["tcg_target_fsh"] == 50.0
    assert read_provenance(tcg)[-1]["step"] == "tcg"


@pytest.mark.parametrize("func", [rectify, envelope, lambda g: bandpass(g, 2.0, 8.0), lambda g: smooth(g, 0.1),
                                  lambda g: apply_tcg(g, dac_curve([5.0, 40.0], [80.0, 20.0]))])
def test_missing_ascans_stay_missing_and_input_is_untouched(func, backend):
    g = to_backend(with_missing(plate_grid(), [(1, 2), (3, 0)]), backend)
    before = g.copy(deep=True)
    out = func(g)
    xr.testing.assert_identical(g, before)
    vals = out["ascan"].values
    assert np.isnan(vals[1, 2]).all() and np.isnan(vals[3, 0]).all()
    keep = np.ones(vals.shape[:2], dtype=bool)
    keep[1, 2] = keep[3, 0] = False
    assert np.isfinite(vals[keep]).all()
    assert out["ascan"].dtype == np.float32
