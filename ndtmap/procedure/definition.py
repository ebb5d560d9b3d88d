"""Procedures: an analysis captured in a small TOML file, and the function that runs it.

A procedure says how a scan grid is to be evaluated: calibration, named
gates, which gate is searched for indications and at what threshold, the
back-wall reference, sizing options, screening rules and which figures a
report shows. The same procedure file drives the command line
(``ndtmap indications``, ``ndtmap report``), the notebooks and the
workbench, which can save its current settings as one.

The file format (``format = "ndtmap-procedure 2"``; files of format 1 are read too)::

    [procedure]
    format = "ndtmap-procedure 2"
    name = "Plate lamination survey"
    description = "..."

    [calibration]            # optional: overrides the grid's values
    velocity_m_s = 5920.0
    zero_offset_us = 0.0

    [[gate]]                 # any number of named gates
    name = "flaw"
    start = 1.5              # in `unit`: depth mm (or time us)
    end = 22.0
    unit = "mm"
    threshold_fsh = 20.0     # the gate's detection level; or threshold_db = -12.0 with
    mode = "peak"            # reference = "backwall" (the nominal back-wall echo) or a level in %FSH
    # follows = "interface"  # window relative to another gate's event

    [detection]
    gate = "flaw"            # the gate whose amplitude map is searched, at that gate's level
    min_area_mm2 = 4.0
    min_positions = 1
    detect = "rectified"     # or "envelope"

    [backwall]               # optional
    gate = "backwall"
    nominal_fsh = 80.0       # optional: else the median over the scan
    loss_threshold_db = 6.0  # optional: also report back-wall-loss indications

    [sizing]
    edge = "first"           # or "outermost"
    transfer_correction_db = 0.0

    [screening]              # optional
    rules = "rules.toml"     # path relative to this file

    [figures]
    include = ["amplitude", "depth", "backwall_loss", "thickness", "bscan", "dscan", "ascan", "dgs"]

The detection level is the detection gate's own level (:class:`ndtmap.gates.Gate`):
one number per gate, nowhere else. Format 1 stated it a second time in
``[detection]`` (``threshold_fsh``, or ``threshold_db`` with ``reference``);
such a file is read by moving that level onto the detection gate, which is
what the detection used.
"""

from __future__ import annotations

import math
import os
import tomllib
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import numpy as np
import tomli_w
import xarray as xr

from ndtmap import CAUTION
from ndtmap._shared.validate import finite_float, nonnegative_float, one_of, positive_float
from ndtmap.errors import NdtmapError, ParameterError, ProcedureError
from ndtmap.gates import Gate, evaluate_gates, gate_chain
from ndtmap.grid.schema import grid_attr, time_step_us
from ndtmap.indications.echoes import echo_half_length_mm

__all__ = [
    "PROCEDURE_FORMAT",
    "FIGURE_KINDS",
    "Procedure",
    "Analysis",
    "load_procedure",
    "parse_procedure",
    "procedure_to_toml",
    "save_procedure",
    "first_look_procedure",
    "run_procedure",
]

PROCEDURE_FORMAT = "ndtmap-procedure 2"
#: Earlier formats this release still reads.
READABLE_FORMATS = ("ndtmap-procedure 1", PROCEDURE_FORMAT)
FIGURE_KINDS = ("amplitude", "depth", "backwall_loss", "thickness", "bscan", "dscan", "ascan", "dgs")
DETECT_KINDS = ("rectified", "envelope")
EDGE_RULES = ("first", "outermost")

#: The first-look detection threshold: this multiple of the median gate amplitude (the typical
#: noise peak in the gate), but at least FIRST_LOOK_MIN_FSH.
FIRST_LOOK_NOISE_FACTOR = 2.0
FIRST_LOOK_MIN_FSH = 10.0


