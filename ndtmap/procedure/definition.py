"""What a procedure is: the :class:`Procedure` record, checked when it is made.

A procedure says how a scan grid is to be evaluated: calibration, named
gates, which gate is searched for indications (at that gate's own level),
the back-wall reference, sizing options, screening rules and which figures a
report shows. Its file format is in :mod:`ndtmap.procedure.file`; running it
is :func:`ndtmap.procedure.run.run_procedure`.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

from ndtmap._shared.validate import finite_float, nonnegative_float, one_of, positive_float
from ndtmap.errors import NdtmapError, ProcedureError
from ndtmap.gates import Gate, gate_chain
from ndtmap.indications import RecordingCurve

__all__ = ["PROCEDURE_FORMAT", "FIGURE_KINDS", "DETECT_KINDS", "EDGE_RULES", "Procedure"]

#: The format this release writes (``[procedure] format``); :mod:`ndtmap.procedure.file` also reads format 1.
PROCEDURE_FORMAT = "ndtmap-procedure 2"
FIGURE_KINDS = ("amplitude", "depth", "backwall_loss", "thickness", "bscan", "dscan", "ascan", "dgs")
DETECT_KINDS = ("rectified", "envelope")
EDGE_RULES = ("first", "outermost")


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
    recording : RecordingCurve, optional
        The depth-dependent recording curve (DAC points, or a DGS level for
        an equivalent FBH) that gate levels in dB re ``'dac'`` refer to.
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
    recording: RecordingCurve | None = None
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
        self._check_recording(gates)
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

    def _check_recording(self, gates: tuple[Gate, ...]) -> None:
        """Gates with a level re the DAC need the [recording] curve; a DGS level from the back wall needs that gate."""
        rec = self.recording
        if rec is not None and not isinstance(rec, RecordingCurve):
            raise ProcedureError(f"`recording` must be a RecordingCurve or None, got {type(rec).__name__}")
        curve_gates = [g.name for g in gates if g.level_re_curve]
        if curve_gates and rec is None:
            raise ProcedureError(
                f"gate(s) {curve_gates} have their level in dB re the DAC; the procedure needs a [recording] curve "
                "(DAC points or a DGS level)"
            )
        if rec is not None and rec.kind == "dgs" and rec.reference == "backwall" and self.backwall_gate is None:
            raise ProcedureError("a DGS recording level set from the back wall needs a [backwall] gate")

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
        if self.recording is not None:
            doc["recording"] = self.recording.to_dict()
        if self.rules is not None:
            doc["screening"] = {"rules": self.rules}
        doc["figures"] = {"include": list(self.figures)}
        return doc


def _wrap(func: Any, name: str, value: Any, *args: Any) -> Any:
    try:
        return func(name, value, *args)
    except NdtmapError as exc:
        raise ProcedureError(str(exc)) from None



def _gate_entry(gate: Gate) -> dict[str, Any]:
    """A gate as written to a procedure file (no empty fields)."""
    return {k: v for k, v in gate.to_dict().items() if v is not None}

