"""An A-scan holding an infinite sample is missing, like a NaN one (the grid format's rule).

The grid format (``ndtmap.grid.schema.missing_ascans``) defines a missing
A-scan as one with a NaN or infinite sample anywhere: its results are missing,
never a number. These tests check that every gate result follows that rule for
+inf and -inf samples inside and outside the window, whatever the kernel,
detection, signal kind, dtype or backend, and that the other positions give
the peak a plain numpy computation gives.
"""

import numpy as np
import pytest
from helpers.burst_grids import to_backend

from ndtmap.gates import Gate, evaluate_gate
from ndtmap.grid import make_grid
from ndtmap.grid.schema import missing_ascans

VELOCITY = 5920.0  # m/s
DT_US = 0.02
N_TIME = 500
GATE_MM = (1.0, 10.0)


def _grid(signal: str, dtype, bad: dict[tuple[int, int], tuple[int, float]]):
    """A 4 x 3 grid of a decaying echo, with `bad` = {(scan, index): (sample, value)} written in."""
    t = np.arange(N_TIME) * DT_US
    rng = np.random.default_rng(3)
    a = (rng.uniform(5.0, 60.0, (4, 3, 1)) * np.exp(-0.5 * ((t - 2.0) / 0.3) ** 2)).astype(dtype)
    if signal == "rf":
        a = a * np.cos(2 * np.pi * 5.0 * (t - 2.0)).astype(dtype)
    for (i, j), (k, value) in bad.items():
        a[i, j, k] = value
    return make_grid(a, scan_mm=np.arange(4.0), index_mm=np.arange(3.0), time_us=t, velocity_m_s=VELOCITY,
                     probe_frequency_mhz=5.0, probe_diameter_mm=10.0, signal=signal)


def _numpy_peak(grid) -> np.ndarray:
    """Highest rectified sample in the gate, NaN where any sample is not finite: numpy alone."""
    a = np.asarray(grid["ascan"].values, dtype=float)
    t = grid["time"].values
    per_mm = 2.0 / (VELOCITY * 1e-3)  # pulse-echo us per mm of depth, straight beam
    inside = (t >= GATE_MM[0] * per_mm - 1e-9) & (t <= GATE_MM[1] * per_mm + 1e-9)
    peak = np.abs(a[..., inside]).max(axis=-1)
    peak[~np.isfinite(a).all(axis=-1)] = np.nan
    return peak


# window: 1-10 mm is samples 17..168; sample 100 is inside it, sample 400 after it
BAD = {(0, 0): (100, np.inf), (1, 1): (100, -np.inf), (2, 2): (400, np.inf), (3, 0): (400, -np.inf)}


@pytest.mark.parametrize("kernel", ["compiled", "numpy"])
@pytest.mark.parametrize(("signal", "detect"), [("rf", "rectified"), ("rf", "envelope"), ("rectified", "rectified")])
@pytest.mark.parametrize("dtype", [np.float32, np.float64])
@pytest.mark.parametrize("backend", ["numpy", "dask"])
@pytest.mark.parametrize("mode", ["peak", "first-crossing"])
def test_infinite_sample_makes_the_ascan_missing(kernel, signal, detect, dtype, backend, mode):
    # the grid format's rule: a NaN or infinite sample makes the A-scan missing (ndtmap.grid.schema);
    # treating an infinity like a NaN is common practice, no source
    grid = to_backend(_grid(signal, dtype, BAD), backend)
    ds = evaluate_gate(grid, Gate("g", *GATE_MM, unit="mm", threshold_fsh=1.0, mode=mode), detect=detect,
                       kernel=kernel).compute()
    bad = missing_ascans(grid).values
    assert bad.tolist() == [[(i, j) in BAD for j in range(3)] for i in range(4)]
    amp = ds["amplitude_fsh"].values
    assert np.isnan(amp[bad]).all(), amp
    assert not ds["triggered"].values[bad].any()
    assert np.isnan(ds["depth_mm"].values[bad]).all()
    assert np.isfinite(amp[~bad]).all()
    if detect == "rectified" and mode == "peak":
        np.testing.assert_allclose(amp, _numpy_peak(grid), rtol=1e-6, equal_nan=True)


@pytest.mark.parametrize("kernel", ["compiled", "numpy"])
def test_infinite_sample_in_a_following_gate_window(kernel):
    # a following gate reads its own window: an infinity there makes the A-scan missing too
    # (ndtmap.grid.schema's rule; common practice, no source)
    grid = _grid("rf", np.float32, {(1, 2): (300, np.inf), (2, 1): (300, -np.inf)})
    ds = evaluate_gate(grid, Gate("after", 2.0, 4.0, unit="us", follows="first", threshold_fsh=0.0),
                       others=[Gate("first", 1.0, 10.0, unit="mm", threshold_fsh=1.0)], kernel=kernel)
    amp = ds["amplitude_fsh"].values
    assert np.isnan(amp[1, 2]) and np.isnan(amp[2, 1])
    assert np.isfinite(np.delete(amp.ravel(), [1 * 3 + 2, 2 * 3 + 1])).all()
