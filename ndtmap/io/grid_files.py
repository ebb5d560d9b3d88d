"""Reading and writing scan grids: NetCDF-4/HDF5, Zarr v3 and raw binary dumps.

The file layout is written down for other programs in ``docs/grid-format.md``.
Three containers are read by :func:`open_grid`:

* NetCDF-4 (an HDF5 file; suffix ``.nc``, ``.nc4``, ``.h5`` or ``.hdf5``),
  read with h5netcdf;
* a Zarr v3 store (a folder, usually named ``*.zarr``);
* a raw little-endian binary dump described by a JSON "ndtmap raw sidecar"
  (suffix ``.json``), see :func:`import_raw`.

:func:`save_grid` writes the first two, :func:`export_raw` the third. Every
write goes to a temporary name in the target folder first and is then moved
into place, so an interrupted write never leaves a half-written file under
the final name. Files are opened read-only; nothing in this module executes
code from a file (no pickle, no eval).

Grids larger than a share of the memory (:data:`LAZY_MEMORY_SHARE`) are
opened lazily as dask arrays whose chunks hold whole A-scans (the full
``time`` axis), so gates and maps can be computed chunk by chunk.
"""

from __future__ import annotations

import gc
import json
import math
import os
import shutil
import sys
import uuid
from collections.abc import Callable, Iterator, Mapping
from concurrent.futures import ThreadPoolExecutor
from contextlib import contextmanager
from pathlib import Path, PurePosixPath, PureWindowsPath
from typing import Any

import numpy as np
import xarray as xr

from ndtmap.errors import FileFormatError, GridError, NdtmapError, ParameterError, ParameterTypeError
from ndtmap.grid.provenance import jsonable, with_step
from ndtmap.grid.schema import (
    COORD_LONG_NAMES,
    COORD_UNITS,
    DIMS,
    GRID_FORMAT_VERSION,
    SIGNAL_KINDS,
    canonical_grid,
    validate_grid,
)

__all__ = [
    "save_map",
    "atomic_write_bytes",
    "atomic_write_text",
    "open_grid",
    "save_grid",
    "import_raw",
    "export_raw",
    "LAZY_MEMORY_SHARE",
    "RAW_SIDECAR_FORMAT",
    "RAW_SIDECAR_VERSION",
    "RAW_DTYPES",
]

#: A grid whose A-scan array is larger than this share of the total memory
#: is opened lazily (dask-backed) when ``lazy=None``.
LAZY_MEMORY_SHARE = 0.25

#: Value of the ``format`` key of a raw sidecar, and the schema version.
RAW_SIDECAR_FORMAT = "ndtmap raw sidecar"
RAW_SIDECAR_VERSION = 1

#: Sample types of raw dumps: sidecar spelling -> numpy dtype (little-endian).
RAW_DTYPES: dict[str, np.dtype] = {
    "<i2": np.dtype("<i2"),
    "<f4": np.dtype("<f4"),
    "<u2": np.dtype("<u2"),
    "<u1": np.dtype("u1"),
    "|u1": np.dtype("u1"),
    "<i1": np.dtype("i1"),
    "|i1": np.dtype("i1"),
    "<f8": np.dtype("<f8"),
}

_NETCDF_SUFFIXES = (".nc", ".nc4", ".h5", ".hdf5")
_ZARR_SUFFIX = ".zarr"
_SIDECAR_SUFFIX = ".json"
_SIDECAR_MAX_BYTES = 64 * 2**20  # a sidecar is a small text file; refuse to parse anything larger
_STORAGE_CHUNK_BYTES = 4 * 2**20  # on-disk chunks: small enough for quick access to one B-scan
_DASK_CHUNK_BYTES = 64 * 2**20  # in-memory work units of lazy grids
_FALLBACK_MEMORY_BYTES = 4 * 2**30  # used when the total memory cannot be read
_NETCDF_COMPRESSION = {"zlib": True, "complevel": 1, "shuffle": True, "fletcher32": True}
_SIDECAR_REQUIRED = ("format", "version", "data_file", "dtype", "shape", "axis_order", "coords", "signal", "attrs")
_SIDECAR_OPTIONAL = ("byte_offset", "fsh_per_count", "missing", "description")
_SIDECAR_COORDS = {"scan": "scan_mm", "index": "index_mm", "time": "time_us"}


# --------------------------------------------------------------------------- helpers


def _as_path(name: str, value: Any) -> Path:
    if isinstance(value, str | os.PathLike):
        text = os.fspath(value)
        if isinstance(text, str) and text:
            return Path(text).expanduser()
    raise ParameterTypeError(f"`{name}` must be a non-empty str or os.PathLike, got {value!r}")


def _reason(exc: BaseException) -> str:
    text = " ".join(str(exc).split()) or "no details"
    if len(text) > 240:
        text = text[:237] + "..."
    return f"{type(exc).__name__}: {text}"


def _total_memory_bytes() -> int:
    """Total memory available to this process in bytes (cgroup limit if lower)."""
    total = 0
    try:
        total = int(os.sysconf("SC_PAGE_SIZE")) * int(os.sysconf("SC_PHYS_PAGES"))
    except (AttributeError, ValueError, OSError):
        total = 0
    if total <= 0:
        try:
            with open("/proc/meminfo", encoding="ascii") as fh:
                for line in fh:
                    if line.startswith("MemTotal:"):
                        total = int(line.split()[1]) * 1024
                        break
        except (OSError, ValueError, IndexError):
            total = 0
    if total <= 0:
        total = _FALLBACK_MEMORY_BYTES
    for limit_file in ("/sys/fs/cgroup/memory.max", "/sys/fs/cgroup/memory/memory.limit_in_bytes"):
        try:
            text = Path(limit_file).read_text(encoding="ascii").strip()
        except OSError:
            continue
        if text.isdigit() and 0 < int(text) < total:
            total = int(text)
    return total


