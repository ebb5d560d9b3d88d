"""Tests of ndtmap.plot.style: scale-bar lengths, gate colours, the template."""

from __future__ import annotations

from ndtmap.plot import gate_colour, ndtmap_template, nice_length
from ndtmap.plot.style import OVERLAY_COLORS


def test_scale_bar_lengths_are_round():
    # 1-2-5 series (common practice for scale bars, no source)
    assert [nice_length(v) for v in (120.0, 80.0, 7.0, 260.0, 0.9)] == [20.0, 10.0, 1.0, 50.0, 0.1]
    assert nice_length(float("nan")) == 1.0


def test_gate_colours_are_stable_and_skip_the_pale_yellow():
    assert [gate_colour(k) for k in range(len(OVERLAY_COLORS))] == list(OVERLAY_COLORS)
    assert "#F0E442" not in OVERLAY_COLORS and gate_colour(len(OVERLAY_COLORS) + 2) == gate_colour(2)
    assert ndtmap_template().layout.colorway == OVERLAY_COLORS
