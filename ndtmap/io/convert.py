"""Converting a scan grid of any size into a chunked Zarr v3 store, block by block.

:func:`convert_to_zarr` opens the source lazily (a raw dump through a
memory map, a NetCDF-4 file or another Zarr store through dask), rechunks
it so that every chunk holds whole A-scans (the full ``time`` axis) of a
few scan lines, and writes the chunks one after the other, so the memory it
needs is a few chunks whatever the size of the grid. The store is written
under a temporary name in the target folder and renamed into place when it
is complete (as :func:`ndtmap.io.save_grid` does; a failed conversion
leaves no partial store and any old store unchanged).

The chunks are computed by dask's local threads, or, inside
:func:`ndtmap.cluster.use_scheduler`, by the workers of a distributed
cluster (which must see the source and the target folder under the same
paths).
"""

from __future__ import annotations

import os
import sys
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr

from ndtmap.errors import FileFormatError, ParameterError, ParameterTypeError
from ndtmap.grid.provenance import with_step
from ndtmap.grid.schema import DIMS, validate_grid
from ndtmap.io.atomic import check_target, refuse_source, write_atomically
from ndtmap.io.chunking import zarr_chunks
from ndtmap.io.containers import open_grid
from ndtmap.io.paths import as_path

__all__ = ["convert_to_zarr", "write_zarr"]

def _active_client() -> Any:
    """The distributed client dask would use now, or None (distributed is not imported just to ask)."""
    if "distributed" not in sys.modules:
        return None
    from distributed import default_client

    try:
        return default_client()
    except ValueError:
        return None


def _progress_bar(total: int | None, enabled: bool, desc: str) -> Any:
    from tqdm.auto import tqdm

    return tqdm(total=total, disable=not enabled, file=sys.stderr, desc=desc, unit="chunk", leave=False)


def _check_options(dst: Path, *, chunk_scan: Any, compress: Any, overwrite: Any, progress: Any) -> None:
    """The checks common to :func:`convert_to_zarr` and :func:`write_zarr`."""
    for name, flag in (("compress", compress), ("overwrite", overwrite), ("progress", progress)):
        if not isinstance(flag, bool):
            raise ParameterTypeError(f"`{name}` must be True or False, got {flag!r}")
    if chunk_scan is not None and (isinstance(chunk_scan, bool) or not isinstance(chunk_scan, int | np.integer)
                                   or chunk_scan < 1):
        raise ParameterError(f"`chunk_scan` must be a whole number of scan lines >= 1, got {chunk_scan!r}")
    if dst.suffix.lower() != ".zarr":
        raise ParameterError(f"`target` must be a Zarr store named *.zarr, got {dst.name!r}")


def convert_to_zarr(
    source: str | os.PathLike,
    target: str | os.PathLike,
    *,
    chunk_scan: int | None = None,
    compress: bool = True,
    overwrite: bool = False,
    progress: bool = False,
) -> Path:
    """Convert a raw dump (JSON sidecar), a NetCDF-4 file or a Zarr store into a chunked Zarr v3 store.

    The source is never loaded whole: chunks are read, encoded and written
    a few at a time (on dask's threads, or on the workers of the cluster of
    an enclosing :func:`ndtmap.cluster.use_scheduler`).

    Parameters
    ----------
    source : path-like
        A grid :func:`ndtmap.io.open_grid` reads (``.json`` sidecar of a raw
        dump, ``.nc``, ``.zarr``).
    target : path-like
        The new store, a folder whose name ends in ``.zarr``.
    chunk_scan : int, optional
        Scan lines per chunk (every chunk holds whole A-scans and, when they
        fit, whole index lines); default about 16 MiB per chunk
        (:func:`ndtmap.io.zarr_chunks`).
    compress : bool, default True
        Lossless Blosc-zstd (level 1) with byte shuffle and a CRC32C
        checksum per chunk; False stores plain chunks (faster to write and
        read when the disk is fast).
    overwrite : bool, default False
        Replace an existing store of that name (atomically).
    progress : bool, default False
        Show a progress bar (tqdm) on stderr.

    Returns
    -------
    pathlib.Path
        `target`.

    Raises
    ------
    FileFormatError
        The source cannot be read, the target exists (without `overwrite`),
        is the source, or cannot be written (nothing is left behind).
    GridError
        The source is not a valid scan grid.
    ParameterError
        A bad `chunk_scan` or a target name without ``.zarr``.

    Examples
    --------
    >>> import pathlib, tempfile
    >>> import numpy as np
    >>> from ndtmap.grid.schema import make_grid
    >>> from ndtmap.io import export_raw, open_grid
    >>> g = make_grid(np.ones((6, 4, 8), np.int16), scan_mm=np.arange(6.0), index_mm=np.arange(4.0),
    ...               time_us=np.arange(8) * 0.02, velocity_m_s=5920, probe_frequency_mhz=5,
    ...               probe_diameter_mm=10, fsh_per_count=100 / 32767)
    >>> with tempfile.TemporaryDirectory() as tmp:
    ...     raw = export_raw(g, pathlib.Path(tmp) / "KFP-PL-2041.json")
    ...     store = convert_to_zarr(raw, pathlib.Path(tmp) / "KFP-PL-2041.zarr", chunk_scan=4)
    ...     back = open_grid(store, lazy=True)
    ...     back.ascan.encoding["chunks"], bool((back.ascan == g.ascan).all())
    ((4, 4, 8), True)
    """
    src = as_path("source", source)
    dst = as_path("target", target)
    _check_options(dst, chunk_scan=chunk_scan, compress=compress, overwrite=overwrite, progress=progress)
    if dst.exists() and src.exists() and dst.resolve() == src.resolve():
        raise FileFormatError(f"refusing to convert {src} onto itself; choose another `target`")
    peek = open_grid(src, lazy=True)
    shape = tuple(int(peek.sizes[d]) for d in DIMS)
    itemsize = peek["ascan"].dtype.itemsize
    peek.close()
    c_scan, c_index, _ = zarr_chunks(shape, itemsize, chunk_scan=None if chunk_scan is None else int(chunk_scan))
    grid = open_grid(src, chunks={"scan": c_scan, "index": c_index}, lazy=True)
    try:
        return write_zarr(grid, dst, chunk_scan=chunk_scan, compress=compress, overwrite=overwrite,
                          progress=progress, step=("convert", {"source": src.name}))
    finally:
        grid.close()


