"""Running a procedure on a grid: calibrate, gate, map, detect, size, screen.

:func:`run_procedure` evaluates every gate it needs once (the back-wall
gate first when a level is stated re the back wall), makes the maps, sizes
the indications with :func:`ndtmap.size_indications` (A-scan echo checks
included) and screens them with
:func:`ndtmap.indications.screening.screen_records`, the same step as
``size_indications(..., rules=...)``. The result is an :class:`Analysis`.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from dataclasses import dataclass, replace
from typing import Any

import numpy as np
import xarray as xr

from ndtmap._shared.caution import CAUTION
from ndtmap.errors import NdtmapError, ParameterError
from ndtmap.gates import Gate, evaluate_gates, gate_chain
from ndtmap.grid.calibration import calibrate
from ndtmap.grid.geometry import part_constants
from ndtmap.grid.schema import grid_attr
from ndtmap.indications import (
    DetectionOptions,
    DgsOptions,
    EchoCheck,
    IndicationRecord,
    LossOptions,
    RecordingCurve,
    SizingOptions,
    load_rules,
    map_detection_level,
    scanned_area_mm2,
    screen_records,
    size_indications,
)
from ndtmap.physics.beam import near_field_length_mm
from ndtmap.procedure.definition import Procedure
from ndtmap.scans import amplitude_map, backwall_loss_map, depth_map, thickness_map
from ndtmap.signal import DacCurve

__all__ = ["Analysis", "run_procedure", "procedure_from_options"]


def _caution() -> str:
    return CAUTION


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
        ``thickness``; with a recording curve ``amplitude_re_dac`` (dB, the
        maximum of A/curve over the detection gate).
    indications : list of IndicationRecord
        Sized, flagged (and, with rules, screened) indications (see
        :func:`ndtmap.size_indications`).
    screening : dict or None
        Screening result when the procedure names rules.
    cautions : list of str
    notes : list of str
    source : str or None
        Where the grid came from.
    curve : DacCurve or None
        The recording curve as used (the DAC, or the DGS curve built from the
        measured back-wall echo), when the procedure has one.
    """

    grid: xr.Dataset
    procedure: Procedure
    gates: dict[str, Gate]
    maps: dict[str, xr.DataArray]
    indications: list[IndicationRecord]
    screening: dict[str, Any] | None
    cautions: list[str]
    notes: list[str]
    source: str | None = None
    curve: DacCurve | None = None

    def indications_document(self) -> dict[str, Any]:
        """The JSON document of ``ndtmap indications --format json`` (records by ``to_dict()``)."""
        gate = self.procedure.gate(self.procedure.detection_gate)
        return {
            "file": self.source,
            "part_id": self.grid.attrs.get("part_id"),
            "gate": gate.to_dict(),
            "threshold_fsh": gate.threshold_fsh if gate.threshold_db is None else None,
            "threshold_db": gate.threshold_db,
            "recording_curve": None if self.curve is None else self.curve.to_dict(),
            "procedure": self.procedure.name,
            "indications": [rec.to_dict() for rec in self.indications],
            "screening": self.screening,
            "cautions": self.cautions,
            "notes": self.notes,
        }


def _evaluate_chains(grid: xr.Dataset, gates: Mapping[str, Gate], names: list[str], detect: str,
                     curve: DacCurve | None = None) -> dict[str, xr.Dataset]:
    """Evaluate the gates `names` and the gates they follow, each once, in memory (with the recording curve)."""
    chain: list[Gate] = []
    for name in names:
        for g in gate_chain(gates, name):
            if g not in chain:
                chain.append(g)
    return {name: r.compute() for name, r in evaluate_gates(grid, chain, detect=detect, dac=curve).items()}


