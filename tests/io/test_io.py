"""Tests of ndtmap.io.grid_files: NetCDF-4 and Zarr v3 round trips, raw dumps with a sidecar, and bad files.

External references: the byte layout of raw dumps follows NumPy's C (row-major) order and
``numpy.transpose`` (NumPy reference, "ndarray memory layout"); HDF5 file signature and
dimension scales: HDF Group, HDF5 File Format Specification v3 and "HDF5 Dimension Scale
Specification"; NetCDF-4 on HDF5: Unidata NetCDF Users Guide, "NetCDF-4 Format"; Zarr v3:
Zarr core specification v3.0. Physical values: steel longitudinal velocity 5920 m/s,
Krautkramer, Ultrasonic Testing of Materials, table of velocities (from memory).
"""

from __future__ import annotations

import hashlib
import json
import os
import re
import tracemalloc
from itertools import permutations
from pathlib import Path

import dask.array as da
import h5py
import numpy as np
import pytest
import xarray as xr

import ndtmap.io.grid_files as nio
from ndtmap.errors import FileFormatError, GridError, ParameterError
from ndtmap.grid import DIMS, ascan_in_fsh, grid_problems, make_grid, missing_ascans, read_provenance, with_step
from ndtmap.io import RAW_SIDECAR_FORMAT, export_raw, import_raw, open_grid, save_grid

STEEL_L_M_S = 5920.0  # Krautkramer, Ultrasonic Testing of Materials, table of velocities (from memory)
DOCS = Path(__file__).resolve().parents[2] / "docs" / "grid-format.md"


def tone_burst(t_us, t0_us, f_mhz, cycles=3.0):
    """Gaussian-windowed sine burst (a common model of a broadband echo, no source)."""
    sigma = cycles / (f_mhz * 2.0 * np.sqrt(2.0 * np.log(2.0)))
    return np.exp(-0.5 * ((t_us - t0_us) / sigma) ** 2) * np.sin(2 * np.pi * f_mhz * (t_us - t0_us))


def plate(dtype="float32", n_scan=7, n_index=5, n_time=240, thickness_mm=12.0, seed=1):
    """A straight-beam scan of a steel plate with a thinner patch, one lost A-scan and a full record.

    Carries everything a round trip must keep: float32 NaNs, int16 counts, number and string
    attributes, the provenance record, coordinate attributes, the `missing` mask and a
    simulator-style truth variable.
    """
    rng = np.random.default_rng(seed)
    t = np.arange(n_time) * 0.02  # 50 MHz sampling
    truth = np.full((n_scan, n_index), thickness_mm)
    truth[2:4, 1:3] = 0.75 * thickness_mm
    t_bw = 2 * truth / (STEEL_L_M_S * 1e-3)  # pulse-echo time of flight t = 2 d / v (common practice, no source)
    a = 80 * tone_burst(t[None, None, :], t_bw[..., None], 5.0) + rng.normal(0, 0.5, (n_scan, n_index, n_time))
    kw = dict(
        scan_mm=np.r_[0.0, 0.5, 1.0, 2.0, 2.5, 4.0, 4.5][:n_scan] if n_scan <= 7 else np.arange(n_scan) * 0.5,
        index_mm=np.arange(n_index) * 1.5,
        time_us=t,
        velocity_m_s=STEEL_L_M_S,
        probe_frequency_mhz=5.0,
        probe_diameter_mm=10.0,
        attrs={
            "part_id": "KFP-2207-A",
            "material": "carbon steel plate",
            "part_thickness_mm": thickness_mm,
            "gain_db": 32.5,
            "wave_mode": "longitudinal",
            "operator_notes": "scan from datum edge — µs timing, 3 passes",
            "scan_count": np.int32(3),
            "truth": json.dumps({"reflectors": [{"kind": "wall loss", "depth_mm": 9.0}]}),
        },
    )
    if dtype == "int16":
        counts = np.clip(np.round(a / (100 / 32767)), -32767, 32767).astype(np.int16)
        g = make_grid(counts, fsh_per_count=100 / 32767, **kw)
        g["missing"] = (("scan", "index"), np.zeros((n_scan, n_index), dtype=bool))
        g["missing"][3, 4] = True
    else:
        a = a.astype(np.float32)
        a[5, 0, :] = np.nan  # a lost record
        g = make_grid(a, **kw)
        g["missing"] = (("scan", "index"), np.zeros((n_scan, n_index), dtype=bool))
        g["missing"][1, 1] = True
    g["truth_thickness_mm"] = (("scan", "index"), truth, {"units": "mm", "long_name": "true wall thickness"})
    g["scan"].attrs["encoder"] = "wheel, 0.5 mm"
    return with_step(g, "acquire", {"gain_db": 32.5, "pulser": "square 100 ns"})


def file_digest(path: Path) -> str:
    h = hashlib.sha256()
    files = sorted(p for p in Path(path).rglob("*") if p.is_file()) if Path(path).is_dir() else [Path(path)]
    for p in files:
        h.update(str(p.relative_to(path) if Path(path).is_dir() else p.name).encode())
        h.update(p.read_bytes())
    return h.hexdigest()


def assert_same_grid(back: xr.Dataset, g: xr.Dataset) -> None:
    """Identical values, dims, coords and attrs; A-scan bits compared exactly (NaN payloads included)."""
    back = back.load()
    xr.testing.assert_identical(back.drop_encoding(), g)
    assert back["ascan"].dtype == g["ascan"].dtype
    bits = np.uint32 if g["ascan"].dtype == np.float32 else np.uint16
    np.testing.assert_array_equal(back["ascan"].values.view(bits), g["ascan"].values.view(bits))
    assert read_provenance(back) == read_provenance(g)
    for name in g.variables:
        assert back[name].attrs == g[name].attrs, name


def listing(folder: Path) -> list[str]:
    return sorted(p.name for p in folder.iterdir())


# --------------------------------------------------------------------------- NetCDF and Zarr round trips


@pytest.mark.parametrize("suffix", [".nc", ".zarr"])
@pytest.mark.parametrize("dtype", ["float32", "int16"])
@pytest.mark.parametrize("compress", [True, False])
def test_round_trip_eager(tmp_path, suffix, dtype, compress):
    g = plate(dtype)
    written = save_grid(g, tmp_path / f"KFP-2207{suffix}", compress=compress)
    assert written == tmp_path / f"KFP-2207{suffix}"
    back = open_grid(written)
    assert isinstance(back["ascan"].data, np.ndarray)
    assert_same_grid(back, g)
    assert listing(tmp_path) == [written.name]  # no temporary files left


