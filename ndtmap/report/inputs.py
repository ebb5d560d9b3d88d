"""What a report is made from: grid files, folders of them, grids in memory and computed analyses.

Also the safe names of part folders: no text from a file ever becomes a path.
"""

from __future__ import annotations

import hashlib
import os
import re
import unicodedata
from collections.abc import Iterable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import xarray as xr

from ndtmap.errors import FileFormatError, ParameterError, ParameterTypeError
from ndtmap.io import RAW_SIDECAR_FORMAT
from ndtmap.procedure import Analysis

__all__ = ["ReportInput", "collect_inputs", "grid_files", "safe_name", "unique_name", "file_sha256"]

_GRID_SUFFIXES = (".nc", ".nc4", ".h5", ".hdf5")
_WINDOWS_RESERVED = {"con", "prn", "aux", "nul", *(f"com{k}" for k in range(1, 10)), *(f"lpt{k}" for k in range(1, 10))}


def safe_name(text: Any, default: str = "part", *, max_length: int = 64) -> str:
    """A file-name slug of `text`: ASCII letters, digits, ``.``, ``_`` and ``-`` only, never a path.

    Parameters
    ----------
    text : str
        E.g. a part id or a file name from a grid.
    default : str
        Used when nothing safe is left.
    max_length : int
        Longest slug.

    Examples
    --------
    >>> safe_name("KFP-PL-2041"), safe_name("../../evil.nc"), safe_name("<script>"), safe_name("..")
    ('KFP-PL-2041', 'evil.nc', 'script', 'part')
    """
    s = unicodedata.normalize("NFKD", str(text)).encode("ascii", "ignore").decode("ascii")
    s = re.sub(r"[^A-Za-z0-9._-]+", "-", s)
    s = re.sub(r"-{2,}", "-", s).strip("-._")
    s = s[:max_length].strip("-._")
    if not s or s.split(".")[0].lower() in _WINDOWS_RESERVED:
        s = default if not s else f"{default}-{s}"
    return s


def unique_name(base: str, used: set[str]) -> str:
    """`base`, or `base` with ``-2``, ``-3`` ... when taken (case-insensitively); the name is added to `used`.

    Examples
    --------
    >>> used = {"index.html"}
    >>> unique_name("KFP-PW-1180", used), unique_name("KFP-PW-1180", used), unique_name("kfp-pw-1180", used)
    ('KFP-PW-1180', 'KFP-PW-1180-2', 'kfp-pw-1180-3')
    """
    name = base
    k = 2
    while name.lower() in used:
        name = f"{base}-{k}"
        k += 1
    used.add(name.lower())
    return name


def _is_sidecar(path: Path) -> bool:
    try:
        if path.stat().st_size > 64 * 2**20:
            return False
        with open(path, encoding="utf-8-sig", errors="replace") as fh:
            return RAW_SIDECAR_FORMAT in fh.read(4096)
    except OSError:
        return False


def grid_files(folder: str | os.PathLike[str]) -> list[Path]:
    """The grid files in `folder` (not its sub-folders): NetCDF files, Zarr stores and raw sidecars, by name.

    ``.json`` files count when they are raw-dump sidecars (their first 4 kB
    name the ``"ndtmap raw sidecar"`` format).

    Raises
    ------
    FileFormatError
        When `folder` is not a folder.
    """
    p = Path(folder)
    if not p.is_dir():
        raise FileFormatError(f"`{p}` is not a folder")
    out = []
    for child in sorted(p.iterdir(), key=lambda c: c.name):
        suffix = child.suffix.lower()
        if child.is_dir():
            if (child / "zarr.json").exists():
                out.append(child)
        elif suffix in _GRID_SUFFIXES or (suffix == ".json" and _is_sidecar(child)):
            out.append(child)
    return out


def file_sha256(path: Path | None) -> str | None:
    """SHA-256 of a file's bytes (hex), or None for no path or a folder (a Zarr store)."""
    if path is None or not path.is_file():
        return None
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


@dataclass(frozen=True)
class ReportInput:
    """One item to report.

    Exactly one of three kinds: a grid file to open (`path` only), a grid in
    memory (`grid`) or an analysis already computed by
    :func:`ndtmap.procedure.run_procedure` (`analysis`; `path` is then the
    file its ``source`` names, when that file exists).
    """

    label: str
    path: Path | None
    grid: xr.Dataset | None = None
    analysis: Any = None


def _existing_path(source: str | None) -> Path | None:
    if not source:
        return None
    try:
        p = Path(source)
        return p if p.exists() else None
    except (OSError, ValueError):  # e.g. a NUL character: not a path
        return None


def collect_inputs(paths_or_grids: Any) -> tuple[list[ReportInput], bool, list[Path]]:
    """The items to report, whether they form a batch, and every path given (for the output-folder check).

    Parameters
    ----------
    paths_or_grids : path, xarray.Dataset, Analysis, or a list of them
        A folder stands for every grid file in it (:func:`grid_files`) and makes a batch.

    Raises
    ------
    ParameterTypeError
        For an item of another type.
    ParameterError
        For an empty list or a folder without grid files.
    """
    if isinstance(paths_or_grids, xr.Dataset | str | os.PathLike | Analysis):
        given = [paths_or_grids]
    elif isinstance(paths_or_grids, Iterable):
        given = list(paths_or_grids)
    else:
        raise ParameterTypeError(
            "`paths_or_grids` must be a path, a scan grid, an Analysis or a list of them, "
            f"got {type(paths_or_grids).__name__}"
        )
    if not given:
        raise ParameterError("`paths_or_grids` is empty; give at least one grid file, folder, grid or analysis")
    items: list[ReportInput] = []
    paths: list[Path] = []
    batch = len(given) > 1
    for k, g in enumerate(given):
        if isinstance(g, xr.Dataset):
            items.append(ReportInput(f"grid {k + 1} (in memory)", None, grid=g))
        elif isinstance(g, Analysis):
            path = _existing_path(g.source)
            paths += [path] if path is not None else []
            items.append(ReportInput(g.source or f"analysis {k + 1} (in memory)", path, analysis=g))
        elif isinstance(g, str | os.PathLike):
            p = Path(g)
            paths.append(p)
            if p.is_dir() and not (p / "zarr.json").exists():
                found = grid_files(p)
                if not found:
                    raise ParameterError(
                        f"the folder `{p}` holds no grid files (.nc, .zarr stores, raw .json sidecars)"
                    )
                items += [ReportInput(str(f), f) for f in found]
                batch = True
            else:
                items.append(ReportInput(str(p), p))
        else:
            raise ParameterTypeError(
                f"`paths_or_grids[{k}]` must be a path, a scan grid (xarray.Dataset) or an Analysis "
                f"(from ndtmap.procedure.run_procedure), got {type(g).__name__}"
            )
    return items, batch, paths
