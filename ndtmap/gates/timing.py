"""Echo timing on the envelope: the FIR Hilbert transformer and the constants of the envelope timing.

A gate on RF data times an echo by its envelope (the modulus of the analytic
signal ``a + i H[a]``), not by its highest carrier crest. The kernels
(:mod:`ndtmap.gates.kernels`, :mod:`ndtmap.gates._compiled`) need the
envelope at a few samples around the highest one only, so they compute the
Hilbert transform ``H`` there with the FIR filter of :func:`hilbert_taps`
instead of an FFT of the whole A-scan.
"""

from __future__ import annotations

import math

import numpy as np

from ndtmap.errors import ParameterError

__all__ = ["ENVELOPE_PERIODS", "ENVELOPE_LEVEL", "hilbert_taps"]

#: Carrier periods on either side of a sample that the FIR Hilbert transformer of the envelope timing spans.
ENVELOPE_PERIODS = 4.0
#: The envelope timing takes the centroid of the envelope above this fraction of its maximum (0.5: -6 dB).
ENVELOPE_LEVEL = 0.5


def hilbert_taps(samples_per_period: float, periods: float = ENVELOPE_PERIODS) -> np.ndarray:
    """Odd taps of a Blackman-windowed FIR Hilbert transformer spanning `periods` carrier periods each side.

    The ideal discrete Hilbert transformer has the impulse response
    ``h[m] = 2 / (pi m)`` for odd ``m`` and 0 for even ``m`` (antisymmetric);
    truncated at ``|m| <= M`` (``M`` odd, about ``periods *
    samples_per_period``) and tapered by a Blackman window of ``2 M + 3``
    points (its end zeros dropped). Element ``i`` is ``h[2 i + 1]``, so the
    Hilbert transform of ``a`` at sample ``j`` is ``sum_i h[2 i + 1]
    (a[j - 2 i - 1] - a[j + 2 i + 1])``.

    Parameters
    ----------
    samples_per_period : float
        Samples per carrier period (sampling frequency / probe frequency).
    periods : float, default 4
        Reach of the filter in carrier periods on either side.

    Returns
    -------
    ndarray of float64, ``(M + 1) // 2`` taps

    Examples
    --------
    >>> taps = hilbert_taps(10.0)          # 50 MHz sampling of a 5 MHz probe
    >>> taps.size, round(float(taps[0]), 4)  # h[1] = 2 / pi, barely tapered
    (21, 0.6352)
    """
    spp = float(samples_per_period)
    if not (math.isfinite(spp) and spp > 0):
        raise ParameterError(f"`samples_per_period` must be a positive number, got {samples_per_period!r}")
    m_half = max(1, int(math.ceil(float(periods) * spp)))
    m_half += 1 - m_half % 2  # odd
    m = np.arange(1, m_half + 1, 2)
    window = np.blackman(2 * m_half + 3)[m_half + 1 + m]
    return 2.0 / (np.pi * m) * window