def _want_lazy(lazy: bool | None, chunks: Mapping[str, int] | None, nbytes: int) -> bool:
    if lazy is not None and not isinstance(lazy, bool):
        raise ParameterTypeError(f"`lazy` must be True, False or None, got {lazy!r}")
    if chunks is not None:
        if lazy is False:
            raise ParameterError(
                "`chunks` was given with lazy=False; chunks only apply to lazy grids, drop one of them"
            )
        return True
    if lazy is None:
        return nbytes > LAZY_MEMORY_SHARE * _total_memory_bytes()
    return lazy


def _storage_chunks(shape: tuple[int, int, int], itemsize: int) -> tuple[int, int]:
    """On-disk (scan, index) chunk sizes of about 4 MiB, square-ish, whole A-scans."""
    n_scan, n_index, n_time = shape
    per_chunk = max(1, _STORAGE_CHUNK_BYTES // max(1, n_time * itemsize))
    c_index = min(n_index, max(1, math.isqrt(per_chunk)))
    c_scan = min(n_scan, max(1, per_chunk // c_index))
    c_index = min(n_index, max(c_index, per_chunk // c_scan))
    return c_scan, c_index


def _dask_chunks(shape: tuple[int, int, int], itemsize: int, storage: tuple[int, int] = (1, 1)) -> tuple[int, int]:
    """Dask (scan, index) chunk sizes of about 64 MiB, whole multiples of the storage chunks.

    Counted in storage blocks so that no on-disk chunk is read twice: as many blocks
    along `index` as fit (whole index lines when possible), then along `scan`.
    """
    n_scan, n_index, n_time = shape
    s_scan, s_index = max(1, min(storage[0], n_scan)), max(1, min(storage[1], n_index))
    blocks = max(1, _DASK_CHUNK_BYTES // max(1, n_time * itemsize * s_scan * s_index))
    b_index = max(1, min(-(-n_index // s_index), blocks))
    b_scan = max(1, min(-(-n_scan // s_scan), max(1, blocks // b_index)))
    # an empty axis keeps chunks of 1, so that opening works and the validator reports the empty grid
    return max(1, min(n_scan, b_scan * s_scan)), max(1, min(n_index, b_index * s_index))


def _chunk_request(
    chunks: Mapping[str, int] | None, shape: tuple[int, int, int], itemsize: int, storage: tuple[int, int]
) -> dict[str, int]:
    """Merge the user's chunk sizes with the defaults; `time` is always one chunk.

    A requested size that would cut stored chunks is rounded to a whole number of them (at least one).
    """
    c_scan, c_index = _dask_chunks(shape, itemsize, storage)
    out = {"scan": c_scan, "index": c_index, "time": shape[2]}
    if chunks is None:
        return out
    if not isinstance(chunks, Mapping):
        raise ParameterTypeError(f"`chunks` must be a mapping such as {{'scan': 16}}, got {chunks!r}")
    for dim, size in chunks.items():
        if dim not in DIMS:
            raise ParameterError(f"`chunks` keys must be 'scan' or 'index', got {dim!r}")
        if isinstance(size, bool) or not isinstance(size, int | np.integer) or (size <= 0 and size != -1):
            raise ParameterError(f"`chunks[{dim!r}]` must be a whole number > 0 or -1, got {size!r}")
        n = shape[DIMS.index(dim)]
        if dim == "time":
            if size not in (-1, n):
                raise ParameterError(
                    f"`chunks['time']` must be -1 (whole A-scans), got {size!r}; gates need every sample of an "
                    "A-scan in one chunk, so only `scan` and `index` can be split"
                )
            continue
        size = n if size == -1 else min(int(size), n)
        # round to whole stored chunks, so that no stored (compressed) chunk is read by two dask chunks
        stored = storage[DIMS.index(dim)]
        if stored > 1 and size % stored and size < n:
            size = min(n, max(stored, int(round(size / stored)) * stored))
        out[dim] = size
    return out


def _is_lazy(ds: xr.Dataset) -> bool:
    return any(v.chunks is not None for v in ds.variables.values())


def _recorded_sources(ds: xr.Dataset) -> list[Path]:
    """Every file the dataset says it was read from."""
    found = [ds.encoding.get("source")]
    found += [v.encoding.get("source") for v in ds.variables.values()]
    out = []
    for item in found:
        if isinstance(item, str | os.PathLike) and os.fspath(item):
            out.append(Path(os.fspath(item)).resolve())
    return out


def _record_source(ds: xr.Dataset, source: Path, data_file: Path | None = None) -> None:
    ds.encoding["source"] = str(source)
    if "ascan" in ds.variables:
        ds.variables["ascan"].encoding["source"] = str(data_file or source)


def _refuse_source(ds: xr.Dataset, *targets: Path) -> None:
    sources = set(_recorded_sources(ds))
    for target in targets:
        if target.resolve() in sources:
            raise FileFormatError(
                f"refusing to overwrite {target}: the dataset was read from it (and may still be reading from "
                "it); save to another path"
            )


def _fsync(path: Path) -> None:
    """Flush a file, or every file below a folder, to disk (best effort)."""
    paths = [path]
    if path.is_dir():
        paths = [Path(root) / name for root, dirs, files in os.walk(path) for name in (*files, *dirs)] + [path]
    for item in paths:
        try:
            fd = os.open(item, os.O_RDONLY)
        except OSError:
            continue
        try:
            os.fsync(fd)
        except OSError:
            pass
        finally:
            os.close(fd)


def _remove(path: Path) -> None:
    try:
        if path.is_dir() and not path.is_symlink():
            shutil.rmtree(path, ignore_errors=True)
        else:
            path.unlink(missing_ok=True)
    except OSError:
        pass


def _temporary_name(final: Path, kind: str) -> Path:
    return final.parent / f".{final.name}.{uuid.uuid4().hex[:12]}.{kind}"


def _is_zarr_store(path: Path) -> bool:
    return path.is_dir() and ((path / "zarr.json").is_file() or (path / ".zgroup").is_file())


# --------------------------------------------------------------------------- reading


def _grid_format_check(ds: xr.Dataset, path: Path) -> None:
    fmt = ds.attrs.get("grid_format")
    if not isinstance(fmt, str) or not fmt.startswith("ndtmap-grid "):
        return
    try:
        version = int(fmt.split()[1])
    except (IndexError, ValueError):
        return
    ours = int(GRID_FORMAT_VERSION.split()[1])
    if version > ours:
        raise FileFormatError(
            f"{path} uses grid format version {version}, newer than this ndtmap reads ({ours}); update ndtmap"
        )


def _mend_decoded(ds: xr.Dataset, path: Path) -> xr.Dataset:
    """Undo harmless differences left by CF decoding of files from other programs."""
    if "missing" in ds.data_vars and np.issubdtype(ds["missing"].dtype, np.integer):
        ds["missing"] = (ds["missing"] != 0).assign_attrs(ds["missing"].attrs)
    if "ascan" not in ds.data_vars:
        return ds
    a = ds["ascan"]
    stored = np.dtype(a.encoding.get("dtype", a.dtype))
    if np.issubdtype(stored, np.integer) and np.issubdtype(a.dtype, np.floating) and "fsh_per_count" in a.attrs:
        # Integer counts with a _FillValue are decoded to float with NaN at the fill value; the
        # counts must then be scaled here, since float A-scans are read as %FSH directly.
        if "scale_factor" in a.encoding or "add_offset" in a.encoding:
            raise FileFormatError(
                f"{path}: `ascan` has both CF `scale_factor`/`add_offset` and `fsh_per_count`, so its amplitude "
                "scale is ambiguous; keep only `fsh_per_count`"
            )
        try:
            scale = float(a.attrs["fsh_per_count"])
        except (TypeError, ValueError):
            return ds  # reported by the validator
        scaled = a.astype(np.float32) * np.float32(scale)
        scaled.attrs = {k: v for k, v in a.attrs.items() if k != "fsh_per_count"}
        ds["ascan"] = scaled
    return ds


def _finish(ds: xr.Dataset, path: Path, *, lazy: bool, validate: bool, data_file: Path | None = None) -> xr.Dataset:
    ds = _mend_decoded(ds, path)
    ds = canonical_grid(ds)
    _grid_format_check(ds, path)
    _record_source(ds, path, data_file)
    if validate:
        validate_grid(ds, check_values=not lazy, source=str(path))
    return ds


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
            reason = _reason(exc)
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
        is_lazy = _want_lazy(lazy, chunks, nbytes)
        if not is_lazy:
            try:
                ds = peek.load()
            except MemoryError:
                raise FileFormatError(
                    f"not enough memory to load {path} (the A-scans alone take {nbytes} bytes); "
                    "open it with lazy=True"
                ) from None
            except Exception as exc:
                raise FileFormatError(
                    f"could not read the data of {path} ({_reason(exc)}); the file may be truncated or damaged"
                ) from None
            return ds, False
        request: dict[str, int] | None = None
        if a is not None and a.ndim == 3 and set(a.dims) == set(DIMS):
            shape = tuple(int(peek.sizes[d]) for d in DIMS)
            preferred = a.encoding.get("preferred_chunks") or {}
            storage = (int(preferred.get("scan", 1)), int(preferred.get("index", 1)))
            request = _chunk_request(chunks, shape, a.dtype.itemsize, storage)
    try:
        ds = xr.open_dataset(path, chunks=request if request is not None else {}, **kwargs)
    except Exception as exc:
        raise FileFormatError(f"could not open {path} as a {what} ({_reason(exc)})") from None
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
    path = _as_path("path", path)
    if not isinstance(validate, bool):
        raise ParameterTypeError(f"`validate` must be True or False, got {validate!r}")
    if not path.exists():
        raise FileFormatError(f"no file or folder at {path}; check the path")
    suffix = path.suffix.lower()
    if path.is_dir():
        if not _is_zarr_store(path):
            raise FileFormatError(
                f"{path} is a folder but not a Zarr store (it has no zarr.json); give a .nc file, a .zarr store "
                "or a raw .json sidecar"
            )
        ds, is_lazy = _open_container(path, "zarr", chunks=chunks, lazy=lazy)
        return _finish(ds, path, lazy=is_lazy, validate=validate)
    if suffix == _SIDECAR_SUFFIX:
        return import_raw(path, chunks=chunks, lazy=lazy, validate=validate)
    if suffix == _ZARR_SUFFIX:
        raise FileFormatError(f"{path} is a file, but a Zarr store is a folder; give the store folder")
    if suffix not in _NETCDF_SUFFIXES:
        known = ", ".join((*_NETCDF_SUFFIXES, _ZARR_SUFFIX, _SIDECAR_SUFFIX))
        raise FileFormatError(
            f"cannot tell the format of {path} from its suffix {path.suffix!r}; scan grids are read from {known}"
        )
    try:
        with open(path, "rb") as fh:
            head = fh.read(8)
    except OSError as exc:
        raise FileFormatError(f"cannot read {path} ({_reason(exc)}); check the file permissions") from None
    if not head:
        raise FileFormatError(f"{path} is empty (0 bytes); the file was not written completely")
    if head.startswith(b"CDF"):
        raise FileFormatError(
            f"{path} is a classic netCDF-3 file; ndtmap reads netCDF-4 (HDF5) files: rewrite it with "
            "xarray `ds.to_netcdf(new_path, engine='h5netcdf')` or `nccopy -k nc4 old new`"
        )
    ds, is_lazy = _open_container(path, "h5netcdf", chunks=chunks, lazy=lazy)
    return _finish(ds, path, lazy=is_lazy, validate=validate)


# --------------------------------------------------------------------------- writing


def _attr_problem(value: Any) -> str | None:
    """Why `value` cannot be stored as a netCDF (or raw sidecar) attribute, or None."""
    if value is None:
        return "is None; netCDF attributes cannot be empty: remove it or store a string"
    if isinstance(value, bool | np.bool_):
        return f"is a boolean ({value!r}); netCDF attributes cannot hold booleans: store 1/0 or a string"
    if isinstance(value, Mapping):
        return "is a mapping; store it as a JSON string (json.dumps)"
    if isinstance(value, str | bytes | int | float | np.integer | np.floating):
        return None
    if isinstance(value, list | tuple | np.ndarray):
        arr = np.asarray(value)
        if arr.ndim != 1 or arr.size == 0:
            return "must be a non-empty 1-D list of numbers or of strings"
        if arr.dtype.kind in "iuf" or (arr.dtype.kind in "US" and all(isinstance(v, str | np.str_) for v in value)):
            return None
        return "must be a list of numbers only or of strings only (no booleans, None or mixed types)"
    return f"has type {type(value).__name__}; store a number, a string or a list of them"


def _check_netcdf_attrs(ds: xr.Dataset) -> None:
    problems = []
    for name, value in ds.attrs.items():
        why = _attr_problem(value)
        if why:
            problems.append(f"global attribute `{name}` {why}")
    for var_name, var in ds.variables.items():
        for name, value in var.attrs.items():
            why = _attr_problem(value)
            if why:
                problems.append(f"attribute `{name}` of `{var_name}` {why}")
    if problems:
        raise FileFormatError("cannot write the grid to NetCDF: " + "; ".join(problems))


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
    storage = _storage_chunks(shape, itemsize)
    if not _is_lazy(out):
        return out, storage
    blocks = out["ascan"].chunksizes if out["ascan"].chunks is not None else {}
    if blocks and len(blocks["time"]) == 1 and _is_regular(blocks["scan"]) and _is_regular(blocks["index"]):
        per_chunk = max(1, _STORAGE_CHUNK_BYTES // max(1, shape[2] * itemsize))
        s_index = _largest_divisor_at_most(blocks["index"][0], storage[1])
        s_scan = _largest_divisor_at_most(blocks["scan"][0], max(1, per_chunk // s_index))
        storage = (s_scan, s_index)
        out = out.chunk({"scan": blocks["scan"], "index": blocks["index"]})  # other variables alike
    else:
        c_scan, c_index = _dask_chunks(shape, itemsize, storage)
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


def _write_zarr(ds: xr.Dataset, target: Path, *, compress: bool) -> None:
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
    inferred = "netcdf" if suffix in _NETCDF_SUFFIXES else "zarr" if suffix == _ZARR_SUFFIX else None
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


def _check_target(path: Path, *, overwrite: bool, is_dir: bool) -> None:
    if not path.parent.is_dir():
        raise FileFormatError(f"cannot write {path}: the folder {path.parent} does not exist")
    if not (path.exists() or path.is_symlink()):
        return
    if not overwrite:
        raise FileFormatError(f"{path} already exists; pass overwrite=True or choose another name")
    if is_dir and not _is_zarr_store(path):
        raise FileFormatError(f"{path} exists and is not a Zarr store; refusing to replace it, remove it yourself")
    if not is_dir and path.is_dir():
        raise FileFormatError(f"{path} exists and is a folder; refusing to replace it with a file")


@contextmanager
def _own_threads(active: bool) -> Iterator[None]:
    """Compute dask blocks in a thread pool that is drained before the block exits.

    When one block fails, dask re-raises at once while other threads may still be
    writing; draining the pool first means no late block can recreate a temporary
    file after it was removed.
    """
    if not active:
        yield
        return
    import dask

    pool = ThreadPoolExecutor(max_workers=os.cpu_count() or 1)
    try:
        with dask.config.set(scheduler=pool):
            yield
    finally:
        pool.shutdown(wait=True, cancel_futures=True)


def _write_atomically(
    final: Path, write: Callable[[Path], None], *, is_dir: bool, lazy: bool = False
) -> None:
    """Run ``write(temp)`` and move the result to `final`; clean up on any failure."""
    temp = _temporary_name(final, "tmp")
    try:
        with _own_threads(lazy):
            write(temp)
        _fsync(temp)
        if is_dir and final.exists():
            old = _temporary_name(final, "old")
            os.rename(final, old)
            try:
                os.rename(temp, final)
            except BaseException:
                os.rename(old, final)
                raise
            _remove(old)
        else:
            os.replace(temp, final)
        _fsync(final.parent)
    except BaseException as exc:
        _remove(temp)
        if isinstance(exc, NdtmapError) or not isinstance(exc, Exception):
            raise
        raise FileFormatError(
            f"could not write {final} ({_reason(exc)}); any previous file under that name is unchanged"
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
    """
    final = _as_path("path", path)
    if not final.parent.is_dir():
        raise FileFormatError(f"cannot write {final}: the folder {final.parent} does not exist")

    def write(temp: Path) -> None:
        with open(temp, "wb") as fh:
            fh.write(data)

    _write_atomically(final, write, is_dir=False)
    return final


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
    """
    final = _as_path("path", path)
    if final.suffix.lower() != ".nc":
        raise FileFormatError(f"maps are written as NetCDF: `path` must end in .nc, got {str(final)!r}")
    if not final.parent.is_dir():
        raise FileFormatError(f"cannot write {final}: the folder {final.parent} does not exist")
    if final.exists() and not overwrite:
        raise FileFormatError(f"{final} exists; pass overwrite=True or choose another name")
    _check_netcdf_attrs(ds)

    def write(temp: Path) -> None:
        ds.to_netcdf(temp, engine="h5netcdf")

    _write_atomically(final, write, is_dir=False)
    return final


def atomic_write_text(path: str | os.PathLike, text: str) -> Path:
    """Write UTF-8 `text` to `path` atomically (see :func:`atomic_write_bytes`)."""
    return atomic_write_bytes(path, text.encode("utf-8"))


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
    path = _as_path("path", path)
    for name, flag in (("overwrite", overwrite), ("compress", compress)):
        if not isinstance(flag, bool):
            raise ParameterTypeError(f"`{name}` must be True or False, got {flag!r}")
    fmt = _format_of(path, format)
    validate_grid(ds, check_values=False)
    _refuse_source(ds, path)
    _check_target(path, overwrite=overwrite, is_dir=fmt == "zarr")
    lazy = _is_lazy(ds)
    if fmt == "netcdf":
        _check_netcdf_attrs(ds)
        _write_atomically(path, lambda temp: _write_netcdf(ds, temp, compress=compress), is_dir=False, lazy=lazy)
    else:
        _write_atomically(path, lambda temp: _write_zarr(ds, temp, compress=compress), is_dir=True, lazy=lazy)
    return path


# --------------------------------------------------------------------------- raw dumps


class _RawFile:
    """Array-like view of a raw dump that maps the file only while a block is read.

    Holding a path rather than an open map keeps dask graphs small and lets
    them be sent to other processes.
    """

    def __init__(self, path: Path, dtype: np.dtype, shape: tuple[int, ...], offset: int) -> None:
        self.path, self.dtype, self.shape, self.offset = str(path), dtype, shape, offset
        self.ndim = len(shape)

    def __getitem__(self, key: Any) -> np.ndarray:
        mapped = np.memmap(self.path, dtype=self.dtype, mode="r", offset=self.offset, shape=self.shape)
        try:
            return np.array(mapped[key], dtype=self.dtype.newbyteorder("="))
        finally:
            del mapped


def _load_sidecar(path: Path) -> dict[str, Any]:
    if not path.is_file():
        raise FileFormatError(f"no raw sidecar at {path}; check the path")
    size = path.stat().st_size
    if size > _SIDECAR_MAX_BYTES:
        raise FileFormatError(
            f"{path} is {size} bytes, too large for a raw sidecar (at most {_SIDECAR_MAX_BYTES}); "
            "is it the data file rather than its .json description?"
        )

    def no_duplicates(pairs: list[tuple[str, Any]]) -> dict[str, Any]:
        out: dict[str, Any] = {}
        for key, value in pairs:
            if key in out:
                raise FileFormatError(f"{path}: the key {key!r} appears twice in one JSON object; keep one")
            out[key] = value
        return out

    try:
        text = path.read_text(encoding="utf-8-sig")
    except UnicodeDecodeError as exc:
        raise FileFormatError(f"{path} is not UTF-8 text ({_reason(exc)}); a raw sidecar is a JSON file") from None
    except OSError as exc:
        raise FileFormatError(f"cannot read {path} ({_reason(exc)})") from None
    try:
        doc = json.loads(text, object_pairs_hook=no_duplicates)
    except json.JSONDecodeError as exc:
        raise FileFormatError(
            f"{path} is not valid JSON: {exc.msg} at line {exc.lineno}, column {exc.colno}"
        ) from None
    if not isinstance(doc, dict):
        raise FileFormatError(f"{path}: a raw sidecar must be a JSON object {{...}}, got {type(doc).__name__}")
    return doc


def _is_whole(value: Any) -> bool:
    return isinstance(value, int) and not isinstance(value, bool)


def _is_real(value: Any) -> bool:
    return isinstance(value, int | float) and not isinstance(value, bool) and math.isfinite(value)


def _sidecar_problems(doc: dict[str, Any]) -> list[str]:
    """Check the sidecar's structure (nothing on disk yet); one sentence per problem."""
    problems = []
    for key in _SIDECAR_REQUIRED:
        if key not in doc:
            problems.append(f"required key `{key}` is missing")
    unknown = sorted(set(doc) - set(_SIDECAR_REQUIRED) - set(_SIDECAR_OPTIONAL))
    if unknown:
        known = ", ".join((*_SIDECAR_REQUIRED, *_SIDECAR_OPTIONAL))
        problems.append(f"unknown key(s) {', '.join(map(repr, unknown))} (known keys: {known})")
    if "format" in doc and doc["format"] != RAW_SIDECAR_FORMAT:
        problems.append(f"`format` must be {RAW_SIDECAR_FORMAT!r}, got {doc['format']!r}")
    if "version" in doc:
        version = doc["version"]
        if not _is_whole(version) or version < 1:
            problems.append(f"`version` must be the whole number {RAW_SIDECAR_VERSION}, got {version!r}")
        elif version > RAW_SIDECAR_VERSION:
            problems.append(f"`version` {version} is newer than this ndtmap reads ({RAW_SIDECAR_VERSION}); update")
    if "data_file" in doc:
        name = doc["data_file"]
        if not isinstance(name, str) or not name.strip():
            problems.append(f"`data_file` must be a file name relative to the sidecar, got {name!r}")
        elif PurePosixPath(name).is_absolute() or PureWindowsPath(name).is_absolute() or PureWindowsPath(name).drive:
            problems.append(f"`data_file` must be relative to the sidecar's folder, got the absolute path {name!r}")
        elif ".." in PurePosixPath(name.replace("\\", "/")).parts:
            problems.append(f"`data_file` must stay inside the sidecar's folder, got {name!r} (remove '..')")
        elif "\\" in name:
            problems.append(f"`data_file` must use '/' to separate folders, got {name!r}")
    dtype = doc.get("dtype")
    if "dtype" in doc and dtype not in RAW_DTYPES:
        hint = " (big-endian data is not supported: swap the bytes first)" if str(dtype).startswith(">") else ""
        problems.append(f"`dtype` must be one of {', '.join(map(repr, RAW_DTYPES))}, got {dtype!r}{hint}")
    offset = doc.get("byte_offset", 0)
    if not _is_whole(offset) or offset < 0:
        problems.append(f"`byte_offset` must be a whole number of bytes >= 0, got {offset!r}")
    shape = doc.get("shape")
    shape_ok = False
    if "shape" in doc:
        if not isinstance(shape, dict) or set(shape) != set(DIMS):
            problems.append(f"`shape` must be an object with the keys 'scan', 'index' and 'time', got {shape!r}")
        else:
            bad = {k: v for k, v in shape.items() if not _is_whole(v) or v <= 0}
            if bad:
                problems.append(f"`shape` entries must be whole numbers > 0, got {bad}")
            else:
                shape_ok = True
    order = doc.get("axis_order")
    if "axis_order" in doc and (not isinstance(order, list) or sorted(map(str, order)) != sorted(DIMS)):
        problems.append(f"`axis_order` must list 'scan', 'index' and 'time' once each, slowest first, got {order!r}")
    coords = doc.get("coords")
    if "coords" in doc:
        if not isinstance(coords, dict) or set(coords) != set(_SIDECAR_COORDS.values()):
            problems.append(
                f"`coords` must be an object with the keys 'scan_mm', 'index_mm' and 'time_us', got {coords!r}"
            )
        else:
            for dim, key in _SIDECAR_COORDS.items():
                spec = coords[key]
                if isinstance(spec, dict):
                    if set(spec) != {"start", "step"} or not all(_is_real(spec[k]) for k in ("start", "step")):
                        problems.append(f"`coords.{key}` must be {{'start': number, 'step': number}}, got {spec!r}")
                    elif spec["step"] <= 0:
                        problems.append(f"`coords.{key}.step` must be greater than 0, got {spec['step']!r}")
                elif isinstance(spec, list):
                    if not all(_is_real(v) for v in spec):
                        problems.append(f"`coords.{key}` must hold finite numbers only")
                    elif shape_ok and len(spec) != shape[dim]:
                        problems.append(f"`coords.{key}` has {len(spec)} values but `shape.{dim}` is {shape[dim]}")
                else:
                    problems.append(f"`coords.{key}` must be a list of numbers or {{'start': x, 'step': dx}}")
    if "signal" in doc and doc["signal"] not in SIGNAL_KINDS:
        problems.append(f"`signal` must be 'rf' or 'rectified', got {doc['signal']!r}")
    is_int = dtype in RAW_DTYPES and RAW_DTYPES[dtype].kind in "iu"
    if "fsh_per_count" in doc:
        scale = doc["fsh_per_count"]
        if dtype in RAW_DTYPES and not is_int:
            problems.append("`fsh_per_count` applies to integer data only; floating-point samples are %FSH already")
        elif not _is_real(scale) or scale <= 0:
            problems.append(f"`fsh_per_count` must be a number > 0 (%FSH per count), got {scale!r}")
    elif is_int:
        problems.append(
            f"`fsh_per_count` is required for integer data ({dtype}): give %FSH per digitiser count, "
            "e.g. 100/32767 when full scale is 32767 counts"
        )
    if "missing" in doc:
        missing = doc["missing"]
        pairs_ok = isinstance(missing, list) and all(
            isinstance(p, list) and len(p) == 2 and all(_is_whole(i) and i >= 0 for i in p) for p in missing
        )
        if not pairs_ok:
            problems.append("`missing` must be a list of [scan_position, index_position] pairs of whole numbers >= 0")
        elif shape_ok and any(i >= shape["scan"] or j >= shape["index"] for i, j in missing):
            problems.append("`missing` names a position outside `shape`; positions count from 0")
    if "attrs" in doc:
        attrs = doc["attrs"]
        if not isinstance(attrs, dict):
            problems.append(f"`attrs` must be an object of global attributes, got {type(attrs).__name__}")
        else:
            for name, value in attrs.items():
                why = _attr_problem(value)
                if why:
                    problems.append(f"`attrs.{name}` {why}")
    if "description" in doc and not isinstance(doc["description"], str):
        problems.append("`description` must be a string")
    return problems


def _coordinate(spec: Any, n: int) -> np.ndarray:
    if isinstance(spec, dict):
        return float(spec["start"]) + float(spec["step"]) * np.arange(n, dtype=np.float64)
    return np.asarray(spec, dtype=np.float64)


def import_raw(
    sidecar_path: str | os.PathLike,
    *,
    chunks: Mapping[str, int] | None = None,
    lazy: bool | None = None,
    validate: bool = True,
) -> xr.Dataset:
    """Read a raw little-endian A-scan dump described by an "ndtmap raw sidecar".

    The sidecar is a small JSON file (schema version 1, see
    ``docs/grid-format.md``) that names the data file (relative to the
    sidecar's folder), its sample type, header size, shape, byte order of the
    axes, the coordinates and the global attributes. Everything is checked
    before the data file is touched; the data file must hold exactly
    ``byte_offset + n_scan * n_index * n_time * itemsize`` bytes.

    Parameters
    ----------
    sidecar_path : str or os.PathLike
        The ``.json`` sidecar.
    chunks, lazy, validate
        As for :func:`open_grid`. Lazy grids read the data file on demand
        through a read-only memory map.

    Returns
    -------
    xarray.Dataset
        The scan grid, ``ascan`` transposed to (scan, index, time). Integer
        samples stay integers with ``fsh_per_count``; ``<f8`` samples are
        stored as float32. The provenance record gains an ``import_raw`` step.

    Raises
    ------
    FileFormatError
        When the sidecar is not valid JSON (line and column are given), breaks
        the schema (every problem is listed), or the data file is missing or
        has the wrong size.
    GridError
        When the result is not a valid scan grid (e.g. a required global
        attribute is missing from ``attrs``).

    Examples
    --------
    >>> import pathlib, tempfile
    >>> import numpy as np
    >>> from ndtmap.grid.schema import make_grid
    >>> g = make_grid(np.arange(24, dtype=np.float32).reshape(2, 3, 4), scan_mm=[0, 1],
    ...               index_mm=[0, 2, 4], time_us=[0, 0.02, 0.04, 0.06], velocity_m_s=5920,
    ...               probe_frequency_mhz=5, probe_diameter_mm=10)
    >>> with tempfile.TemporaryDirectory() as tmp:
    ...     sidecar = export_raw(g, pathlib.Path(tmp) / "KFP-0003.json")
    ...     back = import_raw(sidecar)
    ...     bool((back.ascan == g.ascan).all()), back.ascan.dims
    (True, ('scan', 'index', 'time'))
    """
    path = _as_path("sidecar_path", sidecar_path)
    if not isinstance(validate, bool):
        raise ParameterTypeError(f"`validate` must be True or False, got {validate!r}")
    doc = _load_sidecar(path)
    problems = _sidecar_problems(doc)
    if problems:
        listed = "; ".join(f"({i}) {p}" for i, p in enumerate(problems, 1))
        raise FileFormatError(f"raw sidecar {path} has {len(problems)} problem(s): {listed}")
    dtype = RAW_DTYPES[doc["dtype"]]
    offset = int(doc.get("byte_offset", 0))
    shape = {d: int(doc["shape"][d]) for d in DIMS}
    order = [str(d) for d in doc["axis_order"]]
    stored_shape = tuple(shape[d] for d in order)
    n_samples = math.prod(stored_shape)  # Python int: no overflow however large the claim
    expected = offset + n_samples * dtype.itemsize
    data_path = path.parent / doc["data_file"]
    if not data_path.is_file():
        raise FileFormatError(f"the data file {data_path} named by {path} does not exist; check `data_file`")
    actual = data_path.stat().st_size
    if actual != expected:
        raise FileFormatError(
            f"the data file {data_path} holds {actual} bytes but {path} describes {expected} bytes "
            f"({offset} header + {' x '.join(map(str, stored_shape))} samples x {dtype.itemsize} bytes); "
            "check `shape`, `dtype` and `byte_offset`"
        )
    perm = [order.index(d) for d in DIMS]  # stored axis for each canonical axis
    canonical_shape = (shape["scan"], shape["index"], shape["time"])
    out_dtype = np.dtype(np.float32) if dtype == np.dtype("<f8") else dtype.newbyteorder("=")
    is_lazy = _want_lazy(lazy, chunks, n_samples * out_dtype.itemsize)
    if is_lazy:
        import dask.array as da

        want = _chunk_request(chunks, canonical_shape, out_dtype.itemsize, (1, 1))
        stored_chunks = tuple(want[d] for d in order)
        stat = data_path.stat()
        token = f"{data_path.resolve()}-{stat.st_size}-{stat.st_mtime_ns}-{dtype.str}-{offset}-{order}"
        name = "import-raw-" + uuid.uuid5(uuid.NAMESPACE_URL, token).hex
        data = da.from_array(
            _RawFile(data_path, dtype, stored_shape, offset),
            chunks=stored_chunks,
            name=name,
            meta=np.empty((0, 0, 0), dtype=dtype.newbyteorder("=")),
        )
        data = data.transpose(perm).astype(out_dtype)
    else:
        try:
            mapped = np.memmap(data_path, dtype=dtype, mode="r", offset=offset, shape=stored_shape)
        except (OSError, ValueError) as exc:
            raise FileFormatError(f"cannot map the data file {data_path} ({_reason(exc)})") from None
        try:
            data = np.ascontiguousarray(mapped.transpose(perm), dtype=out_dtype)
        except MemoryError:
            raise FileFormatError(
                f"not enough memory to load {data_path} ({n_samples * out_dtype.itemsize} bytes as {out_dtype}); "
                "open it with lazy=True"
            ) from None
        finally:
            del mapped
    coords = {}
    for dim, key in _SIDECAR_COORDS.items():
        coords[dim] = xr.Variable(
            (dim,), _coordinate(doc["coords"][key], shape[dim]),
            attrs={"units": COORD_UNITS[dim], "long_name": COORD_LONG_NAMES[dim]},
        )
    ascan_attrs: dict[str, Any] = {"units": "%FSH", "long_name": "A-scan amplitude", "signal": doc["signal"]}
    if "fsh_per_count" in doc:
        ascan_attrs["fsh_per_count"] = float(doc["fsh_per_count"])
    variables: dict[str, xr.Variable] = {"ascan": xr.Variable(DIMS, data, attrs=ascan_attrs)}
    if "missing" in doc:
        mask = np.zeros((shape["scan"], shape["index"]), dtype=bool)
        for i, j in doc["missing"]:
            mask[i, j] = True
        variables["missing"] = xr.Variable(("scan", "index"), mask, attrs={"long_name": "A-scan missing"})
    attrs = dict(doc["attrs"])
    attrs.setdefault("provenance", "[]")
    attrs.setdefault("grid_format", GRID_FORMAT_VERSION)
    ds = xr.Dataset(variables, coords=coords, attrs=attrs)
    try:
        ds = with_step(
            ds,
            "import_raw",
            {"sidecar": path.name, "data_file": doc["data_file"], "dtype": doc["dtype"], "byte_offset": offset,
             "axis_order": order},
        )
    except GridError as exc:
        raise FileFormatError(f"{path}: `attrs.provenance` is not a valid provenance record ({exc})") from None
    return _finish(ds, path, lazy=is_lazy, validate=validate, data_file=data_path)


def _coordinate_spec(values: np.ndarray) -> Any:
    """{'start', 'step'} when that reproduces `values` exactly, else the explicit list."""
    values = np.asarray(values, dtype=np.float64)
    if values.size >= 2:
        start, step = float(values[0]), float(values[1] - values[0])
        if step > 0 and np.array_equal(start + step * np.arange(values.size, dtype=np.float64), values):
            return {"start": start, "step": step}
    return [float(v) for v in values]


def export_raw(
    ds: xr.Dataset,
    sidecar_path: str | os.PathLike,
    *,
    dtype: str | None = None,
    overwrite: bool = True,
) -> Path:
    """Write the A-scans as a raw little-endian dump plus an "ndtmap raw sidecar".

    The data file is named after the sidecar with the suffix ``.bin``, in the
    same folder, samples in (scan, index, time) order with the time axis
    fastest and no header. Coordinates, ``signal``, ``fsh_per_count``, the
    ``missing`` mask and every global attribute go into the sidecar; other
    data variables are not exported. Both files are written atomically.

    Parameters
    ----------
    ds : xarray.Dataset
        A valid scan grid (in memory or dask-backed; written block by block).
    sidecar_path : str or os.PathLike
        Name of the sidecar; must end in ``.json``.
    dtype : str, optional
        Sample type of the dump, one of :data:`RAW_DTYPES`; by default the type
        of ``ascan``. Integer counts can be written as ``'<f4'`` or ``'<f8'``
        (converted to %FSH); floating-point data cannot be written as integers.
    overwrite : bool, default True
        Replace existing files of those names.

    Returns
    -------
    pathlib.Path
        The sidecar path (the data file is ``sidecar.with_suffix('.bin')``).

    Raises
    ------
    GridError
        When `ds` is not a valid scan grid.
    ParameterError
        When `dtype` is not a raw sample type or would need quantisation.
    FileFormatError
        When the files cannot be written or an attribute cannot be stored.

    Examples
    --------
    See :func:`import_raw`.
    """
    if not isinstance(ds, xr.Dataset):
        raise ParameterTypeError(f"`ds` must be an xarray.Dataset (a scan grid), got {type(ds).__name__}")
    sidecar = _as_path("sidecar_path", sidecar_path)
    if not isinstance(overwrite, bool):
        raise ParameterTypeError(f"`overwrite` must be True or False, got {overwrite!r}")
    if sidecar.suffix.lower() != _SIDECAR_SUFFIX:
        raise ParameterError(f"`sidecar_path` must end in .json, got {sidecar.name!r}")
    validate_grid(ds, check_values=False)
    a = ds["ascan"]
    if dtype is None:
        matches = [k for k, v in RAW_DTYPES.items() if v == a.dtype.newbyteorder("<") and not k.startswith("|")]
        if not matches:
            raise ParameterError(f"`ascan` dtype {a.dtype} has no raw sample type; pass dtype='<f4'")
        dtype = matches[0]
    if dtype not in RAW_DTYPES:
        raise ParameterError(f"`dtype` must be one of {', '.join(map(repr, RAW_DTYPES))}, got {dtype!r}")
    target = RAW_DTYPES[dtype]
    is_int = np.issubdtype(a.dtype, np.integer)
    if target.kind in "iu" and (not is_int or target != a.dtype.newbyteorder("<")):
        raise ParameterError(
            f"`dtype` {dtype!r} would change integer samples of type {a.dtype} (quantise or rescale them "
            "yourself first); integer grids can be written as their own type, '<f4' or '<f8'"
        )
    data_path = sidecar.with_suffix(".bin")
    _refuse_source(ds, sidecar, data_path)
    for p in (sidecar, data_path):
        _check_target(p, overwrite=overwrite, is_dir=False)
    problems = [f"global attribute `{k}` {why}" for k, v in ds.attrs.items() if (why := _attr_problem(v))]
    problems += [
        f"global attribute `{k}` is {v!r}; JSON cannot hold NaN or infinity, remove it or store a string"
        for k, v in ds.attrs.items()
        if isinstance(v, float | np.floating) and not math.isfinite(v)
    ]
    if problems:
        raise FileFormatError("cannot write the raw sidecar: " + "; ".join(problems))
    values = a if target.kind in "iu" or not is_int else _counts_in_fsh(ds)
    doc: dict[str, Any] = {
        "format": RAW_SIDECAR_FORMAT,
        "version": RAW_SIDECAR_VERSION,
        "data_file": data_path.name,
        "dtype": dtype,
        "byte_offset": 0,
        "shape": {d: int(ds.sizes[d]) for d in DIMS},
        "axis_order": list(DIMS),
        "coords": {key: _coordinate_spec(ds[dim].values) for dim, key in _SIDECAR_COORDS.items()},
        "signal": str(a.attrs["signal"]),
    }
    if target.kind in "iu":
        doc["fsh_per_count"] = float(a.attrs.get("fsh_per_count", 1.0))
    if "missing" in ds.data_vars:
        where = np.argwhere(np.asarray(ds["missing"].transpose("scan", "index").values, dtype=bool))
        if where.size:
            doc["missing"] = where.tolist()
    doc["attrs"] = {str(k): jsonable(v) for k, v in ds.attrs.items()}

    n_scan = int(ds.sizes["scan"])
    if values.chunks is not None:  # follow the dask blocks along `scan`, each computed once
        steps = list(values.chunksizes["scan"])
    else:
        step = max(1, _DASK_CHUNK_BYTES // max(1, int(ds.sizes["index"]) * int(ds.sizes["time"]) * target.itemsize))
        steps = [min(step, n_scan - start) for start in range(0, n_scan, step)]

    def write_data(temp: Path) -> None:
        with open(temp, "wb") as fh:
            start = 0
            for size in steps:
                block = np.asarray(values.isel(scan=slice(start, start + size)).values)
                np.ascontiguousarray(block, dtype=target).tofile(fh)
                start += size

    def write_sidecar(temp: Path) -> None:
        temp.write_text(json.dumps(doc, indent=2, ensure_ascii=False) + "\n", encoding="utf-8")

    _write_atomically(data_path, write_data, is_dir=False)
    _write_atomically(sidecar, write_sidecar, is_dir=False)
    return sidecar


def _counts_in_fsh(ds: xr.Dataset) -> xr.DataArray:
    """Integer ``ascan`` as float32 %FSH, missing positions not masked (they are listed separately)."""
    a = ds["ascan"]
    scale = float(a.attrs.get("fsh_per_count", 1.0))
    return a.astype(np.float32) * np.float32(scale)
