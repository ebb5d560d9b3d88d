"""Tests of ndtmap.plot.maps: plan views (C-scans) for reports and the wall-thickness map.

References: viridis and cividis colour tables (matplotlib's, first entries #440154 and #00224e);
a scale bar of 1, 2 or 5 times a power of ten (common practice, no source).
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest

from ndtmap import size_indications
from ndtmap.errors import NdtmapError, ParameterError
from ndtmap.plot import map_figure, thickness_figure


def test_map_figure_uses_the_recorded_positions_and_outlines_each_indication(ring_map):
    m = ring_map
    recs = size_indications(m, threshold_fsh=20)
    fig = map_figure(m, indications=recs, title="KFP-TEST")
    heat = fig.data[0]
    np.testing.assert_array_equal(np.asarray(heat.x), m.scan.values)  # non-uniform positions as given
    np.testing.assert_array_equal(np.asarray(heat.y), m.index.values)
    np.testing.assert_array_equal(np.asarray(heat.z), m.values.T)
    assert heat.colorbar.title.text == "gate flaw peak amplitude [%FSH]"
    assert heat.colorscale[0][1].lower() == "#440154"  # viridis starts at #440154 (matplotlib's table)
    assert (heat.zmin, heat.zmax) == (0.0, 90.0)
    assert fig.layout.yaxis.scaleanchor == "x" and fig.layout.yaxis.scaleratio == 1
    outlines = [t for t in fig.data[1:] if t.mode == "lines" and "halo" not in (t.name or "")]
    assert len(outlines) == len(recs)
    # the outline of the smaller reflector (one position at (11.0, 2.0)) crosses half its peak between that
    # position and its neighbours at 9.0 and 12.0 mm, by linear interpolation (numpy.interp as the reference)
    small = [r for r in recs if r["peak_fsh"] == 80.0][0]
    assert any(a.text.startswith(f"#{small['id']} ") for a in fig.layout.annotations)
    xs = [x for x in outlines[[r["id"] for r in recs].index(small["id"])].x if x is not None]
    line = m.sel(index=2.0)
    k = int(np.flatnonzero(m.scan.values == 11.0)[0])
    lo = np.interp(40.0, line.values[k - 1:k + 1], m.scan.values[k - 1:k + 1])
    hi = np.interp(40.0, line.values[k:k + 2][::-1], m.scan.values[k:k + 2][::-1])
    assert min(xs) == pytest.approx(lo) and max(xs) == pytest.approx(hi)
    assert (min(xs), max(xs)) == pytest.approx(small.length_scan_ends_mm)


def test_flagged_indications_are_dashed_with_their_flags(amp_map):
    a = np.full((20, 20), 2.0)
    a[0:6, 5:12] = 80.0  # runs off the scanned area: at_scan_edge
    a[12:16, 12:16] = 60.0
    m = amp_map(a, np.arange(20.0), np.arange(20.0))
    recs = size_indications(m, threshold_fsh=20)
    fig = map_figure(m, indications=recs)
    by_id = {}
    for t in fig.data[1:]:
        if t.mode == "lines" and "halo" not in t.name:
            by_id[len(by_id) + 1] = t
    edge = [r for r in recs if "at_scan_edge" in r["flags"]][0]
    clean = [r for r in recs if not r["flags"]][0]
    assert by_id[edge["id"]].line.dash == "dash"
    assert by_id[clean["id"]].line.dash == "solid"
    assert "at_scan_edge" in by_id[edge["id"]].text
    assert any("at_scan_edge" in a.text for a in fig.layout.annotations)


def test_depth_map_is_outlined_from_the_amplitude_map(ring_map):
    recs = size_indications(ring_map, threshold_fsh=20)
    depth = ring_map.copy(data=np.full(ring_map.shape, 7.5)).assign_attrs(units="mm", long_name="event depth")
    plain = map_figure(depth, indications=recs)
    outlined = map_figure(depth, indications=recs, outline_map=ring_map)
    assert not [t for t in plain.data[1:] if t.mode == "lines"]  # a depth map has no -6 dB region
    assert len([t for t in outlined.data[1:] if t.mode == "lines" and "halo" not in t.name]) == len(recs)
    assert outlined.data[0].colorscale[0][1].lower() == "#00224e"  # cividis for mm


def test_db_map_is_diverging_and_centred_on_zero(amp_map):
    loss = amp_map(np.linspace(-3, 20, 36).reshape(6, 6), np.arange(6.0), np.arange(6.0), units="dB",
                   long_name="back-wall echo loss")
    heat = map_figure(loss).data[0]
    assert heat.zmid == 0 and heat.zmin == -heat.zmax == -20
    assert heat.colorscale[0][1] != heat.colorscale[-1][1]
    assert heat.colorbar.title.text == "back-wall echo loss [dB]"


def test_scale_bar_is_a_round_length_in_data_units(ring_map):
    fig = map_figure(ring_map)
    bar = [s for s in fig.layout.shapes if s.line.width == 4][0]
    assert bar.xref == "x" and bar.x1 - bar.x0 == pytest.approx(2.0)  # 20 % of 14.25 mm -> 2 mm
    assert any(a.text.strip() == "2 mm" for a in fig.layout.annotations)


def test_missing_positions_are_grey_and_named_in_the_legend(ring_map):
    m = ring_map.copy()
    m.values[0, 0] = np.nan
    fig = map_figure(m)
    assert fig.layout.plot_bgcolor == "#c4c4c4"
    assert [t.name for t in fig.data if t.name == "no data"]
    assert not [t for t in map_figure(ring_map).data if t.name == "no data"]


def test_text_from_files_is_escaped(ring_map):
    fig = map_figure(ring_map, title="<script>alert(1)</script>")
    assert fig.layout.title.text == "&lt;script&gt;alert(1)&lt;/script&gt;"
    assert "<script" not in fig.to_json()


def test_outline_of_a_record_outside_the_map_is_an_error(ring_map):
    rec = size_indications(ring_map, threshold_fsh=20)[0]
    with pytest.raises(ParameterError, match="outside the map"):
        map_figure(ring_map, indications=[replace(rec, scan_mm=99.0)])
    with pytest.raises(NdtmapError, match="must be an IndicationRecord"):
        map_figure(ring_map, indications=[{"id": 1, "kind": "amplitude", "scan_mm": 1.0, "index_mm": 0.0}])
    with pytest.raises(NdtmapError, match="indication records"):
        map_figure(ring_map, indications={"id": 1})
    with pytest.raises(NdtmapError, match="has no `kind`"):
        map_figure(ring_map, indications=[{"id": 1, "scan_mm": 0.0, "index_mm": 0.0}])


def test_figures_are_deterministic_without_a_browser(ring_map):
    recs = size_indications(ring_map, threshold_fsh=20)
    assert map_figure(ring_map, indications=recs).to_json() == map_figure(ring_map, indications=recs).to_json()
    fig = map_figure(ring_map, indications=recs)
    assert [t.uid for t in fig.data] == [f"map-{k}" for k in range(len(fig.data))]  # plotly.js would pick random ones


def test_thickness_figure_marks_the_minimum(amp_map):
    t = np.full((5, 4), 12.0)
    t[3, 2] = 8.25
    t[0, 0] = np.nan
    m = amp_map(t, [0.0, 1.0, 2.0, 4.0, 5.0], [0.0, 1.5, 3.0, 4.5], units="mm", long_name="wall thickness")
    fig = thickness_figure(m, nominal_mm=12.0)
    marker = [d for d in fig.data if d.name == "minimum remaining wall"][0]
    assert (marker.x[0], marker.y[0]) == (4.0, 3.0)
    note = [a for a in fig.layout.annotations if a.text.startswith("minimum")][0].text
    assert "8.25 mm" in note and "69 % of nominal 12 mm" in note  # 8.25 / 12 = 68.75 %
    assert fig.data[0].colorscale[0][1].lower() == "#00224e"  # cividis starts at #00224e
    with pytest.raises(ParameterError):
        thickness_figure(m.assign_attrs(units="%FSH"))
