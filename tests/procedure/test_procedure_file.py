"""Procedure files: format 1 read by moving the detection level onto the detection gate, format 2 round trip."""

import tomllib
from dataclasses import replace
from importlib import resources
from pathlib import Path

import pytest

from ndtmap.errors import ProcedureError
from ndtmap.gates import Gate
from ndtmap.procedure import (
    PROCEDURE_FORMAT,
    Procedure,
    load_procedure,
    parse_procedure,
    procedure_to_toml,
    save_procedure,
)

DATA = Path(str(resources.files("ndtmap") / "data"))

FORMAT_1 = """
[procedure]
format = "ndtmap-procedure 1"
name = "old survey"

[[gate]]
name = "flaw"
start = 2.0
end = 20.0
threshold_fsh = 20.0

[[gate]]
name = "backwall"
start = 23.0
end = 27.0
threshold_fsh = 20.0

[detection]
gate = "flaw"
{level}

[backwall]
gate = "backwall"
"""


def test_format_1_level_in_fsh_moves_onto_the_detection_gate():
    p = parse_procedure(FORMAT_1.format(level="threshold_fsh = 30.0"))
    assert p.gate("flaw").threshold_fsh == 30.0  # the level the detection used, not the gate's former 20
    assert p.gate("backwall").threshold_fsh == 20.0  # other gates keep theirs
    assert p.detection_level == "30 %FSH"
    assert "threshold_fsh" not in procedure_to_toml(p).split("[detection]")[1].split("[")[0]


def test_format_1_level_in_db_re_the_back_wall_moves_onto_the_detection_gate():
    p = parse_procedure(FORMAT_1.format(level='threshold_db = -12.0\nreference = "backwall"'))
    flaw = p.gate("flaw")
    assert (flaw.threshold_db, flaw.reference) == (-12.0, "backwall")
    assert flaw.needs_reference  # %FSH known only once the back wall is measured
    assert p.detection_level == "-12 dB re the back wall"
    # written back as format 2, the level lives on the gate only
    again = parse_procedure(procedure_to_toml(p))
    assert again == p
    assert tomllib.loads(procedure_to_toml(p))["procedure"]["format"] == PROCEDURE_FORMAT


def test_format_1_inconsistent_levels_are_refused():
    with pytest.raises(ProcedureError, match="only one of"):
        parse_procedure(FORMAT_1.format(level='threshold_fsh = 30.0\nthreshold_db = -6.0\nreference = 80.0'))
    with pytest.raises(ProcedureError, match="only with `detection.threshold_db`"):
        parse_procedure(FORMAT_1.format(level='reference = 80.0'))


def test_format_2_refuses_a_level_in_detection_with_the_hint():
    text = FORMAT_1.replace("ndtmap-procedure 1", PROCEDURE_FORMAT).format(level="threshold_fsh = 30.0")
    with pytest.raises(ProcedureError, match=r"move it to that \[\[gate\]\]") as err:
        parse_procedure(text, source="survey.toml")
    assert "survey.toml" in str(err.value) and "threshold_fsh" in str(err.value)


def test_unknown_format_is_refused():
    with pytest.raises(ProcedureError, match="not supported"):
        parse_procedure(FORMAT_1.replace("ndtmap-procedure 1", "ndtmap-procedure 9").format(level=""))


def test_round_trip_through_tomli_w(tmp_path):
    p = Procedure(
        "survey",
        (Gate("flaw", 2.0, 20.0, threshold_db=-12.0, reference="backwall"),
         Gate("backwall", 23.0, 27.0, threshold_fsh=25.0, mode="first-crossing")),
        "flaw",
        backwall_gate="backwall",
        backwall_nominal_fsh=78.5,
        backwall_loss_threshold_db=6.0,
        min_area_mm2=4.0,
        min_positions=2,
        edge="outermost",
        transfer_correction_db=-1.5,
        velocity_m_s=5920.0,
        rules="rules.toml",
        figures=("amplitude", "dgs"),
        description='quotes " and \\ and unicode µ survive',
    )
    text = procedure_to_toml(p)
    assert tomllib.loads(text) == p.to_dict()  # what tomli-w wrote is the document, exactly
    path = save_procedure(p, tmp_path / "p.toml")
    back = load_procedure(path)
    assert back == p
    assert back.rules_path() == tmp_path / "rules.toml"  # relative to the file


@pytest.mark.parametrize("line", [
    "min_area_mm2 = inf",
    "min_area_mm2 = nan",
])
def test_non_finite_numbers_are_refused_when_read(line):
    text = FORMAT_1.replace("ndtmap-procedure 1", PROCEDURE_FORMAT).format(level=line)
    with pytest.raises(ProcedureError, match="min_area_mm2"):
        parse_procedure(text)


def test_non_finite_gate_limits_and_calibration_are_refused_when_read():
    text = FORMAT_1.replace("ndtmap-procedure 1", PROCEDURE_FORMAT).format(level="")
    with pytest.raises(ProcedureError, match="end"):
        parse_procedure(text.replace("end = 20.0", "end = inf"))
    with pytest.raises(ProcedureError, match="velocity_m_s"):
        parse_procedure(text + "\n[calibration]\nvelocity_m_s = nan\n")


def test_non_finite_numbers_are_refused_when_written():
    p = Procedure("survey", (Gate("flaw", 2.0, 20.0),), "flaw")
    broken = replace(p)
    object.__setattr__(broken, "transfer_correction_db", float("nan"))  # past the checks, as a corrupted object
    with pytest.raises(ProcedureError, match="non-finite"):
        procedure_to_toml(broken)


@pytest.mark.parametrize("name, detection_gate, level", [
    ("plate_lamination_procedure.toml", "flaw", "20 %FSH"),
    ("forging_procedure.toml", "volume", "-28.2 dB re the back wall"),
    ("wall_thickness_procedure.toml", "near-surface", "20 %FSH"),
])
def test_shipped_procedures_parse(name, detection_gate, level):
    p = load_procedure(DATA / name)
    assert p.detection_gate == detection_gate and p.detection_level == level
    assert p.backwall_gate == "backwall" and p.backwall_loss_threshold_db == 6.0
    assert parse_procedure(procedure_to_toml(p), base_dir=p.base_dir) == p
    if p.rules is not None:
        assert p.rules_path().is_file()
