"""Tests of ndtmap.plot.plan: the interactive plan view draws the report's map and outlines, plus its overlays."""

from __future__ import annotations

import numpy as np
import pytest

from ndtmap import size_indications
from ndtmap.plot import PLAN_TRACES, indication_outlines, map_figure, plan_figure, plan_overlays


def _trace(fig, name):
    return fig.data[PLAN_TRACES.index(name)]


def test_plan_view_draws_the_same_heatmap_and_exact_outlines_as_the_report(ring_map):
    recs = size_indications(ring_map, threshold_fsh=20)
    outlines = indication_outlines(recs, ring_map)
    plan = plan_figure(ring_map, outlines=outlines)
    report = map_figure(ring_map, indications=recs)
    assert len(plan.data) == len(PLAN_TRACES)
    for key in ("x", "y", "z"):
        np.testing.assert_array_equal(np.asarray(plan.data[0][key]), np.asarray(report.data[0][key]))
    for key in ("colorscale", "zmin", "zmax", "hovertemplate"):
        assert plan.data[0][key] == report.data[0][key]
    assert plan.data[0].colorbar.title.text == report.data[0].colorbar.title.text
    # the exact cell outlines, not boxes: the same vertices as the report's outline of each indication
    lines = [t for t in report.data[1:] if t.mode == "lines" and "halo" not in t.name]
    want = sorted(v for t in lines for v in zip(t.x, t.y, strict=True) if v[0] is not None)
    got = [v for k in ("outlines", "flagged_outlines") for v in zip(_trace(plan, k).x, _trace(plan, k).y, strict=True)]
    assert sorted(v for v in got if v[0] is not None) == want
    assert plan.layout.yaxis.scaleanchor == "x" and plan.layout.yaxis.scaleratio == 1
    assert plan.layout.xaxis.range == report.layout.xaxis.range
    assert "[mm]" in plan.layout.xaxis.title.text and "[mm]" in plan.layout.yaxis.title.text


def test_overlays_keep_their_order_whatever_is_shown(ring_map):
    scan, index = ring_map.scan.values, ring_map.index.values
    empty = plan_overlays(scan, index)
    assert [t.name for t in empty] == [t.name for t in plan_overlays(scan, index, point=(3.0, 5.0),
                                                                      line_mm=((0.0, 0.0), (5.0, 5.0)))]
    assert len(empty) == len(PLAN_TRACES) - 1 and all(len(t.x or ()) == 0 for t in empty)


def test_position_section_lines_ruler_and_selected_indication(ring_map):
    recs = size_indications(ring_map, threshold_fsh=20)
    outlines = indication_outlines(recs, ring_map)
    big = outlines[0]
    fig = plan_figure(ring_map, outlines=outlines, point=(4.5, 5.5), selected=big.id,
                      line_mm=((0.0, 5.5), (12.0, 5.5)), length_ends_mm=((2.0, 5.5), (7.0, 5.5)), width=500)
    assert list(_trace(fig, "point").x) == [4.5] and list(_trace(fig, "point").y) == [5.5]
    lines = _trace(fig, "lines")  # the B-scan line (along scan) and the D-scan line (along index), cell edge to edge
    assert list(lines.x) == [-0.5, 14.25, None, 4.5, 4.5] and list(lines.y) == [5.5, 5.5, None, -1.0, 13.0]
    assert list(_trace(fig, "ruler").x) == [0.0, 12.0] and list(_trace(fig, "ends").x) == [2.0, 7.0]
    sel = _trace(fig, "selected")
    assert [v for v in sel.x if v is not None] == [v for p in big.polygons for v in [*p[:, 0], p[0, 0]]]
    assert f"#{big.id}" in " ".join(_trace(fig, "labels").text)
    assert fig.layout.width == 500 and 300 <= fig.layout.height <= 720
    # the first picked end of a new line is drawn alone, without the ends of the old measurement
    pending = plan_figure(ring_map, pending_mm=[(1.0, 2.0)], line_mm=((0.0, 5.5), (12.0, 5.5)),
                          length_ends_mm=((2.0, 5.5), (7.0, 5.5)))
    assert list(_trace(pending, "ruler").x) == [1.0] and len(_trace(pending, "ends").x) == 0


def test_a_note_goes_under_the_title_and_db_maps_are_centred(amp_map):
    loss = amp_map(np.linspace(-3, 20, 36).reshape(6, 6), np.arange(6.0), np.arange(6.0), units="dB",
                   long_name="back-wall loss")
    fig = plan_figure(loss, note="display only: blocks merged")
    assert fig.layout.title.text == "Plan view \u2013 back-wall loss<br><sup>display only: blocks merged</sup>"
    assert fig.data[0].zmid == 0.0 and fig.data[0].zmin == pytest.approx(-20.0)
