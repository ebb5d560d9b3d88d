"""Envelope in blocks of A-scans against scipy.signal.hilbert on the whole array."""

import numpy as np
import pytest
import xarray as xr
from scipy import signal as sps

import ndtmap.signal as signal_module
from ndtmap.grid import ascan_in_fsh, make_grid
from ndtmap.signal import detected_signal, envelope


@pytest.mark.parametrize("n", [64, 257, 1000])
def test_blocked_envelope_equals_scipy_hilbert(monkeypatch, n):
    # envelope = |analytic signal|, scipy.signal.hilbert (its documentation defines the one-sided spectrum)
    monkeypatch.setattr(signal_module, "_ENVELOPE_BLOCK_BYTES", 3 * 8 * n)  # three A-scans per block
    rng = np.random.default_rng(n)
    x = rng.normal(0.0, 30.0, (4, 5, n)).astype(np.float32)
    want = np.abs(sps.hilbert(x.astype(np.float64), axis=-1)).astype(np.float32)
    got = signal_module._envelope_kernel(x)
    np.testing.assert_allclose(got, want, rtol=1e-6, atol=1e-5)


def test_envelope_of_int16_counts_and_missing_flag():
    rng = np.random.default_rng(1)
    counts = rng.integers(-32768, 32768, (3, 4, 200)).astype(np.int16)
    g = make_grid(counts, scan_mm=np.arange(3.0), index_mm=np.arange(4.0), time_us=np.arange(200) * 0.02,
                  velocity_m_s=5920.0, probe_frequency_mhz=5.0, probe_diameter_mm=10.0,
                  fsh_per_count=100.0 / 32767)
    g["missing"] = (("scan", "index"), np.eye(3, 4, dtype=bool))
    a = ascan_in_fsh(g).values  # float32 %FSH, NaN where flagged
    want = np.abs(sps.hilbert(a.astype(np.float64), axis=-1)).astype(np.float32)
    got = envelope(g).ascan.values
    np.testing.assert_allclose(got, want, rtol=1e-6, atol=1e-5)
    assert np.isnan(got[np.eye(3, 4, dtype=bool)]).all()
    lazy = detected_signal(g.chunk({"scan": 1}), "envelope")
    assert lazy.chunks is not None
    xr.testing.assert_allclose(lazy.compute(), detected_signal(g, "envelope"))
