"""Sections detect only the A-scans they use: the same numbers as detecting the whole grid first."""

import numpy as np
import pytest
import xarray as xr
from helpers.burst_grids import plate_grid, with_missing

from ndtmap.scans import b_scan, d_scan, polyline_section
from ndtmap.signal import detected_signal


def whole_grid_then_pick(grid, detect, **isel):
    # detection acts on each A-scan alone (rectification and the Hilbert envelope run along time only;
    # scipy.signal.hilbert documentation), so picking first or detecting first must agree
    return detected_signal(grid, detect).isel(**isel)


@pytest.mark.parametrize("detect", ["rectified", "envelope", "none"])
@pytest.mark.parametrize("chunked", [False, True])
def test_sections_pick_then_detect(detect, chunked):
    g = with_missing(plate_grid(12.3, scan_mm=np.arange(5.0), index_mm=[0.0, 1.5, 3.0, 4.5]), [(1, 2)])
    if chunked:
        g = g.chunk({"scan": 2})
    b = b_scan(g, 3.0, detect=detect)
    np.testing.assert_array_equal(b.values, whole_grid_then_pick(g, detect, index=2).values)
    d = d_scan(g, 1.0, detect=detect)
    np.testing.assert_array_equal(d.values, whole_grid_then_pick(g, detect, scan=1).values)
    lin = b_scan(g, 2.25, method="linear", detect=detect)  # half way between index 1.5 and 3.0
    full = detected_signal(g, detect)
    want = 0.5 * full.isel(index=1) + 0.5 * full.isel(index=2)
    np.testing.assert_allclose(lin.values, want.values, rtol=1e-6, atol=1e-6)
    assert np.isnan(lin.values[1]).all()  # the missing A-scan at (1, 2) contributes
    poly = polyline_section(g, [(0.0, 0.0), (4.0, 4.5)], method="nearest", detect=detect)
    pick = full.sel(scan=xr.DataArray(poly.scan.values, dims="distance"),
                    index=xr.DataArray(poly["index"].values, dims="distance"), method="nearest")
    np.testing.assert_array_equal(poly.values, pick.values)
