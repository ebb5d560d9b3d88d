"""Reflectors inside a simulated part, each with the truth it leaves in the grid.

Three shapes: a flat-bottomed hole (a disc parallel to the surface), a
side-drilled hole (a cylinder parallel to the surface) and a planar reflector
of any polygonal outline (a lamination, a bonded or unbonded layer). Each
class knows its plan-view bounding box, which points of the plane it covers,
and writes its own truth record (:meth:`truth`), the sizes later results are
checked against.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from ndtmap._shared.validate import float_in_range
from ndtmap.errors import ParameterError

__all__ = ["FlatBottomHole", "SideDrilledHole", "PlanarReflector", "Reflector"]


@dataclass(frozen=True)
class FlatBottomHole:
    """A flat-bottomed hole drilled from the back wall (a disc reflector).

    Parameters
    ----------
    scan_mm, index_mm : float
        Centre of the hole, mm.
    depth_mm : float
        Depth of the hole bottom below the front surface, mm.
    diameter_mm : float
        Hole diameter, mm.
    label : str, optional
    """

    scan_mm: float
    index_mm: float
    depth_mm: float
    diameter_mm: float
    label: str = ""

    @property
    def bbox(self) -> tuple[float, float, float, float]:
        """Plan-view bounding box ``(scan_min, scan_max, index_min, index_max)``, mm."""
        r = 0.5 * self.diameter_mm
        return self.scan_mm - r, self.scan_mm + r, self.index_mm - r, self.index_mm + r

    def covers(self, x: np.ndarray, y: np.ndarray) -> np.ndarray:
        """True where the plan-view points (x, y) in mm fall on the reflector."""
        r = 0.5 * self.diameter_mm
        return (x - self.scan_mm) ** 2 + (y - self.index_mm) ** 2 <= r * r

    def truth(self) -> dict[str, Any]:
        """The truth record of the reflector (type, label, position and sizes in mm)."""
        return {
            "type": "flat_bottom_hole",
            "label": self.label,
            "scan_mm": self.scan_mm,
            "index_mm": self.index_mm,
            "depth_mm": self.depth_mm,
            "diameter_mm": self.diameter_mm,
            "length_scan_mm": self.diameter_mm,
            "length_index_mm": self.diameter_mm,
            "area_mm2": math.pi * self.diameter_mm**2 / 4.0,
        }


@dataclass(frozen=True)
class SideDrilledHole:
    """A side-drilled hole: a cylinder parallel to the surface.

    Parameters
    ----------
    depth_mm : float
        Depth of the hole axis, mm.
    diameter_mm : float
        Hole diameter, mm.
    start_mm, end_mm : (float, float)
        Plan-view end points of the hole axis as (scan, index), mm.
    label : str, optional
    """

    depth_mm: float
    diameter_mm: float
    start_mm: tuple[float, float]
    end_mm: tuple[float, float]
    label: str = ""

    @property
    def bbox(self) -> tuple[float, float, float, float]:
        """Plan-view bounding box ``(scan_min, scan_max, index_min, index_max)``, mm."""
        (x0, y0), (x1, y1) = self.start_mm, self.end_mm
        r = 0.5 * self.diameter_mm
        return min(x0, x1) - r, max(x0, x1) + r, min(y0, y1) - r, max(y0, y1) + r

    def covers(self, x: np.ndarray, y: np.ndarray) -> np.ndarray:
        """True where the plan-view points (x, y) in mm fall on the reflector."""
        (x0, y0), (x1, y1) = self.start_mm, self.end_mm
        dx, dy = x1 - x0, y1 - y0
        length2 = dx * dx + dy * dy
        t = np.clip(((x - x0) * dx + (y - y0) * dy) / length2, 0.0, 1.0)
        return np.hypot(x - (x0 + t * dx), y - (y0 + t * dy)) <= 0.5 * self.diameter_mm

    def truth(self) -> dict[str, Any]:
        """The truth record of the reflector (type, label, position and sizes in mm)."""
        (x0, y0), (x1, y1) = self.start_mm, self.end_mm
        return {
            "type": "side_drilled_hole",
            "label": self.label,
            "depth_mm": self.depth_mm,
            "diameter_mm": self.diameter_mm,
            "start_mm": list(self.start_mm),
            "end_mm": list(self.end_mm),
            "length_mm": math.hypot(x1 - x0, y1 - y0),
            "scan_mm": 0.5 * (x0 + x1),
            "index_mm": 0.5 * (y0 + y1),
        }


@dataclass(frozen=True)
class PlanarReflector:
    """A planar reflector parallel to the surface (e.g. a lamination).

    Parameters
    ----------
    depth_mm : float
        Depth below the front surface, mm.
    outline_mm : sequence of (scan, index)
        Polygon of the reflector in plan view, mm (at least 3 vertices).
    reflectivity : float, default -1
        Reflection coefficient (-1: a gap filled with air).
    label : str, optional
    """

    depth_mm: float
    outline_mm: tuple[tuple[float, float], ...]
    reflectivity: float = -1.0
    label: str = ""

    def __post_init__(self) -> None:
        pts = tuple((float(a), float(b)) for a, b in self.outline_mm)
        if len(pts) < 3:
            raise ParameterError(f"`outline_mm` needs at least 3 vertices, got {len(pts)}")
        object.__setattr__(self, "outline_mm", pts)
        float_in_range("reflectivity", self.reflectivity, -1.0, 1.0)

    @classmethod
    def rectangle(
        cls,
        scan_mm: tuple[float, float],
        index_mm: tuple[float, float],
        depth_mm: float,
        *,
        reflectivity: float = -1.0,
        label: str = "",
    ) -> PlanarReflector:
        """A rectangle with sides along the scan and index axes."""
        (x0, x1), (y0, y1) = sorted(scan_mm), sorted(index_mm)
        return cls(depth_mm, ((x0, y0), (x1, y0), (x1, y1), (x0, y1)), reflectivity, label)

    @classmethod
    def ellipse(
        cls,
        centre_mm: tuple[float, float],
        semi_axes_mm: tuple[float, float],
        depth_mm: float,
        *,
        vertices: int = 96,
        reflectivity: float = -1.0,
        label: str = "",
    ) -> PlanarReflector:
        """An ellipse with axes along scan and index (a polygon of `vertices`)."""
        phi = np.linspace(0.0, 2.0 * np.pi, vertices, endpoint=False)
        pts = tuple(
            (centre_mm[0] + semi_axes_mm[0] * math.cos(p), centre_mm[1] + semi_axes_mm[1] * math.sin(p)) for p in phi
        )
        return cls(depth_mm, pts, reflectivity, label)

    @property
    def bbox(self) -> tuple[float, float, float, float]:
        """Plan-view bounding box ``(scan_min, scan_max, index_min, index_max)``, mm."""
        xs = [p[0] for p in self.outline_mm]
        ys = [p[1] for p in self.outline_mm]
        return min(xs), max(xs), min(ys), max(ys)

    def covers(self, x: np.ndarray, y: np.ndarray) -> np.ndarray:
        """Even-odd point-in-polygon test, vectorised over points."""
        x, y = np.broadcast_arrays(np.asarray(x, dtype=np.float64), np.asarray(y, dtype=np.float64))
        x0, x1, y0, y1 = self.bbox
        cand = (x >= x0) & (x <= x1) & (y >= y0) & (y <= y1)
        inside = np.zeros(x.shape, dtype=bool)
        if not cand.any():
            return inside
        xc, yc = x[cand], y[cand]
        hit = np.zeros(xc.shape, dtype=bool)
        pts = self.outline_mm
        n = len(pts)
        for i in range(n):
            xa, ya = pts[i]
            xb, yb = pts[(i + 1) % n]
            if ya == yb:
                continue
            crosses = (ya > yc) != (yb > yc)
            x_at = xa + (yc - ya) * (xb - xa) / (yb - ya)
            hit ^= crosses & (xc < x_at)
        inside[cand] = hit
        return inside

    def truth(self) -> dict[str, Any]:
        """The truth record of the reflector (type, label, position and sizes in mm)."""
        xs = np.array([p[0] for p in self.outline_mm])
        ys = np.array([p[1] for p in self.outline_mm])
        area = 0.5 * abs(float(np.dot(xs, np.roll(ys, -1)) - np.dot(ys, np.roll(xs, -1))))
        return {
            "type": "planar",
            "label": self.label,
            "depth_mm": self.depth_mm,
            "outline_mm": [list(p) for p in self.outline_mm],
            "scan_range_mm": [float(xs.min()), float(xs.max())],
            "index_range_mm": [float(ys.min()), float(ys.max())],
            "length_scan_mm": float(xs.max() - xs.min()),
            "length_index_mm": float(ys.max() - ys.min()),
            "area_mm2": area,
            "scan_mm": float(0.5 * (xs.min() + xs.max())),
            "index_mm": float(0.5 * (ys.min() + ys.max())),
            "reflectivity": self.reflectivity,
        }


#: Any of the reflector classes.
Reflector = FlatBottomHole | SideDrilledHole | PlanarReflector
