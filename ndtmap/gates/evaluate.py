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
    ``'peak'``: the highest sample in the window. Amplitude = its value.
    The event time, on RF grids gated on the rectified signal, is the time
    of the echo's envelope, not of the highest carrier crest: the envelope
    (the modulus of the analytic signal, its Hilbert transform from a FIR
    filter four carrier periods long on either side, reading the record
    around the window) is climbed from the highest sample to its maximum,
    and the event is the centroid of the envelope above half that maximum
    (the echo between its -6 dB points), sub-sample. A crest is off the
    echo's time by up to a quarter period, and two crests of near-equal
    height make the timing jump by half a period between neighbouring
    A-scans. On rectified grids (no phase left) and with
    ``detect='envelope'`` the time is the vertex of the parabola through
    the highest sample and its two neighbours (when both lie in the window;
    else the sample time). Triggered when amplitude >= threshold.
    ``'first-crossing'`` (flank): the first sample at or above the threshold.
    The event time is interpolated linearly between it and the sample
    before (if the signal is already above the threshold when the gate
    opens, the event is the first sample in the window). Amplitude = the
    peak of the echo that crosses: the highest sample from the crossing to
    the end of that echo, which ends where the signal stays below the
    threshold for one probe period (``echo_hold_us``; this bridges the
    zero crossings of an RF echo) or at the end of the window. Triggered
    when a crossing exists; otherwise the amplitude is the window maximum.
    The crossing is that of the rectified signal (a crest that reaches the
    threshold), so its time still depends on the carrier phase by up to
    half a period; use 'peak' for depths and thicknesses.

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

Amplitude re a recording curve (DAC)
    With a curve (``dac=``, :class:`ndtmap.signal.DacCurve`) the gate is also
    run on ``100 A(t) / DAC(d(t))`` (:func:`ndtmap.signal.detected_re_curve`,
    a software TCG by 1/DAC, depth from pulse entry): ``amplitude_db_re_dac``
    is ``20 log10`` of the maximum of ``A(t) / DAC(t)`` over the window, so a
    deep echo above the curve is not hidden by a stronger shallow one below
    it. A gate whose level is in dB re the DAC (``reference='dac'``) is
    evaluated on that signal only: it triggers where the ratio reaches its
    level, its event is where the ratio peaks, and ``amplitude_fsh`` is the
    A-scan amplitude there. A window that leaves the curve's recorded depths
    is refused when the curve's rule is 'refuse'.

Clipping
    ``clipped`` (scan, index): the echo of the event reached the digitiser
    full scale (``digitiser_full_scale_fsh``, default 100 %FSH) in the
    recorded samples. On a grid from :func:`ndtmap.signal.apply_tcg` it is
    read from the grid's ``clipped`` mask within half a probe period of the
    event (a gain after digitising neither clips nor unclips); otherwise it
    is ``amplitude_fsh >= full scale`` (within 0.1 %).

Implementation
    All outputs of a gate come from one read of the gated window. The
    default kernel ('compiled', numba) reads the recorded samples (int16
    counts or float32) and converts, rectifies and compares each sample on
    the fly; the numpy kernel ('numpy', :func:`ndtmap.gates.kernels.reference_gate_kernel`) is the
    reference it is tested against, bit for bit. Choose with
    ``kernel=`` or the environment variable ``NDTMAP_KERNEL``. Figures:
    docs/performance.md.
