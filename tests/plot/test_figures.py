"""Tests of ndtmap.plot.figures: plan views, sections, A-scans, DGS diagrams and thickness maps.

External references: polygon area by the shoelace (Gauss) formula and point-in-polygon by the
even-odd (ray casting) rule, e.g. J. O'Rourke, Computational Geometry in C, ch. 1 and 7;
8-connected labelling: scipy.ndimage.label with a 3x3 structure (SciPy reference); pulse-echo
depth d = c t / 2 (Krautkramer, Ultrasonic Testing of Materials, ch. 2, from memory); the 6 dB drop
("half the peak") and the DGS method: Krautkramer, ch. 19 and ISO 16827, general principle; far-field
FBH echo ratio H_FBH / H_BW = pi d^2 z_BW / (2 lambda z^2) (Krautkramer, DGS chapter, from memory);
PNG IHDR chunk layout: W3C PNG specification, 11.2.2; SVG as XML: W3C SVG 1.1.
"""

from __future__ import annotations

import math
import os
import struct
import xml.etree.ElementTree as ET

import numpy as np
import pytest
import xarray as xr
from scipy import ndimage

from ndtmap import size_indications
from ndtmap.errors import NdtmapError, ParameterError
from ndtmap.gates import Gate, evaluate_gates
from ndtmap.grid.examples import example_grid
from ndtmap.indications import dgs_diagram, equivalent_fbh_diameter
from ndtmap.plot import (
    ascan_at,
    ascan_figure,
    dgs_figure,
    dgs_points,
    figure_bytes,
    find_chromium,
    indication_outline,
    map_figure,
    nice_length,
    section_figure,
    thickness_figure,
)
from ndtmap.scans import b_scan, d_scan

STEEL_M_S = 5920.0  # longitudinal velocity of steel (Krautkramer, table of velocities, from memory)


def need_browser():
    """Skip static-export tests without Chromium, unless NDTMAP_REQUIRE_BROWSER=1 (then fail)."""
    if find_chromium() is None:
        if os.environ.get("NDTMAP_REQUIRE_BROWSER") == "1":
            pytest.fail("NDTMAP_REQUIRE_BROWSER=1 but no Chromium was found for static figure export")
        pytest.skip("static figure export needs Chromium (apt-get install chromium)")


@pytest.fixture(scope="module")
def export():
    """One kaleido browser for the whole module."""
    need_browser()
    from ndtmap.plot import export_session

    with export_session():
        yield


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


def amp_map(values, scan, index, **attrs):
    base = {"units": "%FSH", "long_name": "gate flaw peak amplitude", "probe_diameter_mm": 10.0,
            "probe_frequency_mhz": 5.0, "velocity_m_s": STEEL_M_S}
    base.update(attrs)
    return xr.DataArray(np.asarray(values, dtype=float), dims=("scan", "index"),
                        coords={"scan": ("scan", np.asarray(scan, float), {"units": "mm"}),
                                "index": ("index", np.asarray(index, float), {"units": "mm"})}, attrs=base)


# a non-uniform grid with an irregular reflector: a ring (a hole in the -6 dB region), a diagonal touch
SCAN = np.array([0.0, 1.0, 2.5, 3.0, 4.5, 6.0, 6.5, 8.0, 9.0, 11.0, 12.0, 13.5])
INDEX = np.array([0.0, 2.0, 3.0, 5.0, 5.5, 7.5, 9.0, 10.0, 12.0])


def ring_map():
    a = np.full((SCAN.size, INDEX.size), 2.0)
    a[2:7, 2:7] = 70.0
    a[4, 4] = 20.0  # a dip below half the peak inside: a hole in the -6 dB region
    a[3, 3] = 90.0  # the peak
    a[7, 7] = 60.0  # touches the region at a corner only (8-connected: part of it)
    a[9, 1] = 80.0  # a separate small reflector
    return amp_map(a, SCAN, INDEX)


# --------------------------------------------------------------------------- outlines


