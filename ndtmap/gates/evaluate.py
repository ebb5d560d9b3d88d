"""Gates: windows on the A-scan in which an echo is detected, timed and measured.

A :class:`Gate` is a window in depth (``unit='mm'``) or time (``'us'``) with
a threshold in %FSH and a detection mode. :func:`evaluate_gate` applies it to
every A-scan of a grid and returns, on ``(scan, index)``: whether the gate
triggered, the amplitude, the event time and the sound path, depth and
surface distance of the event.

Detection signal
    The rectified A-scan: ``|a|`` for RF grids, the data as recorded for
    rectified grids; ``detect='envelope'`` gates the Hilbert envelope of RF
    data instead (smoother timing, no dependence on the carrier phase).

Windows
    A gate in mm spans depths ``start..end`` below the surface (sound path
    ``depth / cos(theta)``, time ``zero_offset + 2 s / c``); a gate in us
    spans those times on the recorded time axis. The samples whose times lie
    in ``[start, end]`` are examined. A gate that ``follows`` another opens
    relative to the other gate's event, per A-scan: ``[t_event + start,
    t_event + end]`` (mm converted with the part velocity and the beam
    angle, so ``start``/``end`` are depths after the followed event). Where
    the followed gate did not trigger (or is missing) the following gate
    gives missing values.

Modes
    ``'peak'``: the highest sample in the window. Amplitude = its value; the
    event time is the vertex of the parabola through it and its two
    neighbours (when both lie in the window; else the sample time).
    Triggered when amplitude >= threshold.
    ``'first-crossing'`` (flank): the first sample at or above the threshold.
    The event time is interpolated linearly between it and the sample
    before (if the signal is already above the threshold when the gate
    opens, the event is the first sample in the window). Amplitude = the
    peak of the echo that crosses: the highest sample from the crossing to
    the end of that echo, which ends where the signal stays below the
    threshold for one probe period (``echo_hold_us``; this bridges the
    zero crossings of an RF echo) or at the end of the window. Triggered
    when a crossing exists; otherwise the amplitude is the window maximum.

Depth of the event
    Normally from pulse entry: ``s = c (t - zero_offset) / 2``. For a gate
    that follows another on an immersion grid (attribute ``water_path_mm``
    or ``water_velocity_m_s`` present) the depth counts from the event of
    the first gate of its chain (the interface echo), so the part surface is
    depth zero wherever the water path varies or the part is tilted; or
    choose the reference with ``depth_from``.

Record limits
    A gate window that is partly or entirely outside the recorded time
    range raises :class:`~ndtmap.errors.GateError` naming the gate, its
    window and the record. A following gate whose window can only leave the
    record at some positions is evaluated; those positions are missing,
    marked in the variable ``outside_record`` and counted in the attribute
    ``positions_outside_record`` (for in-memory grids).

Missing A-scans give NaN and ``triggered=False``, never a number.

Implementation
    All outputs of a gate come from one read of the gated window. The
    default kernel ('compiled', numba) reads the recorded samples (int16
    counts or float32) and converts, rectifies and compares each sample on
    the fly; the numpy kernel ('numpy', :func:`_gate_kernel`) is the
    reference it is tested against, bit for bit. Choose with
    ``kernel=`` or the environment variable ``NDTMAP_KERNEL``. Figures:
    docs/performance.md.
"""

from __future__ import annotations

import json
import math
import os
from collections.abc import Iterable, Mapping
from dataclasses import asdict, dataclass
from typing import Any

import numpy as np
import xarray as xr

from ndtmap._shared.arrays import is_lazy, netcdf_safe, result_attrs, whole_time
from ndtmap._shared.validate import finite_float, float_in_range, one_of, positive_float
from ndtmap.errors import GateError, NdtmapError, ParameterError, ParameterTypeError
from ndtmap.grid.geometry import part_constants
from ndtmap.grid.provenance import with_step
from ndtmap.grid.schema import check_grid, grid_attr, missing_ascans
from ndtmap.signal import DETECTIONS, DacCurve, db_re, db_re_dac, detected_signal

__all__ = [
    "GATE_UNITS",
    "GATE_MODES",
    "GATE_KERNELS",
    "Gate",
    "evaluate_gate",
    "evaluate_gates",
    "gate_window_us",
    "is_immersion",
]