@pytest.mark.parametrize("suffix", [".nc", ".zarr"])
@pytest.mark.parametrize("dtype", ["float32", "int16"])
def test_round_trip_lazy(tmp_path, suffix, dtype):
    g = plate(dtype)
    path = save_grid(g, tmp_path / f"KFP-2207{suffix}")
    back = open_grid(path, lazy=True)
    try:
        assert isinstance(back["ascan"].data, da.Array)
        assert back["ascan"].chunks[2] == (g.sizes["time"],)  # whole A-scans in every chunk
        assert_same_grid(back, g)
    finally:
        back.close()


@pytest.mark.parametrize("suffix", [".nc", ".zarr"])
def test_lazy_grid_saved_elsewhere_leaves_input_untouched(tmp_path, suffix):
    g = plate()
    source = save_grid(g, tmp_path / f"source{suffix}")
    before = file_digest(source)
    stored = xr.open_dataset(source, engine="zarr" if suffix == ".zarr" else "h5netcdf",
                             **({"consolidated": False} if suffix == ".zarr" else {}))
    per_chunk = stored["ascan"].encoding.get("preferred_chunks", {}).get("scan", 1)
    stored.close()
    lazy = open_grid(source, chunks={"scan": 2})  # rounded to whole stored chunks: no xarray warning
    try:
        n = lazy.sizes["scan"]
        expect = 2 if per_chunk <= 1 or 2 % per_chunk == 0 else min(n, max(per_chunk, round(2 / per_chunk) * per_chunk))
        assert lazy["ascan"].chunks[0][0] == expect
        processed = with_step(lazy, "copy", {})
        out = save_grid(processed, tmp_path / f"copy{'.zarr' if suffix == '.nc' else '.nc'}")
        back = open_grid(out)
        assert read_provenance(back)[-1]["step"] == "copy"
        xr.testing.assert_identical(back["ascan"], g["ascan"])
    finally:
        lazy.close()
    assert file_digest(source) == before


def test_eager_open_leaves_input_untouched_and_closed(tmp_path):
    path = save_grid(plate(), tmp_path / "KFP.nc")
    before = file_digest(path)
    g = open_grid(path)
    save_grid(g, tmp_path / "other.nc")
    assert file_digest(path) == before
    # an eager grid holds no open handle: the file can be replaced under it
    save_grid(plate(seed=2), path, overwrite=True)
    assert g["ascan"].values.sum() != 0


def test_auto_lazy_when_grid_is_large_for_the_memory(tmp_path, monkeypatch):
    g = plate()
    path = save_grid(g, tmp_path / "KFP.nc")
    nbytes = g["ascan"].nbytes
    # the default share is 25 % of the memory
    monkeypatch.setattr(nio, "_total_memory_bytes", lambda: 4 * nbytes + 4)
    small = open_grid(path)
    assert isinstance(small["ascan"].data, np.ndarray)
    monkeypatch.setattr(nio, "_total_memory_bytes", lambda: 4 * nbytes - 4)
    big = open_grid(path)
    try:
        assert isinstance(big["ascan"].data, da.Array)
        assert grid_problems(big) == []
    finally:
        big.close()


def test_total_memory_is_read():
    total = nio._total_memory_bytes()
    with open("/proc/meminfo") as fh:  # Linux proc(5): MemTotal in kB
        meminfo = int(next(line for line in fh if line.startswith("MemTotal:")).split()[1]) * 1024
    assert 0 < total <= meminfo * 1.01