def _recording_curve(grid: xr.Dataset, proc: Procedure, maps: Mapping[str, xr.DataArray]) -> DacCurve | None:
    """The procedure's recording curve: its DAC, or the DGS curve over the detection gate's depths."""
    rec = proc.recording
    if rec is None or rec.kind == "dac":
        return None if rec is None else rec.dac
    pc = part_constants(grid)
    det = proc.gate(proc.detection_gate)
    d0, d1 = pc.record_depth_mm()
    if det.unit == "mm" and det.follows is None:
        d0, d1 = det.start, det.end
    floor = max(0.5, 0.05 * near_field_length_mm(float(grid_attr(grid, "probe_diameter_mm")),
                                                 float(grid_attr(grid, "probe_frequency_mhz")), pc.velocity_m_s))
    backwall_fsh = backwall_depth = None
    if "backwall_loss" in maps:
        backwall_fsh = float(maps["backwall_loss"].attrs["nominal_fsh"])
        backwall_depth = _nominal_backwall_depth_mm(grid, maps.get("backwall_depth"))
    return rec.curve(depths_mm=[max(floor, d0), max(floor * 1.01, d1)], attrs=grid.attrs, backwall_fsh=backwall_fsh,
                     backwall_depth_mm=backwall_depth, transfer_correction_db=proc.transfer_correction_db)


def _curve_notes(records: list[IndicationRecord], curve: DacCurve | None) -> list[IndicationRecord]:
    """Each record whose depths leave the curve's recorded range says so, and by which rule its level was taken."""
    if curve is None:
        return records
    out = []
    for rec in records:
        lo, hi = rec.depth_min_mm, rec.depth_max_mm
        note = None if lo is None or hi is None else curve.outside_note(lo, hi)
        out.append(rec if note is None else replace(rec, notes=(*rec.notes, note)))
    return out


def _backwall_maps(grid: xr.Dataset, proc: Procedure, result: xr.Dataset, notes: list[str]) -> dict[str, xr.DataArray]:
    """The maps of the back-wall gate from its one evaluation: amplitude, depth, loss and thickness."""
    bw = proc.gate(proc.backwall_gate)
    maps = {
        "backwall_amplitude": amplitude_map(grid, bw, detect=proc.detect, result=result),
        "backwall_depth": depth_map(grid, bw, detect=proc.detect, result=result),
        "backwall_loss": backwall_loss_map(grid, bw, nominal_fsh=proc.backwall_nominal_fsh, detect=proc.detect,
                                           result=result),
    }
    try:
        maps["thickness"] = thickness_map(grid, bw, detect=proc.detect, result=result)
    except NdtmapError as exc:  # e.g. an immersion grid without an interface gate
        notes.append(f"no thickness map: {exc}")
    return maps


def _nominal_backwall_depth_mm(grid: xr.Dataset, backwall_depth: xr.DataArray | None) -> float | None:
    """The part thickness attribute, else the median back-wall depth (for the A-scan echo checks)."""
    nominal = grid_attr(grid, "part_thickness_mm")
    if not isinstance(nominal, float) and backwall_depth is not None:
        finite = np.asarray(backwall_depth.values, dtype=np.float64)
        finite = finite[np.isfinite(finite)]
        nominal = float(np.median(finite)) if finite.size else None
    return nominal if isinstance(nominal, float) else None


