"""Seeded synthetic scan grids of any size, generated chunk by chunk (for the benchmarks).

A contact straight-beam scan of a fictional Kestrel Forge & Plate plate (part KFP-PL-7730): 5 MHz, steel,
50 MHz sampling, int16 counts. Each A-scan holds the back-wall echo (wall thinned by a few smooth corrosion
patches), its repeat, echoes of a few flat laminar reflectors (which shadow the back wall behind them), all as
Gaussian-windowed tone bursts, and white noise. Every chunk is computed from its position and the seed alone, so
a grid of 10 GB never exists in memory: the dask array below builds a chunk only when it is needed.
"""

from __future__ import annotations

import math

import numpy as np

VELOCITY_M_S = 5920.0  # steel, longitudinal; from memory (handbook tables)
FREQ_MHZ = 5.0
DT_US = 0.02
FSH_PER_COUNT = 100.0 / 32767
THICKNESS_MM = 25.0
NOISE_FSH = 1.5
SIGMA_US = 0.15  # burst envelope

# laminar reflectors: (scan fraction, index fraction, radius fraction, depth mm, amplitude %FSH)
REFLECTORS = ((0.25, 0.3, 0.06, 8.0, 70.0), (0.6, 0.7, 0.04, 12.5, 55.0), (0.8, 0.2, 0.08, 17.0, 45.0),
              (0.45, 0.55, 0.03, 21.0, 40.0))
# corrosion patches on the back wall: (scan fraction, index fraction, width fraction, loss mm)
PATCHES = ((0.35, 0.8, 0.07, 4.0), (0.7, 0.4, 0.1, 2.5), (0.15, 0.6, 0.05, 6.0))


def record_length(n_time: int) -> float:
    return n_time * DT_US


def _burst_into(block: np.ndarray, centre_us: np.ndarray, amp_fsh: np.ndarray) -> None:
    """Add a tone burst (in counts) centred at `centre_us` with peak `amp_fsh` to every A-scan of `block`."""
    n_time = block.shape[-1]
    rows, cols = np.nonzero(amp_fsh > 0)
    if rows.size == 0:
        return
    centre = np.broadcast_to(centre_us, amp_fsh.shape)[rows, cols]
    amp = amp_fsh[rows, cols]
    half = int(math.ceil(4 * SIGMA_US / DT_US))
    idx = np.rint(centre / DT_US).astype(np.int64)[:, None] - half + np.arange(2 * half + 1)
    t = idx * DT_US - centre[:, None]
    wave = (amp[:, None] / FSH_PER_COUNT) * np.exp(-0.5 * (t / SIGMA_US) ** 2) * np.cos(2 * np.pi * FREQ_MHZ * t)
    ok = (idx >= 0) & (idx < n_time)
    r = np.broadcast_to(rows[:, None], idx.shape)
    c = np.broadcast_to(cols[:, None], idx.shape)
    block[r[ok], c[ok], idx[ok]] += wave[ok].astype(np.float32)  # no index repeats within one burst


_BANKS: dict[int, np.ndarray] = {}


def _noise_bank(seed: int) -> np.ndarray:
    """4 M samples of Gaussian noise (counts, float32), drawn once per seed."""
    if seed not in _BANKS:
        _BANKS[seed] = np.random.default_rng(seed).normal(0.0, NOISE_FSH / FSH_PER_COUNT, 2**22).astype(np.float32)
    return _BANKS[seed]


def synthetic_block(scan0: int, n_block: int, n_scan: int, n_index: int, n_time: int, seed: int) -> np.ndarray:
    """Scan lines scan0 .. scan0 + n_block - 1 of the grid, int16 counts, shape (n_block, n_index, n_time)."""
    rng = np.random.default_rng([seed, scan0])
    bank = _noise_bank(seed)
    start = rng.integers(0, bank.size - n_time, size=(n_block, n_index))
    windows = np.lib.stride_tricks.sliding_window_view(bank, n_time)
    block = windows[start]  # white noise: a random stretch of the bank per A-scan (a copy)
    s = (scan0 + np.arange(n_block))[:, None] / max(1, n_scan - 1)
    x = np.arange(n_index)[None, :] / max(1, n_index - 1)
    wall = np.full((n_block, n_index), THICKNESS_MM)
    for ps, pi, pw, loss in PATCHES:
        wall -= loss * np.exp(-0.5 * (((s - ps) ** 2 + (x - pi) ** 2) / pw**2))
    bw_amp = np.full(wall.shape, 80.0)
    for rs, ri, rr, depth, amp in REFLECTORS:
        r = np.hypot(s - rs, x - ri) / rr
        cover = np.clip(1.5 - r, 0.0, 1.0)  # fully insonified inside 0.5 radius, none beyond 1.5
        here = amp * cover
        _burst_into(block, np.full(wall.shape, 2 * depth / (VELOCITY_M_S * 1e-3)), here)
        bw_amp *= 1.0 - 0.9 * cover
    t_bw = 2 * wall / (VELOCITY_M_S * 1e-3)
    _burst_into(block, t_bw, bw_amp)
    _burst_into(block, 2 * t_bw, 0.45 * bw_amp)
    np.clip(block, -32768, 32767, out=block)
    return np.rint(block).astype(np.int16)


def synthetic_grid(n_scan: int, n_index: int, n_time: int, *, chunk_scan: int = 8, seed: int = 7730):
    """A dask-backed scan grid of the plate; chunks of `chunk_scan` whole scan lines, built on demand."""
    import dask.array as da

    from ndtmap.grid import make_grid

    chunks = tuple(min(chunk_scan, n_scan - k) for k in range(0, n_scan, chunk_scan))
    starts = np.cumsum((0,) + chunks[:-1])

    def make(block_info=None):
        loc = block_info[None]["array-location"][0]
        return synthetic_block(int(loc[0]), int(loc[1] - loc[0]), n_scan, n_index, n_time, seed)

    data = da.map_blocks(make, chunks=(chunks, (n_index,), (n_time,)), dtype=np.int16,
                         meta=np.empty((0, 0, 0), np.int16))
    del starts
    return make_grid(
        data, scan_mm=np.arange(n_scan) * 1.0, index_mm=np.arange(n_index) * 1.0, time_us=np.arange(n_time) * DT_US,
        velocity_m_s=VELOCITY_M_S, probe_frequency_mhz=FREQ_MHZ, probe_diameter_mm=10.0,
        fsh_per_count=FSH_PER_COUNT,
        attrs={"part_id": "KFP-PL-7730", "material": "steel", "part_thickness_mm": THICKNESS_MM,
               "operator_notes": "synthetic benchmark plate (Kestrel Forge & Plate)"},
    )
