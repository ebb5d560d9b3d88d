"""Display thinning of the workbench: blocks merged for the screen, keeping the extreme value of each block."""

from __future__ import annotations

import math

import numpy as np
import pytest
import xarray as xr

import ndtmap
from ndtmap.scans import b_scan
from ndtmap.simulate import sample_path
from ndtmap.workbench._display import display_map, display_section, thin
from ndtmap.workbench.state import WorkbenchState


def test_thin_keeps_the_largest_or_smallest_value_of_each_block():
    v = np.arange(30.0).reshape(5, 6)
    v[0, 0] = np.nan
    z, a, b, f = thin(v, np.arange(5.0), np.arange(6.0), 3, 3, "max")
    assert f == (2, 2) and z.shape == (3, 3)
    assert z[0, 0] == 7.0 and z[2, 2] == 29.0  # the last block holds one row (row 4)
    assert a.tolist() == [0.5, 2.5, 4.0]
    zmin = thin(v, np.arange(5.0), np.arange(6.0), 3, 3, "min")[0]
    assert zmin[0, 0] == 1.0  # NaN is ignored, never a value
    all_nan = thin(np.full((4, 4), np.nan), np.arange(4.0), np.arange(4.0), 2, 2)[0]
    assert np.isnan(all_nan).all()


@pytest.fixture(scope="module")
def plate():
    return ndtmap.open_grid(sample_path("plate_laminations.nc"))


def test_a_large_map_is_thinned_for_display_and_says_so(plate):
    m = WorkbenchState(plate).map()
    shown, note = display_map(m, max_cells=30)
    assert m.shape == (81, 41) and shown.shape == (math.ceil(81 / 3), math.ceil(41 / 2))
    assert float(np.nanmax(shown.values)) == pytest.approx(float(np.nanmax(m.values)))  # the peak survives
    assert shown.attrs["units"] == "%FSH" and shown.attrs["long_name"] == m.attrs["long_name"]
    assert note == "display only: blocks of 3 \u00d7 2 positions merged; sizing uses every position"
    same, none = display_map(m)
    assert same is m and none is None  # a map that fits is shown as it is


def test_thickness_keeps_the_thinnest_wall_and_amplitude_below_the_level_is_blank():
    t = xr.DataArray(np.full((6, 6), 12.0), dims=("scan", "index"),
                     coords={"scan": np.arange(6.0), "index": np.arange(6.0)}, attrs={"units": "mm"})
    t[4, 1] = 7.5
    shown, _ = display_map(t, max_cells=3)
    assert float(np.nanmin(shown.values)) == 7.5 and shown.values[2, 0] == 7.5
    a = t.copy(data=np.linspace(0.0, 70.0, 36).reshape(6, 6)).assign_attrs(units="%FSH")
    masked, note = display_map(a, below_fsh=30.0)
    assert note is None and np.all(np.isnan(masked.values[a.values < 30.0]))
    np.testing.assert_array_equal(masked.values[a.values >= 30.0], a.values[a.values >= 30.0])


def test_a_thinned_section_keeps_its_depth_axis(plate):
    sec = b_scan(plate, 24.0)
    shown, note = display_section(sec, "scan", max_positions=10, max_samples=100)
    f = math.ceil(sec.sizes["time"] / 100)
    assert shown.sizes["time"] == math.ceil(sec.sizes["time"] / f)
    # depth is linear in time (d = c (t - t0) / 2), so the block's mean depth is the depth of its mean time
    np.testing.assert_allclose(shown["depth"].values[:-1],
                               sec["depth"].values[: (shown.sizes["time"] - 1) * f].reshape(-1, f).mean(axis=1))
    assert float(shown.max()) == pytest.approx(float(sec.max()))
    assert note.startswith("display only") and "sizing" not in note
