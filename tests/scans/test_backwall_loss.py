"""Back-wall loss defined once: backwall_loss_db against nominal_backwall_fsh, used by backwall_loss_map."""

import numpy as np
import pytest
import xarray as xr
from helpers.burst_grids import plate_grid

from ndtmap.errors import CalibrationError
from ndtmap.gates import Gate
from ndtmap.scans import amplitude_map, backwall_loss_db, backwall_loss_map, nominal_backwall_fsh


def test_loss_is_20_log10_of_nominal_over_amplitude_with_a_floor():
    # the decibel of an amplitude ratio, 20 log10(A1 / A2) (IEC 60027-3; from memory)
    assert backwall_loss_db(40.0, 80.0) == pytest.approx(20 * np.log10(2.0))
    assert backwall_loss_db(80.0, 80.0) == pytest.approx(0.0)
    assert backwall_loss_db(100.0, 80.0) == pytest.approx(-20 * np.log10(100 / 80))  # stronger: negative loss
    # a vanished echo stays finite: the floor of 0.1 %FSH
    assert backwall_loss_db(0.0, 80.0) == pytest.approx(20 * np.log10(80 / 0.1))
    assert backwall_loss_db(0.0, 80.0, floor_fsh=1.0) == pytest.approx(20 * np.log10(80.0))
    out = backwall_loss_db(np.array([20.0, np.nan]), 80.0)
    assert out[0] == pytest.approx(20 * np.log10(4.0)) and np.isnan(out[1])


def test_loss_keeps_the_kind_and_laziness_of_a_dataarray():
    da = xr.DataArray(np.array([[40.0, 0.0], [np.nan, 80.0]]), dims=("scan", "index"),
                      coords={"scan": [0.0, 1.0], "index": [0.0, 2.0]}).chunk({"scan": 1})
    loss = backwall_loss_db(da, 80.0)
    assert isinstance(loss, xr.DataArray) and loss.chunks is not None
    np.testing.assert_allclose(loss.values, [[20 * np.log10(2), 20 * np.log10(800)], [np.nan, 0.0]])


def test_nominal_is_the_median_of_the_floored_amplitude_over_the_mask():
    a = np.array([[80.0, 82.0, 0.0], [np.nan, 78.0, 0.0]])
    assert nominal_backwall_fsh(a) == 78.0  # median of 80, 82, 0.1, 78, 0.1 (NaN left out)
    mask = np.array([[True, True, False], [True, True, False]])
    assert nominal_backwall_fsh(a, mask=mask) == 80.0
    with pytest.raises(CalibrationError, match="only missing"):
        nominal_backwall_fsh(a, mask=np.array([[False] * 3, [True, False, False]]))
    with pytest.raises(CalibrationError, match="no echo"):
        nominal_backwall_fsh(np.zeros((2, 2)))


def test_backwall_loss_map_uses_the_one_definition():
    grid = plate_grid(12.3, n_echoes=1)
    gate = Gate("bw", 10.0, 14.0, threshold_fsh=20.0)
    amp = amplitude_map(grid, gate)
    loss = backwall_loss_map(grid, gate)
    nominal = nominal_backwall_fsh(amp)
    assert loss.attrs["nominal_fsh"] == nominal
    np.testing.assert_allclose(loss.values, backwall_loss_db(amp, nominal).values)