def write_zarr(
    grid: xr.Dataset,
    target: str | os.PathLike,
    *,
    chunk_scan: int | None = None,
    compress: bool = True,
    overwrite: bool = False,
    progress: bool = False,
    step: tuple[str, dict[str, Any]] | None = None,
) -> Path:
    """Write a scan grid (in memory or dask-backed) to a Zarr v3 store in chunks of whole A-scans, atomically.

    The chunks of the store are the dask chunks of the written grid:
    ``(chunk_scan, index, time)`` (:func:`ndtmap.io.zarr_chunks`), so every chunk is
    computed, encoded and written once, a few at a time; a dask-backed grid
    of any size is written with the memory of a few chunks. Like
    :func:`convert_to_zarr` (whose writer this is), the chunks are computed
    on dask's local threads or on the cluster of an enclosing
    :func:`ndtmap.cluster.use_scheduler`.

    Parameters
    ----------
    grid : xarray.Dataset
        A valid scan grid.
    target, chunk_scan, compress, overwrite, progress
        As for :func:`convert_to_zarr`.
    step : (str, dict), optional
        Name and parameters of the provenance step to record (default
        ``write_zarr``).

    Returns
    -------
    pathlib.Path
        `target`.
    """
    dst = as_path("target", target)
    _check_options(dst, chunk_scan=chunk_scan, compress=compress, overwrite=overwrite, progress=progress)
    validate_grid(grid, check_values=False)
    shape = tuple(int(grid.sizes[d]) for d in DIMS)
    c_scan, c_index, _ = zarr_chunks(shape, grid["ascan"].dtype.itemsize,
                                     chunk_scan=None if chunk_scan is None else int(chunk_scan))
    name, params = step or ("write_zarr", {})
    out = grid.chunk({"scan": c_scan, "index": c_index, "time": -1}).drop_encoding()
    out = with_step(out, name, {**params, "chunks": [c_scan, c_index, shape[2]], "compress": compress})
    refuse_source(grid, dst)
    check_target(dst, overwrite=overwrite, is_dir=True)
    encoding = _encoding(out, (c_scan, c_index), compress)

    def write(temp: Path) -> None:
        delayed = out.to_zarr(temp, mode="w-", zarr_format=3, consolidated=False, encoding=encoding,
                              compute=False)
        client = _active_client()
        if client is None:
            from tqdm.dask import TqdmCallback

            with TqdmCallback(disable=not progress, file=sys.stderr, desc=f"writing {dst.name}", leave=False):
                delayed.compute()
            return
        from distributed import as_completed, futures_of, wait

        futures = futures_of(client.persist(delayed))
        failed = None
        with _progress_bar(len(futures), progress, f"writing {dst.name} on the cluster") as bar:
            for fut in as_completed(futures):
                bar.update(1)
                if fut.status == "error" and failed is None:
                    failed = fut
        wait(futures)  # every task has ended before the temporary store can be removed
        if failed is not None:
            failed.result()

    write_atomically(dst, write, is_dir=True, lazy=True)
    return dst


def _encoding(grid: xr.Dataset, storage: tuple[int, int], compress: bool) -> dict[str, dict[str, Any]]:
    from zarr.codecs import BloscCodec, Crc32cCodec

    # zstd level 1: about three times faster to write than level 3 for a few per cent more bytes on noisy
    # A-scans (docs/performance.md)
    compressors = (BloscCodec(cname="zstd", clevel=1, shuffle="shuffle"), Crc32cCodec()) if compress else None
    sizes = {"scan": storage[0], "index": storage[1]}
    out: dict[str, dict[str, Any]] = {}
    for name, var in grid.data_vars.items():
        out[str(name)] = {"compressors": compressors}
        if var.ndim > 0 and var.size > 0:
            out[str(name)]["chunks"] = tuple(min(sizes.get(str(d), n), n) for d, n in zip(var.dims, var.shape,
                                                                                          strict=True))
    return out