def test_outline_encloses_exactly_the_6db_region_and_its_area():
    m = ring_map()
    rec = [r for r in size_indications(m, threshold_fsh=20) if r["peak_fsh"] == 90.0][0]
    a = m.values
    labels, _ = ndimage.label(a >= 0.5 * 90.0, structure=np.ones((3, 3)))  # SciPy reference, 8-connected
    region = labels == labels[3, 3]
    polys = indication_outline(region, SCAN, INDEX)
    # shoelace: outer loops counter-clockwise, holes clockwise; total = region area of midpoint cells
    xe, ye = midpoint_edges(SCAN), midpoint_edges(INDEX)
    expected = float(np.outer(np.diff(xe), np.diff(ye))[region].sum())
    assert sum(shoelace(p) for p in polys) == pytest.approx(expected, rel=1e-12)
    assert rec["area_mm2"] == pytest.approx(expected, rel=1e-12)  # the table's -6 dB area
    assert any(shoelace(p) < 0 for p in polys)  # the dip at (4, 4) is a hole
    # every cell centre is inside the outline exactly when it is in the region (even-odd over all loops)
    S, I = np.meshgrid(SCAN, INDEX, indexing="ij")
    inside_any = np.zeros(S.shape, dtype=bool)
    for p in polys:
        inside_any ^= inside(p, S, I)
    np.testing.assert_array_equal(inside_any, region)
    # vertices lie on cell edges
    for p in polys:
        assert np.all(np.isin(p[:, 0], xe)) and np.all(np.isin(p[:, 1], ye))


def test_map_figure_uses_the_recorded_positions_and_outlines_each_indication():
    m = ring_map()
    recs = size_indications(m, threshold_fsh=20)
    fig = map_figure(m, indications=recs, title="KFP-TEST")
    heat = fig.data[0]
    np.testing.assert_array_equal(np.asarray(heat.x), SCAN)  # non-uniform positions as given
    np.testing.assert_array_equal(np.asarray(heat.y), INDEX)
    np.testing.assert_array_equal(np.asarray(heat.z), m.values.T)
    assert heat.colorbar.title.text == "gate flaw peak amplitude [%FSH]"
    assert heat.colorscale[0][1].lower() == "#440154"  # viridis starts at #440154 (matplotlib's table)
    assert fig.layout.yaxis.scaleanchor == "x" and fig.layout.yaxis.scaleratio == 1
    outlines = [t for t in fig.data[1:] if t.mode == "lines" and "halo" not in (t.name or "")]
    assert len(outlines) == len(recs)
    # the outline of the smaller reflector (one position at (11.0, 2.0)) is its midpoint cell
    small = [r for r in recs if r["peak_fsh"] == 80.0][0]
    texts = [a.text for a in fig.layout.annotations]
    assert any(t.startswith(f"#{small['id']} ") for t in texts)
    xs = [x for x in outlines[[r["id"] for r in recs].index(small["id"])].x if x is not None]
    assert min(xs) == pytest.approx(10.0) and max(xs) == pytest.approx(11.5)  # halfway to 9.0 and 12.0


def test_flagged_indications_are_dashed_with_their_flags():
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


def test_db_map_is_diverging_and_centred_on_zero():
    loss = amp_map(np.linspace(-3, 20, 36).reshape(6, 6), np.arange(6.0), np.arange(6.0), units="dB",
                   long_name="back-wall echo loss")
    fig = map_figure(loss)
    heat = fig.data[0]
    assert heat.zmid == 0 and heat.zmin == -heat.zmax == -20
    assert heat.colorscale[0][1] != heat.colorscale[-1][1]
    assert heat.colorbar.title.text == "back-wall echo loss [dB]"


def test_scale_bar_is_a_round_length_in_data_units():
    # 1-2-5 series (common practice for scale bars, no source)
    assert [nice_length(v) for v in (120.0, 80.0, 7.0, 260.0, 0.9)] == [20.0, 10.0, 1.0, 50.0, 0.1]
    m = ring_map()
    fig = map_figure(m)
    bar = [s for s in fig.layout.shapes if s.line.width == 4][0]
    assert bar.xref == "x" and bar.x1 - bar.x0 == pytest.approx(2.0)  # 20 % of 14.25 mm -> 2 mm
    assert any(a.text.strip() == "2 mm" for a in fig.layout.annotations)


