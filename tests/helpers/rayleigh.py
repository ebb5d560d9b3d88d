"""Reference field of a circular piston computed here, independently of ndtmap, from the Rayleigh integral.

The pressure of a baffled piston of radius ``a`` (velocity ``v0``, ``p0 = rho c v0``) at a field point is
``p/p0 = (i k / 2 pi) int_S exp(-i k R) / R dS`` (Kinsler, Frey et al., *Fundamentals of Acoustics*, ch. 7;
Krautkramer, *Ultrasonic Testing of Materials*, ch. 4). Here the surface integral is done as it stands, over
the disc in polar coordinates about its centre, by a Gauss-Legendre product rule (nodes from
``scipy.special.roots_legendre``); :func:`field` checks itself against ``scipy.integrate.dblquad`` in the
tests. Nothing here imports ndtmap.

Echoes follow by reciprocity (Kirchhoff: a flat reflector returns the incident field): a flat reflector ``S``
gives ``(1 / (pi a**2)) int_S (p/p0)**2 dS`` at each frequency, 1 for an infinite plane at zero distance; an
infinite plane at depth ``z`` gives the field of the image piston at ``2 z`` averaged over the probe face.
A pulsed probe is a Gaussian amplitude spectrum of fractional -6 dB bandwidth ``bw``; the echo a gate reads
is the peak of the envelope of the frequencies added with their phases.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import special


def field(r_mm: float, z_mm: float, a_mm: float, k_per_mm, *, n_radial: int = 96, n_angle: int = 192) -> np.ndarray:
    """Complex p/p0 at lateral offset r and distance z for each wavenumber k (1/mm), by the surface integral."""
    k = np.atleast_1d(np.asarray(k_per_mm, dtype=np.float64))
    x, w = special.roots_legendre(n_radial)
    rho, w_rho = 0.5 * a_mm * (x + 1.0), 0.5 * a_mm * w
    y, v = special.roots_legendre(n_angle)
    psi, w_psi = 0.5 * math.pi * (y + 1.0), 0.5 * math.pi * v  # 0..pi, doubled by symmetry
    rr = np.sqrt(z_mm**2 + r_mm**2 + rho[:, None] ** 2 - 2.0 * r_mm * rho[:, None] * np.cos(psi[None, :]))
    weight = (2.0 * rho[:, None] * w_rho[:, None] * w_psi[None, :] / rr).reshape(-1)
    phase = np.exp(-1j * np.outer(rr.reshape(-1), k))
    return (1j * k / (2.0 * math.pi)) * (weight @ phase)


def spectrum(f0_mhz: float, bw: float, n: int = 61, span_sigma: float = 3.0) -> tuple[np.ndarray, np.ndarray]:
    """Frequencies (MHz) and amplitude weights (sum 1) of a Gaussian spectrum of fractional -6 dB bandwidth bw.

    The amplitude spectrum exp(-(f - f0)^2 / (2 sigma^2)) falls to one half at f0 +- bw f0 / 2, hence
    sigma = bw f0 / (2 sqrt(2 ln 2)).
    """
    if bw == 0:
        return np.array([f0_mhz]), np.array([1.0])
    sigma = bw * f0_mhz / (2.0 * math.sqrt(2.0 * math.log(2.0)))
    f = np.linspace(f0_mhz - span_sigma * sigma, f0_mhz + span_sigma * sigma, n)
    w = np.exp(-0.5 * ((f - f0_mhz) / sigma) ** 2)
    return f, w / w.sum()


def wavenumbers(f_mhz: np.ndarray, c_m_s: float) -> np.ndarray:
    """k = 2 pi f / c in 1/mm."""
    return 2.0 * math.pi * np.asarray(f_mhz) * 1e3 / c_m_s


def band_averaged_intensity(r_mm: float, z_mm: float, a_mm: float, f_mhz, weights, c_m_s: float,
                            **nodes: int) -> float:
    """sum_k w_k |p_k/p0|^2: the band-averaged pulse-echo sensitivity to a point at (r, z)."""
    p = field(r_mm, z_mm, a_mm, wavenumbers(f_mhz, c_m_s), **nodes)
    return float(np.sum(weights * np.abs(p) ** 2))


def envelope_peak(spectrum_values: np.ndarray, f_mhz: np.ndarray, t_us: np.ndarray) -> float:
    """max over t of |sum_k S_k exp(i 2 pi f_k t)| (the envelope of the echo whose spectrum is S)."""
    return float(np.abs(np.exp(2j * math.pi * np.outer(t_us, f_mhz)) @ spectrum_values).max())


def disc_echo_spectrum(depth_mm: float, disc_radius_mm: float, a_mm: float, f_mhz, c_m_s: float,
                       n_disc: int = 16) -> np.ndarray:
    """(1/(pi a^2)) int_disc (p/p0)^2 dS per frequency, for an on-axis disc (flat-bottom hole)."""
    k = wavenumbers(f_mhz, c_m_s)
    x, w = special.roots_legendre(n_disc)
    rb, wb = 0.5 * disc_radius_mm * (x + 1.0), 0.5 * disc_radius_mm * w
    total = np.zeros(k.size, dtype=complex)
    for r, wr in zip(rb, wb, strict=True):
        total += 2.0 * math.pi * r * wr * field(r, depth_mm, a_mm, k) ** 2
    return total / (math.pi * a_mm**2)


def plane_echo_spectrum(depth_mm: float, a_mm: float, f_mhz, c_m_s: float, n_face: int = 24) -> np.ndarray:
    """Echo of an infinite plane at depth z per frequency: the image piston's field at 2 z averaged over the face."""
    k = wavenumbers(f_mhz, c_m_s)
    x, w = special.roots_legendre(n_face)
    rf, wf = 0.5 * a_mm * (x + 1.0), 0.5 * a_mm * w
    total = np.zeros(k.size, dtype=complex)
    for r, wr in zip(rf, wf, strict=True):
        total += 2.0 * math.pi * r * wr * field(r, 2.0 * depth_mm, a_mm, k)
    return total / (math.pi * a_mm**2)


def echo_peak(spec: np.ndarray, f_mhz: np.ndarray, weights: np.ndarray, depth_mm: float, c_m_s: float,
              window_us: float = 4.0) -> float:
    """Envelope peak of an echo with per-frequency transfer `spec` (one frequency: |spec|), near 2 z / c."""
    if f_mhz.size == 1:
        return float(abs(spec[0]))
    t0 = 2.0 * depth_mm / (c_m_s * 1e-3)
    t = t0 + np.arange(-0.5 * window_us, 0.5 * window_us + 1e-9, 1.0 / (20.0 * float(np.max(f_mhz))))
    return envelope_peak(weights * spec, f_mhz, t)
