"""Tests of ndtmap.plot.profile: the amplitude along a line, its drop level and the ends of the length."""

from __future__ import annotations

import numpy as np
import pytest

from ndtmap.errors import NdtmapError
from ndtmap.plot import profile_figure
from ndtmap.plot.profile import PROFILE_TRACES


def test_profile_has_the_same_traces_with_and_without_a_measurement():
    empty = profile_figure(title="pick two points")
    d = np.linspace(0.0, 20.0, 81)
    a = np.where(np.abs(d - 10.0) < 5.0, 80.0, 5.0)
    full = profile_figure(d, a, level_fsh=40.0, ends_mm=(5.0, 15.0), length_mm=10.0)
    assert [t.name for t in empty.data] == list(PROFILE_TRACES)
    assert len(full.data) == len(PROFILE_TRACES) and full.data[1].name == "-6 dB level 40.0 %FSH"
    assert list(full.data[2].x) == [5.0, 15.0] and list(full.data[2].y) == [40.0, 40.0]
    assert full.data[3].text[1] == "10.0 mm"
    assert empty.layout.title.text == "pick two points"
    with pytest.raises(NdtmapError):
        profile_figure(d, a[:-1])
