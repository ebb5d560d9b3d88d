"""The workbench state, driven without a browser, against the truth of the sample grids.

The sample grids are simulated (ndtmap.simulate.model) and carry their truth: reflector outlines and
depths, the wall thickness at every position. The state must give the same numbers as the
command-line functions (maps, sections, run_procedure) and sizes that agree with the truth.
"""

import json
import math
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

import ndtmap
from ndtmap.errors import GateError, NdtmapError, ParameterError, SizingError
from ndtmap.gates import Gate, evaluate_gate
from ndtmap.grid import ascan_in_fsh, make_grid
from ndtmap.indications import detect_indications, drop_length
from ndtmap.procedure import load_procedure, run_procedure
from ndtmap.scans import MAP_KINDS, b_scan, d_scan, map_by_kind
from ndtmap.simulate import sample_path, scan_truth
from ndtmap.workbench.listing import indication_details
from ndtmap.workbench.state import WorkbenchState, default_procedure

ROOT = Path(__file__).resolve().parents[2]


@pytest.fixture(scope="module")
def plate():
    return ndtmap.open_grid(sample_path("plate_laminations.nc"))


@pytest.fixture(scope="module")
def plate_truth(plate):
    return {r["label"].split()[0]: r for r in scan_truth(plate)["reflectors"]}


@pytest.fixture()
def state(plate):
    return WorkbenchState(plate, source=str(sample_path("plate_laminations.nc")))


def _step(c):
    return float(np.median(np.diff(np.asarray(c, dtype=float))))


# ---------------------------------------------------------------------------- maps


@pytest.mark.parametrize("gate_name", ["flaw", "backwall"])
def test_every_map_kind_equals_the_command_line_map(state, plate, gate_name):
    # the workbench must show what `ndtmap map --kind ...` computes (ndtmap.scans.maps.map_by_kind)
    state.set_active_gate(gate_name)
    for kind in MAP_KINDS:
        shown = state.map(kind)
        ref = map_by_kind(plate, kind, state.gate(gate_name)).values
        assert shown.attrs["units"] == {"amplitude": "%FSH", "depth": "mm", "thickness": "mm",
                                        "backwall-loss": "dB"}[kind]
        assert np.array_equal(np.isnan(shown.values), np.isnan(ref))
        np.testing.assert_allclose(shown.values, ref, rtol=1e-12, atol=1e-9, equal_nan=True)


def test_changing_the_map_kind_or_redrawing_does_not_recompute(state):
    state.map("amplitude")
    key = state.gate_key()
    assert state.has_gate_result()
    res = state.gate_result()
    for kind in MAP_KINDS:
        state.map(kind)
    assert state.gate_result() is res and state.gate_key() == key
    state.set_gate("flaw", end=20.0)
    assert not state.has_gate_result()
    state.set_gate("flaw", end=23.51)  # back to the first definition: from the cache
    assert state.gate_result() is res


def test_cut_grid_gives_the_same_gate_result_as_the_whole_grid_with_missing_ascans_and_following_gates():
    # an A-scan with a NaN far outside the window is missing (ndtmap.grid.schema contract), also when the workbench
    # evaluates the gate on the cut record; a following gate's windows are the same
    rng = np.random.default_rng(7)
    t = np.arange(0.0, 20.0, 0.02)
    a = (rng.standard_normal((6, 5, t.size)) * 2.0).astype(np.float32)
    for k, tc in enumerate((4.0, 8.0, 12.0)):
        a[..., int(tc / 0.02):int(tc / 0.02) + 12] += np.float32(60.0 * 0.7**k)
    a[2, 3, -5] = np.nan  # a drop-out near the end of the record
    grid = make_grid(a, scan_mm=np.arange(6.0), index_mm=np.arange(5.0) * 2, time_us=t, velocity_m_s=5920.0,
                     probe_frequency_mhz=5.0, probe_diameter_mm=10.0)
    bw1 = Gate("bw1", 10.0, 14.0, threshold_fsh=20.0)
    bw2 = Gate("bw2", 8.0, 16.0, threshold_fsh=20.0, follows="bw1")
    from ndtmap.procedure import Procedure

    st = WorkbenchState(grid, procedure=Procedure("t", (bw1, bw2), "bw1"))
    for g in (bw1, bw2):
        full = evaluate_gate(grid, g, others=[bw1])
        cut = st.gate_result(g.name)
        assert cut.sizes["scan"] == 6
        for var in ("amplitude_fsh", "time_us", "depth_mm"):
            np.testing.assert_allclose(cut[var].values, full[var].values, rtol=1e-12, atol=1e-9, equal_nan=True)
        assert np.array_equal(cut["triggered"].values, full["triggered"].values)
        assert math.isnan(float(cut["amplitude_fsh"].values[2, 3]))