@dataclass(frozen=True)
class Procedure:
    """An analysis of a scan grid, as captured in a procedure file.

    Parameters
    ----------
    name : str
        A name for people.
    gates : tuple of Gate
        All gates, each named.
    detection_gate : str
        Name of the gate whose amplitude map is searched for indications, at
        that gate's level (its ``threshold_fsh``, or ``threshold_db`` re a
        reference: :class:`ndtmap.gates.Gate`).
    backwall_gate : str, optional
        Name of the back-wall gate (back-wall loss, thickness, DGS reference).
    backwall_nominal_fsh : float, optional
        Nominal back-wall level; default the median over the scan.
    backwall_loss_threshold_db : float, optional
        Also report regions where the back wall drops by at least this much.
    min_area_mm2, min_positions
        Smallest indication kept.
    detect : {'rectified', 'envelope'}
        Detection signal of the gates.
    edge : {'first', 'outermost'}
        Drop-sizing walk rule (see :func:`ndtmap.indications.sizing.drop_length`).
    transfer_correction_db : float
        Transfer correction of the DGS evaluation, dB.
    velocity_m_s, zero_offset_us : float, optional
        Calibration overriding the grid's values.
    rules : str, optional
        Path of a screening-rules TOML file (relative to the procedure file).
    figures : tuple of str
        Figures a report shows, from :data:`FIGURE_KINDS`.
    description : str
        Free text.
    first_look : bool
        True for a procedure derived from the grid by :func:`first_look_procedure`.
    base_dir : str, optional
        Folder that relative paths in the procedure refer to.
    """

    name: str
    gates: tuple[Gate, ...]
    detection_gate: str
    backwall_gate: str | None = None
    backwall_nominal_fsh: float | None = None
    backwall_loss_threshold_db: float | None = None
    min_area_mm2: float = 0.0
    min_positions: int = 1
    detect: str = "rectified"
    edge: str = "first"
    transfer_correction_db: float = 0.0
    velocity_m_s: float | None = None
    zero_offset_us: float | None = None
    rules: str | None = None
    figures: tuple[str, ...] = FIGURE_KINDS
    description: str = ""
    first_look: bool = False
    base_dir: str | None = field(default=None, compare=False)

    def __post_init__(self) -> None:
        gates = tuple(self.gates)
        if not gates:
            raise ProcedureError("a procedure needs at least one gate")
        for g in gates:
            if not isinstance(g, Gate):
                raise ProcedureError(f"`gates` must hold Gate objects, got {g!r}")
        names = [g.name for g in gates]
        dup = sorted({n for n in names if names.count(n) > 1})
        if dup:
            raise ProcedureError(f"gate names must be unique; repeated: {dup}")
        object.__setattr__(self, "gates", gates)
        if self.detection_gate not in names:
            raise ProcedureError(f"`detection.gate` {self.detection_gate!r} is not one of the gates {names}")
        if self.backwall_gate is not None and self.backwall_gate not in names:
            raise ProcedureError(f"`backwall.gate` {self.backwall_gate!r} is not one of the gates {names}")
        for g in gates:
            try:
                gate_chain(gates, g.name)
            except NdtmapError as exc:
                raise ProcedureError(str(exc)) from None
        level_gates = [g.name for g in gates if g.reference == "backwall"]
        if level_gates and self.backwall_gate is None:
            raise ProcedureError(
                f"gate(s) {level_gates} have their level in dB re the back wall; the procedure needs a [backwall] gate"
            )
        if self.backwall_gate in level_gates:
            raise ProcedureError(f"the back-wall gate {self.backwall_gate!r} cannot have its level re the back wall")
        for name in ("backwall_nominal_fsh",):
            if getattr(self, name) is not None:
                object.__setattr__(self, name, _wrap(positive_float, name, getattr(self, name)))
        if self.backwall_loss_threshold_db is not None:
            if self.backwall_gate is None:
                raise ProcedureError("`backwall.loss_threshold_db` needs `backwall.gate`")
            object.__setattr__(
                self,
                "backwall_loss_threshold_db",
                _wrap(positive_float, "backwall.loss_threshold_db", self.backwall_loss_threshold_db),
            )
        object.__setattr__(self, "min_area_mm2", _wrap(nonnegative_float, "detection.min_area_mm2", self.min_area_mm2))
        if isinstance(self.min_positions, bool) or not isinstance(self.min_positions, int) or self.min_positions < 1:
            raise ProcedureError(f"`detection.min_positions` must be a whole number >= 1, got {self.min_positions!r}")
        _wrap(one_of, "detection.detect", self.detect, DETECT_KINDS)
        _wrap(one_of, "sizing.edge", self.edge, EDGE_RULES)
        object.__setattr__(
            self,
            "transfer_correction_db",
            _wrap(finite_float, "sizing.transfer_correction_db", self.transfer_correction_db),
        )
        if self.velocity_m_s is not None:
            object.__setattr__(
                self, "velocity_m_s", _wrap(positive_float, "calibration.velocity_m_s", self.velocity_m_s)
            )
        if self.zero_offset_us is not None:
            object.__setattr__(
                self, "zero_offset_us", _wrap(finite_float, "calibration.zero_offset_us", self.zero_offset_us)
            )
        figures = tuple(self.figures)
        bad = [f for f in figures if f not in FIGURE_KINDS]
        if bad:
            raise ProcedureError(f"unknown figure kind(s) {bad} in `figures.include`; known: {list(FIGURE_KINDS)}")
        object.__setattr__(self, "figures", figures)

    def gate(self, name: str) -> Gate:
        """The gate called `name`."""
        for g in self.gates:
            if g.name == name:
                return g
        raise ProcedureError(f"no gate named {name!r}; gates: {[g.name for g in self.gates]}")

    @property
    def detection_level(self) -> str:
        """The detection level for people, from the detection gate (e.g. ``'20 %FSH'``)."""
        return self.gate(self.detection_gate).level_text()

    def with_gate(self, gate: Gate) -> Procedure:
        """A copy with `gate` replacing the gate of the same name (or added)."""
        gates = [gate if g.name == gate.name else g for g in self.gates]
        if gate.name not in [g.name for g in self.gates]:
            gates.append(gate)
        return replace(self, gates=tuple(gates))

    def rules_path(self) -> Path | None:
        """Resolved path of the screening-rules file, if any."""
        if self.rules is None:
            return None
        p = Path(self.rules)
        if not p.is_absolute() and self.base_dir:
            p = Path(self.base_dir) / p
        return p

    def to_dict(self) -> dict[str, Any]:
        """The procedure as nested plain data, in the layout of the TOML file."""
        doc: dict[str, Any] = {
            "procedure": {
                "format": PROCEDURE_FORMAT,
                "name": self.name,
                "description": self.description,
                "first_look": self.first_look,
            },
        }
        cal = {
            k: v
            for k, v in (("velocity_m_s", self.velocity_m_s), ("zero_offset_us", self.zero_offset_us))
            if v is not None
        }
        if cal:
            doc["calibration"] = cal
        doc["gate"] = [_gate_entry(g) for g in self.gates]
        det: dict[str, Any] = {"gate": self.detection_gate}
        det.update(min_area_mm2=self.min_area_mm2, min_positions=self.min_positions, detect=self.detect)
        doc["detection"] = det
        if self.backwall_gate is not None:
            bw: dict[str, Any] = {"gate": self.backwall_gate}
            if self.backwall_nominal_fsh is not None:
                bw["nominal_fsh"] = self.backwall_nominal_fsh
            if self.backwall_loss_threshold_db is not None:
                bw["loss_threshold_db"] = self.backwall_loss_threshold_db
            doc["backwall"] = bw
        doc["sizing"] = {"edge": self.edge, "transfer_correction_db": self.transfer_correction_db}
        if self.rules is not None:
            doc["screening"] = {"rules": self.rules}
        doc["figures"] = {"include": list(self.figures)}
        return doc


