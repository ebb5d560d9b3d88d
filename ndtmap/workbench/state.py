"""The workbench's state: a plain-Python object that holds the selection and calls the processing.

:class:`WorkbenchState` knows the scan grid, the named gates, which gate and
which kind of map are shown, the selected probe position, the tool in use,
the measured line and the indication list. Every number it gives comes from
the same functions as the command line: gates from
:func:`ndtmap.gates.evaluate.evaluate_gate`, sections from :func:`ndtmap.scans.sections.b_scan`
and :func:`~ndtmap.scans.sections.d_scan`, drop lengths from
:func:`ndtmap.indications.sizing.drop_length`, the indication list from
:func:`ndtmap.procedure.run_procedure` (so ``ndtmap indications --procedure``
on the saved settings gives the same list).

The state draws nothing and has no widgets; :mod:`ndtmap.workbench.view`
shows it. All methods are synchronous, so a script or a test can drive it
without a browser. Long computations accept a ``progress`` function.

Maps
    Gate results are kept in a cache keyed by the definitions of the gate and
    the gates it follows (and the detection signal), so redrawing, changing
    the kind of map or going back to an earlier gate setting does not
    recompute. The four kinds are read from one gate result:

    * ``'amplitude'``: the gate's ``amplitude_fsh`` (as
      :func:`ndtmap.scans.maps.amplitude_map`);
    * ``'depth'``: the event depth ``depth_mm`` (as :func:`~ndtmap.scans.maps.depth_map`);
    * ``'thickness'``: the event depth where positive (as
      :func:`~ndtmap.scans.maps.thickness_map` with ``method='first-echo'``; on an
      immersion grid a gate that follows the interface gate counts from the
      interface echo, i.e. interface to back wall);
    * ``'backwall-loss'``: ``20 log10(nominal / max(A, 0.1 %FSH))`` with the
      nominal level of the procedure's back-wall gate or the median over the
      scan (as :func:`~ndtmap.scans.maps.backwall_loss_map`).

    Rectified gates are evaluated on the grid cut to the time span their
    windows can reach (see :mod:`ndtmap.workbench._compute`).
"""

from __future__ import annotations

import math
import os
import threading
from collections import OrderedDict
from collections.abc import Mapping
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr

from ndtmap._shared import mapgeom as mg
from ndtmap._shared.arrays import is_lazy
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
from ndtmap.grid.provenance import with_step
from ndtmap.grid.schema import ascan_in_fsh, check_grid, grid_attr, missing_ascans
from ndtmap.indications.flags import FLAG_MEANINGS
from ndtmap.indications.sizing import LengthResult, drop_length
from ndtmap.procedure import Analysis, Procedure, load_procedure, procedure_to_toml, run_procedure
from ndtmap.scans import b_scan, backwall_loss_map, d_scan
from ndtmap.signal import detected_signal
from ndtmap.workbench import _compute as cx

__all__ = [
    "MAP_KINDS",
    "TOOLS",
    "WorkbenchState",
    "AScanView",
    "GateMark",
    "SectionGate",
    "DropMeasurement",
    "default_procedure",
]

MAP_KINDS = ("amplitude", "depth", "thickness", "backwall-loss")
TOOLS = ("inspect", "measure")
DETECT_KINDS = ("rectified", "envelope")
#: Gate results kept in the cache (each is a few (scan, index) float maps).
CACHE_SIZE = 24
#: Least back-wall amplitude used in the loss ratio, %FSH (as ndtmap.scans.maps.backwall_loss_map).
LOSS_FLOOR_FSH = 0.1


@dataclass(frozen=True)
class GateMark:
    """A gate as drawn on one A-scan: window in depth, threshold and the event found there."""

    name: str
    start_depth_mm: float | None
    end_depth_mm: float | None
    threshold_fsh: float
    mode: str
    follows: str | None
    triggered: bool
    event_depth_mm: float | None
    event_amplitude_fsh: float | None


