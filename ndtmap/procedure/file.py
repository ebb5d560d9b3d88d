"""Procedure files: TOML text in and out (formats 1 and 2).

The same procedure file drives the command line (``ndtmap indications``,
``ndtmap report``), the notebooks and the workbench, which can save its
current settings as one. Files are written with tomli-w, atomically.

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

    [recording]              # optional: the curve a gate level `reference = "dac"` refers to
    kind = "dac"             # DAC points: [depth_mm, amplitude_fsh], linear in dB between them
    points = [[10.0, 80.0], [50.0, 20.0]]
    outside = "conservative" # beyond the points: "conservative", "extrapolate" or "refuse"
    # file = "dac.csv"       # instead of points: a CSV file with the header depth_mm,amplitude_fsh
    # or a DGS level:  kind = "dgs", fbh_mm = 2.0, reference = "backwall" (the [backwall] gate's
    # nominal echo), or reference = "fbh" with reference_fbh_mm, reference_depth_mm, reference_fsh

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
from pathlib import Path
from typing import Any

import tomli_w

from ndtmap.errors import NdtmapError, ProcedureError
from ndtmap.gates import Gate
from ndtmap.indications import RecordingCurve
from ndtmap.io import atomic_write_text
from ndtmap.procedure.definition import FIGURE_KINDS, PROCEDURE_FORMAT, Procedure
from ndtmap.signal import DacCurve, dac_curve

__all__ = ["READABLE_FORMATS", "parse_procedure", "load_procedure", "procedure_to_toml", "save_procedure"]

#: Formats this release reads: format 1 stated the detection level a second time in [detection].
READABLE_FORMATS = ("ndtmap-procedure 1", PROCEDURE_FORMAT)

_SECTIONS = {
    "procedure": {"format", "name", "description", "first_look"},
    "calibration": {"velocity_m_s", "zero_offset_us"},
    "gate": {"name", "start", "end", "unit", "threshold_fsh", "mode", "follows", "threshold_db", "reference"},
    "detection": {"gate", "min_area_mm2", "min_positions", "detect"},
    "backwall": {"gate", "nominal_fsh", "loss_threshold_db"},
    "sizing": {"edge", "transfer_correction_db"},
    "screening": {"rules"},
    "figures": {"include"},
    "recording": {"kind", "points", "file", "outside", "fbh_mm", "reference", "reference_fbh_mm",
                  "reference_depth_mm", "reference_fsh"},
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


def _recording(table: Any, source: str, base_dir: str | None) -> RecordingCurve | None:
    """The [recording] table as a RecordingCurve (DAC points or file, or a DGS level), or None."""
    if table is None:
        return None
    rec = dict(table)
    kind = rec.pop("kind", None)
    if kind == "dac":
        outside = rec.pop("outside", "conservative")
        points, file = rec.pop("points", None), rec.pop("file", None)
        if (points is None) == (file is None):
            raise ProcedureError(f"{source}: [recording] of kind 'dac' needs exactly one of `points` and `file`")
        if file is not None:
            path = Path(file) if Path(file).is_absolute() or not base_dir else Path(base_dir) / file
            curve = DacCurve.from_csv(path, outside=outside)
        else:
            if not isinstance(points, list) or not all(isinstance(p, list) and len(p) == 2 for p in points):
                raise ProcedureError(f"{source}: `recording.points` must be a list of [depth_mm, amplitude_fsh] pairs")
            curve = dac_curve([p[0] for p in points], [p[1] for p in points], outside=outside,
                              source=f"{source} [recording]")
            if list(curve.depths_mm) != [float(p[0]) for p in points]:
                raise ProcedureError(f"{source}: `recording.points` must have increasing depths, got {points}")
        return RecordingCurve("dac", dac=curve, **rec)
    return RecordingCurve(kind, **rec)


def _gate_from_entry(entry: Any, level: dict[str, Any] | None) -> Gate:
    if not isinstance(entry, dict):
        raise ProcedureError("[[gate]] must be a table")
    return Gate.from_dict({**entry, **level} if level else entry)



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
            recording=_recording(doc.get("recording"), source, base_dir),
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
    return atomic_write_text(Path(path), procedure_to_toml(procedure))

