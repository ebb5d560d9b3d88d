"""Raw little-endian binary A-scan dumps described by an "ndtmap raw sidecar".

:func:`import_raw` reads a dump in any axis order, sample type of
:data:`~ndtmap.io.sidecar.RAW_DTYPES` and header size, eagerly or lazily
through a read-only memory map; :func:`export_raw` writes a grid as a dump
in (scan, index, time) order plus its sidecar, both atomically. The sidecar
schema is in :mod:`ndtmap.io.sidecar` and ``docs/grid-format.md``.
"""

from __future__ import annotations

import json
import math
import os
import uuid
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr

from ndtmap.errors import FileFormatError, GridError, ParameterError, ParameterTypeError
from ndtmap.grid.provenance import jsonable, with_step
from ndtmap.grid.schema import COORD_LONG_NAMES, COORD_UNITS, DIMS, grid_format_version, validate_grid
from ndtmap.io.atomic import check_target, refuse_source, write_atomically
from ndtmap.io.attributes import attr_problem
from ndtmap.io.chunking import DASK_CHUNK_BYTES, chunk_request, want_lazy
from ndtmap.io.paths import as_path, failure_reason
from ndtmap.io.reading import finish_read
from ndtmap.io.sidecar import (
    RAW_DTYPES,
    RAW_SIDECAR_FORMAT,
    RAW_SIDECAR_VERSION,
    SIDECAR_COORDS,
    SIDECAR_SUFFIX,
    coordinate_spec,
    coordinate_values,
    load_sidecar,
    sidecar_problems,
)

__all__ = ["import_raw", "export_raw"]


# --------------------------------------------------------------------------- reading


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


def _checked_data_file(path: Path, doc: dict[str, Any], stored_shape: tuple[int, ...]) -> Path:
    """The data file named by the sidecar, after checking that it holds exactly the bytes described."""
    dtype = RAW_DTYPES[doc["dtype"]]
    offset = int(doc.get("byte_offset", 0))
    expected = offset + math.prod(stored_shape) * dtype.itemsize  # Python int: no overflow however large
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
    return data_path


def _lazy_samples(data_path: Path, doc: dict[str, Any], order: list[str], chunks: Mapping[str, int] | None,
                  out_dtype: np.dtype) -> Any:
    """The dump as a dask array in (scan, index, time) order, read block by block through memory maps."""
    import dask.array as da  # optional heavy dependency, only for lazy grids

    dtype = RAW_DTYPES[doc["dtype"]]
    offset = int(doc.get("byte_offset", 0))
    shape = {d: int(doc["shape"][d]) for d in DIMS}
    stored_shape = tuple(shape[d] for d in order)
    want = chunk_request(chunks, (shape["scan"], shape["index"], shape["time"]), out_dtype.itemsize, (1, 1))
    stat = data_path.stat()
    token = f"{data_path.resolve()}-{stat.st_size}-{stat.st_mtime_ns}-{dtype.str}-{offset}-{order}"
    data = da.from_array(
        _RawFile(data_path, dtype, stored_shape, offset),
        chunks=tuple(want[d] for d in order),
        name="import-raw-" + uuid.uuid5(uuid.NAMESPACE_URL, token).hex,
        meta=np.empty((0, 0, 0), dtype=dtype.newbyteorder("=")),
    )
    return data.transpose([order.index(d) for d in DIMS]).astype(out_dtype)


def _loaded_samples(data_path: Path, doc: dict[str, Any], order: list[str], out_dtype: np.dtype) -> np.ndarray:
    """The dump loaded into memory in (scan, index, time) order."""
    dtype = RAW_DTYPES[doc["dtype"]]
    stored_shape = tuple(int(doc["shape"][d]) for d in order)
    try:
        mapped = np.memmap(data_path, dtype=dtype, mode="r", offset=int(doc.get("byte_offset", 0)),
                           shape=stored_shape)
    except (OSError, ValueError) as exc:
        raise FileFormatError(f"cannot map the data file {data_path} ({failure_reason(exc)})") from None
    try:
        return np.ascontiguousarray(mapped.transpose([order.index(d) for d in DIMS]), dtype=out_dtype)
    except MemoryError:
        raise FileFormatError(
            f"not enough memory to load {data_path} ({math.prod(stored_shape) * out_dtype.itemsize} bytes as "
            f"{out_dtype}); open it with lazy=True"
        ) from None
    finally:
        del mapped


