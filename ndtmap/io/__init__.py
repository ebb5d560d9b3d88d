"""Reading and writing scan grids and results: NetCDF-4/HDF5, Zarr v3 and raw binary dumps.

The subpackage owns every file ndtmap reads or writes for data: scan grids,
result maps and sections, and the atomic write that reports, figures and
procedure files use too. The layout of the files is written down for other
programs in ``docs/grid-format.md``.

Formats
-------
* **NetCDF-4/HDF5** (suffix ``.nc``, ``.nc4``, ``.h5`` or ``.hdf5``), read and
  written with h5netcdf; lossless zlib + shuffle with a Fletcher-32 checksum
  per chunk.
* **Zarr v3** stores (a folder, usually ``*.zarr``); Blosc-zstd + shuffle with a
  CRC32C checksum per chunk. Zarr v2 stores are read too.
* **Raw little-endian binary dumps** described by a JSON "ndtmap raw sidecar"
  (suffix ``.json``, :data:`RAW_SIDECAR_FORMAT`, version
  :data:`RAW_SIDECAR_VERSION`), in any axis order and sample type of
  :data:`RAW_DTYPES`.

Modules
-------
* :mod:`ndtmap.io.containers`: :func:`open_grid` (any of the three formats),
  :func:`save_grid`, :func:`save_map`;
* :mod:`ndtmap.io.raw` and :mod:`ndtmap.io.sidecar`: :func:`import_raw`,
  :func:`export_raw` and the sidecar schema;
* :mod:`ndtmap.io.convert`: :func:`convert_to_zarr` and :func:`write_zarr`, block
  by block for grids of any size (also on a distributed cluster);
* :mod:`ndtmap.io.chunking`: when a grid is opened lazily
  (:data:`LAZY_MEMORY_SHARE`) and the chunk sizes (:func:`zarr_chunks`);
* :mod:`ndtmap.io.atomic`: :func:`atomic_write_bytes`, :func:`atomic_write_text`;
  every write goes to a temporary name in the target folder, is flushed to
  disk and then renamed, so an interrupted write never leaves a half-written
  file under the final name, and the file a dataset was read from is never
  overwritten;
* :mod:`ndtmap.io.attributes`, :mod:`ndtmap.io.reading`, :mod:`ndtmap.io.paths`:
  helpers shared by the modules above.

Files are opened read-only and nothing in a file is executed (no pickle, no
eval). Importing this subpackage does not import zarr, dask or distributed:
they are imported by the functions that need them.

Examples
--------
>>> import pathlib, tempfile
>>> import numpy as np
>>> from ndtmap.grid.schema import make_grid
>>> from ndtmap.io import open_grid, save_grid
>>> g = make_grid(np.zeros((2, 3, 4), np.float32), scan_mm=[0, 1], index_mm=[0, 2, 4],
...               time_us=[0, 0.02, 0.04, 0.06], velocity_m_s=5920,
...               probe_frequency_mhz=5, probe_diameter_mm=10)
>>> with tempfile.TemporaryDirectory() as tmp:
...     dict(open_grid(save_grid(g, pathlib.Path(tmp) / "KFP-0001.nc")).sizes)
{'scan': 2, 'index': 3, 'time': 4}
"""

from ndtmap.io.atomic import atomic_write_bytes, atomic_write_text
from ndtmap.io.chunking import DEFAULT_CHUNK_BYTES, LAZY_MEMORY_SHARE, zarr_chunks
from ndtmap.io.containers import open_grid, save_grid, save_map
from ndtmap.io.convert import convert_to_zarr, write_zarr
from ndtmap.io.raw import export_raw, import_raw
from ndtmap.io.sidecar import RAW_DTYPES, RAW_SIDECAR_FORMAT, RAW_SIDECAR_VERSION

__all__ = [
    "open_grid",
    "save_grid",
    "save_map",
    "import_raw",
    "export_raw",
    "atomic_write_bytes",
    "atomic_write_text",
    "convert_to_zarr",
    "write_zarr",
    "zarr_chunks",
    "LAZY_MEMORY_SHARE",
    "DEFAULT_CHUNK_BYTES",
    "RAW_SIDECAR_FORMAT",
    "RAW_SIDECAR_VERSION",
    "RAW_DTYPES",
]
