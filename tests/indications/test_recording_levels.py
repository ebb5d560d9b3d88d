"""Recording levels re a DAC and a DGS curve, and the digitiser's clipping through software gain.

Outside references: the DAC is interpolated linearly in dB between reference echoes (common practice for
distance-amplitude correction, no source; the hand-worked numbers are in each test); the DGS relation
H_FBH/H_BW = pi d^2 z_BW / (2 lambda z^2) (Krautkramer, Ultrasonic Testing of Materials, ch. 5) worked by
hand; inside the near field the numerical Rayleigh integral of tests/helpers/rayleigh.py (Kinsler & Frey,
Fundamentals of Acoustics, ch. 7), which does not use ndtmap. The A-scans are built here from
scipy.signal.gausspulse echoes, not with ndtmap's simulator.
"""

from __future__ import annotations

import contextlib
import io
import json
import math

import numpy as np
import pytest
from helpers import rayleigh
from scipy.signal import gausspulse

import ndtmap
from ndtmap.cli import main
from ndtmap.gates import Gate, evaluate_gate
from ndtmap.grid.schema import make_grid
from ndtmap.indications import RecordingCurve, dgs_recording_curve, size_indications
from ndtmap.io import save_grid
from ndtmap.procedure import Procedure, parse_procedure, procedure_to_toml, run_procedure
from ndtmap.scans import amplitude_map
from ndtmap.signal import DacCurve, apply_tcg, dac_curve

STEEL = 5920.0  # m/s, longitudinal (from memory)
DT = 0.02  # us
T = np.arange(0.0, 20.0, DT)


def _depth(t_us: float) -> float:
    return t_us * STEEL * 1e-3 / 2.0


def _echo(t0_us: float, amp_fsh: float) -> np.ndarray:
    return amp_fsh * gausspulse(T - t0_us, fc=5.0, bw=0.5)


def _grid(a: np.ndarray, **attrs: float) -> object:
    n_scan, n_index = a.shape[:2]
    return make_grid(a.astype(np.float32), scan_mm=np.arange(float(n_scan)), index_mm=np.arange(float(n_index)),
                     time_us=T, velocity_m_s=STEEL, probe_frequency_mhz=5.0, probe_diameter_mm=10.0, attrs=attrs)


# --------------------------------------------------------------------------- the DAC curve


def test_dac_interpolates_linearly_in_db_worked_by_hand():
    dac = dac_curve([10.0, 30.0, 50.0], [80.0, 40.0, 10.0], outside="conservative")
    # by hand, linear in dB between the points: at 20 mm halfway from 80 to 40 %FSH in dB: 80 * (40/80)^(1/2)
    assert dac.level_fsh(20.0) == pytest.approx(56.569, abs=1e-3)
    # at 45 mm, 3/4 of the way from 40 to 10 %FSH: 40 * (10/40)^(3/4) = 14.142
    assert dac.level_fsh(45.0) == pytest.approx(14.142, abs=1e-3)
    # outside, conservative: the lower of the end level held and the end segment continued in dB.
    # at 5 mm: held 80, continued 80 * (40/80)^(-5/20) = 95.14 -> 80; at 60 mm: held 10, continued
    # 10 * (10/40)^(10/20) = 5 -> 5
    assert dac.level_fsh(5.0) == pytest.approx(80.0)
    assert dac.level_fsh(60.0) == pytest.approx(5.0)
    assert dac.outside_note(12.0, 48.0) is None
    assert "conservative" not in (dac.outside_note(5.0, 20.0) or "") and "lower" in dac.outside_note(5.0, 20.0)


def _write(tmp_path, text: str, name: str = "dac.csv"):
    p = tmp_path / name
    p.write_text(text, encoding="utf-8")
    return p


def test_dac_from_csv_reads_the_table(tmp_path):
    dac = DacCurve.from_csv(_write(tmp_path, "depth_mm,amplitude_fsh\n# reference holes\n10,80\n\n50,20\n"))
    assert dac.depths_mm == (10.0, 50.0) and dac.amplitudes_fsh == (80.0, 20.0)
    assert dac.outside == "conservative" and dac.label == "DAC"