@dataclass(frozen=True)
class AScanView:
    """The A-scan at the selected position, with the gates drawn on it."""

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
class SectionGate:
    """A gate along a section: window start and end depth (and the event) at every position of the line."""

    name: str
    position_mm: np.ndarray = field(repr=False)
    start_depth_mm: np.ndarray = field(repr=False)
    end_depth_mm: np.ndarray = field(repr=False)
    event_depth_mm: np.ndarray = field(repr=False)


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


def default_procedure(grid: xr.Dataset) -> Procedure:
    """The procedure a workbench opens with when none is given.

    The first-look procedure (:func:`ndtmap.procedure.first_look_procedure`)
    where it can be derived; otherwise (angle beams, no back wall in the
    record) one gate over the middle 80 % of the recorded depth at
    20 %FSH.
    """
    from ndtmap.procedure import first_look_procedure

    try:
        return first_look_procedure(grid)
    except NdtmapError:
        pass
    pc = part_constants(grid)
    k = pc.mm_per_us * pc.cos_theta
    d0 = (pc.time_us[0] - pc.zero_offset_us) * k
    d1 = (pc.time_us[-1] - pc.zero_offset_us) * k
    start = max(0.0, d0) + 0.1 * (d1 - max(0.0, d0))
    end = d1 - 0.1 * (d1 - max(0.0, d0))
    gate = Gate("gate A", round(start, 2), round(end, 2), threshold_fsh=DEFAULT_THRESHOLD_FSH)
    return Procedure(
        name="workbench default (one gate)",
        description=(f"One gate over the middle 80 % of the recorded depth at {DEFAULT_THRESHOLD_FSH:g} %FSH, set by "
                     "the workbench."),
        gates=(gate,),
        detection_gate=gate.name,
    )


