"""run_procedure: levels re the back wall, one screening route, A-scan echo findings built into the records."""

import json
import math

import pytest
from helpers.reflector_plate import (
    BACKWALL_FSH,
    FLAW_DEPTH_MM,
    FLAW_FSH,
    SHADOWED_FSH,
    THICKNESS_MM,
    plate_with_reflector,
)

from ndtmap.gates import Gate
from ndtmap.indications import EchoCheck, IndicationRecord, size_indications
from ndtmap.procedure import Procedure, procedure_from_options, run_procedure

RULES = """
[recording]
name = "record"
level_fsh = 20
[[limit]]
name = "long"
quantity = "length_mm"
max = 3
"""

SIZE_KEYS = ("id", "kind", "scan_mm", "index_mm", "depth_mm", "peak_fsh", "length_scan_mm", "length_index_mm",
             "area_mm2", "detected_area_mm2", "n_positions", "ers_mm", "flags")


@pytest.fixture(scope="module")
def grid():
    return plate_with_reflector()


def _procedure(flaw: Gate, **options) -> Procedure:
    gates = (flaw, Gate("backwall", 18.5, 22.0, threshold_fsh=10.0))
    return Procedure("plate", gates, "flaw", backwall_gate="backwall", **options)


def test_level_in_db_re_the_back_wall_equals_the_same_level_in_fsh(grid):
    in_db = run_procedure(grid, _procedure(Gate("flaw", 2.0, 17.0, threshold_db=-12.0, reference="backwall")))
    # the nominal back wall is the median over the scan: the sound 80 %FSH echo
    nominal = float(in_db.maps["backwall_loss"].attrs["nominal_fsh"])
    assert nominal == pytest.approx(BACKWALL_FSH, rel=0.01)
    level = in_db.gates["flaw"].threshold_fsh
    assert level == pytest.approx(nominal * 10 ** (-12 / 20))  # -12 dB: a quarter of the back wall
    in_fsh = run_procedure(grid, _procedure(Gate("flaw", 2.0, 17.0, threshold_fsh=level)))
    assert len(in_db.indications) == len(in_fsh.indications) == 1
    a, b = in_db.indications[0], in_fsh.indications[0]
    assert {k: a[k] for k in SIZE_KEYS} == {k: b[k] for k in SIZE_KEYS}
    assert a.detection_level == ">= -12 dB re reference" and b.detection_level == f">= {level:g} %FSH"
    assert a.reference_fsh == nominal
    assert a.peak_db == pytest.approx(20 * math.log10(FLAW_FSH / nominal), abs=0.1)
    assert a.depth_mm == pytest.approx(FLAW_DEPTH_MM, abs=0.1)


def test_analysis_holds_records_and_the_json_document(grid):
    analysis = run_procedure(grid, _procedure(Gate("flaw", 2.0, 17.0, threshold_fsh=30.0),
                                              backwall_loss_threshold_db=6.0), source="plate.nc")
    assert all(isinstance(r, IndicationRecord) for r in analysis.indications)
    # one reflector, one record: the loss region under the reflector is its shadow, in its record
    (amp,) = analysis.indications
    assert amp.kind == "amplitude"
    # 12 dB of back-wall loss under the reflector (80 -> 20 %FSH)
    assert amp.backwall_loss_db == pytest.approx(20 * math.log10(BACKWALL_FSH / SHADOWED_FSH), abs=0.2)
    doc = analysis.indications_document()
    assert doc["indications"] == [r.to_dict() for r in analysis.indications]
    assert doc["file"] == "plate.nc" and doc["part_id"] == "KFP-TEST-1"
    json.dumps(doc, allow_nan=False)


def test_screening_is_the_same_from_a_procedure_and_from_python(grid, tmp_path):
    rules = tmp_path / "rules.toml"
    rules.write_text(RULES)
    proc = procedure_from_options(gate_mm=(2.0, 17.0), threshold_fsh=30.0, rules=str(rules))
    analysis = run_procedure(grid, proc)
    direct = size_indications(analysis.maps["amplitude"], threshold_fsh=30.0, depth_map=analysis.maps["depth"],
                              echoes=EchoCheck(grid), rules=rules)
    assert [r.to_dict() for r in analysis.indications] == [r.to_dict() for r in direct]
    (rec,) = analysis.indications
    # the small reflector's drop length measured the beam: screening leaves the length rule open
    assert {"smaller_than_beam", "near_field"} <= set(rec.flags)
    assert rec.screening == "not screened: review required (smaller_than_beam, near_field)"
    assert rec.exceeded_rules == ()
    assert analysis.screening["overall"] == f"not screened: review required (indication {rec.id}: " \
                                           "smaller_than_beam, near_field)"
    assert analysis.screening["indications"][0]["statement"] == rec.screening


def test_echo_findings_are_built_into_the_records(grid):
    # a gate that reaches the back wall: the back-wall echo is detected and found to be a geometry echo
    analysis = run_procedure(grid, procedure_from_options(gate_mm=(2.0, 22.0), threshold_fsh=30.0))
    rec = analysis.indications[0]
    assert rec.depth_mm == pytest.approx(THICKNESS_MM, abs=0.2)
    assert rec.flags[-1] == "backwall_echo"
    assert any("geometry echo of the back wall" in n for n in rec.notes)
    assert any("contains the back wall" in n for n in analysis.notes)
    # without the A-scan check the same record has no such flag
    plain = size_indications(analysis.maps["amplitude"], threshold_fsh=30.0, depth_map=analysis.maps["depth"])
    assert "backwall_echo" not in plain[0].flags


def test_default_level_is_the_gate_level_of_the_map(grid):
    analysis = run_procedure(grid, procedure_from_options(gate_mm=(2.0, 17.0), threshold_fsh=30.0))
    from_gate = size_indications(analysis.maps["amplitude"], depth_map=analysis.maps["depth"],
                                 echoes=EchoCheck(grid))
    assert [r.to_dict() for r in from_gate] == [r.to_dict() for r in analysis.indications]
    assert from_gate[0].detection_level == ">= 30 %FSH"