@pytest.mark.parametrize("text, match", [
    ("10,80\n50,20\n", "header 'depth_mm,amplitude_fsh'"),
    ("", "header"),
    ("depth_mm,amplitude_fsh\n10,80\n", "at least two"),
    ("depth_mm,amplitude_fsh\n10,80\n10,40\n", "must increase"),
    ("depth_mm,amplitude_fsh\n30,80\n10,40\n", "must increase"),
    ("depth_mm,amplitude_fsh\n10,80\n50,0\n", "greater than 0"),
    ("depth_mm,amplitude_fsh\n10,80\n50,-3\n", "greater than 0"),
    ("depth_mm,amplitude_fsh\n10,80\n50,abc\n", "line 3"),
    ("depth_mm,amplitude_fsh\n10,80,1\n50,20\n", "line 2"),
])
def test_bad_dac_files_are_refused_with_a_clear_error(tmp_path, text, match):
    with pytest.raises(ndtmap.CalibrationError, match=match):
        DacCurve.from_csv(_write(tmp_path, text))


def test_missing_dac_file(tmp_path):
    with pytest.raises(ndtmap.NdtmapError, match="does not exist"):
        DacCurve.from_csv(tmp_path / "nope.csv")


# --------------------------------------------------------------------------- a deep echo above DAC under a shallow one

# DAC of the kind, falling with depth: 80 %FSH at 10 mm, 20 %FSH at 50 mm
DAC_TEXT = "depth_mm,amplitude_fsh\n10,80\n50,20\n"
T_SHALLOW, T_DEEP = 4.10, 15.20  # us, on the sample grid: 12.14 mm and 44.99 mm in steel


def _hand_dac(depth_mm: float) -> float:
    # linear in dB between (10 mm, 80 %FSH) and (50 mm, 20 %FSH): 80 * (20/80)^((z - 10)/40)
    return 80.0 * (20.0 / 80.0) ** ((depth_mm - 10.0) / 40.0)


def _shallow_deep_grid():
    a = np.zeros((10, 10, T.size))
    a[2:8, 2:8] += _echo(T_SHALLOW, 50.0)  # a shallow 50 %FSH echo, below the DAC there
    a[3:7, 3:7] += _echo(T_DEEP, 30.0)  # a deep 30 %FSH echo, above the DAC there
    return _grid(a)


def test_amplitude_re_dac_is_the_maximum_of_a_over_dac_in_the_window():
    g = _shallow_deep_grid()
    dac = dac_curve([10.0, 50.0], [80.0, 20.0])
    expected_deep = 20 * math.log10(30.0 / _hand_dac(_depth(T_DEEP)))  # +2.01 dB
    old_way = 20 * math.log10(50.0 / _hand_dac(_depth(T_SHALLOW)))  # the highest echo at its own depth: -3.44 dB
    assert expected_deep == pytest.approx(2.01, abs=0.01) and old_way == pytest.approx(-3.44, abs=0.01)
    r = evaluate_gate(g, Gate("flaw", 10.0, 50.0, threshold_fsh=20.0), dac=dac)
    assert float(r.amplitude_db_re_dac[5, 5]) == pytest.approx(expected_deep, abs=1.0)
    assert float(r.amplitude_db_re_dac[5, 5]) == pytest.approx(expected_deep, abs=0.05)
    assert float(r.depth_mm[5, 5]) == pytest.approx(_depth(T_SHALLOW), abs=0.1)  # the %FSH gate: the shallow echo
    # a gate with its level re the DAC: event where A/DAC peaks (the deep echo), amplitude there in %FSH
    rd = evaluate_gate(g, Gate("flaw", 10.0, 50.0, threshold_db=0.0, reference="dac"), dac=dac)
    assert bool(rd.triggered[5, 5]) and not bool(rd.triggered[2, 2])
    assert float(rd.depth_mm[5, 5]) == pytest.approx(_depth(T_DEEP), abs=0.1)
    assert float(rd.amplitude_fsh[5, 5]) == pytest.approx(30.0, abs=0.5)
    assert float(rd.dac_level_fsh[5, 5]) == pytest.approx(_hand_dac(_depth(T_DEEP)), rel=0.01)
    with pytest.raises(ndtmap.GateError, match="re the DAC"):
        evaluate_gate(g, Gate("flaw", 10.0, 50.0, threshold_db=0.0, reference="dac"))