def _wrap(func: Any, name: str, value: Any, *args: Any) -> Any:
    try:
        return func(name, value, *args)
    except NdtmapError as exc:
        raise ProcedureError(str(exc)) from None


# --------------------------------------------------------------------------
# TOML in and out
# --------------------------------------------------------------------------
_SECTIONS = {
    "procedure": {"format", "name", "description", "first_look"},
    "calibration": {"velocity_m_s", "zero_offset_us"},
    "gate": {"name", "start", "end", "unit", "threshold_fsh", "mode", "follows", "threshold_db", "reference"},
    "detection": {"gate", "min_area_mm2", "min_positions", "detect"},
    "backwall": {"gate", "nominal_fsh", "loss_threshold_db"},
    "sizing": {"edge", "transfer_correction_db"},
    "screening": {"rules"},
    "figures": {"include"},
}


_LEGACY_LEVEL_KEYS = ("threshold_fsh", "threshold_db", "reference")


def _legacy_detection_level(doc: dict[str, Any], fmt: str | None, source: str) -> dict[str, Any] | None:
    """The level a format-1 file gives in [detection] (removed from `doc`), or None.

    Format 1 stated the detection level a second time in [detection]; the
    detection used that value, so it becomes the detection gate's level.
    """
    det = doc.get("detection")
    if not isinstance(det, dict):
        return None
    found = {k: det.pop(k) for k in _LEGACY_LEVEL_KEYS if k in det}
    if not found:
        return None
    if fmt == PROCEDURE_FORMAT:
        raise ProcedureError(
            f"{source}: [detection] {sorted(found)}: in format {PROCEDURE_FORMAT!r} the detection level is the "
            "detection gate's own `threshold_fsh` (or `threshold_db` with `reference`); move it to that [[gate]]"
        )
    if "threshold_fsh" in found:
        if "threshold_db" in found:
            raise ProcedureError(f"{source}: give only one of `detection.threshold_fsh` and `detection.threshold_db`")
        return {"threshold_fsh": found["threshold_fsh"], "threshold_db": None, "reference": None}
    if "threshold_db" not in found:
        raise ProcedureError(f"{source}: `detection.reference` is used only with `detection.threshold_db`")
    return {"threshold_fsh": None, "threshold_db": found["threshold_db"], "reference": found.get("reference")}


