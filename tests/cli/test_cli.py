"""The command line, end to end on files in a temporary folder.

Every test hashes its input files before and after: the CLI never modifies them.
"""

from __future__ import annotations

import hashlib
import json
import math
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import xarray as xr

from ndtmap.cli import main
from ndtmap.io import open_grid
from ndtmap.simulate import sample_path, scan_truth

PLATE = sample_path("plate_laminations.nc")
FORGING = sample_path("forging_block.nc")
WALL = sample_path("corroded_wall.nc")
REQUIRED_KEYS = {"id", "scan_mm", "index_mm", "depth_mm", "peak_fsh", "length_scan_mm", "length_index_mm",
                 "area_mm2", "ers_mm", "flags"}


def digest(path: Path) -> str:
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


@pytest.fixture(autouse=True)
def inputs_unchanged():
    before = {p: digest(p) for p in (PLATE, FORGING, WALL)}
    yield
    assert {p: digest(p) for p in before} == before


def run(capsys, *argv):
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


def test_info_text(capsys):
    code, out, err = run(capsys, "info", PLATE)
    assert code == 0, err
    assert "scan 81 x index 41 x time 701" in out
    assert "KFP-PL-2041" in out and "valid" in out


def test_info_json_keys_and_depth_range(capsys):
    code, out, _ = run(capsys, "info", FORGING, "--json")
    assert code == 0
    doc = json.loads(out)
    for key in ("shape", "scan_mm", "index_mm", "time_us", "depth_mm", "problems"):
        assert key in doc
    assert doc["problems"] == []
    assert doc["scan_mm"] == [0.0, 120.0] and doc["index_mm"] == [0.0, 80.0]
    # depth = c t / 2 for a straight beam (pulse-echo; common practice, no source)
    assert doc["depth_mm"][1] == pytest.approx(5920e-3 * doc["time_us"][1] / 2)


def test_info_lists_every_problem_of_a_foreign_file(tmp_path, capsys):
    # a file written by plain xarray, not by ndtmap, with two mistakes
    t = np.arange(100) * 0.02
    ds = xr.Dataset(
        {"ascan": (("scan", "index", "time"), np.zeros((3, 2, 100), np.float32), {"units": "%FSH", "signal": "rf"})},
        coords={"scan": ("scan", [0.0, 1.0, 1.0], {"units": "mm"}), "index": ("index", [0.0, 1.0], {"units": "mm"}),
                "time": ("time", t, {"units": "us"})},
        attrs={"beam_angle_deg": 0.0, "probe_frequency_mhz": 5.0, "probe_diameter_mm": 10.0},
    )
    path = tmp_path / "foreign.nc"
    ds.to_netcdf(path, engine="h5netcdf")
    code, out, _ = run(capsys, "info", path, "--json")
    assert code == 1
    problems = json.loads(out)["problems"]
    assert any("velocity_m_s" in p for p in problems)
    assert any("strictly increasing" in p for p in problems)


@pytest.mark.parametrize("content", [b"", b"garbage bytes, not HDF5" * 10, b"\x89HDF\r\n\x1a\n" + b"\0" * 50])
def test_bad_files_give_one_line_and_exit_2(tmp_path, capsys, content):
    path = tmp_path / "bad.nc"
    path.write_bytes(content)
    code, out, err = run(capsys, "info", path)
    assert code == 2
    assert "Traceback" not in err and len(err.strip().splitlines()) == 1
    assert str(path) in err


def test_missing_file(capsys, tmp_path):
    code, _, err = run(capsys, "map", tmp_path / "nope.nc", "--kind", "amplitude", "--gate-mm", "1", "5",
                       "-o", tmp_path / "m.nc")
    assert code == 2 and "nope.nc" in err and "Traceback" not in err


def test_usage_error_exit_2(capsys):
    with pytest.raises(SystemExit) as exc:
        main(["map", str(PLATE), "--kind", "nonsense", "--gate-mm", "1", "5", "-o", "x.nc"])
    assert exc.value.code == 2


