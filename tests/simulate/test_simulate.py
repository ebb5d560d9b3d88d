"""The simulator's physics against published relations.

The simulator is built on ndtmap's own beam functions (the band-averaged on-axis law, the far-field lateral
directivity, the Lommel back-wall law it is calibrated to). Tests that compare it with those functions are
consistency tests and are named ``test_consistency_*``; each quantity also has a check against something
independent: closed forms worked by hand, or echoes computed here from the Rayleigh integral
(tests/helpers/rayleigh.py, which shares nothing with ndtmap; Kinsler, Frey et al., *Fundamentals of
Acoustics*, ch. 7).

References
----------
- J. and H. Krautkramer, *Ultrasonic Testing of Materials*, ch. 4-5 and the DGS
  chapter: beam spread sin(gamma) = 0.51 lambda/D (pulse-echo, -6 dB), far-field
  echo laws (back wall ~ 1/z, small disc ~ 1/z^2) and H_FBH/H_BW = pi d^2/(2 lambda z).
- ISO 16827 (ultrasonic testing, characterisation and sizing of discontinuities),
  general principle of the 6 dB drop: at the edge of a reflector much larger than
  the beam the echo has fallen to half its plateau value.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from helpers import rayleigh
from scipy import optimize
from scipy.signal import hilbert

from ndtmap.errors import ParameterError
from ndtmap.grid import grid_problems, missing_ascans
from ndtmap.physics import beam
from ndtmap.simulate import (
    FlatBottomHole,
    Material,
    Noise,
    Part,
    PlanarReflector,
    Probe,
    ScanPlan,
    SideDrilledHole,
    WallLoss,
    scan_truth,
    simulate_scan,
    tone_burst,
)
from ndtmap.simulate.model import _build_model

STEEL = Material(5920.0)
PROBE = Probe(5.0, 10.0, bandwidth=0.6)
LAM = beam.wavelength_mm(5920.0, 5.0)
N = beam.near_field_length_mm(10.0, 5.0, 5920.0)


def envelope(a: np.ndarray) -> np.ndarray:
    return np.abs(hilbert(np.asarray(a, dtype=np.float64), axis=-1))


def echo_peak(ds, t_us: float, half_window_us: float = 0.6) -> np.ndarray:
    """Envelope peak near time t_us, per position."""
    t = ds.time.values
    sel = np.abs(t - t_us) <= half_window_us
    return envelope(ds.ascan.values)[..., sel].max(axis=-1)


def single(part, reflectors, t_range, **kw):
    plan = ScanPlan.raster((0.0, 0.0), (0.0, 0.0), 1.0, t_range)
    return simulate_scan(PROBE, STEEL, part, reflectors, plan, gain_db=0.0, repeat_echoes=False, **kw)


def test_grid_is_valid_and_carries_truth():
    plan = ScanPlan.raster((0, 6), (0, 4), 2.0, (0, 12))
    refl = [FlatBottomHole(2.0, 2.0, 15.0, 2.0, label="R")]
    ds = simulate_scan(PROBE, STEEL, Part(25.0), refl, plan)
    assert grid_problems(ds) == []
    truth = scan_truth(ds)
    assert truth["reflectors"][0]["depth_mm"] == 15.0 and truth["reflectors"][0]["id"] == 1
    assert ds["truth_thickness_mm"].attrs["units"] == "mm"
    assert json.loads(ds.attrs["provenance"])[-1]["step"] == "simulate_scan"


def test_backwall_echo_time_and_gain():
    # pulse-echo travel time t = 2 d / c (common practice, no source)
    ds = simulate_scan(PROBE, STEEL, Part(40.0), [], ScanPlan.raster((0, 0), (0, 0), 1, (0, 20)), backwall_fsh=80)
    a = np.abs(ds.ascan.values[0, 0])
    t_peak = ds.time.values[np.argmax(envelope(ds.ascan.values[0, 0]))]
    assert t_peak == pytest.approx(2 * 40.0 / 5.92, abs=0.03)
    assert a.max() == pytest.approx(80.0, abs=0.01)


def test_consistency_plane_echo_follows_the_models_diffraction_law():
    # Consistency: an infinite plane gives ndtmap's Lommel back-wall law at every depth. Inside the near field
    # this is imposed by the plane-correction factor; in the far field the coherent patch sum reaches the law
    # by itself (stationary phase over the Fresnel zones), so the factor must be close to 1 there (Krautkramer
    # ch. 5). Independent check: test_plane_echo_against_the_rayleigh_integral.
    model = _build_model(PROBE, STEEL, Part(300.0), ScanPlan.raster((0, 0), (0, 0), 1, (0, 1)))
    far = np.array([4 * N, 8 * N, 12 * N])
    assert model.plane_correction(far) == pytest.approx(np.ones(3), abs=0.06)
    for z, tol in ((0.5 * N, 0.02), (2 * N, 0.01), (6 * N, 0.01)):
        ds = single(Part(z), [], (0.0, 2 * z / 5.92 + 2))
        got = float(echo_peak(ds, 2 * z / 5.92)[0, 0])
        want = 100 * float(beam.backwall_echo_relative(z, 10, 5, 5920, bandwidth=0.6))
        assert got == pytest.approx(want, rel=tol)


def _rayleigh_echo(z, spectrum_fn):
    """Envelope peak (x 100 %FSH) of an echo computed from the Rayleigh integral for the simulator's probe."""
    f, w = rayleigh.spectrum(5.0, 0.6, n=41)
    return 100.0 * rayleigh.echo_peak(spectrum_fn(f), f, w, z, 5920.0)