def test_a_refusing_dac_refuses_a_gate_beyond_its_depths():
    g = _shallow_deep_grid()
    with pytest.raises(ndtmap.CalibrationError, match="outside the DAC's recorded range"):
        evaluate_gate(g, Gate("flaw", 5.0, 55.0, threshold_db=0.0, reference="dac"),
                      dac=dac_curve([10.0, 50.0], [80.0, 20.0]))


def _cli(args: list[str]) -> tuple[int, str]:
    out = io.StringIO()
    with contextlib.redirect_stdout(out):
        code = main(args)
    return code, out.getvalue()


def test_cli_dac_threshold_db_reports_the_deep_echo_above_dac(tmp_path):
    path = tmp_path / "g.nc"
    save_grid(_shallow_deep_grid(), path)
    dac = _write(tmp_path, DAC_TEXT)
    code, text = _cli(["indications", str(path), "--gate-mm", "5", "55", "--dac", str(dac), "--threshold-db", "0",
                       "--format", "json"])
    assert code == 0
    doc = json.loads(text)
    assert doc["threshold_db"] == 0.0 and doc["recording_curve"]["depths_mm"] == [10.0, 50.0]
    recs = doc["indications"]
    assert len(recs) == 1  # the shallow echo (-3.4 dB re DAC) is not recorded, the deep one is
    rec = recs[0]
    expected = 20 * math.log10(30.0 / _hand_dac(_depth(T_DEEP)))
    assert rec["peak_db"] == pytest.approx(expected, abs=1.0)
    assert rec["peak_db"] == pytest.approx(expected, abs=0.05)
    assert rec["depth_mm"] == pytest.approx(_depth(T_DEEP), abs=0.1)
    assert rec["reference_fsh"] == pytest.approx(_hand_dac(_depth(T_DEEP)), rel=0.01)
    for key in ("length_scan_mm", "length_index_mm", "area_mm2", "flags"):
        assert key in rec
    # at -4 dB re DAC the shallow echo (-3.4 dB) is recorded too, with its own peak in dB
    code, text = _cli(["indications", str(path), "--gate-mm", "5", "55", "--dac", str(dac), "--threshold-db", "-4",
                       "--format", "json"])
    peaks = sorted(r["peak_db"] for r in json.loads(text)["indications"])
    assert code == 0 and len(peaks) >= 1 and max(peaks) == pytest.approx(expected, abs=0.05)


def test_cli_dac_judges_an_echo_at_another_depth_against_the_dac_at_its_own_depth(tmp_path):
    # the shallow echo lies partly under the deep one's positions: the A-scans are searched for it, and with a
    # level re the DAC it must be judged against the DAC at its own depth (-3.44 dB, worked by hand above), not
    # against the DAC at the deep echo's depth (that would read +7.9 dB and record it at 0 dB)
    path = tmp_path / "g.nc"
    save_grid(_shallow_deep_grid(), path)
    dac = _write(tmp_path, DAC_TEXT)
    shallow = 20 * math.log10(50.0 / _hand_dac(_depth(T_SHALLOW)))
    deep = 20 * math.log10(30.0 / _hand_dac(_depth(T_DEEP)))
    code, text = _cli(["indications", str(path), "--gate-mm", "5", "55", "--dac", str(dac), "--threshold-db", "0",
                       "--format", "json"])
    recs = json.loads(text)["indications"]
    assert code == 0 and [round(r["depth_mm"]) for r in recs] == [round(_depth(T_DEEP))]
    code, text = _cli(["indications", str(path), "--gate-mm", "5", "55", "--dac", str(dac), "--threshold-db", "-6",
                       "--format", "json"])
    recs = sorted(json.loads(text)["indications"], key=lambda r: r["depth_mm"])
    assert code == 0 and len(recs) == 2
    assert recs[0]["depth_mm"] == pytest.approx(_depth(T_SHALLOW), abs=0.1)
    assert recs[0]["peak_db"] == pytest.approx(shallow, abs=0.1)
    assert recs[1]["depth_mm"] == pytest.approx(_depth(T_DEEP), abs=0.1)
    assert recs[1]["peak_db"] == pytest.approx(deep, abs=0.1)


