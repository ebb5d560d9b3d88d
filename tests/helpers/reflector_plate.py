"""A small contact plate with one flat reflector, for the procedure tests (echo times from the geometry)."""

import numpy as np

from helpers.burst_grids import STEEL_L, grid_from

THICKNESS_MM = 20.0
FLAW_DEPTH_MM = 8.0
BACKWALL_FSH = 80.0
SHADOWED_FSH = 20.0  # back wall under the reflector: 12 dB down
FLAW_FSH = 60.0
SCAN = np.arange(0.0, 15.0)
INDEX = np.arange(0.0, 12.0)


def echo_time_us(depth_mm: float) -> float:
    """Pulse-echo time of a straight-beam echo from `depth_mm` in steel, zero offset 0: 2 z / c."""
    return 2.0 * depth_mm / (STEEL_L * 1e-3)


def under_reflector(s: float, x: float) -> bool:
    return 5.0 <= s <= 9.0 and 4.0 <= x <= 7.0


def plate_with_reflector():
    def echoes(s, x):
        if under_reflector(s, x):
            return [(echo_time_us(FLAW_DEPTH_MM), FLAW_FSH), (echo_time_us(THICKNESS_MM), SHADOWED_FSH)]
        return [(echo_time_us(THICKNESS_MM), BACKWALL_FSH)]

    return grid_from(echoes, scan_mm=SCAN, index_mm=INDEX, duration_us=9.0,
                     attrs={"part_thickness_mm": THICKNESS_MM, "part_id": "KFP-TEST-1"})