def _raw_dataset(doc: dict[str, Any], data: Any, path: Path, order: list[str]) -> xr.Dataset:
    """The scan grid of a checked sidecar around its samples, with an ``import_raw`` provenance step."""
    shape = {d: int(doc["shape"][d]) for d in DIMS}
    coords = {
        dim: xr.Variable((dim,), coordinate_values(doc["coords"][key], shape[dim]),
                         attrs={"units": COORD_UNITS[dim], "long_name": COORD_LONG_NAMES[dim]})
        for dim, key in SIDECAR_COORDS.items()
    }
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
    ds = xr.Dataset(variables, coords=coords, attrs=attrs)
    ds.attrs.setdefault("grid_format", grid_format_version(ds))
    step = {"sidecar": path.name, "data_file": doc["data_file"], "dtype": doc["dtype"],
            "byte_offset": int(doc.get("byte_offset", 0)), "axis_order": order}
    try:
        return with_step(ds, "import_raw", step)
    except GridError as exc:
        raise FileFormatError(f"{path}: `attrs.provenance` is not a valid provenance record ({exc})") from None


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
        As for :func:`ndtmap.io.open_grid`. Lazy grids read the data file on
        demand through a read-only memory map.

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
    path = as_path("sidecar_path", sidecar_path)
    if not isinstance(validate, bool):
        raise ParameterTypeError(f"`validate` must be True or False, got {validate!r}")
    doc = load_sidecar(path)
    problems = sidecar_problems(doc)
    if problems:
        listed = "; ".join(f"({i}) {p}" for i, p in enumerate(problems, 1))
        raise FileFormatError(f"raw sidecar {path} has {len(problems)} problem(s): {listed}")
    order = [str(d) for d in doc["axis_order"]]
    data_path = _checked_data_file(path, doc, tuple(int(doc["shape"][d]) for d in order))
    dtype = RAW_DTYPES[doc["dtype"]]
    out_dtype = np.dtype(np.float32) if dtype == np.dtype("<f8") else dtype.newbyteorder("=")
    n_samples = math.prod(int(doc["shape"][d]) for d in DIMS)
    lazily = want_lazy(lazy, chunks, n_samples * out_dtype.itemsize)
    if lazily:
        data = _lazy_samples(data_path, doc, order, chunks, out_dtype)
    else:
        data = _loaded_samples(data_path, doc, order, out_dtype)
    ds = _raw_dataset(doc, data, path, order)
    return finish_read(ds, path, lazy=lazily, validate=validate, data_file=data_path)


# --------------------------------------------------------------------------- writing


def _export_dtype(a: xr.DataArray, dtype: str | None) -> str:
    """The raw sample type to write: `dtype`, or the type of ``ascan``; never a quantising conversion."""
    if dtype is None:
        matches = [k for k, v in RAW_DTYPES.items() if v == a.dtype.newbyteorder("<") and not k.startswith("|")]
        if not matches:
            raise ParameterError(f"`ascan` dtype {a.dtype} has no raw sample type; pass dtype='<f4'")
        dtype = matches[0]
    if dtype not in RAW_DTYPES:
        raise ParameterError(f"`dtype` must be one of {', '.join(map(repr, RAW_DTYPES))}, got {dtype!r}")
    target = RAW_DTYPES[dtype]
    if target.kind in "iu" and (not np.issubdtype(a.dtype, np.integer) or target != a.dtype.newbyteorder("<")):
        raise ParameterError(
            f"`dtype` {dtype!r} would change integer samples of type {a.dtype} (quantise or rescale them "
            "yourself first); integer grids can be written as their own type, '<f4' or '<f8'"
        )
    return dtype


def _check_sidecar_attrs(ds: xr.Dataset) -> None:
    """Raise when a global attribute cannot be stored in the sidecar's JSON ``attrs``."""
    problems = [f"global attribute `{k}` {why}" for k, v in ds.attrs.items() if (why := attr_problem(v))]
    problems += [
        f"global attribute `{k}` is {v!r}; JSON cannot hold NaN or infinity, remove it or store a string"
        for k, v in ds.attrs.items()
        if isinstance(v, float | np.floating) and not math.isfinite(v)
    ]
    if problems:
        raise FileFormatError("cannot write the raw sidecar: " + "; ".join(problems))