"""

from __future__ import annotations

import json
import math
from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
import xarray as xr

from ndtmap._shared.arrays import is_lazy, netcdf_safe, result_attrs, whole_time
from ndtmap._shared.validate import one_of, positive_float
from ndtmap.errors import CalibrationError, GateError, ParameterError, ParameterTypeError
from ndtmap.gates.gate import Gate, gate_chain, gate_table
from ndtmap.gates.kernels import (
    choose_kernel,
    gate_kernel_blocked,
    gate_kernel_windows,
    gate_outputs_compiled,
    threads_for,
)
from ndtmap.gates.timing import hilbert_taps
from ndtmap.grid.geometry import part_constants
from ndtmap.grid.provenance import with_step
from ndtmap.grid.schema import ascan_in_fsh, check_grid, grid_attr, missing_ascans
from ndtmap.signal import (
    CLIP_RTOL,
    DETECTIONS,
    DacCurve,
    db_re,
    detected_re_curve,
    detected_signal,
    full_scale_fsh,
)

__all__ = [
    "evaluate_gate",
    "evaluate_gates",
    "gate_window_us",
    "gate_time_span_us",
    "is_immersion",
    "timing_reach_samples",
]

_EPS = 1e-6  # fraction of a sample: tolerance of window edges against sample times


def is_immersion(grid: xr.Dataset) -> bool:
    """True when the grid records an immersion (or water-gap) test: it has ``water_path_mm`` or
    ``water_velocity_m_s``."""
    return "water_path_mm" in grid.attrs or "water_velocity_m_s" in grid.attrs


@dataclass
class _Raw:
    amplitude: xr.DataArray
    triggered: xr.DataArray
    time: xr.DataArray
    window: tuple[float, float]  # absolute (fixed) or relative (following) window, us
    outside: xr.DataArray | None = None
    window_start: xr.DataArray | None = None
    window_end: xr.DataArray | None = None
    event: xr.DataArray | None = None  # event time before masking by `triggered` (for the clipped state)
    base: int = 0  # first sample of the array the sample numbers of the window count from
    ratio: xr.DataArray | None = None  # peak of 100 A/DAC over the window, % of the curve (with a curve)
    level: xr.DataArray | None = None  # the curve's level where the ratio peaks, %FSH (gate with a level re DAC)


def _clipped_near(mask: np.ndarray, sample: np.ndarray, *, before: int, after: int) -> np.ndarray:
    """True where `mask` holds a True sample from ``sample - before`` to ``sample + after`` (NaN sample: False)."""
    mask = np.asarray(mask, dtype=bool)
    n = mask.shape[-1]
    counts = np.concatenate([np.zeros(mask.shape[:-1] + (1,), np.int64), np.cumsum(mask, axis=-1)], axis=-1)
    s = np.asarray(sample, dtype=np.float64)
    known = np.isfinite(s)
    centre = np.where(known, np.round(np.where(known, s, 0.0)), 0.0).astype(np.int64)
    lo = np.clip(centre - before, 0, n)[..., None]
    hi = np.clip(centre + after + 1, 0, n)[..., None]
    found = (np.take_along_axis(counts, hi, axis=-1) - np.take_along_axis(counts, lo, axis=-1))[..., 0] > 0
    return found & known


class _Evaluator:
    """Evaluates named gates on one grid, each once, following gates after the gates they follow.

    It holds the part constants and the time axis, turns each gate's window
    into sample numbers (per A-scan for a following gate), checks windows
    against the record, runs the chosen kernel through ``xr.apply_ufunc``
    (so a dask-backed grid gives lazy results), applies the gate's mode and
    level, and memoises the raw result of every gate so that a gate followed
    by several others is read once. :meth:`dataset` turns a raw result into
    the labelled result of :func:`evaluate_gate`.
    """

    def __init__(self, grid: xr.Dataset, table: dict[str, Gate], detect: str, echo_hold_us: float | None,
                 kernel: str | None = None, curve: DacCurve | None = None) -> None:
        self.grid = grid
        if curve is not None and not isinstance(curve, DacCurve):
            raise ParameterTypeError(f"`dac` must be a DacCurve (from dac_curve), got {type(curve).__name__}")
        self.curve = curve
        self._ratio: xr.DataArray | None = None
        self.table = table
        self.detect = one_of("detect", detect, DETECTIONS[:2])
        self.kernel = choose_kernel(kernel)
        self.pc = part_constants(grid)
        t = self.pc.time_us
        self.t_first, self.t_last, self.n = float(t[0]), float(t[-1]), t.size
        if echo_hold_us is None:
            f = float(grid_attr(grid, "probe_frequency_mhz"))
            echo_hold_us = 1.0 / f
        self.echo_hold_us = positive_float("echo_hold_us", echo_hold_us)
        self.hold = max(1, int(round(self.echo_hold_us / self.pc.dt_us)))
        self.taps = _envelope_taps(grid, self.detect, self.pc.dt_us)
        self.reach = 0 if self.taps is None else 2 * self.taps.size - 1  # samples the envelope filter reads
        self._signal: xr.DataArray | None = None
        self._missing: xr.DataArray | None = None
        self._memo: dict[str, _Raw] = {}
        self._bounds: dict[str, tuple[float, float]] = {}

    @property
    def signal(self) -> xr.DataArray:
        """What the numpy kernel reads: the detection signal, or the RF samples when it times on the envelope."""
        if self._signal is None:
            if self.taps is None:
                self._signal = detected_signal(self.grid, self.detect)
            else:
                rf = ascan_in_fsh(self.grid).copy(deep=False)
                rf.attrs = {"units": "%FSH", "long_name": f"A-scan amplitude ({self.detect})"}  # as detected_signal
                self._signal = rf
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

    @property
    def ratio_signal(self) -> xr.DataArray:
        """100 A(t) / DAC(t), % of the recording curve (software TCG by 1/DAC)."""
        if self._ratio is None:
            self._ratio = detected_re_curve(self.grid, self.curve, self.detect)
        return self._ratio

    def ok_mask(self, ratio: bool = False) -> xr.DataArray | None:
        """Positions whose results stand (not missing), or None when the kernel has already masked them."""
        if ratio or not self.reads_record:
            return ~self.missing
        if "missing" in self.grid.data_vars:
            return ~self.grid["missing"].astype(bool)
        return None

    def _compiled_input(self, ratio: bool = False) -> tuple[xr.DataArray, dict[str, Any]]:
        """The array the compiled kernel reads and its per-sample conversion."""
        if ratio or not self.reads_record:
            sig = whole_time(self.ratio_signal if ratio else self.signal)
            return sig, {"scale": 1.0, "rectify": False, "check_record": False, "threads": threads_for(sig)}
        a = self.grid["ascan"]
        integer = np.issubdtype(a.dtype, np.integer)
        scale = float(a.attrs.get("fsh_per_count", 1.0)) if integer else 1.0
        rectify = str(a.attrs.get("signal", "rf")) == "rf"
        a = a.copy(deep=False)
        a.attrs = {"units": "%FSH", "long_name": f"A-scan amplitude ({self.detect})"}  # as detected_signal
        a = whole_time(a)
        return a, {"scale": scale, "rectify": rectify, "check_record": not integer, "threads": threads_for(a),
                   "hilbert_taps": self.taps}

    def _numpy_timing(self) -> dict[str, Any]:
        """The numpy kernel's arguments for envelope timing (none when it reads the detection signal)."""
        return {} if self.taps is None else {"rectify": True, "hilbert_taps": self.taps}

    def check_curve_range(self, gate: Gate) -> None:
        """Refuse a window that leaves the recorded depths of a curve whose rule is 'refuse'."""
        if self.curve.outside != "refuse":
            return
        t0, t1 = self.bounds(gate.name)
        d0, d1 = (float(v) for v in self.pc.depth_mm(np.array([t0, t1])))
        lo, hi = self.curve.range_mm
        tol = 1e-6 * max(1.0, abs(hi))
        if d0 < lo - tol or d1 > hi + tol:
            raise CalibrationError(
                f"gate {gate.name!r}: its window reaches depths {d0:.4g} to {d1:.4g} mm, outside the "
                f"{self.curve.label}'s recorded range {lo:g} to {hi:g} mm, and the curve refuses to extrapolate; "
                "narrow the gate, add reference points, or build the curve with outside='conservative' or 'extrapolate'"
            )

    def relative_us(self, gate: Gate) -> tuple[float, float]:
        if gate.unit == "us":
            return gate.start, gate.end
        per_mm = 1.0 / self.pc.depth_per_us()  # us of pulse-echo time per mm of depth
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

    def _run(self, gate: Gate, threshold: float, ratio: bool) -> tuple[Any, tuple[float, float], Any, Any, Any, int]:
        """The kernel's four outputs over the gate's window, on the detection signal or on 100 A/DAC (`ratio`)."""
        dt = self.pc.dt_us
        kwargs: dict[str, Any] = {"dt_us": dt, "threshold": threshold, "hold": self.hold}
        reach = 0 if ratio else self.reach  # the envelope filter's reach beyond the window (RF timing only)
        outside = w_start = w_end = None
        if gate.follows is None:
            a, b = self.window_us(gate)
            i0 = int(max(0, self._sample(a, np.ceil)))
            i1 = int(min(self.n - 1, self._sample(b, np.floor)))
            m0, m1 = max(0, i0 - reach), min(self.n - 1, i1 + reach)  # the slice the kernel reads
            kwargs["t0_us"] = self.t_first + m0 * dt
            if self.kernel == "compiled":
                data, conversion = self._compiled_input(ratio)
                kwargs.update(conversion, base=m0, length=m1 - m0 + 1, start=float(i0 - m0), end=float(i1 - m0))
                outs = xr.apply_ufunc(
                    gate_outputs_compiled, data, input_core_dims=[["time"]], output_core_dims=[[], [], [], []],
                    kwargs=kwargs, dask="allowed",
                )
            else:
                sig = whole_time((self.ratio_signal if ratio else self.signal).isel(time=slice(m0, m1 + 1)))
                kwargs.update({} if ratio else self._numpy_timing(), i_start=float(i0 - m0), i_end=float(i1 - m0))
                outs = xr.apply_ufunc(
                    gate_kernel_blocked, sig, input_core_dims=[["time"]], output_core_dims=[[], [], [], []],
                    kwargs=kwargs, dask="parallelized", output_dtypes=[np.float64] * 4,
                )
            return outs, (a, b), None, None, None, m0
        a, b = self.relative_us(gate)
        lo, hi = self.bounds(gate.name)
        k0 = int(max(0, math.floor((lo - self.t_first) / dt) - 1 - reach))
        k1 = int(min(self.n - 1, math.ceil((hi - self.t_first) / dt) + 1 + reach))
        ref = self.evaluate(gate.follows).time
        w_start, w_end = ref + a, ref + b
        f0 = self._sample(w_start, np.ceil)
        f1 = self._sample(w_end, np.floor)
        outside = ref.notnull() & ((f0 < 0) | (f1 > self.n - 1))
        i0 = (f0 - k0).where(~outside)
        i1 = (f1 - k0).where(~outside)
        kwargs["t0_us"] = self.t_first + k0 * dt
        if self.kernel == "compiled":
            data, conversion = self._compiled_input(ratio)
            kwargs.update(conversion, base=k0, length=k1 - k0 + 1)
            outs = xr.apply_ufunc(
                gate_outputs_compiled, data, i0, i1, input_core_dims=[["time"], [], []],
                output_core_dims=[[], [], [], []], kwargs=kwargs, dask="allowed",
            )
        else:
            sig = whole_time((self.ratio_signal if ratio else self.signal).isel(time=slice(k0, k1 + 1)))
            kwargs.update({} if ratio else self._numpy_timing())
            outs = xr.apply_ufunc(
                gate_kernel_windows, sig, i0, i1, input_core_dims=[["time"], [], []],
                output_core_dims=[[], [], [], []], kwargs=kwargs, dask="parallelized",
                output_dtypes=[np.float64] * 4,
            )
        return outs, (a, b), outside, w_start, w_end, k0

    def evaluate(self, name: str) -> _Raw:
        if name in self._memo:
            return self._memo[name]
        gate = self.table[name]
        if gate.needs_reference:
            raise GateError(
                f"gate {name!r} has its level in dB re the back wall ({gate.level_text()}), which is not measured "
                "yet; give it with Gate.with_reference_fsh(back-wall level in %FSH) or run the gate in a procedure"
            )
        on_curve = gate.level_re_curve
        if on_curve:
            if self.curve is None:
                raise GateError(
                    f"gate {name!r} has its level in dB re the DAC ({gate.level_text()}); evaluate it with `dac` (a "
                    "DacCurve) or in a procedure with a [recording] curve"
                )
            self.check_curve_range(gate)
            threshold = 100.0 * 10.0 ** (float(gate.threshold_db) / 20.0)
        else:
            threshold = float(gate.threshold_fsh)
        outs, window, outside, w_start, w_end, base = self._run(gate, threshold, on_curve)
        peak, peak_time, cross_time, cross_peak = outs
        if gate.mode == "peak":
            trig = peak >= threshold
            amp = peak
            time = peak_time
            event = peak_time
        else:
            trig = cross_time.notnull()
            amp = cross_peak.where(trig, peak)
            time = cross_time
            event = cross_time.where(trig, peak_time)
        ratio = None
        level = None
        if on_curve:  # the amplitude re the curve, and the A-scan amplitude where the ratio peaks
            ratio = amp
            level = self.curve.level_fsh(self.pc.depth_mm(event))
            amp = ratio / 100.0 * level
        ok = self.ok_mask(on_curve)
        if ok is not None:
            amp = amp.where(ok)
            trig = trig & ok
            ratio = None if ratio is None else ratio.where(ok)
        trig = trig.astype(bool)
        time = time.where(trig)
        raw = _Raw(amp, trig, time, window, outside, w_start, w_end, event=event, base=base, ratio=ratio,
                   level=None if level is None else level.where(amp.notnull()))
        self._memo[name] = raw
        return raw

    def ratio_peak(self, name: str) -> xr.DataArray:
        """Maximum of 100 A(t)/DAC(t) over the window of gate `name` (% of the curve), NaN where missing."""
        raw = self.evaluate(name)
        if raw.ratio is None:
            gate = self.table[name]
            self.check_curve_range(gate)
            outs = self._run(gate, math.inf, True)[0]
            ok = self.ok_mask(True)
            raw.ratio = outs[0] if ok is None else outs[0].where(ok)
        return raw.ratio

    def clipped(self, name: str) -> xr.DataArray:
        """Whether the echo of the event reached the digitiser full scale in the recorded samples."""
        raw = self.evaluate(name)
        if "clipped" not in self.grid.data_vars:
            level = full_scale_fsh(self.grid) * (1.0 - CLIP_RTOL)
            return (raw.amplitude >= level).fillna(False).astype(bool)
        mask = whole_time(self.grid["clipped"].astype(bool))
        half = max(1, int(round(0.5 * self.echo_hold_us / self.pc.dt_us)))
        after = half + (self.hold if self.table[name].mode == "first-crossing" else 0)
        sample = (raw.event - self.t_first) / self.pc.dt_us
        out = xr.apply_ufunc(
            _clipped_near, mask, sample, input_core_dims=[["time"], []], kwargs={"before": half, "after": after},
            dask="parallelized", output_dtypes=[bool],
        )
        return out

    def reference_time(self, name: str, depth_from: str) -> tuple[Any, str]:
        gate = self.table[name]
        chain = [g.name for g in gate_chain(self.table, name)[1:]]
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
                strict: bool = True) -> xr.Dataset:
        gate = self.table[name]
        raw = self.evaluate(name)
        t_ref, ref_name = self.reference_time(name, depth_from)
        pc = self.pc
        path = pc.sound_path_mm(raw.time, from_us=t_ref)
        label = f"gate {name}"
        data = {
            "triggered": raw.triggered.assign_attrs(units="1", long_name=f"{label} triggered"),
            "amplitude_fsh": raw.amplitude.assign_attrs(units="%FSH", long_name=f"{label} peak amplitude"),
            "time_us": raw.time.assign_attrs(units="us", long_name=f"{label} event time"),
            "sound_path_mm": path.assign_attrs(units="mm", long_name=f"{label} sound path"),
            "depth_mm": pc.depth_mm(raw.time, from_us=t_ref).assign_attrs(units="mm",
                                                                            long_name=f"{label} event depth"),
            "surface_distance_mm": (path * pc.sin_theta).assign_attrs(
                units="mm", long_name=f"{label} surface distance from the beam exit point"),
        }
        extra: dict[str, Any] = {}
        if reference_fsh is not None:
            ref = positive_float("reference_fsh", reference_fsh)
            data["amplitude_db"] = db_re(raw.amplitude, ref).assign_attrs(
                units="dB", long_name=f"{label} amplitude re {ref:g} %FSH")
            extra["reference_fsh"] = ref
        data["clipped"] = self.clipped(name).assign_attrs(
            units="1", long_name=f"{label} echo clipped by the digitiser")
        if self.curve is not None:
            try:
                ratio = self.ratio_peak(name)
            except CalibrationError as exc:  # a window beyond a refusing curve: only the gate asked for raises
                if strict or gate.level_re_curve:
                    raise
                ratio = None
                extra["dac_note"] = f"no amplitude re the curve: {exc}"
            if ratio is not None:
                with np.errstate(divide="ignore", invalid="ignore"):
                    db = 20.0 * np.log10(ratio / 100.0)
                data["amplitude_db_re_dac"] = db.assign_attrs(
                    units="dB", long_name=f"{label} amplitude re {self.curve.label} (maximum of A/DAC over the window)")
            extra["dac"] = json.dumps(self.curve.to_dict())
        if raw.level is not None:
            data["dac_level_fsh"] = raw.level.assign_attrs(
                units="%FSH", long_name=f"{label} {self.curve.label} level where A/DAC peaks")
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
            gate_threshold_fsh=netcdf_safe(gate.threshold_fsh), gate_mode=gate.mode,
            gate_follows=netcdf_safe(gate.follows),
            detect=self.detect, depth_reference=ref_name, echo_hold_us=self.echo_hold_us, **extra,
        )
        ds = xr.Dataset(data, attrs=attrs)
        params = {
            "gate": gate.to_dict(),
            "follows_chain": [g.to_dict() for g in gate_chain(self.table, name)[1:]],
            "detect": self.detect, "depth_reference": ref_name, "echo_hold_us": self.echo_hold_us,
        }
        params.update({k: v for k, v in extra.items() if k in ("reference_fsh", "dac")})
        return with_step(ds, "gate", params, source=self.grid)


