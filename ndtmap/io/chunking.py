"""Laziness and chunk sizes: when a grid is opened with dask, and how it is cut into chunks.

Three chunk sizes matter, all holding whole A-scans (the full ``time`` axis,
which gates need in one piece):

* the on-disk chunks of :func:`ndtmap.io.save_grid` (:func:`storage_chunks`,
  about :data:`STORAGE_CHUNK_BYTES`): small enough for quick access to one B-scan;
* the dask chunks of lazily opened grids (:func:`dask_chunks`, about
  :data:`DASK_CHUNK_BYTES`), whole multiples of the on-disk chunks so that
  no stored chunk is read twice;
* the chunks of stores written by :func:`ndtmap.io.convert_to_zarr`
  (:func:`zarr_chunks`, about :data:`DEFAULT_CHUNK_BYTES`).

A grid is opened lazily when asked to, or when its A-scans would take more
than :data:`LAZY_MEMORY_SHARE` of the memory (:func:`want_lazy`).
"""

from __future__ import annotations

import math
import os
from collections.abc import Mapping
from pathlib import Path

import numpy as np
import xarray as xr

from ndtmap.errors import ParameterError, ParameterTypeError
from ndtmap.grid.schema import DIMS

__all__ = [
    "LAZY_MEMORY_SHARE",
    "STORAGE_CHUNK_BYTES",
    "DASK_CHUNK_BYTES",
    "DEFAULT_CHUNK_BYTES",
    "total_memory_bytes",
    "want_lazy",
    "is_lazy",
    "storage_chunks",
    "dask_chunks",
    "chunk_request",
    "zarr_chunks",
]

#: A grid whose A-scan array is larger than this share of the total memory
#: is opened lazily (dask-backed) when ``lazy=None``.
LAZY_MEMORY_SHARE = 0.25

#: On-disk chunks of saved grids, in bytes: small enough for quick access to one B-scan.
STORAGE_CHUNK_BYTES = 4 * 2**20
#: In-memory work units (dask chunks) of lazy grids, in bytes.
DASK_CHUNK_BYTES = 64 * 2**20
#: Chunks of stores written by convert_to_zarr, in bytes (uncompressed): big enough for fast
#: sequential reads, small enough that a few of them in memory at once stay far below what a laptop has.
DEFAULT_CHUNK_BYTES = 16 * 2**20
_FALLBACK_MEMORY_BYTES = 4 * 2**30  # used when the total memory cannot be read


def total_memory_bytes() -> int:
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


def want_lazy(lazy: bool | None, chunks: Mapping[str, int] | None, nbytes: int) -> bool:
    """Whether to open a grid lazily: as asked, always when `chunks` are given, else when it is large.

    Parameters
    ----------
    lazy : bool or None
        The caller's wish; None decides by size: lazy when `nbytes` exceeds
        :data:`LAZY_MEMORY_SHARE` of :func:`total_memory_bytes`.
    chunks : mapping or None
        The caller's chunk sizes; giving them means lazy.
    nbytes : int
        Size of the A-scan array in memory, in bytes.

    Raises
    ------
    ParameterTypeError, ParameterError
        For a `lazy` that is not a bool or None, or `chunks` with ``lazy=False``.

    Examples
    --------
    >>> want_lazy(None, {"scan": 16}, 1024), want_lazy(None, None, 1024)
    (True, False)
    """
    if lazy is not None and not isinstance(lazy, bool):
        raise ParameterTypeError(f"`lazy` must be True, False or None, got {lazy!r}")
    if chunks is not None:
        if lazy is False:
            raise ParameterError(
                "`chunks` was given with lazy=False; chunks only apply to lazy grids, drop one of them"
            )
        return True
    if lazy is None:
        return nbytes > LAZY_MEMORY_SHARE * total_memory_bytes()
    return lazy


def storage_chunks(shape: tuple[int, int, int], itemsize: int) -> tuple[int, int]:
    """On-disk (scan, index) chunk sizes of about 4 MiB, square-ish, whole A-scans."""
    n_scan, n_index, n_time = shape
    per_chunk = max(1, STORAGE_CHUNK_BYTES // max(1, n_time * itemsize))
    c_index = min(n_index, max(1, math.isqrt(per_chunk)))
    c_scan = min(n_scan, max(1, per_chunk // c_index))
    c_index = min(n_index, max(c_index, per_chunk // c_scan))
    return c_scan, c_index


def dask_chunks(shape: tuple[int, int, int], itemsize: int, storage: tuple[int, int] = (1, 1)) -> tuple[int, int]:
    """Dask (scan, index) chunk sizes of about 64 MiB, whole multiples of the storage chunks.

    Counted in storage blocks so that no on-disk chunk is read twice: as many blocks
    along `index` as fit (whole index lines when possible), then along `scan`.
    """
    n_scan, n_index, n_time = shape
    s_scan, s_index = max(1, min(storage[0], n_scan)), max(1, min(storage[1], n_index))
    blocks = max(1, DASK_CHUNK_BYTES // max(1, n_time * itemsize * s_scan * s_index))
    b_index = max(1, min(-(-n_index // s_index), blocks))
    b_scan = max(1, min(-(-n_scan // s_scan), max(1, blocks // b_index)))
    # an empty axis keeps chunks of 1, so that opening works and the validator reports the empty grid
    return max(1, min(n_scan, b_scan * s_scan)), max(1, min(n_index, b_index * s_index))


def chunk_request(
    chunks: Mapping[str, int] | None, shape: tuple[int, int, int], itemsize: int, storage: tuple[int, int]
) -> dict[str, int]:
    """Merge the user's chunk sizes with the defaults; `time` is always one chunk.

    A requested size that would cut stored chunks is rounded to a whole number of them (at least one).
    """
    c_scan, c_index = dask_chunks(shape, itemsize, storage)
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


def is_lazy(ds: xr.Dataset) -> bool:
    """True when any variable of `ds` is dask-backed."""
    return any(v.chunks is not None for v in ds.variables.values())


def zarr_chunks(shape: tuple[int, int, int], itemsize: int, *, chunk_scan: int | None = None,
                chunk_bytes: int = DEFAULT_CHUNK_BYTES) -> tuple[int, int, int]:
    """Chunk sizes ``(scan, index, time)`` of a converted store: whole A-scans, whole index lines if they fit.

    Parameters
    ----------
    shape : (n_scan, n_index, n_time)
    itemsize : int
        Bytes per sample.
    chunk_scan : int, optional
        Scan lines per chunk; default as many whole index lines as fit in
        `chunk_bytes` (at least one).
    chunk_bytes : int
        Target uncompressed chunk size in bytes.

    Examples
    --------
    >>> zarr_chunks((500, 500, 1000), 2)      # 16 scan lines of 500 int16 A-scans of 2 kB: 16 MB
    (16, 500, 1000)
    >>> zarr_chunks((500, 500, 1000), 2, chunk_scan=8)
    (8, 500, 1000)
    """
    n_scan, n_index, n_time = (int(v) for v in shape)
    ascan_bytes = max(1, n_time * itemsize)
    per_chunk = max(1, chunk_bytes // ascan_bytes)  # A-scans per chunk
    if chunk_scan is not None:
        c_scan = min(n_scan, chunk_scan)
        c_index = n_index if c_scan * n_index <= 4 * per_chunk else max(1, per_chunk // c_scan)
        return c_scan, min(n_index, c_index), n_time
    if n_index <= per_chunk:
        return min(n_scan, max(1, per_chunk // n_index)), n_index, n_time
    return 1, min(n_index, per_chunk), n_time
