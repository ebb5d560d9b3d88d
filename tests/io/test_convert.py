"""Tests of ndtmap.io.convert and the `ndtmap convert` command: raw dumps and NetCDF grids to chunked Zarr v3 stores.

External references: Zarr core specification v3.0 (``zarr.json`` array metadata: ``chunk_grid``,
``codecs``); the byte order of raw dumps is NumPy's C order (NumPy reference, "ndarray memory layout").
"""

from __future__ import annotations

import json

import numpy as np
import pytest
import xarray as xr
from helpers.burst_grids import STEEL_L

import ndtmap.io.raw as raw_module
from ndtmap.cli.convert import register
from ndtmap.errors import FileFormatError, ParameterError
from ndtmap.grid import make_grid, read_provenance
from ndtmap.io import convert_to_zarr, export_raw, open_grid, save_grid, write_zarr


def counts_grid(n_scan=9, n_index=5, n_time=64, missing=True):
    rng = np.random.default_rng(4)
    counts = rng.integers(-32768, 32768, (n_scan, n_index, n_time)).astype(np.int16)
    g = make_grid(counts, scan_mm=np.arange(n_scan) * 0.5, index_mm=np.arange(n_index) * 1.5,
                  time_us=np.arange(n_time) * 0.02, velocity_m_s=STEEL_L, probe_frequency_mhz=5.0,
                  probe_diameter_mm=10.0, fsh_per_count=100.0 / 32767,
                  attrs={"part_id": "KFP-PL-2041", "material": "steel"})
    if missing:
        mask = np.zeros((n_scan, n_index), dtype=bool)
        mask[3, 2] = True
        g["missing"] = (("scan", "index"), mask)
    return g


def zarr_meta(store, name="ascan"):
    return json.loads((store / name / "zarr.json").read_text())


def assert_same_grid(a, b):
    xr.testing.assert_equal(a[["ascan", *(["missing"] if "missing" in a else [])]].load(),
                            b[["ascan", *(["missing"] if "missing" in b else [])]].load())
    for key in ("velocity_m_s", "part_id", "probe_frequency_mhz"):
        assert a.attrs[key] == b.attrs[key]
    assert a["ascan"].attrs.get("fsh_per_count") == b["ascan"].attrs.get("fsh_per_count")


def test_raw_dump_to_zarr_keeps_every_sample(tmp_path):
    g = counts_grid()
    raw = export_raw(g, tmp_path / "KFP-PL-2041.json")
    store = convert_to_zarr(raw, tmp_path / "KFP-PL-2041.zarr", chunk_scan=4)
    back = open_grid(store, lazy=True)
    assert back["ascan"].dtype == np.int16
    assert_same_grid(back, g)
    meta = zarr_meta(store)
    assert meta["zarr_format"] == 3
    assert meta["chunk_grid"]["configuration"]["chunk_shape"] == [4, 5, 64]
    codecs = [c["name"] for c in meta["codecs"]]
    assert "blosc" in codecs and "crc32c" in codecs
    steps = [s["step"] for s in read_provenance(back)]
    assert steps[-2:] == ["import_raw", "convert"]
    assert read_provenance(back)[-1]["parameters"]["chunks"] == [4, 5, 64]


def test_netcdf_to_uncompressed_zarr(tmp_path):
    g = counts_grid(missing=False).chunk({"scan": 3})
    nc = save_grid(g, tmp_path / "KFP-FG-0317.nc")
    store = convert_to_zarr(nc, tmp_path / "KFP-FG-0317.zarr", compress=False)
    assert_same_grid(open_grid(store), g)
    codecs = [c["name"] for c in zarr_meta(store)["codecs"]]
    assert "blosc" not in codecs


