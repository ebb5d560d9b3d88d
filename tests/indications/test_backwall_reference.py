"""The back wall of a sizing run: the loss indications use the one back-wall-loss definition of ndtmap.scans."""

import numpy as np
import pytest
from helpers.sizing_maps import make_map

from ndtmap.indications import LossOptions, backwall_reference_fsh, detect_indications, size_indications
from ndtmap.indications.dgs import sound_region_mask
from ndtmap.scans import backwall_loss_db, nominal_backwall_fsh

SCAN = np.arange(40.0)
INDEX = np.arange(30.0)


def _maps():
    amp = np.full((40, 30), 2.0)
    amp[10:20, 8:16] = 70.0  # a lamination echo ...
    bw = np.full((40, 30), 80.0)
    bw[10:20, 8:16] = 0.0  # ... that hides the back wall completely
    bw[30:34, 20:26] = 30.0  # and a loss region without a flaw echo (8.5 dB)
    return make_map(amp, SCAN, INDEX), make_map(bw, SCAN, INDEX)


def test_loss_from_the_backwall_map_is_backwall_loss_db_against_the_sound_nominal():
    amp, bw = _maps()
    computed = size_indications(amp, threshold_fsh=20, backwall=bw, loss=LossOptions(6.0))
    inds = detect_indications(amp, threshold_fsh=20)
    nominal = nominal_backwall_fsh(bw, mask=sound_region_mask(bw, exclude=inds))
    assert nominal == backwall_reference_fsh(bw, exclude=inds) == 80.0
    given = size_indications(amp, threshold_fsh=20, backwall=bw,
                             loss=LossOptions(6.0, loss_map=backwall_loss_db(bw, nominal)))
    assert [r.to_dict() for r in computed] == [r.to_dict() for r in given]
    kinds = [(r.kind, r.backwall_loss_db) for r in computed]
    # one reflector, one record: the lamination's record carries the loss under it, the vanished back wall at the
    # floor of 0.1 %FSH (a finite 58 dB); the loss region without a flaw echo stays its own record
    assert kinds == [("amplitude", pytest.approx(20 * np.log10(80 / 0.1))),
                     ("backwall_loss", pytest.approx(20 * np.log10(80 / 30)))]
    assert any("is its shadow" in n for n in computed[0].notes)
    # every loss region on its own (merge=False): the shadow sized like any loss region
    separate = size_indications(amp, threshold_fsh=20, backwall=bw, loss=LossOptions(6.0, merge=False))
    kinds = [(r.kind, r.backwall_loss_db) for r in separate]
    assert kinds[1] == ("backwall_loss", pytest.approx(20 * np.log10(80 / 0.1)))
    assert kinds[2] == ("backwall_loss", pytest.approx(20 * np.log10(80 / 30)))
    assert separate[1].area_mm2 == pytest.approx(80.0, abs=20.0)  # the 10 x 8 mm region, at the 6 dB crossings
    assert not separate[1].total_backwall_loss