def _gate_from_entry(entry: Any, level: dict[str, Any] | None) -> Gate:
    if not isinstance(entry, dict):
        raise ProcedureError("[[gate]] must be a table")
    return Gate.from_dict({**entry, **level} if level else entry)


def _gate_entry(gate: Gate) -> dict[str, Any]:
    """A gate as written to a procedure file (no empty fields)."""
    return {k: v for k, v in gate.to_dict().items() if v is not None}


def parse_procedure(text: str, *, source: str = "<procedure>", base_dir: str | None = None) -> Procedure:
    """Read a procedure from TOML text.

    Parameters
    ----------
    text : str
        The TOML document.
    source : str
        Name used in error messages.
    base_dir : str, optional
        Folder that relative paths (the rules file) refer to.

    Returns
    -------
    Procedure

    Raises
    ------
    ProcedureError
        For TOML syntax errors (with line and column), unknown sections or
        keys, wrong types and inconsistent settings.

    Examples
    --------
    >>> p = parse_procedure('''
    ... [[gate]]
    ... name = "flaw"
    ... start = 2.0
    ... end = 20.0
    ... threshold_fsh = 25.0
    ... [detection]
    ... gate = "flaw"
    ... ''')
    >>> p.gate("flaw").end, p.detection_level
    (20.0, '25 %FSH')
    """
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ProcedureError(f"{source}: not valid TOML: {exc}") from None
    unknown = sorted(set(doc) - set(_SECTIONS))
    if unknown:
        raise ProcedureError(f"{source}: unknown section(s) {unknown}; known: {sorted(_SECTIONS)}")
    meta = doc.get("procedure", {})
    fmt = meta.get("format") if isinstance(meta, dict) else None
    if fmt is not None and fmt not in READABLE_FORMATS:
        raise ProcedureError(f"{source}: format {fmt!r} is not supported; this release reads {list(READABLE_FORMATS)}")
    legacy_level = _legacy_detection_level(doc, fmt, source)
    for section, keys in _SECTIONS.items():
        if section not in doc:
            continue
        tables = doc[section] if section == "gate" else [doc[section]]
        if section == "gate" and not isinstance(tables, list):
            raise ProcedureError(f"{source}: gates are written as [[gate]] tables")
        for t in tables:
            if not isinstance(t, dict):
                raise ProcedureError(f"{source}: [{section}] must be a table")
            bad = sorted(set(t) - keys)
            if bad:
                raise ProcedureError(f"{source}: unknown key(s) {bad} in [{section}]; known: {sorted(keys)}")
    if "gate" not in doc:
        raise ProcedureError(f"{source}: no [[gate]] table; a procedure needs at least one gate")
    det = doc.get("detection")
    if det is None or "gate" not in det:
        raise ProcedureError(f'{source}: [detection] with `gate = "<name>"` is required')
    try:
        gates = tuple(_gate_from_entry(g, legacy_level if g.get("name") == det["gate"] else None)
                      for g in doc["gate"])
    except NdtmapError as exc:
        raise ProcedureError(f"{source}: {exc}") from None
    bw = doc.get("backwall", {})
    cal = doc.get("calibration", {})
    sizing = doc.get("sizing", {})
    figures = doc.get("figures", {}).get("include", list(FIGURE_KINDS))
    if not isinstance(figures, list) or not all(isinstance(f, str) for f in figures):
        raise ProcedureError(f"{source}: `figures.include` must be a list of names")
    try:
        return Procedure(
            name=str(meta.get("name", Path(source).stem)),
            description=str(meta.get("description", "")),
            first_look=bool(meta.get("first_look", False)),
            gates=gates,
            detection_gate=det["gate"],
            min_area_mm2=det.get("min_area_mm2", 0.0),
            min_positions=det.get("min_positions", 1),
            detect=det.get("detect", "rectified"),
            backwall_gate=bw.get("gate"),
            backwall_nominal_fsh=bw.get("nominal_fsh"),
            backwall_loss_threshold_db=bw.get("loss_threshold_db"),
            edge=sizing.get("edge", "first"),
            transfer_correction_db=sizing.get("transfer_correction_db", 0.0),
            velocity_m_s=cal.get("velocity_m_s"),
            zero_offset_us=cal.get("zero_offset_us"),
            rules=doc.get("screening", {}).get("rules"),
            figures=tuple(figures),
            base_dir=base_dir,
        )
    except ProcedureError as exc:
        raise ProcedureError(f"{source}: {exc}") from None
    except NdtmapError as exc:
        raise ProcedureError(f"{source}: {exc}") from None