GATE_UNITS = ("mm", "us")
GATE_MODES = ("peak", "first-crossing")
#: Implementations of the gate measurement: 'compiled' (numba, the default) and 'numpy' (the reference).
GATE_KERNELS = ("compiled", "numpy")
#: Environment variable that chooses the kernel when the `kernel` argument is not given.
KERNEL_ENV = "NDTMAP_KERNEL"
_EPS = 1e-6  # fraction of a sample: tolerance of window edges against sample times


@dataclass(frozen=True)
class Gate:
    """A named detection window on the A-scan.

    Parameters
    ----------
    name : str
        The user's own name, e.g. ``"flaw"`` or ``"backwall"``.
    start, end : float
        Window start and end in `unit` (start < end); for a following gate,
        relative to the followed gate's event.
    unit : {'mm', 'us'}, default 'mm'
        'mm': depth below the surface (or depth after the followed event);
        'us': time on the recorded axis (or time after the followed event).
    threshold_fsh : float, default 20
        Detection threshold in %FSH, in [0, 1000].
    mode : {'peak', 'first-crossing'}, default 'peak'
        Highest peak or first threshold crossing (flank).
    follows : str, optional
        Name of another gate whose event this window is relative to.

    Raises
    ------
    GateError
        For any invalid field, naming the gate.

    Examples
    --------
    >>> Gate("backwall", 10.0, 14.0, threshold_fsh=30).mode
    'peak'
    >>> Gate("flaw", 5, 3)
    Traceback (most recent call last):
    ...
    ndtmap.errors.GateError: gate 'flaw': `start` must be smaller than `end`, got start=5, end=3 mm; swap the two values
    """

    name: str
    start: float
    end: float
    unit: str = "mm"
    threshold_fsh: float = 20.0
    mode: str = "peak"
    follows: str | None = None

    def __post_init__(self) -> None:
        name = self.name
        if not isinstance(name, str) or not name.strip():
            raise GateError(f"gate `name` must be non-empty text, got {name!r}")

        def check(func: Any, field: str, *args: Any, **kwargs: Any) -> Any:
            try:
                return func(field, getattr(self, field), *args, **kwargs)
            except NdtmapError as exc:
                raise GateError(f"gate {name!r}: {exc}") from None

        start = check(finite_float, "start")
        end = check(finite_float, "end")
        unit = check(one_of, "unit", GATE_UNITS)
        if not start < end:
            raise GateError(
                f"gate {name!r}: `start` must be smaller than `end`, got start={start:g}, end={end:g} {unit}; "
                "swap the two values"
            )
        threshold = check(float_in_range, "threshold_fsh", 0.0, 1000.0, unit="%FSH")
        check(one_of, "mode", GATE_MODES)
        follows = self.follows
        if follows is not None:
            if not isinstance(follows, str) or not follows.strip():
                raise GateError(f"gate {name!r}: `follows` must be the name of another gate or None, got {follows!r}")
            if follows == name:
                raise GateError(f"gate {name!r}: a gate cannot follow itself (`follows`={follows!r})")
        object.__setattr__(self, "start", start)
        object.__setattr__(self, "end", end)
        object.__setattr__(self, "threshold_fsh", threshold)

    def to_dict(self) -> dict[str, Any]:
        """The definition as a plain dict (JSON-ready)."""
        return asdict(self)

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> Gate:
        """Build a gate from :meth:`to_dict` output (unknown keys raise GateError).

        Examples
        --------
        >>> g = Gate("bw", 10, 14)
        >>> Gate.from_dict(g.to_dict()) == g
        True
        """
        if not isinstance(data, Mapping):
            raise GateError(f"a gate definition must be a mapping, got {type(data).__name__}")
        known = {"name", "start", "end", "unit", "threshold_fsh", "mode", "follows"}
        unknown = sorted(set(data) - known)
        if unknown:
            raise GateError(f"unknown gate field(s) {unknown}; known fields: {sorted(known)}")
        missing = [k for k in ("name", "start", "end") if k not in data]
        if missing:
            raise GateError(f"gate definition lacks {missing}")
        return cls(**dict(data))


def is_immersion(grid: xr.Dataset) -> bool:
    """True when the grid records an immersion (or water-gap) test: it has ``water_path_mm`` or
    ``water_velocity_m_s``."""
    return "water_path_mm" in grid.attrs or "water_velocity_m_s" in grid.attrs


# --------------------------------------------------------------------------- the kernel