def test_text_from_files_is_escaped():
    m = ring_map()
    fig = map_figure(m, title="<script>alert(1)</script>")
    assert fig.layout.title.text == "&lt;script&gt;alert(1)&lt;/script&gt;"
    assert "<script" not in fig.to_json()


def test_outline_of_a_record_outside_the_map_is_an_error():
    m = ring_map()
    with pytest.raises(ParameterError, match="outside the map"):
        map_figure(m, indications=[{"id": 1, "kind": "amplitude", "scan_mm": 99.0, "index_mm": 0.0}])
    with pytest.raises(NdtmapError, match="indication records"):
        map_figure(m, indications={"id": 1})


def test_figures_are_deterministic_without_a_browser():
    m = ring_map()
    recs = size_indications(m, threshold_fsh=20)
    a = map_figure(m, indications=recs).to_json()
    b = map_figure(m, indications=recs).to_json()
    assert a == b
    fig = map_figure(m, indications=recs)
    assert [t.uid for t in fig.data] == [f"map-{k}" for k in range(len(fig.data))]  # plotly.js would pick random ones


# --------------------------------------------------------------------------- thickness


def test_thickness_figure_marks_the_minimum():
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


# --------------------------------------------------------------------------- sections


def plate_grid():
    """A grid with an echo at 2.5 us (7.4 mm in steel) on a patch of positions."""
    g = example_grid((5.0,), (60.0,), n_scan=12, n_index=8)
    t = g["time"].values
    burst = 80.0 * np.exp(-0.5 * ((t - 2.5) / 0.15) ** 2) * np.cos(2 * np.pi * 5.0 * (t - 2.5))
    a = g["ascan"].values.copy()
    a[3:8, 2:6, :] += burst.astype(np.float32)
    return g.copy(data={"ascan": a})


def test_section_depth_axis_and_bracket_of_the_6db_length():
    from ndtmap.scans import amplitude_map, depth_map

    g = plate_grid()
    gate = Gate("flaw", 2.0, 12.0, threshold_fsh=20.0)
    amp = amplitude_map(g, gate)
    recs = size_indications(amp, threshold_fsh=20.0, depth_map=depth_map(g, gate))
    rec = recs[0]
    sec = b_scan(g, rec["index_mm"])
    fig = section_figure(sec, indications=recs, amplitude_map=amp, cursor_mm=rec["scan_mm"])
    heat = fig.data[0]
    # depth d = c t / 2 (pulse echo) along the vertical axis, increasing downwards
    np.testing.assert_allclose(np.asarray(heat.y), STEEL_M_S * 1e-3 * g["time"].values / 2, rtol=1e-12)
    assert fig.layout.yaxis.autorange == "reversed"
    marker = [d for d in fig.data if d.name == "indication peak"][0]
    assert marker.y[0] == pytest.approx(rec["depth_mm"]) and marker.y[0] == pytest.approx(7.4, abs=0.05)
    bracket = [d for d in fig.data if d.name == "6 dB drop length"][0]
    assert max(bracket.x) - min(bracket.x) == pytest.approx(rec["length_scan_mm"], rel=1e-12)
    dfig = section_figure(d_scan(g, rec["scan_mm"]), indications=recs, amplitude_map=amp)
    dbr = [d for d in dfig.data if d.name == "6 dB drop length"][0]
    assert max(dbr.x) - min(dbr.x) == pytest.approx(rec["length_index_mm"], rel=1e-12)
    # a section that misses the indication marks nothing
    far = section_figure(b_scan(g, 7.0), indications=recs, amplitude_map=amp)
    assert not [d for d in far.data if d.name == "indication peak"]


# --------------------------------------------------------------------------- A-scans