def test_default_chunks_hold_whole_ascans_and_follow_storage_chunks():
    # ~64 MiB dask chunks: 2000 samples float32 = 8000 B per A-scan -> 8388 A-scans per chunk
    c_scan, c_index = nio._dask_chunks((1000, 600, 2000), 4)
    assert (c_scan, c_index) == (8388 // 600, 600)  # whole index lines first
    for shape, storage in [((1000, 600, 2000), (16, 32)), ((1000, 6000, 2000), (16, 32)), ((50, 3, 100), (7, 5))]:
        c_scan, c_index = nio._dask_chunks(shape, 4, storage=storage)
        assert c_scan * c_index * shape[2] * 4 <= 64 * 2**20 or (c_scan, c_index) == storage
        # whole multiples of the chunks on disk (or the whole axis), so no stored chunk is read twice
        assert c_scan % storage[0] == 0 or c_scan == shape[0]
        assert c_index % storage[1] == 0 or c_index == shape[1]
    s_scan, s_index = nio._storage_chunks((1000, 600, 2000), 4)
    assert s_scan * s_index * 2000 * 4 <= 4 * 2**20 and s_scan > 1 and s_index > 1


def test_chunks_argument_checks(tmp_path):
    path = save_grid(plate(), tmp_path / "KFP.nc")
    with pytest.raises(ParameterError, match=r"`chunks\['time'\]` must be -1 \(whole A-scans\), got 10"):
        open_grid(path, chunks={"time": 10})
    with pytest.raises(ParameterError, match=r"`chunks` keys must be 'scan' or 'index', got 'x'"):
        open_grid(path, chunks={"x": 1})
    with pytest.raises(ParameterError, match="`chunks` was given with lazy=False"):
        open_grid(path, chunks={"scan": 1}, lazy=False)
    ds = open_grid(path, chunks={"index": -1, "time": -1})
    assert ds["ascan"].chunks[1:] == ((5,), (240,))
    ds.close()


def test_zarr_store_layout(tmp_path):
    store = save_grid(plate("int16"), tmp_path / "KFP.zarr")
    meta = json.loads((store / "ascan" / "zarr.json").read_text())
    # Zarr core specification v3.0: array metadata with named dimensions and regular chunks
    assert meta["zarr_format"] == 3 and meta["data_type"] == "int16"
    assert meta["dimension_names"] == ["scan", "index", "time"]
    assert meta["chunk_grid"]["configuration"]["chunk_shape"][2] == 240  # whole time axis per chunk
    assert not (store / "zarr.json").read_text().count("consolidated_metadata\": {")


def test_netcdf_layout_is_plain_netcdf4(tmp_path):
    path = save_grid(plate("int16"), tmp_path / "KFP.nc")
    with h5py.File(path, "r") as f:
        # HDF5 Dimension Scale Specification: dims are attached scales named after the dimension
        assert [dim[0].name for dim in f["ascan"].dims] == ["/scan", "/index", "/time"]
        assert f["ascan"].dtype == np.int16
        assert f["ascan"].compression == "gzip" and f["ascan"].shuffle and f["ascan"].fletcher32
        assert f["ascan"].chunks[2] == 240
        assert f.attrs["velocity_m_s"] == STEEL_L_M_S
        assert json.loads(f.attrs["provenance"])[0]["step"] == "acquire"
        assert "_FillValue" not in f["ascan"].attrs  # integer counts are stored as they are
    path2 = save_grid(plate("int16"), tmp_path / "plain.nc", compress=False)
    with h5py.File(path2, "r") as f:
        assert f["ascan"].compression is None and f["ascan"].chunks is None


def test_large_provenance_and_text_attributes_survive(tmp_path):
    g = plate()
    for i in range(400):  # a long processing history (> 64 kB of JSON)
        g = with_step(g, f"step-{i}", {"window_us": [1.0 * i, 2.0 * i], "note": "x" * 100})
    assert len(g.attrs["provenance"]) > 64 * 1024
    back = open_grid(save_grid(g, tmp_path / "KFP.nc"))
    assert back.attrs["provenance"] == g.attrs["provenance"]
    assert back.attrs["operator_notes"] == g.attrs["operator_notes"]


# --------------------------------------------------------------------------- atomic writes and refusals


def failing_grid(g: xr.Dataset) -> xr.Dataset:
    """`g` with a lazy ascan whose third block fails while it is being written."""

    def boom(block, block_info=None):
        if block_info[0]["chunk-location"][0] == 2:
            raise RuntimeError("device full while writing block 3")
        return block

    lazy = g.chunk({"scan": 2, "index": -1, "time": -1})
    return lazy.assign(ascan=lazy["ascan"].copy(data=lazy["ascan"].data.map_blocks(boom, dtype=np.float32)))


@pytest.mark.parametrize("suffix", [".nc", ".zarr"])
def test_failed_write_keeps_previous_file_and_leaves_no_temporary(tmp_path, suffix):
    previous = plate(seed=7)
    path = save_grid(previous, tmp_path / f"KFP{suffix}")
    before = file_digest(path)
    with pytest.raises(FileFormatError, match=r"could not write .*device full while writing block 3.*previous file "
                                              r"under that name is unchanged"):
        save_grid(failing_grid(plate()), path)
    assert file_digest(path) == before
    assert listing(tmp_path) == [path.name]
    assert_same_grid(open_grid(path), previous)


@pytest.mark.parametrize("suffix", [".nc", ".zarr"])
def test_failed_first_write_leaves_nothing(tmp_path, suffix):
    with pytest.raises(FileFormatError, match="could not write"):
        save_grid(failing_grid(plate()), tmp_path / f"KFP{suffix}")
    assert listing(tmp_path) == []


def test_failed_rename_keeps_previous_zarr_store(tmp_path, monkeypatch):
    previous = plate(seed=7)
    path = save_grid(previous, tmp_path / "KFP.zarr")
    before = file_digest(path)
    real_rename = os.rename

    def rename(src, dst):
        if Path(src).name.endswith(".tmp"):  # moving the new store in fails
            raise OSError(28, "No space left on device")
        return real_rename(src, dst)

    monkeypatch.setattr(nio.os, "rename", rename)
    with pytest.raises(FileFormatError, match="No space left on device"):
        save_grid(plate(), path)
    monkeypatch.undo()
    assert file_digest(path) == before
    assert listing(tmp_path) == ["KFP.zarr"]


def test_failed_replace_keeps_previous_netcdf(tmp_path, monkeypatch):
    path = save_grid(plate(seed=7), tmp_path / "KFP.nc")
    before = file_digest(path)

    def replace(src, dst):
        raise PermissionError(13, "Permission denied")

    monkeypatch.setattr(nio.os, "replace", replace)
    with pytest.raises(FileFormatError, match="Permission denied"):
        save_grid(plate(), path)
    monkeypatch.undo()
    assert file_digest(path) == before and listing(tmp_path) == ["KFP.nc"]


def test_overwrite_replaces_existing_zarr_store(tmp_path):
    path = save_grid(plate(seed=1), tmp_path / "KFP.zarr")
    newer = plate(seed=2)
    save_grid(newer, path)
    assert_same_grid(open_grid(path), newer)
    assert listing(tmp_path) == ["KFP.zarr"]


@pytest.mark.parametrize("suffix", [".nc", ".zarr"])
@pytest.mark.parametrize("lazy", [False, True])
def test_refuses_to_overwrite_the_source(tmp_path, suffix, lazy):
    path = save_grid(plate(), tmp_path / f"KFP{suffix}")
    before = file_digest(path)
    g = open_grid(path, lazy=lazy)
    # also after a step that keeps the encoding of the variables
    for candidate in (g, with_step(g, "gate", {}), g.isel(scan=slice(0, 3))):
        with pytest.raises(FileFormatError, match=r"refusing to overwrite .*KFP.* the dataset was read from it"):
            save_grid(candidate, path)
    # a relative spelling of the same path is recognised too
    os.chdir(tmp_path)
    with pytest.raises(FileFormatError, match="refusing to overwrite"):
        save_grid(g, f"./KFP{suffix}")
    g.close()
    assert file_digest(path) == before


def test_overwrite_false(tmp_path):
    path = save_grid(plate(), tmp_path / "KFP.nc")
    with pytest.raises(FileFormatError, match=r"KFP\.nc already exists; pass overwrite=True or choose another name"):
        save_grid(plate(), path, overwrite=False)


def test_refuses_to_replace_a_folder_that_is_not_a_store(tmp_path):
    folder = tmp_path / "results"
    folder.mkdir()
    (folder / "report.txt").write_text("keep me")
    with pytest.raises(FileFormatError, match="exists and is not a Zarr store; refusing to replace it"):
        save_grid(plate(), folder, format="zarr")
    assert (folder / "report.txt").read_text() == "keep me"
    (tmp_path / "x.nc").mkdir()
    with pytest.raises(FileFormatError, match="exists and is a folder"):
        save_grid(plate(), tmp_path / "x.nc")


def test_save_argument_checks(tmp_path):
    g = plate()
    with pytest.raises(ParameterError, match=r"cannot tell the format from the suffix .*KFP\.dat"):
        save_grid(g, tmp_path / "KFP.dat")
    with pytest.raises(ParameterError, match=r"`format` is 'zarr' but the name 'KFP\.nc' says 'netcdf'"):
        save_grid(g, tmp_path / "KFP.nc", format="zarr")
    with pytest.raises(ParameterError, match=r"`format` must be one of \{'netcdf', 'zarr'\}, got 'hdf'"):
        save_grid(g, tmp_path / "KFP.nc", format="hdf")
    with pytest.raises(FileFormatError, match="the folder .*missing does not exist"):
        save_grid(g, tmp_path / "missing" / "KFP.nc")
    with pytest.raises(GridError, match="global attribute `velocity_m_s`"):
        save_grid(g.assign_attrs(velocity_m_s=-1.0), tmp_path / "KFP.nc")
    with pytest.raises(TypeError, match="`ds` must be an xarray.Dataset"):
        save_grid(g["ascan"], tmp_path / "KFP.nc")
    store = save_grid(g, tmp_path / "no-suffix", format="zarr")
    assert_same_grid(open_grid(store), g)


@pytest.mark.parametrize(
    ("value", "message"),
    [
        (True, r"global attribute `flag` is a boolean \(True\); netCDF attributes cannot hold booleans"),
        (None, r"global attribute `flag` is None; netCDF attributes cannot be empty"),
        ({"a": 1}, r"global attribute `flag` is a mapping; store it as a JSON string"),
        ([1, "a"], r"global attribute `flag` must be a list of numbers only or of strings only"),
    ],
)
def test_netcdf_attribute_types_are_refused_clearly(tmp_path, value, message):
    g = plate().assign_attrs(flag=value)
    with pytest.raises(FileFormatError, match=message):
        save_grid(g, tmp_path / "KFP.nc")
    assert listing(tmp_path) == []
    # Zarr attributes are JSON, which holds booleans and null
    if not isinstance(value, list):
        back = open_grid(save_grid(g, tmp_path / "KFP.zarr"))
        assert back.attrs["flag"] == value


def test_variable_attribute_types_are_checked(tmp_path):
    g = plate()
    g["ascan"].attrs["clipped"] = np.bool_(False)
    with pytest.raises(FileFormatError, match="attribute `clipped` of `ascan` is a boolean"):
        save_grid(g, tmp_path / "KFP.nc")


# --------------------------------------------------------------------------- bad files


def test_missing_path(tmp_path):
    with pytest.raises(FileFormatError, match=r"no file or folder at .*nothere\.nc; check the path"):
        open_grid(tmp_path / "nothere.nc")


def test_folder_that_is_not_a_store(tmp_path):
    (tmp_path / "scans").mkdir()
    with pytest.raises(FileFormatError, match=r"is a folder but not a Zarr store \(it has no zarr.json\)"):
        open_grid(tmp_path / "scans")


def test_unknown_suffix(tmp_path):
    path = tmp_path / "KFP.csv"
    path.write_text("1,2,3\n")
    with pytest.raises(FileFormatError, match=r"cannot tell the format of .*KFP\.csv from its suffix '\.csv'"):
        open_grid(path)


def test_zarr_suffix_on_a_file(tmp_path):
    path = tmp_path / "KFP.zarr"
    path.write_bytes(b"PK\x03\x04")
    with pytest.raises(FileFormatError, match="is a file, but a Zarr store is a folder"):
        open_grid(path)


@pytest.mark.parametrize(
    ("content", "message"),
    [
        (b"", r"is empty \(0 bytes\)"),
        (b"this is not a scan grid at all\n" * 40, r"could not open .* as a NetCDF-4/HDF5 file \(OSError: .*signature"),
        (b"CDF\x01\x00\x00\x00\x00", r"is a classic netCDF-3 file; ndtmap reads netCDF-4"),
        (bytes(range(256)) * 8, r"could not open .* as a NetCDF-4/HDF5 file"),
    ],
)
def test_garbage_netcdf(tmp_path, content, message):
    path = tmp_path / "KFP.nc"
    path.write_bytes(content)
    with pytest.raises(FileFormatError, match=message):
        open_grid(path)


@pytest.mark.parametrize("keep", [0.1, 0.5, 0.9, 0.999])
def test_truncated_netcdf(tmp_path, keep):
    full = save_grid(plate(), tmp_path / "full.nc").read_bytes()
    path = tmp_path / "cut.nc"
    path.write_bytes(full[: int(len(full) * keep)])
    # HDF5 File Format Specification: the superblock records the end-of-file address
    with pytest.raises(FileFormatError, match=r"could not open .*cut\.nc .*truncated"):
        open_grid(path)


def test_damaged_chunk_is_detected_by_checksum(tmp_path):
    path = save_grid(plate(), tmp_path / "KFP.nc")
    with h5py.File(path, "r") as f:
        offset = f["ascan"].id.get_chunk_info(0).byte_offset
    raw = bytearray(path.read_bytes())
    raw[offset + 100 : offset + 120] = bytes(20)  # overwrite compressed bytes inside the first chunk
    path.write_bytes(bytes(raw))
    with pytest.raises(FileFormatError, match=r"could not read the data of .*KFP\.nc"):
        open_grid(path)


def test_damaged_zarr_metadata(tmp_path):
    store = save_grid(plate(), tmp_path / "KFP.zarr")
    (store / "ascan" / "zarr.json").write_text("{ not json")
    with pytest.raises(FileFormatError, match=r"could not open .*KFP\.zarr as a Zarr store"):
        open_grid(store)


def test_hdf5_without_dimension_scales(tmp_path):
    path = tmp_path / "bare.h5"
    with h5py.File(path, "w") as f:
        f["ascan"] = np.zeros((2, 3, 4), np.float32)
    with pytest.raises(FileFormatError, match="holds HDF5 datasets without dimension names; attach the `scan`"):
        open_grid(path)


def test_readable_file_that_is_not_a_grid(tmp_path):
    path = tmp_path / "other.nc"
    xr.Dataset({"temperature": ("x", [20.0, 21.0])}).to_netcdf(path, engine="h5netcdf")
    with pytest.raises(GridError, match=r"invalid scan grid in .*other\.nc, \d+ problems: .*`ascan` is missing"):
        open_grid(path)
    ds = open_grid(path, validate=False)
    assert "temperature" in ds


def test_newer_grid_format_is_refused(tmp_path):
    path = save_grid(plate().assign_attrs(grid_format="ndtmap-grid 2"), tmp_path / "KFP.nc")
    with pytest.raises(FileFormatError, match="uses grid format version 2, newer than this ndtmap reads"):
        open_grid(path)


# --------------------------------------------------------------------------- files written without ndtmap


def test_plain_xarray_file_is_read(tmp_path):
    """A file written by another program with plain xarray (no ndtmap writer), as in docs/grid-format.md."""
    t = np.arange(400) * 0.01  # 100 MHz sampling
    a = np.zeros((3, 4, 400), np.float32)
    a[..., 200] = 50.0
    a[1, 2, :] = np.nan
    ds = xr.Dataset(
        {"ascan": (("scan", "index", "time"), a, {"units": "%FSH", "signal": "rectified"})},
        coords={
            "scan": ("scan", [0.0, 1.0, 2.0], {"units": "mm"}),
            "index": ("index", [0.0, 0.5, 1.0, 1.5], {"units": "mm"}),
            "time": ("time", t, {"units": "µs"}),  # spelled with the micro sign, mended on reading
        },
        attrs={"velocity_m_s": 5920.0, "beam_angle_deg": 0.0, "probe_frequency_mhz": 10.0,
               "probe_diameter_mm": 6.0},
    )
    ds.to_netcdf(tmp_path / "other.nc", engine="h5netcdf")
    g = open_grid(tmp_path / "other.nc")
    assert g["time"].attrs["units"] == "us"
    assert g["ascan"].attrs["long_name"] == "A-scan amplitude"
    assert missing_ascans(g).values.sum() == 1 and bool(missing_ascans(g)[1, 2])
    np.testing.assert_array_equal(g["ascan"].values, a)


def test_plain_xarray_int16_with_fill_value_is_scaled(tmp_path):
    """Integer counts with a CF _FillValue are decoded to float: the fill becomes a missing A-scan, counts -> %FSH."""
    counts = np.array([[[100, 200, 300], [-32768, 5, 5]]], dtype=np.int16)
    ds = xr.Dataset(
        {"ascan": (("scan", "index", "time"), counts, {"units": "%FSH", "signal": "rf", "fsh_per_count": 0.5})},
        coords={"scan": ("scan", [0.0], {"units": "mm"}), "index": ("index", [0.0, 1.0], {"units": "mm"}),
                "time": ("time", [0.0, 0.02, 0.04], {"units": "us"})},
        attrs={"velocity_m_s": 5920.0, "beam_angle_deg": 0.0, "probe_frequency_mhz": 5.0, "probe_diameter_mm": 10.0},
    )
    path = tmp_path / "fill.nc"
    ds.to_netcdf(path, engine="h5netcdf", encoding={"ascan": {"_FillValue": np.int16(-32768)}})
    g = open_grid(path)
    assert g["ascan"].dtype == np.float32 and "fsh_per_count" not in g["ascan"].attrs
    np.testing.assert_array_equal(g["ascan"].values[0, 0], [50.0, 100.0, 150.0])
    assert missing_ascans(g).values.tolist() == [[False, True]]


def test_plain_h5py_file_is_read(tmp_path):
    """NetCDF-4 written with h5py alone: datasets attached as HDF5 dimension scales (HDF5 Dimension Scale spec)."""
    path = tmp_path / "KFP-h5py.nc"
    counts = (np.arange(2 * 3 * 64) % 200 - 100).astype(np.int16).reshape(2, 3, 64)
    with h5py.File(path, "w") as f:
        for name, values in (("scan", [0.0, 2.0]), ("index", [0.0, 1.0, 2.0]), ("time", np.arange(64) * 0.02)):
            d = f.create_dataset(name, data=np.asarray(values, dtype="f8"))
            d.make_scale(name)
            d.attrs["units"] = "us" if name == "time" else "mm"
        a = f.create_dataset("ascan", data=counts)
        for i, name in enumerate(("scan", "index", "time")):
            a.dims[i].attach_scale(f[name])
        a.attrs["units"] = "%FSH"
        a.attrs["signal"] = "rf"
        a.attrs["fsh_per_count"] = 100 / 32767
        m = f.create_dataset("missing", data=np.array([[0, 0, 1], [0, 0, 0]], dtype="u1"))
        m.dims[0].attach_scale(f["scan"])
        m.dims[1].attach_scale(f["index"])
        f.attrs.update({"velocity_m_s": 3255.0, "beam_angle_deg": 45.0, "probe_frequency_mhz": 4.0,
                        "probe_diameter_mm": 8.0, "wave_mode": "shear", "part_id": "KFP-0042"})
    g = open_grid(path)
    assert g["ascan"].dtype == np.int16
    np.testing.assert_array_equal(g["ascan"].values, counts)
    assert g.attrs["wave_mode"] == "shear" and g.attrs["beam_angle_deg"] == 45.0
    assert g["missing"].dtype == bool and missing_ascans(g).values.tolist() == [[False, False, True], [False] * 3]
    assert read_provenance(g) == []


def python_blocks(markdown: str) -> list[str]:
    return re.findall(r"```python\n(.*?)```", markdown, flags=re.S)


def test_examples_in_the_format_document_run(tmp_path, monkeypatch):
    """The code in docs/grid-format.md writes valid grids without ndtmap; open_grid must read them."""
    blocks = python_blocks(DOCS.read_text(encoding="utf-8"))
    assert len(blocks) >= 4  # xarray, h5py, raw dump, reading
    assert not any(re.search(r"^\s*(import|from) ndtmap", code, flags=re.M) for code in blocks)
    monkeypatch.chdir(tmp_path)
    for code in blocks:  # each block on its own, in document order, as a reader would paste them
        exec(compile(code, str(DOCS), "exec"), {"__name__": "grid_format_example"})  # our own document
    made = sorted(p for p in tmp_path.iterdir() if p.suffix in (".nc", ".zarr", ".json"))
    assert [p.suffix for p in made] == [".nc", ".zarr", ".nc", ".json"]
    for path in made:
        g = open_grid(path)
        assert grid_problems(g) == [], path
        assert g.attrs["part_id"] == path.stem
    # the values the examples put in: back-wall echo at 2 d / v, 80 %FSH peaks, the lost records
    b = open_grid(tmp_path / "KFP-4471-B.nc")
    assert int(missing_ascans(b).sum()) == 1 and bool(missing_ascans(b)[12, 7])
    t_peak = float(b["time"][int(np.argmax(np.abs(b["ascan"].values[0, 0])))])
    assert abs(t_peak - 2 * 25.0 / (STEEL_L_M_S * 1e-3)) < 0.06  # within a quarter period at 5 MHz
    c = open_grid(tmp_path / "KFP-4471-C.nc")
    assert float(ascan_in_fsh(c).max()) == pytest.approx(80.0, abs=0.01)
    assert np.argwhere(missing_ascans(c).values).tolist() == [[5, 2]]
    d = open_grid(tmp_path / "KFP-4471-D.json")
    assert float(ascan_in_fsh(d).max()) == pytest.approx(50.0, abs=0.01)
    assert d["index"].values[6] == 6.5 and float(d["time"][250]) == pytest.approx(5.0)


def doc_table_rows(markdown: str) -> dict[str, list[str]]:
    rows = {}
    for line in markdown.splitlines():
        m = re.match(r"^\| `(\w+)` \|(.*)\|$", line)
        if m:
            rows[m.group(1)] = [c.strip() for c in m.group(2).split("|")]
    return rows


def test_format_document_lists_every_attribute_with_the_validators_ranges():
    from ndtmap.grid import OPTIONAL_ATTRS, REQUIRED_ATTRS
    from ndtmap.grid.schema import _LIMITS, _OPTIONAL_LIMITS

    rows = doc_table_rows(DOCS.read_text(encoding="utf-8"))
    for name in (*REQUIRED_ATTRS, *OPTIONAL_ATTRS):
        assert name in rows, f"{name} is not documented"
    for name, (low, high, lo_inc, hi_inc) in {**_LIMITS, **_OPTIONAL_LIMITS}.items():
        expected = f"{'[' if lo_inc else '('}{low:g}, {high:g}{']' if hi_inc else ')'}"
        assert rows[name][-1] == expected, (name, rows[name][-1], expected)


# --------------------------------------------------------------------------- raw dumps


REF = np.arange(3 * 4 * 5, dtype=np.float64).reshape(3, 4, 5) - 30.0  # distinct values: any mix-up shows


def write_dump(folder: Path, *, order=("scan", "index", "time"), dtype="<i2", offset=0, name="dump", **changes):
    """Write REF in `order` with an `offset`-byte header, and a sidecar, the way an acquisition program would."""
    perm = [DIMS.index(d) for d in order]
    data = np.ascontiguousarray(REF.transpose(perm)).astype(dtype)  # C order, first axis slowest (NumPy docs)
    with open(folder / f"{name}.bin", "wb") as fh:
        fh.write(b"H" * offset)
        fh.write(data.tobytes())
    doc = {
        "format": RAW_SIDECAR_FORMAT,
        "version": 1,
        "data_file": f"{name}.bin",
        "dtype": dtype,
        "byte_offset": offset,
        "shape": {"scan": 3, "index": 4, "time": 5},
        "axis_order": list(order),
        "coords": {"scan_mm": [0.0, 1.0, 2.5], "index_mm": {"start": -2.0, "step": 0.5},
                   "time_us": {"start": 1.0, "step": 0.025}},
        "signal": "rf",
        "attrs": {"velocity_m_s": 5920, "beam_angle_deg": 0, "probe_frequency_mhz": 5, "probe_diameter_mm": 10,
                  "part_id": "KFP-3001"},
    }
    if np.dtype(dtype).kind in "iu":
        doc["fsh_per_count"] = 0.25
    doc.update(changes)
    sidecar = folder / f"{name}.json"
    sidecar.write_text(json.dumps(doc, indent=1))
    return sidecar


@pytest.mark.parametrize("order", list(permutations(DIMS)))
@pytest.mark.parametrize("dtype", ["<i2", "<f4"])
@pytest.mark.parametrize("offset", [0, 13])
@pytest.mark.parametrize("lazy", [False, True])
def test_raw_import_every_axis_order(tmp_path, order, dtype, offset, lazy):
    sidecar = write_dump(tmp_path, order=order, dtype=dtype, offset=offset)
    g = import_raw(sidecar, lazy=lazy)
    assert g["ascan"].dims == DIMS
    assert isinstance(g["ascan"].data, da.Array) == lazy
    if lazy:
        assert g["ascan"].chunks[2] == (5,)
    np.testing.assert_array_equal(g["ascan"].values, REF.astype(dtype))
    assert g["ascan"].dtype == np.dtype(dtype)
    np.testing.assert_array_equal(g["scan"].values, [0.0, 1.0, 2.5])
    np.testing.assert_allclose(g["index"].values, [-2.0, -1.5, -1.0, -0.5])
    np.testing.assert_allclose(g["time"].values, 1.0 + 0.025 * np.arange(5))
    assert g.attrs["part_id"] == "KFP-3001" and g.attrs["velocity_m_s"] == 5920.0
    assert read_provenance(g)[-1]["step"] == "import_raw"
    assert read_provenance(g)[-1]["parameters"]["axis_order"] == list(order)
    if dtype == "<i2":
        assert g["ascan"].attrs["fsh_per_count"] == 0.25


@pytest.mark.parametrize("dtype", ["<u1", "|u1", "<u2", "<f8", "<i1"])
def test_raw_import_other_sample_types(tmp_path, dtype):
    ref = REF + 30.0 if dtype[1] == "u" else REF  # unsigned types hold the shifted values 0..59
    sidecar = write_dump(tmp_path, dtype=dtype)
    if dtype[1] == "u":
        data = np.ascontiguousarray(ref).astype(dtype)
        (tmp_path / "dump.bin").write_bytes(data.tobytes())
    g = import_raw(sidecar)
    expected_dtype = np.float32 if dtype == "<f8" else np.dtype(dtype)
    assert g["ascan"].dtype == expected_dtype
    np.testing.assert_array_equal(g["ascan"].values, ref.astype(expected_dtype))


def test_raw_import_through_open_grid_and_missing_list(tmp_path):
    sidecar = write_dump(tmp_path, missing=[[0, 1], [2, 3]])
    g = open_grid(sidecar)
    assert g["missing"].dtype == bool
    assert np.argwhere(missing_ascans(g).values).tolist() == [[0, 1], [2, 3]]


def test_raw_data_file_is_not_modified_and_is_opened_read_only(tmp_path):
    sidecar = write_dump(tmp_path, dtype="<f4")
    (tmp_path / "dump.bin").chmod(0o444)
    before = file_digest(tmp_path / "dump.bin")
    g = import_raw(sidecar, lazy=True)
    assert float(g["ascan"].sum()) == float(REF.sum())
    g = import_raw(sidecar, lazy=False)
    assert file_digest(tmp_path / "dump.bin") == before


@pytest.mark.parametrize("dtype", [None, "<f4"])
@pytest.mark.parametrize("source", ["float32", "int16"])
def test_export_raw_round_trip(tmp_path, dtype, source):
    g = plate(source)
    sidecar = export_raw(g, tmp_path / "KFP-2207.json", dtype=dtype)
    assert listing(tmp_path) == ["KFP-2207.bin", "KFP-2207.json"]
    doc = json.loads(sidecar.read_text())
    assert doc["format"] == RAW_SIDECAR_FORMAT and doc["version"] == 1 and doc["axis_order"] == list(DIMS)
    n = g.sizes["scan"] * g.sizes["index"] * g.sizes["time"]
    assert (tmp_path / "KFP-2207.bin").stat().st_size == n * np.dtype(doc["dtype"]).itemsize
    back = import_raw(sidecar)
    if dtype is None:
        np.testing.assert_array_equal(back["ascan"].values.view(np.uint8), g["ascan"].values.view(np.uint8))
        assert back["ascan"].attrs.get("fsh_per_count") == g["ascan"].attrs.get("fsh_per_count")
    else:  # integer counts converted to %FSH
        scale = g["ascan"].attrs.get("fsh_per_count", 1.0)
        np.testing.assert_allclose(back["ascan"].values, g["ascan"].values * scale, rtol=1e-6)
    for dim in DIMS:  # coordinates bit for bit (uneven scan spacing as an explicit list)
        np.testing.assert_array_equal(back[dim].values, g[dim].values)
    np.testing.assert_array_equal(missing_ascans(back).values, missing_ascans(g).values)
    for key, value in g.attrs.items():
        if key != "provenance":
            assert back.attrs[key] == value, key
    assert [s["step"] for s in read_provenance(back)] == ["acquire", "import_raw"]


def test_export_raw_of_a_lazy_grid_and_refusals(tmp_path):
    g = plate()
    sidecar = export_raw(g.chunk({"scan": 2}), tmp_path / "a.json")
    lazy = import_raw(sidecar, lazy=True)
    with pytest.raises(FileFormatError, match="refusing to overwrite .*a\\.(json|bin)"):
        export_raw(lazy, sidecar)
    with pytest.raises(ParameterError, match=r"`dtype` '<i2' would change"):
        export_raw(g, tmp_path / "b.json", dtype="<i2")
    with pytest.raises(ParameterError, match=r"`sidecar_path` must end in \.json"):
        export_raw(g, tmp_path / "b.raw")
    with pytest.raises(FileFormatError, match=r"global attribute `flag` is a boolean"):
        export_raw(g.assign_attrs(flag=True), tmp_path / "c.json")
    lazy.close()
    with pytest.raises(FileFormatError, match=r"a\.json already exists"):
        export_raw(g, sidecar, overwrite=False)
    assert listing(tmp_path) == ["a.bin", "a.json"]


# --------------------------------------------------------------------------- sidecar errors


def test_sidecar_byte_count_mismatch_names_both_numbers(tmp_path):
    sidecar = write_dump(tmp_path, dtype="<i2", offset=8)
    with open(tmp_path / "dump.bin", "ab") as fh:
        fh.write(b"\0\0")
    expected = 8 + 3 * 4 * 5 * 2
    with pytest.raises(FileFormatError, match=rf"holds {expected + 2} bytes but .*dump\.json describes {expected} "
                                              r"bytes \(8 header \+ 3 x 4 x 5 samples x 2 bytes\)"):
        import_raw(sidecar)


def test_sidecar_absurd_shape_fails_fast_without_allocating(tmp_path):
    sidecar = write_dump(tmp_path, shape={"scan": 10**6, "index": 10**3, "time": 10**3},  # 10**12 samples
                         coords={"scan_mm": {"start": 0, "step": 1}, "index_mm": {"start": 0, "step": 1},
                                 "time_us": {"start": 0, "step": 0.01}})
    tracemalloc.start()
    try:
        with pytest.raises(FileFormatError, match=r"holds 120 bytes but .* describes 2000000000000 bytes"):
            import_raw(sidecar)
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert peak < 5 * 2**20  # nothing was allocated from the claimed size (8 TB as float64 coordinates)


@pytest.mark.parametrize(
    ("data_file", "message"),
    [
        ("../outside.bin", r"`data_file` must stay inside the sidecar's folder, got '\.\./outside\.bin'"),
        ("sub/../../outside.bin", r"must stay inside the sidecar's folder"),
        ("/etc/hostname", r"`data_file` must be relative to the sidecar's folder, got the absolute path"),
        ("C:\\scans\\dump.bin", r"must be relative to the sidecar's folder"),
        ("..\\outside.bin", r"must stay inside the sidecar's folder"),
        ("", r"`data_file` must be a file name relative to the sidecar"),
    ],
)
def test_sidecar_data_file_must_stay_in_its_folder(tmp_path, data_file, message):
    inner = tmp_path / "inner"
    inner.mkdir()
    write_dump(tmp_path, name="outside")
    sidecar = write_dump(inner, data_file=data_file)
    with pytest.raises(FileFormatError, match=message):
        import_raw(sidecar)


def test_sidecar_data_file_in_a_subfolder_is_allowed(tmp_path):
    (tmp_path / "data").mkdir()
    write_dump(tmp_path / "data")
    sidecar = write_dump(tmp_path, data_file="data/dump.bin")
    assert import_raw(sidecar).sizes["time"] == 5


@pytest.mark.parametrize(
    ("dtype", "message"),
    [
        (">i2", r"`dtype` must be one of .*got '>i2' \(big-endian data is not supported"),
        ("int16", r"`dtype` must be one of '<i2', '<f4', .*got 'int16'"),
        ("<c8", r"got '<c8'"),
        (2, r"got 2"),
    ],
)
def test_sidecar_bad_dtype(tmp_path, dtype, message):
    sidecar = write_dump(tmp_path)
    doc = json.loads(sidecar.read_text())
    doc["dtype"] = dtype
    sidecar.write_text(json.dumps(doc))
    with pytest.raises(FileFormatError, match=message):
        import_raw(sidecar)


def test_sidecar_bad_json_gives_line_and_column(tmp_path):
    sidecar = tmp_path / "dump.json"
    sidecar.write_text('{\n  "format": "ndtmap raw sidecar",\n  "version": 1,\n}\n')
    # Python json module: a trailing comma is an error at the closing brace (line 4, column 1)
    with pytest.raises(FileFormatError, match=r"dump\.json is not valid JSON: .* at line 4, column 1"):
        import_raw(sidecar)
    sidecar.write_text('{"version": 1, "version": 2}')
    with pytest.raises(FileFormatError, match=r"the key 'version' appears twice"):
        import_raw(sidecar)
    sidecar.write_text("[1, 2]")
    with pytest.raises(FileFormatError, match=r"must be a JSON object"):
        import_raw(sidecar)
    sidecar.write_bytes(b"\xff\xfe\x00{")
    with pytest.raises(FileFormatError, match="is not UTF-8 text"):
        import_raw(sidecar)


def test_sidecar_lists_every_structural_problem(tmp_path):
    sidecar = write_dump(
        tmp_path,
        version=2,
        byte_ofset=16,  # a typo
        shape={"scan": 3, "index": 0, "time": 5.0},
        axis_order=["scan", "time"],
        signal="log",
        fsh_per_count=-1,
    )
    with pytest.raises(FileFormatError) as info:
        import_raw(sidecar)
    message = str(info.value)
    assert re.search(r"raw sidecar .*dump\.json has 6 problem\(s\): \(1\) ", message), message
    for part in (
        "unknown key(s) 'byte_ofset'",
        "`version` 2 is newer than this ndtmap reads (1)",
        "`shape` entries must be whole numbers > 0, got {'index': 0, 'time': 5.0}",
        "`axis_order` must list 'scan', 'index' and 'time' once each",
        "`signal` must be 'rf' or 'rectified', got 'log'",
        "`fsh_per_count` must be a number > 0 (%FSH per count), got -1",
    ):
        assert part in message


@pytest.mark.parametrize(
    ("changes", "message"),
    [
        ({"fsh_per_count": None}, r"`fsh_per_count` is required for integer data \(<i2\)"),
        ({"dtype": "<f4", "fsh_per_count": 0.5}, r"`fsh_per_count` applies to integer data only"),
        ({"byte_offset": -4}, r"`byte_offset` must be a whole number of bytes >= 0, got -4"),
        ({"coords": {"scan_mm": [0, 1], "index_mm": [0, 1, 2, 3], "time_us": {"start": 0, "step": 0.1}}},
         r"`coords.scan_mm` has 2 values but `shape.scan` is 3"),
        ({"coords": {"scan_mm": [0, 1, 2], "index_mm": [0, 1, 2, 3], "time_us": {"start": 0, "step": 0}}},
         r"`coords.time_us.step` must be greater than 0, got 0"),
        ({"coords": {"scan": [0, 1, 2]}}, r"`coords` must be an object with the keys 'scan_mm', 'index_mm'"),
        ({"missing": [[3, 0]]}, r"`missing` names a position outside `shape`"),
        ({"missing": [[0, True]]}, r"`missing` must be a list of \[scan_position, index_position\] pairs"),
        ({"attrs": {"velocity_m_s": 5920, "flag": True}}, r"`attrs.flag` is a boolean"),
        ({"format": "raw"}, r"`format` must be 'ndtmap raw sidecar', got 'raw'"),
        ({"signal": None}, r"`signal` must be 'rf' or 'rectified', got None"),
    ],
)
def test_sidecar_schema_errors(tmp_path, changes, message):
    sidecar = write_dump(tmp_path)
    doc = json.loads(sidecar.read_text())
    for key, value in changes.items():
        if value is None and key == "fsh_per_count":
            doc.pop(key)
        else:
            doc[key] = value
    sidecar.write_text(json.dumps(doc))
    with pytest.raises(FileFormatError, match=message):
        import_raw(sidecar)


def test_sidecar_missing_keys_and_data_file(tmp_path):
    sidecar = tmp_path / "dump.json"
    sidecar.write_text(json.dumps({"format": RAW_SIDECAR_FORMAT, "version": 1}))
    with pytest.raises(FileFormatError, match=r"has 7 problem\(s\): \(1\) required key `data_file` is missing"):
        import_raw(sidecar)
    sidecar = write_dump(tmp_path)
    (tmp_path / "dump.bin").unlink()
    with pytest.raises(FileFormatError, match=r"the data file .*dump\.bin named by .*dump\.json does not exist"):
        import_raw(sidecar)
    with pytest.raises(FileFormatError, match=r"no raw sidecar at .*none\.json"):
        import_raw(tmp_path / "none.json")


def test_sidecar_too_large_is_not_parsed(tmp_path, monkeypatch):
    sidecar = write_dump(tmp_path)
    monkeypatch.setattr(nio, "_SIDECAR_MAX_BYTES", 100)
    with pytest.raises(FileFormatError, match=r"too large for a raw sidecar .* is it the data file"):
        import_raw(sidecar)


def test_sidecar_without_required_grid_attributes_is_a_grid_error(tmp_path):
    sidecar = write_dump(tmp_path, attrs={"part_id": "KFP-3001"})
    with pytest.raises(GridError, match=r"invalid scan grid in .*dump\.json, 4 problems: .*`velocity_m_s`"):
        import_raw(sidecar)


# --------------------------------------------------------------------------- odds and ends


def test_not_enough_memory_suggests_lazy(tmp_path, monkeypatch):
    path = save_grid(plate(), tmp_path / "KFP.nc")

    def no_memory(self, **kwargs):
        raise MemoryError

    monkeypatch.setattr(xr.Dataset, "load", no_memory)
    with pytest.raises(FileFormatError, match=r"not enough memory to load .*KFP\.nc .*open it with lazy=True"):
        open_grid(path, lazy=False)


def test_zarr_v2_store_is_read(tmp_path):
    g = plate()
    g.to_zarr(tmp_path / "old.zarr", zarr_format=2, consolidated=True)
    back = open_grid(tmp_path / "old.zarr")
    xr.testing.assert_identical(back["ascan"], g["ascan"])
    assert back["missing"].dtype == bool


def test_open_argument_types(tmp_path):
    with pytest.raises(TypeError, match=r"`path` must be a non-empty str or os.PathLike, got 42"):
        open_grid(42)
    with pytest.raises(TypeError, match=r"`path` must be a non-empty str or os.PathLike, got ''"):
        open_grid("")
    path = save_grid(plate(), tmp_path / "KFP.nc")
    with pytest.raises(TypeError, match=r"`lazy` must be True, False or None, got 'yes'"):
        open_grid(path, lazy="yes")
    with pytest.raises(TypeError, match=r"`validate` must be True or False, got 1"):
        open_grid(path, validate=1)


def test_raw_import_lazy_through_open_grid_with_chunks(tmp_path):
    sidecar = write_dump(tmp_path, order=("time", "index", "scan"), dtype="<f4")
    g = open_grid(sidecar, chunks={"scan": 2})
    assert g["ascan"].chunks == ((2, 1), (4,), (5,))
    np.testing.assert_array_equal(g["ascan"].values, REF.astype(np.float32))


def test_package_exports_the_io_functions():
    import ndtmap

    assert (ndtmap.open_grid, ndtmap.save_grid, ndtmap.import_raw, ndtmap.export_raw) == (
        open_grid, save_grid, import_raw, export_raw)