@pytest.mark.parametrize("z_over_n", [0.5, 2.0, 60.0 / N])
def test_plane_echo_against_the_rayleigh_integral(z_over_n):
    # Independent: the echo of an infinite plane is the field of the image piston at 2 z averaged over the
    # probe face (Krautkramer ch. 4-5), here from the Rayleigh integral for a 60 % band, the peak of the
    # pulse's envelope. The simulator (calibrated to Lommel's closed form) agrees within 0.4 % (1 % allowed);
    # at 60 mm this is also the plateau of a large lamination.
    z = z_over_n * N
    ds = single(Part(z), [], (0.0, 2 * z / 5.92 + 2))
    got = float(echo_peak(ds, 2 * z / 5.92)[0, 0])
    want = _rayleigh_echo(z, lambda f: rayleigh.plane_echo_spectrum(z, 5.0, f, 5920.0))
    assert got == pytest.approx(want, rel=0.01)


@pytest.mark.parametrize(("d", "z_over_n", "offset_db"), [(2.0, 1.0, 0.0), (2.0, 3.0, 0.0), (1.5, 6.0, 0.0),
                                                         (2.0, 0.5, 2.5)])
def test_fbh_echo_against_the_rayleigh_integral(d, z_over_n, offset_db):
    # Independent: a flat-bottom hole echoes (1/(pi a^2)) int_hole (p/p0)^2 dS (Kirchhoff), the Rayleigh field
    # integrated over the hole, the peak of the pulse's envelope. The simulator (patches weighted by ndtmap's
    # band-averaged on-axis law and its far-field lateral directivity) agrees within 0.1 dB from N on (0.3 dB
    # allowed). At N/2 it is 2.5 dB high: its lateral model keeps the far-field directivity, narrower than
    # the near-field beam across the hole. A known limitation of the simulator, stated so that a change shows.
    z = z_over_n * N
    ds = single(Part(z + 40.0), [FlatBottomHole(0.0, 0.0, z, d)], (2 * z / 5.92 - 2, 2 * z / 5.92 + 2))
    got = float(echo_peak(ds, 2 * z / 5.92)[0, 0])
    want = _rayleigh_echo(z, lambda f: rayleigh.disc_echo_spectrum(z, d / 2, 5.0, f, 5920.0))
    assert 20 * math.log10(got / want) == pytest.approx(offset_db, abs=0.3)


@pytest.mark.parametrize("z_over_n", [5.0, 8.0])
def test_dgs_ratio_of_simulated_echoes_against_the_closed_form(z_over_n):
    # Independent: H_FBH/H_BW = pi d^2/(2 lambda z) at equal distance in the far field (Krautkramer, DGS
    # chapter), written out here, against the simulator's own FBH and back-wall echoes (both simulated)
    z = z_over_n * N
    d = 2.0
    h_fbh = float(echo_peak(single(Part(z + 40.0), [FlatBottomHole(0.0, 0.0, z, d)],
                                   (2 * z / 5.92 - 2, 2 * z / 5.92 + 2)), 2 * z / 5.92)[0, 0])
    h_bw = float(echo_peak(single(Part(z), [], (2 * z / 5.92 - 2, 2 * z / 5.92 + 2)), 2 * z / 5.92)[0, 0])
    lam = 5920.0 / 5e3
    assert 20 * math.log10(h_fbh / h_bw) == pytest.approx(20 * math.log10(math.pi * d * d / (2 * lam * z)), abs=1.0)


