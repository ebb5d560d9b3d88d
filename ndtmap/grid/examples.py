"""Tiny grids for the runnable examples in the docstrings (private).

:func:`example_grid` gives a straight-beam contact grid on a steel plate:
every A-scan holds Gaussian-windowed tone bursts (the probe's echoes) at the
times asked for, sampled at 50 MHz.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import xarray as xr

from ndtmap.grid.schema import make_grid
from ndtmap.physics.materials import MATERIALS


def tone_burst(time_us: np.ndarray, centre_us: float, *, frequency_mhz: float = 5.0, sigma_us: float = 0.15,
               amplitude_fsh: float = 80.0) -> np.ndarray:
    """A Gaussian-windowed cosine burst (an RF echo) centred at `centre_us`."""
    t = np.asarray(time_us, dtype=np.float64) - centre_us
    return amplitude_fsh * np.exp(-0.5 * (t / sigma_us) ** 2) * np.cos(2 * np.pi * frequency_mhz * t)


def example_grid(echo_times_us: Sequence[float] = (4.0,), amplitudes_fsh: Sequence[float] | None = None, *,
                 n_scan: int = 3, n_index: int = 2, duration_us: float = 10.0, dt_us: float = 0.02,
                 velocity_m_s: float = MATERIALS["steel"].longitudinal_m_s, beam_angle_deg: float = 0.0,
                 attrs: dict | None = None) -> xr.Dataset:
    """A small RF grid whose every A-scan holds echoes at `echo_times_us`.

    Examples
    --------
    >>> g = example_grid((4.0, 8.0))
    >>> dict(g.sizes)
    {'scan': 3, 'index': 2, 'time': 500}
    """
    t = np.arange(int(round(duration_us / dt_us))) * dt_us
    amps = list(amplitudes_fsh) if amplitudes_fsh is not None else [80.0 * 0.6**k for k in range(len(echo_times_us))]
    trace = sum((tone_burst(t, tc, amplitude_fsh=a) for tc, a in zip(echo_times_us, amps, strict=True)),
                np.zeros_like(t))
    data = np.broadcast_to(trace, (n_scan, n_index, t.size)).astype(np.float32)
    return make_grid(data, scan_mm=np.arange(n_scan, dtype=float), index_mm=np.arange(n_index, dtype=float),
                     time_us=t, velocity_m_s=velocity_m_s, probe_frequency_mhz=5.0, probe_diameter_mm=10.0,
                     beam_angle_deg=beam_angle_deg, attrs=attrs)