def _one_map(path: Path) -> xr.DataArray:
    ds = xr.open_dataset(path, engine="h5netcdf")
    two_d = [v for v in ds.data_vars if ds[v].dims == ("scan", "index")]
    assert len(ds.data_vars) == 1 and len(two_d) == 1
    return ds[two_d[0]].load()


def test_map_amplitude_nc(tmp_path, capsys):
    out = tmp_path / "amp.nc"
    code, stdout, err = run(capsys, "map", PLATE, "--kind", "amplitude", "--gate-mm", "1", "23", "-o", out)
    assert code == 0, err
    m = _one_map(out)
    assert m.attrs["units"] == "%FSH" and m.shape == (81, 41)
    assert 70 < float(m.max()) <= 100
    assert "caution" in stdout


def test_map_depth_is_nan_where_not_triggered(tmp_path, capsys):
    out = tmp_path / "depth.nc"
    code, _, err = run(capsys, "map", PLATE, "--kind", "depth", "--gate-mm", "1", "23", "--threshold-fsh", "30",
                       "-o", out)
    assert code == 0, err
    m = _one_map(out)
    assert m.attrs["units"] == "mm"
    truth = scan_truth(open_grid(PLATE))["reflectors"][0]  # L1 at 12.5 mm
    centre = m.sel(scan=truth["scan_mm"], index=truth["index_mm"], method="nearest")
    assert float(centre) == pytest.approx(truth["depth_mm"], abs=0.3)
    assert np.isnan(m.sel(scan=0, index=0)).item()  # sound plate: nothing in the gate


def test_map_thickness_and_backwall_loss(tmp_path, capsys):
    th = tmp_path / "th.nc"
    assert run(capsys, "map", WALL, "--kind", "thickness", "--gate-mm", "3", "13.5", "--threshold-fsh", "10",
               "-o", th)[0] == 0
    m = _one_map(th)
    truth = open_grid(WALL)["truth_thickness_mm"]
    assert m.attrs["units"] == "mm"
    assert float(m.min()) == pytest.approx(float(truth.min()), abs=0.2)
    loss = tmp_path / "loss.nc"
    assert run(capsys, "map", PLATE, "--kind", "backwall-loss", "--gate-mm", "23.5", "27", "-o", loss)[0] == 0
    m = _one_map(loss)
    assert m.attrs["units"] == "dB"
    l1 = scan_truth(open_grid(PLATE))["reflectors"][0]
    under = float(m.sel(scan=l1["scan_mm"], index=l1["index_mm"], method="nearest"))
    assert under > 20  # the lamination hides the back wall: positive loss where weaker
    assert abs(float(m.sel(scan=0, index=0))) < 1.0  # sound plate: the nominal (median) level


def test_map_gate_outside_record(tmp_path, capsys):
    code, _, err = run(capsys, "map", PLATE, "--kind", "amplitude", "--gate-mm", "40", "60", "-o", tmp_path / "x.nc")
    assert code == 2 and "outside the recorded time range" in err


def test_indications_json_contract(capsys):
    code, out, err = run(capsys, "indications", PLATE, "--gate-mm", "1", "23", "--threshold-fsh", "20",
                         "--backwall-gate-mm", "23.5", "27", "--format", "json")
    assert code == 0, err
    doc = json.loads(out)
    assert {"file", "gate", "threshold_fsh", "indications", "cautions"} <= set(doc)
    assert doc["threshold_fsh"] == 20.0 and doc["indications"]
    for rec in doc["indications"]:
        assert REQUIRED_KEYS <= set(rec)
        assert isinstance(rec["flags"], list)
    assert any("ISO 9712" in c for c in doc["cautions"])
    # every lamination found where the truth has it
    truth = scan_truth(open_grid(PLATE))["reflectors"]
    for t in truth:
        assert min(math.hypot(r["scan_mm"] - t["scan_mm"], r["index_mm"] - t["index_mm"])
                   for r in doc["indications"]) < 0.6 * max(t["length_scan_mm"], t["length_index_mm"])


