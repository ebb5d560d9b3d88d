"""What every reader does after reading: mend CF decoding, canonical form, format version, source, validation.

:func:`finish_read` is shared by the NetCDF/Zarr reader
(:func:`ndtmap.io.open_grid`) and the raw reader (:func:`ndtmap.io.import_raw`).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import xarray as xr

from ndtmap.errors import FileFormatError
from ndtmap.grid.schema import GRID_FORMAT_VERSION, canonical_grid, validate_grid
from ndtmap.io.atomic import record_source

__all__ = ["finish_read"]


def _check_grid_format_version(ds: xr.Dataset, path: Path) -> None:
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


def finish_read(ds: xr.Dataset, path: Path, *, lazy: bool, validate: bool, data_file: Path | None = None) -> xr.Dataset:
    """Turn a dataset as a reader returned it into a checked scan grid that remembers its source.

    Mends harmless CF-decoding differences, puts the grid in canonical form,
    refuses a newer grid format, records `path` (and `data_file`, where the
    A-scans are when that is another file) as the source, then validates
    (metadata only for a lazy grid).

    Parameters
    ----------
    ds : xarray.Dataset
        What the reader returned.
    path : pathlib.Path
        The file or store that was opened (for messages and the source record).
    lazy : bool
        Whether `ds` is dask-backed: then values are not checked.
    validate : bool
        Whether to validate at all.
    data_file : pathlib.Path, optional
        The file holding the A-scans, when not `path`.

    Raises
    ------
    FileFormatError
        For a newer grid format or an ambiguous amplitude scale.
    GridError
        When validation fails.
    """
    ds = _mend_decoded(ds, path)
    ds = canonical_grid(ds)
    _check_grid_format_version(ds, path)
    record_source(ds, path, data_file)
    if validate:
        validate_grid(ds, check_values=not lazy, source=str(path))
    return ds
