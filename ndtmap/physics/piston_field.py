"""The field of a circular piston probe everywhere in front of it, and its pulse-echo beam widths.

:mod:`ndtmap.physics.beam` holds the classical relations (on-axis pressure,
far-field directivity, the echo laws of DGS). This module adds the field off
the axis at every distance, near field included, and the beam widths that
follow from it:

* :func:`piston_pressure`: the continuous-wave pressure of a baffled piston
  at any field point, the Rayleigh integral reduced exactly to a line
  integral (the piston's spatial impulse response grouped by distance, see
  below);
* :func:`pulse_echo_sensitivity`: the echo of a small reflector at a field
  point, ``|p/p0|**2`` averaged over the probe spectrum (pulse-echo: the
  probe transmits and receives the same field);
* :func:`pulse_echo_beam_widths` and :func:`pulse_echo_beam_width_mm`: the
  full width of that lateral profile at a drop (6 dB, 20 dB) below its
  maximum, at any depth;
* :func:`point_reflector_length_range_mm`: the range of drop lengths that a
  point reflector can give at that depth when the echo's spectrum lies
  anywhere in the probe's -6 dB band;
* :func:`disc_echo_relative`: the echo of a flat disc of finite size on the
  axis (a flat-bottom hole), the peak of its pulse envelope, for DGS inside
  the near field, where the field changes across the hole.

The field
---------
The Rayleigh integral of a baffled piston of radius ``a`` (velocity ``v0``,
``p0 = rho c v0``) is, with ``e^{i omega t}`` time dependence,
``p/p0 = (i k / 2 pi) int_S exp(-i k R) / R dS`` (Kinsler & Frey,
*Fundamentals of Acoustics*, ch. 7). Grouping the surface by the distance
``R`` from the field point (``dS = R dR dpsi`` on circles about the field
point's foot, at lateral offset ``r`` from the axis) gives

``p/p0 = (i k / pi) int Theta(R) exp(-i k R) dR``,

with ``Theta`` the half-angle of the arc of that circle lying on the piston
(the spatial impulse response of the piston, up to ``c / pi``). For
``r < a`` the circles up to radius ``a - r`` lie wholly on the piston and give
``exp(-i k z) - exp(-i k R1)``, ``R1 = sqrt(z**2 + (a - r)**2)`` (the plane
wave); the rest is integrated over the angle ``phi`` of the rim point where
the circle leaves the piston (``0..pi``), where the integrand is smooth, by
Gauss-Legendre quadrature (accurate to about 1e-12). On the axis this is the classical
``2 |sin(pi/lambda (sqrt(z**2 + a**2) - z))|``; far out it tends to
``(pi a**2 / (lambda z)) 2 J1(x)/x``.

What the model leaves out
-------------------------
A uniform piston in a rigid baffle radiating into a fluid-like solid:
no shear waves or mode conversion, no apodisation of a real element (whose
near-field structure is smoother), a single element in contact (no wedge,
no curved surface), the probe spectrum a Gaussian of the stated fractional
-6 dB bandwidth. The spectrum average is of ``|p|**2`` at each frequency
(an incoherent band average, as in :mod:`ndtmap.physics.beam`): the peak of
a real, short echo can differ from it in the near field, where the plane
and edge waves of the piston arrive at different times.

Units: lengths in mm, velocities in m/s, frequencies in MHz.
"""

from __future__ import annotations

import functools
import math
from typing import Any

import numpy as np
from scipy import optimize, special

from ndtmap._shared.validate import float_in_range, positive_float
from ndtmap.errors import ParameterError
from ndtmap.physics.beam import near_field_length_mm, spectrum_frequencies

__all__ = [
    "FAR_FIELD_LIMIT_N",
    "far_field_limit_mm",
    "piston_pressure",
    "pulse_echo_sensitivity",
    "pulse_echo_beam_widths",
    "pulse_echo_beam_width_mm",
    "point_reflector_length_range_mm",
    "disc_echo_relative",
]

#: Near-field lengths from which the far-field relations (DGS ``~1/z**2`` law, beam width ``2 z tan(gamma)``)
#: are used: the usual limit of the DGS method (Krautkramer, *Ultrasonic Testing of Materials*, DGS chapter).
FAR_FIELD_LIMIT_N = 3.0


