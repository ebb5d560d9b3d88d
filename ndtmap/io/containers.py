"""NetCDF-4/HDF5 files and Zarr v3 stores: opening scan grids, saving grids and result maps.

:func:`open_grid` reads a ``.nc``/``.nc4``/``.h5``/``.hdf5`` file (with
h5netcdf), a Zarr store (a folder) or, through :func:`ndtmap.io.import_raw`,
the JSON sidecar of a raw dump. Files are opened read-only; nothing read is
executed (no pickle, no eval). Grids larger than a share of the memory are
opened lazily as dask arrays whose chunks hold whole A-scans
(:mod:`ndtmap.io.chunking`).

:func:`save_grid` writes a grid to either container, :func:`save_map` a
result dataset (map or section) to NetCDF; both write atomically
(:mod:`ndtmap.io.atomic`) and never overwrite the file the dataset was
read from. The layout is documented in ``docs/grid-format.md``.
"""

from __future__ import annotations

import gc
import os
import sys
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import xarray as xr

from ndtmap.errors import FileFormatError, ParameterError, ParameterTypeError
from ndtmap.grid.schema import DIMS, validate_grid, with_grid_format
from ndtmap.io.atomic import check_target, refuse_source, write_atomically
from ndtmap.io.attributes import check_netcdf_attrs
from ndtmap.io.chunking import (
    STORAGE_CHUNK_BYTES,
    chunk_request,
    dask_chunks,
    is_lazy,
    storage_chunks,
    want_lazy,
)
from ndtmap.io.paths import as_path, failure_reason, is_zarr_store
from ndtmap.io.raw import import_raw
from ndtmap.io.reading import finish_read
from ndtmap.io.sidecar import SIDECAR_SUFFIX

__all__ = ["open_grid", "save_grid", "save_map", "NETCDF_SUFFIXES", "ZARR_SUFFIX"]

#: Suffixes of NetCDF-4/HDF5 files read and written as scan grids.
NETCDF_SUFFIXES = (".nc", ".nc4", ".h5", ".hdf5")
#: Usual suffix of a Zarr store (a folder).
ZARR_SUFFIX = ".zarr"
_NETCDF_COMPRESSION = {"zlib": True, "complevel": 1, "shuffle": True, "fletcher32": True}


# --------------------------------------------------------------------------- reading


def _open_dataset_quietly(path: Path, **kwargs: Any) -> tuple[xr.Dataset | None, str | None]:
    """``xr.open_dataset`` that returns (dataset, None) or (None, reason) instead of raising.

    When h5netcdf fails to open a damaged file, the half-constructed file object raises from its
    destructor later ("Exception ignored in ... File.close"), which would print a traceback into the
    user's terminal. After a failure the garbage is collected here, with those clean-up errors of
    h5netcdf/h5py objects silenced; any other unraisable exception passes through.
    """
    previous = sys.unraisablehook

    def hook(unraisable: Any) -> None:
        obj = getattr(unraisable, "object", None)
        owner = getattr(obj, "__module__", "") or ""
        qual = getattr(obj, "__qualname__", "") or ""
        if owner.startswith(("h5netcdf", "h5py")) or qual.startswith("File."):
            return
        previous(unraisable)

    # the hook must be in place before the failure: the half-built object may be freed as soon as the
    # exception is dropped, or only by the collector
    sys.unraisablehook = hook
    try:
        try:
            return xr.open_dataset(path, **kwargs), None
        except Exception as exc:  # noqa: BLE001 - every reader failure becomes one reason string
            reason = failure_reason(exc)
        gc.collect()
    finally:
        sys.unraisablehook = previous
    return None, reason


