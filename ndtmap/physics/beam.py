"""Beam and transducer physics of a circular piston probe, in pulse-echo.

The formulas are the classical ones of ultrasonic testing (a disc-shaped
element of diameter ``D`` radiating continuous waves of wavelength
``lambda`` into an isotropic solid):

* wavelength ``lambda = c / f``;
* near-field length ``N = D**2 / (4 lambda)`` (the exact on-axis last
  maximum lies at ``(D**2 - lambda**2) / (4 lambda)``);
* on-axis pressure ``p(z)/p0 = 2 |sin(pi/lambda (sqrt(z**2 + a**2) - z))|``;
* far-field directivity ``2 J1(x) / x`` with ``x = k a sin(theta)``; in
  pulse-echo it is squared, so the -6 dB half-angle obeys
  ``sin(gamma) = 0.51 lambda / D`` and the -20 dB one ``0.87 lambda / D``;
* the back-wall echo follows the Lommel diffraction integral, ``~ 1/z`` in
  the far field, and a small flat-bottom hole ``~ 1/z**2``, their ratio
  being the DGS relation ``H_FBH / H_BW = pi d**2 z_BW / (2 lambda z**2)``.

Units: lengths in mm, velocities in m/s, frequencies in MHz, angles in
degrees at the public boundary. Amplitudes are relative to the echo of an
infinite plane reflector at zero distance (1.0).

Where the probe's bandwidth matters (the near-field ripples of real,
pulsed probes are smoothed), functions take a ``bandwidth`` (fractional
-6 dB bandwidth of a Gaussian spectrum) and average over the spectrum.

The field off the axis at every distance, and the pulse-echo beam widths
inside the near field, are in :mod:`ndtmap.physics.piston_field`; the
far-field width :func:`beam_width_mm` and the lateral model
:func:`lateral_sensitivity` here are far-field forms.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
from scipy import optimize, special

from ndtmap._shared.validate import float_in_range, positive_float

__all__ = [
    "wavelength_mm",
    "near_field_length_mm",
    "on_axis_pressure",
    "far_field_directivity",
    "beam_spread_constant",
    "beam_spread_half_angle_deg",
    "beam_width_mm",
    "lateral_sensitivity",
    "backwall_echo_relative",
    "fbh_echo_relative",
    "dgs_fbh_backwall_ratio",
    "spectrum_frequencies",
]


def wavelength_mm(velocity_m_s: float, frequency_mhz: float) -> float:
    """Wavelength in mm from sound velocity (m/s) and frequency (MHz).

    Examples
    --------
    >>> round(wavelength_mm(5920, 5), 4)  # steel, longitudinal, 5 MHz
    1.184
    """
    v = positive_float("velocity_m_s", velocity_m_s)
    f = positive_float("frequency_mhz", frequency_mhz)
    return v / (f * 1e3)


def near_field_length_mm(
    diameter_mm: float, frequency_mhz: float, velocity_m_s: float, *, exact: bool = False
) -> float:
    """Near-field length N of a circular element, in mm.

    Parameters
    ----------
    diameter_mm : float
        Element diameter D in mm.
    frequency_mhz : float
        Centre frequency in MHz.
    velocity_m_s : float
        Sound velocity of the medium in m/s.
    exact : bool, default False
        If True return ``(D**2 - lambda**2) / (4 lambda)``, the position of the
        last on-axis pressure maximum; else the usual ``D**2 f / (4 c)``.

    Returns
    -------
    float
        N in mm.

    Examples
    --------
    >>> round(near_field_length_mm(10, 5, 5920), 2)
    21.11
    """
    d = positive_float("diameter_mm", diameter_mm)
    lam = wavelength_mm(velocity_m_s, frequency_mhz)
    if exact:
        return (d * d - lam * lam) / (4.0 * lam)
    return d * d / (4.0 * lam)


def on_axis_pressure(z_mm: Any, diameter_mm: float, wavelength: float) -> np.ndarray:
    """Continuous-wave on-axis pressure of a piston, relative to the source pressure.

    ``p(z)/p0 = 2 |sin(pi / lambda (sqrt(z**2 + a**2) - z))|``, which has its
    last maximum (value 2) at the near-field length and falls as
    ``pi a**2 / (lambda z)`` in the far field.

    Parameters
    ----------
    z_mm : array_like
        Distance along the axis in mm (>= 0).
    diameter_mm : float
        Element diameter in mm.
    wavelength : float
        Wavelength in mm.

    Returns
    -------
    numpy.ndarray
        Relative pressure amplitude, same shape as `z_mm`.
    """
    a = 0.5 * positive_float("diameter_mm", diameter_mm)
    lam = positive_float("wavelength", wavelength)
    z = np.asarray(z_mm, dtype=np.float64)
    # sqrt(z^2+a^2) - z written without cancellation for large z
    path_difference = a * a / (np.sqrt(z * z + a * a) + z)
    return 2.0 * np.abs(np.sin(np.pi / lam * path_difference))


def far_field_directivity(x: Any) -> np.ndarray:
    """One-way far-field directivity ``2 J1(x) / x`` of a piston (1 at x = 0).

    Parameters
    ----------
    x : array_like
        ``k a sin(theta)``, dimensionless.

    Returns
    -------
    numpy.ndarray
        Signed directivity (negative in odd side lobes).
    """
    x = np.asarray(x, dtype=np.float64)
    small = np.abs(x) < 1e-8
    safe = np.where(small, 1.0, x)
    return np.where(small, 1.0, 2.0 * special.j1(safe) / safe)


def beam_spread_constant(drop_db: float = 6.0, *, pulse_echo: bool = True) -> float:
    """Constant ``k`` of ``sin(gamma) = k lambda / D`` for a given edge drop.

    Solves ``(2 J1(x)/x)**m = 10**(-drop_db/20)`` on the main lobe, with
    ``m = 2`` in pulse-echo and ``m = 1`` one way, and returns ``x / pi``.

    Parameters
    ----------
    drop_db : float, default 6
        Drop from the beam axis that defines the beam edge, in dB (> 0).
    pulse_echo : bool, default True
        Pulse-echo (directivity squared) or one-way (transmit only).

    Returns
    -------
    float
        k, dimensionless.

    Examples
    --------
    >>> round(beam_spread_constant(6), 2), round(beam_spread_constant(20), 2)
    (0.51, 0.87)
    """
    drop = float_in_range("drop_db", drop_db, 0.0, 200.0, low_inclusive=False)
    level = 10.0 ** (-drop / 20.0)
    if pulse_echo:
        level = math.sqrt(level)
    first_zero = 3.8317059702075125  # first zero of J1
    x = optimize.brentq(lambda u: float(far_field_directivity(u)) - level, 1e-9, first_zero)
    return x / math.pi


def beam_spread_half_angle_deg(
    diameter_mm: float,
    frequency_mhz: float,
    velocity_m_s: float,
    *,
    drop_db: float = 6.0,
    pulse_echo: bool = True,
) -> float:
    """Far-field half-angle of beam spread in degrees.

    Parameters
    ----------
    diameter_mm, frequency_mhz, velocity_m_s : float
        Element diameter (mm), centre frequency (MHz), sound velocity (m/s).
    drop_db : float, default 6
        Edge drop in dB.
    pulse_echo : bool, default True
        Pulse-echo or one-way beam.

    Returns
    -------
    float
        gamma in degrees; 90 when the element is too small for a main lobe.
    """
    lam = wavelength_mm(velocity_m_s, frequency_mhz)
    d = positive_float("diameter_mm", diameter_mm)
    s = beam_spread_constant(drop_db, pulse_echo=pulse_echo) * lam / d
    return 90.0 if s >= 1.0 else math.degrees(math.asin(s))


def beam_width_mm(
    depth_mm: Any,
    diameter_mm: float,
    frequency_mhz: float,
    velocity_m_s: float,
    *,
    drop_db: float = 6.0,
) -> np.ndarray:
    """Far-field pulse-echo beam width ``2 z tan(gamma)`` at a given sound path, in mm (one frequency).

    Inside the near field the value at ``N`` is returned (about a quarter of
    the element diameter at -6 dB): that is *not* the beam's width there,
    which is about as wide as the element, only the least width of the
    simulator's lateral model (:func:`lateral_sensitivity`), which uses this
    function for its patch size. For the width of the beam at any depth,
    near field included and averaged over the probe spectrum, use
    :func:`ndtmap.physics.piston_field.pulse_echo_beam_width_mm`.

    Parameters
    ----------
    depth_mm : array_like
        Sound path (distance along the beam) in mm.
    diameter_mm, frequency_mhz, velocity_m_s : float
        Probe and material.
    drop_db : float, default 6
        Edge drop in dB (6 for the -6 dB width, 20 for -20 dB).

    Returns
    -------
    numpy.ndarray
        Width in mm, same shape as `depth_mm`.

    Examples
    --------
    >>> w = beam_width_mm(100.0, 10, 5, 5920)
    >>> round(float(w), 2)  # 2 * 100 * tan(asin(0.514 * 1.184 / 10))
    12.19
    """
    n = near_field_length_mm(diameter_mm, frequency_mhz, velocity_m_s)
    gamma = math.radians(
        beam_spread_half_angle_deg(diameter_mm, frequency_mhz, velocity_m_s, drop_db=drop_db)
    )
    z = np.maximum(np.asarray(depth_mm, dtype=np.float64), n)
    return 2.0 * z * math.tan(gamma)


def lateral_sensitivity(
    offset_mm: Any,
    distance_mm: Any,
    diameter_mm: float,
    wavelength: float,
    near_field_mm: float | None = None,
) -> np.ndarray:
    """Pulse-echo sensitivity to a point at a lateral offset from the beam axis.

    ``(2 J1(x) / x)**2`` with ``x = k a sin(theta)`` and
    ``sin(theta) = r / sqrt(r**2 + max(z, N)**2)``: the far-field directivity,
    with the near-field length as the least distance so that the beam keeps
    its width at ``N`` inside the near field. This is the simulator's
    approximation, right in the far field only: inside the near field the
    real beam is much wider (see
    :func:`ndtmap.physics.piston_field.pulse_echo_sensitivity`, the exact
    piston field).

    Parameters
    ----------
    offset_mm : array_like
        Lateral distance r from the beam axis, mm.
    distance_mm : array_like
        Distance z along the beam axis, mm.
    diameter_mm : float
        Element diameter, mm.
    wavelength : float
        Wavelength in the medium, mm.
    near_field_mm : float, optional
        Near-field length; computed from the other values when omitted.

    Returns
    -------
    numpy.ndarray
        Relative amplitude in [0, 1] (1 on the axis).
    """
    a = 0.5 * float(diameter_mm)
    lam = float(wavelength)
    n = a * a / lam if near_field_mm is None else float(near_field_mm)
    r = np.asarray(offset_mm, dtype=np.float64)
    z = np.maximum(np.asarray(distance_mm, dtype=np.float64), n)
    x = (2.0 * np.pi / lam) * a * r / np.sqrt(r * r + z * z)
    return far_field_directivity(x) ** 2


def spectrum_frequencies(
    frequency_mhz: float, bandwidth: float, n: int = 15
) -> tuple[np.ndarray, np.ndarray]:
    """Frequencies and weights that sample a Gaussian probe spectrum.

    Parameters
    ----------
    frequency_mhz : float
        Centre frequency, MHz.
    bandwidth : float
        Fractional -6 dB bandwidth (0 for a single frequency).
    n : int, default 15
        Number of frequencies.

    Returns
    -------
    freqs_mhz, weights : numpy.ndarray
        Weights sum to 1 and follow the amplitude spectrum.
    """
    f0 = positive_float("frequency_mhz", frequency_mhz)
    bw = float_in_range("bandwidth", bandwidth, 0.0, 2.0)
    if bw == 0.0:
        return np.array([f0]), np.array([1.0])
    sigma = bw * f0 / (2.0 * math.sqrt(2.0 * math.log(2.0)))
    freqs = np.linspace(f0 - 2.5 * sigma, f0 + 2.5 * sigma, n)
    freqs = freqs[freqs > 0.05 * f0]
    w = np.exp(-0.5 * ((freqs - f0) / sigma) ** 2)
    return freqs, w / w.sum()


def _spectrum_average(quantity: Any, frequency_mhz: float, velocity_m_s: float, bandwidth: float) -> np.ndarray:
    """Average ``quantity(wavelength_mm)`` over the probe spectrum (see :func:`spectrum_frequencies`)."""
    freqs, weights = spectrum_frequencies(frequency_mhz, bandwidth)
    return sum(w * quantity(wavelength_mm(velocity_m_s, f)) for f, w in zip(freqs, weights, strict=True))


def _lommel(fresnel_s: np.ndarray) -> np.ndarray:
    """|1 - exp(-i 2pi/s) (J0(2pi/s) + i J1(2pi/s))|: the plane-reflector diffraction factor."""
    x = 2.0 * np.pi / fresnel_s
    return np.abs(1.0 - np.exp(-1j * x) * (special.j0(x) + 1j * special.j1(x)))


def backwall_echo_relative(
    depth_mm: Any,
    diameter_mm: float,
    frequency_mhz: float,
    velocity_m_s: float,
    *,
    bandwidth: float = 0.0,
) -> np.ndarray:
    """Echo of an infinite plane reflector (back wall) relative to zero distance.

    The receiver-averaged field of the image source at ``2 z`` (Lommel's
    diffraction integral, as used for diffraction corrections): 1 at
    ``z = 0``, ``pi a**2 / (2 lambda z)`` in the far field. With a non-zero
    `bandwidth` the value is averaged over the probe spectrum.

    Parameters
    ----------
    depth_mm : array_like
        Distance to the reflector (sound path), mm.
    diameter_mm, frequency_mhz, velocity_m_s : float
        Probe and material.
    bandwidth : float, default 0
        Fractional -6 dB bandwidth of the probe.

    Returns
    -------
    numpy.ndarray
        Relative echo amplitude, same shape as `depth_mm`.
    """
    a = 0.5 * positive_float("diameter_mm", diameter_mm)
    z = np.maximum(np.asarray(depth_mm, dtype=np.float64), 1e-9)
    return _spectrum_average(lambda lam: _lommel(2.0 * z * lam / (a * a)), frequency_mhz, velocity_m_s, bandwidth)


def fbh_echo_relative(
    depth_mm: Any,
    fbh_diameter_mm: float,
    diameter_mm: float,
    frequency_mhz: float,
    velocity_m_s: float,
    *,
    bandwidth: float = 0.0,
) -> np.ndarray:
    """On-axis echo of a small flat-bottom hole relative to a plane at zero distance.

    ``(p(z)/p0)**2 (d/D)**2``, with ``p`` the on-axis piston pressure: in the
    far field ``pi**2 a**2 b**2 / (lambda z)**2`` (``b = d/2``), which
    together with :func:`backwall_echo_relative` gives the DGS relation.
    Valid for holes much smaller than the beam. Averaged over the probe
    spectrum when `bandwidth` > 0, which smooths the near-field ripples.

    Parameters
    ----------
    depth_mm : array_like
        Sound path to the hole bottom, mm.
    fbh_diameter_mm : float
        Hole diameter, mm.
    diameter_mm, frequency_mhz, velocity_m_s : float
        Probe and material.
    bandwidth : float, default 0
        Fractional -6 dB bandwidth of the probe.

    Returns
    -------
    numpy.ndarray
        Relative echo amplitude.
    """
    d_fbh = positive_float("fbh_diameter_mm", fbh_diameter_mm)
    d = positive_float("diameter_mm", diameter_mm)
    z = np.asarray(depth_mm, dtype=np.float64)
    p2 = _spectrum_average(lambda lam: on_axis_pressure(z, d, lam) ** 2, frequency_mhz, velocity_m_s, bandwidth)
    return p2 * (d_fbh / d) ** 2


def dgs_fbh_backwall_ratio(
    fbh_diameter_mm: Any, fbh_depth_mm: Any, backwall_depth_mm: Any, wavelength: float
) -> np.ndarray:
    """Far-field DGS ratio ``H_FBH / H_BW = pi d**2 z_BW / (2 lambda z**2)``.

    Parameters
    ----------
    fbh_diameter_mm : array_like
        Flat-bottom-hole diameter d, mm.
    fbh_depth_mm : array_like
        Sound path to the hole, z, mm.
    backwall_depth_mm : array_like
        Sound path to the back wall, z_BW, mm.
    wavelength : float
        Wavelength, mm.

    Returns
    -------
    numpy.ndarray
        Amplitude ratio (not dB).

    Examples
    --------
    >>> r = dgs_fbh_backwall_ratio(3.0, 100.0, 100.0, 1.184)
    >>> round(float(20 * np.log10(r)), 1)  # a 3 mm FBH at 100 mm, 5 MHz steel
    -18.5
    """
    d = np.asarray(fbh_diameter_mm, dtype=np.float64)
    z = np.asarray(fbh_depth_mm, dtype=np.float64)
    zb = np.asarray(backwall_depth_mm, dtype=np.float64)
    lam = positive_float("wavelength", wavelength)
    return np.pi * d * d * zb / (2.0 * lam * z * z)