def far_field_limit_mm(diameter_mm: float, frequency_mhz: float, velocity_m_s: float) -> float:
    """Sound path below which the far-field relations do not hold: ``FAR_FIELD_LIMIT_N`` near-field lengths, mm.

    Examples
    --------
    >>> round(far_field_limit_mm(10, 5, 5920), 1)  # 3 N of a 10 mm, 5 MHz probe in steel
    63.3
    """
    return FAR_FIELD_LIMIT_N * near_field_length_mm(diameter_mm, frequency_mhz, velocity_m_s)


@functools.lru_cache(maxsize=64)
def _nodes(n: int) -> tuple[np.ndarray, np.ndarray]:
    """Gauss-Legendre nodes and weights on the rim angle 0..pi, crowded towards 0 (``phi = pi u**2``).

    Close to the rim (``r`` near ``a``) the arc angle changes fast near ``phi = 0``; the crowding keeps the
    rule accurate to about 1e-12 there as elsewhere.
    """
    x, w = special.roots_legendre(n)
    u = 0.5 * (x + 1.0)
    return math.pi * u * u, math.pi * u * w


def _field(r: np.ndarray, z: np.ndarray, a: float, k: np.ndarray) -> np.ndarray:
    """p/p0 at lateral offsets r and distances z (same shape, 1-D) for wavenumbers k: shape (points, k)."""
    n = int(48 + 1.25 * float(k.max()) * 2.0 * a / math.pi)
    phi, w = _nodes(n)
    rr, zz = r[:, None], z[:, None]
    sig = np.sqrt(zz * zz + a * a + rr * rr - 2.0 * a * rr * np.cos(phi))
    theta = np.arctan2(a * np.sin(phi), rr - a * np.cos(phi))
    g = theta * (a * rr * np.sin(phi) / sig) * w  # (points, nodes)
    rim = np.einsum("pn,pnk->pk", g, np.exp(-1j * sig[:, :, None] * k[None, None, :]))
    rim *= 1j * k / math.pi
    r1 = np.sqrt(zz * zz + (a - rr) ** 2)
    plane = np.where(rr < a, np.exp(-1j * k * zz) - np.exp(-1j * k * r1), 0.0)
    return plane + rim


def piston_pressure(offset_mm: Any, depth_mm: Any, diameter_mm: float, wavelength: float) -> np.ndarray:
    """Continuous-wave pressure of a baffled circular piston at any field point, relative to ``rho c v0``.

    The Rayleigh integral over the piston, reduced exactly to a line integral
    (see the module notes); time dependence ``exp(i omega t)``.

    Parameters
    ----------
    offset_mm : array_like
        Lateral distance of the field point from the piston's axis, mm (>= 0).
    depth_mm : array_like
        Distance from the piston's plane, mm (> 0); broadcast with `offset_mm`.
    diameter_mm : float
        Piston diameter, mm.
    wavelength : float
        Wavelength, mm.

    Returns
    -------
    numpy.ndarray of complex
        ``p / p0``, the broadcast shape of the inputs.

    Examples
    --------
    On the axis the classical ``2 |sin(pi/lambda (sqrt(z**2 + a**2) - z))|`` (2 at the near-field length):

    >>> from ndtmap.physics.beam import near_field_length_mm
    >>> n = near_field_length_mm(10, 5, 5920, exact=True)
    >>> round(float(abs(piston_pressure(0.0, n, 10.0, 1.184))), 6)
    2.0
    """
    a = 0.5 * positive_float("diameter_mm", diameter_mm)
    lam = positive_float("wavelength", wavelength)
    r, z = np.broadcast_arrays(np.asarray(offset_mm, dtype=np.float64), np.asarray(depth_mm, dtype=np.float64))
    if np.any(~np.isfinite(r)) or np.any(r < 0) or np.any(~np.isfinite(z)) or np.any(z <= 0):
        raise _field_point_error(offset_mm, depth_mm)
    out = _field(r.reshape(-1), z.reshape(-1), a, np.array([2.0 * math.pi / lam]))[:, 0]
    return out.reshape(r.shape)


def _field_point_error(offset_mm: Any, depth_mm: Any) -> ParameterError:
    return ParameterError(
        f"field points need `offset_mm` >= 0 and `depth_mm` > 0 (finite), got offset_mm={offset_mm!r}, "
        f"depth_mm={depth_mm!r}"
    )