def _open_container(path: Path, engine: str, *, chunks: Mapping[str, int] | None, lazy: bool | None) -> tuple:
    kwargs: dict[str, Any] = {"engine": engine, "decode_timedelta": False}
    if engine == "zarr":
        kwargs["consolidated"] = False
    else:
        kwargs["phony_dims"] = "access"
    what = "Zarr store" if engine == "zarr" else "NetCDF-4/HDF5 file"
    peek, failure = _open_dataset_quietly(path, chunks=None, **kwargs)
    if peek is None:
        raise FileFormatError(
            f"could not open {path} as a {what} ({failure}); the file may be truncated or damaged, "
            "or not be a scan grid"
        )
    with peek:
        phony = [d for d in peek.dims if str(d).startswith("phony_dim")]
        if phony:
            raise FileFormatError(
                f"{path} holds HDF5 datasets without dimension names; attach the `scan`, `index` and `time` "
                "coordinate datasets as HDF5 dimension scales (see docs/grid-format.md)"
            )
        a = peek["ascan"] if "ascan" in peek.data_vars else None
        nbytes = int(a.nbytes) if a is not None else int(peek.nbytes)
        lazily = want_lazy(lazy, chunks, nbytes)
        if not lazily:
            try:
                ds = peek.load()
            except MemoryError:
                raise FileFormatError(
                    f"not enough memory to load {path} (the A-scans alone take {nbytes} bytes); "
                    "open it with lazy=True"
                ) from None
            except Exception as exc:
                raise FileFormatError(
                    f"could not read the data of {path} ({failure_reason(exc)}); the file may be truncated or damaged"
                ) from None
            return ds, False
        request: dict[str, int] | None = None
        if a is not None and a.ndim == 3 and set(a.dims) == set(DIMS):
            shape = tuple(int(peek.sizes[d]) for d in DIMS)
            preferred = a.encoding.get("preferred_chunks") or {}
            storage = (int(preferred.get("scan", 1)), int(preferred.get("index", 1)))
            request = chunk_request(chunks, shape, a.dtype.itemsize, storage)
    try:
        ds = xr.open_dataset(path, chunks=request if request is not None else {}, **kwargs)
    except Exception as exc:
        raise FileFormatError(f"could not open {path} as a {what} ({failure_reason(exc)})") from None
    return ds, True


def open_grid(
    path: str | os.PathLike,
    *,
    chunks: Mapping[str, int] | None = None,
    lazy: bool | None = None,
    validate: bool = True,
) -> xr.Dataset:
    """Open a scan grid from a NetCDF-4/HDF5 file, a Zarr store or a raw sidecar.

    Parameters
    ----------
    path : str or os.PathLike
        A ``.nc``, ``.nc4``, ``.h5`` or ``.hdf5`` file, a Zarr store (a folder,
        usually ``*.zarr``), or the ``.json`` sidecar of a raw dump (see
        :func:`import_raw`). The file is opened read-only.
    chunks : mapping of str to int, optional
        Dask chunk sizes for ``scan`` and/or ``index`` (A-scans per chunk along
        each axis; -1 for the whole axis); the other sizes are chosen by ndtmap.
        The ``time`` axis is never split, gates need whole A-scans. Giving
        `chunks` opens the grid lazily.
    lazy : bool, optional
        True for dask-backed arrays read on demand, False to load everything
        into memory. The default (None) loads the grid unless its A-scan
        array is larger than :data:`LAZY_MEMORY_SHARE` of the total memory,
        so that a file larger than memory can still be opened.
    validate : bool, default True
        Check the grid against the format (:func:`ndtmap.grid.schema.validate_grid`);
        for lazy grids only the metadata is checked, so opening stays cheap.

    Returns
    -------
    xarray.Dataset
        The grid in canonical form (:func:`ndtmap.grid.schema.canonical_grid`). A
        lazy grid keeps the file open until ``ds.close()``.

    Raises
    ------
    FileFormatError
        When the path does not exist, has an unknown suffix, or the file is not
        readable (truncated, damaged, not NetCDF-4/Zarr).
    GridError
        When the file is readable but not a valid scan grid (every problem is
        listed).

    Examples
    --------
    >>> import pathlib, tempfile
    >>> import numpy as np
    >>> from ndtmap.grid.schema import make_grid
    >>> g = make_grid(np.zeros((2, 3, 4), np.float32), scan_mm=[0, 1], index_mm=[0, 2, 4],
    ...               time_us=[0, 0.02, 0.04, 0.06], velocity_m_s=5920,
    ...               probe_frequency_mhz=5, probe_diameter_mm=10)
    >>> with tempfile.TemporaryDirectory() as tmp:
    ...     written = save_grid(g, pathlib.Path(tmp) / "KFP-0001.nc")
    ...     back = open_grid(written)
    ...     dict(back.sizes), back.attrs["velocity_m_s"]
    ({'scan': 2, 'index': 3, 'time': 4}, 5920.0)
    """
    path = as_path("path", path)
    if not isinstance(validate, bool):
        raise ParameterTypeError(f"`validate` must be True or False, got {validate!r}")
    if not path.exists():
        raise FileFormatError(f"no file or folder at {path}; check the path")
    suffix = path.suffix.lower()
    if path.is_dir():
        if not is_zarr_store(path):
            raise FileFormatError(
                f"{path} is a folder but not a Zarr store (it has no zarr.json); give a .nc file, a .zarr store "
                "or a raw .json sidecar"
            )
        ds, lazily = _open_container(path, "zarr", chunks=chunks, lazy=lazy)
        return finish_read(ds, path, lazy=lazily, validate=validate)
    if suffix == SIDECAR_SUFFIX:
        return import_raw(path, chunks=chunks, lazy=lazy, validate=validate)
    if suffix == ZARR_SUFFIX:
        raise FileFormatError(f"{path} is a file, but a Zarr store is a folder; give the store folder")
    if suffix not in NETCDF_SUFFIXES:
        known = ", ".join((*NETCDF_SUFFIXES, ZARR_SUFFIX, SIDECAR_SUFFIX))
        raise FileFormatError(
            f"cannot tell the format of {path} from its suffix {path.suffix!r}; scan grids are read from {known}"
        )
    try:
        with open(path, "rb") as fh:
            head = fh.read(8)
    except OSError as exc:
        raise FileFormatError(f"cannot read {path} ({failure_reason(exc)}); check the file permissions") from None
    if not head:
        raise FileFormatError(f"{path} is empty (0 bytes); the file was not written completely")
    if head.startswith(b"CDF"):
        raise FileFormatError(
            f"{path} is a classic netCDF-3 file; ndtmap reads netCDF-4 (HDF5) files: rewrite it with "
            "xarray `ds.to_netcdf(new_path, engine='h5netcdf')` or `nccopy -k nc4 old new`"
        )
    ds, lazily = _open_container(path, "h5netcdf", chunks=chunks, lazy=lazy)
    return finish_read(ds, path, lazy=lazily, validate=validate)