@pytest.mark.parametrize("text", ["10,80\n50,20\n", "depth_mm,amplitude_fsh\n50,80\n10,20\n",
                                  "depth_mm,amplitude_fsh\n10,80\n50,0\n", "depth_mm,amplitude_fsh\n10,80\n"])
def test_cli_bad_dac_file_is_one_line_no_traceback(tmp_path, capsys, text):
    path = tmp_path / "g.nc"
    save_grid(_grid(np.zeros((3, 3, T.size)) + _echo(T_DEEP, 30.0)), path)
    dac = _write(tmp_path, text)
    code = main(["indications", str(path), "--gate-mm", "5", "55", "--dac", str(dac), "--threshold-db", "0",
                 "--format", "json"])
    err = capsys.readouterr().err
    assert code == 2
    assert err.count("\n") == 1 and "Traceback" not in err and "DAC file" in err


def test_cli_threshold_db_needs_a_curve(tmp_path, capsys):
    path = tmp_path / "g.nc"
    save_grid(_grid(np.zeros((3, 3, T.size)) + _echo(T_DEEP, 30.0)), path)
    assert main(["indications", str(path), "--gate-mm", "5", "55", "--threshold-db", "0"]) == 2
    assert "--dac" in capsys.readouterr().err


# --------------------------------------------------------------------------- procedure files and the workbench


def test_procedure_recording_section_round_trips(tmp_path):
    dac = dac_curve([10.0, 50.0], [80.0, 20.0], outside="conservative")
    p = Procedure("survey", (Gate("flaw", 5.0, 55.0, threshold_db=-2.0, reference="dac"),), "flaw",
                  recording=RecordingCurve("dac", dac=dac))
    text = procedure_to_toml(p)
    assert "[recording]" in text and 'reference = "dac"' in text
    assert parse_procedure(text) == p
    dgs = Procedure("dgs", (Gate("flaw", 5.0, 40.0, threshold_db=0.0, reference="dac"), Gate("bw", 45.0, 55.0)),
                    "flaw", backwall_gate="bw", recording=RecordingCurve("dgs", fbh_mm=2.0))
    assert parse_procedure(procedure_to_toml(dgs)) == dgs
    # the points may come from a CSV file beside the procedure
    _write(tmp_path, DAC_TEXT)
    q = parse_procedure('[[gate]]\nname = "flaw"\nstart = 5.0\nend = 55.0\nthreshold_db = 0.0\nreference = "dac"\n'
                        '[detection]\ngate = "flaw"\n[recording]\nkind = "dac"\nfile = "dac.csv"\n',
                        base_dir=str(tmp_path))
    assert q.recording.dac.amplitudes_fsh == (80.0, 20.0)
    with pytest.raises(ndtmap.ProcedureError, match="needs a \\[recording\\] curve"):
        Procedure("x", (Gate("flaw", 5.0, 55.0, threshold_db=0.0, reference="dac"),), "flaw")
    with pytest.raises(ndtmap.ProcedureError, match="needs a \\[backwall\\] gate"):
        Procedure("x", (Gate("flaw", 5.0, 55.0),), "flaw", recording=RecordingCurve("dgs", fbh_mm=2.0))
    with pytest.raises(ndtmap.ProcedureError, match="increasing"):
        parse_procedure('[[gate]]\nname = "f"\nstart = 5.0\nend = 55.0\n[detection]\ngate = "f"\n'
                        '[recording]\nkind = "dac"\npoints = [[50.0, 20.0], [10.0, 80.0]]\n')


