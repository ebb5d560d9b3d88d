"""The workbench's widgets and figures, driven without a browser.

Controls are set and buttons pressed as a person would (``wb.controls[...]``), and the figures
are read back from the plotly FigureWidgets: the view must show what the state computes.
"""

import html
import math

import numpy as np
import plotly.graph_objects as go
import pytest

import ndtmap
from ndtmap.indications import FLAG_MEANINGS
from ndtmap.plot import find_chromium
from ndtmap.plot.style import color_scale_for
from ndtmap.procedure import load_procedure
from ndtmap.simulate import sample_path
from ndtmap.workbench import open_workbench, plots
from ndtmap.workbench.state import WorkbenchState

PLATE = sample_path("plate_laminations.nc")


@pytest.fixture(scope="module")
def plate():
    return ndtmap.open_grid(PLATE)


@pytest.fixture()
def wb(plate):
    w = open_workbench(plate, background=False)
    w.state.source = str(PLATE)
    return w


def _z(fig):
    return np.array([np.asarray(row, dtype=float) for row in fig.data[0].z])


def _trace(fig, name):
    return fig.data[plots.PLAN_TRACES.index(name)]


def _texts(widget):
    """All HTML/label text in a widget tree."""
    out = []
    stack = [widget]
    while stack:
        w = stack.pop()
        if hasattr(w, "value") and isinstance(w.value, str):
            out.append(w.value)
        stack.extend(getattr(w, "children", ()))
    return "\n".join(out)


# ---------------------------------------------------------------------------- pure figure builders


def test_thin_keeps_the_largest_or_smallest_value_of_each_block():
    v = np.arange(30.0).reshape(5, 6)
    v[0, 0] = np.nan
    z, a, b, f = plots.thin(v, np.arange(5.0), np.arange(6.0), 3, 3, "max")
    assert f == (2, 2) and z.shape == (3, 3)
    assert z[0, 0] == 7.0 and z[2, 2] == 29.0  # the last block holds one row (row 4)
    assert a.tolist() == [0.5, 2.5, 4.0]
    zmin = plots.thin(v, np.arange(5.0), np.arange(6.0), 3, 3, "min")[0]
    assert zmin[0, 0] == 1.0  # NaN is ignored, never a value
    all_nan = plots.thin(np.full((4, 4), np.nan), np.arange(4.0), np.arange(4.0), 2, 2)[0]
    assert np.isnan(all_nan).all()


def test_plan_figure_has_mm_axes_equal_aspect_and_a_labelled_colour_bar(plate):
    st = WorkbenchState(plate)
    m = st.map()
    fig = plots.plan_figure(m, point=st.point)
    heat = fig.data[0]
    assert heat.type == "heatmap"
    assert heat.colorscale == go.Heatmap(colorscale=color_scale_for("%FSH")).colorscale
    assert "[%FSH]" in heat.colorbar.title.text and "amplitude" in heat.colorbar.title.text
    assert fig.layout.yaxis.scaleanchor == "x" and fig.layout.yaxis.scaleratio == 1
    assert "[mm]" in fig.layout.xaxis.title.text and "[mm]" in fig.layout.yaxis.title.text
    np.testing.assert_array_equal(np.asarray(heat.z), m.values.T)  # small map: not thinned
    assert [t.name for t in fig.data][0] == "map" and len(fig.data) == len(plots.PLAN_TRACES)
    loss = st.map("backwall-loss")
    fig = plots.plan_figure(loss)
    assert fig.data[0].zmid == 0.0  # diverging scale centred on no loss
    assert fig.data[0].colorscale == go.Heatmap(colorscale=color_scale_for("dB")).colorscale


def test_a_large_map_is_thinned_for_display_and_says_so(plate):
    st = WorkbenchState(plate)
    fig = plots.plan_figure(st.map(), max_cells=30)
    z = np.asarray(fig.data[0].z)
    assert z.shape == (math.ceil(41 / 2), math.ceil(81 / 3))
    assert np.nanmax(z) == pytest.approx(float(np.nanmax(st.map().values)))  # the peak survives (block max)
    assert "display only" in fig.layout.title.text and "sizing uses every position" in fig.layout.title.text


