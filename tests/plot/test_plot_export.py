"""Tests of ndtmap.plot.export: byte-identical static files of every figure kind, captions.

References: PNG IHDR chunk layout: W3C PNG specification, 11.2.2; PDF header: ISO 32000-1, 7.5.2;
SVG as XML: W3C SVG 1.1.
"""

from __future__ import annotations

import struct
import xml.etree.ElementTree as ET

import numpy as np
from conftest import STEEL_M_S

from ndtmap import size_indications
from ndtmap.gates import Gate
from ndtmap.indications import dgs_diagram
from ndtmap.plot import (
    ascan_at,
    ascan_figure,
    dgs_figure,
    figure_bytes,
    indication_outlines,
    map_figure,
    plan_figure,
    profile_figure,
    section_figure,
    thickness_figure,
    with_caption,
)
from ndtmap.scans import amplitude_map, b_scan


def png_size(data):
    assert data[:8] == b"\x89PNG\r\n\x1a\n" and data[12:16] == b"IHDR"  # W3C PNG spec, 11.2.2
    return struct.unpack(">II", data[16:24])


def test_static_export_is_byte_identical_and_well_formed(export, ring_map):
    m = ring_map
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


def test_every_figure_kind_renders(export, plate_grid):
    g = plate_grid
    gate = Gate("flaw", 2.0, 12.0, threshold_fsh=20.0)
    amp = amplitude_map(g, gate)
    recs = size_indications(amp, threshold_fsh=20.0)
    d = np.linspace(0.0, 10.0, 41)
    figs = [
        section_figure(b_scan(g, 3.0), indications=recs),
        ascan_figure(ascan_at(g, 5.0, 3.0), [gate]),
        dgs_figure(dgs_diagram(10, 5, STEEL_M_S, [1, 2], n_points=100)),
        thickness_figure(amp.assign_attrs(units="mm", long_name="wall thickness")),
        plan_figure(amp, outlines=indication_outlines(recs, amp), point=(5.0, 3.0)),
        profile_figure(d, 80.0 * np.exp(-0.5 * (d - 5.0) ** 2), level_fsh=40.0, ends_mm=(3.8, 6.2), length_mm=2.4),
    ]
    for fig in figs:
        data = figure_bytes(fig, "svg", width=600, height=400)
        assert ET.fromstring(data).get("height") == "400"


def test_a_caption_goes_under_the_figure_and_its_legend(ring_map):
    fig = map_figure(ring_map, title="KFP")
    fig.update_layout(height=500)
    out = with_caption(fig, "Results are inputs to an assessment <by qualified personnel>, not decisions. " * 3)
    note = out.layout.annotations[-1]
    assert note.yref == "paper" and note.y == 0.0 and note.yshift < -60  # below the legend under the plot
    assert "&lt;by qualified personnel&gt;" in note.text and note.text.count("<br>") >= 1  # escaped and wrapped
    assert out.layout.height > 500 and fig.layout.height == 500  # a copy: the figure itself is unchanged