@pytest.mark.parametrize("z_over_n", [3.0, 5.0, 8.0])
def test_consistency_dgs_ratio_fbh_to_backwall(z_over_n):
    # Consistency: the simulator's FBH echo against ndtmap's back-wall law and DGS function (the relation
    # H_FBH/H_BW = pi d^2/(2 lambda z), Krautkramer DGS chapter, is checked independently just above)
    z = z_over_n * N
    d = 2.0
    ds = single(Part(z + 40.0), [FlatBottomHole(0.0, 0.0, z, d)], (2 * z / 5.92 - 2, 2 * z / 5.92 + 2))
    h_fbh = float(echo_peak(ds, 2 * z / 5.92)[0, 0])
    h_bw = 100 * float(beam.backwall_echo_relative(z, 10, 5, 5920, bandwidth=0.6))
    ratio_db = 20 * math.log10(h_fbh / h_bw)
    formula_db = 20 * math.log10(float(beam.dgs_fbh_backwall_ratio(d, z, z, LAM)))
    assert ratio_db == pytest.approx(formula_db, abs=1.0)


def test_consistency_far_field_echo_laws():
    # Consistency (the simulator's on-axis law is ndtmap's): back wall ~ 1/z and small disc ~ 1/z^2 in the far
    # field (Krautkramer ch. 5): a factor 2 in distance costs 6 dB for the back wall and 12 dB for the disc.
    # Independent: test_fbh_echo_against_the_rayleigh_integral and test_plane_echo_against_the_rayleigh_integral.
    z1, z2 = 6 * N, 12 * N
    bw = [
        float(echo_peak(single(Part(z), [], (2 * z / 5.92 - 2, 2 * z / 5.92 + 2)), 2 * z / 5.92)[0, 0])
        for z in (z1, z2)
    ]
    fbh = [
        float(
            echo_peak(
                single(Part(z + 30), [FlatBottomHole(0, 0, z, 1.5)], (2 * z / 5.92 - 2, 2 * z / 5.92 + 2)), 2 * z / 5.92
            )[0, 0]
        )
        for z in (z1, z2)
    ]
    assert 20 * math.log10(bw[0] / bw[1]) == pytest.approx(6.02, abs=0.5)
    assert 20 * math.log10(fbh[0] / fbh[1]) == pytest.approx(12.04, abs=0.6)


def _small_fbh_scan_width(z):
    plan = ScanPlan.raster((-12, 12), (0, 0), 0.25, (2 * z / 5.92 - 1.5, 2 * z / 5.92 + 1.5))
    ds = simulate_scan(PROBE, STEEL, Part(200.0), [FlatBottomHole(0, 0, z, 1.0)], plan, gain_db=20, repeat_echoes=False)
    amp = envelope(ds.ascan.values[:, 0, :]).max(axis=1)
    x = ds.scan.values
    half = amp.max() * 10 ** (-6 / 20)
    above = np.where(amp >= half)[0]
    i0, i1 = above[0], above[-1]
    left = np.interp(half, [amp[i0 - 1], amp[i0]], [x[i0 - 1], x[i0]])
    right = np.interp(half, [amp[i1 + 1], amp[i1]], [x[i1 + 1], x[i1]])
    return right - left


