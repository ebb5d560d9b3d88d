"""The gate measurement kernels along the last (time) axis: the numpy reference and the compiled one.

One pass over the gated samples of each A-scan gives four numbers: the highest
sample in the window and its time, the first threshold crossing (linearly
interpolated) and the peak of the echo that crosses. The time of the highest
sample is the vertex of the parabola through it and its neighbours or, for RF
samples given with the taps of a FIR Hilbert transformer (:func:`ndtmap.gates.timing.hilbert_taps`),
the time of the echo on its envelope: the envelope maximum climbed to from the
highest sample, then the centroid of the envelope above
:data:`ndtmap.gates.timing.ENVELOPE_LEVEL` times that maximum (the -6 dB points).
:func:`reference_gate_kernel` is the numpy reference, written for clarity and
checked against exact sub-sample formulas; the default compiled kernel
(:mod:`ndtmap.gates._compiled`, numba) reads the recorded samples (int16
counts or float32) and converts, rectifies and compares each one on the fly,
and is tested against the reference bit for bit. :func:`choose_kernel` picks
one from the ``kernel`` argument or the environment variable
``NDTMAP_KERNEL``.
"""

from __future__ import annotations

import os
from typing import Any

import numpy as np
import xarray as xr

from ndtmap._shared.arrays import is_lazy
from ndtmap._shared.validate import one_of
from ndtmap.errors import ParameterError
from ndtmap.gates.timing import ENVELOPE_LEVEL

__all__ = [
    "GATE_KERNELS",
    "KERNEL_ENV",
    "BLOCK_ELEMENTS",
    "reference_gate_kernel",
    "gate_kernel_blocked",
    "gate_kernel_windows",
    "gate_kernel_compiled",
    "gate_outputs_compiled",
    "threads_for",
    "choose_kernel",
]

#: Implementations of the gate measurement: 'compiled' (numba, the default) and 'numpy' (the reference).
GATE_KERNELS = ("compiled", "numpy")
#: Environment variable that chooses the kernel when the `kernel` argument is not given.
KERNEL_ENV = "NDTMAP_KERNEL"


def _take(x: np.ndarray, k: np.ndarray) -> np.ndarray:
    return np.take_along_axis(x, k[..., None], axis=-1)[..., 0]


def _envelope_at(rf: np.ndarray, j: np.ndarray, taps: np.ndarray) -> np.ndarray:
    """|analytic signal| at sample `j` (one per A-scan) from the FIR Hilbert taps; samples outside the record are 0.

    Summed tap by tap in the order of the compiled kernel, so both give the same bits.
    """
    n = rf.shape[-1]
    hs = np.zeros(j.shape)
    for i in range(taps.size):
        m = 2 * i + 1
        a = np.where(j - m >= 0, _take(rf, np.clip(j - m, 0, n - 1)), 0.0)
        b = np.where(j + m < n, _take(rf, np.clip(j + m, 0, n - 1)), 0.0)
        hs = hs + taps[i] * (a - b)
    v = _take(rf, np.clip(j, 0, n - 1))
    return np.sqrt(v * v + hs * hs)