def _sidecar_document(ds: xr.Dataset, dtype: str, data_name: str) -> dict[str, Any]:
    """The sidecar of a (scan, index, time) dump of `ds` with samples of `dtype` in the file `data_name`."""
    a = ds["ascan"]
    doc: dict[str, Any] = {
        "format": RAW_SIDECAR_FORMAT,
        "version": RAW_SIDECAR_VERSION,
        "data_file": data_name,
        "dtype": dtype,
        "byte_offset": 0,
        "shape": {d: int(ds.sizes[d]) for d in DIMS},
        "axis_order": list(DIMS),
        "coords": {key: coordinate_spec(ds[dim].values) for dim, key in SIDECAR_COORDS.items()},
        "signal": str(a.attrs["signal"]),
    }
    if RAW_DTYPES[dtype].kind in "iu":
        doc["fsh_per_count"] = float(a.attrs.get("fsh_per_count", 1.0))
    if "missing" in ds.data_vars:
        where = np.argwhere(np.asarray(ds["missing"].transpose("scan", "index").values, dtype=bool))
        if where.size:
            doc["missing"] = where.tolist()
    doc["attrs"] = {str(k): jsonable(v) for k, v in ds.attrs.items()}
    return doc


def _counts_in_fsh(ds: xr.Dataset) -> xr.DataArray:
    """Integer ``ascan`` as float32 %FSH, missing positions not masked (they are listed separately)."""
    a = ds["ascan"]
    scale = float(a.attrs.get("fsh_per_count", 1.0))
    return a.astype(np.float32) * np.float32(scale)


def _write_samples(values: xr.DataArray, target: np.dtype, temp: Path) -> None:
    """Write `values` to `temp` in (scan, index, time) order, a few scan lines (or one dask block) at a time."""
    n_scan = int(values.sizes["scan"])
    if values.chunks is not None:  # follow the dask blocks along `scan`, each computed once
        steps = list(values.chunksizes["scan"])
    else:
        per_line = int(values.sizes["index"]) * int(values.sizes["time"]) * target.itemsize
        step = max(1, DASK_CHUNK_BYTES // max(1, per_line))
        steps = [min(step, n_scan - start) for start in range(0, n_scan, step)]
    with open(temp, "wb") as fh:
        start = 0
        for size in steps:
            block = np.asarray(values.isel(scan=slice(start, start + size)).values)
            np.ascontiguousarray(block, dtype=target).tofile(fh)
            start += size


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
        Sample type of the dump, one of :data:`~ndtmap.io.sidecar.RAW_DTYPES`;
        by default the type of ``ascan``. Integer counts can be written as
        ``'<f4'`` or ``'<f8'`` (converted to %FSH); floating-point data cannot
        be written as integers.
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
    sidecar = as_path("sidecar_path", sidecar_path)
    if not isinstance(overwrite, bool):
        raise ParameterTypeError(f"`overwrite` must be True or False, got {overwrite!r}")
    if sidecar.suffix.lower() != SIDECAR_SUFFIX:
        raise ParameterError(f"`sidecar_path` must end in .json, got {sidecar.name!r}")
    validate_grid(ds, check_values=False)
    if ds["index"].attrs.get("units") == "deg":
        raise ParameterError(
            "the raw sidecar (version 1) holds the index in mm; this grid's rotary index is in degrees: "
            "save it as NetCDF or Zarr, or convert the index to mm of arc on the scanned surface"
        )
    dtype = _export_dtype(ds["ascan"], dtype)
    target = RAW_DTYPES[dtype]
    data_path = sidecar.with_suffix(".bin")
    refuse_source(ds, sidecar, data_path)
    for p in (sidecar, data_path):
        check_target(p, overwrite=overwrite, is_dir=False)
    _check_sidecar_attrs(ds)
    is_int = np.issubdtype(ds["ascan"].dtype, np.integer)
    values = ds["ascan"] if target.kind in "iu" or not is_int else _counts_in_fsh(ds)
    doc = _sidecar_document(ds, dtype, data_path.name)

    def write_sidecar(temp: Path) -> None:
        temp.write_text(json.dumps(doc, indent=2, ensure_ascii=False) + "\n", encoding="utf-8")

    write_atomically(data_path, lambda temp: _write_samples(values, target, temp), is_dir=False)
    write_atomically(sidecar, write_sidecar, is_dir=False)
    return sidecar
