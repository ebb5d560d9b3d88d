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
from dataclasses import dataclass
from typing import Any

import numpy as np
import xarray as xr

from ndtmap._shared.caution import CAUTION
from ndtmap.errors import NdtmapError
from ndtmap.gates import Gate, evaluate_gates, gate_chain
from ndtmap.grid.calibration import calibrate
from ndtmap.grid.schema import grid_attr
from ndtmap.indications import (
    DetectionOptions,
    DgsOptions,
    EchoCheck,
    IndicationRecord,
    LossOptions,
    SizingOptions,
    load_rules,
    scanned_area_mm2,
    screen_records,
    size_indications,
)
from ndtmap.procedure.definition import Procedure
from ndtmap.scans import amplitude_map, backwall_loss_map, depth_map, thickness_map

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
        ``thickness``.
    indications : list of IndicationRecord
        Sized, flagged (and, with rules, screened) indications (see
        :func:`ndtmap.size_indications`).
    screening : dict or None
        Screening result when the procedure names rules.
    cautions : list of str
    notes : list of str
    source : str or None
        Where the grid came from.
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

    def indications_document(self) -> dict[str, Any]:
        """The JSON document of ``ndtmap indications --format json`` (records by ``to_dict()``)."""
        gate = self.procedure.gate(self.procedure.detection_gate)
        return {
            "file": self.source,
            "part_id": self.grid.attrs.get("part_id"),
            "gate": gate.to_dict(),
            "threshold_fsh": gate.threshold_fsh if gate.threshold_db is None else None,
            "threshold_db": gate.threshold_db,
            "procedure": self.procedure.name,
            "indications": [rec.to_dict() for rec in self.indications],
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


def _size(grid: xr.Dataset, proc: Procedure, det: Gate, maps: Mapping[str, xr.DataArray]) -> list[IndicationRecord]:
    """size_indications on the detection maps with the procedure's options."""
    if det.threshold_db is None:
        level: dict[str, Any] = {"threshold_fsh": det.threshold_fsh}
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
                         backwall_depth_map=maps.get("backwall_depth")),
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
    first = wanted if not any(g.needs_reference for g in gates.values()) else wanted[:1]
    results = _evaluate_chains(grid, gates, first, proc.detect)
    if proc.backwall_gate is not None:
        maps.update(_backwall_maps(grid, proc, results[proc.backwall_gate], notes))
        # the same nominal back-wall level as the back-wall-loss map (the procedure's, else the median)
        nominal = float(maps["backwall_loss"].attrs["nominal_fsh"])
        gates = {name: g.with_reference_fsh(nominal) for name, g in gates.items()}
    if proc.detection_gate not in results:
        results.update(_evaluate_chains(grid, gates, [proc.detection_gate], proc.detect))
    det = gates[proc.detection_gate]
    maps["amplitude"] = amplitude_map(grid, det, detect=proc.detect, result=results[det.name])
    maps["depth"] = depth_map(grid, det, detect=proc.detect, result=results[det.name])
    rules = load_rules(proc.rules_path()) if proc.rules is not None else None
    records = _size(grid, proc, det, maps)
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
                    cautions=cautions, notes=notes, source=source)


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
    """The procedure behind ``ndtmap indications``'s options (a flaw gate in depth mm, an optional back-wall gate).

    Examples
    --------
    >>> p = procedure_from_options(gate_mm=(2.0, 20.0), threshold_fsh=25.0, backwall_gate_mm=(23.0, 27.0))
    >>> [g.name for g in p.gates], p.detection_level, p.backwall_gate
    (['flaw', 'backwall'], '25 %FSH', 'backwall')
    """
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