def test_ascan_and_section_figures(plate):
    st = WorkbenchState(plate)
    st.select_point(37.5, 24.0)
    fa = plots.ascan_figure(st.ascan(), gate_order=st.gate_names)
    names = [t.name for t in fa.data]
    assert any(n.startswith("flaw") for n in names) and any(n.startswith("backwall") for n in names)
    gate = [t for t in fa.data if t.name.startswith("flaw")][0]
    assert list(gate.x) == pytest.approx([1.0, 1.0, 23.51, 23.51]) and list(gate.y) == [0.0, 10.0, 10.0, 0.0]
    assert "[%FSH]" in fa.layout.yaxis.title.text and "[mm]" in fa.layout.xaxis.title.text
    fb = plots.section_figure(st.b_scan(), along="scan", cursor_mm=37.5, gates=st.section_gates("scan"))
    assert fb.layout.yaxis.range[0] > fb.layout.yaxis.range[1]  # depth grows downwards
    assert list(fb.data[1].x) == [37.5, 37.5]
    assert "[%FSH]" in fb.data[0].colorbar.title.text


# ---------------------------------------------------------------------------- the widget


def test_workbench_shows_the_caution_the_views_and_the_controls(wb):
    assert ndtmap.CAUTION in html.unescape(_texts(wb.widget))
    for key in ("plan", "ascan", "bscan", "dscan", "profile"):
        assert wb.figures[key].layout.meta == f"ndtmap-{key}"
    assert {"threshold", "start", "end", "unit", "mode", "follows", "gate", "map_kind", "tool", "measure",
            "indications", "save_figures", "save_procedure", "add_gate", "remove_gate"} <= set(wb.controls)
    z = _z(wb.figures["plan"])
    np.testing.assert_array_equal(z, wb.state.map().values.T)
    assert len(wb.figures["ascan"].data) > 2 and len(wb.figures["ascan"].data[1].y) == wb.state.grid.sizes["time"]
    assert wb.controls["indications"].options
    assert "ready" in wb.status.value
    mb = wb._repr_mimebundle_()
    assert "application/vnd.jupyter.widget-view+json" in mb


def test_typing_a_gate_end_redraws_the_map_and_a_bad_value_is_refused(wb):
    before = _z(wb.figures["plan"])
    wb.controls["end"].value = 15.0
    assert wb.state.gate("flaw").end == 15.0
    after = _z(wb.figures["plan"])
    assert not np.array_equal(before, after, equal_nan=True)
    np.testing.assert_array_equal(after, wb.state.map().values.T)
    wb.controls["end"].value = 0.5  # before the start
    assert wb.state.gate("flaw").end == 15.0
    assert wb.controls["end"].value == 15.0
    assert "start" in wb.gate_message.value and "B00020" in wb.status.value


def test_threshold_slider_updates_gate_ascan_and_indication_list(wb):
    before = wb.controls["indications"].options
    wb.controls["threshold"].value = 78.0
    assert wb.state.gate("flaw").threshold_fsh == 78.0
    assert wb.wait(60)
    after = wb.controls["indications"].options
    assert after != before and len(after) == len(wb.state.indications())
    peaks = [r["peak_fsh"] for r in wb.state.indications() if r["kind"] == "amplitude"]
    assert peaks and min(peaks) >= 78.0
    assert "\u2265 78 %FSH" in wb.indication_head.value
    gate = [t for t in wb.figures["ascan"].data if t.name.startswith("flaw")][0]
    assert max(gate.y) == 78.0
    wb.controls["show_below_threshold"].value = False
    z = _z(wb.figures["plan"])
    assert np.nanmin(z) >= 78.0


def test_clicking_the_map_shows_the_ascan_and_moves_the_sections(wb):
    wb.click_map(37.2, 24.9)
    assert wb.state.point == (37.5, 24.0)
    assert "scan 37.50 mm, index 24.00 mm" in wb.figures["ascan"].layout.title.text
    assert list(wb.figures["bscan"].data[1].x) == [37.5, 37.5]
    assert list(wb.figures["dscan"].data[1].x) == [24.0, 24.0]
    assert list(_trace(wb.figures["plan"], "point").x) == [37.5]
    assert "index 24.00 mm" in wb.figures["bscan"].layout.title.text