def load_procedure(path: str | os.PathLike[str]) -> Procedure:
    """Read a procedure file (TOML). Relative paths inside refer to its folder.

    Raises
    ------
    ProcedureError
        When the file is missing, unreadable or malformed.
    """
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise ProcedureError(f"procedure file {str(p)!r} does not exist") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise ProcedureError(f"cannot read procedure file {str(p)!r}: {exc}") from None
    return parse_procedure(text, source=str(p), base_dir=str(p.resolve().parent))


def _finite_numbers(value: Any, where: str) -> None:
    """Refuse NaN and infinities, which a procedure file cannot hold meaningfully."""
    if isinstance(value, float) and not math.isfinite(value):
        raise ProcedureError(f"cannot write the non-finite number {value!r} ({where}) to a procedure file")
    if isinstance(value, dict):
        for k, v in value.items():
            _finite_numbers(v, f"{where}.{k}")
    elif isinstance(value, list | tuple):
        for v in value:
            _finite_numbers(v, where)


def procedure_to_toml(procedure: Procedure) -> str:
    """The procedure as TOML text that :func:`parse_procedure` reads back unchanged.

    Examples
    --------
    >>> p = Procedure("survey", (Gate("flaw", 2.0, 20.0, threshold_fsh=25.0),), "flaw")
    >>> parse_procedure(procedure_to_toml(p)) == p
    True
    """
    doc = procedure.to_dict()
    _finite_numbers(doc, "procedure")
    return "# ndtmap analysis procedure\n\n" + tomli_w.dumps(doc)


def save_procedure(procedure: Procedure, path: str | os.PathLike[str]) -> Path:
    """Write `procedure` to a TOML file atomically (temporary file, then rename)."""
    from ndtmap.io import atomic_write_text

    return atomic_write_text(Path(path), procedure_to_toml(procedure))


# --------------------------------------------------------------------------
# The first-look procedure
# --------------------------------------------------------------------------
def _record_depth_mm(grid: xr.Dataset) -> tuple[float, float]:
    t = grid["time"].values
    zero = float(grid_attr(grid, "zero_offset_us", 0.0))
    c = float(grid_attr(grid, "velocity_m_s")) * 1e-3
    theta = math.radians(float(grid_attr(grid, "beam_angle_deg", 0.0)))
    k = 0.5 * c * math.cos(theta)
    return float((t[0] - zero) * k), float((t[-1] - zero) * k)


def _estimate_backwall_depth_mm(grid: xr.Dataset) -> float | None:
    """Median depth of the strongest echo in the second half of the record (a guess at the back wall)."""
    from ndtmap.scans.maps import side_view

    view = side_view(grid)
    prof = view.max("scan").values
    d0, d1 = _record_depth_mm(grid)
    depth = np.linspace(d0, d1, prof.size)
    sel = depth > d0 + 0.3 * (d1 - d0)
    if not np.any(sel) or not np.isfinite(prof[sel]).any():
        return None
    return float(depth[sel][int(np.nanargmax(prof[sel]))])


