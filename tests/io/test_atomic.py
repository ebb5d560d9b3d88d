"""Tests of ndtmap.io.atomic: writes that fail leave the previous file and no temporary, sources are never
overwritten, targets are checked, and a save flushes only what it wrote (not the rest of the folder).
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
import pytest
import xarray as xr
from helpers.plate_files import assert_same_grid, file_digest, listing, plate

import ndtmap.io.atomic as atomic
from ndtmap.errors import FileFormatError
from ndtmap.grid import with_step
from ndtmap.io import atomic_write_bytes, atomic_write_text, export_raw, open_grid, save_grid, save_map

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

    monkeypatch.setattr(atomic.os, "rename", rename)
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

    monkeypatch.setattr(atomic.os, "replace", replace)
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




# --------------------------------------------------------------------------- what a save flushes


def crowded_folder(folder: Path, n_files: int = 300) -> set[tuple[int, int]]:
    """Fill `folder` with unrelated small files in subfolders; return (device, inode) of every entry below it."""
    for i in range(n_files):
        sub = folder / f"plate-{i // 30:02d}"
        sub.mkdir(exist_ok=True)
        (sub / f"reading-{i:04d}.txt").write_text(f"{i}\n")
    (folder / "notes.txt").write_text("unrelated")
    return {(s.st_dev, s.st_ino) for s in (p.stat() for p in folder.rglob("*"))}


def synced_during(action) -> list[tuple[int, int]]:
    """Run `action()`; return (device, inode) of every descriptor given to os.fsync meanwhile."""
    seen = []
    real_fsync = os.fsync

    def recording_fsync(fd):
        st = os.fstat(fd)
        seen.append((st.st_dev, st.st_ino))
        return real_fsync(fd)

    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(atomic.os, "fsync", recording_fsync)
        action()
    return seen


def identity(path: Path) -> tuple[int, int]:
    st = path.stat()
    return st.st_dev, st.st_ino


def thickness_map() -> xr.Dataset:
    """A small wall-thickness map as written by `ndtmap map` (about 60 kB of float64)."""
    rng = np.random.default_rng(3)
    values = 12.0 + rng.normal(0.0, 0.05, (80, 90))
    return xr.Dataset({"thickness": (("scan", "index"), values, {"units": "mm"})},
                      coords={"scan": np.arange(80) * 0.5, "index": np.arange(90) * 0.5},
                      attrs={"part_id": "KFP-2207-A"})


SAVES = {
    "save_map": lambda folder: save_map(thickness_map(), folder / "KFP-2207-A_thickness.nc"),
    "save_grid netcdf": lambda folder: save_grid(plate(), folder / "KFP-2207-A.nc"),
    "save_grid zarr": lambda folder: save_grid(plate("int16"), folder / "KFP-2207-A.zarr"),
    "export_raw": lambda folder: export_raw(plate(), folder / "KFP-2207-A.json"),
    "atomic_write_text": lambda folder: atomic_write_text(folder / "KFP-2207-A.txt", "wall 12.0 mm\n"),
}


@pytest.mark.parametrize("kind", list(SAVES))
def test_a_save_flushes_what_it_wrote_and_the_folder_entry_not_the_rest_of_the_folder(tmp_path, kind):
    empty, crowded = tmp_path / "empty", tmp_path / "crowded"
    empty.mkdir()
    crowded.mkdir()
    unrelated = crowded_folder(crowded)
    synced_empty = synced_during(lambda: SAVES[kind](empty))
    synced_crowded = synced_during(lambda: SAVES[kind](crowded))
    assert not unrelated & set(synced_crowded), "files that were already in the folder were flushed"
    assert len(synced_crowded) == len(synced_empty)  # the cost does not depend on what else is there
    written = [p for p in crowded.iterdir() if p.name.startswith("KFP-2207-A")]
    assert written
    for top in written:  # the renamed files keep the inodes that were flushed under the temporary name
        entries = [top, *top.rglob("*")] if top.is_dir() else [top]
        assert all(identity(p) in synced_crowded for p in entries), top
    assert identity(crowded) in synced_crowded  # the folder's entry for the new name


def test_atomic_write_bytes_replaces_and_refuses_a_missing_folder(tmp_path):
    path = atomic_write_bytes(tmp_path / "KFP.bin", b"first")
    atomic_write_bytes(path, b"second")
    assert path.read_bytes() == b"second" and listing(tmp_path) == ["KFP.bin"]
    with pytest.raises(FileFormatError, match=r"cannot write .*KFP\.bin: the folder .*absent does not exist"):
        atomic_write_bytes(tmp_path / "absent" / "KFP.bin", b"x")
