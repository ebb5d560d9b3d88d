"""Tests of ndtmap.io.chunking: when grids are opened lazily; chunk sizes on disk, in dask and in converted stores.

The total memory is checked against /proc/meminfo (Linux proc(5)).
"""

from __future__ import annotations

import dask.array as da
import numpy as np
import pytest
from helpers.plate_files import plate

import ndtmap.io.chunking as chunking
from ndtmap.errors import ParameterError
from ndtmap.grid import grid_problems
from ndtmap.io import open_grid, save_grid, zarr_chunks


def test_auto_lazy_when_grid_is_large_for_the_memory(tmp_path, monkeypatch):
    g = plate()
    path = save_grid(g, tmp_path / "KFP.nc")
    nbytes = g["ascan"].nbytes
    # the default share is 25 % of the memory
    monkeypatch.setattr(chunking, "total_memory_bytes", lambda: 4 * nbytes + 4)
    small = open_grid(path)
    assert isinstance(small["ascan"].data, np.ndarray)
    monkeypatch.setattr(chunking, "total_memory_bytes", lambda: 4 * nbytes - 4)
    big = open_grid(path)
    try:
        assert isinstance(big["ascan"].data, da.Array)
        assert grid_problems(big) == []
    finally:
        big.close()


def test_total_memory_is_read():
    total = chunking.total_memory_bytes()
    with open("/proc/meminfo") as fh:  # Linux proc(5): MemTotal in kB
        meminfo = int(next(line for line in fh if line.startswith("MemTotal:")).split()[1]) * 1024
    assert 0 < total <= meminfo * 1.01


def test_default_chunks_hold_whole_ascans_and_follow_storage_chunks():
    # ~64 MiB dask chunks: 2000 samples float32 = 8000 B per A-scan -> 8388 A-scans per chunk
    c_scan, c_index = chunking.dask_chunks((1000, 600, 2000), 4)
    assert (c_scan, c_index) == (8388 // 600, 600)  # whole index lines first
    for shape, storage in [((1000, 600, 2000), (16, 32)), ((1000, 6000, 2000), (16, 32)), ((50, 3, 100), (7, 5))]:
        c_scan, c_index = chunking.dask_chunks(shape, 4, storage=storage)
        assert c_scan * c_index * shape[2] * 4 <= 64 * 2**20 or (c_scan, c_index) == storage
        # whole multiples of the chunks on disk (or the whole axis), so no stored chunk is read twice
        assert c_scan % storage[0] == 0 or c_scan == shape[0]
        assert c_index % storage[1] == 0 or c_index == shape[1]
    s_scan, s_index = chunking.storage_chunks((1000, 600, 2000), 4)
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


def test_chunk_sizes():
    # whole A-scans in every chunk; about the requested bytes
    assert zarr_chunks((500, 500, 1000), 2) == (16, 500, 1000)
    assert zarr_chunks((500, 500, 1000), 2, chunk_scan=16) == (16, 500, 1000)
    c_scan, c_index, c_time = zarr_chunks((10, 100_000, 4000), 4)  # index lines of 1.6 GB: split along index
    assert c_time == 4000 and c_scan == 1 and c_index * 4000 * 4 <= 16 * 2**20
