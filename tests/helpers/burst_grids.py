"""Test grids built from Gaussian-windowed tone bursts at known times (helpers for the processing tests).

An echo from sound path ``s`` in pulse-echo arrives at ``t0 + 2 s / c``
(``t0`` the zero offset); these helpers place RF bursts exactly there, so
every test knows the truth it checks against.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence

import numpy as np
import xarray as xr

from ndtmap.grid import make_grid

STEEL_L = 5920.0  # m/s, steel longitudinal; from memory (handbook tables)
STEEL_S = 3230.0  # m/s, steel shear; from memory
ALUMINIUM_L = 6320.0  # m/s, aluminium longitudinal; from memory
WATER = 1483.0  # m/s, water at 20 degC; from memory

FREQ = 5.0  # MHz
DT = 0.02  # us, 50 MHz sampling


def burst(t: np.ndarray, centre_us: float, amplitude: float = 80.0, *, f_mhz: float = FREQ,
          sigma_us: float = 0.15, phase: float = 0.0) -> np.ndarray:
    """Gaussian-windowed cosine centred at `centre_us`, peak `amplitude` (%FSH)."""
    x = np.asarray(t, dtype=np.float64) - centre_us
    return amplitude * np.exp(-0.5 * (x / sigma_us) ** 2) * np.cos(2 * np.pi * f_mhz * x + phase)


def time_axis(duration_us: float, dt_us: float = DT, start_us: float = 0.0) -> np.ndarray:
    return start_us + np.arange(int(round(duration_us / dt_us))) * dt_us


def grid_from(
    echoes: Callable[[float, float], Sequence[tuple[float, float]]],
    *,
    scan_mm: Sequence[float] = (0.0, 1.0, 2.0, 3.0),
    index_mm: Sequence[float] = (0.0, 1.5, 3.0),
    duration_us: float = 12.0,
    dt_us: float = DT,
    velocity_m_s: float = STEEL_L,
    beam_angle_deg: float = 0.0,
    sigma_us: float = 0.15,
    attrs: dict | None = None,
    noise_fsh: float = 0.0,
    seed: int = 0,
) -> xr.Dataset:
    """RF grid whose A-scan at (scan, index) holds the bursts ``echoes(scan, index) -> [(time_us, amp)]``."""
    t = time_axis(duration_us, dt_us)
    data = np.zeros((len(scan_mm), len(index_mm), t.size))
    for i, s in enumerate(scan_mm):
        for j, x in enumerate(index_mm):
            for centre, amp in echoes(s, x):
                data[i, j] += burst(t, centre, amp, sigma_us=sigma_us)
    if noise_fsh:
        data += np.random.default_rng(seed).normal(0.0, noise_fsh, data.shape)
    return make_grid(data.astype(np.float32), scan_mm=scan_mm, index_mm=index_mm, time_us=t,
                     velocity_m_s=velocity_m_s, probe_frequency_mhz=FREQ, probe_diameter_mm=10.0,
                     beam_angle_deg=beam_angle_deg, attrs=attrs)


def plate_grid(thickness_mm: float = 12.3, *, n_echoes: int = 2, zero_offset_us: float = 0.0,
               velocity_m_s: float = STEEL_L, amplitude: float = 80.0, decay: float = 0.6, **kwargs) -> xr.Dataset:
    """Contact straight-beam plate: back-wall echoes at ``t0 + 2 k T / c``, k = 1..n_echoes."""
    spacing = 2.0 * thickness_mm / (velocity_m_s * 1e-3)

    def echoes(_s: float, _x: float) -> list[tuple[float, float]]:
        return [(zero_offset_us + k * spacing, amplitude * decay ** (k - 1)) for k in range(1, n_echoes + 1)]

    attrs = dict(kwargs.pop("attrs", None) or {})
    attrs.setdefault("zero_offset_us", zero_offset_us)
    attrs.setdefault("part_thickness_mm", thickness_mm)
    return grid_from(echoes, velocity_m_s=velocity_m_s, attrs=attrs, **kwargs)


def to_backend(grid: xr.Dataset, backend: str) -> xr.Dataset:
    """The grid in memory ('numpy') or dask-backed ('dask', two scan lines per chunk)."""
    if backend == "numpy":
        return grid
    return grid.chunk({"scan": 2})


def with_missing(grid: xr.Dataset, positions: Sequence[tuple[int, int]]) -> xr.Dataset:
    """Copy of `grid` with the A-scans at the given (scan, index) sample positions set to NaN."""
    a = grid["ascan"].values.copy()
    for i, j in positions:
        a[i, j, :] = np.nan
    out = grid.copy()
    out["ascan"] = (grid["ascan"].dims, a, grid["ascan"].attrs)
    return out


def is_dask(obj: xr.DataArray) -> bool:
    return obj.chunks is not None