def test_beam_spread_of_small_reflector_against_the_rayleigh_integral():
    # Independent: the -6 dB width of the band-averaged pulse-echo profile at 100 mm from the Rayleigh
    # integral (60 % band; far field the envelope peak and the band average agree, see
    # tests/physics/test_piston_field.py) is 11.0 mm. The simulator's lateral model is the one-frequency
    # far-field directivity (ndtmap.physics.beam.lateral_sensitivity): its width is 10 to 12 % larger.
    # Known limitation of the simulator, stated here so that a change of it shows.
    z = 100.0
    f, w = rayleigh.spectrum(5.0, 0.6, n=21)

    def profile(r):
        return rayleigh.band_averaged_intensity(r, z, 5.0, f, w, 5920.0, n_radial=48, n_angle=96)

    peak = profile(0.0)
    reference = 2 * optimize.brentq(lambda r: profile(r) - 0.5 * peak, 3.0, 9.0, xtol=1e-3)
    assert reference == pytest.approx(11.0, abs=0.1)
    assert 1.08 < _small_fbh_scan_width(z) / reference < 1.14


def test_consistency_beam_spread_of_small_reflector_is_the_one_frequency_formula():
    # Consistency: the simulator's lateral model is the one-frequency far-field directivity, so its -6 dB
    # width is 2 z tan(gamma), sin(gamma) = 0.51 lambda/D (Krautkramer ch. 4); the band's own width is the
    # test above
    z = 100.0
    gamma = math.asin(0.51 * LAM / 10.0)
    assert _small_fbh_scan_width(z) == pytest.approx(2 * z * math.tan(gamma), rel=0.03)


def test_edge_of_large_planar_reflector_gives_half_amplitude():
    # ISO 16827 (general principle of the 6 dB drop): a half-covered beam returns half the plateau echo.
    # The plateau against ndtmap's back-wall law at the end is a consistency check (the simulator is calibrated
    # to it); independently, test_plane_echo_against_the_rayleigh_integral at 60 mm.
    z = 60.0
    refl = PlanarReflector.rectangle((0.0, 200.0), (-100.0, 100.0), z)
    plan = ScanPlan.raster((-15, 15), (0, 0), 0.5, (2 * z / 5.92 - 1.5, 2 * z / 5.92 + 1.5))
    ds = simulate_scan(PROBE, STEEL, Part(100.0), [refl], plan, gain_db=0, repeat_echoes=False)
    amp = envelope(ds.ascan.values[:, 0, :]).max(axis=1)
    x = ds.scan.values
    plateau = amp[-1]
    assert amp[np.argmin(np.abs(x))] / plateau == pytest.approx(0.5, abs=0.02)
    assert amp[0] / plateau < 0.02
    # a fully covering reflector echoes like a back wall at its depth
    assert plateau == pytest.approx(100 * float(beam.backwall_echo_relative(z, 10, 5, 5920, bandwidth=0.6)), rel=0.02)


def test_two_way_attenuation():
    # amplitude falls by 2 alpha d dB over the two-way path (common practice, no source)
    alpha, t = 0.02, 50.0
    plan = ScanPlan.raster((0, 0), (0, 0), 1, (15, 19))
    a0 = simulate_scan(PROBE, Material(5920.0), Part(t), [], plan, gain_db=0, repeat_echoes=False)
    a1 = simulate_scan(PROBE, Material(5920.0, alpha), Part(t), [], plan, gain_db=0, repeat_echoes=False)
    loss_db = 20 * math.log10(echo_peak(a0, 2 * t / 5.92)[0, 0] / echo_peak(a1, 2 * t / 5.92)[0, 0])
    assert loss_db == pytest.approx(2 * alpha * t, abs=0.05)


def test_lamination_shadows_backwall_and_repeats_at_twice_its_depth():
    # a reflector's double reflection (reflector - front surface - reflector) arrives at twice its depth
    # (common practice, no source); the back wall behind a large lamination disappears
    t, z = 25.0, 8.0
    refl = PlanarReflector.rectangle((-40.0, 40.0), (-40.0, 40.0), z)
    plan = ScanPlan.raster((-50, 0), (0, 0), 50.0, (0, 10))
    ds = simulate_scan(PROBE, STEEL, Part(t), [refl], plan, backwall_fsh=20.0)
    sound, flawed = ds.isel(scan=0), ds.isel(scan=1)
    bw_sound = echo_peak(sound, 2 * t / 5.92)
    bw_flawed = echo_peak(flawed, 2 * t / 5.92)
    assert bw_flawed / bw_sound < 0.05
    env = envelope(flawed.ascan.values[0])
    tt = ds.time.values
    first = tt[np.argmax(np.where(np.abs(tt - 2 * z / 5.92) < 1.0, env, 0))]
    second = tt[np.argmax(np.where(np.abs(tt - 4 * z / 5.92) < 1.0, env, 0))]
    assert second == pytest.approx(2 * first, abs=0.04)
    assert echo_peak(flawed, 4 * z / 5.92)[0] > 5 * echo_peak(sound, 4 * z / 5.92)[0]