def _spectrum(frequency_mhz: float, velocity_m_s: float, bandwidth: float) -> tuple[np.ndarray, np.ndarray]:
    """Wavenumbers (1/mm) and weights of the probe spectrum."""
    freqs, weights = spectrum_frequencies(frequency_mhz, bandwidth)
    return 2.0 * math.pi / (velocity_m_s / (freqs * 1e3)), weights


def _sensitivity(r: np.ndarray, z: float, a: float, k: np.ndarray, w: np.ndarray) -> np.ndarray:
    """Band-averaged |p/p0|**2 at offsets r (1-D) and one depth z."""
    p = _field(r, np.full(r.shape, z), a, k)
    return (np.abs(p) ** 2) @ w


def pulse_echo_sensitivity(
    offset_mm: Any,
    depth_mm: Any,
    diameter_mm: float,
    frequency_mhz: float,
    velocity_m_s: float,
    *,
    bandwidth: float = 0.0,
) -> np.ndarray:
    """Pulse-echo sensitivity to a small reflector at a field point: ``|p/p0|**2`` averaged over the spectrum.

    The probe transmits and receives the same field (reciprocity), so the echo
    of a small reflector of area ``A`` at the point is this value times
    ``A / (pi a**2)``: on the axis it is
    :func:`ndtmap.physics.beam.fbh_echo_relative` for a hole as wide as the
    probe. Relative to the echo of an infinite plane at zero distance.

    Parameters
    ----------
    offset_mm, depth_mm : array_like
        Lateral offset from the axis (>= 0) and distance (> 0), mm; broadcast together.
    diameter_mm, frequency_mhz, velocity_m_s : float
        Probe and material.
    bandwidth : float, default 0
        Fractional -6 dB bandwidth of the (Gaussian) probe spectrum; 0 for one frequency.

    Returns
    -------
    numpy.ndarray
        Broadcast shape of the inputs.

    Examples
    --------
    >>> from ndtmap.physics.beam import fbh_echo_relative
    >>> s = pulse_echo_sensitivity(0.0, 50.0, 10, 5, 5920, bandwidth=0.6)
    >>> bool(abs(s - fbh_echo_relative(50.0, 10, 10, 5, 5920, bandwidth=0.6)) < 1e-9)
    True
    """
    a = 0.5 * positive_float("diameter_mm", diameter_mm)
    f = positive_float("frequency_mhz", frequency_mhz)
    c = positive_float("velocity_m_s", velocity_m_s)
    bw = float_in_range("bandwidth", bandwidth, 0.0, 2.0)
    r, z = np.broadcast_arrays(np.asarray(offset_mm, dtype=np.float64), np.asarray(depth_mm, dtype=np.float64))
    if np.any(~np.isfinite(r)) or np.any(r < 0) or np.any(~np.isfinite(z)) or np.any(z <= 0):
        raise _field_point_error(offset_mm, depth_mm)
    k, w = _spectrum(f, c, bw)
    p = _field(r.reshape(-1), z.reshape(-1), a, k)
    return ((np.abs(p) ** 2) @ w).reshape(r.shape)


def _profile_grid(z: float, a: float, k: np.ndarray) -> np.ndarray:
    """Lateral offsets that cover the pulse-echo main lobe (and near-field rings) at depth z, finely enough."""
    lam_long, lam_short = 2.0 * math.pi / float(k.min()), 2.0 * math.pi / float(k.max())
    s = min(0.95, 1.22 * lam_long / (2.0 * a))  # one-way first null at the longest wavelength
    r_max = a + 4.0 * lam_long + z * s / math.sqrt(1.0 - s * s)
    # the finest lateral structure of the field: about a wavelength close to the piston, lambda z / D farther out
    step = 0.2 * lam_short * max(1.0, z / (2.0 * a))
    return np.linspace(0.0, r_max, int(min(600, max(48, math.ceil(r_max / step)))) + 1)