def test_envelope_depth_of_the_laminations_matches_the_truth(state, plate, plate_truth):
    # pulse-echo depth d = c t / 2 (Krautkramer, Ultrasonic Testing of Materials, time-of-flight measurement)
    state.set_detect("envelope")
    depth = state.map("depth")
    dz = 5920.0e-3 * float(plate.time[1] - plate.time[0]) / 2  # one sample in depth
    for label, at in (("L1", (37.5, 24.0)), ("L2", (87.0, 52.0))):
        z = float(depth.sel(scan=at[0], index=at[1]).values)
        assert z == pytest.approx(plate_truth[label]["depth_mm"], abs=2 * dz)


def test_minimum_remaining_wall_of_the_corroded_section_matches_the_truth():
    grid = ndtmap.open_grid(sample_path("corroded_wall.nc"))
    truth = scan_truth(grid)["part"]
    st = WorkbenchState(grid)
    st.set_gate("backwall", start=6.0)  # open the back-wall gate over the thinned areas
    st.set_active_gate("backwall")
    thick = st.map("thickness")
    # thickness = c (t_bw - t_0) / 2 (Krautkramer, time-of-flight thickness measurement); a rectified RF peak
    # lies within half a period of the echo centre: half the pulse-echo wavelength, lambda / 2
    half_lambda = 0.5 * 5920.0 / 5.0e3 / 2
    assert float(np.nanmin(thick.values)) == pytest.approx(truth["min_thickness_mm"], abs=half_lambda)
    err = thick.values - grid["truth_thickness_mm"].values
    assert float(np.nanmedian(np.abs(err))) < half_lambda
    assert np.all(np.isnan(thick.values[grid["missing"].values]))  # missing stays missing


# ---------------------------------------------------------------------------- gates


def test_gate_edit_changes_the_map_and_a_bad_edit_leaves_everything_as_it_was(state):
    before = state.map("amplitude").values.copy()
    state.set_gate("flaw", end=15.0)  # lamination L2 at 17 mm leaves the gate
    after = state.map("amplitude").values
    assert float(after[np.argmin(abs(state.scan_mm - 87.0)), np.argmin(abs(state.index_mm - 52.0))]) < 20.0
    assert not np.array_equal(before, after)
    gate = state.gate("flaw")
    with pytest.raises(GateError, match="start"):
        state.set_gate("flaw", start=20.0)  # start after end
    with pytest.raises(GateError, match="outside"):
        state.set_gate("flaw", end=80.0)  # beyond the 17.5 us record
    assert state.gate("flaw") == gate


def test_add_follow_and_remove_gates(state, plate):
    # a gate after the first back-wall echo finds the second one at twice the wall (multiple echoes,
    # Krautkramer, Ultrasonic Testing of Materials, multiple-echo method)
    state.add_gate(Gate("bw2", 22.0, 26.0, threshold_fsh=10.0, follows="backwall"))
    state.set_active_gate("bw2")
    depth = state.map("depth").values
    assert float(np.nanmedian(depth)) == pytest.approx(2 * 25.0, abs=0.6)
    with pytest.raises(GateError, match="followed"):
        state.remove_gate("backwall")
    with pytest.raises(GateError, match="exists"):
        state.add_gate("bw2")
    state.remove_gate("bw2")
    assert state.gate_names == ("flaw", "backwall") and state.active_gate == "flaw"
    with pytest.raises(GateError, match="indication list"):
        state.remove_gate("flaw")
    copy = state.add_gate("flaw 2")
    assert (copy.start, copy.end) == (state.gate("flaw").start, state.gate("flaw").end)


def test_unit_conversion_keeps_the_window(state, plate):
    before = state.map("amplitude").values.copy()
    g_us = state.convert_unit("flaw", "us")
    # t = 2 d / c (pulse-echo), d in mm and c in mm/us
    assert g_us.end == pytest.approx(2 * 23.51 / 5.92, abs=1e-4)
    np.testing.assert_array_equal(state.map("amplitude").values, before)
    assert state.convert_unit("flaw", "mm").end == pytest.approx(23.51, abs=1e-3)


def test_default_procedure_for_an_angle_beam_grid_is_one_gate():
    from ndtmap.grid.examples import example_grid

    p = default_procedure(example_grid(beam_angle_deg=45.0))
    assert len(p.gates) == 1 and p.gates[0].threshold_fsh == 20.0 and p.detection_level == "20 %FSH"
    st = WorkbenchState(example_grid(beam_angle_deg=45.0))
    assert st.map().dims == ("scan", "index")