def first_look_procedure(grid: xr.Dataset) -> Procedure:
    """Derive a first-look procedure from the grid itself (for a report without a procedure file).

    * back-wall depth: the ``part_thickness_mm`` attribute, else the depth of
      the strongest late echo;
    * flaw gate: from one echo length below the surface (at least 1 mm) to
      one echo length above the back wall;
    * back-wall gate: the back wall +/- max(2 echo lengths, 5 % of the wall),
      inside the record;
    * detection threshold: twice the median of the flaw gate's amplitude map
      (the typical noise peak), but at least 10 %FSH.

    It is a starting point stated as such in every report, not a substitute
    for a written procedure.

    Raises
    ------
    ParameterError
        When no back wall can be placed (angle beams, or a record too short).
    """
    from ndtmap.scans.maps import amplitude_map

    theta = float(grid_attr(grid, "beam_angle_deg", 0.0))
    d0, d1 = _record_depth_mm(grid)
    echo = echo_half_length_mm(grid)
    thickness = grid_attr(grid, "part_thickness_mm")
    if not isinstance(thickness, float):
        thickness = _estimate_backwall_depth_mm(grid)
    if thickness is None or theta > 1.0:
        raise ParameterError(
            "a first-look procedure needs a straight beam and a back wall inside the record; "
            "write a procedure file and pass it with --procedure"
        )
    dt_mm = time_step_us(grid) * float(grid_attr(grid, "velocity_m_s")) * 1e-3 / 2
    start = max(d0 + dt_mm, echo, 1.0)
    end = min(thickness - 1.5 * echo, d1 - dt_mm)
    if not end > start + 2 * dt_mm:
        raise ParameterError(
            f"the wall ({thickness:.1f} mm) is too thin for a flaw gate clear of the surface and the back wall; "
            "write a procedure file"
        )
    half = max(2.0 * echo, 0.05 * thickness)
    bw_start = max(thickness - half, end)
    bw_end = min(thickness + half, d1 - dt_mm)
    if not bw_end > bw_start:
        raise ParameterError("the back wall lies too close to the end of the record for a back-wall gate")
    probe_gate = Gate("flaw", round(start, 2), round(end, 2), threshold_fsh=FIRST_LOOK_MIN_FSH)
    amp = amplitude_map(grid, probe_gate)
    median = float(np.nanmedian(np.asarray(amp.values, dtype=np.float64)))
    threshold = round(max(FIRST_LOOK_MIN_FSH, FIRST_LOOK_NOISE_FACTOR * median), 1)
    flaw = Gate("flaw", round(start, 2), round(end, 2), threshold_fsh=threshold)
    backwall = Gate("backwall", round(bw_start, 2), round(bw_end, 2), threshold_fsh=threshold)
    return Procedure(
        name="first look (derived from the grid)",
        description=(
            f"Derived from the grid, not from a written procedure: flaw gate {flaw.start:g}-{flaw.end:g} mm, "
            f"back-wall gate {backwall.start:g}-{backwall.end:g} mm, detection threshold {threshold:g} %FSH "
            f"(twice the median gate amplitude, at least {FIRST_LOOK_MIN_FSH:g} %FSH); back-wall loss "
            "indications at 6 dB."
        ),
        gates=(flaw, backwall),
        detection_gate="flaw",
        backwall_gate="backwall",
        backwall_loss_threshold_db=6.0,
        min_positions=2,
        first_look=True,
    )


