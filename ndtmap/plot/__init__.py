"""Figures of ndtmap: pure functions from results to plotly figures, for reports and the workbench alike.

Every figure of ndtmap is built here, once: the report and the workbench call
the same functions, so a map, a section or an A-scan looks the same in both
and an indication is outlined the same way everywhere (the exact cells of its
sizing region). Nothing is shown or written by the builders; plotly is
imported when the first figure is made.

* :mod:`ndtmap.plot.maps`: plan views (C-scans) of maps with indication
  outlines, the wall-thickness map with its minimum (:func:`map_figure`,
  :func:`thickness_figure`).
* :mod:`ndtmap.plot.outlines`: the outlines themselves
  (:func:`indication_outline`, :func:`indication_outlines`).
* :mod:`ndtmap.plot.plan`: the workbench's interactive plan view, with the
  selected position, section lines and measuring line (:func:`plan_figure`).
* :mod:`ndtmap.plot.sections`: B-scans, D-scans and other sections on a depth
  axis (:func:`section_figure`).
* :mod:`ndtmap.plot.ascan`: an A-scan with its gates (:func:`ascan_figure` from
  a grid's A-scan and gate results, :func:`ascan_arrays_figure` from plain
  data), :func:`ascan_at`.
* :mod:`ndtmap.plot.profile`: the amplitude along a measuring line with the
  drop level (:func:`profile_figure`).
* :mod:`ndtmap.plot.dgs`: DGS diagrams with indications on them.
* :mod:`ndtmap.plot.style`: colours, colour scales, the plotly template.
* :mod:`ndtmap.plot.export`: PNG, SVG, PDF and offline HTML files.

>>> from ndtmap.grid.examples import example_grid
>>> from ndtmap.plot import map_figure
>>> from ndtmap.scans import amplitude_map
>>> from ndtmap.gates import Gate
>>> fig = map_figure(amplitude_map(example_grid((4.0,)), Gate("bw", 10.0, 14.0)), title="KFP example")
>>> fig.layout.title.text
'KFP example'
"""

from ndtmap.plot.ascan import GateMark, ascan_arrays_figure, ascan_at, ascan_figure
from ndtmap.plot.dgs import dgs_figure, dgs_points
from ndtmap.plot.export import (
    STATIC_FORMATS,
    export_session,
    figure_bytes,
    find_chromium,
    stable_pdf,
    stable_svg,
    with_caption,
    write_figure,
    write_plotly_js,
)
from ndtmap.plot.maps import map_figure, thickness_figure
from ndtmap.plot.outlines import IndicationOutline, indication_outline, indication_outlines
from ndtmap.plot.plan import PLAN_TRACES, plan_figure, plan_overlays
from ndtmap.plot.profile import profile_figure
from ndtmap.plot.sections import SectionGate, section_figure
from ndtmap.plot.style import MISSING_COLOR, gate_colour, ndtmap_template, nice_length

__all__ = [
    # maps and outlines
    "map_figure",
    "thickness_figure",
    "indication_outline",
    "indication_outlines",
    "IndicationOutline",
    # the interactive plan view
    "plan_figure",
    "plan_overlays",
    "PLAN_TRACES",
    # sections, A-scans, profiles, DGS
    "section_figure",
    "SectionGate",
    "ascan_figure",
    "ascan_arrays_figure",
    "ascan_at",
    "GateMark",
    "profile_figure",
    "dgs_figure",
    "dgs_points",
    # look
    "ndtmap_template",
    "nice_length",
    "gate_colour",
    "MISSING_COLOR",
    # files
    "STATIC_FORMATS",
    "write_figure",
    "write_plotly_js",
    "export_session",
    "find_chromium",
    "figure_bytes",
    "stable_svg",
    "stable_pdf",
    "with_caption",
]
