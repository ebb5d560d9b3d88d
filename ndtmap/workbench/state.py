"""The workbench's state: a plain-Python object that holds the settings and the selection and calls the library.

:class:`WorkbenchState` knows the scan grid, the settings (one
:class:`~ndtmap.procedure.Procedure`: gates, detection and sizing), which
gate and which kind of map are shown, the selected probe position, the tool
in use and the measured line. Every number it gives comes from the same
functions as the command line: gates from :func:`ndtmap.gates.evaluate_gate`,
maps from :func:`ndtmap.scans.amplitude_map`, :func:`~ndtmap.scans.depth_map`,
:func:`~ndtmap.scans.thickness_map` and :func:`~ndtmap.scans.backwall_loss_map`,
sections from :func:`ndtmap.scans.b_scan` and :func:`~ndtmap.scans.d_scan`,
drop lengths from :func:`ndtmap.indications.drop_length`, the indication list
from :func:`ndtmap.procedure.run_procedure` (so ``ndtmap indications
--procedure`` on the saved settings gives the same list). Time and depth
are converted by the grid's :class:`~ndtmap.grid.geometry.PartConstants`.

The state draws nothing and has no widgets; :mod:`ndtmap.workbench.view`
shows it. All methods are synchronous, so a script or a test can drive it
without a browser. Long computations accept a ``progress`` function.

Settings
    The settings are one frozen :class:`~ndtmap.procedure.Procedure`
    (:attr:`WorkbenchState.settings`); every edit makes a new one. Gate levels
    given in dB re the back wall are turned into %FSH once, when the state is
    made, with the back-wall level measured on the grid; :meth:`procedure`
    gives the settings as they are saved (such levels in dB again).

Maps
    Gate results are kept in a cache keyed by the definitions of the gate and
    the gates it follows (and the detection signal), so redrawing, changing
    the kind of map or going back to an earlier gate setting does not
    recompute: each map is made by the library function of its kind from the
    cached result (``result=``), one pass over the A-scans per gate. On an
    immersion grid the thickness under a gate that follows the interface gate
    is measured from the interface echo (``method='interface-to-backwall'``),
    which evaluates both gates again on the cut record. Rectified gates are
    evaluated on the grid cut to the time span their windows can reach (see
    :mod:`ndtmap.workbench._compute`). The indication list is cached by the
    procedure it was listed with.
"""

from __future__ import annotations

import math
import os
import threading
from collections import OrderedDict
from collections.abc import Iterable
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr

from ndtmap._shared import mapgeom as mg
from ndtmap._shared.arrays import is_lazy
from ndtmap._shared.caution import CAUTION
from ndtmap._shared.validate import finite_float, nonnegative_float, one_of, positive_float
from ndtmap.errors import GateError, NdtmapError, ParameterError, ParameterTypeError, SizingError
from ndtmap.gates import (
    DEFAULT_THRESHOLD_FSH,
    GATE_UNITS,
    Gate,
    evaluate_gate,
    evaluate_gates,
    gate_chain,
    gate_window_us,
)
from ndtmap.grid.geometry import part_constants
from ndtmap.grid.schema import ascan_in_fsh, check_grid, grid_attr, missing_ascans
from ndtmap.indications import LengthResult, RecordingCurve, detect_indications, drop_length, map_detection_level
from ndtmap.plot import GateMark, IndicationOutline, SectionGate
from ndtmap.plot import indication_outlines as outlines_on_map
from ndtmap.procedure import Analysis, Procedure, first_look_procedure, load_procedure, run_procedure
from ndtmap.procedure import save_procedure as write_procedure
from ndtmap.scans import MAP_KINDS, amplitude_map, b_scan, backwall_loss_map, d_scan, depth_map, thickness_map
from ndtmap.signal import DacCurve, detected_signal
from ndtmap.workbench import _compute as cx

__all__ = ["TOOLS", "WorkbenchState", "AScanView", "DropMeasurement", "default_procedure"]

TOOLS = ("inspect", "measure")
DETECT_KINDS = ("rectified", "envelope")
#: Gate results kept in the cache (each is a few (scan, index) float maps).
CACHE_SIZE = 24
#: Indication lists kept (each with its maps).
ANALYSIS_CACHE_SIZE = 4
#: Fields of a gate the gate panel changes.
GATE_FIELDS = ("start", "end", "unit", "threshold_fsh", "mode", "follows")
_KEEP: Any = object()  # an argument left out: the setting stays as it is
#: Settings compared with the procedure the workbench started from.
_SETTINGS = ("detection_gate", "backwall_gate", "backwall_nominal_fsh", "backwall_loss_threshold_db", "min_area_mm2",
             "min_positions", "detect", "edge", "recording")


@dataclass(frozen=True)
class AScanView:
    """The A-scan at the selected position, with every gate evaluated there (depths in mm)."""

    scan_mm: float
    index_mm: float
    time_us: np.ndarray = field(repr=False)
    depth_mm: np.ndarray = field(repr=False)
    signal_fsh: np.ndarray = field(repr=False)
    rf_fsh: np.ndarray | None = field(repr=False)
    detect: str
    missing: bool
    gates: tuple[GateMark, ...]


