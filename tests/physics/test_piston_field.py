"""The piston field and the pulse-echo beam widths of ndtmap.physics.piston_field against the Rayleigh integral.

The reference is the Rayleigh surface integral over the piston computed in tests/helpers/rayleigh.py with
scipy (Gauss-Legendre nodes, checked here against scipy.integrate.dblquad), which shares nothing with
ndtmap's line-integral form.

References
----------
- L. E. Kinsler, A. R. Frey et al., *Fundamentals of Acoustics*, ch. 7: the Rayleigh integral of the baffled
  piston, its on-axis pressure 2 |sin(pi/lambda (sqrt(z^2 + a^2) - z))|, the far-field directivity 2 J1(x)/x.
- J. and H. Krautkramer, *Ultrasonic Testing of Materials*, ch. 4: near-field length N = D^2/(4 lambda),
  pulse-echo beam spread sin(gamma) = 0.51 lambda/D at -6 dB and 0.87 lambda/D at -20 dB (far field).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from helpers import rayleigh
from scipy import integrate, optimize

from ndtmap.errors import ParameterError
from ndtmap.physics import beam, piston_field

D, F, C = 10.0, 5.0, 5920.0
A = D / 2
LAM = C / (F * 1e3)
K = 2 * math.pi / LAM
N = D * D / (4 * LAM)  # 21.1 mm


def test_reference_quadrature_against_scipy_dblquad():
    # the product Gauss-Legendre rule of the reference against scipy's adaptive dblquad, one near-field point
    r, z = 3.0, 0.5 * N

    def part(fn):
        def integrand(psi, rho):
            rr = math.sqrt(z * z + r * r + rho * rho - 2 * r * rho * math.cos(psi))
            return fn(-K * rr) / rr * rho

        return integrate.dblquad(integrand, 0, A, 0, 2 * math.pi, epsabs=1e-11, epsrel=1e-11)[0]

    ref = (1j * K / (2 * math.pi)) * complex(part(math.cos), part(math.sin))
    assert rayleigh.field(r, z, A, K)[0] == pytest.approx(ref, abs=1e-8)


@pytest.mark.parametrize("z_over_n", [0.1, 0.3, 0.5, 0.6, 1.0, 2.0, 5.0])
@pytest.mark.parametrize("r_mm", [0.0, 1.5, 4.0, 4.99, 5.0, 6.5, 12.0])
def test_piston_pressure_matches_the_rayleigh_integral(z_over_n, r_mm):
    # Kinsler & Frey ch. 7: the same integral, as ndtmap's line integral and as the surface integral
    z = z_over_n * N
    ours = complex(piston_field.piston_pressure(r_mm, z, D, LAM))
    assert ours == pytest.approx(rayleigh.field(r_mm, z, A, K)[0], abs=1e-10)


@pytest.mark.parametrize("z_over_n", [0.2, 0.5, 1.0, 3.0])
def test_on_axis_value_is_the_closed_form(z_over_n):
    # Kinsler & Frey ch. 7: on the axis |p/p0| = 2 |sin(pi/lambda (sqrt(z^2 + a^2) - z))|
    z = z_over_n * N
    closed = 2 * abs(math.sin(math.pi / LAM * (math.hypot(z, A) - z)))
    assert abs(complex(piston_field.piston_pressure(0.0, z, D, LAM))) == pytest.approx(closed, abs=1e-10)


def test_far_field_tends_to_the_directivity():
    # Kinsler & Frey ch. 7: far out p/p0 -> (pi a^2 / (lambda R)) 2 J1(k a sin theta) / (k a sin theta)
    z, r = 40 * N, 60.0
    rr = math.hypot(z, r)
    x = K * A * r / rr
    expected = math.pi * A * A / (LAM * rr) * float(beam.far_field_directivity(x))
    assert abs(complex(piston_field.piston_pressure(r, z, D, LAM))) == pytest.approx(expected, rel=0.01)


def _reference_widths(z: float, bw: float, drop_db: float, r_max: float, n_grid: int = 40) -> tuple[float, float]:
    """Central and outer full widths of the band-averaged pulse-echo profile, from the Rayleigh integral."""
    f, w = rayleigh.spectrum(F, bw, n=21)

    def profile(r):
        return rayleigh.band_averaged_intensity(r, z, A, f, w, C, n_radial=64, n_angle=128)

    r = np.linspace(0.0, r_max, n_grid)
    s = np.array([profile(v) for v in r])
    assert s[-1] < 0.3 * s.max() * 10 ** (-drop_db / 20)  # the grid reaches well past the edge
    level = s.max() * 10 ** (-drop_db / 20)
    i = int(np.argmax(s))
    while s[i + 1] >= level:
        i += 1
    j = int(np.flatnonzero(s >= level).max())
    central = 2 * optimize.brentq(lambda x: profile(x) - level, r[i], r[i + 1], xtol=1e-4)
    outer = 2 * optimize.brentq(lambda x: profile(x) - level, r[j], r[j + 1], xtol=1e-4)
    return central, outer


@pytest.mark.parametrize(
    ("z_over_n", "bw", "drop_db", "r_max"),
    [
        (0.3, 0.6, 6.0, 8.0),
        (0.6, 0.6, 6.0, 8.0),
        (0.6, 0.6, 20.0, 9.0),
        (1.0, 0.6, 6.0, 8.0),
        (2.0, 0.6, 20.0, 9.0),
        (5.0, 0.6, 6.0, 12.0),
        (0.6, 0.0, 6.0, 8.0),
    ],
)
def test_pulse_echo_widths_match_the_rayleigh_integral(z_over_n, bw, drop_db, r_max):
    # widths of the band-averaged pulse-echo lateral profile at depths inside and beyond the near field,
    # from ndtmap's model and from the Rayleigh surface integral (Kinsler & Frey ch. 7; Krautkramer ch. 4)
    z = z_over_n * N
    ref_central, ref_outer = _reference_widths(z, bw, drop_db, r_max)
    central, outer = piston_field.pulse_echo_beam_widths(z, D, F, C, bandwidth=bw, drop_db=drop_db)
    # 1 %: ndtmap samples the band with 15 frequencies over +-2.5 sigma, the reference with 21 over +-3 sigma
    assert central == pytest.approx(ref_central, rel=0.01, abs=0.03)
    assert outer == pytest.approx(ref_outer, rel=0.01, abs=0.03)
    assert float(piston_field.pulse_echo_beam_width_mm(z, D, F, C, bandwidth=bw, drop_db=drop_db)) == outer


def test_issue_case_near_field_width_is_not_a_quarter_of_the_element():
    # At 0.6 N the pulse-echo -6 dB beam of a 10 mm, 5 MHz probe of 60 % bandwidth is about 6.5 mm wide
    # (Rayleigh integral above); the far-field formula held at N gave 0.26 D = 2.6 mm.
    z = 0.6 * N
    w = float(piston_field.pulse_echo_beam_width_mm(z, D, F, C, bandwidth=0.6))
    assert w == pytest.approx(6.5, abs=0.1)
    assert w > 2.4 * float(beam.beam_width_mm(z, D, F, C))


@pytest.mark.parametrize(("drop_db", "constant"), [(6.0, 0.51), (20.0, 0.87)])
def test_far_field_width_is_the_textbook_spread(drop_db, constant):
    # Krautkramer ch. 4: full width 2 z tan(gamma), sin(gamma) = 0.51 lambda/D (-6 dB) or 0.87 lambda/D
    # (-20 dB), one frequency, far field (here 10 N; the constants are given to two figures)
    z = 10 * N
    expected = 2 * z * math.tan(math.asin(constant * LAM / D))
    got = float(piston_field.pulse_echo_beam_width_mm(z, D, F, C, drop_db=drop_db))
    assert got == pytest.approx(expected, rel=0.012)


def test_band_average_of_far_field_width():
    # Far field the width of each frequency is proportional to its wavelength and the pulse-echo echo of a
    # point weighs each frequency by f^2 (p ~ 1/lambda on the axis, squared), so the band-averaged width is
    # narrower than the centre frequency's: the half-amplitude point of sum_k w_k (f_k/f0)^2 (2 J1(x_k)/x_k)^2,
    # solved here with scipy for a 60 % Gaussian band (the spectrum of tests/helpers/rayleigh.py)
    z = 10 * N
    f, w = rayleigh.spectrum(F, 0.6)

    def profile(r):
        x = 2 * math.pi * f * 1e3 / C * A * r / math.hypot(r, z)
        return float(np.sum(w * (f / F) ** 2 * beam.far_field_directivity(x) ** 2) / np.sum(w * (f / F) ** 2))

    half = optimize.brentq(lambda r: profile(r) - 0.5, 1.0, 30.0)
    got = float(piston_field.pulse_echo_beam_width_mm(z, D, F, C, bandwidth=0.6))
    assert got == pytest.approx(2 * half, rel=0.01)
    assert got < 0.93 * float(beam.beam_width_mm(z, D, F, C))  # about 9 % narrower than one frequency


@pytest.mark.parametrize("z_over_n", [0.6, 2.0])
def test_coherent_envelope_profile_versus_band_average(z_over_n):
    # What the band average leaves out: the echo a gate reads is the peak of the pulse's envelope, the
    # frequencies added with their phases. Far out the two are the same (the phase of p^2 is a pure delay);
    # closer in the plane and edge waves arrive at different times. Measured from the Rayleigh integral for
    # 60 % bandwidth at 0.3, 0.6, 1, 2 and 5 N: the envelope's widths are 0.3 to 2.2 % narrower than the
    # band-averaged ones (at -6 and -20 dB); checked here at two depths within 2.5 %.
    f, w = rayleigh.spectrum(F, 0.6, n=41)
    k = rayleigh.wavenumbers(f, C)
    z = z_over_n * N

    def coherent(r):
        p = rayleigh.field(r, z, A, k, n_radial=64, n_angle=128)
        return rayleigh.echo_peak(p**2, f, w, math.hypot(r, z), C)

    r = np.linspace(0.0, 9.0 if z_over_n < 1 else 8.0, 30)
    s = np.array([coherent(v) for v in r])
    for drop_db in (6.0, 20.0):
        level = s.max() * 10 ** (-drop_db / 20)
        j = int(np.flatnonzero(s >= level).max())
        width = 2 * optimize.brentq(lambda x, level=level: coherent(x) - level, r[j], r[j + 1], xtol=1e-3)
        band = float(piston_field.pulse_echo_beam_width_mm(z, D, F, C, bandwidth=0.6, drop_db=drop_db))
        assert width == pytest.approx(band, rel=0.025)
        assert width <= band * 1.001


def test_point_reflector_length_range():
    # Far field every width scales with the wavelength (Krautkramer ch. 4), so the range over spectra centred
    # at f0 (1 -+ bw/2) spans (1 + bw/2) / (1 - bw/2) = 1.3 / 0.7 for bw = 0.6, around the band's own width
    z = 10 * N
    lo, hi = piston_field.point_reflector_length_range_mm(z, D, F, C, bandwidth=0.6)
    mid = float(piston_field.pulse_echo_beam_width_mm(z, D, F, C, bandwidth=0.6))
    assert hi / lo == pytest.approx(1.3 / 0.7, rel=0.01)
    assert lo == pytest.approx(mid / 1.3, rel=0.01) and hi == pytest.approx(mid / 0.7, rel=0.01)
    # inside the near field the range holds the central spot and the rings (0.3 N: central peak 1.4 mm)
    lo, hi = piston_field.point_reflector_length_range_mm(0.3 * N, D, F, C, bandwidth=0.6)
    central, outer = piston_field.pulse_echo_beam_widths(0.3 * N, D, F, C, bandwidth=0.6)
    assert lo <= central < 2.0 and hi >= outer > 6.0
    # the issue's discs of 9 to 12 mm at 100 mm give 6 dB lengths of 13.2 to 14.3 mm: inside the range
    lo, hi = piston_field.point_reflector_length_range_mm(100.0, D, F, C, bandwidth=0.6)
    assert lo < 13.2 and 14.3 < hi


@pytest.mark.parametrize("z_over_n", [0.3, 1.0, 3.0])
def test_backwall_echo_matches_the_image_piston(z_over_n):
    # Krautkramer ch. 4-5: the back-wall echo is the field of the image piston at 2 z averaged over the face;
    # ndtmap uses Lommel's closed form of it (ndtmap.physics.beam.backwall_echo_relative), the reference
    # integrates the Rayleigh field over the face (one frequency)
    # (Lommel's form, as Rogers and Van Buren's diffraction correction, is exact only for k a >> 1: here
    # k a = 26.5 and it is 1.7 % below the integral at 0.3 N, 0.5 % at N, 0.1 % at 3 N)
    z = z_over_n * N
    ref = abs(rayleigh.plane_echo_spectrum(z, A, np.array([F]), C)[0])
    assert float(beam.backwall_echo_relative(z, D, F, C)) == pytest.approx(ref, rel=0.02 if z_over_n < 1 else 0.006)


@pytest.mark.parametrize(("d_fbh", "z_over_n"), [(2.3, 0.45), (2.3, 1.0), (4.0, 1.0), (1.0, 3.0)])
def test_disc_echo_matches_the_reflected_rayleigh_field(d_fbh, z_over_n):
    # By reciprocity a flat reflector S echoes (1/(pi a^2)) int_S (p/p0)^2 dS (Kirchhoff; Krautkramer ch. 5);
    # reference: that integral of the Rayleigh field over the hole, the peak of the pulse's envelope
    z = z_over_n * N
    f, w = rayleigh.spectrum(F, 0.6)
    ref = rayleigh.echo_peak(rayleigh.disc_echo_spectrum(z, d_fbh / 2, A, f, C), f, w, z, C)
    ours = float(piston_field.disc_echo_relative(z, d_fbh, D, F, C, bandwidth=0.6))
    # 0.1 dB: ndtmap's spectrum stops at 2.5 sigma, the reference's at 3 sigma
    assert 20 * math.log10(ours / ref) == pytest.approx(0.0, abs=0.1)


def test_finite_hole_differs_from_the_small_hole_law_in_the_near_field():
    # the small-hole law (d/D)^2 p(z)^2 holds where the field is even across the hole: far field yes,
    # at 0.45 N no (the hole is as wide as the central spot of the field)
    small_law = beam.fbh_echo_relative(0.45 * N, 2.3, D, F, C, bandwidth=0.6)
    finite = piston_field.disc_echo_relative(0.45 * N, 2.3, D, F, C, bandwidth=0.6)
    assert 20 * math.log10(float(finite / small_law)) < -3.0
    far = 8 * N
    assert float(piston_field.disc_echo_relative(far, 2.3, D, F, C, bandwidth=0.6)) == pytest.approx(
        float(beam.fbh_echo_relative(far, 2.3, D, F, C, bandwidth=0.6)), rel=0.02)


def test_bad_arguments():
    with pytest.raises(ParameterError, match="`depth_mm`"):
        piston_field.pulse_echo_beam_width_mm(0.0, D, F, C)
    with pytest.raises(ParameterError, match="`offset_mm`"):
        piston_field.piston_pressure(-1.0, 10.0, D, LAM)
    with pytest.raises(ParameterError, match="`drop_db`"):
        piston_field.pulse_echo_beam_widths(10.0, D, F, C, drop_db=0.0)
    with pytest.raises(ParameterError, match="`bandwidth`"):
        piston_field.pulse_echo_sensitivity(0.0, 10.0, D, F, C, bandwidth=-0.1)
