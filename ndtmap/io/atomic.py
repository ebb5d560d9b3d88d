"""Atomic, durable writes: a temporary name in the target folder, fsync, then a rename.

Every file ndtmap writes (grids, maps, raw dumps and their sidecars, reports,
figures, procedure files) goes through :func:`write_atomically`: the content
is written under a hidden temporary name next to the final one, flushed to
disk, and moved into place by one rename, so an interrupted write never
leaves a half-written file under the final name and a failed write leaves
any previous file unchanged. A Zarr store (a folder) replacing an older one
is swapped in by two renames.

What is flushed is what was written (the file, or the files and folders of
the store) and then the entry of the target folder: the cost of a save does
not depend on what else is in that folder.

The module also checks targets before writing (:func:`check_target`) and
refuses to overwrite a file a dataset was read from (:func:`refuse_source`):
a lazy dataset may still be reading from it.
"""

from __future__ import annotations

import os
import shutil
import uuid
from collections.abc import Callable, Iterator
from concurrent.futures import ThreadPoolExecutor
from contextlib import contextmanager
from pathlib import Path

import xarray as xr

from ndtmap.errors import FileFormatError, NdtmapError
from ndtmap.io.paths import as_path, failure_reason, is_zarr_store

__all__ = [
    "atomic_write_bytes",
    "atomic_write_text",
    "write_atomically",
    "check_target",
    "record_source",
    "recorded_sources",
    "refuse_source",
    "fsync_path",
    "fsync_written",
    "temporary_name",
]


# --------------------------------------------------------------------------- temporary names and fsync


def temporary_name(final: Path, kind: str) -> Path:
    """A hidden, unique name next to `final` (same folder, hence same file system) for a write in progress."""
    return final.parent / f".{final.name}.{uuid.uuid4().hex[:12]}.{kind}"


