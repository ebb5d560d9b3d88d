"""Tests of ndtmap.plot.sections: sections on a depth axis, gate windows along them, indications crossed.

References: pulse-echo depth d = c t / 2 (Krautkramer, Ultrasonic Testing of Materials, ch. 2, from memory);
the 6 dB drop ("half the peak"): Krautkramer, ch. 19 and ISO 16827, general principle.
"""

from __future__ import annotations

import numpy as np
import pytest
from conftest import STEEL_M_S

from ndtmap import size_indications
from ndtmap.errors import NdtmapError
from ndtmap.gates import Gate
from ndtmap.plot import SectionGate, gate_colour, section_figure
from ndtmap.scans import amplitude_map, b_scan, d_scan, depth_map


def test_section_depth_axis_and_bracket_of_the_6db_length(plate_grid):
    g = plate_grid
    gate = Gate("flaw", 2.0, 12.0, threshold_fsh=20.0)
    amp = amplitude_map(g, gate)
    recs = size_indications(amp, threshold_fsh=20.0, depth_map=depth_map(g, gate))
    rec = recs[0]
    sec = b_scan(g, rec["index_mm"])
    fig = section_figure(sec, indications=recs, cursor_mm=rec["scan_mm"])
    heat = fig.data[0]
    # depth d = c t / 2 (pulse echo) along the vertical axis, increasing downwards
    np.testing.assert_allclose(np.asarray(heat.y), STEEL_M_S * 1e-3 * g["time"].values / 2, rtol=1e-12)
    assert fig.layout.yaxis.range[0] > fig.layout.yaxis.range[1]
    marker = [d for d in fig.data if d.name == "indication peak"][0]
    assert marker.y[0] == pytest.approx(rec["depth_mm"]) and marker.y[0] == pytest.approx(7.4, abs=0.05)
    bracket = [d for d in fig.data if d.name == "6 dB drop length"][0]
    assert max(bracket.x) - min(bracket.x) == pytest.approx(rec["length_scan_mm"], rel=1e-12)
    dfig = section_figure(d_scan(g, rec["scan_mm"]), indications=recs)
    dbr = [d for d in dfig.data if d.name == "6 dB drop length"][0]
    assert max(dbr.x) - min(dbr.x) == pytest.approx(rec["length_index_mm"], rel=1e-12)
    # a section that misses the indication marks nothing
    far = section_figure(b_scan(g, 7.0), indications=recs)
    assert not [d for d in far.data if d.name == "indication peak"]


def test_cursor_is_the_second_trace_and_gates_are_drawn_along_the_line(plate_grid):
    sec = b_scan(plate_grid, 3.0)
    pos = sec["scan"].values
    start = np.full(pos.size, 10.0)
    end = np.where(pos > 5.0, np.nan, 14.0)  # a following gate whose window is unknown at some positions
    gates = [SectionGate("bw", pos, start, end, np.full(pos.size, 11.84))]
    fig = section_figure(sec, cursor_mm=4.0, gates=gates, gate_order=["flaw", "bw"])
    depth = sec["depth"].values
    assert list(fig.data[1].x) == [4.0, 4.0] and list(fig.data[1].y) == [depth[0], depth[-1]]
    assert fig.data[1].line.dash == "dot"
    line = fig.data[2]
    assert line.name == "gate bw" and line.line.color == gate_colour(1)  # the colour of the gate's place in order
    n = pos.size
    np.testing.assert_array_equal(np.asarray(line.y[:n], dtype=float), start)
    np.testing.assert_array_equal(np.asarray(line.y[n + 1:], dtype=float), end)
    assert any(a.text == "A-scan at 4.0 mm" for a in fig.layout.annotations)
    assert len(section_figure(sec).data[1].x) == 0  # no cursor: the trace is there, empty


def test_section_colour_limits_and_note(plate_grid):
    sec = b_scan(plate_grid, 3.0)
    fig = section_figure(sec, note="display only: blocks of 2 x 2 cells merged", width=480, height=250)
    heat = fig.data[0]
    assert heat.zmin == 0.0 and heat.zmax == pytest.approx(float(np.nanmax(sec.values)))
    assert "[%FSH]" in heat.colorbar.title.text
    assert fig.layout.title.text == "<sup>display only: blocks of 2 x 2 cells merged</sup>"
    assert (fig.layout.width, fig.layout.height) == (480, 250)
    with pytest.raises(NdtmapError, match="dims"):
        section_figure(sec.isel(time=0))