# --------------------------------------------------------------------------- writing


def _is_regular(blocks: tuple[int, ...]) -> bool:
    return all(b == blocks[0] for b in blocks[:-1]) and blocks[-1] <= blocks[0]


def _largest_divisor_at_most(n: int, limit: int) -> int:
    for d in range(max(1, min(n, limit)), 0, -1):
        if n % d == 0:
            return d
    return 1  # pragma: no cover - 1 divides everything


def _prepare(ds: xr.Dataset) -> tuple[xr.Dataset, tuple[int, int]]:
    """Drop stale encodings; return the dataset and its on-disk (scan, index) chunk sizes.

    For a dask-backed grid the on-disk chunks divide the dask chunks, so every block is
    written as whole stored chunks without rechunking (a rechunk across block borders
    can hold much of the grid in memory at once). Irregular or time-split dask chunks
    are rechunked to regular ones holding whole A-scans.
    """
    out = ds.drop_encoding()
    shape = tuple(int(out.sizes[d]) for d in DIMS)
    itemsize = out["ascan"].dtype.itemsize
    storage = storage_chunks(shape, itemsize)
    if not is_lazy(out):
        return out, storage
    blocks = out["ascan"].chunksizes if out["ascan"].chunks is not None else {}
    if blocks and len(blocks["time"]) == 1 and _is_regular(blocks["scan"]) and _is_regular(blocks["index"]):
        per_chunk = max(1, STORAGE_CHUNK_BYTES // max(1, shape[2] * itemsize))
        s_index = _largest_divisor_at_most(blocks["index"][0], storage[1])
        s_scan = _largest_divisor_at_most(blocks["scan"][0], max(1, per_chunk // s_index))
        storage = (s_scan, s_index)
        out = out.chunk({"scan": blocks["scan"], "index": blocks["index"]})  # other variables alike
    else:
        c_scan, c_index = dask_chunks(shape, itemsize, storage)
        out = out.chunk({"scan": c_scan, "index": c_index, "time": -1})
    return out, storage


def _var_chunks(var: xr.Variable, storage: tuple[int, int]) -> tuple[int, ...]:
    sizes = {"scan": storage[0], "index": storage[1]}
    return tuple(min(sizes.get(str(d), n), n) for d, n in zip(var.dims, var.shape, strict=True))


def _write_netcdf(ds: xr.Dataset, target: Path, *, compress: bool) -> None:
    out, storage = _prepare(ds)
    encoding: dict[str, dict[str, Any]] = {}
    for name, var in out.variables.items():
        if name in out.dims:
            encoding[name] = {"_FillValue": None}  # coordinates are finite; no fill value
        elif compress and var.ndim > 0 and var.size > 0 and var.dtype.kind in "iufb":
            encoding[name] = dict(_NETCDF_COMPRESSION, chunksizes=_var_chunks(var, storage))
    out.to_netcdf(target, engine="h5netcdf", encoding=encoding)


def _write_zarr_store(ds: xr.Dataset, target: Path, *, compress: bool) -> None:
    from zarr.codecs import BloscCodec, Crc32cCodec

    out, storage = _prepare(ds)
    compressors = (BloscCodec(cname="zstd", clevel=3, shuffle="shuffle"), Crc32cCodec()) if compress else None
    encoding: dict[str, dict[str, Any]] = {}
    for name, var in out.data_vars.items():
        encoding[str(name)] = {"compressors": compressors}
        if var.ndim > 0 and var.size > 0:
            encoding[str(name)]["chunks"] = _var_chunks(var.variable, storage)
    out.to_zarr(target, mode="w-", zarr_format=3, consolidated=False, encoding=encoding)


def _format_of(path: Path, fmt: str | None) -> str:
    suffix = path.suffix.lower()
    inferred = "netcdf" if suffix in NETCDF_SUFFIXES else "zarr" if suffix == ZARR_SUFFIX else None
    if fmt is None:
        if inferred is None:
            raise ParameterError(
                f"cannot tell the format from the suffix of {path}; use a name ending in .nc or .zarr, "
                "or pass format='netcdf' or format='zarr'"
            )
        return inferred
    if fmt not in ("netcdf", "zarr"):
        raise ParameterError(f"`format` must be one of {{'netcdf', 'zarr'}}, got {fmt!r}")
    if inferred is not None and inferred != fmt:
        raise ParameterError(f"`format` is {fmt!r} but the name {path.name!r} says {inferred!r}; make them agree")
    if fmt == "netcdf" and inferred is None:
        raise ParameterError(
            "NetCDF files must be named *.nc, *.nc4, *.h5 or *.hdf5 so that they can be opened again, "
            f"got {path.name!r}"
        )
    return fmt


def save_map(ds: xr.Dataset, path: str | os.PathLike, *, overwrite: bool = True) -> Path:
    """Write a result dataset (a map or section, see :func:`ndtmap.scans.maps.map_dataset`) to NetCDF atomically.

    Parameters
    ----------
    ds : xarray.Dataset
        The result; its attributes must be netCDF-compatible.
    path : path-like
        Output file, ending in ``.nc``.
    overwrite : bool, default True
        Replace an existing file (atomically).

    Returns
    -------
    pathlib.Path

    Raises
    ------
    FileFormatError
        For another extension, an existing file with ``overwrite=False``, or
        a failed write (the previous file is then unchanged).

    Examples
    --------
    >>> import pathlib, tempfile
    >>> import numpy as np, xarray as xr
    >>> thickness = xr.Dataset({"thickness": (("scan", "index"), np.full((2, 3), 12.0))},
    ...                        coords={"scan": [0.0, 1.0], "index": [0.0, 2.0, 4.0]},
    ...                        attrs={"part_id": "KFP-2207-A"})
    >>> with tempfile.TemporaryDirectory() as tmp:
    ...     written = save_map(thickness, pathlib.Path(tmp) / "KFP-2207-A_thickness.nc")
    ...     with xr.open_dataset(written, engine="h5netcdf") as back:
    ...         float(back.thickness.max()), back.attrs["part_id"]
    (12.0, 'KFP-2207-A')
    """
    final = as_path("path", path)
    if final.suffix.lower() != ".nc":
        raise FileFormatError(f"maps are written as NetCDF: `path` must end in .nc, got {str(final)!r}")
    if not final.parent.is_dir():
        raise FileFormatError(f"cannot write {final}: the folder {final.parent} does not exist")
    if final.exists() and not overwrite:
        raise FileFormatError(f"{final} exists; pass overwrite=True or choose another name")
    check_netcdf_attrs(ds)

    def write(temp: Path) -> None:
        ds.to_netcdf(temp, engine="h5netcdf")

    write_atomically(final, write, is_dir=False)
    return final


def save_grid(
    ds: xr.Dataset,
    path: str | os.PathLike,
    *,
    format: str | None = None,
    overwrite: bool = True,
    compress: bool = True,
) -> Path:
    """Write a scan grid to a NetCDF-4 file or a Zarr v3 store, atomically.

    Parameters
    ----------
    ds : xarray.Dataset
        A valid scan grid, in memory or dask-backed. Every variable, coordinate
        and attribute is written; the data are kept bit for bit.
    path : str or os.PathLike
        Target name: ``*.nc`` (also ``.nc4``, ``.h5``, ``.hdf5``) for NetCDF-4,
        ``*.zarr`` for a Zarr v3 store (a folder).
    format : {'netcdf', 'zarr'}, optional
        Container; inferred from the suffix of `path` when not given.
    overwrite : bool, default True
        Replace an existing file (or Zarr store) of that name. The file the
        grid was read from is never overwritten.
    compress : bool, default True
        Lossless compression: zlib level 1 with byte shuffle and a Fletcher-32
        checksum per chunk for NetCDF; Blosc-zstd with shuffle and a CRC32C
        checksum for Zarr. False writes plain, uncompressed data.

    Returns
    -------
    pathlib.Path
        The path written.

    Raises
    ------
    GridError
        When `ds` is not a valid scan grid.
    FileFormatError
        When the target cannot be written (folder missing, exists and
        `overwrite` is False, is the source of `ds`), or an attribute cannot
        be stored in NetCDF (booleans, None, mappings).

    Notes
    -----
    The grid is written under a temporary name in the target folder and then
    renamed; a Zarr store replacing an older one is swapped in by two renames.
    A failed write leaves any previous file untouched and no temporary file.
    Dask-backed grids are computed while writing in a local thread pool (not a
    distributed cluster), so that a failure can be cleaned up completely.

    Examples
    --------
    >>> import pathlib, tempfile
    >>> import numpy as np
    >>> from ndtmap.grid.schema import make_grid
    >>> g = make_grid(np.ones((2, 2, 8), np.int16), scan_mm=[0, 1], index_mm=[0, 1],
    ...               time_us=np.arange(8) * 0.01, velocity_m_s=5920, probe_frequency_mhz=5,
    ...               probe_diameter_mm=10, fsh_per_count=100 / 32767)
    >>> with tempfile.TemporaryDirectory() as tmp:
    ...     store = save_grid(g, pathlib.Path(tmp) / "KFP-0002.zarr")
    ...     open_grid(store).ascan.dtype.name
    'int16'
    """
    if not isinstance(ds, xr.Dataset):
        raise ParameterTypeError(f"`ds` must be an xarray.Dataset (a scan grid), got {type(ds).__name__}")
    path = as_path("path", path)
    for name, flag in (("overwrite", overwrite), ("compress", compress)):
        if not isinstance(flag, bool):
            raise ParameterTypeError(f"`{name}` must be True or False, got {flag!r}")
    fmt = _format_of(path, format)
    validate_grid(ds, check_values=False)
    refuse_source(ds, path)
    check_target(path, overwrite=overwrite, is_dir=fmt == "zarr")
    lazy = is_lazy(ds)
    ds = with_grid_format(ds)  # the version its content needs: 1 for a plain flat part, 2 for shapes and skews
    if fmt == "netcdf":
        check_netcdf_attrs(ds)
        write_atomically(path, lambda temp: _write_netcdf(ds, temp, compress=compress), is_dir=False, lazy=lazy)
    else:
        write_atomically(path, lambda temp: _write_zarr_store(ds, temp, compress=compress), is_dir=True, lazy=lazy)
    return path