def fsync_path(path: Path) -> None:
    """Flush one file, or one folder's list of entries, to disk.

    Best effort: skipped where the OS refuses to open or flush it (a folder
    cannot be opened on Windows, some file systems do not flush folders).
    """
    try:
        fd = os.open(path, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


def fsync_written(path: Path) -> None:
    """Flush what a writer produced: a file, or every file and folder of a Zarr store, nothing outside it.

    Folders are flushed after the entries they hold.
    """
    if path.is_dir() and not path.is_symlink():
        for root, _dirs, files in os.walk(path, topdown=False):
            for name in files:
                fsync_path(Path(root) / name)
            fsync_path(Path(root))
        return
    fsync_path(path)


def _remove_quietly(path: Path) -> None:
    try:
        if path.is_dir() and not path.is_symlink():
            shutil.rmtree(path, ignore_errors=True)
        else:
            path.unlink(missing_ok=True)
    except OSError:
        pass


# --------------------------------------------------------------------------- targets and sources


def check_target(path: Path, *, overwrite: bool, is_dir: bool) -> None:
    """Refuse a target whose folder is missing, that exists without `overwrite`, or that is of the other kind.

    Parameters
    ----------
    path : pathlib.Path
        The final name.
    overwrite : bool
        Whether an existing file (or store) of that name may be replaced.
    is_dir : bool
        True when a Zarr store (a folder) will be written: only another
        Zarr store is replaced, never an ordinary folder.

    Raises
    ------
    FileFormatError
        With the reason and what to do instead.
    """
    if not path.parent.is_dir():
        raise FileFormatError(f"cannot write {path}: the folder {path.parent} does not exist")
    if not (path.exists() or path.is_symlink()):
        return
    if not overwrite:
        raise FileFormatError(f"{path} already exists; pass overwrite=True or choose another name")
    if is_dir and not is_zarr_store(path):
        raise FileFormatError(f"{path} exists and is not a Zarr store; refusing to replace it, remove it yourself")
    if not is_dir and path.is_dir():
        raise FileFormatError(f"{path} exists and is a folder; refusing to replace it with a file")


def record_source(ds: xr.Dataset, source: Path, data_file: Path | None = None) -> None:
    """Note in the encodings of `ds` (in place) the file it was read from, so that it is never overwritten.

    `data_file` is where the A-scans live when that is another file (a raw
    dump read through its sidecar).
    """
    ds.encoding["source"] = str(source)
    if "ascan" in ds.variables:
        ds.variables["ascan"].encoding["source"] = str(data_file or source)


def recorded_sources(ds: xr.Dataset) -> list[Path]:
    """Every file the dataset says it was read from (resolved paths)."""
    found = [ds.encoding.get("source")]
    found += [v.encoding.get("source") for v in ds.variables.values()]
    out = []
    for item in found:
        if isinstance(item, str | os.PathLike) and os.fspath(item):
            out.append(Path(os.fspath(item)).resolve())
    return out


def refuse_source(ds: xr.Dataset, *targets: Path) -> None:
    """Raise when one of `targets` is a file `ds` was read from (and a lazy `ds` may still read from).

    Raises
    ------
    FileFormatError
        Naming the target; save to another path.
    """
    sources = set(recorded_sources(ds))
    for target in targets:
        if target.resolve() in sources:
            raise FileFormatError(
                f"refusing to overwrite {target}: the dataset was read from it (and may still be reading from "
                "it); save to another path"
            )


# --------------------------------------------------------------------------- the write itself


@contextmanager
def _local_dask_threads(active: bool) -> Iterator[None]:
    """Compute dask blocks in a thread pool that is drained before the block exits.

    When one block fails, dask re-raises at once while other threads may still be
    writing; draining the pool first means no late block can recreate a temporary
    file after it was removed.
    """
    if not active:
        yield
        return
    import dask  # optional heavy dependency, only for dask-backed writes

    pool = ThreadPoolExecutor(max_workers=os.cpu_count() or 1)
    try:
        with dask.config.set(scheduler=pool):
            yield
    finally:
        pool.shutdown(wait=True, cancel_futures=True)


def write_atomically(final: Path, write: Callable[[Path], None], *, is_dir: bool, lazy: bool = False) -> None:
    """Run ``write(temp)`` and move the result to `final`; clean up on any failure.

    Parameters
    ----------
    final : pathlib.Path
        The final name; its folder must exist (see :func:`check_target`).
    write : callable
        Writes the whole content to the temporary path it is given (a file,
        or a Zarr store when `is_dir`).
    is_dir : bool
        True when `write` makes a folder (a Zarr store): an existing store
        under `final` is swapped out by two renames and then removed.
    lazy : bool, default False
        True when `write` computes dask blocks: they are computed in a local
        thread pool that is drained before any clean-up.

    Raises
    ------
    FileFormatError
        When the write fails; any previous file under `final` is unchanged
        and no temporary file remains. :class:`~ndtmap.errors.NdtmapError`
        subclasses raised by `write` and non-``Exception`` interrupts pass
        through unchanged (after the same clean-up).
    """
    temp = temporary_name(final, "tmp")
    try:
        with _local_dask_threads(lazy):
            write(temp)
        fsync_written(temp)
        if is_dir and final.exists():
            old = temporary_name(final, "old")
            os.rename(final, old)
            try:
                os.rename(temp, final)
            except BaseException:
                os.rename(old, final)
                raise
            _remove_quietly(old)
        else:
            os.replace(temp, final)
        fsync_path(final.parent)  # the folder's entry for the new name; not what else is in the folder
    except BaseException as exc:
        _remove_quietly(temp)
        if isinstance(exc, NdtmapError) or not isinstance(exc, Exception):
            raise
        raise FileFormatError(
            f"could not write {final} ({failure_reason(exc)}); any previous file under that name is unchanged"
        ) from None


def atomic_write_bytes(path: str | os.PathLike, data: bytes) -> Path:
    """Write `data` to `path` atomically: a temporary file in the same folder, then a rename.

    Parameters
    ----------
    path : path-like
        Final file name; its folder must exist.
    data : bytes
        The content.

    Returns
    -------
    pathlib.Path
        `path`.

    Raises
    ------
    FileFormatError
        When the file cannot be written; a previous file under that name is
        left unchanged and no temporary file remains.

    Examples
    --------
    >>> import pathlib, tempfile
    >>> with tempfile.TemporaryDirectory() as tmp:
    ...     written = atomic_write_bytes(pathlib.Path(tmp) / "KFP-0004.bin", b"\\x00\\x01")
    ...     written.read_bytes(), sorted(p.name for p in written.parent.iterdir())
    (b'\\x00\\x01', ['KFP-0004.bin'])
    """
    final = as_path("path", path)
    if not final.parent.is_dir():
        raise FileFormatError(f"cannot write {final}: the folder {final.parent} does not exist")

    def write(temp: Path) -> None:
        with open(temp, "wb") as fh:
            fh.write(data)

    write_atomically(final, write, is_dir=False)
    return final


def atomic_write_text(path: str | os.PathLike, text: str) -> Path:
    """Write UTF-8 `text` to `path` atomically (see :func:`atomic_write_bytes`).

    Examples
    --------
    >>> import pathlib, tempfile
    >>> with tempfile.TemporaryDirectory() as tmp:
    ...     atomic_write_text(pathlib.Path(tmp) / "notes.txt", "wall 12.0 mm").read_text(encoding="utf-8")
    'wall 12.0 mm'
    """
    return atomic_write_bytes(path, text.encode("utf-8"))