# --------------------------------------------------------------------------
# Running a procedure
# --------------------------------------------------------------------------
@dataclass
class Analysis:
    """Everything a procedure produced for one grid.

    Attributes
    ----------
    grid : xarray.Dataset
        The grid after calibration.
    procedure : Procedure
    gates : dict of str to Gate
        The gates as evaluated: levels in dB re the back wall turned into
        %FSH with the measured nominal back-wall level.
    maps : dict of str to xarray.DataArray
        ``amplitude``, ``depth`` (detection gate) and, with a back-wall gate,
        ``backwall_amplitude``, ``backwall_depth``, ``backwall_loss`` and
        ``thickness``.
    indications : list of dict
        Sized, flagged indications (see :func:`ndtmap.size_indications`).
    screening : dict or None
        Screening result when the procedure names rules.
    cautions : list of str
    notes : list of str
    """

    grid: xr.Dataset
    procedure: Procedure
    gates: dict[str, Gate]
    maps: dict[str, xr.DataArray]
    indications: list[dict[str, Any]]
    screening: dict[str, Any] | None
    cautions: list[str]
    notes: list[str]
    source: str | None = None

    def indications_document(self) -> dict[str, Any]:
        """The JSON document of ``ndtmap indications --format json``."""
        gate = self.procedure.gate(self.procedure.detection_gate)
        return {
            "file": self.source,
            "part_id": self.grid.attrs.get("part_id"),
            "gate": gate.to_dict(),
            "threshold_fsh": gate.threshold_fsh if gate.threshold_db is None else None,
            "threshold_db": gate.threshold_db,
            "procedure": self.procedure.name,
            "indications": self.indications,
            "screening": self.screening,
            "cautions": self.cautions,
            "notes": self.notes,
        }


def _evaluate_chains(grid: xr.Dataset, gates: Mapping[str, Gate], names: list[str], detect: str
                     ) -> dict[str, xr.Dataset]:
    """Evaluate the gates `names` and the gates they follow, each once, in memory."""
    chain: list[Gate] = []
    for name in names:
        for g in gate_chain(gates, name):
            if g not in chain:
                chain.append(g)
    return {name: r.compute() for name, r in evaluate_gates(grid, chain, detect=detect).items()}


