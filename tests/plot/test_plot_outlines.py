"""Tests of ndtmap.plot.outlines: the exact cell outline of an indication, drawn one way everywhere.

External references: polygon area by the shoelace (Gauss) formula and point-in-polygon by the
even-odd (ray casting) rule, e.g. J. O'Rourke, Computational Geometry in C, ch. 1 and 7;
8-connected labelling: scipy.ndimage.label with a 3x3 structure (SciPy reference); the 6 dB drop
("half the peak"): Krautkramer, Ultrasonic Testing of Materials, ch. 19 and ISO 16827, general principle.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest
from scipy import ndimage

from ndtmap import size_indications
from ndtmap.errors import ParameterError
from ndtmap.indications import LossOptions
from ndtmap.plot import indication_outline, indication_outlines
from ndtmap.plot.outlines import merged_outline_traces, outline_traces


def shoelace(poly):
    """Signed area of a closed polygon, vertices (n, 2) (O'Rourke, ch. 1)."""
    x, y = poly[:, 0], poly[:, 1]
    return 0.5 * float(np.sum(x * np.roll(y, -1) - np.roll(x, -1) * y))


def inside(poly, px, py):
    """Even-odd rule: True where (px, py) is inside the polygon (O'Rourke, ch. 7)."""
    x, y = poly[:, 0], poly[:, 1]
    x2, y2 = np.roll(x, -1), np.roll(y, -1)
    res = np.zeros(np.shape(px), dtype=bool)
    for a, b, c, d in zip(x, y, x2, y2, strict=True):
        crosses = ((b > py) != (d > py)) & (px < (c - a) * (py - b) / np.where(d == b, 1, d - b) + a)
        res ^= crosses
    return res


def midpoint_edges(x):
    """Cell edges halfway between positions, half a spacing beyond the ends (common practice, no source)."""
    x = np.asarray(x, dtype=float)
    return np.concatenate([[x[0] - (x[1] - x[0]) / 2], (x[1:] + x[:-1]) / 2, [x[-1] + (x[-1] - x[-2]) / 2]])


def test_outline_encloses_exactly_the_6db_region_and_its_area(ring_map):
    m = ring_map
    scan, index = m.scan.values, m.index.values
    rec = [r for r in size_indications(m, threshold_fsh=20) if r["peak_fsh"] == 90.0][0]
    labels, _ = ndimage.label(m.values >= 0.5 * 90.0, structure=np.ones((3, 3)))  # SciPy reference, 8-connected
    region = labels == labels[3, 3]
    polys = indication_outline(region, scan, index)
    # shoelace: outer loops counter-clockwise, holes clockwise; total = region area of midpoint cells
    xe, ye = midpoint_edges(scan), midpoint_edges(index)
    expected = float(np.outer(np.diff(xe), np.diff(ye))[region].sum())
    assert sum(shoelace(p) for p in polys) == pytest.approx(expected, rel=1e-12)
    # the table's area is that of the record's sub-cell outline (the figures draw it)
    assert rec["area_mm2"] == pytest.approx(abs(sum(shoelace(p) for p in rec.outline_polygons)), rel=1e-12)
    assert any(shoelace(p) < 0 for p in polys)  # the dip at (4, 4) is a hole
    # every cell centre is inside the outline exactly when it is in the region (even-odd over all loops)
    S, I = np.meshgrid(scan, index, indexing="ij")
    inside_any = np.zeros(S.shape, dtype=bool)
    for p in polys:
        inside_any ^= inside(p, S, I)
    np.testing.assert_array_equal(inside_any, region)
    for p in polys:  # vertices lie on cell edges
        assert np.all(np.isin(p[:, 0], xe)) and np.all(np.isin(p[:, 1], ye))


def test_outlines_of_records_are_their_sizing_regions(ring_map):
    recs = size_indications(ring_map, threshold_fsh=20)
    outs = indication_outlines(recs, ring_map)
    assert [o.id for o in outs] == [r["id"] for r in recs]
    for o, r in zip(outs, recs, strict=True):
        assert o.region == r["sizing_method"] and o.peak_mm == (r["scan_mm"], r["index_mm"])
        assert abs(sum(shoelace(p) for p in o.polygons)) == pytest.approx(r["area_mm2"], rel=1e-12)
        assert all(np.array_equal(a, b) for a, b in zip(o.polygons, r.outline_polygons, strict=True))
        assert o.flags == tuple(r["flags"])
    # records of another kind, or on a map of another unit, are drawn at their peak only
    depth = ring_map.assign_attrs(units="mm", long_name="event depth")
    assert all(not o.polygons for o in indication_outlines(recs, depth))
    with pytest.raises(ParameterError, match="outside the map"):
        indication_outlines([replace(recs[0], scan_mm=99.0)], ring_map)
    # a record drawn on another map of the same size but not the one it was found on: no outline
    shifted = ring_map.roll(scan=1, roll_coords=False)
    moved = replace(recs[0], peak_index=(recs[0].peak_index[0] + 1, recs[0].peak_index[1]))
    assert not indication_outlines([moved], shifted)[0].polygons


def test_loss_outline_encloses_the_positions_at_or_above_the_detection_level(amp_map):
    loss = np.zeros((8, 8))
    loss[2:5, 3:6] = 9.0
    loss[3, 4] = 14.0
    m = amp_map(loss, np.arange(8.0), np.arange(8.0), units="dB", long_name="back-wall echo loss")
    quiet = amp_map(np.full((8, 8), 2.0), np.arange(8.0), np.arange(8.0))  # no amplitude indication
    (rec,) = size_indications(quiet, threshold_fsh=20, loss=LossOptions(6.0, loss_map=m))
    assert rec.kind == "backwall_loss" and rec.sizing_level_db == 6.0
    (o,) = indication_outlines([rec], m)
    assert o.region == "loss >= 6 dB"
    # 3 x 3 positions at 9 dB in 0 dB: the 6 dB boundary lies 1/3 mm beyond them and cuts each corner by a
    # right triangle of legs 1/3 mm (geometry by hand)
    side = 2.0 + 2.0 / 3.0
    assert sum(shoelace(p) for p in o.polygons) == pytest.approx(side**2 - 4 * 0.5 / 9.0)
    assert rec.area_mm2 == pytest.approx(side**2 - 4 * 0.5 / 9.0)


def test_the_merged_traces_draw_the_same_lines_as_the_per_indication_traces(amp_map):
    # one outline style: the live plan view (three merged traces) draws what the report draws per indication
    a = np.full((20, 20), 2.0)
    a[0:6, 5:12] = 80.0  # runs off the scanned area: flagged at_scan_edge
    a[12:16, 12:16] = 60.0
    m = amp_map(a, np.arange(20.0), np.arange(20.0))
    outs = indication_outlines(size_indications(m, threshold_fsh=20), m)
    assert {o.flagged for o in outs} == {True, False}
    per = [t for t in outline_traces(outs) if t.mode == "lines" and "halo" not in t.name]
    halo, plain, flagged = merged_outline_traces(outs)
    for merged, want in ((plain, False), (flagged, True)):
        ref = [t for t, o in zip(per, outs, strict=True) if o.flagged is want]
        assert list(merged.x) == [x for t in ref for x in t.x] and list(merged.y) == [y for t in ref for y in t.y]
        assert merged.line.color == ref[0].line.color and merged.line.width == ref[0].line.width
        assert merged.line.dash == ref[0].line.dash == ("dash" if want else "solid")
    assert len([x for x in halo.x if x is not None]) == sum(len([x for x in t.x if x is not None]) for t in per)
    assert halo.line.color == "white" and halo.line.width > plain.line.width
