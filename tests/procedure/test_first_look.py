"""The first-look procedure: gates placed from the grid's own back wall, a level from its noise."""

import numpy as np
import pytest
from helpers.burst_grids import STEEL_L, grid_from, plate_grid
from helpers.reflector_plate import THICKNESS_MM, plate_with_reflector

from ndtmap.errors import ParameterError
from ndtmap.indications import echo_half_length_mm
from ndtmap.procedure import first_look_procedure, run_procedure
from ndtmap.procedure.first_look import FIRST_LOOK_MIN_FSH


def test_gates_frame_the_back_wall_and_stay_clear_of_it():
    grid = plate_with_reflector()
    p = first_look_procedure(grid)
    flaw, bw = p.gate("flaw"), p.gate("backwall")
    echo = echo_half_length_mm(grid)
    assert p.first_look and p.detection_gate == "flaw" and p.backwall_gate == "backwall"
    assert flaw.start >= 1.0 and flaw.end <= THICKNESS_MM - 1.5 * echo + 0.01  # one echo length above the wall
    assert bw.start < THICKNESS_MM < bw.end
    half = max(2 * echo, 0.05 * THICKNESS_MM)  # the wall +/- max(2 echo lengths, 5 %), not into the flaw gate
    assert bw.end == pytest.approx(THICKNESS_MM + half, abs=0.01)
    assert bw.start == pytest.approx(max(THICKNESS_MM - half, flaw.end), abs=0.01)
    assert p.detection_level == f"{FIRST_LOOK_MIN_FSH:g} %FSH"  # no noise: the floor of the level
    assert p.backwall_loss_threshold_db == 6.0


def test_level_follows_the_noise_in_the_flaw_gate():
    quiet = first_look_procedure(plate_grid(THICKNESS_MM, scan_mm=np.arange(6.0), index_mm=np.arange(5.0)))
    grassy = first_look_procedure(plate_grid(THICKNESS_MM, scan_mm=np.arange(6.0), index_mm=np.arange(5.0),
                                             noise_fsh=8.0, duration_us=16.0))
    assert quiet.gate("flaw").threshold_fsh == FIRST_LOOK_MIN_FSH
    assert grassy.gate("flaw").threshold_fsh > FIRST_LOOK_MIN_FSH  # twice the median noise peak


def test_back_wall_found_without_the_thickness_attribute():
    grid = plate_with_reflector()
    grid.attrs = {k: v for k, v in grid.attrs.items() if k != "part_thickness_mm"}
    bw = first_look_procedure(grid).gate("backwall")
    assert bw.start < THICKNESS_MM < bw.end


def test_angle_beam_and_thin_wall_are_refused():
    with pytest.raises(ParameterError, match="straight beam"):
        first_look_procedure(plate_grid(THICKNESS_MM, beam_angle_deg=45.0, duration_us=9.0))
    thin = grid_from(lambda s, x: [(2.0 * 1.5 / (STEEL_L * 1e-3), 80.0)], attrs={"part_thickness_mm": 1.5})
    with pytest.raises(ParameterError, match="too thin"):
        first_look_procedure(thin)


def test_run_states_the_first_look():
    grid = plate_with_reflector()
    analysis = run_procedure(grid, first_look_procedure(grid))
    assert any("first look" in c for c in analysis.cautions)
    # the back-wall loss under the reflector is in its record (one reflector, one record)
    assert [r.kind for r in analysis.indications] == ["amplitude"]
    assert analysis.indications[0].backwall_loss_db > 6.0
