"""The workbench's widgets and figures, driven without a browser.

Controls are set and buttons pressed as a person would (``wb.controls[...]``), and the figures
are read back from the plotly FigureWidgets: the view must show what the state computes.
"""

import html

import numpy as np
import pytest

import ndtmap
from ndtmap.indications import FLAG_MEANINGS
from ndtmap.plot import PLAN_TRACES
from ndtmap.procedure import load_procedure
from ndtmap.simulate import sample_path
from ndtmap.workbench import open_workbench

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
    return fig.data[PLAN_TRACES.index(name)]


def _named(fig, start):
    """The first trace whose name starts with `start`."""
    return next(t for t in fig.data if (t.name or "").startswith(start))


def _bar_level(trace):
    """The threshold of a gate bar on the A-scan: the level of its horizontal segment (x0, thr) - (x1, thr)."""
    assert trace.y[3] == trace.y[4]
    return trace.y[3]


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


# ---------------------------------------------------------------------------- the widget


def test_workbench_shows_the_caution_the_views_and_the_controls(wb):
    assert ndtmap.CAUTION in html.unescape(_texts(wb.widget))
    for key in ("plan", "ascan", "bscan", "dscan", "profile"):
        assert wb.figures[key].layout.meta == f"ndtmap-{key}"
    assert {"threshold", "start", "end", "unit", "mode", "follows", "gate", "map_kind", "tool", "measure",
            "indications", "save_figures", "save_procedure", "add_gate", "remove_gate"} <= set(wb.controls)
    z = _z(wb.figures["plan"])
    np.testing.assert_array_equal(z, wb.state.map().values.T)
    assert len(_named(wb.figures["ascan"], "A-scan").y) == wb.state.grid.sizes["time"]
    assert _bar_level(_named(wb.figures["ascan"], "flaw")) == wb.state.gate("flaw").threshold_fsh
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
    assert _bar_level(_named(wb.figures["ascan"], "flaw")) == 78.0
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
    assert _named(wb.figures["ascan"], "second look")  # drawn on the A-scan
    wb.controls["remove_gate"].click()
    assert "second look" not in wb.state.gate_names
    assert not [t for t in wb.figures["ascan"].data if (t.name or "").startswith("second look")]
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