@dataclass(frozen=True)
class DropMeasurement:
    """A drop length measured along a user's line on the amplitude map of a gate.

    Attributes
    ----------
    line_mm : ((scan0, index0), (scan1, index1))
        The line as drawn, mm.
    gate : str
        The gate whose amplitude map was measured.
    drop_db : float
        The drop (6: the 6 dB drop, half the indication's peak).
    indication_peak_fsh : float
        Peak of the indication the line crosses, %FSH.
    indication_peak_mm : (float, float)
        Its position.
    level_fsh : float
        The level the length is measured at, %FSH.
    result : ndtmap.indications.sizing.LengthResult
        Length, uncertainty, end points and notes from
        :func:`ndtmap.indications.sizing.drop_length`.
    distance_mm, profile_fsh : numpy.ndarray
        The amplitude profile along the line (bilinear samples, NaN outside
        the map), distance from the line's start.
    crossings_distance_mm : (float, float) or None
        Distance of the two ends of the length from the line's start.
    """

    line_mm: tuple[tuple[float, float], tuple[float, float]]
    gate: str
    drop_db: float
    indication_peak_fsh: float
    indication_peak_mm: tuple[float, float]
    level_fsh: float
    result: LengthResult
    distance_mm: np.ndarray = field(repr=False, compare=False)
    profile_fsh: np.ndarray = field(repr=False, compare=False)
    crossings_distance_mm: tuple[float, float] | None = None

    def summary(self) -> str:
        """One line for people: the length with its uncertainty and the level."""
        r = self.result
        if r.length_mm is None:
            return f"{r.method}: no length ({'; '.join(r.notes) or 'the line stays below the level'})"
        bound = " (lower bound: reaches the map edge)" if r.lower_bound else ""
        return (
            f"{r.method} length {r.length_mm:.1f} \u00b1 {r.uncertainty_mm:.1f} mm{bound} at "
            f"{self.level_fsh:.1f} %FSH (peak {self.indication_peak_fsh:.1f} %FSH), gate {self.gate}"
        )

    def length_ends_mm(self) -> tuple[tuple[float, float], tuple[float, float]] | None:
        """The two ends of the length on the plan, (scan, index) mm, or None without a length."""
        r = self.result
        if r.start_mm is None or r.end_mm is None:
            return None
        return (float(r.start_mm[0]), float(r.start_mm[1])), (float(r.end_mm[0]), float(r.end_mm[1]))


def default_procedure(grid: xr.Dataset) -> Procedure:
    """The procedure a workbench opens with when none is given.

    The first-look procedure (:func:`ndtmap.procedure.first_look_procedure`)
    where it can be derived; otherwise (angle beams, no back wall in the
    record) one gate over the middle 80 % of the recorded depth at
    :data:`ndtmap.gates.DEFAULT_THRESHOLD_FSH`.
    """
    try:
        return first_look_procedure(grid)
    except NdtmapError:
        pass
    d0, d1 = part_constants(grid).record_depth_mm()
    top = max(0.0, d0)
    gate = Gate("gate A", round(top + 0.1 * (d1 - top), 2), round(d1 - 0.1 * (d1 - top), 2),
                threshold_fsh=DEFAULT_THRESHOLD_FSH)
    return Procedure(
        name="workbench default (one gate)",
        description=(f"One gate over the middle 80 % of the recorded depth at {DEFAULT_THRESHOLD_FSH:g} %FSH, set by "
                     "the workbench."),
        gates=(gate,),
        detection_gate=gate.name,
    )


def _nearest(coord: np.ndarray, value: float) -> int:
    return int(np.argmin(np.abs(coord - value)))


def _as_procedure(procedure: Any, grid: xr.Dataset) -> Procedure:
    if procedure is None:
        return default_procedure(grid)
    if isinstance(procedure, Procedure):
        return procedure
    if isinstance(procedure, str | os.PathLike):
        return load_procedure(procedure)
    raise ParameterTypeError(
        f"`procedure` must be a Procedure, the path of a procedure file or None, got {type(procedure).__name__}"
    )