def test_float_grid_with_nan_ascans_round_trips(tmp_path):
    rng = np.random.default_rng(2)
    a = rng.normal(0, 20, (6, 4, 50)).astype(np.float32)
    a[2, 1] = np.nan
    g = make_grid(a, scan_mm=np.arange(6.0), index_mm=np.arange(4.0), time_us=np.arange(50) * 0.02,
                  velocity_m_s=STEEL_L, probe_frequency_mhz=5.0, probe_diameter_mm=10.0)
    store = write_zarr(g, tmp_path / "KFP-PW-1180.zarr", chunk_scan=2)
    back = open_grid(store)
    np.testing.assert_array_equal(back.ascan.values, a)  # NaN compare equal here
    assert read_provenance(back)[-1]["step"] == "write_zarr"


def test_targets_are_checked_and_failures_leave_nothing(tmp_path, monkeypatch):
    g = counts_grid()
    raw = export_raw(g, tmp_path / "KFP-0001.json")
    store = convert_to_zarr(raw, tmp_path / "KFP-0001.zarr")
    with pytest.raises(FileFormatError, match="exists"):
        convert_to_zarr(raw, store)
    with pytest.raises(ParameterError, match="`target`"):
        convert_to_zarr(raw, tmp_path / "KFP-0001.h5")
    with pytest.raises(ParameterError, match="`chunk_scan`"):
        convert_to_zarr(raw, tmp_path / "other.zarr", chunk_scan=0)
    with pytest.raises(FileFormatError, match="no file"):
        convert_to_zarr(tmp_path / "absent.json", tmp_path / "other.zarr")
    before = (store / "ascan" / "zarr.json").read_bytes()

    calls = {"n": 0}
    original = raw_module._RawFile.__getitem__

    def failing(self, key):
        calls["n"] += 1
        if calls["n"] > 1:
            raise OSError("simulated read error")
        return original(self, key)

    monkeypatch.setattr(raw_module._RawFile, "__getitem__", failing)
    with pytest.raises(FileFormatError, match="simulated read error"):
        convert_to_zarr(raw, store, overwrite=True, chunk_scan=2)
    assert (store / "ascan" / "zarr.json").read_bytes() == before  # the old store is untouched
    assert sorted(p.name for p in tmp_path.iterdir()) == ["KFP-0001.bin", "KFP-0001.json", "KFP-0001.zarr"]


def cli_main(argv):
    import argparse

    from ndtmap.errors import NdtmapError

    parser = argparse.ArgumentParser(prog="ndtmap")
    sub = parser.add_subparsers(dest="command")
    register(sub)
    args = parser.parse_args(argv)
    try:
        return args.func(args)
    except NdtmapError as exc:
        return f"error: {exc}"


def test_convert_command(tmp_path, capsys):
    g = counts_grid()
    raw = export_raw(g, tmp_path / "KFP-PL-2041.json")
    assert cli_main(["convert", str(raw), str(tmp_path / "a.zarr"), "--chunk-scan", "3"]) == 0
    out, err = capsys.readouterr()
    assert out.startswith(f"wrote {tmp_path / 'a.zarr'}") and "chunks (3, 5, 64)" in out
    assert err == ""  # stderr is not a terminal here: no progress bar
    assert cli_main(["convert", str(raw), str(tmp_path / "b.zarr"), "--quiet", "--no-compress"]) == 0
    out, err = capsys.readouterr()
    assert out == "" and err == ""
    assert_same_grid(open_grid(tmp_path / "b.zarr"), g)
    assert "exists" in cli_main(["convert", str(raw), str(tmp_path / "b.zarr")])


def test_convert_is_registered_on_the_command_line(tmp_path, capsys):
    from ndtmap.cli import main

    g = counts_grid()
    raw = export_raw(g, tmp_path / "KFP-PL-2041.json")
    assert main(["convert", str(raw), str(tmp_path / "c.zarr"), "-q"]) == 0
    assert main(["convert", str(raw), str(tmp_path / "c.zarr"), "-q"]) == 2
    assert "exists" in capsys.readouterr().err
    assert main(["convert", str(raw), str(tmp_path / "d.zarr"), "-q", "--scheduler", "localhost:1"]) == 2
    assert "`scheduler`" in capsys.readouterr().err