def _take(x: np.ndarray, k: np.ndarray) -> np.ndarray:
    return np.take_along_axis(x, k[..., None], axis=-1)[..., 0]


def _gate_kernel(
    samples: np.ndarray,
    t0_us: float,
    dt_us: float,
    threshold: float,
    hold: int,
    i_start: np.ndarray | None = None,
    i_end: np.ndarray | None = None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """All measurements of one gate in one pass over the window, along the last axis.

    Parameters
    ----------
    samples : ndarray (..., n)
        Detection signal (>= 0), %FSH; sample ``j`` is at ``t0_us + j dt_us``.
    t0_us, dt_us : float
        Time of the first sample and the sampling interval.
    threshold : float
        Threshold in %FSH.
    hold : int
        Samples the signal must stay below the threshold to end an echo.
    i_start, i_end : ndarray (...), optional
        Inclusive window per A-scan as sample numbers (float, NaN: no
        window); default the whole last axis.

    Returns
    -------
    peak, peak_time, cross_time, cross_peak : ndarray (...)
        Highest value in the window, its parabola-vertex time, the first
        threshold crossing time (NaN if none) and the highest value of the
        crossing echo (NaN if none). All NaN where the window is invalid or
        holds a NaN sample.
    """
    x = np.asarray(samples, dtype=np.float64)
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


_BLOCK_ELEMENTS = 2_000_000  # samples per call of the kernel: bounds the size of its temporaries


def _gate_kernel_blocked(samples: np.ndarray, i_start: np.ndarray | None = None, i_end: np.ndarray | None = None,
                         **kwargs: Any) -> tuple[np.ndarray, ...]:
    """Run :func:`_gate_kernel` over slabs of A-scans so that its temporaries stay small."""
    x = np.asarray(samples)
    lead = x.shape[:-1]
    n_traces = int(np.prod(lead)) if lead else 1
    per = max(1, _BLOCK_ELEMENTS // max(1, x.shape[-1]))
    if n_traces <= per:
        return _gate_kernel(x, i_start=i_start, i_end=i_end, **kwargs)
    flat = x.reshape(n_traces, x.shape[-1])
    s = None if i_start is None else np.broadcast_to(np.asarray(i_start, dtype=np.float64), lead).reshape(-1)
    e = None if i_end is None else np.broadcast_to(np.asarray(i_end, dtype=np.float64), lead).reshape(-1)
    outs = [np.empty(n_traces) for _ in range(4)]
    for k in range(0, n_traces, per):
        part = slice(k, k + per)
        res = _gate_kernel(flat[part], i_start=None if s is None else s[part], i_end=None if e is None else e[part],
                           **kwargs)
        for o, r in zip(outs, res, strict=True):
            o[part] = r
    return tuple(o.reshape(lead) for o in outs)


def _gate_kernel_windows(samples: np.ndarray, i_start: np.ndarray, i_end: np.ndarray, **kwargs: Any) -> Any:
    return _gate_kernel_blocked(samples, i_start=i_start, i_end=i_end, **kwargs)


def _gate_kernel_compiled(samples: np.ndarray, i_start: Any = None, i_end: Any = None, **kwargs: Any) -> Any:
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
    """:func:`_gate_kernel_compiled` on one dask block, the four outputs stacked on a last axis of length 4."""
    if windows:
        kwargs = dict(kwargs, i_start=windows[0][..., 0], i_end=windows[1][..., 0])
    return np.stack(_gate_kernel_compiled(samples, **kwargs), axis=-1)


def _gate_outputs_compiled(samples: Any, i_start: Any = None, i_end: Any = None, **kwargs: Any) -> Any:
    """The four outputs for numpy or dask arrays (``apply_ufunc(..., dask='allowed')``).

    A dask array is mapped block by block with the time axis kept (its blocks
    give a last axis of 4 outputs), not contracted: a contracted core axis
    makes dask copy every block once more before the kernel sees it.
    """
    if not hasattr(samples, "dask"):
        return _gate_kernel_compiled(samples, i_start, i_end, **kwargs)
    import dask.array as da

    extra = [] if i_start is None else [da.asarray(i_start)[..., None], da.asarray(i_end)[..., None]]
    stacked = da.map_blocks(_gate_kernel_stacked, samples, *extra, dtype=np.float64,
                            chunks=(*samples.chunks[:-1], (4,)), meta=np.empty((0,) * samples.ndim), **kwargs)
    return tuple(stacked[..., k] for k in range(4))


def _threads_for(data: xr.DataArray) -> int:
    """Threads for the compiled kernel: the usable cores for an in-memory grid, 1 in dask tasks (parallel already)."""
    if is_lazy(data):
        return 1
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):  # pragma: no cover - not Linux
        return max(1, os.cpu_count() or 1)


def _choose_kernel(kernel: str | None) -> str:
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


# --------------------------------------------------------------------------- gate tables and evaluation


def _gate_table(gate: Any, others: Any) -> dict[str, Gate]:
    if not isinstance(gate, Gate):
        raise ParameterTypeError(f"`gate` must be a Gate, got {type(gate).__name__}")
    if isinstance(others, Gate):
        others = [others]
    elif isinstance(others, Mapping):
        others = list(others.values())
    try:
        others = list(others)
    except TypeError:
        raise ParameterTypeError(f"`others` must be a sequence of Gate, got {type(others).__name__}") from None
    table: dict[str, Gate] = {}
    for g in [gate, *others]:
        if not isinstance(g, Gate):
            raise ParameterTypeError(f"`others` must hold Gate objects, got {type(g).__name__}")
        if g.name in table and table[g.name] != g:
            raise GateError(f"two different gates are named {g.name!r}; give each gate its own name")
        table[g.name] = g
    for g in table.values():
        seen = [g.name]
        cur = g
        while cur.follows is not None:
            if cur.follows not in table:
                raise GateError(
                    f"gate {cur.name!r} follows {cur.follows!r}, which is not defined; pass that gate in `others` "
                    f"(defined: {sorted(table)})"
                )
            if cur.follows in seen:
                raise GateError(f"gates follow each other in a cycle: {' -> '.join([*seen, cur.follows])}")
            seen.append(cur.follows)
            cur = table[cur.follows]
    return table


def _chain(table: Mapping[str, Gate], name: str) -> list[str]:
    """The gates `name` depends on, nearest first."""
    out, cur = [], table[name]
    while cur.follows is not None:
        out.append(cur.follows)
        cur = table[cur.follows]
    return out


@dataclass
class _Raw:
    amplitude: xr.DataArray
    triggered: xr.DataArray
    time: xr.DataArray
    window: tuple[float, float]  # absolute (fixed) or relative (following) window, us
    outside: xr.DataArray | None = None
    window_start: xr.DataArray | None = None
    window_end: xr.DataArray | None = None


class _Evaluator:
    def __init__(self, grid: xr.Dataset, table: dict[str, Gate], detect: str, echo_hold_us: float | None,
                 kernel: str | None = None) -> None:
        self.grid = grid
        self.table = table
        self.detect = one_of("detect", detect, DETECTIONS[:2])
        self.kernel = _choose_kernel(kernel)
        self.pc = part_constants(grid)
        t = self.pc.time_us
        self.t_first, self.t_last, self.n = float(t[0]), float(t[-1]), t.size
        if echo_hold_us is None:
            f = float(grid_attr(grid, "probe_frequency_mhz"))
            echo_hold_us = 1.0 / f
        self.echo_hold_us = positive_float("echo_hold_us", echo_hold_us)
        self.hold = max(1, int(round(self.echo_hold_us / self.pc.dt_us)))
        self._signal: xr.DataArray | None = None
        self._missing: xr.DataArray | None = None
        self._memo: dict[str, _Raw] = {}
        self._bounds: dict[str, tuple[float, float]] = {}

    @property
    def signal(self) -> xr.DataArray:
        if self._signal is None:
            self._signal = detected_signal(self.grid, self.detect)
        return self._signal

    @property
    def missing(self) -> xr.DataArray:
        if self._missing is None:
            self._missing = missing_ascans(self.grid)
        return self._missing

    @property
    def reads_record(self) -> bool:
        """True when the compiled kernel reads the recorded samples directly (rectified detection).

        It then rectifies and scales each sample itself and finds missing
        A-scans (non-finite samples anywhere in the record) in the same
        pass, so neither the float32 detection signal nor the missing mask
        of the whole grid is ever built.
        """
        return self.kernel == "compiled" and self.detect == "rectified"

    def ok_mask(self) -> xr.DataArray | None:
        """Positions whose results stand (not missing), or None when the kernel has already masked them."""
        if not self.reads_record:
            return ~self.missing
        if "missing" in self.grid.data_vars:
            return ~self.grid["missing"].astype(bool)
        return None

    def _compiled_input(self) -> tuple[xr.DataArray, dict[str, Any]]:
        """The array the compiled kernel reads and its per-sample conversion."""
        if not self.reads_record:
            sig = whole_time(self.signal)
            return sig, {"scale": 1.0, "rectify": False, "check_record": False, "threads": _threads_for(sig)}
        a = self.grid["ascan"]
        integer = np.issubdtype(a.dtype, np.integer)
        scale = float(a.attrs.get("fsh_per_count", 1.0)) if integer else 1.0
        rectify = str(a.attrs.get("signal", "rf")) == "rf"
        a = a.copy(deep=False)
        a.attrs = {"units": "%FSH", "long_name": f"A-scan amplitude ({self.detect})"}  # as detected_signal
        a = whole_time(a)
        return a, {"scale": scale, "rectify": rectify, "check_record": not integer, "threads": _threads_for(a)}

    def relative_us(self, gate: Gate) -> tuple[float, float]:
        if gate.unit == "us":
            return gate.start, gate.end
        per_mm = 1.0 / (self.pc.mm_per_us * self.pc.cos_theta)  # us of pulse-echo time per mm of depth
        return gate.start * per_mm, gate.end * per_mm

    def describe(self, gate: Gate) -> str:
        return f"{gate.start:g} to {gate.end:g} {gate.unit}"

    def window_us(self, gate: Gate) -> tuple[float, float]:
        """Absolute window of a non-following gate, checked against the record."""
        a, b = self.relative_us(gate)
        if gate.unit == "mm":
            a, b = a + self.pc.zero_offset_us, b + self.pc.zero_offset_us
        self._check_width(gate, a, b)
        tol = _EPS * self.pc.dt_us
        if a < self.t_first - tol or b > self.t_last + tol:
            where = "entirely" if (b < self.t_first - tol or a > self.t_last + tol) else "partly"
            raise GateError(
                f"gate {gate.name!r}: its window {self.describe(gate)} ({a:.6g} to {b:.6g} us) lies {where} outside "
                f"the recorded time range {self.t_first:.6g} to {self.t_last:.6g} us; move or shorten the gate"
            )
        return a, b

    def _check_width(self, gate: Gate, a: float, b: float) -> None:
        if b - a < self.pc.dt_us * (1.0 - _EPS):
            raise GateError(
                f"gate {gate.name!r}: its window {self.describe(gate)} spans {b - a:.4g} us, less than one sample "
                f"({self.pc.dt_us:g} us); widen the gate"
            )

    def bounds(self, name: str) -> tuple[float, float]:
        """Times between which the event of gate `name` can lie."""
        if name not in self._bounds:
            gate = self.table[name]
            if gate.follows is None:
                self._bounds[name] = self.window_us(gate)
            else:
                a, b = self.relative_us(gate)
                self._check_width(gate, a, b)
                lo_f, hi_f = self.bounds(gate.follows)
                lo, hi = lo_f + a, hi_f + b
                tol = _EPS * self.pc.dt_us
                earliest_end, latest_start = lo_f + b, hi_f + a  # every window is cut by the record if either
                if (hi < self.t_first - tol or lo > self.t_last + tol or earliest_end > self.t_last + tol
                        or latest_start < self.t_first - tol):
                    raise GateError(
                        f"gate {name!r} follows {gate.follows!r}: its window {self.describe(gate)} after that event "
                        f"({a:.6g} to {b:.6g} us; the event lies between {lo_f:.6g} and {hi_f:.6g} us) lies outside "
                        f"(entirely or partly, at every position) the recorded time range {self.t_first:.6g} to "
                        f"{self.t_last:.6g} us; move the gate"
                    )
                self._bounds[name] = (max(lo, self.t_first), min(hi, self.t_last))
        return self._bounds[name]

    def _sample(self, t: Any, rounding: Any) -> Any:
        return rounding((t - self.t_first) / self.pc.dt_us + (_EPS if rounding is np.floor else -_EPS))

    def evaluate(self, name: str) -> _Raw:
        if name in self._memo:
            return self._memo[name]
        gate = self.table[name]
        dt = self.pc.dt_us
        kwargs: dict[str, Any] = {"dt_us": dt, "threshold": gate.threshold_fsh, "hold": self.hold}
        outside = w_start = w_end = None
        if gate.follows is None:
            a, b = self.window_us(gate)
            i0 = int(max(0, self._sample(a, np.ceil)))
            i1 = int(min(self.n - 1, self._sample(b, np.floor)))
            kwargs["t0_us"] = self.t_first + i0 * dt
            if self.kernel == "compiled":
                data, conversion = self._compiled_input()
                kwargs.update(conversion, base=i0, length=i1 - i0 + 1, start=0.0, end=float(i1 - i0))
                outs = xr.apply_ufunc(
                    _gate_outputs_compiled, data, input_core_dims=[["time"]], output_core_dims=[[], [], [], []],
                    kwargs=kwargs, dask="allowed",
                )
            else:
                sig = whole_time(self.signal.isel(time=slice(i0, i1 + 1)))
                outs = xr.apply_ufunc(
                    _gate_kernel_blocked, sig, input_core_dims=[["time"]], output_core_dims=[[], [], [], []],
                    kwargs=kwargs, dask="parallelized", output_dtypes=[np.float64] * 4,
                )
            window = (a, b)
        else:
            a, b = self.relative_us(gate)
            lo, hi = self.bounds(name)
            k0 = int(max(0, math.floor((lo - self.t_first) / dt) - 1))
            k1 = int(min(self.n - 1, math.ceil((hi - self.t_first) / dt) + 1))
            ref = self.evaluate(gate.follows).time
            w_start, w_end = ref + a, ref + b
            f0 = self._sample(w_start, np.ceil)
            f1 = self._sample(w_end, np.floor)
            outside = ref.notnull() & ((f0 < 0) | (f1 > self.n - 1))
            i0 = (f0 - k0).where(~outside)
            i1 = (f1 - k0).where(~outside)
            kwargs["t0_us"] = self.t_first + k0 * dt
            if self.kernel == "compiled":
                data, conversion = self._compiled_input()
                kwargs.update(conversion, base=k0, length=k1 - k0 + 1)
                outs = xr.apply_ufunc(
                    _gate_outputs_compiled, data, i0, i1, input_core_dims=[["time"], [], []],
                    output_core_dims=[[], [], [], []], kwargs=kwargs, dask="allowed",
                )
            else:
                sig = whole_time(self.signal.isel(time=slice(k0, k1 + 1)))
                outs = xr.apply_ufunc(
                    _gate_kernel_windows, sig, i0, i1, input_core_dims=[["time"], [], []],
                    output_core_dims=[[], [], [], []], kwargs=kwargs, dask="parallelized",
                    output_dtypes=[np.float64] * 4,
                )
            window = (a, b)
        peak, peak_time, cross_time, cross_peak = outs
        if gate.mode == "peak":
            trig = peak >= gate.threshold_fsh
            amp = peak
            time = peak_time
        else:
            trig = cross_time.notnull()
            amp = cross_peak.where(trig, peak)
            time = cross_time
        ok = self.ok_mask()
        if ok is not None:
            amp = amp.where(ok)
            trig = trig & ok
        trig = trig.astype(bool)
        time = time.where(trig)
        raw = _Raw(amp, trig, time, window, outside, w_start, w_end)
        self._memo[name] = raw
        return raw

    def reference_time(self, name: str, depth_from: str) -> tuple[Any, str]:
        gate = self.table[name]
        chain = _chain(self.table, name)
        if depth_from == "auto":
            if gate.follows is not None and is_immersion(self.grid):
                depth_from = chain[-1]
            else:
                depth_from = "entry"
        if depth_from == "entry":
            return self.pc.zero_offset_us, "entry"
        if depth_from not in chain:
            raise GateError(
                f"`depth_from` must be 'auto', 'entry' or the name of a gate that {name!r} follows "
                f"({chain or 'none'}), got {depth_from!r}"
            )
        return self.evaluate(depth_from).time, depth_from

    def dataset(self, name: str, *, depth_from: str = "auto", reference_fsh: float | None = None,
                dac: DacCurve | None = None) -> xr.Dataset:
        gate = self.table[name]
        raw = self.evaluate(name)
        t_ref, ref_name = self.reference_time(name, depth_from)
        pc = self.pc
        path = pc.mm_per_us * (raw.time - t_ref)
        label = f"gate {name}"
        data = {
            "triggered": raw.triggered.assign_attrs(units="1", long_name=f"{label} triggered"),
            "amplitude_fsh": raw.amplitude.assign_attrs(units="%FSH", long_name=f"{label} peak amplitude"),
            "time_us": raw.time.assign_attrs(units="us", long_name=f"{label} event time"),
            "sound_path_mm": path.assign_attrs(units="mm", long_name=f"{label} sound path"),
            "depth_mm": (path * pc.cos_theta).assign_attrs(units="mm", long_name=f"{label} event depth"),
            "surface_distance_mm": (path * pc.sin_theta).assign_attrs(
                units="mm", long_name=f"{label} surface distance from the beam exit point"),
        }
        extra: dict[str, Any] = {}
        if reference_fsh is not None:
            ref = positive_float("reference_fsh", reference_fsh)
            data["amplitude_db"] = db_re(raw.amplitude, ref).assign_attrs(
                units="dB", long_name=f"{label} amplitude re {ref:g} %FSH")
            extra["reference_fsh"] = ref
        if dac is not None:
            if not isinstance(dac, DacCurve):
                raise ParameterTypeError(f"`dac` must be a DacCurve (from dac_curve), got {type(dac).__name__}")
            data["amplitude_db_re_dac"] = db_re_dac(raw.amplitude, data["depth_mm"], dac).assign_attrs(
                units="dB", long_name=f"{label} amplitude re DAC")
            extra["dac"] = json.dumps(dac.to_dict())
        if raw.outside is not None:
            data["window_start_us"] = raw.window_start.assign_attrs(units="us", long_name=f"{label} window start")
            data["window_end_us"] = raw.window_end.assign_attrs(units="us", long_name=f"{label} window end")
            data["outside_record"] = raw.outside.assign_attrs(
                units="1", long_name=f"{label} window outside the record (result missing)")
            extra["gate_window_relative_us"] = [raw.window[0], raw.window[1]]
            if not is_lazy(raw.outside):
                extra["positions_outside_record"] = int(raw.outside.sum())
            extra["outside_record_note"] = (
                "positions where the window leaves the recorded time range are missing; see `outside_record`")
        else:
            extra["gate_window_us"] = [raw.window[0], raw.window[1]]
        attrs = result_attrs(
            self.grid,
            gate=json.dumps(gate.to_dict()),
            gate_name=gate.name, gate_start=gate.start, gate_end=gate.end, gate_unit=gate.unit,
            gate_threshold_fsh=gate.threshold_fsh, gate_mode=gate.mode, gate_follows=netcdf_safe(gate.follows),
            detect=self.detect, depth_reference=ref_name, echo_hold_us=self.echo_hold_us, **extra,
        )
        ds = xr.Dataset(data, attrs=attrs)
        params = {
            "gate": gate.to_dict(),
            "follows_chain": [self.table[n].to_dict() for n in _chain(self.table, name)],
            "detect": self.detect, "depth_reference": ref_name, "echo_hold_us": self.echo_hold_us,
        }
        params.update({k: v for k, v in extra.items() if k in ("reference_fsh", "dac")})
        return with_step(ds, "gate", params, source=self.grid)


def evaluate_gate(
    grid: xr.Dataset,
    gate: Gate,
    *,
    others: Iterable[Gate] | Mapping[str, Gate] = (),
    detect: str = "rectified",
    depth_from: str = "auto",
    reference_fsh: float | None = None,
    dac: DacCurve | None = None,
    echo_hold_us: float | None = None,
    kernel: str | None = None,
) -> xr.Dataset:
    """Evaluate one gate on every A-scan of a grid.

    Parameters
    ----------
    grid : xarray.Dataset
        A scan grid, in memory or dask-backed (the result is then lazy).
    gate : Gate
        The gate.
    others : sequence or mapping of Gate, optional
        The gates `gate` follows (directly or through others).
    detect : {'rectified', 'envelope'}, default 'rectified'
        Gate ``|rf|`` (or the rectified data) or the Hilbert envelope.
    depth_from : str, default 'auto'
        Where depth zero is: 'entry' (pulse entry, from ``zero_offset_us``),
        the name of a gate in the follow chain (its event), or 'auto'
        (the first gate of the chain on immersion grids, else 'entry').
    reference_fsh : float, optional
        Adds ``amplitude_db``, the amplitude in dB re this level.
    dac : DacCurve, optional
        Adds ``amplitude_db_re_dac`` at the event depth.
    echo_hold_us : float, optional
        First-crossing mode: how long the signal must stay below the
        threshold to end the crossing echo; default one probe period.
    kernel : {'compiled', 'numpy'}, optional
        The implementation: 'compiled' (numba; reads the recorded samples
        once, converting each to %FSH on the fly) or 'numpy' (the
        reference). Both give the same numbers. Default: the environment
        variable ``NDTMAP_KERNEL`` if set, else 'compiled'.

    Returns
    -------
    xarray.Dataset on (scan, index)
        ``triggered`` (bool), ``amplitude_fsh`` (NaN where missing),
        ``time_us``, ``sound_path_mm``, ``depth_mm``, ``surface_distance_mm``
        (NaN where not triggered or missing); for a following gate also
        ``window_start_us``, ``window_end_us``, ``outside_record``. Attrs: the
        grid's global attributes, the gate definition (``gate`` as JSON and
        ``gate_*`` fields) and a provenance step ``gate``.

    Raises
    ------
    GateError
        Window outside the record or narrower than a sample, a followed
        gate not given, a follow cycle, a bad `depth_from`.

    Examples
    --------
    >>> from ndtmap.grid.examples import example_grid
    >>> g = example_grid((4.0,))                        # echo at 11.84 mm in steel
    >>> r = evaluate_gate(g, Gate("bw", 10.0, 14.0))
    >>> bool(r.triggered.all()), round(float(r.depth_mm[0, 0]), 2)
    (True, 11.84)
    """
    grid = check_grid(grid)
    table = _gate_table(gate, others)
    if not isinstance(depth_from, str):
        raise ParameterTypeError(f"`depth_from` must be text, got {type(depth_from).__name__}")
    ev = _Evaluator(grid, table, detect, echo_hold_us, kernel)
    return ev.dataset(gate.name, depth_from=depth_from, reference_fsh=reference_fsh, dac=dac)


def evaluate_gates(
    grid: xr.Dataset,
    gates: Iterable[Gate] | Mapping[str, Gate],
    *,
    detect: str = "rectified",
    depth_from: str = "auto",
    reference_fsh: float | None = None,
    dac: DacCurve | None = None,
    echo_hold_us: float | None = None,
    kernel: str | None = None,
) -> dict[str, xr.Dataset]:
    """Evaluate several named gates (any number, following each other or not).

    Each gate is evaluated once, also when others follow it. Options as in
    :func:`evaluate_gate` (`depth_from` applies to every gate: use 'auto' or
    'entry' here; `kernel` chooses the implementation).

    Returns
    -------
    dict of str to xarray.Dataset
        One result per gate, in the order given.

    Examples
    --------
    >>> from ndtmap.grid.examples import example_grid
    >>> g = example_grid((4.0, 8.0))
    >>> bw1 = Gate("bw1", 10.0, 14.0)
    >>> bw2 = Gate("bw2", 8.0, 16.0, follows="bw1")
    >>> res = evaluate_gates(g, [bw1, bw2])
    >>> round(float(res["bw2"].depth_mm[0, 0]), 2)     # second echo, from pulse entry
    23.68
    """
    if isinstance(gates, Gate):
        gates = [gates]
    gates = list(gates.values()) if isinstance(gates, Mapping) else list(gates)
    if not gates:
        raise ParameterError("`gates` is empty; give at least one Gate")
    grid = check_grid(grid)
    table = _gate_table(gates[0], gates[1:])
    ev = _Evaluator(grid, table, detect, echo_hold_us, kernel)
    return {g.name: ev.dataset(g.name, depth_from=depth_from, reference_fsh=reference_fsh, dac=dac) for g in gates}


def gate_window_us(grid: xr.Dataset, gate: Gate) -> tuple[float, float]:
    """The window of a non-following gate in us on the grid's time axis.

    Raises
    ------
    GateError
        When the gate follows another (its window then moves per A-scan) or
        lies outside the record.

    Examples
    --------
    >>> from ndtmap.grid.examples import example_grid
    >>> a, b = gate_window_us(example_grid(), Gate("bw", 10.0, 14.0))
    >>> round(a, 4), round(b, 4)
    (3.3784, 4.7297)
    """
    grid = check_grid(grid)
    if not isinstance(gate, Gate):
        raise ParameterTypeError(f"`gate` must be a Gate, got {type(gate).__name__}")
    if gate.follows is not None:
        raise GateError(f"gate {gate.name!r} follows {gate.follows!r}; its window moves with that gate's event")
    return _Evaluator(grid, {gate.name: gate}, "rectified", None).window_us(gate)