@functools.lru_cache(maxsize=4096)
def _widths(z: float, d: float, f: float, c: float, bw: float, drop_db: float) -> tuple[float, float]:
    """(central, outer) full widths at `drop_db` below the maximum of the lateral profile at depth z."""
    a = 0.5 * d
    k, w = _spectrum(f, c, bw)
    r = _profile_grid(z, a, k)
    s = _sensitivity(r, z, a, k, w)
    level = float(s.max()) * 10.0 ** (-drop_db / 20.0)
    while s[-1] >= level:  # the grid did not reach the edge at this level: extend it
        r = np.linspace(0.0, 2.0 * r[-1], 2 * r.size - 1)
        s = _sensitivity(r, z, a, k, w)

    def crossing(i: int) -> float:
        return optimize.brentq(lambda x: float(_sensitivity(np.array([x]), z, a, k, w)[0]) - level, r[i], r[i + 1],
                               xtol=1e-6)

    i = int(np.argmax(s))
    while s[i + 1] >= level:
        i += 1
    outer = int(np.flatnonzero(s >= level).max())
    return 2.0 * crossing(i), 2.0 * crossing(outer)


def _checked(diameter_mm: float, frequency_mhz: float, velocity_m_s: float, bandwidth: float, drop_db: float
             ) -> tuple[float, float, float, float, float]:
    return (
        positive_float("diameter_mm", diameter_mm),
        positive_float("frequency_mhz", frequency_mhz),
        positive_float("velocity_m_s", velocity_m_s),
        float_in_range("bandwidth", bandwidth, 0.0, 1.5),
        float_in_range("drop_db", drop_db, 0.0, 40.0, low_inclusive=False),
    )


def _depths(depth_mm: Any) -> np.ndarray:
    z = np.asarray(depth_mm, dtype=np.float64)
    if np.any(~np.isfinite(z)) or np.any(z <= 0):
        raise ParameterError(f"`depth_mm` must be greater than 0 mm (finite), got {depth_mm!r}")
    return z


def pulse_echo_beam_widths(
    depth_mm: float,
    diameter_mm: float,
    frequency_mhz: float,
    velocity_m_s: float,
    *,
    bandwidth: float = 0.0,
    drop_db: float = 6.0,
) -> tuple[float, float]:
    """Central and outer pulse-echo beam widths at one depth, mm.

    The lateral profile is :func:`pulse_echo_sensitivity` against the offset
    from the axis at the given depth (what a point reflector at that depth
    gives as the probe is moved over it). Its level `drop_db` below the
    profile's maximum is crossed

    * first walking outward from the maximum: the *central* width (the width
      of the lobe that holds the maximum), and
    * for the last time: the *outer* width (everything above the level,
      near-field rings included).

    Beyond about one near-field length the two are the same; inside, the
    profile can hold a narrow central peak inside a ring as strong, and the
    two differ.

    Parameters
    ----------
    depth_mm : float
        Sound path, mm (> 0).
    diameter_mm, frequency_mhz, velocity_m_s : float
        Probe and material.
    bandwidth : float, default 0
        Fractional -6 dB bandwidth of the probe.
    drop_db : float, default 6
        Drop below the maximum that defines the edge (0 < drop <= 40 dB).

    Returns
    -------
    (central_mm, outer_mm) : tuple of float

    Examples
    --------
    Far field the width is ``2 z tan(gamma)`` with ``sin(gamma) = 0.51 lambda / D`` (one frequency):

    >>> c, o = pulse_echo_beam_widths(200.0, 10, 5, 5920)
    >>> round(c, 1), round(o, 1)
    (24.4, 24.4)
    """
    d, f, c, bw, drop = _checked(diameter_mm, frequency_mhz, velocity_m_s, bandwidth, drop_db)
    z = float(_depths(depth_mm))
    return _widths(z, d, f, c, bw, drop)


def pulse_echo_beam_width_mm(
    depth_mm: Any,
    diameter_mm: float,
    frequency_mhz: float,
    velocity_m_s: float,
    *,
    bandwidth: float = 0.0,
    drop_db: float = 6.0,
) -> np.ndarray:
    """Full pulse-echo beam width at any depth, near field included, mm: the outer width of the band-averaged profile.

    The width of the region where a point reflector's echo is at most
    `drop_db` below its maximum at that depth (see
    :func:`pulse_echo_beam_widths`; the outer width).

    Parameters
    ----------
    depth_mm : array_like
        Sound paths, mm (> 0).
    diameter_mm, frequency_mhz, velocity_m_s : float
        Probe and material.
    bandwidth : float, default 0
        Fractional -6 dB bandwidth of the probe.
    drop_db : float, default 6
        Edge drop, dB (6 for the -6 dB width, 20 for -20 dB).

    Returns
    -------
    numpy.ndarray
        Same shape as `depth_mm`.

    Examples
    --------
    >>> round(float(pulse_echo_beam_width_mm(100.0, 10, 5, 5920)), 2)  # 2 z tan(asin(0.514 lambda / D))
    12.19
    >>> round(float(pulse_echo_beam_width_mm(0.6 * 21.11, 10, 5, 5920, bandwidth=0.6)), 1)  # at 0.6 N
    6.5
    """
    d, f, c, bw, drop = _checked(diameter_mm, frequency_mhz, velocity_m_s, bandwidth, drop_db)
    z = _depths(depth_mm)
    out = np.array([_widths(float(v), d, f, c, bw, drop)[1] for v in z.reshape(-1)])
    return out.reshape(z.shape)


