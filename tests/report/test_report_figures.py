"""Tests of ndtmap.report.figures: one builder per figure kind, and the notes for figures not made.

The plate sample and its example procedure are the simulator's (ndtmap.simulate); no external reference.
"""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path

import pytest

import ndtmap
from ndtmap.errors import ParameterError
from ndtmap.io import open_grid
from ndtmap.procedure import FIGURE_KINDS, load_procedure, run_procedure
from ndtmap.report import FIGURE_SIZES
from ndtmap.report import figures as report_figures
from ndtmap.report.figures import FIGURE_BUILDERS, BuiltFigure, build_figures
from ndtmap.simulate import sample_path

PLATE_PROCEDURE = Path(ndtmap.__file__).resolve().parent / "data" / "plate_lamination_procedure.toml"


@pytest.fixture(scope="module")
def plate():
    grid = open_grid(sample_path("plate_laminations.nc"))
    return grid, load_procedure(PLATE_PROCEDURE)


def test_one_builder_and_one_size_per_figure_kind():
    assert list(FIGURE_BUILDERS) == list(FIGURE_KINDS)
    assert set(FIGURE_SIZES) == set(FIGURE_KINDS)


def test_every_kind_in_the_order_asked(plate):
    grid, proc = plate
    analysis = run_procedure(grid, proc)
    kinds = ["dgs", "amplitude", "thickness", "bscan", "ascan"]
    figs, notes = build_figures(analysis, kinds, "KFP-PL-2041")
    made = [f.kind for f in figs]
    # the plate procedure has a back-wall gate: every kind but a DGS diagram without equivalent sizes is made
    assert made == [k for k in kinds if k != "dgs" or not notes]
    for f in figs:
        assert isinstance(f, BuiltFigure) and f.title.startswith("KFP-PL-2041: ") and f.caption
        assert f.figure.layout.title.text  # a plotly figure with its title


def test_kinds_that_need_a_backwall_gate_say_why_they_are_missing(plate):
    grid, proc = plate
    no_backwall = replace(proc, backwall_gate=None, backwall_loss_threshold_db=None, backwall_nominal_fsh=None)
    analysis = run_procedure(grid, no_backwall)
    figs, notes = build_figures(analysis, ["amplitude", "backwall_loss", "thickness", "dgs"], "P")
    assert [f.kind for f in figs] == ["amplitude"]
    assert notes == [
        "no back-wall-loss figure: the procedure has no back-wall gate",
        "no thickness figure: the procedure has no back-wall gate",
        "no DGS figure: the procedure has no back-wall gate (the DGS reference)",
    ]


def test_an_error_of_one_builder_is_a_note_and_the_others_go_on(plate, monkeypatch):
    grid, proc = plate
    analysis = run_procedure(grid, proc)

    def broken(analysis, part):
        raise ParameterError("`index_mm` 999 is outside the scan")

    monkeypatch.setitem(report_figures.FIGURE_BUILDERS, "bscan", broken)
    figs, notes = build_figures(analysis, ["bscan", "depth"], "P")
    assert [f.kind for f in figs] == ["depth"]
    assert notes == ["no bscan figure: `index_mm` 999 is outside the scan"]


def test_dgs_figure_curves_use_the_band_the_sizes_were_made_with(monkeypatch):
    # the equivalent sizes come from the broadband piston model with the grid's probe_bandwidth; a diagram
    # drawn at a single frequency would put the indications off their own curves inside the near field
    grid = open_grid(sample_path("forging_block.nc"))
    proc = load_procedure(Path(ndtmap.__file__).resolve().parent / "data" / "forging_procedure.toml")
    analysis = run_procedure(grid, proc)
    seen = {}
    real = report_figures.dgs_diagram

    def spy(*args, **kwargs):
        seen.update(kwargs)
        return real(*args, **kwargs)

    monkeypatch.setattr(report_figures, "dgs_diagram", spy)
    figs, notes = build_figures(analysis, ["dgs"], "KFP-FG-0317")
    assert [f.kind for f in figs] == ["dgs"], notes
    assert seen["bandwidth"] == pytest.approx(float(grid.attrs["probe_bandwidth"]))
