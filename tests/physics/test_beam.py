"""Piston-beam physics against textbook formulas and independent numerics.

References
----------
- L. E. Kinsler, A. R. Frey et al., *Fundamentals of Acoustics*, ch. 7
  (radiation from a baffled circular piston: on-axis pressure, far-field
  directivity 2 J1(x)/x).
- J. and H. Krautkramer, *Ultrasonic Testing of Materials*, ch. 4-5 (near-field
  length N = D^2/(4 lambda), beam spread, DGS relation).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate, special

from ndtmap.errors import ParameterError, ParameterTypeError
from ndtmap.physics import beam
from ndtmap.physics.materials import material


def test_wavelength_steel_5mhz():
    # lambda = c / f (any physics text): 5920 m/s / 5 MHz = 1.184 mm
    assert beam.wavelength_mm(5920, 5) == pytest.approx(1.184)


@pytest.mark.parametrize(("d", "f", "c"), [(10, 5, 5920), (20, 2, 5920), (6, 10, 3230), (12.7, 2.25, 6320)])
def test_near_field_length_formula(d, f, c):
    # N = D^2 f / (4 c) (Krautkramer ch. 4; Kinsler & Frey ch. 7), units: mm, MHz, m/s -> mm
    expected = d * d * f * 1e3 / (4 * c)
    assert beam.near_field_length_mm(d, f, c) == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize(("d", "f"), [(10, 5), (20, 2), (6, 4)])
def test_last_on_axis_maximum_is_at_near_field_length(d, f):
    # The last maximum of 2|sin(pi/lambda (sqrt(z^2+a^2) - z))| lies at (D^2 - lambda^2)/(4 lambda)
    # (Kinsler & Frey ch. 7), close to N = D^2/(4 lambda) when D >> lambda.
    lam = beam.wavelength_mm(5920, f)
    n = beam.near_field_length_mm(d, f, 5920)
    z = np.linspace(0.3 * n, 3 * n, 200001)
    p = beam.on_axis_pressure(z, d, lam)
    z_max = z[np.argmax(p)]
    assert p.max() == pytest.approx(2.0, abs=1e-6)
    assert z_max == pytest.approx(beam.near_field_length_mm(d, f, 5920, exact=True), rel=1e-4)
    assert z_max == pytest.approx(n, rel=(lam / d) ** 2 + 1e-4)


def _rayleigh_on_axis(z: float, a: float, lam: float) -> float:
    """|p(z)/(rho c u0)| from the Rayleigh integral over the piston, done numerically.

    p(z) = (i k rho c u0 / 2 pi) int_0^a exp(-i k R)/R 2 pi r dr,  R = sqrt(z^2 + r^2)
    (Kinsler & Frey ch. 7, eq. for the baffled piston). Computed with scipy quad.
    """
    k = 2 * math.pi / lam

    def re(r):
        rr = math.hypot(z, r)
        return math.cos(k * rr) / rr * r

    def im(r):
        rr = math.hypot(z, r)
        return math.sin(k * rr) / rr * r

    opts = {"limit": 2000}
    c = integrate.quad(re, 0, a, **opts)[0]
    s = integrate.quad(im, 0, a, **opts)[0]
    return k * math.hypot(c, s)


@pytest.mark.parametrize("z_over_n", [0.2, 0.37, 0.5, 1.0, 2.0, 5.0])
def test_on_axis_pressure_matches_rayleigh_integral(z_over_n):
    d, lam = 10.0, 1.184
    n = d * d / (4 * lam)
    z = z_over_n * n
    assert float(beam.on_axis_pressure(z, d, lam)) == pytest.approx(_rayleigh_on_axis(z, d / 2, lam), rel=1e-6)


def _fraunhofer_directivity(x: float) -> float:
    """Far-field directivity of a uniform disc by direct integration of the aperture.

    D(x) = (1/pi) int_0^1 int_0^{2pi} exp(i x rho cos(phi)) rho dphi drho  (normalised to 1 at x = 0).
    """
    inner = lambda rho: integrate.quad(lambda phi: math.cos(x * rho * math.cos(phi)), 0, 2 * math.pi)[0] * rho  # noqa: E731
    return integrate.quad(inner, 0, 1)[0] / math.pi


@pytest.mark.parametrize("x", [0.0, 0.5, 1.616, 2.215, 3.0, 3.8317, 5.0])
def test_far_field_directivity_is_jinc(x):
    # 2 J1(x)/x with scipy.special.j1, and the aperture integral done numerically (Kinsler & Frey ch. 7)
    ours = float(beam.far_field_directivity(x))
    ref = 1.0 if x == 0 else 2 * special.j1(x) / x
    assert ours == pytest.approx(ref, abs=1e-14)
    assert ours == pytest.approx(_fraunhofer_directivity(x), abs=1e-7)


def test_beam_spread_constants():
    # Pulse-echo -6 dB: sin(gamma) = 0.51 lambda/D; -20 dB: 0.87 lambda/D; one-way -6 dB: 0.70; first null 1.22
    # (Krautkramer ch. 4, beam spread tables; the first null is the first zero of J1, 3.8317/pi).
    assert beam.beam_spread_constant(6) == pytest.approx(0.51, abs=0.005)
    assert beam.beam_spread_constant(20) == pytest.approx(0.87, abs=0.005)
    assert beam.beam_spread_constant(6, pulse_echo=False) == pytest.approx(0.70, abs=0.006)
    assert special.jn_zeros(1, 1)[0] / math.pi == pytest.approx(1.22, abs=0.005)


def test_beam_spread_constant_solves_directivity():
    # self-consistency with scipy.special.j1: at the returned x the pulse-echo directivity is -6 dB
    k = beam.beam_spread_constant(6)
    x = math.pi * k
    assert 20 * math.log10((2 * special.j1(x) / x) ** 2) == pytest.approx(-6.0, abs=1e-9)


def test_beam_width_far_field():
    # -6 dB width = 2 z tan(gamma), sin(gamma) = 0.51 lambda/D (Krautkramer ch. 4)
    lam = beam.wavelength_mm(5920, 5)
    gamma = math.asin(beam.beam_spread_constant(6) * lam / 10)
    assert float(beam.beam_width_mm(150, 10, 5, 5920)) == pytest.approx(2 * 150 * math.tan(gamma))
    # inside the near field the model keeps the width it has at N
    n = beam.near_field_length_mm(10, 5, 5920)
    assert float(beam.beam_width_mm(0.3 * n, 10, 5, 5920)) == pytest.approx(float(beam.beam_width_mm(n, 10, 5, 5920)))


def test_lateral_sensitivity_half_amplitude_at_beam_edge():
    # the -6 dB edge of the lateral profile is where the beam-spread half-angle says
    d, lam, z = 10.0, 1.184, 200.0
    gamma = math.asin(beam.beam_spread_constant(6) * lam / d)
    r = z * math.tan(gamma)
    assert float(beam.lateral_sensitivity(r, z, d, lam)) == pytest.approx(10 ** (-6 / 20), abs=1e-9)
    assert float(beam.lateral_sensitivity(0.0, z, d, lam)) == 1.0


@pytest.mark.parametrize("z", [100.0, 200.0, 400.0])
def test_backwall_far_field_is_inverse_distance(z):
    # far-field back-wall echo ~ pi a^2 / (2 lambda z) (Krautkramer ch. 5, DGS derivation), here z >= 4.7 N;
    # the exact diffraction integral approaches it from below, the gap shrinking like N / z
    d, f, c = 10.0, 5.0, 5920.0
    lam = beam.wavelength_mm(c, f)
    n = beam.near_field_length_mm(d, f, c)
    expected = math.pi * (d / 2) ** 2 / (2 * lam * z)
    got = float(beam.backwall_echo_relative(z, d, f, c))
    assert got == pytest.approx(expected, rel=0.25 * n / z)
    assert got < expected


def test_backwall_at_zero_distance_is_plane_wave():
    # a plane reflector at the probe face returns the whole wave (diffraction factor -> 1)
    assert float(beam.backwall_echo_relative(1e-3, 10, 5, 5920)) == pytest.approx(1.0, abs=0.05)


@pytest.mark.parametrize(("d_fbh", "z"), [(2.0, 150.0), (3.0, 200.0), (1.0, 300.0)])
def test_dgs_ratio_from_model_matches_far_field_formula(d_fbh, z):
    # H_FBH/H_BW = pi d^2 / (2 lambda z) at equal distance (Krautkramer ch. 5, DGS), valid beyond ~3 N
    d, f, c = 10.0, 5.0, 5920.0
    lam = beam.wavelength_mm(c, f)
    ratio = beam.fbh_echo_relative(z, d_fbh, d, f, c) / beam.backwall_echo_relative(z, d, f, c)
    formula = beam.dgs_fbh_backwall_ratio(d_fbh, z, z, lam)
    assert 20 * math.log10(float(ratio / formula)) == pytest.approx(0.0, abs=0.3)


def test_dgs_formula_general_form():
    # H_FBH/H_BW = pi d^2 z_BW / (2 lambda z^2): FBH at 100 mm, back wall at 200 mm, 2 mm hole, lambda 1.184 mm
    value = float(beam.dgs_fbh_backwall_ratio(2.0, 100.0, 200.0, 1.184))
    assert value == pytest.approx(math.pi * 4 * 200 / (2 * 1.184 * 100 * 100))


def test_bandwidth_smooths_near_field_but_not_far_field():
    d, f, c = 10.0, 5.0, 5920.0
    n = beam.near_field_length_mm(d, f, c)
    z_near = np.linspace(0.2 * n, 0.9 * n, 400)
    narrow = beam.fbh_echo_relative(z_near, 1.0, d, f, c)
    broad = beam.fbh_echo_relative(z_near, 1.0, d, f, c, bandwidth=0.6)
    assert broad.min() > 3 * narrow.min()  # the deep on-axis nulls fill in
    far = 8 * n
    assert float(beam.fbh_echo_relative(far, 1.0, d, f, c, bandwidth=0.6)) == pytest.approx(
        float(beam.fbh_echo_relative(far, 1.0, d, f, c)), rel=0.1
    )  # the spectrum average of 1/lambda^2 sits a few per cent above 1/lambda0^2


def test_handbook_velocities():
    # typical handbook values (Krautkramer, appendix tables) # from memory
    assert material("steel").longitudinal_m_s == pytest.approx(5920, rel=0.01)
    assert material("steel").shear_m_s == pytest.approx(3230, rel=0.02)
    assert material("aluminium").longitudinal_m_s == pytest.approx(6320, rel=0.01)
    assert material("water").longitudinal_m_s == pytest.approx(1483, rel=0.01)


def test_bad_arguments_raise_ndtmap_errors():
    with pytest.raises(ParameterError, match="`velocity_m_s` must be greater than 0, got -1"):
        beam.wavelength_mm(-1, 5)
    with pytest.raises(ParameterTypeError, match="`frequency_mhz` must be a number"):
        beam.wavelength_mm(5920, "5")
    with pytest.raises(ParameterError, match="`drop_db`"):
        beam.beam_spread_constant(0)
    with pytest.raises(ParameterError, match="not a known material"):
        material("unobtainium")