def _envelope_centre(rf: np.ndarray, k: np.ndarray, lo: np.ndarray, hi: np.ndarray,
                     taps: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The echo's time on the envelope as sample and offset: the envelope maximum climbed to from `k` within
    [lo, hi] (at most ``taps.size`` steps), then the centroid of ``E - ENVELOPE_LEVEL E_max`` where positive
    around it, within ``taps.size`` samples (same steps and order of sums as the compiled kernel)."""
    reach = taps.size
    p = np.asarray(k, dtype=np.int64).copy()
    ep = _envelope_at(rf, p, taps)
    with np.errstate(invalid="ignore"):
        up = (p + 1 <= hi) & (_envelope_at(rf, p + 1, taps) > ep)
        down = ~up & (p - 1 >= lo) & (_envelope_at(rf, p - 1, taps) > ep)
    step = np.where(up, 1, np.where(down, -1, 0))
    active = step != 0
    for _ in range(reach):
        if not active.any():
            break
        q = p + step
        eq = _envelope_at(rf, q, taps)
        with np.errstate(invalid="ignore"):
            move = active & (q >= lo) & (q <= hi) & (eq > ep)
        p = np.where(move, q, p)
        ep = np.where(move, eq, ep)
        active = move
    with np.errstate(invalid="ignore"):  # an infinite sample (a missing A-scan) gives inf - inf here
        level = ENVELOPE_LEVEL * ep
        den = ep - level
    num = np.zeros(p.shape)
    for side in (-1, 1):
        active = np.ones(p.shape, dtype=bool)
        for d in range(1, reach + 1):
            q = p + side * d
            active &= (q >= lo) & (q <= hi)
            if not active.any():
                break
            with np.errstate(invalid="ignore"):
                w = _envelope_at(rf, q, taps) - level
                active &= w > 0.0
            num = np.where(active, num + float(side * d) * w, num)
            den = np.where(active, den + w, den)
    with np.errstate(invalid="ignore", divide="ignore"):
        ok = den > 0.0
        delta = np.where(ok, num / np.where(ok, den, 1.0), 0.0)
    return p, delta


def reference_gate_kernel(
    samples: np.ndarray,
    t0_us: float,
    dt_us: float,
    threshold: float,
    hold: int,
    i_start: np.ndarray | None = None,
    i_end: np.ndarray | None = None,
    *,
    rectify: bool = False,
    hilbert_taps: np.ndarray | None = None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """All measurements of one gate in one pass over the window, along the last axis.

    Parameters
    ----------
    samples : ndarray (..., n)
        Detection signal (>= 0), %FSH; sample ``j`` is at ``t0_us + j dt_us``.
        With `rectify`: the RF samples (signed), whose ``abs`` is the
        detection signal.
    t0_us, dt_us : float
        Time of the first sample and the sampling interval.
    threshold : float
        Threshold in %FSH.
    hold : int
        Samples the signal must stay below the threshold to end an echo.
    i_start, i_end : ndarray (...), optional
        Inclusive window per A-scan as sample numbers (float, NaN: no
        window); default the whole last axis.
    rectify : bool, default False
        `samples` are RF: the detection signal is their absolute value.
    hilbert_taps : ndarray, optional
        With `rectify`: the odd taps of the FIR Hilbert transformer
        (:func:`ndtmap.gates.timing.hilbert_taps`). The peak time is then the maximum of the
        envelope, climbed to from the highest rectified sample within the
        window (at most ``len(hilbert_taps)`` samples away), and the
        centroid of the envelope above :data:`ndtmap.gates.timing.ENVELOPE_LEVEL`
        times that maximum (within ``len(hilbert_taps)`` samples of it);
        not the vertex of the highest rectified crest. Only where the peak
        reaches `threshold` (elsewhere the crest vertex, as without taps).
        The samples outside the window (up to ``2 len(hilbert_taps) - 1``
        of them) feed the filter; samples beyond `samples` count as 0.

    Returns
    -------
    peak, peak_time, cross_time, cross_peak : ndarray (...)
        Highest value in the window, its parabola-vertex time (or the
        envelope's, with `hilbert_taps`), the first
        threshold crossing time (NaN if none) and the highest value of the
        crossing echo (NaN if none). All NaN where the window is invalid or
        holds a NaN sample.
    """
    x = np.asarray(samples, dtype=np.float64)
    rf = x if rectify else None
    if rectify:
        x = np.abs(x)
    lead, n = x.shape[:-1], x.shape[-1]
    if n == 0 or x.size == 0:
        empty = np.full(lead, np.nan)
        return empty, empty.copy(), empty.copy(), empty.copy()
    if i_start is None or i_end is None:
        lo = np.zeros(lead, dtype=np.int64)
        hi = np.full(lead, n - 1, dtype=np.int64)
        valid = np.ones(lead, dtype=bool)
    else:
        s = np.broadcast_to(np.asarray(i_start, dtype=np.float64), lead)
        e = np.broadcast_to(np.asarray(i_end, dtype=np.float64), lead)
        with np.errstate(invalid="ignore"):
            valid = np.isfinite(s) & np.isfinite(e) & (s <= e) & (s >= 0) & (e <= n - 1)
        lo = np.where(valid, s, 0).astype(np.int64)
        hi = np.where(valid, e, n - 1).astype(np.int64)
    j = np.arange(n)
    inwin = (j >= lo[..., None]) & (j <= hi[..., None])
    nan = np.isnan(x)
    valid &= ~(nan & inwin).any(axis=-1)
    xw = np.where(inwin & ~nan, x, -np.inf)

    # highest peak, vertex of the parabola through three samples
    k = np.argmax(xw, axis=-1)
    peak = _take(xw, k)
    y0 = _take(x, np.clip(k - 1, 0, n - 1))
    y2 = _take(x, np.clip(k + 1, 0, n - 1))
    denom = y0 - 2.0 * peak + y2
    with np.errstate(invalid="ignore", divide="ignore"):
        ok = (k - 1 >= lo) & (k + 1 <= hi) & (denom < 0)
        delta = np.where(ok, 0.5 * (y0 - y2) / np.where(ok, denom, -1.0), 0.0)
    delta = np.clip(delta, -0.5, 0.5)
    if rf is not None and hilbert_taps is not None and len(hilbert_taps) > 0:
        with np.errstate(invalid="ignore"):
            echo = peak >= threshold  # only a detected echo is timed on its envelope
        if echo.any():
            p, d = _envelope_centre(rf, k, lo, hi, np.asarray(hilbert_taps, dtype=np.float64))
            k, delta = np.where(echo, p, k), np.where(echo, d, delta)
    peak_time = t0_us + (k + delta) * dt_us

    # first crossing, linear interpolation between the bracketing samples
    above = xw >= threshold
    has = above.any(axis=-1)
    c = np.argmax(above, axis=-1)
    yc = _take(x, c)
    yp = _take(x, np.clip(c - 1, 0, n - 1))
    at_open = c <= lo
    with np.errstate(invalid="ignore", divide="ignore"):
        frac = np.where(at_open, 1.0, (threshold - yp) / np.where(at_open, 1.0, yc - yp))
    cross_time = t0_us + (c - 1 + np.clip(frac, 0.0, 1.0)) * dt_us

    # peak of the crossing echo: from the crossing to `hold` samples below threshold (or the window end)
    below = inwin & ~above
    cum = np.concatenate([np.zeros((*lead, 1), dtype=np.int64), np.cumsum(below, axis=-1)], axis=-1)
    h = int(max(1, hold))
    run = np.zeros(x.shape, dtype=bool)
    if h <= n:
        run[..., : n - h + 1] = (cum[..., h:] - cum[..., : n - h + 1]) == h
    ends = run & (j > c[..., None])
    end = np.where(ends.any(axis=-1), np.argmax(ends, axis=-1), n)
    echo = (j >= c[..., None]) & (j < end[..., None]) & inwin
    cross_peak = np.max(np.where(echo & ~nan, x, -np.inf), axis=-1)

    cross_ok = valid & has
    return (
        np.where(valid, peak, np.nan),
        np.where(valid, peak_time, np.nan),
        np.where(cross_ok, cross_time, np.nan),
        np.where(cross_ok, cross_peak, np.nan),
    )


BLOCK_ELEMENTS = 2_000_000  # samples per call of the kernel: bounds the size of its temporaries


def gate_kernel_blocked(samples: np.ndarray, i_start: np.ndarray | None = None, i_end: np.ndarray | None = None,
                         **kwargs: Any) -> tuple[np.ndarray, ...]:
    """Run :func:`reference_gate_kernel` over slabs of A-scans so that its temporaries stay small."""
    x = np.asarray(samples)
    lead = x.shape[:-1]
    n_traces = int(np.prod(lead)) if lead else 1
    per = max(1, BLOCK_ELEMENTS // max(1, x.shape[-1]))
    if n_traces <= per:
        return reference_gate_kernel(x, i_start=i_start, i_end=i_end, **kwargs)
    flat = x.reshape(n_traces, x.shape[-1])
    s = None if i_start is None else np.broadcast_to(np.asarray(i_start, dtype=np.float64), lead).reshape(-1)
    e = None if i_end is None else np.broadcast_to(np.asarray(i_end, dtype=np.float64), lead).reshape(-1)
    outs = [np.empty(n_traces) for _ in range(4)]
    for k in range(0, n_traces, per):
        part = slice(k, k + per)
        res = reference_gate_kernel(flat[part], i_start=None if s is None else s[part],
                                    i_end=None if e is None else e[part], **kwargs)
        for o, r in zip(outs, res, strict=True):
            o[part] = r
    return tuple(o.reshape(lead) for o in outs)


def gate_kernel_windows(samples: np.ndarray, i_start: np.ndarray, i_end: np.ndarray, **kwargs: Any) -> Any:
    return gate_kernel_blocked(samples, i_start=i_start, i_end=i_end, **kwargs)


def gate_kernel_compiled(samples: np.ndarray, i_start: Any = None, i_end: Any = None, **kwargs: Any) -> Any:
    """The compiled kernel (:func:`ndtmap.gates._compiled.gate_kernel`) on the recorded samples of a block.

    `i_start`/`i_end` come either per A-scan (arrays, following gates) or as
    the keyword arguments ``start``/``end`` (fixed gates).
    """
    from ndtmap.gates import _compiled as _fastgate

    start = kwargs.pop("start", None)
    end = kwargs.pop("end", None)
    return _fastgate.gate_kernel(samples, start if i_start is None else i_start, end if i_end is None else i_end,
                                 **kwargs)


def _gate_kernel_stacked(samples: np.ndarray, *windows: np.ndarray, **kwargs: Any) -> np.ndarray:
    """:func:`gate_kernel_compiled` on one dask block, the four outputs stacked on a last axis of length 4."""
    if windows:
        kwargs = dict(kwargs, i_start=windows[0][..., 0], i_end=windows[1][..., 0])
    return np.stack(gate_kernel_compiled(samples, **kwargs), axis=-1)


def gate_outputs_compiled(samples: Any, i_start: Any = None, i_end: Any = None, **kwargs: Any) -> Any:
    """The four outputs for numpy or dask arrays (``apply_ufunc(..., dask='allowed')``).

    A dask array is mapped block by block with the time axis kept (its blocks
    give a last axis of 4 outputs), not contracted: a contracted core axis
    makes dask copy every block once more before the kernel sees it.
    """
    if not hasattr(samples, "dask"):
        return gate_kernel_compiled(samples, i_start, i_end, **kwargs)
    import dask.array as da

    extra = [] if i_start is None else [da.asarray(i_start)[..., None], da.asarray(i_end)[..., None]]
    stacked = da.map_blocks(_gate_kernel_stacked, samples, *extra, dtype=np.float64,
                            chunks=(*samples.chunks[:-1], (4,)), meta=np.empty((0,) * samples.ndim), **kwargs)
    return tuple(stacked[..., k] for k in range(4))


def threads_for(data: xr.DataArray) -> int:
    """Threads for the compiled kernel: the usable cores for an in-memory grid, 1 in dask tasks (parallel already)."""
    if is_lazy(data):
        return 1
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):  # pragma: no cover - not Linux
        return max(1, os.cpu_count() or 1)


def choose_kernel(kernel: str | None) -> str:
    """'compiled' or 'numpy': the argument, else the environment variable NDTMAP_KERNEL, else 'compiled'."""
    from ndtmap.gates import (
        _compiled as _fastgate,  # imports numba (about half a second), so only when a gate is evaluated
    )

    if kernel is None:
        env = os.environ.get(KERNEL_ENV, "").strip().lower()
        if env and env not in GATE_KERNELS:
            raise ParameterError(
                f"the environment variable {KERNEL_ENV} must be one of {', '.join(GATE_KERNELS)} or unset, "
                f"got {env!r}"
            )
        choice = env or "compiled"
        return choice if (choice == "numpy" or _fastgate.HAVE_NUMBA) else "numpy"
    choice = one_of("kernel", kernel, GATE_KERNELS)
    if choice == "compiled" and not _fastgate.HAVE_NUMBA:  # pragma: no cover - numba is a dependency
        raise ParameterError("`kernel`='compiled' needs numba, which cannot be imported; use kernel='numpy'")
    return choice