def test_workbench_state_takes_the_curve_through_its_procedure():
    from ndtmap.workbench.state import WorkbenchState

    dac = dac_curve([10.0, 50.0], [80.0, 20.0], outside="conservative")
    proc = Procedure("survey", (Gate("flaw", 5.0, 55.0, threshold_db=0.0, reference="dac"),), "flaw",
                     recording=RecordingCurve("dac", dac=dac))
    st = WorkbenchState(_shallow_deep_grid(), procedure=proc)
    assert st.recording_curve() == dac
    recs = st.indications()
    assert len(recs) == 1 and recs[0]["n_positions"] == 16
    assert recs[0]["depth_mm"] == pytest.approx(_depth(T_DEEP), abs=0.1)
    assert float(st.map("depth")[5, 5]) == pytest.approx(_depth(T_DEEP), abs=0.1)
    st.select_point(5.0, 5.0)
    mark = st.ascan().gates[0]  # the A-scan view: the event where A/DAC peaks
    assert mark.triggered and mark.event_at == pytest.approx(_depth(T_DEEP), abs=0.1)
    assert "dB re the DAC" in mark.label()
    with pytest.raises(ndtmap.ProcedureError):
        st.set_recording(None)
    assert st.settings.recording.dac == dac  # left as it was
    lower = RecordingCurve("dac", dac=dac_curve([10.0, 50.0], [40.0, 10.0], outside="conservative"))
    st.set_recording(lower)  # 6 dB more sensitive: the shallow echo (its 6 x 6 positions) is recorded too
    recs = st.indications()
    assert sum(r["n_positions"] for r in recs) == 36
    assert min(r["depth_min_mm"] for r in recs) == pytest.approx(_depth(T_SHALLOW), abs=0.1)
    assert st.procedure().recording == lower


# --------------------------------------------------------------------------- the DGS recording curve

PROBE = dict(probe_diameter_mm=10.0, frequency_mhz=5.0, velocity_m_s=STEEL)


def test_dgs_curve_far_field_matches_the_dgs_relation_by_hand():
    # Krautkramer ch. 5: H_FBH / H_BW = pi d^2 z_BW / (2 lambda z^2). 5 MHz in steel: lambda = 5.92/5 = 1.184 mm;
    # N = D^2 / (4 lambda) = 21.1 mm, so 3 N = 63.3 mm. A 2 mm FBH, back wall at 100 mm read at 80 %FSH:
    # at 80 mm: 80 * pi * 4 * 100 / (2 * 1.184 * 6400) = 6.633 %FSH; at 120 mm: 2.948 %FSH
    c = dgs_recording_curve(2.0, reference_fsh=80.0, reference_depth_mm=100.0, depths_mm=[70.0, 130.0], **PROBE)
    assert c.level_fsh(80.0) == pytest.approx(6.633, rel=2e-3)
    assert c.level_fsh(120.0) == pytest.approx(2.948, rel=2e-3)
    assert c.label == "DGS 2 mm FBH"
    # against a 3 mm reference FBH at 100 mm read at 50 %FSH: (2/3)^2 (100/80)^2 * 50 = 34.72 %FSH at 80 mm
    r = dgs_recording_curve(2.0, reference_fsh=50.0, reference_depth_mm=100.0, reference_fbh_mm=3.0,
                            depths_mm=[70.0, 130.0], **PROBE)
    assert r.level_fsh(80.0) == pytest.approx(34.72, rel=2e-3)
    # attenuation 0.01 dB/mm one way lowers the level at 120 mm by 2 * 0.01 * 20 = 0.4 dB re the back wall at 100
    a = dgs_recording_curve(2.0, reference_fsh=80.0, reference_depth_mm=100.0, depths_mm=[70.0, 130.0],
                            attenuation_db_per_mm=0.01, **PROBE)
    assert 20 * math.log10(a.level_fsh(120.0) / c.level_fsh(120.0)) == pytest.approx(-0.4, abs=0.01)


def test_dgs_curve_in_the_near_field_against_the_rayleigh_integral():
    # inside 3 N the curve comes from the broadband piston model; the reference is the Rayleigh integral of the
    # piston computed independently (tests/helpers/rayleigh.py; Kinsler & Frey ch. 7), the hole and the back wall
    # echoes as envelope peaks over a 50 % Gaussian band. Tolerance 0.5 dB (stated: the two quadratures differ).
    bw, a_mm, zb = 0.5, 5.0, 40.0
    f, w = rayleigh.spectrum(5.0, bw, n=41)
    backwall = rayleigh.echo_peak(rayleigh.plane_echo_spectrum(zb, a_mm, f, STEEL), f, w, zb, STEEL)
    curve = dgs_recording_curve(2.0, reference_fsh=80.0, reference_depth_mm=zb, depths_mm=[8.0, 30.0],
                                bandwidth=bw, **PROBE)
    for z in (10.0, 25.0):  # 0.47 N and 1.2 N
        hole = rayleigh.echo_peak(rayleigh.disc_echo_spectrum(z, 1.0, a_mm, f, STEEL), f, w, z, STEEL)
        expected_db = 20 * math.log10(hole / backwall)
        assert 20 * math.log10(curve.level_fsh(z) / 80.0) == pytest.approx(expected_db, abs=0.5)