def _size(grid: xr.Dataset, proc: Procedure, det: Gate, maps: Mapping[str, xr.DataArray],
          curve: DacCurve | None = None) -> list[IndicationRecord]:
    """size_indications on the detection maps with the procedure's options (and the recording curve)."""
    if det.threshold_db is None:
        level: dict[str, Any] = {"threshold_fsh": det.threshold_fsh}
    elif det.level_re_curve:  # the curve's level where A/DAC peaks, position by position
        level = map_detection_level(maps["amplitude"])
    else:  # the level in dB re its reference, as the gate states it (the records name it so)
        ref = float(maps["backwall_loss"].attrs["nominal_fsh"]) if det.reference == "backwall" else det.reference
        level = {"threshold_db": det.threshold_db, "reference": ref}
    backwall: dict[str, Any] = {}
    if "backwall_amplitude" in maps:
        backwall = {"backwall": maps["backwall_amplitude"], "backwall_depth_mm": maps["backwall_depth"]}
    loss = None
    if "backwall_loss" in maps:  # without a loss level: only the back-wall loss under each flaw record
        loss = LossOptions(proc.backwall_loss_threshold_db, loss_map=maps["backwall_loss"])
    return size_indications(
        maps["amplitude"],
        **level,
        **backwall,
        depth_map=maps["depth"],
        detection=DetectionOptions(min_area_mm2=proc.min_area_mm2, min_positions=proc.min_positions),
        loss=loss,
        sizing=SizingOptions(edge=proc.edge),
        dgs=DgsOptions(transfer_correction_db=proc.transfer_correction_db),
        echoes=EchoCheck(grid, backwall_depth_mm=_nominal_backwall_depth_mm(grid, maps.get("backwall_depth")),
                         backwall_depth_map=maps.get("backwall_depth"), curve=curve),
    )


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

    Examples
    --------
    >>> from ndtmap.grid.examples import example_grid
    >>> g = example_grid((4.0, 8.0), (60.0, 80.0)).assign_attrs(part_thickness_mm=23.68)
    >>> p = Procedure("survey", (Gate("flaw", 5.0, 20.0, threshold_fsh=20.0),), "flaw")
    >>> a = run_procedure(g, p)
    >>> [(r.id, r.peak_fsh, round(r.depth_mm, 2)) for r in a.indications]
    [(1, 60.0, 11.84)]
    """
    proc = procedure
    if proc.velocity_m_s is not None or proc.zero_offset_us is not None:
        grid = calibrate(
            grid, velocity_m_s=proc.velocity_m_s, zero_offset_us=proc.zero_offset_us, note=f"procedure {proc.name}"
        )
    gates = {g.name: g for g in proc.gates}
    maps: dict[str, xr.DataArray] = {}
    notes: list[str] = []
    cautions = [_caution()]
    if proc.first_look:
        cautions.append(
            "The gates and threshold were derived from the grid (first look), not from a written "
            "procedure: " + proc.description
        )
    # one pass over the A-scans per gate: every map of a gate is made from the same evaluation; a level in dB
    # re the back wall needs the back-wall gate measured first
    wanted = [proc.detection_gate] if proc.backwall_gate is None else [proc.backwall_gate, proc.detection_gate]
    separate = any(g.needs_reference for g in gates.values()) or proc.recording is not None
    if separate:  # the back wall first: it sets levels re the back wall and a DGS curve
        results = {} if proc.backwall_gate is None else _evaluate_chains(grid, gates, wanted[:1], proc.detect)
    else:
        results = _evaluate_chains(grid, gates, wanted, proc.detect)
    if proc.backwall_gate is not None:
        maps.update(_backwall_maps(grid, proc, results[proc.backwall_gate], notes))
        # the same nominal back-wall level as the back-wall-loss map (the procedure's, else the median)
        nominal = float(maps["backwall_loss"].attrs["nominal_fsh"])
        gates = {name: g.with_reference_fsh(nominal) for name, g in gates.items()}
    curve = _recording_curve(grid, proc, maps)
    if proc.detection_gate not in results or curve is not None:
        results.update(_evaluate_chains(grid, gates, [proc.detection_gate], proc.detect, curve))
    det = gates[proc.detection_gate]
    maps["amplitude"] = amplitude_map(grid, det, detect=proc.detect, result=results[det.name])
    if curve is not None:
        maps["amplitude_re_dac"] = amplitude_map(grid, det, detect=proc.detect, dac=curve, result=results[det.name])
        notes.append(f"recording level: {proc.recording.describe()}; amplitudes re the curve are the maximum of "
                     "A(t)/curve(t) over the gate")
    maps["depth"] = depth_map(grid, det, detect=proc.detect, result=results[det.name])
    rules = load_rules(proc.rules_path()) if proc.rules is not None else None
    records = _curve_notes(_size(grid, proc, det, maps, curve), curve)
    depth = _nominal_backwall_depth_mm(grid, maps.get("backwall_depth"))
    if depth is not None and det.unit == "mm" and det.follows is None and det.start < depth < det.end:
        notes.append(
            f"the detection gate {det.name!r} ({det.start:g}-{det.end:g} mm) contains the back wall at about "
            f"{depth:g} mm: the back-wall echo itself is detected (a geometry echo); end the gate above it"
        )
    screening = None
    if rules is not None:
        records, result = screen_records(records, rules, scanned_area_mm2=scanned_area_mm2(maps["amplitude"]))
        screening = result.as_dict()
    return Analysis(grid=grid, procedure=proc, gates=gates, maps=maps, indications=records, screening=screening,
                    cautions=cautions, notes=notes, source=source, curve=curve)


def procedure_from_options(
    *,
    gate_mm: Iterable[float] | None = None,
    gate_us: Iterable[float] | None = None,
    threshold_fsh: float | None = None,
    mode: str = "peak",
    backwall_gate_mm: Iterable[float] | None = None,
    rules: str | None = None,
    min_area_mm2: float = 0.0,
    detect: str = "rectified",
    threshold_db: float | None = None,
    dac: DacCurve | None = None,
    dgs_fbh_mm: float | None = None,
) -> Procedure:
    """The procedure behind ``ndtmap indications``'s options (a flaw gate, an optional back-wall gate).

    The flaw gate is given in depth, `gate_mm`, or in time from pulse entry,
    `gate_us` (unambiguous where a depth window would cover several legs of
    an angle beam); exactly one of the two.

    The detection level is `threshold_fsh` (%FSH) or `threshold_db`, in dB
    re the recording curve: the DAC `dac`, or the DGS curve of an
    equivalent FBH of `dgs_fbh_mm` set from the back-wall echo (which needs
    `backwall_gate_mm`).

    Examples
    --------
    >>> p = procedure_from_options(gate_mm=(2.0, 20.0), threshold_fsh=25.0, backwall_gate_mm=(23.0, 27.0))
    >>> [g.name for g in p.gates], p.detection_level, p.backwall_gate
    (['flaw', 'backwall'], '25 %FSH', 'backwall')
    >>> from ndtmap.signal import dac_curve
    >>> procedure_from_options(gate_mm=(5, 45), threshold_db=0.0, dac=dac_curve([10, 50], [80, 20])).detection_level
    '0 dB re the DAC'
    """
    if (threshold_fsh is None) == (threshold_db is None):
        raise ParameterError("give exactly one of `threshold_fsh` (%FSH) and `threshold_db` (dB re the DAC or DGS "
                             f"curve), got threshold_fsh={threshold_fsh!r}, threshold_db={threshold_db!r}")
    if dac is not None and dgs_fbh_mm is not None:
        raise ParameterError("give either a DAC (`dac`) or a DGS level (`dgs_fbh_mm`), not both")
    recording = None
    if dac is not None:
        recording = RecordingCurve("dac", dac=dac)
    elif dgs_fbh_mm is not None:
        recording = RecordingCurve("dgs", fbh_mm=dgs_fbh_mm)
    if threshold_db is not None and recording is None:
        raise ParameterError("`threshold_db` is a level in dB re the recording curve: give a DAC (`dac`, the "
                             "command line's --dac FILE) or a DGS level (`dgs_fbh_mm`, --dgs-fbh-mm)")
    if (gate_mm is None) == (gate_us is None):
        raise ParameterError(f"give exactly one of `gate_mm` (depth) and `gate_us` (time from pulse entry), got "
                             f"gate_mm={gate_mm!r}, gate_us={gate_us!r}")
    start, end = gate_mm if gate_mm is not None else gate_us
    unit = "mm" if gate_mm is not None else "us"
    if threshold_db is not None:
        flaw = Gate("flaw", float(start), float(end), unit=unit, threshold_db=float(threshold_db), reference="dac",
                    mode=mode)
    else:
        flaw = Gate("flaw", float(start), float(end), unit=unit, threshold_fsh=float(threshold_fsh), mode=mode)
    gates = [flaw]
    if backwall_gate_mm is not None:
        b0, b1 = backwall_gate_mm
        level = {} if threshold_fsh is None else {"threshold_fsh": float(threshold_fsh)}
        gates.append(Gate("backwall", float(b0), float(b1), **level))
    return Procedure(
        name="command-line options",
        gates=tuple(gates),
        detection_gate="flaw",
        backwall_gate="backwall" if backwall_gate_mm is not None else None,
        min_area_mm2=min_area_mm2,
        detect=detect,
        rules=rules,
        recording=recording,
    )
