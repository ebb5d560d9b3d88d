"""The probe's pulse and the wavelets the simulator builds from it.

The pulse is a Gaussian-windowed tone burst (a Gaussian amplitude spectrum of
the probe's centre frequency and fractional -6 dB bandwidth). A small patch
of a reflector returns the time derivative of the pulse (the far-field
response of a small scatterer); a plane echo computed in closed form (the
interface in immersion) returns the pulse itself, inverted.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
from scipy import signal

from ndtmap._shared.validate import positive_float

__all__ = ["tone_burst"]


def tone_burst(t_us: Any, frequency_mhz: float, bandwidth: float, *, quadrature: bool = False) -> np.ndarray:
    """Gaussian-windowed tone burst centred on ``t = 0`` with unit envelope peak.

    Parameters
    ----------
    t_us : array_like
        Times in us.
    frequency_mhz : float
        Centre frequency, MHz.
    bandwidth : float
        Fractional -6 dB bandwidth of the (Gaussian) amplitude spectrum.
    quadrature : bool, default False
        Return the sine (90 degree) burst instead of the cosine one.

    Returns
    -------
    numpy.ndarray

    Examples
    --------
    >>> float(tone_burst(0.0, 5.0, 0.6))
    1.0
    """
    f0 = positive_float("frequency_mhz", frequency_mhz)
    sigma_f = float(bandwidth) * f0 / (2.0 * math.sqrt(2.0 * math.log(2.0)))
    sigma_t = 1.0 / (2.0 * math.pi * sigma_f)
    t = np.asarray(t_us, dtype=np.float64)
    carrier = np.sin(2 * np.pi * f0 * t) if quadrature else np.cos(2 * np.pi * f0 * t)
    return np.exp(-0.5 * (t / sigma_t) ** 2) * carrier


def _pulse_half_length_us(frequency_mhz: float, bandwidth: float) -> float:
    """Half length of the pulse in us: 4 standard deviations of its Gaussian envelope."""
    sigma_f = bandwidth * frequency_mhz / (2.0 * math.sqrt(2.0 * math.log(2.0)))
    return 4.0 / (2.0 * math.pi * sigma_f)  # 4 sigma_t: envelope below 3.4e-4



def _centred_times(half: float, dt: float) -> np.ndarray:
    """Sample times -n dt .. n dt with n dt >= half: t = 0 falls exactly on the centre sample."""
    n = int(math.ceil(half / dt))
    return np.arange(-n, n + 1) * dt


def _point_wavelet(frequency_mhz: float, bandwidth: float, half_us: float, dt_us: float) -> np.ndarray:
    """Wavelet of a single small patch: the time derivative of the pulse, unit envelope peak.

    Sampled every `dt_us` from ``-half_us`` to ``+half_us`` (at least), centred on ``t = 0``.
    """
    t = _centred_times(half_us, dt_us)
    p = tone_burst(t, frequency_mhz, bandwidth)
    h = np.gradient(p, dt_us)
    env = np.abs(signal.hilbert(h))
    return h / env.max()


def _plane_wavelet(frequency_mhz: float, bandwidth: float, half_us: float, dt_us: float) -> np.ndarray:
    """Wavelet of a plane echo computed analytically (the interface): the pulse itself, inverted."""
    t = _centred_times(half_us, dt_us)
    return -tone_burst(t, frequency_mhz, bandwidth)
