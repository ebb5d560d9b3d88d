"""Signal conditioning of A-scans: rectification, envelope, filters, smoothing, DAC, TCG and decibels.

Every function that takes a scan grid returns a new grid (float32 %FSH,
integer data converted through :func:`ndtmap.grid.schema.ascan_in_fsh` first, so
``abs`` of the int16 value -32768 cannot overflow), appends a provenance
step and leaves its input alone. Kernels work along ``time``; on a
dask-backed grid the result stays lazy (chunks are made to hold whole
A-scans where a kernel needs them). Missing A-scans (NaN) stay NaN.

Distance-amplitude correction
-----------------------------
A DAC curve (:func:`dac_curve`) is recorded from the echoes of equal
reference reflectors at several depths. Between the recorded depths it is
interpolated linearly in dB against depth (log-linear in amplitude: an
exponential fall between two points, which is what attenuation and beam
spread give over short spans). Outside the recorded depths the curve
follows its rule ``outside`` (:data:`DAC_OUTSIDE_RULES`):

* ``'refuse'`` (the default of :func:`dac_curve`): the level is NaN and so
  is every dB value read from it, because an extrapolated reference level is
  a guess; a gate evaluated re the DAC refuses a window that leaves the
  recorded range;
* ``'extrapolate'`` (``extrapolate=True``): the end segments continued in dB;
* ``'conservative'`` (the default of :meth:`DacCurve.from_csv` and of the
  command line): the *lower* of the end level held and the end segment
  continued in dB, so the recording level is never raised above what a
  reference reflector showed (detection errs towards recording more, the
  amplitude re DAC towards reading higher).

A table is read from CSV by :meth:`DacCurve.from_csv` (header
``depth_mm,amplitude_fsh``). :func:`apply_tcg` must give every sample a gain,
so outside the recorded range it holds the gain of the nearest end point
(or follows the curve's rule when that is not 'refuse'), and says so in the
result's attributes.

Clipping
--------
The digitiser clips at ``digitiser_full_scale_fsh`` (grid attribute,
default 100 %FSH). :func:`apply_tcg` scales samples after digitising, so
an amplified sample above the full scale is not clipped and an attenuated
clipped one stays clipped: it adds the boolean variable ``clipped`` (scan,
index, time), True where the recorded sample reached the full scale
(:func:`clipped_samples`), carried through later steps; gates read it.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr
from scipy import ndimage
from scipy import signal as sps

from ndtmap._shared.arrays import whole_time
from ndtmap._shared.validate import one_of, positive_float, positive_int
from ndtmap.errors import CalibrationError, NdtmapError, ParameterError, ParameterTypeError
from ndtmap.grid.geometry import part_constants
from ndtmap.grid.provenance import with_step
from ndtmap.grid.schema import ascan_in_fsh, check_grid, replace_ascan

__all__ = [
    "DETECTIONS",
    "rectify",
    "envelope",
    "bandpass",
    "smooth",
    "detected_signal",
    "DAC_OUTSIDE_RULES",
    "DacCurve",
    "dac_curve",
    "clipped_samples",
    "full_scale_fsh",
    "detected_re_curve",
    "apply_tcg",
    "db_re",
    "db_re_dac",
]

#: How a gate, map or section turns the A-scan into a detection signal.
DETECTIONS = ("rectified", "envelope", "none")
#: What a DAC gives outside its recorded depths (see the module notes).
DAC_OUTSIDE_RULES = ("refuse", "extrapolate", "conservative")
#: A sample within this fraction below the digitiser full scale counts as clipped.
CLIP_RTOL = 1e-3


# --------------------------------------------------------------------------- kernels (numpy, along the last axis)


_ENVELOPE_BLOCK_BYTES = 4 * 2**20  # float64 samples per FFT block: a few MiB, whatever the size of the grid


def _envelope_kernel(x: np.ndarray, missing: np.ndarray | None = None, *, scale: float | None = None) -> np.ndarray:
    """|analytic signal| along the last axis, float32, computed over blocks of A-scans.

    The analytic signal is ``a + i H[a]`` as :func:`scipy.signal.hilbert`
    defines it (one-sided spectrum: DC and, for an even length, the Nyquist
    bin once, positive frequencies twice). Its imaginary part, the Hilbert
    transform, is ``irfft(-i sgn(f) rfft(a))`` with sgn 0 at DC and Nyquist,
    so the envelope ``sqrt(a^2 + H[a]^2)`` needs one real FFT and one
    inverse real FFT of each block, in float64, and no complex copy of more
    than one block. Integer counts are converted as
    :func:`ndtmap.grid.schema.ascan_in_fsh` does (float32 counts times the float32
    `scale`); A-scans flagged in `missing` (shape ``x.shape[:-1]``) are NaN.
    """
    from scipy import fft as sp_fft

    x = np.asarray(x)
    n = x.shape[-1]
    out = np.empty(x.shape, dtype=np.float32)
    if n == 0 or x.size == 0:
        return out
    rows = x.reshape(-1, n)
    flat = out.reshape(-1, n)
    gone = None if missing is None else np.broadcast_to(np.asarray(missing, dtype=bool), x.shape[:-1]).reshape(-1)
    sign = np.ones(n // 2 + 1)
    sign[0] = 0.0
    if n % 2 == 0:
        sign[-1] = 0.0
    turn = -1j * sign  # -i sgn(f) on the one-sided spectrum
    per = max(1, _ENVELOPE_BLOCK_BYTES // (8 * n))
    s32 = None if scale is None else np.float32(scale)
    for r0 in range(0, rows.shape[0], per):
        block = rows[r0:r0 + per]
        if s32 is not None:
            a = block.astype(np.float32) * s32
        else:
            a = block.astype(np.float32, copy=False)
        a = a.astype(np.float64)
        nonfinite = ~np.isfinite(a).all(axis=-1)  # a missing A-scan (NaN or infinite sample): NaN, quietly
        a[nonfinite] = 0.0
        spectrum = sp_fft.rfft(a, axis=-1)
        spectrum *= turn
        h = sp_fft.irfft(spectrum, n=n, axis=-1)
        np.multiply(a, a, out=a)
        np.multiply(h, h, out=h)
        a += h
        np.sqrt(a, out=a)
        a[nonfinite] = np.nan
        if gone is not None:
            a[gone[r0:r0 + per]] = np.nan
        flat[r0:r0 + per] = a
    return out


def _envelope_of_grid(grid: xr.Dataset) -> xr.DataArray:
    """The envelope of every A-scan of an RF grid as float32 %FSH, from the recorded samples block by block."""
    a = whole_time(grid["ascan"])
    scale = float(a.attrs.get("fsh_per_count", 1.0)) if np.issubdtype(a.dtype, np.integer) else None
    if "missing" in grid.data_vars:
        out = xr.apply_ufunc(
            _envelope_kernel, a, grid["missing"].astype(bool), input_core_dims=[["time"], []],
            output_core_dims=[["time"]], kwargs={"scale": scale}, dask="parallelized", output_dtypes=[np.float32],
        )
    else:
        out = xr.apply_ufunc(
            _envelope_kernel, a, input_core_dims=[["time"]], output_core_dims=[["time"]], kwargs={"scale": scale},
            dask="parallelized", output_dtypes=[np.float32],
        )
    out = out.transpose(*a.dims)
    out.attrs = {k: v for k, v in a.attrs.items() if k != "fsh_per_count"}
    out.attrs["units"] = "%FSH"
    return out


def _sosfiltfilt_kernel(x: np.ndarray, sos: np.ndarray) -> np.ndarray:
    if x.shape[-1] == 0:
        return x.astype(np.float32)
    return sps.sosfiltfilt(sos, np.asarray(x, dtype=np.float64), axis=-1).astype(np.float32)


def _smooth_kernel(x: np.ndarray, kind: str, size: float) -> np.ndarray:
    x = np.asarray(x, dtype=np.float64)
    if x.shape[-1] == 0:
        return x.astype(np.float32)
    if kind == "gaussian":
        out = ndimage.gaussian_filter1d(x, sigma=size, axis=-1, mode="nearest")
    else:
        out = ndimage.uniform_filter1d(x, size=int(size), axis=-1, mode="nearest")
    return out.astype(np.float32)


def _map_time(da: xr.DataArray, func: Any, **kwargs: Any) -> xr.DataArray:
    """Apply a time-preserving kernel to every A-scan, lazily on dask."""
    da = whole_time(da)
    out = xr.apply_ufunc(
        func, da, input_core_dims=[["time"]], output_core_dims=[["time"]], kwargs=kwargs,
        dask="parallelized", output_dtypes=[np.float32],
    )
    return out.transpose(*da.dims)


def _signal_kind(grid: xr.Dataset) -> str:
    return str(grid["ascan"].attrs.get("signal", "rf"))


# --------------------------------------------------------------------------- public grid functions


def rectify(grid: xr.Dataset, *, mode: str = "full", polarity: str = "positive") -> xr.Dataset:
    """Full-wave or half-wave rectification of the A-scans.

    Parameters
    ----------
    grid : xarray.Dataset
        A scan grid (rf or already rectified).
    mode : {'full', 'half'}, default 'full'
        'full': ``|a|``; 'half': only one polarity is kept, the other set to 0.
    polarity : {'positive', 'negative'}, default 'positive'
        For half-wave: which half-waves are kept ('negative' keeps ``-a``
        where ``a < 0``, so the result is never negative).

    Returns
    -------
    xarray.Dataset
        The grid with ``ascan`` float32 %FSH and ``signal='rectified'``.

    Examples
    --------
    >>> from ndtmap.grid.examples import example_grid
    >>> g = rectify(example_grid())
    >>> g.ascan.attrs["signal"], bool(g.ascan.min() >= 0)
    ('rectified', True)
    """
    grid = check_grid(grid)
    one_of("mode", mode, ("full", "half"))
    one_of("polarity", polarity, ("positive", "negative"))
    a = ascan_in_fsh(grid)
    if mode == "full":
        out = abs(a)
    else:
        out = a.clip(min=0) if polarity == "positive" else (-a).clip(min=0)
    res = replace_ascan(grid, out, signal="rectified", detection=f"{mode}-wave rectified")
    return with_step(res, "rectify", {"mode": mode, "polarity": polarity}, source=grid)


def envelope(grid: xr.Dataset) -> xr.Dataset:
    """Envelope of RF A-scans: the modulus of the analytic signal.

    ``|a + i H[a]|`` with ``H`` the Hilbert transform along ``time``
    (as :func:`scipy.signal.hilbert` defines it, computed with the FFT over
    the whole A-scan, so echoes very close to the ends of the record see the
    periodic continuation). The grid is processed in blocks of A-scans (a
    few MiB at a time, also in memory), so no complex copy of the grid is
    ever made; on a dask grid chunk by chunk.

    Parameters
    ----------
    grid : xarray.Dataset
        An RF scan grid (``signal='rf'``).

    Returns
    -------
    xarray.Dataset
        The grid with the envelope as ``ascan`` (``signal='rectified'``,
        ``detection='envelope'``).

    Raises
    ------
    ParameterError
        The grid is already rectified (the phase needed is lost).

    Examples
    --------
    >>> from ndtmap.grid.examples import example_grid
    >>> env = envelope(example_grid((4.0,), (50.0,)))
    >>> round(float(env.ascan.max()), 1)
    50.0
    """
    grid = check_grid(grid)
    if _signal_kind(grid) != "rf":
        raise ParameterError(
            "`grid` holds rectified A-scans (signal='rectified'); the envelope needs RF data. "
            "Use the rectified signal as it is"
        )
    out = _envelope_of_grid(grid)
    res = replace_ascan(grid, out, signal="rectified", detection="envelope")
    return with_step(res, "envelope", {"method": "hilbert"}, source=grid)


def bandpass(
    grid: xr.Dataset, low_mhz: float | None = None, high_mhz: float | None = None, *, order: int = 4
) -> xr.Dataset:
    """Zero-phase Butterworth band-pass (or low-pass / high-pass) filter along ``time``.

    The filter is designed with ``scipy.signal.butter(order, ..., output='sos')``
    and run forwards and backwards (``sosfiltfilt``): no time shift, the
    amplitude response squared (so the -3 dB points of the design are -6 dB
    points of the result).

    Parameters
    ----------
    grid : xarray.Dataset
        A scan grid. Rectified grids take only a low-pass (a high-pass
        would make them bipolar).
    low_mhz, high_mhz : float, optional
        Lower and upper corner frequencies in MHz. Only `low_mhz`: high-pass;
        only `high_mhz`: low-pass; both: band-pass. Must lie below the
        Nyquist frequency ``1 / (2 dt)``.
    order : int, default 4
        Order of the Butterworth design (per pass).

    Returns
    -------
    xarray.Dataset
        The filtered grid (float32 %FSH).

    Raises
    ------
    ParameterError
        Corner frequencies missing, out of order or above Nyquist; A-scans
        too short for the filter's padding.

    Examples
    --------
    >>> from ndtmap.grid.examples import example_grid
    >>> g = bandpass(example_grid(), 2.0, 8.0)
    >>> int(g.ascan.isel(scan=0, index=0).argmax("time"))  # the echo stays at 4 us (sample 200)
    200
    """
    grid = check_grid(grid)
    order = positive_int("order", order)
    pc = part_constants(grid)
    fs = 1.0 / pc.dt_us
    nyq = fs / 2.0
    lo = None if low_mhz is None else positive_float("low_mhz", low_mhz)
    hi = None if high_mhz is None else positive_float("high_mhz", high_mhz)
    for name, value in (("low_mhz", lo), ("high_mhz", hi)):
        if value is not None and value >= nyq:
            raise ParameterError(
                f"`{name}` must be below the Nyquist frequency {nyq:g} MHz of this grid (sampled every "
                f"{pc.dt_us:g} us), got {value:g}"
            )
    if lo is None and hi is None:
        raise ParameterError("give `low_mhz`, `high_mhz` or both; got neither")
    if lo is not None and hi is not None:
        if not lo < hi:
            raise ParameterError(f"`low_mhz` must be smaller than `high_mhz`, got {lo:g} and {hi:g}")
        btype, wn = "bandpass", [lo, hi]
    elif lo is not None:
        btype, wn = "highpass", lo
    else:
        btype, wn = "lowpass", hi
    if _signal_kind(grid) == "rectified" and btype != "lowpass":
        raise ParameterError(
            f"`grid` is rectified; a {btype} filter would make it bipolar. Filter the RF data, or give only `high_mhz`"
        )
    sos = sps.butter(order, wn, btype=btype, fs=fs, output="sos")
    padlen = 3 * (2 * len(sos) + 1 - min(int((sos[:, 2] == 0).sum()), int((sos[:, 5] == 0).sum())))
    n = grid.sizes["time"]
    if n <= padlen:
        raise ParameterError(
            f"`grid` has {n} time samples; a {btype} filter of `order` {order} needs more than {padlen}. "
            "Lower the order or record longer A-scans"
        )
    out = _map_time(ascan_in_fsh(grid), _sosfiltfilt_kernel, sos=sos)
    res = replace_ascan(grid, out, filter=f"butterworth {btype} order {order}, zero phase")
    params = {"low_mhz": lo, "high_mhz": hi, "order": order, "btype": btype, "zero_phase": True}
    return with_step(res, "bandpass", params, source=grid)


def smooth(grid: xr.Dataset, width_us: float, *, kind: str = "gaussian") -> xr.Dataset:
    """Smooth the A-scans along ``time``.

    Parameters
    ----------
    grid : xarray.Dataset
        A scan grid.
    width_us : float
        Width of the smoothing in us. 'gaussian': full width at half maximum
        of the Gaussian kernel (sigma = width / 2.3548). 'moving-average':
        length of the boxcar, rounded to an odd number of samples (at least 1).
    kind : {'gaussian', 'moving-average'}, default 'gaussian'
        The kernel. Both are symmetric, so echoes keep their times.

    Returns
    -------
    xarray.Dataset
        The smoothed grid (float32 %FSH); record ends are padded by repeating
        the end samples.

    Examples
    --------
    >>> from ndtmap.grid.examples import example_grid
    >>> g = smooth(rectify(example_grid()), 0.1)
    >>> g.ascan.attrs["smoothing"]
    'gaussian, FWHM 0.1 us'
    """
    grid = check_grid(grid)
    width = positive_float("width_us", width_us)
    one_of("kind", kind, ("gaussian", "moving-average"))
    dt = part_constants(grid).dt_us
    if kind == "gaussian":
        size = width / dt / (2.0 * math.sqrt(2.0 * math.log(2.0)))
        label = f"gaussian, FWHM {width:g} us"
    else:
        n = max(1, int(round(width / dt)))
        size = n if n % 2 == 1 else n + 1
        label = f"moving average over {size} samples ({size * dt:g} us)"
    out = _map_time(ascan_in_fsh(grid), _smooth_kernel, kind=kind, size=size)
    res = replace_ascan(grid, out, smoothing=label)
    return with_step(res, "smooth", {"width_us": width, "kind": kind, "samples": size}, source=grid)


def detected_signal(grid: xr.Dataset, detect: str = "rectified") -> xr.DataArray:
    """The A-scans as a detection signal in float32 %FSH (``scan, index, time``).

    Parameters
    ----------
    grid : xarray.Dataset
        A scan grid.
    detect : {'rectified', 'envelope', 'none'}, default 'rectified'
        'rectified': ``|a|`` for RF grids, the data as recorded for rectified
        ones; 'envelope': the Hilbert envelope (RF grids only); 'none': the
        signal as recorded (signed for RF).

    Returns
    -------
    xarray.DataArray
        Lazy on dask-backed grids; NaN where A-scans are missing.

    Examples
    --------
    >>> from ndtmap.grid.examples import example_grid
    >>> float(detected_signal(example_grid(), "rectified").min()) >= 0
    True
    """
    one_of("detect", detect, DETECTIONS)
    kind = _signal_kind(grid)
    if detect == "none":
        out = ascan_in_fsh(grid)
    elif detect == "rectified":
        a = ascan_in_fsh(grid)
        out = abs(a) if kind == "rf" else a
    else:
        if kind != "rf":
            raise ParameterError(
                "`detect`='envelope' needs RF A-scans but the grid is rectified; use detect='rectified'"
            )
        out = _envelope_of_grid(grid)
    out = out.astype(np.float32, copy=False)
    out.attrs = {"units": "%FSH", "long_name": f"A-scan amplitude ({detect})"}
    return out


# --------------------------------------------------------------------------- decibels and DAC


def _db_kernel(amplitude: np.ndarray, reference: np.ndarray) -> np.ndarray:
    with np.errstate(divide="ignore", invalid="ignore"):
        return 20.0 * np.log10(np.asarray(amplitude, dtype=np.float64) / np.asarray(reference, dtype=np.float64))


def db_re(amplitude_fsh: Any, reference_fsh: Any) -> Any:
    """Amplitude in dB relative to a reference: ``20 log10(A / A_ref)``.

    Parameters
    ----------
    amplitude_fsh : float, array_like or xarray.DataArray
        Echo amplitudes in %FSH (peak of the rectified signal, >= 0). Zero
        gives -inf, negative values and NaN give NaN.
    reference_fsh : float, array_like or xarray.DataArray
        Reference level(s) in %FSH (> 0): a fixed level, a DAC level at each
        depth, or a nominal back-wall echo.

    Returns
    -------
    same kind as `amplitude_fsh`
        dB (positive above the reference). DataArrays get ``units='dB'`` and
        stay lazy.

    Examples
    --------
    >>> round(float(db_re(40.0, 80.0)), 2)
    -6.02
    """
    if np.isscalar(reference_fsh) or isinstance(reference_fsh, int | float):
        reference_fsh = positive_float("reference_fsh", reference_fsh)
    if isinstance(amplitude_fsh, xr.DataArray) or isinstance(reference_fsh, xr.DataArray):
        out = xr.apply_ufunc(_db_kernel, amplitude_fsh, reference_fsh, dask="parallelized",
                             output_dtypes=[np.float64])
        out.attrs = {"units": "dB", "long_name": "amplitude relative to the reference"}
        return out
    try:
        a = np.asarray(amplitude_fsh, dtype=np.float64)
        r = np.asarray(reference_fsh, dtype=np.float64)
    except (TypeError, ValueError):
        raise ParameterTypeError(
            f"`amplitude_fsh` and `reference_fsh` must be numbers or arrays, got {type(amplitude_fsh).__name__} "
            f"and {type(reference_fsh).__name__}"
        ) from None
    if np.any(r <= 0):
        raise ParameterError(f"`reference_fsh` must be greater than 0 %FSH, got {reference_fsh!r}")
    out = _db_kernel(a, r)
    return float(out) if out.ndim == 0 else out


def _dac_kernel(depth: np.ndarray, depths: np.ndarray, levels_db: np.ndarray, mode: str) -> np.ndarray:
    """DAC level in dB re 1 %FSH at `depth`; `mode` 'refuse' (NaN outside), 'extrapolate', 'hold' or 'conservative'."""
    d = np.asarray(depth, dtype=np.float64)
    out = np.interp(d, depths, levels_db)  # holds the end levels outside
    if mode == "hold":
        return out
    with np.errstate(invalid="ignore"):
        below, above = d < depths[0], d > depths[-1]
    if mode == "refuse":
        return np.where(below | above, np.nan, out)
    slope_lo = (levels_db[1] - levels_db[0]) / (depths[1] - depths[0])
    slope_hi = (levels_db[-1] - levels_db[-2]) / (depths[-1] - depths[-2])
    ext = np.where(below, levels_db[0] + slope_lo * (d - depths[0]), out)
    ext = np.where(above, levels_db[-1] + slope_hi * (d - depths[-1]), ext)
    if mode == "extrapolate":
        return ext
    return np.minimum(out, ext)  # conservative: the lower of held and continued


@dataclass(frozen=True)
class DacCurve:
    """A distance-amplitude correction curve (or any recording curve of a level against depth).

    Attributes
    ----------
    depths_mm : tuple of float
        Depths of the reference reflectors, mm, strictly increasing.
    amplitudes_fsh : tuple of float
        Their echo amplitudes, %FSH (> 0).
    extrapolate : bool
        Whether the curve is continued (linearly in dB) beyond the recorded
        depths (the same as ``outside='extrapolate'``).
    outside : {'refuse', 'extrapolate', 'conservative'}, optional
        The rule beyond the recorded depths (module notes); default
        'extrapolate' when `extrapolate` is True, else 'refuse'.
    label : str
        What the curve is, for people and records (e.g. ``'DAC'`` or
        ``'DGS 2 mm FBH'``).
    """

    depths_mm: tuple[float, ...]
    amplitudes_fsh: tuple[float, ...]
    extrapolate: bool = False
    outside: str | None = None
    label: str = "DAC"

    def __post_init__(self) -> None:
        rule = self.outside
        if rule is None:
            rule = "extrapolate" if self.extrapolate else "refuse"
        one_of("outside", rule, DAC_OUTSIDE_RULES)
        if self.extrapolate and rule != "extrapolate":
            raise ParameterError(f"`extrapolate=True` contradicts `outside`={rule!r}; give one of them")
        object.__setattr__(self, "outside", rule)
        object.__setattr__(self, "extrapolate", rule == "extrapolate")

    @property
    def range_mm(self) -> tuple[float, float]:
        """The recorded depth range (first, last reference depth)."""
        return self.depths_mm[0], self.depths_mm[-1]

    def level_fsh(self, depth_mm: Any, *, outside: str | None = None) -> Any:
        """DAC level in %FSH at `depth_mm` (float, array or DataArray; lazy on dask).

        `outside` overrides how depths outside the recorded range are
        treated: 'refuse' (NaN), 'extrapolate', 'conservative' or 'hold'
        (level of the nearest end point); default the curve's own rule.

        Examples
        --------
        >>> dac = dac_curve([10, 30], [80, 20])
        >>> round(float(dac.level_fsh(20.0)), 3)  # geometric mean of 80 and 20
        40.0
        """
        mode = outside or self.outside
        one_of("outside", mode, (*DAC_OUTSIDE_RULES, "hold"))
        depths = np.asarray(self.depths_mm, dtype=np.float64)
        levels = 20.0 * np.log10(np.asarray(self.amplitudes_fsh, dtype=np.float64))

        def kernel(d: np.ndarray) -> np.ndarray:
            return 10.0 ** (_dac_kernel(d, depths, levels, mode) / 20.0)

        if isinstance(depth_mm, xr.DataArray):
            out = xr.apply_ufunc(kernel, depth_mm, dask="parallelized", output_dtypes=[np.float64])
            out.attrs = {"units": "%FSH", "long_name": f"{self.label} level"}
            return out
        out = kernel(np.asarray(depth_mm, dtype=np.float64))
        return float(out) if out.ndim == 0 else out

    def outside_note(self, depth_min_mm: float, depth_max_mm: float) -> str | None:
        """A sentence for records whose depths leave the recorded range, or None when they stay inside."""
        lo, hi = self.range_mm
        tol = 1e-9 * max(1.0, abs(hi))
        if not (depth_min_mm < lo - tol or depth_max_mm > hi + tol):
            return None
        how = {"refuse": "no level (refused)",
               "extrapolate": "the end segments continued in dB",
               "conservative": "the lower of the end level held and the end segment continued in dB"}[self.outside]
        return (f"depths {depth_min_mm:.1f} to {depth_max_mm:.1f} mm leave the {self.label}'s recorded range "
                f"{lo:g} to {hi:g} mm: its level there is {how}")

    def to_dict(self) -> dict[str, Any]:
        """Plain-JSON form (for attributes and provenance)."""
        return {"depths_mm": list(self.depths_mm), "amplitudes_fsh": list(self.amplitudes_fsh),
                "extrapolate": self.extrapolate, "outside": self.outside, "label": self.label}

    @classmethod
    def from_csv(cls, path: str | os.PathLike[str], *, outside: str = "conservative", label: str = "DAC") -> DacCurve:
        """Read a DAC table from a CSV file with the header ``depth_mm,amplitude_fsh``.

        One reference echo per line: its depth (mm) and its amplitude
        (%FSH, > 0); depths strictly increasing, at least two lines. Blank
        lines and lines starting with ``#`` are skipped.

        Parameters
        ----------
        path : str or path-like
            The CSV file.
        outside : {'conservative', 'extrapolate', 'refuse'}, default 'conservative'
            The rule beyond the table's depths (module notes).
        label : str, default 'DAC'

        Raises
        ------
        CalibrationError
            The file is missing or unreadable, the header is not
            ``depth_mm,amplitude_fsh``, a value is not a number, depths do not
            increase, an amplitude is not > 0, fewer than two points.

        Examples
        --------
        >>> import tempfile, pathlib
        >>> p = pathlib.Path(tempfile.mkdtemp()) / "dac.csv"
        >>> _ = p.write_text("depth_mm,amplitude_fsh\\n10,80\\n50,20\\n")
        >>> DacCurve.from_csv(p).amplitudes_fsh
        (80.0, 20.0)
        """
        depths, amps = _read_dac_csv(Path(path))
        d = np.asarray(depths)
        if d.size >= 2 and np.any(np.diff(d) <= 0):
            k = int(np.flatnonzero(np.diff(d) <= 0)[0])
            raise CalibrationError(
                f"DAC file {str(path)!r}: `depth_mm` must increase from line to line, got {d[k]:g} then {d[k + 1]:g} "
                "mm; sort the points by depth and give each depth once"
            )
        curve = dac_curve(depths, amps, outside=outside, source=f"DAC file {str(path)!r}")
        return replace(curve, label=str(label))


def _read_dac_csv(path: Path) -> tuple[list[float], list[float]]:
    """The (depth, amplitude) columns of a DAC CSV file, checked line by line."""
    try:
        text = path.read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        raise CalibrationError(f"DAC file {str(path)!r} does not exist; give the path of a CSV file") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise CalibrationError(f"cannot read DAC file {str(path)!r}: {exc}") from None
    rows = [(n, line.strip()) for n, line in enumerate(text.splitlines(), 1)]
    rows = [(n, line) for n, line in rows if line and not line.startswith("#")]
    header = [c.strip().lower() for c in rows[0][1].split(",")] if rows else []
    if header != ["depth_mm", "amplitude_fsh"]:
        got = rows[0][1] if rows else "an empty file"
        raise CalibrationError(
            f"DAC file {str(path)!r}: the first line must be the header 'depth_mm,amplitude_fsh', got {got!r}"
        )
    depths: list[float] = []
    amps: list[float] = []
    for n, line in rows[1:]:
        cells = [c.strip() for c in line.split(",")]
        try:
            if len(cells) != 2:
                raise ValueError
            z, a = float(cells[0]), float(cells[1])
        except ValueError:
            raise CalibrationError(
                f"DAC file {str(path)!r} line {n}: expected two numbers 'depth_mm,amplitude_fsh', got {line!r}"
            ) from None
        depths.append(z)
        amps.append(a)
    return depths, amps


def dac_curve(depths_mm: Any, amplitudes_fsh: Any, *, extrapolate: bool = False, outside: str | None = None,
              source: str = "") -> DacCurve:
    """Build a DAC curve from reference echoes at several depths.

    Parameters
    ----------
    depths_mm : array_like
        Depths of equal reference reflectors (e.g. side-drilled holes), mm;
        at least two, all different (sorted here).
    amplitudes_fsh : array_like
        Their peak echo amplitudes, %FSH, > 0, same length.
    extrapolate : bool, default False
        Continue the curve beyond the recorded depths linearly in dB (else
        its level there follows `outside`).
    outside : {'refuse', 'extrapolate', 'conservative'}, optional
        The rule beyond the recorded depths; default 'refuse' (NaN), or
        'extrapolate' with ``extrapolate=True``.
    source : str, optional
        Where the points come from, named in error messages.

    Returns
    -------
    DacCurve

    Raises
    ------
    CalibrationError
        Fewer than two points, repeated depths, lengths that differ,
        amplitudes not > 0, non-finite values.

    Examples
    --------
    >>> dac = dac_curve([10, 20, 40], [80, 60, 30])
    >>> dac.range_mm
    (10.0, 40.0)
    """
    where = f"{source}: " if source else ""
    try:
        d = np.asarray(depths_mm, dtype=np.float64).ravel()
        a = np.asarray(amplitudes_fsh, dtype=np.float64).ravel()
    except (TypeError, ValueError):
        raise CalibrationError(
            f"{where}`depths_mm` and `amplitudes_fsh` must be sequences of numbers, got {depths_mm!r} and "
            f"{amplitudes_fsh!r}"
        ) from None
    if d.size != a.size:
        raise CalibrationError(
            f"{where}`depths_mm` and `amplitudes_fsh` must have the same length, got {d.size} and {a.size}"
        )
    if d.size < 2:
        raise CalibrationError(f"{where}a DAC needs at least two reference echoes, `depths_mm` has {d.size}")
    if not (np.all(np.isfinite(d)) and np.all(np.isfinite(a))):
        raise CalibrationError(
            f"{where}`depths_mm` and `amplitudes_fsh` must be finite, got {d.tolist()} and {a.tolist()}")
    if np.any(a <= 0):
        raise CalibrationError(f"{where}`amplitudes_fsh` must all be greater than 0 %FSH, got {a.tolist()}")
    order = np.argsort(d, kind="stable")
    d, a = d[order], a[order]
    if np.any(np.diff(d) == 0):
        raise CalibrationError(f"{where}`depths_mm` must not repeat a depth, got {np.asarray(depths_mm).tolist()}")
    try:
        return DacCurve(tuple(d.tolist()), tuple(a.tolist()), bool(extrapolate), outside)
    except NdtmapError as exc:
        raise CalibrationError(f"{where}{exc}") from None


def db_re_dac(amplitude_fsh: Any, depth_mm: Any, dac: DacCurve) -> Any:
    """Amplitude in dB relative to the DAC at the echo's depth.

    ``20 log10(A / DAC(depth))``; NaN where the depth lies outside the
    DAC's recorded range unless the curve extrapolates.

    Examples
    --------
    >>> dac = dac_curve([10, 30], [80, 20])
    >>> round(float(db_re_dac(20.0, 20.0, dac)), 2)  # half of the 40 %FSH DAC level
    -6.02
    """
    if not isinstance(dac, DacCurve):
        raise ParameterTypeError(f"`dac` must be a DacCurve (from dac_curve), got {type(dac).__name__}")
    level = dac.level_fsh(depth_mm)
    if isinstance(amplitude_fsh, xr.DataArray) or isinstance(level, xr.DataArray):
        out = xr.apply_ufunc(_db_kernel, amplitude_fsh, level, dask="parallelized", output_dtypes=[np.float64])
        out.attrs = {"units": "dB", "long_name": "amplitude relative to DAC"}
        return out
    out = _db_kernel(np.asarray(amplitude_fsh, dtype=np.float64), np.asarray(level))
    return float(out) if np.ndim(out) == 0 else out


def full_scale_fsh(grid: xr.Dataset) -> float:
    """The digitiser's full scale (clipping level) of a grid, %FSH: ``digitiser_full_scale_fsh``, default 100.

    Examples
    --------
    >>> from ndtmap.grid.examples import example_grid
    >>> full_scale_fsh(example_grid())
    100.0
    """
    value = grid.attrs.get("digitiser_full_scale_fsh")
    if value is None:
        return 100.0
    return positive_float("digitiser_full_scale_fsh", value)


def _clip_kernel(x: np.ndarray, level: float) -> np.ndarray:
    with np.errstate(invalid="ignore"):
        return np.abs(np.asarray(x)) >= level


def clipped_samples(grid: xr.Dataset) -> xr.DataArray:
    """True at every sample the digitiser clipped: ``|a| >= digitiser_full_scale_fsh`` (within 0.1 %).

    A grid that went through :func:`apply_tcg` carries the mask of its
    recorded samples as the variable ``clipped``, which is returned as it
    is: amplified samples above the full scale were not clipped, attenuated
    clipped samples were. Lazy on dask-backed grids.

    Examples
    --------
    >>> from ndtmap.grid.examples import example_grid
    >>> g = example_grid((4.0,), (150.0,)).assign_attrs(digitiser_full_scale_fsh=200.0)
    >>> bool(clipped_samples(g).any())      # 150 %FSH on a 200 %FSH digitiser
    False
    """
    grid = check_grid(grid)
    if "clipped" in grid.data_vars:
        return grid["clipped"].astype(bool)
    level = full_scale_fsh(grid) * (1.0 - CLIP_RTOL)
    out = xr.apply_ufunc(_clip_kernel, ascan_in_fsh(grid), kwargs={"level": level}, dask="parallelized",
                         output_dtypes=[bool])
    out.attrs = {"units": "1", "long_name": "sample clipped by the digitiser"}
    return out.rename("clipped")


def _ratio_kernel(x: np.ndarray, inverse_level: np.ndarray) -> np.ndarray:
    return (np.asarray(x, dtype=np.float32) * inverse_level).astype(np.float32)


def detected_re_curve(grid: xr.Dataset, curve: DacCurve, detect: str = "rectified") -> xr.DataArray:
    """The detection signal divided by a recording curve sample by sample, in % of the curve (100 = at the curve).

    ``100 A(t) / DAC(d(t))`` with ``d(t)`` the depth of each sample from
    pulse entry (calibration: velocity, beam angle, zero offset): a software
    TCG by ``1 / DAC``. A gate on it reads the maximum of ``A(t) / DAC(t)``
    over its window: the amplitude re DAC of the strongest echo *relative to
    the curve*, wherever it lies in depth. Samples where the curve gives no
    level (outside its range under the rule 'refuse') are NaN.

    Examples
    --------
    >>> from ndtmap.grid.examples import example_grid
    >>> g = example_grid((4.0,), (40.0,))          # echo at 11.84 mm
    >>> dac = dac_curve([5.0, 20.0], [80.0, 20.0])
    >>> r = detected_re_curve(g, dac)
    >>> round(float(r.max()) / (100 * 40.0 / dac.level_fsh(11.84)), 2)
    1.0
    """
    if not isinstance(curve, DacCurve):
        raise ParameterTypeError(f"`curve` must be a DacCurve (from dac_curve), got {type(curve).__name__}")
    pc = part_constants(grid)
    level = np.asarray(curve.level_fsh(pc.depth_mm(pc.time_us)), dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        inverse = (100.0 / level).astype(np.float32)
    sig = detected_signal(grid, detect)
    out = _map_time(sig, _ratio_kernel, inverse_level=inverse)
    out.attrs = {"units": "% of curve", "long_name": f"A-scan amplitude re {curve.label} ({detect})"}
    return out


def apply_tcg(grid: xr.Dataset, dac: DacCurve, *, target_fsh: float = 80.0) -> xr.Dataset:
    """Time-corrected gain: scale every sample so that the DAC becomes a flat line at `target_fsh`.

    The gain of the sample at depth ``d`` (from the calibration: velocity,
    beam angle, zero offset) is ``target / DAC(d)``. Outside the DAC's
    recorded depth range the gain of the nearest end point is held (or the
    curve's rule is followed when it is 'extrapolate' or 'conservative');
    samples before pulse entry take the gain of the first point. The gain is
    applied after digitising: amplified samples may exceed the digitiser's
    full scale without being clipped, and samples the digitiser clipped stay
    clipped whatever the gain. The result carries the boolean variable
    ``clipped`` (scan, index, time) of the recorded samples
    (:func:`clipped_samples`), which gates read for ``saturated``.

    Parameters
    ----------
    grid : xarray.Dataset
        A scan grid.
    dac : DacCurve
        The DAC recorded with this probe and set-up.
    target_fsh : float, default 80
        The level the DAC is raised or lowered to, %FSH.

    Returns
    -------
    xarray.Dataset
        The corrected grid; ``ascan`` attrs carry ``tcg_target_fsh`` and the
        gain range in dB.

    Examples
    --------
    >>> from ndtmap.grid.examples import example_grid
    >>> g = example_grid((4.0,), (40.0,))          # echo at 11.84 mm
    >>> dac = dac_curve([5.0, 20.0], [80.0, 20.0])
    >>> out = apply_tcg(g, dac, target_fsh=80.0)
    >>> level = float(dac.level_fsh(11.84))
    >>> round(float(out.ascan.max()) / (40.0 * 80.0 / level), 3)
    1.0
    >>> bool(out.clipped.any())
    False
    """
    grid = check_grid(grid)
    if not isinstance(dac, DacCurve):
        raise ParameterTypeError(f"`dac` must be a DacCurve (from dac_curve), got {type(dac).__name__}")
    target = positive_float("target_fsh", target_fsh)
    pc = part_constants(grid)
    depth = pc.depth_mm(pc.time_us)
    rule = "hold" if dac.outside == "refuse" else dac.outside
    level = dac.level_fsh(depth, outside=rule)
    gain = (target / level).astype(np.float32)
    gain_da = xr.DataArray(gain, dims=("time",), coords={"time": grid["time"]})
    clipped = clipped_samples(grid).transpose("scan", "index", "time")
    out = ascan_in_fsh(grid) * gain_da
    gain_db = 20.0 * np.log10(gain.astype(np.float64))
    outside_text = {"hold": "gain of the nearest DAC point held", "extrapolate": "extrapolated",
                    "conservative": "the higher of the gains held and extrapolated"}[rule]
    res = replace_ascan(
        grid, out, tcg_target_fsh=target, tcg_gain_db_min=float(gain_db.min()), tcg_gain_db_max=float(gain_db.max()),
        tcg_outside_dac=outside_text,
    )
    res["clipped"] = xr.Variable(("scan", "index", "time"), clipped.data,
                                 attrs={"units": "1", "long_name": "recorded sample clipped by the digitiser"})
    return with_step(res, "tcg", {"dac": dac.to_dict(), "target_fsh": target}, source=grid)
