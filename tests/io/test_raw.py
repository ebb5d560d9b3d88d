"""Tests of ndtmap.io.raw and ndtmap.io.sidecar: raw dumps in every axis order and sample type, and sidecar errors.

External references: the byte layout of raw dumps follows NumPy's C (row-major) order and
``numpy.transpose`` (NumPy reference, "ndarray memory layout").
"""

from __future__ import annotations

import json
import re
import tracemalloc
from itertools import permutations
from pathlib import Path

import dask.array as da
import numpy as np
import pytest
from helpers.plate_files import file_digest, listing, plate

import ndtmap.io.sidecar as sidecar_module
from ndtmap.errors import FileFormatError, GridError, ParameterError
from ndtmap.grid import DIMS, missing_ascans, read_provenance
from ndtmap.io import RAW_SIDECAR_FORMAT, export_raw, import_raw, open_grid

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
    monkeypatch.setattr(sidecar_module, "_SIDECAR_MAX_BYTES", 100)
    with pytest.raises(FileFormatError, match=r"too large for a raw sidecar .* is it the data file"):
        import_raw(sidecar)


def test_sidecar_without_required_grid_attributes_is_a_grid_error(tmp_path):
    sidecar = write_dump(tmp_path, attrs={"part_id": "KFP-3001"})
    with pytest.raises(GridError, match=r"invalid scan grid in .*dump\.json, 4 problems: .*`velocity_m_s`"):
        import_raw(sidecar)


def test_raw_import_lazy_through_open_grid_with_chunks(tmp_path):
    sidecar = write_dump(tmp_path, order=("time", "index", "scan"), dtype="<f4")
    g = open_grid(sidecar, chunks={"scan": 2})
    assert g["ascan"].chunks == ((2, 1), (4,), (5,))
    np.testing.assert_array_equal(g["ascan"].values, REF.astype(np.float32))

