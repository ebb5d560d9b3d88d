"""Tests of ndtmap.plot.dgs: indications on a DGS diagram lie on the curve of their equivalent size.

References: the DGS method (Krautkramer, Ultrasonic Testing of Materials, ch. 19 and ISO 16827, general
principle); far-field FBH echo ratio H_FBH / H_BW = pi d^2 z_BW / (2 lambda z^2) (Krautkramer, DGS
chapter, from memory).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from conftest import STEEL_M_S

from ndtmap.indications import dgs_diagram, equivalent_fbh_diameter
from ndtmap.plot import dgs_figure, dgs_points


@pytest.mark.parametrize("depth_mm", [60.0, 250.0])  # inside and beyond 3 near-field lengths (N = 21.1 mm x 3)
def test_dgs_points_lie_on_the_curve_of_their_equivalent_size(depth_mm):
    d, f = 10.0, 5.0
    zb = 120.0
    res = equivalent_fbh_diameter(12.0, depth_mm, backwall_fsh=80.0, backwall_sound_path_mm=zb,
                                  probe_diameter_mm=d, frequency_mhz=f, velocity_m_s=STEEL_M_S)
    rec = {"id": 1, "kind": "amplitude", "scan_mm": 0.0, "index_mm": 0.0, "depth_mm": depth_mm,
           "ers_mm": res.ers_mm, "ers_ratio_db": res.ratio_db, "ers_method": res.method}
    diag = dgs_diagram(d, f, STEEL_M_S, [res.ers_mm], max_distance_n=20, n_points=2000)
    (z, level, label), = dgs_points([rec], diag, backwall_sound_path_mm=zb)
    var = "fbh_echo_far_field_db" if res.method == "far-field" else "fbh_echo_db"
    curve = np.interp(math.log(z), np.log(diag["distance_mm"].values), diag[var].values[0])
    assert level == pytest.approx(curve, abs=0.05)
    if res.method == "far-field":
        # far-field ratio pi d^2 z_BW / (2 lambda z^2) (Krautkramer, DGS chapter, from memory)
        lam = STEEL_M_S * 1e-3 / f
        assert res.ratio_db == pytest.approx(
            20 * math.log10(math.pi * res.ers_mm**2 * zb / (2 * lam * depth_mm**2)), abs=1e-9)
    fig = dgs_figure(diag, points=[(z, level, label)])
    assert fig.layout.xaxis.type == "log"
    pts = [t for t in fig.data if t.name == "indications"][0]
    assert pts.y[0] == level and "ERS" in pts.customdata[0]