def test_backwall_multiples_at_multiples_of_thickness():
    # successive back-wall echoes at 2 t/c, 4 t/c, 6 t/c (common practice, no source)
    t = 10.0
    ds = simulate_scan(PROBE, STEEL, Part(t), [], ScanPlan.raster((0, 0), (0, 0), 1, (0, 12)))
    env = envelope(ds.ascan.values[0, 0])
    tt = ds.time.values
    for k in (1, 2, 3):
        sel = np.abs(tt - 2 * k * t / 5.92) < 0.8
        assert tt[sel][np.argmax(env[sel])] == pytest.approx(2 * k * t / 5.92, abs=0.03)


def test_corroded_wall_echo_follows_truth():
    loss = WallLoss(0.0, 0.0, 25.0, 4.0)
    plan = ScanPlan.raster((-30, 30), (0, 0), 10.0, (0, 6), sampling_mhz=100)
    ds = simulate_scan(Probe(5.0, 6.0), STEEL, Part(12.0, wall_losses=(loss,)), [], plan)
    truth = ds["truth_thickness_mm"].values[:, 0]
    assert truth.min() == pytest.approx(8.0) and truth.max() == pytest.approx(12.0, abs=0.3)
    env = envelope(ds.ascan.values[:, 0, :])
    t_peak = ds.time.values[np.argmax(env, axis=1)]
    measured = 5.92 * t_peak / 2
    # the envelope peak of a near-field plane echo lags the geometric arrival a little (edge-wave
    # contribution); calibrating on the sound wall removes that offset, as a thickness gauge would
    offset = measured[0] - truth[0]
    assert abs(offset) < 0.1
    corrected = measured - offset
    centre = np.argmin(truth)
    assert abs(corrected[centre] - truth[centre]) < 0.06
    # on the flanks the beam averages over the sloping wall: within 0.2 mm
    assert np.max(np.abs(corrected - truth)) < 0.2


def test_angle_beam_trigonometry():
    # 45 degree shear beam: sound path s = z / cos(theta), surface distance z tan(theta) (trigonometry)
    probe = Probe(2.25, 10.0, beam_angle_deg=45.0)
    shear = Material(3230.0, wave_mode="shear")
    z, x_hole = 15.0, 40.0
    sdh = SideDrilledHole(z, 3.0, (x_hole, -20.0), (x_hole, 20.0))
    plan = ScanPlan.raster((10, 40), (0, 0), 0.5, (0, 20))
    ds = simulate_scan(probe, shear, Part(25.0), [sdh], plan, gain_db=20)
    env = envelope(ds.ascan.values[:, 0, :])
    i, k = np.unravel_index(np.argmax(env), env.shape)
    assert 3.23 * ds.time.values[k] / 2 == pytest.approx(z * math.sqrt(2), abs=0.15)
    assert ds.scan.values[i] == pytest.approx(x_hole - z * math.tan(math.radians(45)), abs=0.6)


def test_immersion_interface_and_tilt():
    # interface echo at 2 w / c_water, part echoes delayed by it (common practice, no source)
    tilt = 2.0
    part = Part(20.0, water_path_mm=30.0, surface_tilt_deg=tilt)
    plan = ScanPlan.raster((0, 60), (0, 0), 20.0, (35, 52))
    ds = simulate_scan(PROBE, STEEL, part, [FlatBottomHole(40.0, 0.0, 10.0, 3.0)], plan, full_scale_fsh=1000)
    w = 30.0 + ds.scan.values * math.tan(math.radians(tilt))
    env = envelope(ds.ascan.values[:, 0, :])
    tt = ds.time.values
    for j in range(ds.sizes["scan"]):
        sel = np.abs(tt - 2 * w[j] / 1.483) < 0.8
        assert tt[sel][np.argmax(env[j, sel])] == pytest.approx(2 * w[j] / 1.483, abs=0.03)
    j = 2  # the probe above the hole
    t_hole = 2 * w[j] / 1.483 + 2 * 10.0 / 5.92
    sel = np.abs(tt - t_hole) < 0.5
    assert tt[sel][np.argmax(env[j, sel])] == pytest.approx(t_hole, abs=0.03)