def test_ascan_gates_thresholds_and_events():
    g = example_grid((4.0, 8.0), (60.0, 30.0))
    interface = Gate("bw1", 10.0, 14.0, threshold_fsh=20.0)
    follow = Gate("bw2", 8.0, 16.0, threshold_fsh=10.0, follows="bw1")
    a = ascan_at(g, 1.0, 1.0)
    results = evaluate_gates(g, [interface, follow])
    fig = ascan_figure(a, [interface, follow], gate_results=results)
    bars = {t.name.split(":")[0]: t for t in fig.data if t.legendgroup in ("bw1", "bw2") and t.mode == "lines"}
    b1 = [x for x in bars["bw1"].x if x is not None]
    assert (min(b1), max(b1)) == pytest.approx((10.0, 14.0), abs=1e-9)  # a depth-mm gate at its depths
    assert 20.0 in bars["bw1"].y
    # the following gate's window at this A-scan: 8-16 mm after the first back-wall echo (11.84 mm)
    b2 = [x for x in bars["bw2"].x if x is not None]
    first = STEEL_M_S * 1e-3 * 4.0 / 2  # d = c t / 2
    assert min(b2) == pytest.approx(first + 8.0, abs=0.02) and max(b2) == pytest.approx(first + 16.0, abs=0.02)
    events = [t for t in fig.data if (t.name or "").endswith(" event")]
    depth2 = float(results["bw2"]["depth_mm"].sel(scan=1.0, index=1.0))
    ev2 = [t for t in events if t.name.startswith("bw2")][0]
    assert ev2.x[0] == pytest.approx(depth2, abs=1e-9)
    assert depth2 == pytest.approx(STEEL_M_S * 1e-3 * 8.0 / 2, abs=0.02)
    tfig = ascan_figure(a, [interface], gate_results=results, depth_axis=False)
    tb = [x for x in tfig.data[1].x if x is not None]
    assert min(tb) == pytest.approx(2 * 10.0 / (STEEL_M_S * 1e-3), rel=1e-9)  # t = 2 d / c
    with pytest.raises(NdtmapError):
        ascan_figure(g["ascan"], [interface])


# --------------------------------------------------------------------------- DGS


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


# --------------------------------------------------------------------------- static export


def png_size(data):
    assert data[:8] == b"\x89PNG\r\n\x1a\n" and data[12:16] == b"IHDR"  # W3C PNG spec, 11.2.2
    return struct.unpack(">II", data[16:24])


def test_static_export_is_byte_identical_and_well_formed(export):
    m = ring_map()
    recs = size_indications(m, threshold_fsh=20)
    figs = [map_figure(m, indications=recs, title="<script>alert(1)</script>"), map_figure(m, indications=recs)]
    svg = [figure_bytes(f, "svg", width=700, height=500) for f in figs]
    png = [figure_bytes(f, "png", width=700, height=500, scale=2) for f in figs]
    again = figure_bytes(map_figure(m, indications=recs, title="<script>alert(1)</script>"), "svg", width=700,
                         height=500)
    assert svg[0] == again
    assert figure_bytes(figs[1], "png", width=700, height=500, scale=2) == png[1]
    assert png_size(png[0]) == (1400, 1000)
    pdf = [figure_bytes(figs[1], "pdf", width=700, height=500) for _ in range(2)]
    assert pdf[0] == pdf[1] and pdf[0].startswith(b"%PDF-")  # ISO 32000-1, 7.5.2: the header
    root = ET.fromstring(svg[0])
    assert root.tag.endswith("svg") and root.get("width") == "700"
    assert not [el for el in root.iter() if el.tag.split("}")[-1] == "script"]
    text = "".join(root.itertext())
    assert "<script>alert(1)</script>" in text  # shown as text, not markup


def test_every_figure_kind_renders(export):
    g = plate_grid()
    gate = Gate("flaw", 2.0, 12.0, threshold_fsh=20.0)
    from ndtmap.scans import amplitude_map

    amp = amplitude_map(g, gate)
    recs = size_indications(amp, threshold_fsh=20.0)
    figs = [
        section_figure(b_scan(g, 3.0), indications=recs),
        ascan_figure(ascan_at(g, 5.0, 3.0), [gate]),
        dgs_figure(dgs_diagram(10, 5, STEEL_M_S, [1, 2], n_points=100)),
        thickness_figure(amp.assign_attrs(units="mm", long_name="wall thickness")),
    ]
    for fig in figs:
        data = figure_bytes(fig, "svg", width=600, height=400)
        assert ET.fromstring(data).get("height") == "400"
