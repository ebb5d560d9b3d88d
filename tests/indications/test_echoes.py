"""Repeat and back-wall echoes found from the A-scans: findings returned, records built with them."""

import numpy as np
import pytest
from helpers.burst_grids import STEEL_L, grid_from

from ndtmap.errors import ParameterTypeError
from ndtmap.gates import Gate
from ndtmap.indications import EchoCheck, EchoFindings, classify_echoes, detect_indications, size_indications
from ndtmap.scans import amplitude_map, depth_map


def _t(depth_mm):
    return 2.0 * depth_mm / (STEEL_L * 1e-3)  # pulse-echo time of a straight-beam echo, zero offset 0


def _grid(primary_fsh, repeat_fsh, thickness_mm=40.0):
    # a reflector at 9 mm and its double reflection at 18 mm (reflector - surface - reflector)
    return grid_from(lambda s, x: [(_t(9.0), primary_fsh), (_t(18.0), repeat_fsh)], duration_us=15.0,
                     attrs={"part_thickness_mm": thickness_mm})


def _deep_indications(grid):
    deep = Gate("deep", 14.0, 22.0, threshold_fsh=10.0)
    return detect_indications(amplitude_map(grid, deep), threshold_fsh=10.0, depth_map=depth_map(grid, deep))


def test_repeat_echo_found_when_a_stronger_echo_sits_at_half_the_depth():
    grid = _grid(80.0, 30.0)
    inds = _deep_indications(grid)
    found = classify_echoes(grid, inds)
    assert set(found) == {inds[0].id}
    assert found[inds[0].id].flags == ("repeat_echo",)
    assert "1/2 of this depth" in found[inds[0].id].notes[0]


def test_no_finding_when_the_shallower_echo_is_weaker():
    grid = _grid(20.0, 30.0)  # the deeper echo is the stronger: a reflector of its own
    assert classify_echoes(grid, _deep_indications(grid)) == {}


def test_backwall_echo_at_the_nominal_depth():
    grid = _grid(0.0, 60.0, thickness_mm=18.0)
    (ind,) = _deep_indications(grid)
    assert classify_echoes(grid, [ind])[ind.id].flags == ("backwall_echo",)
    assert classify_echoes(grid, [ind], backwall_depth_mm=30.0) == {}


def test_records_are_built_with_the_findings_and_never_changed():
    grid = _grid(80.0, 30.0)
    deep = Gate("deep", 14.0, 22.0, threshold_fsh=10.0)
    amp, dep = amplitude_map(grid, deep), depth_map(grid, deep)
    (plain,) = size_indications(amp, depth_map=dep)
    (checked,) = size_indications(amp, depth_map=dep, echoes=EchoCheck(grid))
    assert "repeat_echo" not in plain.flags and checked.flags[-1] == "repeat_echo"
    assert checked.notes[: len(plain.notes)] == plain.notes  # the A-scan notes come last
    assert classify_echoes(grid, [plain]) == {plain.id: EchoFindings(checked.flags[-1:], checked.notes[-1:])}
    assert "repeat_echo" not in plain.flags  # classify_echoes reads records, it does not change them


def test_immersion_grids_are_skipped_and_bad_items_refused():
    grid = _grid(80.0, 30.0)
    grid.attrs["water_path_mm"] = 20.0
    assert classify_echoes(grid, _deep_indications(grid)) == {}
    with pytest.raises(ParameterTypeError, match="IndicationRecord"):
        classify_echoes(grid, [{"id": 1}])
    with pytest.raises(ParameterTypeError, match="echoes.grid"):
        EchoCheck(np.zeros(3))