# ---------------------------------------------------------------------------- selection, A-scan, sections


def test_select_point_snaps_and_the_ascan_and_sections_are_those_of_the_grid(state, plate):
    assert state.select_point(37.2, 24.9) == (37.5, 24.0)
    with pytest.raises(ParameterError, match="scan_mm"):
        state.select_point(500.0, 10.0)
    view = state.ascan()
    i, j = state.point_indices()
    raw = ascan_in_fsh(plate).values[i, j]
    np.testing.assert_allclose(view.signal_fsh, np.abs(raw))  # rectified = |RF|
    np.testing.assert_allclose(view.rf_fsh, raw)
    marks = {m.name: m for m in view.gates}
    assert marks["flaw"].triggered and marks["flaw"].start_at == pytest.approx(1.0)
    l1 = next(r for r in scan_truth(plate)["reflectors"] if r["label"].startswith("L1"))
    assert marks["flaw"].event_at == pytest.approx(l1["depth_mm"], abs=0.5)  # the echo of lamination L1
    np.testing.assert_array_equal(state.b_scan().values, b_scan(plate, 24.0).values)
    np.testing.assert_array_equal(state.d_scan().values, d_scan(plate, 37.5).values)
    lines = {g.name: g for g in state.section_gates("scan")}
    assert np.allclose(lines["backwall"].start_depth_mm, 23.51)


# ---------------------------------------------------------------------------- measuring


def test_6db_length_of_lamination_l1_is_within_a_grid_step_of_the_truth(state, plate, plate_truth):
    # 6 dB drop on a planar reflector larger than the beam: the half-amplitude points are its edges
    # (ISO 16827, general principle; Krautkramer, Ultrasonic Testing of Materials, drop methods)
    l1 = plate_truth["L1"]
    m = state.measure((10.0, l1["index_mm"]), (64.0, l1["index_mm"]))
    assert m.result.method == "6 dB drop"
    assert m.result.length_mm == pytest.approx(l1["length_scan_mm"], abs=_step(plate.scan))
    assert m.result.start_mm[0] == pytest.approx(l1["scan_range_mm"][0], abs=_step(plate.scan))
    assert m.level_fsh == pytest.approx(0.5 * m.indication_peak_fsh)  # 6 dB = half the peak
    assert m.result.uncertainty_mm > 0
    # the same number as ndtmap.indications.sizing.drop_length on the same map and line
    amp = state.map("amplitude")
    ind = [k for k in detect_indications(amp, threshold_fsh=state.gate().threshold_fsh)
           if k.region[np.argmin(abs(amp.scan.values - 37.5)), np.argmin(abs(amp.index.values - 24.0))]][0]
    ref = drop_length(amp, ind, line=((10.0, l1["index_mm"]), (64.0, l1["index_mm"])))
    assert m.result == ref
    # the profile crosses the level at the two ends
    a, b = m.crossings_distance_mm
    assert np.interp(a, m.distance_mm, m.profile_fsh) == pytest.approx(m.level_fsh, rel=0.05)
    assert b - a == pytest.approx(m.result.length_mm)
    across = state.measure((37.0, 2.0), (37.0, 46.0))
    assert across.result.length_mm == pytest.approx(l1["length_index_mm"], abs=_step(plate.index))


def test_two_picks_measure_and_a_line_off_the_indications_is_refused(state):
    state.set_tool("measure")
    assert state.add_measure_point(10.0, 24.0) is None
    m = state.add_measure_point(64.0, 24.0)
    assert m is not None and m.result.length_mm is not None
    with pytest.raises(SizingError, match="crosses no indication"):
        state.measure((0.0, 45.0), (10.0, 45.0))


def test_measurement_follows_a_gate_edit(state):
    state.measure((10.0, 24.0), (64.0, 24.0))
    state.set_gate("flaw", end=10.0)  # L1 at 12.5 mm leaves the gate
    with pytest.raises(SizingError):
        state.measurement()
    state.set_gate("flaw", end=23.51)
    assert state.measurement().result.length_mm == pytest.approx(30.0, abs=1.5)


# ---------------------------------------------------------------------------- indications and procedures


