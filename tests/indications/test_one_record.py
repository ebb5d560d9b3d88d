"""One reflector, one record: the back-wall loss under a flaw echo is in the flaw's record.

The maps are written here from the geometry (a lamination echo where the
lamination is, the back wall weakened under it), not with ndtmap.simulate.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import xarray as xr

from ndtmap.indications import LossOptions, size_indications

SCAN = np.arange(0.0, 50.0, 1.0)
INDEX = np.arange(0.0, 40.0, 1.0)
NOMINAL_FSH = 80.0


def _map(values: np.ndarray) -> xr.DataArray:
    return xr.DataArray(values, dims=("scan", "index"), coords={"scan": SCAN, "index": INDEX})


def _scene() -> tuple[xr.DataArray, xr.DataArray]:
    """A lamination 10-20 x 8-16 mm (echo 70 %FSH, back wall down to 20 %FSH under it, 10 %FSH at its centre),
    and a loss region 30-34 x 20-26 mm with no flaw echo (back wall 30 %FSH)."""
    s, i = np.meshgrid(SCAN, INDEX, indexing="ij")
    amp = np.full(s.shape, 2.0)
    bw = np.full(s.shape, NOMINAL_FSH)
    lam = (s >= 10) & (s < 20) & (i >= 8) & (i < 16)
    amp[lam] = 70.0
    bw[lam] = 20.0
    bw[14, 11] = 10.0
    bw[(s >= 30) & (s < 34) & (i >= 20) & (i < 26)] = 30.0
    return _map(amp), _map(bw)


def test_flaw_record_carries_the_largest_backwall_loss_under_it():
    amp, bw = _scene()
    recs = size_indications(amp, threshold_fsh=20.0, backwall=bw, loss=LossOptions(6.0))
    assert [r.kind for r in recs] == ["amplitude", "backwall_loss"]
    flaw, loss = recs
    # back-wall loss = 20 log10(nominal / measured) (Krautkramer, Ultrasonic Testing of Materials, back-wall
    # echo attenuation, in general terms); the largest under the lamination is at its 10 %FSH centre
    assert flaw.backwall_loss_db == pytest.approx(20 * math.log10(NOMINAL_FSH / 10.0))
    assert flaw.to_dict()["backwall_loss_db"] == pytest.approx(18.06, abs=0.01)
    assert any("median 12.0 dB" in n for n in flaw.notes)  # 20 log10(80 / 20), by hand
    assert any("is its shadow" in n for n in flaw.notes)
    # the loss without a flaw echo stays its own kind, numbered after the flaws
    assert loss.id == 2 and loss.backwall_loss_db == pytest.approx(20 * math.log10(NOMINAL_FSH / 30.0))
    assert loss.n_positions == 24


def test_backwall_loss_db_without_loss_indications():
    amp, bw = _scene()
    (flaw,) = size_indications(amp, threshold_fsh=20.0, backwall=bw)
    assert flaw.backwall_loss_db == pytest.approx(20 * math.log10(NOMINAL_FSH / 10.0))
    (flaw,) = size_indications(amp, threshold_fsh=20.0, backwall=bw, loss=LossOptions(None))
    assert flaw.backwall_loss_db == pytest.approx(20 * math.log10(NOMINAL_FSH / 10.0))
    (flaw,) = size_indications(amp, threshold_fsh=20.0)  # no back wall: no loss
    assert flaw.backwall_loss_db is None


def test_merge_false_reports_the_shadow_as_well():
    amp, bw = _scene()
    recs = size_indications(amp, threshold_fsh=20.0, backwall=bw, loss=LossOptions(6.0, merge=False))
    assert [r.kind for r in recs] == ["amplitude", "backwall_loss", "backwall_loss"]


def test_loss_beyond_the_flaw_echo_stays_a_loss_indication():
    # the loss region runs 12 mm past the end of the echo region (e.g. a tilted part that sends no echo back):
    # it is reported whole with its own size, so that the larger extent is not lost
    amp, bw = _scene()
    s, i = np.meshgrid(SCAN, INDEX, indexing="ij")
    values = bw.values.copy()
    values[(s >= 20) & (s < 32) & (i >= 8) & (i < 16)] = 20.0
    recs = size_indications(amp, threshold_fsh=20.0, backwall=_map(values), loss=LossOptions(6.0))
    kinds = [(r.kind, r.scan_min_mm, r.scan_max_mm) for r in recs]
    assert kinds[0] == ("amplitude", 10.0, 19.0)
    assert kinds[1:] == [("backwall_loss", 10.0, 31.0), ("backwall_loss", 30.0, 33.0)]
    assert recs[1].length_scan_mm == pytest.approx(22.0, abs=1.0)  # 10..31 mm at the 6 dB level, by hand
    assert any("reaches beyond its echo region" in n for n in recs[0].notes)


def test_a_backwall_loss_limit_holds_for_the_loss_on_the_flaw_record():
    from ndtmap.indications.rules import parse_rules

    amp, bw = _scene()
    rules = parse_rules('[[limit]]\nname = "back wall lost"\nquantity = "backwall_loss_db"\n'
                        'kind = "backwall_loss"\nmax = 15')
    recs = size_indications(amp, threshold_fsh=20.0, backwall=bw, loss=LossOptions(6.0), rules=rules)
    # the lamination's shadow (18.1 dB) is in its record: the limit on back-wall loss still reaches it
    assert recs[0].kind == "amplitude" and recs[0].screening == "exceeds rule back wall lost"
    assert recs[1].screening == "within rules"  # 8.5 dB