def _nearest(coord: np.ndarray, value: float) -> int:
    return int(np.argmin(np.abs(coord - value)))


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
        if procedure is None:
            proc = default_procedure(grid)
        elif isinstance(procedure, Procedure):
            proc = procedure
        elif isinstance(procedure, str | os.PathLike):
            proc = load_procedure(procedure)
        else:
            raise ParameterTypeError(
                f"`procedure` must be a Procedure, the path of a procedure file or None, got {type(procedure).__name__}"
            )
        self.source = source
        self._raw_grid = grid
        if proc.velocity_m_s is not None or proc.zero_offset_us is not None:
            from ndtmap.grid.calibration import calibrate

            grid = calibrate(grid, velocity_m_s=proc.velocity_m_s, zero_offset_us=proc.zero_offset_us,
                             note=f"procedure {proc.name}")
        self.grid = grid
        self._pc = part_constants(grid)
        self._scan = np.asarray(grid["scan"].values, dtype=np.float64)
        self._index = np.asarray(grid["index"].values, dtype=np.float64)
        self._base = proc
        self.notes: list[str] = []
        self._gates: OrderedDict[str, Gate] = OrderedDict((g.name, g) for g in proc.gates)
        self.detect = proc.detect
        self.detection_gate = proc.detection_gate
        self.backwall_gate = proc.backwall_gate
        self.backwall_nominal_fsh = proc.backwall_nominal_fsh
        self.loss_threshold_db = proc.backwall_loss_threshold_db
        self.min_area_mm2 = proc.min_area_mm2
        self.min_positions = proc.min_positions
        self.edge = proc.edge
        if any(g.needs_reference for g in proc.gates):  # levels in dB re the back wall: measure it once
            bw = self._gates[proc.backwall_gate]
            loss = backwall_loss_map(self.grid, bw, nominal_fsh=proc.backwall_nominal_fsh, detect=proc.detect)
            nominal = float(loss.attrs["nominal_fsh"])
            self._gates = OrderedDict((n, g.with_reference_fsh(nominal)) for n, g in self._gates.items())
        for g in self._gates.values():  # every window must fit the record
            cx.chain_bounds_us(self.grid, gate_chain(self._gates, g.name), "rectified")
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
        self._cache: OrderedDict[Any, xr.Dataset] = OrderedDict()
        self._lock = threading.RLock()
        self._missing: xr.DataArray | None | bool = False  # False: not computed yet
        self._analysis: tuple[str, Analysis] | None = None
        self._sections: dict[Any, Any] = {}

    # ------------------------------------------------------------------ description
    @property
    def caution(self) -> str:
        """The caution every result of ndtmap carries."""
        from ndtmap import CAUTION

        return CAUTION

    @property
    def gates(self) -> tuple[Gate, ...]:
        """All gates, in order."""
        return tuple(self._gates.values())

    @property
    def gate_names(self) -> tuple[str, ...]:
        return tuple(self._gates)

    def gate(self, name: str | None = None) -> Gate:
        """The gate called `name` (default: the active gate)."""
        name = self.active_gate if name is None else name
        if name not in self._gates:
            raise GateError(f"no gate named {name!r}; gates: {list(self._gates)}")
        return self._gates[name]

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
    def _check_gates(self, table: Mapping[str, Gate], changed: str | None = None) -> None:
        names = [changed] if changed is not None else []
        names += [g.name for g in table.values() if g.name != changed]
        for name in names:
            chain = gate_chain(table, name)
            if changed is None or any(g.name == changed for g in chain):
                cx.chain_bounds_us(self.grid, chain, "rectified")

    def set_gate(self, gate: Gate | str, **changes: Any) -> Gate:
        """Replace a gate, or change fields of the gate called `gate`.

        Parameters
        ----------
        gate : Gate or str
            A whole new definition (replacing the gate of the same name), or
            the name of the gate to change.
        **changes
            Fields of :class:`~ndtmap.gates.evaluate.Gate` to change: ``start``,
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
            new = gate
            if new.name not in self._gates:
                raise GateError(f"no gate named {new.name!r}; use add_gate to add one (gates: {list(self._gates)})")
        elif isinstance(gate, str):
            old = self.gate(gate)
            unknown = sorted(set(changes) - {"start", "end", "unit", "threshold_fsh", "mode", "follows"})
            if unknown:
                raise ParameterError(f"unknown gate field(s) {unknown}; change start, end, unit, threshold_fsh, "
                                     "mode or follows")
            if "follows" in changes and changes["follows"] in ("", "none", "None"):
                changes["follows"] = None
            new = replace(old, **changes)
        else:
            raise ParameterTypeError(f"`gate` must be a Gate or a gate name, got {type(gate).__name__}")
        with self._lock:
            table = OrderedDict(self._gates)
            table[new.name] = new
            self._check_gates(table, new.name)
            self._gates = table
        return new

    def convert_unit(self, name: str, unit: str) -> Gate:
        """Give the gate called `name` in `unit` ('mm' depth or 'us' time), the same window.

        The new start and end are rounded to 1e-4 of the unit, far less
        than a sample.
        """
        one_of("unit", unit, GATE_UNITS)
        g = self.gate(name)
        if g.unit == unit:
            return g
        per_mm = 1.0 / (self._pc.mm_per_us * self._pc.cos_theta)  # us of pulse-echo time per mm of depth
        offset = self._pc.zero_offset_us if g.follows is None else 0.0
        if unit == "us":
            start, end = g.start * per_mm + offset, g.end * per_mm + offset
        else:
            start, end = (g.start - offset) / per_mm, (g.end - offset) / per_mm
        return self.set_gate(name, start=round(start, 4), end=round(end, 4), unit=unit)

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
            src = self.gate()
            gate = replace(src, name=name)
        elif not isinstance(gate, Gate):
            raise ParameterTypeError(f"`gate` must be a Gate or a name, got {type(gate).__name__}")
        if gate.name in self._gates:
            raise GateError(f"a gate named {gate.name!r} exists already; choose another name")
        with self._lock:
            table = OrderedDict(self._gates)
            table[gate.name] = gate
            self._check_gates(table, gate.name)
            self._gates = table
        return gate

    def remove_gate(self, name: str) -> None:
        """Remove the gate called `name`.

        Raises
        ------
        GateError
            For the last gate, a gate that another follows, or the gate the
            indication list searches (choose another first).
        """
        self.gate(name)
        if len(self._gates) == 1:
            raise GateError(f"gate {name!r} is the only gate; add another before removing it")
        followers = [g.name for g in self._gates.values() if g.follows == name]
        if followers:
            raise GateError(f"gate {name!r} is followed by {followers}; remove or detach those first")
        if name == self.detection_gate:
            raise GateError(f"gate {name!r} is the gate the indication list searches; choose another "
                            "detection gate first")
        with self._lock:
            table = OrderedDict(self._gates)
            del table[name]
            self._gates = table
            if self.backwall_gate == name:
                self.backwall_gate = None
                self.backwall_nominal_fsh = None
                self.loss_threshold_db = None
            if self.active_gate == name:
                self.active_gate = self.detection_gate

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
        self.detect = detect

    def set_tool(self, tool: str) -> None:
        """'inspect' (a click selects a position) or 'measure' (clicks pick the ends of a line)."""
        self.tool = one_of("tool", tool, TOOLS)
        self.measure_points = []

    def set_detection_gate(self, name: str) -> None:
        """Search the gate called `name` for indications."""
        self.gate(name)
        if name == self.backwall_gate:
            raise GateError(f"gate {name!r} is the back-wall gate; the indication list searches a flaw gate")
        self.detection_gate = name

    def set_backwall_gate(self, name: str | None) -> None:
        """The back-wall gate (loss indications, DGS reference, thickness), or None."""
        if name in (None, "", "none"):
            if any(g.reference == "backwall" for g in self._gates.values()):
                raise GateError("a gate's level is in dB re the back wall; it needs a back-wall gate")
            self.backwall_gate = None
            return
        self.gate(name)
        if name == self.detection_gate:
            raise GateError(f"gate {name!r} is the gate the indication list searches; choose another")
        if name != self.backwall_gate:
            self.backwall_nominal_fsh = None
        self.backwall_gate = name

    def set_loss_threshold_db(self, value: float | None) -> None:
        """Report back-wall-loss indications where the back wall drops at least this much (None or 0: off)."""
        if value is None or value == 0:
            self.loss_threshold_db = None
            return
        self.loss_threshold_db = positive_float("loss_threshold_db", value)

    def set_min_area_mm2(self, value: float) -> None:
        """Smallest detected area of an indication, mm^2."""
        self.min_area_mm2 = nonnegative_float("min_area_mm2", value)

    # ------------------------------------------------------------------ maps
    def missing_mask(self, progress: cx.Progress | None = None) -> xr.DataArray | None:
        """The missing-A-scan mask of the whole grid (None when nothing is missing); computed once."""
        if self._missing is False:
            mask = cx.computed(missing_ascans(self.grid), progress, "finding missing A-scans")
            self._missing = mask if bool(mask.any()) else None
        return self._missing  # type: ignore[return-value]

    def gate_key(self, name: str | None = None) -> tuple[Any, ...]:
        """Cache key of a gate: its definition, those of the gates it follows, the detection signal."""
        return cx.chain_key(gate_chain(self._gates, self.gate(name).name), self.detect)

    def has_gate_result(self, name: str | None = None) -> bool:
        """True when the result of the gate is in the cache (no computation needed)."""
        return self.gate_key(name) in self._cache

    def gate_result(self, name: str | None = None, *, progress: cx.Progress | None = None) -> xr.Dataset:
        """The gate's result on every A-scan (:func:`ndtmap.gates.evaluate.evaluate_gate`), in memory, cached."""
        gate = self.gate(name)
        chain = gate_chain(self._gates, gate.name)
        key = cx.chain_key(chain, self.detect)
        with self._lock:
            if key in self._cache:
                self._cache.move_to_end(key)
                return self._cache[key]
        missing = self.missing_mask(progress) if self.detect == "rectified" else None
        work = cx.crop_to_chain(self.grid, chain, self.detect, missing)
        work = cx.in_slabs(work)
        res = evaluate_gate(work, gate, others=chain[1:], detect=self.detect)
        res = cx.computed(res, progress, f"gate {gate.name}")
        with self._lock:
            self._cache[key] = res
            while len(self._cache) > CACHE_SIZE:
                self._cache.popitem(last=False)
        return res

    def map(self, kind: str | None = None, gate: str | None = None, *,
            progress: cx.Progress | None = None) -> xr.DataArray:
        """The map of `kind` (default: the shown kind) for `gate` (default: the active gate).

        Returns
        -------
        xarray.DataArray (scan, index)
            With ``units``, ``long_name``, the grid and gate attributes and a
            provenance step ``workbench_map``.
        """
        kind = one_of("kind", self.map_kind if kind is None else kind, MAP_KINDS)
        g = self.gate(gate)
        res = self.gate_result(g.name, progress=progress)
        attrs = dict(res.attrs)
        extra: dict[str, Any] = {}
        if kind == "amplitude":
            out, units, long_name, name = res["amplitude_fsh"], "%FSH", f"gate {g.name} peak amplitude", "amplitude_fsh"
        elif kind == "depth":
            out, units, long_name, name = res["depth_mm"], "mm", f"gate {g.name} event depth", "depth_mm"
        elif kind == "thickness":
            d = res["depth_mm"]
            out = d.where(d > 0)
            method = "interface-to-backwall" if attrs.get("depth_reference", "entry") != "entry" else "first-echo"
            units, long_name, name = "mm", f"wall thickness ({method}), gate {g.name}", "thickness_mm"
            extra["thickness_method"] = method
        else:
            amp = res["amplitude_fsh"]
            nominal = self.backwall_nominal_fsh if g.name == self.backwall_gate else None
            if nominal is None:
                nominal = float(np.nanmedian(np.asarray(amp.values, dtype=np.float64)))
                source = "median over the scan"
            else:
                source = "given"
            if not (math.isfinite(nominal) and nominal > 0):
                raise ParameterError(f"no positive nominal back-wall level in gate {g.name!r} (median {nominal!r} "
                                     "%FSH); move the gate onto the back-wall echo")
            out = 20.0 * np.log10(nominal / np.maximum(amp, LOSS_FLOOR_FSH))
            out = out.where(amp.notnull())
            units, long_name, name = "dB", f"back-wall loss, gate {g.name}", "backwall_loss_db"
            extra.update(nominal_fsh=nominal, nominal_source=source, floor_fsh=LOSS_FLOOR_FSH)
        out = out.copy(deep=False).rename(name)
        attrs.update(extra)
        attrs["units"] = units
        attrs["long_name"] = long_name
        attrs["map_kind"] = kind
        out.attrs = attrs
        return with_step(out, "workbench_map", {"kind": kind, "gate": g.to_dict(), "detect": self.detect},
                         source=res)

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

    def _depth_of_time(self, t_us: Any) -> Any:
        return self._pc.mm_per_us * (np.asarray(t_us, dtype=np.float64) - self._pc.zero_offset_us) * \
            self._pc.cos_theta

    def ascan(self) -> AScanView:
        """The A-scan at the selected position with every gate (window, threshold, event) evaluated there."""
        i, j = self.point_indices()
        sub = self.grid.isel(scan=[i], index=[j])
        sig = np.asarray(cx.computed(detected_signal(sub, self.detect), None, "").values[0, 0], dtype=np.float64)
        rf = None
        if self.grid["ascan"].attrs.get("signal", "rf") == "rf":
            rf = np.asarray(cx.computed(ascan_in_fsh(sub), None, "").values[0, 0], dtype=np.float64)
        missing = bool(cx.computed(missing_ascans(sub), None, "").values[0, 0])
        results = evaluate_gates(sub, list(self._gates.values()), detect=self.detect)
        marks = []
        for g in self._gates.values():
            r = cx.computed(results[g.name], None, "")
            if g.follows is None:
                a, b = gate_window_us(sub, g)
                start, end = float(self._depth_of_time(a)), float(self._depth_of_time(b))
            else:
                ws = float(r["window_start_us"].values[0, 0])
                we = float(r["window_end_us"].values[0, 0])
                start = float(self._depth_of_time(ws)) if math.isfinite(ws) else None
                end = float(self._depth_of_time(we)) if math.isfinite(we) else None
            trig = bool(r["triggered"].values[0, 0])
            t_ev = float(r["time_us"].values[0, 0])
            amp = float(r["amplitude_fsh"].values[0, 0])
            marks.append(GateMark(
                name=g.name, start_depth_mm=start, end_depth_mm=end, threshold_fsh=g.threshold_fsh, mode=g.mode,
                follows=g.follows, triggered=trig,
                event_depth_mm=float(self._depth_of_time(t_ev)) if trig and math.isfinite(t_ev) else None,
                event_amplitude_fsh=amp if math.isfinite(amp) else None,
            ))
        return AScanView(
            scan_mm=self.point[0], index_mm=self.point[1], time_us=self._pc.time_us.copy(),
            depth_mm=np.asarray(self._depth_of_time(self._pc.time_us)), signal_fsh=sig, rf_fsh=rf,
            detect=self.detect, missing=missing, gates=tuple(marks),
        )

    def _section(self, along: str) -> tuple[xr.DataArray, tuple[SectionGate, ...]]:
        i, j = self.point_indices()
        key = (along, i if along == "index" else j, self.detect, self.gate_names, tuple(self._gates.values()))
        with self._lock:
            if key in self._sections:
                return self._sections[key]
        if along == "scan":  # B-scan: the line along scan at the selected index position
            sub = self.grid.isel(index=[j])
            sec = b_scan(sub, float(self._index[j]), detect=self.detect)
            pos = self._scan
        else:  # D-scan: the line along index at the selected scan position
            sub = self.grid.isel(scan=[i])
            sec = d_scan(sub, float(self._scan[i]), detect=self.detect)
            pos = self._index
        sec = cx.computed(sec, None, "")
        results = evaluate_gates(sub, list(self._gates.values()), detect=self.detect)
        lines = []
        for g in self._gates.values():
            r = cx.computed(results[g.name], None, "")
            squeeze = {"index": 0} if along == "scan" else {"scan": 0}
            if g.follows is None:
                a, b = gate_window_us(sub, g)
                ws = np.full(pos.size, a)
                we = np.full(pos.size, b)
            else:
                ws = r["window_start_us"].isel(squeeze).values
                we = r["window_end_us"].isel(squeeze).values
            ev = r["time_us"].isel(squeeze).values
            lines.append(SectionGate(g.name, pos.copy(), self._depth_of_time(ws), self._depth_of_time(we),
                                     self._depth_of_time(ev)))
        out = (sec, tuple(lines))
        with self._lock:
            if len(self._sections) > 16:
                self._sections.clear()
            self._sections[key] = out
        return out

    def b_scan(self) -> xr.DataArray:
        """B-scan (scan, time) through the selected position (:func:`ndtmap.scans.sections.b_scan`, nearest line)."""
        return self._section("scan")[0]

    def d_scan(self) -> xr.DataArray:
        """D-scan (index, time) through the selected position (:func:`ndtmap.scans.sections.d_scan`, nearest line)."""
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
        the gate's threshold, :func:`ndtmap.indications.detection.detect_indications`);
        of those it crosses, the one with the highest amplitude on the line
        is measured, by :func:`ndtmap.indications.sizing.drop_length` with ``line=``.

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

    def _measure(self) -> DropMeasurement:
        from ndtmap.indications.detection import detect_indications

        assert self._line is not None
        p0, p1 = self._line
        gname = self._line_gate
        if gname is None or gname not in self._gates:
            gname = self.active_gate
        g = self.gate(gname)
        key = (self._line, self.gate_key(g.name), self.drop_db, self.edge)
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
        for ind in detect_indications(amp, threshold_fsh=g.threshold_fsh):
            hit = ind.region[cells] & inside
            if hit.any() and float(prof[hit].max()) > best_value:
                best, best_value = ind, float(prof[hit].max())
        if best is None:
            raise SizingError(
                f"the line ({p0[0]:g}, {p0[1]:g}) -> ({p1[0]:g}, {p1[1]:g}) mm crosses no indication at or above "
                f"the threshold of gate {g.name!r} ({g.threshold_fsh:g} %FSH); draw it through an indication or "
                "lower the threshold"
            )
        res = drop_length(amp, best, drop_db=self.drop_db, line=(p0, p1), edge=self.edge)
        crossings = None
        if res.start_mm is not None and res.end_mm is not None:
            crossings = (float(math.hypot(res.start_mm[0] - p0[0], res.start_mm[1] - p0[1])),
                         float(math.hypot(res.end_mm[0] - p0[0], res.end_mm[1] - p0[1])))
        peak = float(values[best.peak_position])
        m = DropMeasurement(
            line_mm=(p0, p1), gate=g.name, drop_db=self.drop_db, indication_peak_fsh=peak,
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
            current = (self._line, self.gate_key(m.gate), self.drop_db, self.edge)
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

        Raises
        ------
        ProcedureError
            When the settings do not form a valid procedure.
        """
        base = self._base
        # a level in dB re the back wall is saved as such: the back wall is measured again on every run
        gates = tuple(replace(g, threshold_fsh=None) if g.reference == "backwall" else g for g in self._gates.values())
        kwargs: dict[str, Any] = dict(
            gates=gates, detection_gate=self.detection_gate, backwall_gate=self.backwall_gate,
            detect=self.detect, min_area_mm2=self.min_area_mm2, min_positions=self.min_positions, edge=self.edge,
            backwall_loss_threshold_db=self.loss_threshold_db if self.backwall_gate else None,
            backwall_nominal_fsh=self.backwall_nominal_fsh if self.backwall_gate else None,
        )
        rules = base.rules_path()
        kwargs["rules"] = str(rules.resolve()) if rules is not None else None
        unchanged = all(getattr(base, k) == v for k, v in kwargs.items() if k != "rules")
        kwargs["first_look"] = base.first_look and unchanged
        if not unchanged:
            kwargs["name"] = base.name if base.name.endswith("(workbench)") else f"{base.name} (workbench)"
            kwargs["description"] = (
                "Settings saved from the ndtmap workbench" + (f", starting from: {base.description}"
                                                             if base.description else ".")
            )
        return replace(base, base_dir=None, **kwargs)

    def save_procedure(self, path: str | os.PathLike[str]) -> Path:
        """Write the current settings as a procedure file (TOML) that ``ndtmap indications --procedure`` replays.

        A screening-rules path is written relative to the new file's folder
        when possible.
        """
        from ndtmap.procedure import save_procedure

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
        return save_procedure(proc, p)

    def analysis(self, *, progress: cx.Progress | None = None) -> Analysis:
        """:func:`ndtmap.procedure.run_procedure` on the grid with the current settings (cached)."""
        proc = self.procedure()
        key = procedure_to_toml(proc)
        with self._lock:
            if self._analysis is not None and self._analysis[0] == key:
                return self._analysis[1]
        if progress is not None:
            progress(None, "listing indications")
        if is_lazy(self._raw_grid):
            with cx.dask_progress(progress, "listing indications"):
                result = run_procedure(self._raw_grid, proc, source=self.source)
        else:
            result = run_procedure(self._raw_grid, proc, source=self.source)
        with self._lock:
            self._analysis = (key, result)
        return result

    def has_analysis(self) -> bool:
        """True when the indication list of the current settings is computed."""
        try:
            key = procedure_to_toml(self.procedure())
        except NdtmapError:
            return False
        return self._analysis is not None and self._analysis[0] == key

    def indications(self, *, progress: cx.Progress | None = None) -> list[dict[str, Any]]:
        """The sized indications of the detection gate at its threshold (as ``ndtmap indications``)."""
        return self.analysis(progress=progress).indications

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


def indication_label(rec: Mapping[str, Any]) -> str:
    """A one-line label of an indication record for a list."""
    if rec["kind"] == "amplitude":
        what = f"{rec['peak_fsh']:.1f} %FSH"
    else:
        loss = rec.get("backwall_loss_db")
        what = "back wall lost" if loss is None else f"back wall -{loss:.1f} dB"
    depth = f", {rec['depth_mm']:.1f} mm deep" if rec.get("depth_mm") is not None else ""
    flags = f" [{', '.join(rec['flags'])}]" if rec.get("flags") else ""
    return f"#{rec['id']} {what} at ({rec['scan_mm']:.1f}, {rec['index_mm']:.1f}) mm{depth}{flags}"


def indication_details(rec: Mapping[str, Any]) -> list[tuple[str, str]]:
    """(label, text) pairs of an indication's sizes, flags (with their meanings) and notes."""

    def mm(v: Any, unc: Any = None) -> str:
        if v is None:
            return "\u2013"
        return f"{v:.1f} \u00b1 {unc:.1f} mm" if unc is not None else f"{v:.1f} mm"

    rows = [
        ("kind", "amplitude" if rec["kind"] == "amplitude" else "back-wall loss"),
        ("peak position", f"scan {rec['scan_mm']:.1f} mm, index {rec['index_mm']:.1f} mm"),
    ]
    if rec.get("peak_fsh") is not None:
        rows.append(("peak", f"{rec['peak_fsh']:.1f} %FSH"))
    if rec.get("backwall_loss_db") is not None:
        rows.append(("back-wall loss", f"{rec['backwall_loss_db']:.1f} dB"))
    if rec.get("depth_mm") is not None:
        rows.append(("depth", f"{rec['depth_mm']:.1f} mm"))
    method = rec.get("sizing_method") or "6 dB drop"
    rows.append((f"length along scan ({method})", mm(rec.get("length_scan_mm"), rec.get("length_scan_uncertainty_mm"))))
    rows.append((f"length along index ({method})",
                 mm(rec.get("length_index_mm"), rec.get("length_index_uncertainty_mm"))))
    if rec.get("area_mm2") is not None:
        unc = rec.get("area_uncertainty_mm2")
        pm = f" \u00b1 {unc:.0f}" if unc is not None else ""
        rows.append(("area", f"{rec['area_mm2']:.0f}{pm} mm\u00b2"))
    if rec.get("ers_mm") is not None:
        rows.append(("DGS equivalent size", f"{rec['ers_mm']:.1f} mm ({rec.get('ers_method') or 'DGS'})"))
    for f in rec.get("flags") or []:
        rows.append((f"flag {f}", FLAG_MEANINGS.get(f, "")))
    if not rec.get("flags"):
        rows.append(("flags", "none"))
    for n in rec.get("notes") or []:
        rows.append(("note", n))
    if rec.get("screening"):
        rows.append(("screening", str(rec["screening"])))
    return rows


__all__ += ["indication_label", "indication_details"]
