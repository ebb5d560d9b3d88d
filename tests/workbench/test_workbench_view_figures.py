"""The workbench's views as figures: the state's results drawn by ndtmap.plot, the same figures as the report's."""

from __future__ import annotations

import numpy as np
import plotly.graph_objects as go
import pytest

import ndtmap
from ndtmap.plot import PLAN_TRACES, find_chromium, indication_outlines
from ndtmap.plot.style import color_scale_for
from ndtmap.simulate import sample_path
from ndtmap.workbench import view_figures as vf
from ndtmap.workbench.state import WorkbenchState


@pytest.fixture(scope="module")
def plate():
    return ndtmap.open_grid(sample_path("plate_laminations.nc"))


@pytest.fixture()
def state(plate):
    return WorkbenchState(plate)


def _trace(fig, name):
    return fig.data[PLAN_TRACES.index(name)]


def test_plan_view_shows_the_map_with_mm_axes_and_a_labelled_colour_bar(state):
    m = state.map()
    fig = vf.plan_view(state, m)
    heat = fig.data[0]
    assert heat.colorscale == go.Heatmap(colorscale=color_scale_for("%FSH")).colorscale
    assert "[%FSH]" in heat.colorbar.title.text and "amplitude" in heat.colorbar.title.text
    assert fig.layout.yaxis.scaleanchor == "x" and fig.layout.yaxis.scaleratio == 1
    assert "[mm]" in fig.layout.xaxis.title.text and "[mm]" in fig.layout.yaxis.title.text
    np.testing.assert_array_equal(np.asarray(heat.z), m.values.T)  # a small map: not thinned
    assert len(fig.data) == len(PLAN_TRACES) and list(_trace(fig, "point").x) == [state.point[0]]
    loss = vf.plan_view(state, state.map("backwall-loss"))
    assert loss.data[0].zmid == 0.0  # diverging scale centred on no loss
    assert "display only" in vf.plan_view(state, m, max_cells=30).layout.title.text


def test_plan_view_outlines_the_listed_indications_by_their_sized_outlines(state):
    assert len(_trace(vf.plan_view(state, state.map()), "outlines").x) == 0  # not listed yet: nothing outlined
    analysis = state.analysis()
    recs = [r for r in analysis.indications if r["kind"] == "amplitude"]
    loss = [r for r in analysis.indications if r["kind"] == "backwall_loss"]
    # the first-look procedure of the plate: the loss under each lamination is in the lamination's record
    assert recs and not loss and all(r.backwall_loss_db is not None for r in recs)
    want = indication_outlines(recs, analysis.maps["amplitude"])
    fig = vf.plan_view(state, state.map("depth"))  # outlines from the sizing map, whatever map is shown
    xs = [x for k in ("outlines", "flagged_outlines") for x in _trace(fig, k).x if x is not None]
    assert sorted(xs) == sorted(float(v) for o in want for p in o.polygons for v in [*p[:, 0], p[0, 0]])
    assert [(o.id, o.region) for o in state.indication_outlines()] == [(o.id, o.region) for o in want]
    assert {o.region for o in want} <= {"6 dB drop", "6 dB drop from the local maximum at each edge",
                                        f"loss >= {state.settings.backwall_loss_threshold_db:g} dB"}
    assert all(np.array_equal(p, q) for o, r in zip(want[:len(recs)], recs, strict=True)
               for p, q in zip(o.polygons, r.outline_polygons, strict=True))  # the records' sized outlines


def test_ascan_and_section_views(state):
    state.select_point(37.5, 24.0)
    fa = vf.ascan_view(state, state.ascan())
    bar = [t for t in fa.data if (t.name or "").startswith("flaw")][0]
    assert [x for x in bar.x if x is not None][::5] == pytest.approx([1.0, 23.51])  # the window's two ends
    assert list(bar.y)[3:5] == [10.0, 10.0]  # the bar at the threshold
    assert "[%FSH]" in fa.layout.yaxis.title.text and "[mm]" in fa.layout.xaxis.title.text
    assert "scan 37.50 mm, index 24.00 mm" in fa.layout.title.text
    fb = vf.section_view(state, "scan", state.b_scan(), state.section_gates("scan"))
    assert fb.layout.yaxis.range[0] > fb.layout.yaxis.range[1]  # depth grows downwards
    assert list(fb.data[1].x) == [37.5, 37.5] and fb.layout.title.text.startswith("B-scan at index 24.00 mm")
    assert "[%FSH]" in fb.data[0].colorbar.title.text
    assert {t.name for t in fb.data[2:]} == {f"gate {n}" for n in state.gate_names}


def test_saved_views_carry_the_caution(state, tmp_path):
    paths = vf.save_views(state, tmp_path, stem="v", formats=("html",))
    assert {p.name for p in paths} == {f"v-{k}.html" for k in ("plan", "ascan", "bscan", "dscan")}
    assert all("ISO 9712" in p.read_text(encoding="utf-8") for p in paths)
    with pytest.raises(ndtmap.errors.NdtmapError, match="formats"):
        vf.save_views(state, tmp_path, formats=("gif",))


@pytest.mark.skipif(find_chromium() is None, reason="static export needs Chromium (apt-get install chromium)")
def test_static_views_are_written_when_chromium_is_present(state, tmp_path):
    paths = vf.save_views(state, tmp_path, stem="v", formats=("png", "svg"))
    assert {p.suffix for p in paths} == {".png", ".svg"}
    assert (tmp_path / "v-plan.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature, ISO/IEC 15948
