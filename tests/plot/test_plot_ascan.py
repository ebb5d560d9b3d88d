"""Tests of ndtmap.plot.ascan: an A-scan with its gates, from a grid's results or from plain data.

References: pulse-echo depth d = c t / 2 (Krautkramer, Ultrasonic Testing of Materials, ch. 2, from memory).
"""

from __future__ import annotations

import numpy as np
import pytest
from conftest import STEEL_M_S

from ndtmap.errors import NdtmapError
from ndtmap.gates import Gate, evaluate_gates
from ndtmap.grid.examples import example_grid
from ndtmap.plot import GateMark, ascan_arrays_figure, ascan_at, ascan_figure, gate_colour


def _bar(fig, name):
    return [t for t in fig.data if t.legendgroup == name and t.mode == "lines" and not t.name.endswith("(negative)")][0]


def test_ascan_gates_thresholds_and_events():
    g = example_grid((4.0, 8.0), (60.0, 30.0))
    interface = Gate("bw1", 10.0, 14.0, threshold_fsh=20.0)
    follow = Gate("bw2", 8.0, 16.0, threshold_fsh=10.0, follows="bw1")
    a = ascan_at(g, 1.0, 1.0)
    results = evaluate_gates(g, [interface, follow])
    fig = ascan_figure(a, [interface, follow], gate_results=results)
    b1 = [x for x in _bar(fig, "bw1").x if x is not None]
    assert (min(b1), max(b1)) == pytest.approx((10.0, 14.0), abs=1e-9)  # a depth-mm gate at its depths
    assert 20.0 in _bar(fig, "bw1").y
    # the following gate's window at this A-scan: 8-16 mm after the first back-wall echo (11.84 mm)
    b2 = [x for x in _bar(fig, "bw2").x if x is not None]
    first = STEEL_M_S * 1e-3 * 4.0 / 2  # d = c t / 2
    assert min(b2) == pytest.approx(first + 8.0, abs=0.02) and max(b2) == pytest.approx(first + 16.0, abs=0.02)
    events = [t for t in fig.data if (t.name or "").endswith(" event")]
    depth2 = float(results["bw2"]["depth_mm"].sel(scan=1.0, index=1.0))
    ev2 = [t for t in events if t.name.startswith("bw2")][0]
    assert ev2.x[0] == pytest.approx(depth2, abs=1e-9)
    assert depth2 == pytest.approx(STEEL_M_S * 1e-3 * 8.0 / 2, abs=0.02)
    tfig = ascan_figure(a, [interface], gate_results=results, depth_axis=False)
    tb = [x for x in _bar(tfig, "bw1").x if x is not None]
    assert min(tb) == pytest.approx(2 * 10.0 / (STEEL_M_S * 1e-3), rel=1e-9)  # t = 2 d / c
    with pytest.raises(NdtmapError):
        ascan_figure(g["ascan"], [interface])


def test_ascan_without_a_depth_coordinate_takes_the_depth_from_the_velocity():
    a = ascan_at(example_grid((4.0,)), 0.0, 0.0)
    bare = a.drop_vars("depth")
    fig = ascan_figure(bare, [Gate("bw", 10.0, 14.0)])
    np.testing.assert_allclose(np.asarray(fig.data[0].x), STEEL_M_S * 1e-3 * a["time"].values / 2, rtol=1e-12)
    with pytest.raises(NdtmapError, match="depth_axis=False"):
        ascan_figure(bare.assign_attrs(velocity_m_s=None), [Gate("bw", 10.0, 14.0)])


def test_ascan_from_plain_data_draws_each_gate_at_its_threshold_in_its_colour():
    depth = np.linspace(0.0, 30.0, 301)
    signal = 80.0 * np.exp(-0.5 * ((depth - 25.0) / 0.3) ** 2)
    bw = GateMark(Gate("bw", 20.0, 28.0, threshold_fsh=40.0), 20.0, 28.0, True, 25.0, 80.0)
    flaw = GateMark(Gate("flaw", 2.0, 19.0, threshold_fsh=15.0), 2.0, 19.0, False, None, 1.0)
    lost = GateMark(Gate("bw2", 1.0, 5.0, follows="bw"), None, None)
    fig = ascan_arrays_figure(depth, signal, [flaw, bw, lost], gate_order=["bw", "flaw", "bw2"],
                              position_mm=(3.0, 4.0), missing=True, time_us=depth / 2.96)
    assert fig.data[0].name == "A-scan" and len(fig.data[0].y) == depth.size
    bar = _bar(fig, "bw")
    assert list(bar.y)[3:5] == [40.0, 40.0] and [x for x in bar.x if x is not None] == [20.0, 20.0, 20.0, 28.0, 28.0,
                                                                                            28.0]
    assert bar.line.color == gate_colour(0) and _bar(fig, "flaw").line.color == gate_colour(1)
    ev = [t for t in fig.data if t.name == "bw event"][0]
    assert (ev.x[0], ev.y[0]) == (25.0, 80.0) and ev.marker.symbol == "diamond"
    assert any("flaw: no echo above the threshold" in a.text for a in fig.layout.annotations)
    assert [t.name for t in fig.data if t.name.endswith("window not known here")]
    assert fig.layout.title.text == "A-scan at scan 3.00 mm, index 4.00 mm \u2013 missing A-scan"
    assert fig.layout.yaxis.range[0] == 0.0
    rf = ascan_arrays_figure(depth, signal, [bw], rf_fsh=-signal)
    assert rf.data[0].name == "RF" and rf.layout.yaxis.range[0] < 0  # a signed axis for the RF
    assert [t for t in rf.data if t.name.endswith("(negative)")]
