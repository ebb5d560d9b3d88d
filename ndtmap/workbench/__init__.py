"""The Jupyter workbench: plan view, A-scan and sections, live gates, drop measuring, indication list.

>>> from ndtmap.workbench import open_workbench          # doctest: +SKIP
>>> wb = open_workbench("sample_grids/plate_laminations.nc")  # doctest: +SKIP
>>> wb                                                     # doctest: +SKIP

:class:`~ndtmap.workbench.state.WorkbenchState` holds the settings (one
procedure) and the selection and calls the library for every number;
:mod:`ndtmap.workbench.view_figures` hands its results to the figure builders
of :mod:`ndtmap.plot` (the report's too), thinned for display
(:mod:`ndtmap.workbench._display`); :mod:`ndtmap.workbench.view` shows them
with plotly ``FigureWidget`` and ipywidgets and links the controls to the
state.
"""

from ndtmap.scans import MAP_KINDS
from ndtmap.workbench.state import TOOLS, AScanView, DropMeasurement, WorkbenchState, default_procedure

__all__ = ["open_workbench", "Workbench", "WorkbenchState", "DropMeasurement", "AScanView", "MAP_KINDS", "TOOLS",
           "default_procedure"]


def __getattr__(name: str):  # the widget layer imports plotly and ipywidgets only when asked for
    if name in ("open_workbench", "Workbench"):
        from ndtmap.workbench import view

        return getattr(view, name)
    raise AttributeError(f"module 'ndtmap.workbench' has no attribute {name!r}")