def test_dgs_recording_level_end_to_end():
    # a back wall at 44.99 mm (80 %FSH) and, at the centre, an echo at 12.14 mm; the DGS curve of a 2 mm FBH from
    # the back wall sets the level: the echo is recorded when it is above the curve at its depth
    a = np.zeros((8, 8, T.size))
    a[:, :] += _echo(T_DEEP, 80.0)
    a[3:5, 3:5] += _echo(T_SHALLOW, 40.0)
    g = _grid(a, probe_bandwidth=0.5)
    proc = Procedure("dgs", (Gate("flaw", 5.0, 40.0, threshold_db=0.0, reference="dac"), Gate("bw", 40.0, 50.0)),
                     "flaw", backwall_gate="bw", recording=RecordingCurve("dgs", fbh_mm=2.0))
    an = run_procedure(g, proc)
    level = an.curve.level_fsh(_depth(T_SHALLOW))
    assert an.curve.label == "DGS 2 mm FBH" and 0 < level < 40.0
    assert len(an.indications) == 1
    rec = an.indications[0]
    assert rec["peak_db"] == pytest.approx(20 * math.log10(40.0 / level), abs=0.1)
    assert rec["depth_mm"] == pytest.approx(_depth(T_SHALLOW), abs=0.1)


# --------------------------------------------------------------------------- clipping and software gain


def _flaw_records(g, gate=None):
    m = amplitude_map(g, gate or Gate("g", 5.0, 55.0, threshold_fsh=20.0))
    return size_indications(m, threshold_fsh=20.0)


def test_150_fsh_on_a_200_fsh_digitiser_is_not_saturated():
    a = np.zeros((9, 9, T.size))
    a[3:6, 3:6] = _echo(T_DEEP, 150.0)
    recs = _flaw_records(_grid(a, digitiser_full_scale_fsh=200.0))
    assert recs[0]["peak_fsh"] == pytest.approx(150.0, abs=1.0)
    assert "saturated" not in recs[0]["flags"]
    # on a digitiser that clips at 100 %FSH the same echo is recorded clipped: saturated
    clipped = np.clip(a, -100.0, 100.0)
    assert "saturated" in _flaw_records(_grid(clipped, digitiser_full_scale_fsh=100.0))[0]["flags"]


def test_a_clipped_echo_stays_saturated_after_tcg_lowers_it():
    a = np.zeros((9, 9, T.size))
    a[3:6, 3:6] = np.clip(_echo(T_DEEP, 160.0), -100.0, 100.0)  # clipped by a 100 %FSH digitiser
    g = _grid(a, digitiser_full_scale_fsh=100.0)
    lowered = apply_tcg(g, dac_curve([5.0, 55.0], [160.0, 160.0]), target_fsh=80.0)  # gain 0.5 everywhere
    assert bool(lowered["clipped"].any())
    recs = _flaw_records(lowered)
    assert recs[0]["peak_fsh"] == pytest.approx(50.0, abs=0.5)
    assert "saturated" in recs[0]["flags"]


def test_an_unclipped_echo_amplified_by_tcg_is_not_saturated():
    a = np.zeros((9, 9, T.size))
    a[3:6, 3:6] = _echo(T_DEEP, 60.0)
    g = _grid(a, digitiser_full_scale_fsh=100.0)
    boosted = apply_tcg(g, dac_curve([5.0, 55.0], [20.0, 20.0]), target_fsh=80.0)  # gain 4: 240 %FSH
    assert not bool(boosted["clipped"].any())
    recs = _flaw_records(boosted)
    assert recs[0]["peak_fsh"] == pytest.approx(240.0, abs=2.0)
    assert "saturated" not in recs[0]["flags"]
    r = evaluate_gate(boosted, Gate("g", 5.0, 55.0))
    assert not bool(r.clipped.any())


