"""What the acquisition adds to the echoes: noise, rectification, clipping, drop-outs, sample type.

* grain (structural) noise: white noise smoothed over about a beam width
  across the scan and index axes, filtered by the pulse in time, decaying
  with attenuation and present only between the front surface and the back
  wall;
* electronic noise: white noise filtered by the pulse (the probe's band);
* encoder drop-outs: short runs of A-scans lost along the scan axis;
* the digitiser: full-wave rectification if asked, clipping at the full
  scale, and float32 samples (drop-outs as NaN) or int16 counts (drop-outs
  listed in a ``missing`` variable by the caller).

All random draws come from one generator seeded by the caller, in a fixed
order (grain noise, electronic noise, drop-outs): same seed, same grid.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import ndimage, signal

from ndtmap.physics import beam
from ndtmap.simulate.model import _Model, _water_delay
from ndtmap.simulate.pulse import _centred_times, tone_burst
from ndtmap.simulate.scenario import Noise, Part, ScanPlan


def _acquired(
    rf: np.ndarray,
    model: _Model,
    plan: ScanPlan,
    noise: Noise,
    *,
    seed: int,
    signal_kind: str,
    full_scale_fsh: float,
) -> tuple[np.ndarray, np.ndarray]:
    """Add noise to the noise-free A-scans `rf` (%FSH, changed in place), rectify and clip them.

    Returns the recorded A-scans and the drop-out mask ``(scan, index)``.
    """
    scan = np.asarray(plan.scan_mm)
    index = np.asarray(plan.index_mm)
    time = plan.time_us()
    rng = np.random.default_rng(seed)
    if noise.grain_fsh > 0:
        rf += _grain_noise(rng, model, plan, model.part, scan, index, time, noise.grain_fsh)
    if noise.electronic_fsh > 0:
        rf += _band_noise(rng, model, rf.shape, time) * noise.electronic_fsh
    if signal_kind == "rectified":
        rf = np.abs(rf)
    rf = np.clip(rf, -full_scale_fsh, full_scale_fsh)
    dropout = _dropouts(rng, scan.size, index.size, noise.dropout_fraction)
    return rf, dropout


def _digitised(
    rf: np.ndarray, dropout: np.ndarray, dtype: str, full_scale_fsh: float
) -> tuple[np.ndarray, float | None]:
    """Samples of the given `dtype` and their ``fsh_per_count`` (None for float32, where drop-outs are NaN)."""
    if dtype == "int16":
        fsh_per_count = full_scale_fsh / 32767.0
        return np.round(rf / fsh_per_count).astype(np.int16), fsh_per_count
    data = rf.astype(np.float32)
    data[dropout] = np.nan
    return data, None


def _grain_noise(rng, model: _Model, plan: ScanPlan, part: Part, scan, index, time, level: float) -> np.ndarray:
    """Grain noise of RMS `level` %FSH just below the surface, ``(scan, index, time)``."""
    n_scan, n_index, n_time = scan.size, index.size, time.size
    mid = 0.5 * part.thickness_mm
    width = float(
        beam.beam_width_mm(mid, model.probe.diameter_mm, model.probe.frequency_mhz, model.material.velocity_m_s)
    )
    sigma_mm = width / 2.3548
    ds_scan = float(np.median(np.diff(scan))) if n_scan > 1 else 1.0
    ds_index = float(np.median(np.diff(index))) if n_index > 1 else 1.0
    sig = (sigma_mm / ds_scan, sigma_mm / ds_index)
    # draw the noise on a grid padded by 4 sigma and crop, so the edges are as noisy as the middle
    pad = [int(math.ceil(4 * s)) for s in sig]
    white = rng.standard_normal((n_scan + 2 * pad[0], n_index + 2 * pad[1], n_time))
    white = ndimage.gaussian_filter(white, (sig[0], sig[1], 0.0), mode="wrap")
    white = white[pad[0] : pad[0] + n_scan, pad[1] : pad[1] + n_index]
    dt = 1.0 / plan.sampling_mhz
    t = _centred_times(model.pad, dt)
    pulse = tone_burst(t, model.probe.frequency_mhz, model.probe.bandwidth)
    colored = signal.fftconvolve(white, pulse[None, None, :], mode="same", axes=2)
    colored /= max(float(colored.std()), 1e-12)
    delay = np.zeros((n_scan, n_index))
    if part.water_path_mm is not None:
        delay = _water_delay(model, scan)[:, None] * np.ones((1, n_index))
    depth = 0.5 * model.c_mm_us * (time[None, None, :] - delay[:, :, None])
    thickness = part.thickness_at(scan[:, None], index[None, :])[:, :, None]
    inside = (depth > 0) & (depth < thickness)
    decay = 10.0 ** (-2.0 * model.alpha * np.clip(depth, 0, None) / 20.0)
    return level * colored * decay * inside


def _band_noise(rng, model: _Model, shape, time) -> np.ndarray:
    """White noise filtered by the pulse (the probe's band), unit RMS."""
    white = rng.standard_normal(shape)
    dt = float(time[1] - time[0]) if time.size > 1 else 0.02
    t = _centred_times(model.pad, dt)
    pulse = tone_burst(t, model.probe.frequency_mhz, model.probe.bandwidth)
    out = signal.fftconvolve(white, pulse[None, None, :], mode="same", axes=2)
    return out / max(float(out.std()), 1e-12)


def _dropouts(rng, n_scan: int, n_index: int, fraction: float) -> np.ndarray:
    """Mask ``(scan, index)`` of A-scans lost in runs of 1 to 5 along scan, about `fraction` of them."""
    mask = np.zeros((n_scan, n_index), dtype=bool)
    if fraction <= 0:
        return mask
    target = int(round(fraction * n_scan * n_index))
    while mask.sum() < target:
        j = rng.integers(n_index)
        i = rng.integers(n_scan)
        run = int(rng.integers(1, 6))
        mask[i : i + run, j] = True
    return mask
