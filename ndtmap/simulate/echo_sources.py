"""How each reflecting surface deposits its patches into the impulse histogram.

Two kinds of source:

* extended horizontal surfaces (the back wall, also corroded, its multiples,
  planar reflectors and their repeat echoes): a square stencil of patches
  around each probe position, cut by the reflector's outline (fractional
  coverage on sub-points) and by the straight-ray shadows of reflectors
  above, weighted with the plane correction of :class:`ndtmap.simulate.model._Model`;
* compact reflectors (flat-bottomed and side-drilled holes, and their
  second-leg images for angle beams): a fixed set of patches on the
  reflector itself, seen from every probe position.

The weights follow the patch-sum law in :mod:`ndtmap.simulate.model`.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np

from ndtmap.simulate.model import _Histogram, _lateral, _Model, _stencil, _water_delay
from ndtmap.simulate.reflectors import FlatBottomHole, Reflector, SideDrilledHole

_SUB = (np.arange(3) - 1.0) / 3.0  # 3 x 3 sub-points per patch for fractional coverage


def _coverage(covers, x: np.ndarray, y: np.ndarray, step: float | None, bbox=None) -> np.ndarray:
    """Fraction of each patch (centre x, y, side `step`) that `covers` says is inside.

    Patches whose centre lies farther than a patch from the reflector's bounding box
    are outside; the others are sampled on 3 x 3 sub-points.
    """
    x, y = np.broadcast_arrays(x, y)
    if step is None:
        return covers(x, y).astype(np.float64)
    total = np.zeros(x.shape)
    if bbox is not None:
        x0, x1, y0, y1 = bbox
        cand = (x >= x0 - step) & (x <= x1 + step) & (y >= y0 - step) & (y <= y1 + step)
        if not cand.any():
            return total
        xc, yc = x[cand], y[cand]
    else:
        cand, xc, yc = None, x, y
    acc = np.zeros(xc.shape)
    for sx in _SUB:
        for sy in _SUB:
            acc += covers(xc + sx * step, yc + sy * step)
    acc /= _SUB.size**2
    if cand is None:
        return acc
    total[cand] = acc
    return total


def _transmitted(qx, qy, qz, px, py, shadowers, step: float | None = None) -> np.ndarray:
    """Fraction of each patch that the straight ray from the probe (px, py, 0) reaches past shadowers."""
    clear = np.ones(np.broadcast(qx, qy, qz, px, py).shape)
    for refl in shadowers:
        zs = refl.depth_mm
        above = qz > zs + 1e-6
        if not np.any(above):
            continue
        ratio = np.where(above, zs / np.maximum(qz, 1e-9), 0.0)
        cx = px + (qx - px) * ratio
        cy = py + (qy - py) * ratio
        scaled = None if step is None else step * float(np.max(ratio))
        clear *= 1.0 - np.where(above, _coverage(refl.covers, cx, cy, scaled, refl.bbox), 0.0)
    return clear


def _extended_layer(
    hist: _Histogram,
    px: np.ndarray,
    py: np.ndarray,
    model: _Model,
    *,
    covers,
    bbox=None,
    depth_fn,
    z_range: tuple[float, float],
    gain: float,
    shadowers: Sequence[Reflector],
    multiple: int = 1,
    covers_fraction: float = 1.0,
    full_cover: bool = False,
) -> None:
    """Deposit the echo of an extended horizontal surface for each probe position."""
    z_lo, z_hi = z_range
    weq_all = model.water_equivalent_mm(px)
    step = model.stencil_step(z_lo * multiple + float(weq_all.min()))
    ox, oy = _stencil(step, model.cutoff_radius(z_hi * multiple + float(weq_all.max())))
    block = max(1, int(2_000_000 // max(ox.size, 1)))
    for b0 in range(0, px.size, block):
        sel = slice(b0, min(b0 + block, px.size))
        bx, by, weq = px[sel], py[sel], weq_all[sel]
        r = np.hypot(ox, oy)[None, :]
        qx = bx[:, None] + ox[None, :]
        qy = by[:, None] + oy[None, :]
        z = depth_fn(qx, qy) * np.ones_like(qx)
        zm = z * multiple
        if full_cover:
            frac = np.ones(qx.shape)
        else:
            frac = _coverage(
                covers,
                bx[:, None] + ox[None, :] * covers_fraction,
                by[:, None] + oy[None, :] * covers_fraction,
                step * covers_fraction,
                bbox,
            )
        frac = frac * _transmitted(qx, qy, z, bx[:, None], by[:, None], shadowers, step)
        inside = frac > 0
        pos = np.broadcast_to(np.arange(sel.start, sel.stop)[:, None], qx.shape)
        along = zm + weq[:, None]
        dist = np.sqrt(r * r + along * along)
        path = np.sqrt(r * r + zm * zm)
        w = (
            gain
            * model.s_law(dist)
            * _lateral(model, np.broadcast_to(r, qx.shape), along)
            * model.plane_correction(along)
            * (step * step)
            * frac
            * 10.0 ** (-2.0 * model.alpha * path / 20.0)
        )
        tau = 2.0 * path / model.c_mm_us + _water_delay(model, bx)[:, None]
        hist.deposit(pos[inside], tau[inside], w[inside])


def _point_patches(refl: Reflector, model: _Model) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Sample a compact reflector as patches: x, y, depth, area (mm^2 or mm^2-equivalent)."""
    h = model.stencil_step(refl.depth_mm)
    if model.sin_t > 0.05:
        h = min(h, model.lam / (6.0 * model.sin_t))
    if isinstance(refl, FlatBottomHole):
        r = 0.5 * refl.diameter_mm
        hs = min(h, refl.diameter_mm / 8.0)
        g = np.arange(-r, r + hs / 2, hs)
        gx, gy = np.meshgrid(g, g, indexing="ij")
        keep = gx**2 + gy**2 <= r * r
        gx, gy = gx[keep], gy[keep]
        area = np.full(gx.size, math.pi * r * r / gx.size)
        return gx + refl.scan_mm, gy + refl.index_mm, np.full(gx.size, refl.depth_mm), area
    if isinstance(refl, SideDrilledHole):
        (x0, y0), (x1, y1) = refl.start_mm, refl.end_mm
        length = math.hypot(x1 - x0, y1 - y0)
        n = max(2, int(math.ceil(length / h)) + 1)
        t = np.linspace(0.0, 1.0, n)
        # effective specular width across a cylinder of radius rho: |int exp(i k x^2/rho) dx| = sqrt(lambda rho / 2)
        # (Kirchhoff stationary-phase estimate)
        width = math.sqrt(model.lam * 0.5 * refl.diameter_mm / 2.0)
        area = np.full(n, width * length / (n - 1))
        area[[0, -1]] *= 0.5
        return x0 + t * (x1 - x0), y0 + t * (y1 - y0), np.full(n, refl.depth_mm), area
    raise TypeError(type(refl))  # pragma: no cover


