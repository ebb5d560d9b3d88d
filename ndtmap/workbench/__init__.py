"""The Jupyter workbench: plan view, A-scan and sections, live gates, drop measuring, indication list.

>>> from ndtmap.workbench import open_workbench          # doctest: +SKIP
>>> wb = open_workbench("sample_grids/plate_laminations.nc")  # doctest: +SKIP
>>> wb                                                     # doctest: +SKIP

:class:`~ndtmap.workbench.state.WorkbenchState` holds the selection and the
results and calls the processing functions; :mod:`ndtmap.workbench.view`
draws it with plotly ``FigureWidget`` and ipywidgets;
:mod:`ndtmap.workbench.plots` builds the figures (pure functions, also used
to save them).
"""

from ndtmap.workbench.state import MAP_KINDS, TOOLS, DropMeasurement, WorkbenchState, default_procedure

__all__ = ["open_workbench", "Workbench", "WorkbenchState", "DropMeasurement", "MAP_KINDS", "TOOLS",
           "default_procedure"]


def __getattr__(name: str):  # the widget layer imports plotly and ipywidgets only when asked for
    if name in ("open_workbench", "Workbench"):
        from ndtmap.workbench import view

        return getattr(view, name)
    raise AttributeError(f"module 'ndtmap.workbench' has no attribute {name!r}")