def test_indication_list_is_run_procedure_and_picking_centres_the_views(state, plate, plate_truth):
    recs = state.indications()
    ref = run_procedure(plate, state.procedure()).indications
    assert [r.to_dict() for r in recs] == [r.to_dict() for r in ref]
    l1 = plate_truth["L1"]
    (s0, s1), (i0, i1) = l1["scan_range_mm"], l1["index_range_mm"]
    hit = [r for r in recs if r["kind"] == "amplitude" and s0 <= r["scan_mm"] <= s1 and i0 <= r["index_mm"] <= i1]
    assert len(hit) == 1
    rec = state.pick_indication(hit[0]["id"])
    assert state.point == (rec["scan_mm"], rec["index_mm"]) and state.selected_indication == rec["id"]
    assert rec["length_scan_mm"] == pytest.approx(l1["length_scan_mm"], abs=_step(plate.scan))
    rows = dict(indication_details(rec))
    for flag in rec["flags"]:
        assert rows[f"flag {flag}"] == ndtmap.indications.flags.FLAG_MEANINGS[flag]
    with pytest.raises(ParameterError):
        state.pick_indication(999)


def test_threshold_edit_changes_the_indication_list(state, plate):
    from dataclasses import replace

    from ndtmap.procedure import first_look_procedure

    before = state.indications()
    state.set_gate("flaw", threshold_fsh=78.0)  # near the peaks of the laminations (73-80 %FSH)
    after = state.indications()
    assert after != before
    assert all(r["peak_fsh"] >= 78.0 for r in after if r["kind"] == "amplitude")
    # the same list as the first-look procedure with its detection level moved to 78 %FSH
    base = first_look_procedure(plate)
    gates = tuple(replace(g, threshold_fsh=78.0) if g.name == "flaw" else g for g in base.gates)
    ref = run_procedure(plate, replace(base, gates=gates)).indications
    assert [r.to_dict() for r in after] == [r.to_dict() for r in ref]
    assert state.procedure().gate("flaw").threshold_fsh == 78.0


def test_saved_procedure_replayed_by_the_command_line_gives_the_same_indications(state, tmp_path):
    state.set_gate("flaw", threshold_fsh=25.0, end=20.0)
    state.set_min_area_mm2(10.0)
    path = state.save_procedure(tmp_path / "saved.toml")
    back = load_procedure(path)
    assert back == state.procedure()
    assert back.first_look is False and "workbench" in back.name
    env = dict(os.environ, PYTHONPATH=os.pathsep.join([str(ROOT), os.environ.get("PYTHONPATH", "")]))
    out = subprocess.run(
        [sys.executable, "-m", "ndtmap", "indications", str(sample_path("plate_laminations.nc")), "--procedure",
         str(path), "--format", "json"], capture_output=True, text=True, env=env, timeout=120, check=True,
    )
    doc = json.loads(out.stdout)
    assert doc["indications"] == [r.to_dict() for r in state.indications()]
    assert ndtmap.CAUTION in doc["cautions"]


def test_unchanged_first_look_settings_stay_first_look(state):
    assert state.procedure().first_look is True
    state.set_gate("flaw", threshold_fsh=12.0)
    assert state.procedure().first_look is False


def test_bad_inputs_raise_ndtmap_errors(state, tmp_path):
    with pytest.raises(NdtmapError):
        state.set_map_kind("colour")
    with pytest.raises(NdtmapError):
        state.set_gate("nothing", end=3.0)
    with pytest.raises(NdtmapError):
        state.set_gate("flaw", colour="red")
    with pytest.raises(NdtmapError):
        state.save_procedure(tmp_path / "no-folder" / "p.toml")
    with pytest.raises(NdtmapError):
        state.save_procedure(tmp_path / "p.txt")
    with pytest.raises(NdtmapError):
        WorkbenchState("not a grid")


# ---------------------------------------------------------------------------- dask-backed grids


def test_dask_backed_grid_gives_the_same_map_and_reports_progress(plate):
    lazy = ndtmap.open_grid(sample_path("plate_laminations.nc"), lazy=True)
    assert lazy["ascan"].chunks is not None
    st = WorkbenchState(lazy)
    seen = []
    m = st.map("amplitude", progress=lambda f, text: seen.append((f, text)))
    ref = WorkbenchState(plate).map("amplitude")
    np.testing.assert_allclose(m.values, ref.values, equal_nan=True)
    assert seen and all(0.0 <= f <= 1.0 for f, _ in seen if f is not None)
    assert seen[-1][0] == pytest.approx(1.0)


# ---------------------------------------------------------------------------- settings as one procedure