def run_procedure(grid: xr.Dataset, procedure: Procedure, *, source: str | None = None) -> Analysis:
    """Run `procedure` on `grid`: calibrate, gate, map, detect, size, screen.

    Parameters
    ----------
    grid : xarray.Dataset
        A valid scan grid (in memory or dask-backed).
    procedure : Procedure
        What to do.
    source : str, optional
        Where the grid came from (named in the results).

    Returns
    -------
    Analysis

    Raises
    ------
    NdtmapError
        For gates outside the record, rules that cannot be read, and other
        problems of the procedure on this grid.
    """
    from ndtmap.grid.calibration import calibrate
    from ndtmap.indications.pipeline import scanned_area_mm2, size_indications
    from ndtmap.indications.rules import load_rules, screen
    from ndtmap.scans.maps import amplitude_map, backwall_loss_map, depth_map, thickness_map

    proc = procedure
    if proc.velocity_m_s is not None or proc.zero_offset_us is not None:
        grid = calibrate(
            grid, velocity_m_s=proc.velocity_m_s, zero_offset_us=proc.zero_offset_us, note=f"procedure {proc.name}"
        )
    gates = {g.name: g for g in proc.gates}
    maps: dict[str, xr.DataArray] = {}
    notes: list[str] = []
    cautions = [CAUTION]
    if proc.first_look:
        cautions.append(
            "The gates and threshold were derived from the grid (first look), not from a written "
            "procedure: " + proc.description
        )
    # one pass over the A-scans per gate: every map of a gate is made from the same evaluation; a level in dB
    # re the back wall needs the back-wall gate measured first
    wanted = [proc.detection_gate] if proc.backwall_gate is None else [proc.backwall_gate, proc.detection_gate]
    first = wanted if not any(g.needs_reference for g in gates.values()) else wanted[:1]
    results = _evaluate_chains(grid, gates, first, proc.detect)
    backwall_amp = backwall_depth = loss = None
    if proc.backwall_gate is not None:
        bw = gates[proc.backwall_gate]
        bw_result = results[bw.name]
        backwall_amp = amplitude_map(grid, bw, detect=proc.detect, result=bw_result)
        backwall_depth = depth_map(grid, bw, detect=proc.detect, result=bw_result)
        loss = backwall_loss_map(grid, bw, nominal_fsh=proc.backwall_nominal_fsh, detect=proc.detect,
                                 result=bw_result)
        maps["backwall_amplitude"] = backwall_amp
        maps["backwall_depth"] = backwall_depth
        maps["backwall_loss"] = loss
        try:
            maps["thickness"] = thickness_map(grid, bw, detect=proc.detect, result=bw_result)
        except NdtmapError as exc:  # e.g. an immersion grid without an interface gate
            notes.append(f"no thickness map: {exc}")
        # the same nominal back-wall level as the back-wall-loss map (the procedure's, else the median)
        nominal = float(loss.attrs["nominal_fsh"])
        gates = {name: g.with_reference_fsh(nominal) for name, g in gates.items()}
    if proc.detection_gate not in results:
        results.update(_evaluate_chains(grid, gates, [proc.detection_gate], proc.detect))
    det = gates[proc.detection_gate]
    maps["amplitude"] = amplitude_map(grid, det, detect=proc.detect, result=results[det.name])
    maps["depth"] = depth_map(grid, det, detect=proc.detect, result=results[det.name])
    rules = load_rules(proc.rules_path()) if proc.rules is not None else None
    kwargs: dict[str, Any] = {}
    if det.threshold_db is None:
        kwargs["threshold_fsh"] = det.threshold_fsh
    else:  # the level in dB re its reference, as the gate states it (the records name it so)
        kwargs["threshold_db"] = det.threshold_db
        kwargs["reference"] = float(loss.attrs["nominal_fsh"]) if det.reference == "backwall" else det.reference
    if backwall_amp is not None:
        kwargs["backwall"] = backwall_amp
        kwargs["backwall_depth_mm"] = backwall_depth
    if loss is not None and proc.backwall_loss_threshold_db is not None:
        kwargs["backwall_loss_map"] = loss
        kwargs["loss_threshold_db"] = proc.backwall_loss_threshold_db
    records = size_indications(
        maps["amplitude"],
        depth_map=maps["depth"],
        min_area_mm2=proc.min_area_mm2,
        min_positions=proc.min_positions,
        edge=proc.edge,
        transfer_correction_db=proc.transfer_correction_db,
        **kwargs,
    )
    from ndtmap.indications.echoes import classify_echoes

    nominal = grid_attr(grid, "part_thickness_mm")
    if not isinstance(nominal, float) and backwall_depth is not None:
        finite = np.asarray(backwall_depth.values, dtype=np.float64)
        finite = finite[np.isfinite(finite)]
        nominal = float(np.median(finite)) if finite.size else None
    classify_echoes(grid, records, backwall_depth_mm=nominal if isinstance(nominal, float) else None)
    if isinstance(nominal, float) and det.unit == "mm" and det.follows is None and det.start < nominal < det.end:
        notes.append(
            f"the detection gate {det.name!r} ({det.start:g}-{det.end:g} mm) contains the back wall at about "
            f"{nominal:g} mm: the back-wall echo itself is detected (a geometry echo); end the gate above it"
        )
    screening = None
    if rules is not None:
        result = screen(records, rules, scanned_area_mm2=scanned_area_mm2(maps["amplitude"]))
        screening = result.as_dict()
        by_id = {s["id"]: s for s in screening.get("indications", []) if isinstance(s, Mapping) and "id" in s}
        for rec in records:
            if rec["id"] in by_id:
                rec["screening"] = by_id[rec["id"]].get("statement")
    return Analysis(
        grid=grid,
        procedure=proc,
        gates=gates,
        maps=maps,
        indications=records,
        screening=screening,
        cautions=cautions,
        notes=notes,
        source=source,
    )


def procedure_from_options(
    *,
    gate_mm: Iterable[float],
    threshold_fsh: float,
    mode: str = "peak",
    backwall_gate_mm: Iterable[float] | None = None,
    rules: str | None = None,
    min_area_mm2: float = 0.0,
    detect: str = "rectified",
) -> Procedure:
    """The procedure behind ``ndtmap indications``'s options (a flaw gate in depth mm, an optional back-wall gate)."""
    start, end = gate_mm
    gates = [Gate("flaw", float(start), float(end), threshold_fsh=float(threshold_fsh), mode=mode)]
    if backwall_gate_mm is not None:
        b0, b1 = backwall_gate_mm
        gates.append(Gate("backwall", float(b0), float(b1), threshold_fsh=float(threshold_fsh)))
    return Procedure(
        name="command-line options",
        gates=tuple(gates),
        detection_gate="flaw",
        backwall_gate="backwall" if backwall_gate_mm is not None else None,
        min_area_mm2=min_area_mm2,
        detect=detect,
        rules=rules,
    )