def test_measuring_tool_gives_the_6db_length_and_draws_it(wb):
    wb.controls["tool"].value = "measure"
    wb.click_map(10.0, 24.0)
    assert len(_trace(wb.figures["plan"], "ruler").x) == 1
    wb.click_map(64.0, 24.0)
    m = wb.state.measurement()
    assert m.result.length_mm == pytest.approx(30.0, abs=1.5)  # lamination L1 is 30 mm long (sample truth)
    assert "6 dB drop length" in wb.ruler_result.value
    assert len(_trace(wb.figures["plan"], "ends").x) == 2
    prof = wb.figures["profile"]
    assert len(prof.data[0].x) == len(m.distance_mm)
    assert prof.data[1].y[0] == pytest.approx(m.level_fsh)
    wb.controls["ruler_end_scan"].value = 12.0
    wb.controls["measure"].click()  # a line that misses every indication
    assert "crosses no indication" in wb.ruler_result.value
    wb.controls["clear_measure"].click()
    assert wb.state.line is None and len(_trace(wb.figures["plan"], "ruler").x) == 0


def test_picking_an_indication_centres_the_views_and_explains_its_flags(wb):
    recs = wb.state.indications()
    rec = [r for r in recs if r["flags"]][0]
    wb.controls["indications"].value = rec["id"]
    assert wb.state.point == (rec["scan_mm"], rec["index_mm"])
    text = wb.indication_details.value
    for flag in rec["flags"]:
        assert FLAG_MEANINGS[flag].split(":")[0][:40] in text.replace("&#x27;", "'")
    x0, x1 = wb.figures["plan"].layout.xaxis.range
    assert x0 < rec["scan_min_mm"] and x1 > rec["scan_max_mm"]
    assert len(_trace(wb.figures["plan"], "selected").x) > 0
    wb.controls["whole_map"].click()
    assert wb.figures["plan"].layout.xaxis.range[0] < 0.0


def test_adding_and_removing_gates_in_the_panel(wb):
    wb.controls["new_gate_name"].value = "second look"
    wb.controls["add_gate"].click()
    assert "second look" in wb.state.gate_names and wb.controls["gate"].value == "second look"
    n_traces = len(wb.figures["ascan"].data)
    wb.controls["remove_gate"].click()
    assert "second look" not in wb.state.gate_names
    assert len(wb.figures["ascan"].data) == n_traces - 1
    wb.controls["gate"].value = "flaw"
    wb.controls["remove_gate"].click()  # the gate the indication list searches
    assert "flaw" in wb.state.gate_names and "indication list" in wb.gate_message.value


def test_map_kind_and_unit_controls(wb):
    wb.controls["map_kind"].value = "depth"
    assert "[mm]" in wb.figures["plan"].data[0].colorbar.title.text
    wb.controls["unit"].value = "us"
    assert wb.state.gate().unit == "us"
    assert wb.controls["end"].value == pytest.approx(23.51 / 2.96, abs=1e-3)  # t = d / (c / 2)


def test_save_procedure_and_views(wb, tmp_path):
    wb.controls["save_folder"].value = str(tmp_path / "out")
    wb.controls["save_stem"].value = "KFP-PL-2041-check"
    wb.controls["threshold"].value = 30.0
    wb.controls["save_procedure"].click()
    path = tmp_path / "out" / "KFP-PL-2041-check.toml"
    assert path.exists() and load_procedure(path) == wb.state.procedure()
    wb.controls["save_png"].value = False
    wb.controls["save_figures"].click()
    for view in ("plan", "ascan", "bscan", "dscan"):
        html = (tmp_path / "out" / f"KFP-PL-2041-check-{view}.html").read_text(encoding="utf-8")
        assert "ISO 9712" in html  # the caution travels with every saved figure
    assert "wrote" in wb.save_message.value


@pytest.mark.skipif(find_chromium() is None, reason="static export needs Chromium (apt-get install chromium)")
def test_static_views_are_written_when_chromium_is_present(plate, tmp_path):
    st = WorkbenchState(plate)
    paths = plots.save_views(st, tmp_path, stem="v", formats=("png", "svg"))
    assert {p.suffix for p in paths} == {".png", ".svg"}
    assert (tmp_path / "v-plan.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature, ISO/IEC 15948


def test_background_mode_keeps_the_state_usable_and_finishes(plate):
    wb = open_workbench(plate, background=True)
    assert wb.background
    wb.controls["end"].value = 20.0
    wb.click_map(37.5, 24.0)
    assert wb.wait(120)
    np.testing.assert_array_equal(_z(wb.figures["plan"]), wb.state.map().values.T)
    assert "index 24.00 mm" in wb.figures["bscan"].layout.title.text
    assert wb.progress.value == 1.0 and "ready" in wb.status.value
    assert wb.controls["indications"].options