def _envelope_taps(grid: xr.Dataset, detect: str, dt_us: float) -> np.ndarray | None:
    """The FIR Hilbert taps that time peak events on the envelope: RF grids gated on the rectified signal only."""
    if detect != "rectified" or str(grid["ascan"].attrs.get("signal", "rf")) != "rf":
        return None
    f = positive_float("probe_frequency_mhz", grid_attr(grid, "probe_frequency_mhz"))
    return hilbert_taps(1.0 / (f * dt_us))


def timing_reach_samples(grid: xr.Dataset, detect: str = "rectified") -> int:
    """Samples beyond a gate window that the event timing reads on either side (the envelope filter's reach).

    0 where the timing reads only the window (rectified grids, ``detect='envelope'``).

    Examples
    --------
    >>> from ndtmap.grid.examples import example_grid
    >>> timing_reach_samples(example_grid())   # 4 periods of 5 MHz at 50 MHz sampling, odd
    41
    """
    grid = check_grid(grid)
    taps = _envelope_taps(grid, one_of("detect", detect, DETECTIONS[:2]), part_constants(grid).dt_us)
    return 0 if taps is None else 2 * taps.size - 1


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
        The recording curve: adds ``amplitude_db_re_dac``, the maximum of
        ``A(t) / DAC(t)`` over the window in dB; needed by a gate whose level
        is in dB re the DAC (``reference='dac'``).
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
        (NaN where not triggered or missing), ``clipped`` (bool: the event's
        echo reached the digitiser full scale); for a following gate also
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
    table = gate_table(gate, others)
    if not isinstance(depth_from, str):
        raise ParameterTypeError(f"`depth_from` must be text, got {type(depth_from).__name__}")
    ev = _Evaluator(grid, table, detect, echo_hold_us, kernel, curve=dac)
    return ev.dataset(gate.name, depth_from=depth_from, reference_fsh=reference_fsh)


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
    'entry' here; `kernel` chooses the implementation). With a `dac` that
    refuses depths beyond its points, a gate whose window leaves them (and
    whose level is not re the DAC) gets no ``amplitude_db_re_dac`` and the
    attribute ``dac_note`` says why.

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
    table = gate_table(gates[0], gates[1:])
    ev = _Evaluator(grid, table, detect, echo_hold_us, kernel, curve=dac)
    return {g.name: ev.dataset(g.name, depth_from=depth_from, reference_fsh=reference_fsh, strict=False)
            for g in gates}


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


def gate_time_span_us(grid: xr.Dataset, gates: Iterable[Gate] | Mapping[str, Gate], name: str, *,
                      detect: str = "rectified") -> tuple[float, float]:
    """Earliest and latest time (us) at which the window of gate `name` can lie, checked against the record.

    For a fixed gate this is its window; for a following gate the window
    moved by every time the followed gate's event can take.

    Raises
    ------
    GateError
        A window (of the gate or of a gate it follows) outside the record,
        narrower than a sample, or a broken follow chain.

    Examples
    --------
    >>> from ndtmap.grid.examples import example_grid
    >>> bw1, bw2 = Gate("bw1", 10.0, 14.0), Gate("bw2", 8.0, 16.0, follows="bw1")
    >>> [round(t, 3) for t in gate_time_span_us(example_grid((4.0, 8.0)), [bw1, bw2], "bw2")]
    [6.081, 9.98]
    """
    grid = check_grid(grid)
    gates = list(gates.values()) if isinstance(gates, Mapping) else list(gates)
    chain = gate_chain({g.name: g for g in gates}, name)
    return _Evaluator(grid, {g.name: g for g in chain}, detect, None).bounds(name)