def test_indications_with_backwall_gate_give_backwall_loss_db_on_every_record(capsys):
    code, out, err = run(capsys, "indications", PLATE, "--gate-mm", "1", "23", "--threshold-fsh", "20",
                         "--backwall-gate-mm", "23.5", "27", "--format", "json")
    assert code == 0, err
    recs = json.loads(out)["indications"]
    # laminations shadow the back wall: each record carries the loss under it, and the shadow is not reported
    # again as a back-wall-loss indication of its own (one reflector, one record)
    assert recs and all(r["kind"] == "amplitude" for r in recs)
    assert all(r["backwall_loss_db"] is not None and r["backwall_loss_db"] > 6.0 for r in recs)
    code, out, _ = run(capsys, "indications", PLATE, "--gate-mm", "1", "23", "--threshold-fsh", "20",
                       "--format", "json")
    assert code == 0 and all(r["backwall_loss_db"] is None for r in json.loads(out)["indications"])


def test_indications_with_backwall_gives_ers(capsys):
    code, out, _ = run(capsys, "indications", FORGING, "--gate-mm", "70", "150", "--threshold-fsh", "2",
                       "--backwall-gate-mm", "150", "166", "--format", "json")
    assert code == 0
    recs = json.loads(out)["indications"]
    assert all(r["ers_mm"] is not None for r in recs)
    # the planar reflector's repeat echo at 110 mm is flagged, never an unflagged indication
    repeat = [r for r in recs if abs(r["depth_mm"] - 110) < 3]
    assert repeat and all("repeat_echo" in r["flags"] for r in repeat)


def test_indications_without_backwall_has_null_ers(capsys):
    code, out, _ = run(capsys, "indications", PLATE, "--gate-mm", "1", "23", "--threshold-fsh", "20",
                       "--format", "json")
    assert code == 0 and all(r["ers_mm"] is None for r in json.loads(out)["indications"])


def test_indications_csv_and_table(capsys):
    code, out, _ = run(capsys, "indications", PLATE, "--gate-mm", "1", "23", "--threshold-fsh", "20", "--format",
                       "csv")
    assert code == 0
    lines = out.strip().splitlines()
    assert lines[0].startswith("id,kind,scan_mm") and len(lines) >= 5
    code, out, _ = run(capsys, "indications", PLATE, "--gate-mm", "1", "23", "--threshold-fsh", "20")
    assert code == 0 and "6dB scan mm" in out and "caution:" in out


def test_indications_with_rules(tmp_path, capsys):
    rules = Path(__file__).resolve().parents[2] / "docs" / "examples" / "screening-rules.toml"
    code, out, err = run(capsys, "indications", PLATE, "--gate-mm", "1", "23", "--threshold-fsh", "20",
                         "--rules", rules, "--format", "json")
    assert code == 0, err
    doc = json.loads(out)
    assert doc["screening"]["overall"].startswith(("exceeds rule", "within rules", "not screened: review required"))
    for rec in doc["indications"]:  # a record whose flags undermine its size is never "within rules"
        if {"at_scan_edge", "smaller_than_beam", "saturated"} & set(rec["flags"]):
            assert "within rules" not in rec["screening"]
    text = json.dumps(doc).lower()
    for word in ("accepted\"", "rejected", "\"pass\"", "\"fail\""):
        assert word not in text


def test_entry_point_runs_without_traceback(tmp_path):
    bad = tmp_path / "x.zarr"
    bad.mkdir()
    proc = subprocess.run([sys.executable, "-m", "ndtmap", "info", str(bad)], capture_output=True, text=True,
                          timeout=120)
    assert proc.returncode == 2
    assert "Traceback" not in proc.stderr and proc.stderr.count("\n") == 1