def test_noise_levels_and_seed():
    plan = ScanPlan.raster((0, 20), (0, 20), 2.0, (0, 4))
    a = simulate_scan(PROBE, STEEL, Part(50.0), [], plan, noise=Noise(electronic_fsh=2.0), seed=5, gain_db=0)
    b = simulate_scan(PROBE, STEEL, Part(50.0), [], plan, noise=Noise(electronic_fsh=2.0), seed=5, gain_db=0)
    c = simulate_scan(PROBE, STEEL, Part(50.0), [], plan, noise=Noise(electronic_fsh=2.0), seed=6, gain_db=0)
    assert np.array_equal(a.ascan.values, b.ascan.values)
    assert not np.array_equal(a.ascan.values, c.ascan.values)
    assert float(a.ascan.std()) == pytest.approx(2.0, rel=0.1)


def test_dropouts_are_missing_in_float_and_int16():
    plan = ScanPlan.raster((0, 40), (0, 20), 1.0, (0, 4))
    f = simulate_scan(PROBE, STEEL, Part(50.0), [], plan, noise=Noise(dropout_fraction=0.05), seed=1, gain_db=0)
    i = simulate_scan(
        PROBE, STEEL, Part(50.0), [], plan, noise=Noise(dropout_fraction=0.05), seed=1, dtype="int16", gain_db=0
    )
    mf, mi = missing_ascans(f).values, missing_ascans(i).values
    assert mf.sum() == pytest.approx(0.05 * mf.size, rel=0.15)
    assert np.array_equal(mf, mi)
    assert np.isnan(f.ascan.values[mf]).all() and not np.isnan(f.ascan.values[~mf]).any()
    assert i.ascan.dtype == np.int16 and "missing" in i


def test_clipping_at_full_scale():
    ds = simulate_scan(
        PROBE,
        STEEL,
        Part(20.0),
        [],
        ScanPlan.raster((0, 0), (0, 0), 1, (0, 8)),
        backwall_fsh=80.0,
        gain_db=30.0,
        full_scale_fsh=100.0,
    )
    assert float(np.abs(ds.ascan).max()) == 100.0
    assert ds.attrs["digitiser_full_scale_fsh"] == 100.0


def test_rectified_signal_is_non_negative():
    ds = simulate_scan(
        PROBE, STEEL, Part(20.0), [], ScanPlan.raster((0, 0), (0, 0), 1, (0, 8)), signal_kind="rectified"
    )
    assert ds.ascan.attrs["signal"] == "rectified" and float(ds.ascan.min()) >= 0


def test_tone_burst_bandwidth():
    # the -6 dB fractional bandwidth of the spectrum is what was asked (FFT of the pulse)
    fs = 500.0
    t = np.arange(-5, 5, 1 / fs)
    p = tone_burst(t, 5.0, 0.6)
    spec = np.abs(np.fft.rfft(p, 1 << 16))
    f = np.fft.rfftfreq(1 << 16, 1 / fs)
    band = f[spec >= spec.max() / 2]
    assert (band.max() - band.min()) / 5.0 == pytest.approx(0.6, rel=0.02)


def test_bad_scenarios_raise():
    plan = ScanPlan.raster((0, 2), (0, 2), 1, (0, 5))
    with pytest.raises(ParameterError, match="outside the part"):
        simulate_scan(PROBE, STEEL, Part(10.0), [FlatBottomHole(0, 0, 12.0, 2.0)], plan)
    with pytest.raises(ParameterError, match="angle beams in immersion"):
        simulate_scan(Probe(5, 10, beam_angle_deg=45), STEEL, Part(10.0, water_path_mm=20), [], plan)
    with pytest.raises(ParameterError, match="`diameter_mm` must be greater than 0"):
        Probe(5.0, 0.0)
    with pytest.raises(ParameterError, match="strictly increasing"):
        ScanPlan((0.0, 0.0), (0.0,), 0, 1)
    with pytest.raises(ParameterError, match="back-wall echo"):
        simulate_scan(PROBE, STEEL, Part(100.0), [], plan, backwall_fsh=80)