def _point_layer(
    hist: _Histogram,
    px: np.ndarray,
    py: np.ndarray,
    model: _Model,
    patches: tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray],
    *,
    gain: float,
    shadowers: Sequence[Reflector],
) -> None:
    """Deposit the echoes of a compact reflector's patches (x, y, depth, area) for each probe position.

    Patches behind the beam (``along <= 0``) or fully shadowed give nothing.
    """
    qx, qy, qz, area = patches
    dx = qx[None, :] - px[:, None]
    dy = qy[None, :] - py[:, None]
    dz = np.broadcast_to(qz[None, :], dx.shape)
    path = np.sqrt(dx * dx + dy * dy + dz * dz)
    along_part = dx * model.sin_t + dz * model.cos_t
    rho = np.sqrt(np.maximum(path * path - along_part * along_part, 0.0))
    weq = model.water_equivalent_mm(px)[:, None]
    along = along_part + weq
    dist = path + weq
    front = along_part > 0
    clear = _transmitted(qx[None, :], qy[None, :], dz, px[:, None], py[:, None], shadowers)
    w = (
        gain
        * model.s_law(dist)
        * _lateral(model, rho, along)
        * area[None, :]
        * clear
        * 10.0 ** (-2.0 * model.alpha * path / 20.0)
    )
    keep = front & (clear > 0)
    pos = np.broadcast_to(np.arange(px.size)[:, None], dx.shape)
    tau = 2.0 * path / model.c_mm_us + _water_delay(model, px)[:, None]
    hist.deposit(pos[keep], tau[keep], w[keep])


