"""Tests of ndtmap.io.containers: NetCDF-4 and Zarr v3 round trips, save checks, bad files, files from other programs.

External references: HDF5 file signature and dimension scales: HDF Group, HDF5 File Format
Specification v3 and "HDF5 Dimension Scale Specification"; NetCDF-4 on HDF5: Unidata NetCDF Users
Guide, "NetCDF-4 Format"; Zarr v3: Zarr core specification v3.0.
"""

from __future__ import annotations

import json
import re
from pathlib import Path

import dask.array as da
import h5py
import numpy as np
import pytest
import xarray as xr
from helpers.plate_files import STEEL_L_M_S, assert_same_grid, file_digest, listing, plate

from ndtmap.errors import FileFormatError, GridError, ParameterError
from ndtmap.grid import ascan_in_fsh, grid_problems, missing_ascans, read_provenance, with_step
from ndtmap.io import export_raw, import_raw, open_grid, save_grid

DOCS = Path(__file__).resolve().parents[2] / "docs" / "grid-format.md"


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


# --------------------------------------------------------------------------- save checks


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
    path = save_grid(plate().assign_attrs(grid_format="ndtmap-grid 3"), tmp_path / "KFP.nc")
    with pytest.raises(FileFormatError, match="uses grid format version 3, newer than this ndtmap reads"):
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



def test_package_exports_the_io_functions():
    import ndtmap

    assert (ndtmap.open_grid, ndtmap.save_grid, ndtmap.import_raw, ndtmap.export_raw) == (
        open_grid, save_grid, import_raw, export_raw)
