"""Shared fixtures of the ndtmap.plot tests: small maps with known regions, a grid with one echo patch, Chromium.

References: pulse-echo depth d = c t / 2 (Krautkramer, Ultrasonic Testing of Materials, ch. 2, from memory);
the steel velocity from the same book's table of velocities (from memory).
"""

from __future__ import annotations

import os

import numpy as np
import pytest
import xarray as xr

from ndtmap.grid.examples import example_grid
from ndtmap.plot import find_chromium

STEEL_M_S = 5920.0  # longitudinal velocity of steel (Krautkramer, table of velocities, from memory)

# a non-uniform grid with an irregular reflector: a ring (a hole in the -6 dB region), a diagonal touch
SCAN = np.array([0.0, 1.0, 2.5, 3.0, 4.5, 6.0, 6.5, 8.0, 9.0, 11.0, 12.0, 13.5])
INDEX = np.array([0.0, 2.0, 3.0, 5.0, 5.5, 7.5, 9.0, 10.0, 12.0])


def make_map(values, scan, index, **attrs):
    """A map on (scan, index) with the attrs of an amplitude map (override with `attrs`)."""
    base = {"units": "%FSH", "long_name": "gate flaw peak amplitude", "probe_diameter_mm": 10.0,
            "probe_frequency_mhz": 5.0, "velocity_m_s": STEEL_M_S}
    base.update(attrs)
    return xr.DataArray(np.asarray(values, dtype=float), dims=("scan", "index"),
                        coords={"scan": ("scan", np.asarray(scan, float), {"units": "mm"}),
                                "index": ("index", np.asarray(index, float), {"units": "mm"})}, attrs=base)


@pytest.fixture()
def amp_map():
    """The map builder :func:`make_map`."""
    return make_map


@pytest.fixture()
def ring_map():
    """A map on the non-uniform SCAN x INDEX positions: a ring around a dip, a corner touch, a small reflector."""
    a = np.full((SCAN.size, INDEX.size), 2.0)
    a[2:7, 2:7] = 70.0
    a[4, 4] = 20.0  # a dip below half the peak inside: a hole in the -6 dB region
    a[3, 3] = 90.0  # the peak
    a[7, 7] = 60.0  # touches the region at a corner only (8-connected: part of it)
    a[9, 1] = 80.0  # a separate small reflector
    return make_map(a, SCAN, INDEX)


@pytest.fixture()
def plate_grid():
    """A grid with an echo at 2.5 us (7.4 mm in steel) on a patch of positions."""
    g = example_grid((5.0,), (60.0,), n_scan=12, n_index=8)
    t = g["time"].values
    burst = 80.0 * np.exp(-0.5 * ((t - 2.5) / 0.15) ** 2) * np.cos(2 * np.pi * 5.0 * (t - 2.5))
    a = g["ascan"].values.copy()
    a[3:8, 2:6, :] += burst.astype(np.float32)
    return g.copy(data={"ascan": a})


def need_browser():
    """Skip static-export tests without Chromium, unless NDTMAP_REQUIRE_BROWSER=1 (then fail)."""
    if find_chromium() is None:
        if os.environ.get("NDTMAP_REQUIRE_BROWSER") == "1":
            pytest.fail("NDTMAP_REQUIRE_BROWSER=1 but no Chromium was found for static figure export")
        pytest.skip("static figure export needs Chromium (apt-get install chromium)")


@pytest.fixture(scope="module")
def export():
    """One kaleido browser for the whole module."""
    need_browser()
    from ndtmap.plot import export_session

    with export_session():
        yield
