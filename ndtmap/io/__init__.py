"""ndtmap.io."""

from ndtmap.io.convert import (
    DEFAULT_CHUNK_BYTES,
    convert_to_zarr,
    write_zarr,
    zarr_chunks,
)
from ndtmap.io.grid_files import (
    LAZY_MEMORY_SHARE,
    RAW_DTYPES,
    RAW_SIDECAR_FORMAT,
    RAW_SIDECAR_VERSION,
    atomic_write_bytes,
    atomic_write_text,
    export_raw,
    import_raw,
    open_grid,
    save_grid,
    save_map,
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
    "DEFAULT_CHUNK_BYTES",
    "convert_to_zarr",
    "write_zarr",
    "zarr_chunks",
]