def point_reflector_length_range_mm(
    depth_mm: float,
    diameter_mm: float,
    frequency_mhz: float,
    velocity_m_s: float,
    *,
    bandwidth: float,
    drop_db: float = 6.0,
) -> tuple[float, float]:
    """The range of drop lengths that a point reflector can give at a depth, mm.

    A reflector much smaller than the beam gives, as drop length, the beam
    width at that depth, but which width depends on the echo's spectrum
    (shifted by attenuation, by the reflector's size and by the probe's
    tolerances) and, inside the near field, on whether the walk stops at the
    central lobe or goes on to the rings. The range taken here is from the
    smallest central width to the largest outer width of
    :func:`pulse_echo_beam_widths` over spectra of the probe's shape centred
    at the probe's frequency and at the two ends of its -6 dB band,
    ``f (1 -+ bandwidth / 2)``. A measured drop length inside this range
    cannot be told from a point reflector's.

    Parameters
    ----------
    depth_mm : float
        Sound path, mm (> 0).
    diameter_mm, frequency_mhz, velocity_m_s : float
        Probe and material.
    bandwidth : float
        Fractional -6 dB bandwidth (0: the range is that of one frequency).
    drop_db : float, default 6
        The drop of the length.

    Returns
    -------
    (low_mm, high_mm) : tuple of float

    Examples
    --------
    >>> lo, hi = point_reflector_length_range_mm(100.0, 10, 5, 5920, bandwidth=0.6)
    >>> round(lo, 1), round(hi, 1)  # band-averaged -6 dB width at 100 mm: 11.0 mm
    (8.5, 15.7)
    """
    d, f, c, bw, drop = _checked(diameter_mm, frequency_mhz, velocity_m_s, bandwidth, drop_db)
    z = float(_depths(depth_mm))
    centres = (f * (1.0 - 0.5 * bw), f, f * (1.0 + 0.5 * bw))
    widths = [_widths(z, d, fc, c, bw, drop) for fc in centres]
    return min(w[0] for w in widths), max(w[1] for w in widths)