class WorkbenchState:
    """What the workbench shows and the results behind it.

    Parameters
    ----------
    grid : xarray.Dataset
        A scan grid (in memory or dask-backed).
    procedure : Procedure or path, optional
        Gates, detection and sizing settings to start from; default
        :func:`default_procedure`.
    source : str, optional
        Where the grid came from (shown, and named in results).

    Raises
    ------
    GridError, ProcedureError, GateError
        For a grid that is not valid, or a procedure that does not fit it.

    Examples
    --------
    >>> from ndtmap.grid.examples import example_grid
    >>> st = WorkbenchState(example_grid((4.0,), (60.0,)))   # a back-wall echo at 11.84 mm
    >>> st.gate_names
    ('flaw', 'backwall')
    >>> st.set_active_gate("backwall")
    >>> round(float(st.map().max()), 1), round(float(st.map("thickness")[0, 0]), 2)
    (60.0, 11.84)
    """

    def __init__(self, grid: xr.Dataset, *, procedure: Procedure | str | os.PathLike[str] | None = None,
                 source: str | None = None) -> None:
        grid = check_grid(grid)
        proc = _as_procedure(procedure, grid)
        self.source = source
        self._raw_grid = grid
        if proc.velocity_m_s is not None or proc.zero_offset_us is not None:
            from ndtmap.grid.calibration import calibrate  # only for a procedure that calibrates

            grid = calibrate(grid, velocity_m_s=proc.velocity_m_s, zero_offset_us=proc.zero_offset_us,
                             note=f"procedure {proc.name}")
        self.grid = grid
        self._pc = part_constants(grid)
        self._scan = np.asarray(grid["scan"].values, dtype=np.float64)
        self._index = np.asarray(grid["index"].values, dtype=np.float64)
        self._base = proc
        self._settings = proc
        self.notes: list[str] = []
        self._lock = threading.RLock()
        self._cache: OrderedDict[Any, Any] = OrderedDict()
        self._missing: xr.DataArray | None | bool = False  # False: not computed yet
        self._analyses: OrderedDict[Procedure, tuple[Analysis, list[IndicationOutline] | None]] = OrderedDict()
        self._sections: dict[Any, Any] = {}
        for g in proc.gates:  # every window must fit the record
            cx.chain_bounds_us(self.grid, gate_chain(proc.gates, g.name), "rectified")
        if any(g.needs_reference for g in proc.gates):  # levels in dB re the back wall: measure it once
            nominal = self._backwall_level_fsh()
            self._settings = replace(proc, gates=tuple(g.with_reference_fsh(nominal) for g in proc.gates))
        self.active_gate = proc.detection_gate
        self.map_kind = "amplitude"
        self.tool = "inspect"
        self.show_below_threshold = True
        self.drop_db = 6.0
        self.point: tuple[float, float] = (
            float(self._scan[self._scan.size // 2]), float(self._index[self._index.size // 2]))
        self.measure_points: list[tuple[float, float]] = []
        self._line: tuple[tuple[float, float], tuple[float, float]] | None = None
        self._line_gate: str | None = None
        self._measurement: tuple[Any, DropMeasurement] | None = None
        self.selected_indication: int | None = None

    def _backwall_level_fsh(self) -> float:
        """The nominal back-wall level of the procedure, %FSH (given, or the median over the scan)."""
        proc = self._settings
        bw = proc.gate(proc.backwall_gate)
        loss = backwall_loss_map(self.grid, bw, nominal_fsh=proc.backwall_nominal_fsh, detect=proc.detect,
                                 result=self.gate_result(bw.name))
        return float(loss.attrs["nominal_fsh"])

    # ------------------------------------------------------------------ description
    @property
    def caution(self) -> str:
        """The caution every result of ndtmap carries."""
        return CAUTION

    @property
    def settings(self) -> Procedure:
        """The current settings: gates (levels in %FSH, as evaluated), detection and sizing."""
        return self._settings

    @property
    def gates(self) -> tuple[Gate, ...]:
        """All gates, in order."""
        return self._settings.gates

    @property
    def gate_names(self) -> tuple[str, ...]:
        return tuple(g.name for g in self._settings.gates)

    def gate(self, name: str | None = None) -> Gate:
        """The gate called `name` (default: the active gate)."""
        name = self.active_gate if name is None else name
        for g in self._settings.gates:
            if g.name == name:
                return g
        raise GateError(f"no gate named {name!r}; gates: {list(self.gate_names)}")

    @property
    def scan_mm(self) -> np.ndarray:
        return self._scan.copy()

    @property
    def index_mm(self) -> np.ndarray:
        return self._index.copy()

    def describe(self) -> str:
        """A one-line description of the grid: part, source, size."""
        part = self.grid.attrs.get("part_id", "part not named")
        where = f" \u00b7 {Path(self.source).name}" if self.source else ""
        n = self.grid.sizes
        return (f"{part}{where} \u00b7 {n['scan']} \u00d7 {n['index']} positions \u00d7 {n['time']} samples \u00b7 "
                f"{grid_attr(self.grid, 'probe_frequency_mhz'):g} MHz, {grid_attr(self.grid, 'velocity_m_s'):g} m/s")

    # ------------------------------------------------------------------ gates
    def _check_gates(self, gates: Iterable[Gate], changed: str) -> None:
        """Raise GateError unless every chain through the gate `changed` resolves and fits the record."""
        table = {g.name: g for g in gates}
        for name in [changed] + [n for n in table if n != changed]:
            chain = gate_chain(table, name)
            if any(g.name == changed for g in chain):
                cx.chain_bounds_us(self.grid, chain, "rectified")

    def _with_gate(self, new: Gate) -> Gate:
        gates = [new if g.name == new.name else g for g in self._settings.gates]
        if new.name not in self.gate_names:
            gates.append(new)
        with self._lock:
            self._check_gates(gates, new.name)
            self._settings = self._settings.with_gate(new)
        return new

    def set_gate(self, gate: Gate | str, **changes: Any) -> Gate:
        """Replace a gate, or change fields of the gate called `gate`.

        Parameters
        ----------
        gate : Gate or str
            A whole new definition (replacing the gate of the same name), or
            the name of the gate to change.
        **changes
            Fields of :class:`~ndtmap.gates.Gate` to change: ``start``,
            ``end``, ``unit``, ``threshold_fsh``, ``mode``, ``follows``.

        Returns
        -------
        Gate
            The new definition.

        Raises
        ------
        GateError
            An invalid field, a window outside the record (also of a gate
            that follows this one), an unknown gate or a follow cycle. The
            state is left unchanged.
        """
        if isinstance(gate, Gate):
            if changes:
                raise ParameterError("give either a whole Gate or the name of a gate with changes, not both")
            if gate.name not in self.gate_names:
                raise GateError(f"no gate named {gate.name!r}; use add_gate to add one "
                                f"(gates: {list(self.gate_names)})")
            return self._with_gate(gate)
        if not isinstance(gate, str):
            raise ParameterTypeError(f"`gate` must be a Gate or a gate name, got {type(gate).__name__}")
        old = self.gate(gate)
        unknown = sorted(set(changes) - set(GATE_FIELDS))
        if unknown:
            raise ParameterError(f"unknown gate field(s) {unknown}; change {', '.join(GATE_FIELDS)}")
        if "follows" in changes and changes["follows"] in ("", "none", "None"):
            changes["follows"] = None
        return self._with_gate(replace(old, **changes))

    def convert_unit(self, name: str, unit: str) -> Gate:
        """Give the gate called `name` in `unit` ('mm' depth or 'us' time), the same window.

        The time <-> depth mapping is the grid's
        :class:`~ndtmap.grid.geometry.PartConstants` (a following gate's window
        counts from the followed event, without the zero offset). The new
        start and end are rounded to 1e-4 of the unit, far less than a sample.
        """
        one_of("unit", unit, GATE_UNITS)
        g = self.gate(name)
        if g.unit == unit:
            return g
        pc = self._pc
        ends = np.array([g.start, g.end], dtype=np.float64)
        if unit == "us":
            new = pc.time_us_at_depth(ends) if g.follows is None else ends / pc.depth_per_us()
        else:
            new = pc.depth_mm(ends) if g.follows is None else pc.depth_mm(ends, from_us=0.0)
        return self.set_gate(name, start=round(float(new[0]), 4), end=round(float(new[1]), 4), unit=unit)

    def add_gate(self, gate: Gate | str) -> Gate:
        """Add a gate: a whole definition, or a name (a copy of the active gate's window under that name).

        Raises
        ------
        GateError
            A name already used, or a window outside the record.
        """
        if isinstance(gate, str):
            name = gate.strip()
            if not name:
                raise GateError("a new gate needs a name; type one, e.g. 'backwall 2'")
            gate = replace(self.gate(), name=name)
        elif not isinstance(gate, Gate):
            raise ParameterTypeError(f"`gate` must be a Gate or a name, got {type(gate).__name__}")
        if gate.name in self.gate_names:
            raise GateError(f"a gate named {gate.name!r} exists already; choose another name")
        return self._with_gate(gate)

    def remove_gate(self, name: str) -> None:
        """Remove the gate called `name`.

        Raises
        ------
        GateError
            For the last gate, a gate that another follows, the gate the
            indication list searches (choose another first) or the back-wall
            gate while a level is in dB re the back wall.
        """
        self.gate(name)
        proc = self._settings
        if len(proc.gates) == 1:
            raise GateError(f"gate {name!r} is the only gate; add another before removing it")
        followers = [g.name for g in proc.gates if g.follows == name]
        if followers:
            raise GateError(f"gate {name!r} is followed by {followers}; remove or detach those first")
        if name == proc.detection_gate:
            raise GateError(f"gate {name!r} is the gate the indication list searches; choose another "
                            "detection gate first")
        changes: dict[str, Any] = {"gates": tuple(g for g in proc.gates if g.name != name)}
        if proc.backwall_gate == name:
            self._check_no_backwall_levels(name)
            changes.update(backwall_gate=None, backwall_nominal_fsh=None, backwall_loss_threshold_db=None)
        with self._lock:
            self._settings = replace(proc, **changes)
            if self.active_gate == name:
                self.active_gate = proc.detection_gate

    def _check_no_backwall_levels(self, name: str) -> None:
        levels = [g.name for g in self._settings.gates if g.reference == "backwall"]
        if levels:
            raise GateError(f"the level of gate(s) {levels} is in dB re the back wall; gate {name!r} measures it, so "
                            "it stays the back-wall gate")

    def set_active_gate(self, name: str) -> None:
        """Show and edit the gate called `name`."""
        self.gate(name)
        self.active_gate = name

    def set_map_kind(self, kind: str) -> None:
        """Show a map of this kind: 'amplitude', 'depth', 'thickness' or 'backwall-loss'."""
        self.map_kind = one_of("kind", kind, MAP_KINDS)

    def set_detect(self, detect: str) -> None:
        """Detection signal of all gates: 'rectified' or 'envelope' (RF grids)."""
        detect = one_of("detect", detect, DETECT_KINDS)
        if detect == "envelope" and self.grid["ascan"].attrs.get("signal", "rf") != "rf":
            raise ParameterError("`detect`='envelope' needs RF A-scans but the grid is rectified; use 'rectified'")
        self._settings = replace(self._settings, detect=detect)

    def set_tool(self, tool: str) -> None:
        """'inspect' (a click selects a position) or 'measure' (clicks pick the ends of a line)."""
        self.tool = one_of("tool", tool, TOOLS)
        self.measure_points = []

    # ------------------------------------------------------------------ detection settings
    def set_detection(self, *, detection_gate: Any = _KEEP, backwall_gate: Any = _KEEP, loss_threshold_db: Any = _KEEP,
                      min_area_mm2: Any = _KEEP) -> Procedure:
        """Change the settings of the indication list at once (arguments left out stay as they are).

        Parameters
        ----------
        detection_gate : str, optional
            The gate searched for indications.
        backwall_gate : str or None, optional
            The back-wall gate (loss indications, DGS reference, thickness);
            None (or 'none') for none.
        loss_threshold_db : float or None, optional
            List back-wall-loss indications where the back wall drops at
            least this much (None or 0: off; left out where there is no
            back-wall gate).
        min_area_mm2 : float, optional
            Smallest detected area of an indication, mm^2.

        Returns
        -------
        Procedure
            The new settings.

        Raises
        ------
        GateError, ParameterError, ProcedureError
            The settings are left as they were.
        """
        proc = self._settings
        changes: dict[str, Any] = {}
        if detection_gate is not _KEEP:
            self.gate(detection_gate)
            changes["detection_gate"] = detection_gate
        bw = proc.backwall_gate if backwall_gate is _KEEP else (None if backwall_gate in (None, "", "none") else
                                                                 backwall_gate)
        if bw is None and proc.backwall_gate is not None:
            self._check_no_backwall_levels(proc.backwall_gate)
        if bw is not None:
            self.gate(bw)
        if bw == changes.get("detection_gate", proc.detection_gate):
            raise GateError(f"gate {bw!r} is both the gate the indication list searches and the back-wall gate; "
                            "choose another for one of them")
        changes["backwall_gate"] = bw
        if bw != proc.backwall_gate:
            changes["backwall_nominal_fsh"] = None
        loss = proc.backwall_loss_threshold_db if loss_threshold_db is _KEEP else loss_threshold_db
        changes["backwall_loss_threshold_db"] = (None if bw is None or not loss else
                                                 positive_float("loss_threshold_db", loss))
        if min_area_mm2 is not _KEEP:
            changes["min_area_mm2"] = nonnegative_float("min_area_mm2", min_area_mm2)
        self._settings = replace(proc, **changes)
        return self._settings

    def set_detection_gate(self, name: str) -> None:
        """Search the gate called `name` for indications."""
        self.set_detection(detection_gate=name)

    def set_backwall_gate(self, name: str | None) -> None:
        """The back-wall gate (loss indications, DGS reference, thickness), or None."""
        self.set_detection(backwall_gate=name)

    def set_loss_threshold_db(self, value: float | None) -> None:
        """Report back-wall-loss indications where the back wall drops at least this much (None or 0: off)."""
        if value and self._settings.backwall_gate is None:
            raise GateError("a back-wall-loss level needs a back-wall gate; choose one first")
        self.set_detection(loss_threshold_db=value or None)

    def set_min_area_mm2(self, value: float) -> None:
        """Smallest detected area of an indication, mm^2."""
        self.set_detection(min_area_mm2=value)

    # ------------------------------------------------------------------ maps
    def missing_mask(self, progress: cx.Progress | None = None) -> xr.DataArray | None:
        """The missing-A-scan mask of the whole grid (None when nothing is missing); computed once."""
        if self._missing is False:
            mask = cx.computed(missing_ascans(self.grid), progress, "finding missing A-scans")
            self._missing = mask if bool(mask.any()) else None
        return self._missing  # type: ignore[return-value]

    def gate_key(self, name: str | None = None) -> tuple[Any, ...]:
        """Cache key of a gate: its definition, those of the gates it follows, the detection signal (and the
        recording curve of a gate whose level is re the DAC)."""
        chain = gate_chain(self.gates, self.gate(name).name)
        key = cx.chain_key(chain, self._settings.detect)
        return (*key, self._settings.recording) if any(g.level_re_curve for g in chain) else key

    def recording_curve(self, *, progress: cx.Progress | None = None) -> DacCurve | None:
        """The settings' recording curve as the indication list uses it: the DAC, or the DGS curve built from
        the measured back-wall echo (None without a [recording] curve)."""
        rec = self._settings.recording
        if rec is None:
            return None
        if rec.kind == "dac":
            return rec.dac
        return self.analysis(progress=progress).curve

    def _gates_curve(self) -> DacCurve | None:
        """The recording curve when a gate has its level re the DAC (its events need it), else None."""
        return self.recording_curve() if any(g.level_re_curve for g in self.gates) else None

    def set_recording(self, recording: RecordingCurve | None) -> Procedure:
        """Change the recording curve (DAC points or a DGS level; None for none) of the settings.

        Raises
        ------
        ProcedureError
            A gate has its level re the DAC and `recording` is None, or a DGS
            level from the back wall without a back-wall gate; the settings
            are left as they were.
        """
        self._settings = replace(self._settings, recording=recording)
        return self._settings

    def has_gate_result(self, name: str | None = None) -> bool:
        """True when the result of the gate is in the cache (no computation needed)."""
        return self.gate_key(name) in self._cache

    def _cached(self, key: Any, make: Any) -> Any:
        with self._lock:
            if key in self._cache:
                self._cache.move_to_end(key)
                return self._cache[key]
        value = make()
        with self._lock:
            self._cache[key] = value
            while len(self._cache) > CACHE_SIZE:
                self._cache.popitem(last=False)
        return value

    def _cut_grid(self, chain: list[Gate], detect: str, progress: cx.Progress | None) -> xr.Dataset:
        missing = self.missing_mask(progress) if detect == "rectified" else None
        return cx.in_slabs(cx.crop_to_chain(self.grid, chain, detect, missing))

    def gate_result(self, name: str | None = None, *, progress: cx.Progress | None = None) -> xr.Dataset:
        """The gate's result on every A-scan (:func:`ndtmap.gates.evaluate_gate`), in memory, cached."""
        gate = self.gate(name)
        chain = gate_chain(self.gates, gate.name)
        detect = self._settings.detect

        curve = self.recording_curve(progress=progress) if any(g.level_re_curve for g in chain) else None

        def make() -> xr.Dataset:
            res = evaluate_gate(self._cut_grid(chain, detect, progress), gate, others=chain[1:], detect=detect,
                                dac=curve)
            return cx.computed(res, progress, f"gate {gate.name}")

        return self._cached(self.gate_key(gate.name), make)

    def _thickness(self, g: Gate, res: xr.Dataset, progress: cx.Progress | None) -> xr.DataArray:
        """Wall thickness under gate `g`: from pulse entry, or from the interface echo on an immersion grid."""
        detect = self._settings.detect
        if res.attrs.get("depth_reference", "entry") == "entry":
            return thickness_map(self.grid, g, detect=detect, result=res)
        chain = gate_chain(self.gates, g.name)  # g follows the interface gate, chain[-1]

        def make() -> xr.DataArray:
            out = thickness_map(self._cut_grid(chain, detect, progress), g, reference_gate=chain[-1],
                                method="interface-to-backwall", others=chain[1:-1], detect=detect)
            return cx.computed(out, progress, f"thickness under gate {g.name}")

        return self._cached(("thickness", cx.chain_key(chain, detect)), make)

    def map(self, kind: str | None = None, gate: str | None = None, *,
            progress: cx.Progress | None = None) -> xr.DataArray:
        """The map of `kind` (default: the shown kind) for `gate` (default: the active gate).

        The map of the library function of its kind (:mod:`ndtmap.scans.maps`),
        made from the gate's cached result: what ``ndtmap map --kind`` computes.
        The back-wall loss is taken re the procedure's nominal back-wall level
        for the back-wall gate, else re the median over the scan.

        Returns
        -------
        xarray.DataArray (scan, index)
            With ``units``, ``long_name``, the grid and gate attributes and
            the provenance of the library function.
        """
        kind = one_of("kind", self.map_kind if kind is None else kind, MAP_KINDS)
        g = self.gate(gate)
        res = self.gate_result(g.name, progress=progress)
        proc = self._settings
        if kind == "amplitude":
            return amplitude_map(self.grid, g, detect=proc.detect, result=res)
        if kind == "depth":
            return depth_map(self.grid, g, detect=proc.detect, result=res)
        if kind == "thickness":
            return self._thickness(g, res, progress)
        nominal = proc.backwall_nominal_fsh if g.name == proc.backwall_gate else None
        return backwall_loss_map(self.grid, g, nominal_fsh=nominal, detect=proc.detect, result=res)

    # ------------------------------------------------------------------ selection, A-scan, sections
    def select_point(self, scan_mm: float, index_mm: float) -> tuple[float, float]:
        """Select the probe position nearest to (`scan_mm`, `index_mm`); return its coordinates.

        Raises
        ------
        ParameterError
            For a point outside the scanned area (by more than half a step).
        """
        s = finite_float("scan_mm", scan_mm)
        i = finite_float("index_mm", index_mm)
        for name, v, c in (("scan_mm", s, self._scan), ("index_mm", i, self._index)):
            half = 0.5 * (float(np.median(np.diff(c))) if c.size > 1 else 1.0)
            if v < c[0] - half or v > c[-1] + half:
                raise ParameterError(f"`{name}` must lie within the scanned range {c[0]:g} to {c[-1]:g} mm, "
                                     f"got {v:g}")
        self.point = (float(self._scan[_nearest(self._scan, s)]), float(self._index[_nearest(self._index, i)]))
        return self.point

    def point_indices(self) -> tuple[int, int]:
        """Array indices (scan, index) of the selected position."""
        return _nearest(self._scan, self.point[0]), _nearest(self._index, self.point[1])

    def _depth_mm(self, time_us: Any) -> np.ndarray:
        """Depth (mm) of pulse-echo times (us), by the grid's PartConstants."""
        return np.asarray(self._pc.depth_mm(np.asarray(time_us, dtype=np.float64)), dtype=np.float64)

    def _window_depths(self, sub: xr.Dataset, g: Gate, r: xr.Dataset, squeeze: dict[str, int],
                       n: int) -> tuple[np.ndarray, np.ndarray]:
        """Depths of the gate window at the positions of `sub` (fixed, or from the result of a following gate)."""
        if g.follows is None:
            a, b = gate_window_us(sub, g)
            return self._depth_mm(np.full(n, a)), self._depth_mm(np.full(n, b))
        return self._depth_mm(r["window_start_us"].isel(squeeze).values), \
            self._depth_mm(r["window_end_us"].isel(squeeze).values)

    def ascan(self) -> AScanView:
        """The A-scan at the selected position with every gate (window, threshold, event) evaluated there."""
        i, j = self.point_indices()
        detect = self._settings.detect
        sub = self.grid.isel(scan=[i], index=[j])
        sig = np.asarray(cx.computed(detected_signal(sub, detect), None, "").values[0, 0], dtype=np.float64)
        rf = None
        if self.grid["ascan"].attrs.get("signal", "rf") == "rf":
            rf = np.asarray(cx.computed(ascan_in_fsh(sub), None, "").values[0, 0], dtype=np.float64)
        missing = bool(cx.computed(missing_ascans(sub), None, "").values[0, 0])
        results = evaluate_gates(sub, list(self.gates), detect=detect, dac=self._gates_curve())
        marks = []
        for g in self.gates:
            r = cx.computed(results[g.name], None, "")
            start, end = (float(v[0]) for v in self._window_depths(sub, g, r, {"scan": 0}, 1))
            trig = bool(r["triggered"].values[0, 0])
            t_ev = float(r["time_us"].values[0, 0])
            amp = float(r["amplitude_fsh"].values[0, 0])
            marks.append(GateMark(
                gate=g, start_at=start if math.isfinite(start) else None, end_at=end if math.isfinite(end) else None,
                triggered=trig, event_at=float(self._depth_mm(t_ev)) if trig and math.isfinite(t_ev) else None,
                event_amplitude_fsh=amp if math.isfinite(amp) else None,
            ))
        return AScanView(
            scan_mm=self.point[0], index_mm=self.point[1], time_us=self._pc.time_us.copy(),
            depth_mm=self._depth_mm(self._pc.time_us), signal_fsh=sig, rf_fsh=rf, detect=detect, missing=missing,
            gates=tuple(marks),
        )

    def _section(self, along: str) -> tuple[xr.DataArray, tuple[SectionGate, ...]]:
        i, j = self.point_indices()
        detect = self._settings.detect
        key = (along, i if along == "index" else j, detect, self.gates)
        with self._lock:
            if key in self._sections:
                return self._sections[key]
        if along == "scan":  # B-scan: the line along scan at the selected index position
            sub = self.grid.isel(index=[j])
            sec = b_scan(sub, float(self._index[j]), detect=detect)
            pos, squeeze = self._scan, {"index": 0}
        else:  # D-scan: the line along index at the selected scan position
            sub = self.grid.isel(scan=[i])
            sec = d_scan(sub, float(self._scan[i]), detect=detect)
            pos, squeeze = self._index, {"scan": 0}
        sec = cx.computed(sec, None, "")
        results = evaluate_gates(sub, list(self.gates), detect=detect, dac=self._gates_curve())
        lines = []
        for g in self.gates:
            r = cx.computed(results[g.name], None, "")
            ws, we = self._window_depths(sub, g, r, squeeze, pos.size)
            lines.append(SectionGate(g.name, pos.copy(), ws, we, self._depth_mm(r["time_us"].isel(squeeze).values)))
        out = (sec, tuple(lines))
        with self._lock:
            if len(self._sections) > 16:
                self._sections.clear()
            self._sections[key] = out
        return out

    def b_scan(self) -> xr.DataArray:
        """B-scan (scan, time) through the selected position (:func:`ndtmap.scans.b_scan`, nearest line)."""
        return self._section("scan")[0]

    def d_scan(self) -> xr.DataArray:
        """D-scan (index, time) through the selected position (:func:`ndtmap.scans.d_scan`, nearest line)."""
        return self._section("index")[0]

    def section_gates(self, along: str) -> tuple[SectionGate, ...]:
        """The gates along the B-scan (`along`='scan') or the D-scan ('index') through the selected position."""
        return self._section(one_of("along", along, ("scan", "index")))[1]

    # ------------------------------------------------------------------ measuring
    def add_measure_point(self, scan_mm: float, index_mm: float) -> DropMeasurement | None:
        """Pick one end of the measuring line; the second pick measures (and the next starts a new line)."""
        p = (finite_float("scan_mm", scan_mm), finite_float("index_mm", index_mm))
        if len(self.measure_points) >= 2:
            self.measure_points = []
        self.measure_points.append(p)
        if len(self.measure_points) == 2:
            p0, p1 = self.measure_points
            return self.measure(p0, p1)
        return None

    def measure(self, start_mm: tuple[float, float], end_mm: tuple[float, float], *,
                drop_db: float | None = None, gate: str | None = None) -> DropMeasurement:
        """Measure the drop length along the line `start_mm` -> `end_mm` on the amplitude map of `gate`.

        The line must cross an indication of that map (a region at or above
        the gate's threshold, :func:`ndtmap.indications.detect_indications`);
        of those it crosses, the one with the highest amplitude on the line
        is measured, by :func:`ndtmap.indications.drop_length` with ``line=``.

        Raises
        ------
        SizingError
            When the line crosses no indication.
        """
        if drop_db is not None:
            self.drop_db = positive_float("drop_db", drop_db)
        p0, p1 = mg.point_pair("line", (start_mm, end_mm))
        self._line = (p0, p1)
        if gate is not None:
            self.set_active_gate(gate)
        self._line_gate = self.active_gate
        self._measurement = None
        return self._measure()

    def _measure_key(self, gate: str) -> tuple[Any, ...]:
        return (self._line, self.gate_key(gate), self.drop_db, self._settings.edge)

    def _measure(self) -> DropMeasurement:
        assert self._line is not None
        p0, p1 = self._line
        gname = self._line_gate if self._line_gate in self.gate_names else self.active_gate
        g = self.gate(gname)
        key = self._measure_key(g.name)
        if self._measurement is not None and self._measurement[0] == key:
            return self._measurement[1]
        amp = self.map("amplitude", g.name)
        scan, index = self._scan, self._index
        if scan.size < 2 or index.size < 2:
            raise SizingError("measuring along a line needs a map with at least two positions on both axes")
        step = 0.25 * float(min(mg.cell_widths(scan).min(), mg.cell_widths(index).min()))  # as drop_length
        values = np.asarray(amp.values, dtype=np.float64)
        dist, pts, prof = mg.sample_line(values, scan, index, p0, p1, step)
        inside = mg.inside_map(pts, scan, index) & np.isfinite(prof)
        cells = mg.nearest_cell(pts, scan, index)
        best, best_value = None, -math.inf
        level = map_detection_level(amp)  # the gate's own level (per position for a level re the DAC)
        for ind in detect_indications(amp, **level):
            hit = ind.region[cells] & inside
            if hit.any() and float(prof[hit].max()) > best_value:
                best, best_value = ind, float(prof[hit].max())
        if best is None:
            raise SizingError(
                f"the line ({p0[0]:g}, {p0[1]:g}) -> ({p1[0]:g}, {p1[1]:g}) mm crosses no indication at or above "
                f"the threshold of gate {g.name!r} ({g.level_text()}); draw it through an indication or "
                "lower the threshold"
            )
        res = drop_length(amp, best, drop_db=self.drop_db, line=(p0, p1), edge=self._settings.edge)
        crossings = None
        if res.start_mm is not None and res.end_mm is not None:
            crossings = (float(math.hypot(res.start_mm[0] - p0[0], res.start_mm[1] - p0[1])),
                         float(math.hypot(res.end_mm[0] - p0[0], res.end_mm[1] - p0[1])))
        m = DropMeasurement(
            line_mm=(p0, p1), gate=g.name, drop_db=self.drop_db, indication_peak_fsh=float(values[best.peak_position]),
            indication_peak_mm=(best.scan_mm, best.index_mm),
            level_fsh=float(res.level_fsh) if res.level_fsh is not None else float("nan"), result=res,
            distance_mm=dist, profile_fsh=prof, crossings_distance_mm=crossings,
        )
        self._measurement = (key, m)
        return m

    @property
    def line(self) -> tuple[tuple[float, float], tuple[float, float]] | None:
        """The measuring line, if one is drawn."""
        return self._line

    def measurement(self) -> DropMeasurement | None:
        """The measurement along the current line, remeasured when its gate changed (None without a line)."""
        if self._line is None:
            return None
        return self._measure()

    def cached_measurement(self) -> DropMeasurement | None:
        """The last measurement if it is still valid for the current gate definitions (never computes)."""
        if self._line is None or self._measurement is None:
            return None
        key, m = self._measurement
        try:
            current = self._measure_key(m.gate)
        except NdtmapError:
            return None
        return m if key == current else None

    def clear_measurement(self) -> None:
        """Remove the measuring line."""
        self._line = None
        self._measurement = None
        self.measure_points = []

    # ------------------------------------------------------------------ procedure and indications
    def procedure(self) -> Procedure:
        """The current settings as a procedure (what :meth:`save_procedure` writes).

        Levels in dB re the back wall are saved as such (the back wall is
        measured again on every run); a screening-rules path is made absolute.
        Settings changed from those the workbench started with are named as
        saved from the workbench.
        """
        base, cur = self._base, self._settings
        gates = tuple(replace(g, threshold_fsh=None) if g.reference == "backwall" else g for g in cur.gates)
        rules = base.rules_path()
        changes: dict[str, Any] = dict(gates=gates, base_dir=None, rules=str(rules.resolve()) if rules else None)
        unchanged = gates == base.gates and all(getattr(cur, k) == getattr(base, k) for k in _SETTINGS)
        changes["first_look"] = base.first_look and unchanged
        if not unchanged:
            changes["name"] = base.name if base.name.endswith("(workbench)") else f"{base.name} (workbench)"
            changes["description"] = (
                "Settings saved from the ndtmap workbench" + (f", starting from: {base.description}"
                                                             if base.description else ".")
            )
        return replace(cur, **changes)

    def save_procedure(self, path: str | os.PathLike[str]) -> Path:
        """Write the current settings as a procedure file (TOML) that ``ndtmap indications --procedure`` replays.

        A screening-rules path is written relative to the new file's folder
        when possible.
        """
        p = Path(path)
        if p.suffix.lower() != ".toml":
            raise ParameterError(f"`path` of a procedure file must end in .toml, got {str(p)!r}")
        if not p.parent.exists():
            raise ParameterError(f"the folder of `path` {str(p.parent)!r} does not exist; create it first")
        proc = self.procedure()
        if proc.rules is not None:
            try:
                proc = replace(proc, rules=os.path.relpath(proc.rules, p.parent.resolve()))
            except ValueError:  # another drive
                pass
        return write_procedure(proc, p)

    def _listed(self, proc: Procedure) -> tuple[Analysis, list[IndicationOutline] | None] | None:
        with self._lock:
            if proc in self._analyses:
                self._analyses.move_to_end(proc)
                return self._analyses[proc]
        return None

    def analysis(self, *, progress: cx.Progress | None = None) -> Analysis:
        """:func:`ndtmap.procedure.run_procedure` on the grid with the current settings (cached by procedure)."""
        proc = self.procedure()
        done = self._listed(proc)
        if done is not None:
            return done[0]
        if progress is not None:
            progress(None, "listing indications")
        if is_lazy(self._raw_grid):
            with cx.dask_progress(progress, "listing indications"):
                result = run_procedure(self._raw_grid, proc, source=self.source)
        else:
            result = run_procedure(self._raw_grid, proc, source=self.source)
        with self._lock:
            self._analyses[proc] = (result, None)
            while len(self._analyses) > ANALYSIS_CACHE_SIZE:
                self._analyses.popitem(last=False)
        return result

    def has_analysis(self) -> bool:
        """True when the indication list of the current settings is computed."""
        try:
            return self._listed(self.procedure()) is not None
        except NdtmapError:
            return False

    def indications(self, *, progress: cx.Progress | None = None) -> list[dict[str, Any]]:
        """The sized indications of the detection gate at its level (as ``ndtmap indications``)."""
        return self.analysis(progress=progress).indications

    def indication_outlines(self) -> list[IndicationOutline]:
        """Outlines of the listed indications on the maps they were sized on (empty before the list is made).

        Amplitude indications on the detection gate's amplitude map, back-wall-loss
        indications on the back-wall-loss map (:func:`ndtmap.plot.indication_outlines`).
        """
        proc = self.procedure()
        done = self._listed(proc)
        if done is None:
            return []
        result, outlines = done
        if outlines is None:
            recs = result.indications
            outlines = outlines_on_map([r for r in recs if r["kind"] == "amplitude"], result.maps["amplitude"])
            loss = [r for r in recs if r["kind"] != "amplitude"]
            if loss and "backwall_loss" in result.maps:
                outlines += outlines_on_map(loss, result.maps["backwall_loss"])
            with self._lock:
                self._analyses[proc] = (result, outlines)
        return outlines

    def pick_indication(self, ident: int) -> dict[str, Any]:
        """Select indication `ident`: the selected position moves to its peak. Returns its record."""
        for rec in self.indications():
            if rec["id"] == ident:
                self.selected_indication = int(ident)
                self.select_point(rec["scan_mm"], rec["index_mm"])
                return rec
        raise ParameterError(f"no indication {ident!r}; the list has {[r['id'] for r in self.indications()]}")

    def selected_record(self) -> dict[str, Any] | None:
        """The record of the selected indication, if it is still in the list."""
        if self.selected_indication is None or not self.has_analysis():
            return None
        for rec in self.indications():
            if rec["id"] == self.selected_indication:
                return rec
        return None