def test_settings_are_one_procedure_and_every_edit_makes_a_new_one(state):
    from ndtmap.procedure import Procedure

    before = state.settings
    assert isinstance(before, Procedure)
    state.set_gate("flaw", threshold_fsh=30.0)
    state.set_detection(min_area_mm2=5.0)
    after = state.settings
    assert after is not before and before.gate("flaw").threshold_fsh != 30.0 and before.min_area_mm2 == 0.0
    assert after.gate("flaw").threshold_fsh == 30.0 and after.min_area_mm2 == 5.0
    with pytest.raises(GateError, match="both"):
        state.set_detection(backwall_gate="flaw")  # the searched gate cannot be the back-wall gate
    with pytest.raises(NdtmapError):
        state.set_detection(min_area_mm2=-1.0)
    assert state.settings is after  # a refused edit leaves the settings as they were


def test_a_loss_level_needs_a_back_wall_gate_and_goes_with_it(state):
    assert state.settings.backwall_gate == "backwall"
    state.set_detection(backwall_gate=None, loss_threshold_db=6.0)  # the view sends all settings at once
    assert state.settings.backwall_gate is None and state.settings.backwall_loss_threshold_db is None
    with pytest.raises(GateError, match="back-wall gate"):
        state.set_loss_threshold_db(6.0)
    state.set_detection(backwall_gate="backwall", loss_threshold_db=6.0)
    assert state.settings.backwall_loss_threshold_db == 6.0


def test_the_indication_list_is_cached_by_the_procedure(state, monkeypatch):
    import ndtmap.workbench.state as wb_state

    first = state.analysis()
    calls = []
    real = wb_state.run_procedure
    monkeypatch.setattr(wb_state, "run_procedure", lambda *a, **k: calls.append(1) or real(*a, **k))
    state.set_gate("flaw", threshold_fsh=40.0)
    assert not state.has_analysis()
    second = state.analysis()
    assert calls == [1] and second is not first
    state.set_gate("flaw", threshold_fsh=first.procedure.gate("flaw").threshold_fsh)  # back to the first settings
    assert state.has_analysis() and state.analysis() is first and calls == [1]  # from the cache, not run again


def test_a_level_in_db_re_the_back_wall_is_resolved_once_and_saved_in_db(plate):
    from dataclasses import replace

    from ndtmap.procedure import first_look_procedure

    base = first_look_procedure(plate)
    gates = tuple(replace(g, threshold_fsh=None, threshold_db=-12.0, reference="backwall") if g.name == "flaw" else g
                  for g in base.gates)
    proc = replace(base, gates=gates)
    st = WorkbenchState(plate, procedure=proc)
    nominal = float(map_by_kind(plate, "backwall-loss", proc.gate("backwall")).attrs["nominal_fsh"])
    # -12 dB re the back wall: nominal * 10^(-12/20) (the decibel, amplitude ratio)
    assert st.gate("flaw").threshold_fsh == pytest.approx(nominal * 10 ** (-12.0 / 20.0), rel=1e-12)
    saved = st.procedure()
    assert saved.gate("flaw").threshold_fsh is None and saved.gate("flaw").threshold_db == -12.0
    assert [r.to_dict() for r in st.indications()] == [r.to_dict() for r in run_procedure(plate, proc).indications]


def test_immersion_thickness_counts_from_the_interface_echo():
    # thickness = c (t_backwall - t_interface) / 2 (Krautkramer, immersion testing, from memory): the water path
    # varies from position to position, the thickness does not
    from helpers.burst_grids import grid_from

    from ndtmap.procedure import Procedure
    from ndtmap.scans import thickness_map

    wall_us = 2 * 12.0 / 5.92  # 12 mm of steel
    grid = grid_from(lambda s, i: [(2.0 + 0.3 * s, 80.0), (2.0 + 0.3 * s + wall_us, 50.0)],
                     attrs={"water_path_mm": 15.0})
    iface = Gate("interface", 1.0, 3.5, unit="us", threshold_fsh=30.0)
    bw = Gate("backwall", 2.0, 6.0, unit="us", threshold_fsh=20.0, follows="interface")
    st = WorkbenchState(grid, procedure=Procedure("immersion", (iface, bw), "interface"))
    thick = st.map("thickness", "backwall")
    ref = thickness_map(grid, bw, reference_gate=iface, method="interface-to-backwall")
    np.testing.assert_allclose(thick.values, ref.values, rtol=1e-12)
    half_period = 0.5 * 5.92 / 5.0 / 2  # a rectified RF peak lies within half a period of the echo centre
    assert np.allclose(thick.values, 12.0, atol=half_period)
    assert thick.attrs["thickness_method"] == "interface-to-backwall"
    assert st.map("thickness", "backwall") is thick  # cached with the gate results