def _disc_spectrum(frequency_mhz: float, velocity_m_s: float, bandwidth: float, window_us: float
                   ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Frequencies (MHz), wavenumbers (1/mm) and weights, spaced finely enough for an echo `window_us` long."""
    sigma = bandwidth * frequency_mhz / (2.0 * math.sqrt(2.0 * math.log(2.0)))
    n = int(min(301, max(41, math.ceil(5.0 * sigma * 2.0 * window_us) + 1)))
    freqs, weights = spectrum_frequencies(frequency_mhz, bandwidth, n)
    return freqs, 2.0 * math.pi * freqs * 1e3 / velocity_m_s, weights


def disc_echo_relative(
    depth_mm: Any,
    disc_diameter_mm: float,
    diameter_mm: float,
    frequency_mhz: float,
    velocity_m_s: float,
    *,
    bandwidth: float = 0.0,
) -> np.ndarray:
    """Echo of a flat disc on the axis, parallel to the probe (a flat-bottom hole), at any depth.

    By reciprocity the echo of a flat reflector ``S`` is
    ``(1 / (pi a**2)) int_S (p/p0)**2 dS`` at each frequency (Kirchhoff: the
    reflector returns the incident field; an infinite plane at zero distance
    gives 1). The field is integrated over the disc's face, so inside the
    near field, where the field changes across the hole, the echo is not
    ``(d/D)**2`` times the on-axis value (:func:`ndtmap.physics.beam.fbh_echo_relative`,
    the small-hole limit, to which this tends). With a bandwidth the result
    is the peak of the echo's envelope for a Gaussian spectrum (the
    frequencies added with their phases), as a gate reads it.

    Parameters
    ----------
    depth_mm : array_like
        Sound path to the disc, mm (> 0).
    disc_diameter_mm : float
        Disc (hole) diameter, mm.
    diameter_mm, frequency_mhz, velocity_m_s : float
        Probe and material.
    bandwidth : float, default 0
        Fractional -6 dB bandwidth of the probe.

    Returns
    -------
    numpy.ndarray
        Relative echo amplitude, same shape as `depth_mm`.

    Examples
    --------
    A small hole in the far field gives the small-hole law; a 2.3 mm hole at 0.45 N echoes 5 dB below it:

    >>> from ndtmap.physics.beam import fbh_echo_relative
    >>> far = disc_echo_relative(150.0, 1.0, 10, 5, 5920, bandwidth=0.6)
    >>> round(float(20 * np.log10(far / fbh_echo_relative(150.0, 1.0, 10, 5, 5920, bandwidth=0.6))), 2)
    -0.01
    >>> near = disc_echo_relative(9.5, 2.3, 10, 5, 5920, bandwidth=0.6)
    >>> round(float(20 * np.log10(near / fbh_echo_relative(9.5, 2.3, 10, 5, 5920, bandwidth=0.6))), 1)
    -5.0
    """
    d, f, c, bw, _ = _checked(diameter_mm, frequency_mhz, velocity_m_s, bandwidth, 6.0)
    b = 0.5 * positive_float("disc_diameter_mm", disc_diameter_mm)
    z = _depths(depth_mm)
    flat = z.reshape(-1)
    if flat.size == 1:
        return np.full(z.shape, _disc_echo(float(flat[0]), b, d, f, c, bw))
    return _disc_echoes(flat, b, d, f, c, bw).reshape(z.shape)


@functools.lru_cache(maxsize=65536)
def _disc_echo(z: float, b: float, d: float, f: float, c: float, bw: float) -> float:
    """:func:`_disc_echoes` at one depth, remembered (the DGS inversion asks for many sizes at one depth)."""
    return float(_disc_echoes(np.array([z]), b, d, f, c, bw)[0])


def _disc_echoes(z: np.ndarray, b: float, d: float, f: float, c: float, bw: float) -> np.ndarray:
    """Envelope peaks of the echoes of an on-axis disc of radius b at depths z (see :func:`disc_echo_relative`)."""
    a = 0.5 * d
    c_mm_us = c * 1e-3
    # the echo lasts from the plane-wave arrival to the last rim-to-rim arrival, plus the pulse's tails
    spread = 2.0 * (math.hypot(float(z.min()), a + b) - float(z.min())) / c_mm_us
    tail = 0.0 if bw == 0 else 4.0 / (2.0 * math.pi * bw * f / (2.0 * math.sqrt(2.0 * math.log(2.0))))
    freqs, k, w = _disc_spectrum(f, c, bw, spread + 2.0 * tail)
    lam_short = 2.0 * math.pi / float(k.max())
    x, wx = special.roots_legendre(int(12 + 4.0 * b / lam_short))
    r = 0.5 * b * (x + 1.0)
    area_weights = 2.0 * math.pi * r * 0.5 * b * wx / (math.pi * a * a)
    if freqs.size > 1:
        tau = np.arange(-tail, spread + tail + 1e-12, 1.0 / (16.0 * float(freqs.max())))
        synth = np.exp(2j * math.pi * tau[:, None] * freqs[None, :])  # (times, frequencies)
    out = np.empty(z.size)
    for start in range(0, z.size, 32):
        zc = z[start : start + 32]
        p = _field(np.tile(r, zc.size), np.repeat(zc, r.size), a, k).reshape(zc.size, r.size, k.size)
        spectrum = w * np.einsum("r,zrk->zk", area_weights, p * p)
        if freqs.size == 1:
            out[start : start + zc.size] = np.abs(spectrum[:, 0])
            continue
        spectrum = spectrum * np.exp(2j * math.pi * freqs[None, :] * (2.0 * zc[:, None] / c_mm_us))  # bulk delay off
        out[start : start + zc.size] = np.abs(synth @ spectrum.T).max(axis=0)
    return out