def test_a_150_fsh_back_wall_on_a_200_fsh_digitiser_serves_dgs():
    from ndtmap.indications import equivalent_fbh_diameter

    probe = dict(probe_diameter_mm=10.0, frequency_mhz=5.0, velocity_m_s=STEEL)
    # far field, by hand (Krautkramer ch. 5): ratio 10^(-18.5/20) at z = z_BW = 100 mm, lambda 1.184 mm -> d = 3.0 mm
    r = equivalent_fbh_diameter(150.0 * 10 ** (-18.5 / 20), 100.0, backwall_fsh=150.0, backwall_sound_path_mm=100.0,
                                full_scale_fsh=200.0, **probe)
    assert r.ers_mm == pytest.approx(3.0, abs=0.01)
    with pytest.raises(ndtmap.CalibrationError, match="saturated"):
        equivalent_fbh_diameter(10.0, 100.0, backwall_fsh=200.0, backwall_sound_path_mm=100.0, full_scale_fsh=200.0,
                                **probe)


def test_workbench_view_opens_on_a_level_re_the_dac():
    from ndtmap.workbench import open_workbench

    dac = dac_curve([10.0, 50.0], [80.0, 20.0], outside="conservative")
    proc = Procedure("survey", (Gate("flaw", 5.0, 55.0, threshold_db=0.0, reference="dac"),), "flaw",
                     recording=RecordingCurve("dac", dac=dac))
    wb = open_workbench(_shallow_deep_grid(), procedure=proc, background=False)
    assert wb.controls["threshold"].disabled  # the level is in dB re the DAC, not one %FSH value
    wb.controls["end"].value = 50.0  # a window change keeps the level re the DAC
    assert wb.state.gate("flaw").end == 50.0 and wb.state.gate("flaw").level_re_curve


def test_reference_from_curve_takes_a_dac_curve_with_its_rule():
    from helpers.sizing_maps import make_map

    from ndtmap.indications import reference_from_curve

    depth = make_map(np.array([[5.0, 30.0, 60.0]]), np.arange(1.0), np.arange(3.0), units="mm")
    ref = reference_from_curve(depth, dac_curve([10.0, 50.0], [80.0, 20.0], outside="conservative"))
    # by hand: 5 mm holds 80 (lower than 80 * 4^(5/40) = 95.1); 30 mm: 80 * (1/4)^(20/40) = 40;
    # 60 mm: 20 * (1/4)^(10/40) = 14.14 (lower than 20 held)
    np.testing.assert_allclose(ref.values, [[80.0, 40.0, 14.142]], atol=1e-3)
    with pytest.raises(ndtmap.CalibrationError, match="refuses"):
        reference_from_curve(depth, dac_curve([10.0, 50.0], [80.0, 20.0]))


def test_cli_dgs_level_from_the_back_wall(tmp_path):
    # back wall at 44.99 mm read at 80 %FSH; an echo of 40 %FSH at 12.14 mm at the centre; the level is the DGS
    # curve of a 2 mm FBH set from the back wall (straight beam, 50 % band)
    a = np.zeros((8, 8, T.size))
    a[:, :] += _echo(T_DEEP, 80.0)
    a[3:5, 3:5] += _echo(T_SHALLOW, 40.0)
    path = tmp_path / "g.nc"
    save_grid(_grid(a, probe_bandwidth=0.5), path)
    code, text = _cli(["indications", str(path), "--gate-mm", "5", "40", "--backwall-gate-mm", "40", "50",
                       "--dgs-fbh-mm", "2", "--threshold-db", "0", "--format", "json"])
    assert code == 0
    doc = json.loads(text)
    assert doc["recording_curve"]["label"] == "DGS 2 mm FBH"
    [rec] = [r for r in doc["indications"] if r["kind"] == "amplitude"]
    curve = dgs_recording_curve(2.0, reference_fsh=80.0, reference_depth_mm=_depth(T_DEEP), depths_mm=[5.0, 40.0],
                                bandwidth=0.5, **PROBE)
    assert rec["peak_db"] == pytest.approx(20 * math.log10(40.0 / curve.level_fsh(_depth(T_SHALLOW))), abs=0.2)
