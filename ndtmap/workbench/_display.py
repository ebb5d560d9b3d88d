"""Display thinning of the workbench (private): maps and sections merged into fewer cells for the screen.

A map or section with more positions (or samples) than a screen can show is
thinned for display only: blocks of neighbouring cells are merged, keeping
the largest value (amplitude, loss, sections) or the smallest (depth,
thickness: the thinnest wall stays visible), and the figure says so in a
note under its title. Sizing and the indication list always use every
position; figures saved with :func:`ndtmap.workbench.view_figures.save_views`
are not thinned.
"""

from __future__ import annotations

import math

import numpy as np
import xarray as xr

__all__ = ["MAX_MAP_CELLS", "MAX_SECTION_POSITIONS", "MAX_SECTION_SAMPLES", "thin", "display_map", "display_section"]

#: Most cells per axis drawn on the plan view (a denser map is thinned for display).
MAX_MAP_CELLS = 300
#: Most positions and samples drawn on a section.
MAX_SECTION_POSITIONS = 400
MAX_SECTION_SAMPLES = 500


def _blocks(n: int, limit: int | None) -> int:
    return 1 if limit is None or n <= limit else int(math.ceil(n / limit))


def _block_means(coords: np.ndarray, f: int) -> np.ndarray:
    """Mean coordinate of each block of `f` neighbours (the last block may be shorter)."""
    if f == 1:
        return coords
    m = int(math.ceil(coords.size / f))
    c = np.concatenate([coords, np.full(m * f - coords.size, np.nan)]).reshape(m, f)
    return np.array([float(np.mean(row[np.isfinite(row)])) for row in c])


def _reduce_axis(values: np.ndarray, f: int, axis: int, how: str) -> np.ndarray:
    if f == 1:
        return values
    n = values.shape[axis]
    m = int(math.ceil(n / f))
    fill = -np.inf if how == "max" else np.inf
    v = np.moveaxis(values, axis, 0)
    finite = np.where(np.isnan(v), fill, v)
    if m * f > n:
        finite = np.concatenate([finite, np.full((m * f - n, *finite.shape[1:]), fill)], axis=0)
    blocks = finite.reshape(m, f, *finite.shape[1:])
    red = blocks.max(axis=1) if how == "max" else blocks.min(axis=1)
    return np.moveaxis(np.where(np.isinf(red), np.nan, red), 0, axis)


def thin(values: np.ndarray, c0: np.ndarray, c1: np.ndarray, limit0: int | None, limit1: int | None,
         how: str = "max") -> tuple[np.ndarray, np.ndarray, np.ndarray, tuple[int, int]]:
    """Merge blocks of cells of a 2-D array for display (largest or smallest finite value per block).

    Parameters
    ----------
    values : ndarray (n0, n1)
    c0, c1 : ndarray
        Coordinates along the two axes; the block coordinate is the mean.
    limit0, limit1 : int or None
        Most cells kept along each axis (None: keep all).
    how : {'max', 'min'}

    Returns
    -------
    values, c0, c1, (f0, f1)
        The thinned array, its coordinates and the block sizes.

    Examples
    --------
    >>> v, a, b, f = thin(np.arange(16.0).reshape(4, 4), np.arange(4.0), np.arange(4.0), 2, 2)
    >>> v.tolist(), a.tolist(), f
    ([[5.0, 7.0], [13.0, 15.0]], [0.5, 2.5], (2, 2))
    """
    v = np.asarray(values, dtype=np.float64)
    f0, f1 = _blocks(v.shape[0], limit0), _blocks(v.shape[1], limit1)
    v = _reduce_axis(_reduce_axis(v, f0, 0, how), f1, 1, how)
    a = _block_means(np.asarray(c0, dtype=np.float64), f0)
    b = _block_means(np.asarray(c1, dtype=np.float64), f1)
    return v, a, b, (f0, f1)


def _note(f: tuple[int, int], what: str, sizing: bool) -> str | None:
    if f == (1, 1):
        return None
    tail = "; sizing uses every position" if sizing else ""
    return f"display only: blocks of {f[0]} \u00d7 {f[1]} {what} merged{tail}"


def display_map(map_da: xr.DataArray, *, max_cells: int | None = MAX_MAP_CELLS,
                below_fsh: float | None = None) -> tuple[xr.DataArray, str | None]:
    """The map as displayed: thinned to at most `max_cells` per axis, and a note saying so (None if not).

    Parameters
    ----------
    map_da : xarray.DataArray (scan, index)
    max_cells : int or None
        None: never thinned.
    below_fsh : float, optional
        Leave %FSH positions below this level blank.

    Examples
    --------
    >>> m = xr.DataArray(np.arange(16.0).reshape(4, 4), dims=("scan", "index"),
    ...                  coords={"scan": np.arange(4.0), "index": np.arange(4.0)}, attrs={"units": "mm"})
    >>> shown, note = display_map(m, max_cells=2)
    >>> shown.values.tolist(), note
    ([[0.0, 2.0], [8.0, 10.0]], 'display only: blocks of 2 × 2 positions merged; sizing uses every position')
    """
    m = map_da.transpose("scan", "index")
    values = np.asarray(m.values, dtype=np.float64)
    units = str(map_da.attrs.get("units", ""))
    masked = units == "%FSH" and below_fsh is not None
    if masked:
        with np.errstate(invalid="ignore"):
            values = np.where(values >= float(below_fsh), values, np.nan)
    scan = np.asarray(m["scan"].values, dtype=np.float64)
    index = np.asarray(m["index"].values, dtype=np.float64)
    z, s, i, f = thin(values, scan, index, max_cells, max_cells, "min" if units == "mm" else "max")
    if f == (1, 1) and not masked:
        return map_da, None
    out = xr.DataArray(z, dims=("scan", "index"), coords={"scan": ("scan", s, m["scan"].attrs),
                                                          "index": ("index", i, m["index"].attrs)},
                       name=map_da.name, attrs=dict(map_da.attrs))
    return out, _note(f, "positions", True)


def display_section(section: xr.DataArray, along: str, *, max_positions: int | None = MAX_SECTION_POSITIONS,
                    max_samples: int | None = MAX_SECTION_SAMPLES) -> tuple[xr.DataArray, str | None]:
    """A B-scan (`along`='scan') or D-scan ('index') as displayed: thinned, with a note saying so (None if not)."""
    sec = section.transpose(along, "time")
    pos = np.asarray(sec[along].values, dtype=np.float64)
    t = np.asarray(sec["time"].values, dtype=np.float64)
    z, p, tt, f = thin(np.asarray(sec.values, dtype=np.float64), pos, t, max_positions, max_samples, "max")
    if f == (1, 1):
        return section, None
    depth = _block_means(np.asarray(sec["depth"].values, dtype=np.float64), f[1])
    out = xr.DataArray(z, dims=(along, "time"),
                       coords={along: (along, p, sec[along].attrs), "time": ("time", tt, sec["time"].attrs),
                               "depth": ("time", depth, sec["depth"].attrs)},
                       name=section.name, attrs=dict(section.attrs))
    return out, _note(f, "cells", False)
