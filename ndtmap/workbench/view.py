"""The workbench's widgets: plotly ``FigureWidget`` views and ipywidgets controls linked to a state.

:class:`Workbench` builds the widgets, links them to a
:class:`~ndtmap.workbench.state.WorkbenchState` and copies into its views the
figures of what the state computed (:mod:`ndtmap.workbench.view_figures`,
drawn by :mod:`ndtmap.plot`); it computes nothing itself. Every control is
in :attr:`Workbench.controls` and every figure in :attr:`Workbench.figures`,
so code can drive the interface as a person would
(``wb.controls["threshold"].value = 30``, ``wb.controls["save_procedure"].click()``,
:meth:`Workbench.click_map`).

Layout
    A head line (part, file, size) with a status line and a progress bar,
    the caution, then two columns: the plan view with its tool bar and the
    panels *Gates*, *Drop ruler*, *Indications* and *Save* on the left; the
    A-scan, the B-scan and the D-scan through the selected position on the
    right.

Long work
    With ``background=True`` (the default for grids of more than
    :data:`BACKGROUND_MIN_SAMPLES` samples or dask-backed ones) maps and the
    indication list are computed on a worker thread while the controls stay
    usable; the progress bar shows how far it is and a newer edit replaces a
    waiting one. :meth:`Workbench.wait` waits for the work to finish.
"""

from __future__ import annotations

import html
import os
import threading
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

import ipywidgets as W
import plotly.graph_objects as go
import xarray as xr

from ndtmap._shared.arrays import is_lazy
from ndtmap.errors import NdtmapError, ParameterTypeError
from ndtmap.gates import GATE_MODES
from ndtmap.plot import PLAN_TRACES, find_chromium
from ndtmap.scans import MAP_KINDS
from ndtmap.workbench import view_figures as vf
from ndtmap.workbench._sync import figure_widget, sync_traces
from ndtmap.workbench._tasks import TaskRunner
from ndtmap.workbench.listing import indication_details, indication_label
from ndtmap.workbench.state import WorkbenchState

__all__ = ["Workbench", "open_workbench", "BACKGROUND_MIN_SAMPLES"]

#: Grids with more samples than this are computed on a worker thread by default.
BACKGROUND_MIN_SAMPLES = 20_000_000

PLAN_WIDTH = 500
SIDE_WIDTH = 480
ASCAN_HEIGHT = 300
SECTION_HEIGHT = 260
PROFILE_HEIGHT = 240
_NOTE = "<div style='font-size:11px;line-height:1.35;color:#444'>"
_ERROR = "color:#B00020"

#: Layout of the side views in the widget, over the figures' own: small margins, short depth axis title, no legend
#: on the A-scan (each gate's name is written on its bar).
_SIDE_LAYOUT = {
    "ascan": dict(margin=dict(l=60, r=10, t=40, b=44), showlegend=False, clickmode="event"),
    "bscan": dict(margin=dict(l=60, r=10, t=62, b=44), yaxis=dict(title=dict(text="depth [mm]")), clickmode="event"),
    "dscan": dict(margin=dict(l=60, r=10, t=62, b=44), yaxis=dict(title=dict(text="depth [mm]")), clickmode="event"),
}
_KIND_TEXT = {"amplitude": "peak amplitude", "depth": "event depth", "thickness": "wall thickness",
              "backwall-loss": "back-wall loss"}
#: The map kinds of the tool bar: (label, kind) for every kind of ndtmap.scans.MAP_KINDS.
_KIND_LABELS = tuple((_KIND_TEXT.get(k, k), k) for k in MAP_KINDS)

def open_workbench(grid_or_path: xr.Dataset | str | os.PathLike[str], *, procedure: Any = None,
                   background: bool | None = None) -> Workbench:
    """Open the workbench on a scan grid.

    Parameters
    ----------
    grid_or_path : xarray.Dataset or path
        A scan grid, or the path of one (opened with
        :func:`ndtmap.io.open_grid`; large files are opened lazily).
    procedure : Procedure or path, optional
        Gates and settings to start from (default: the first-look procedure
        derived from the grid, see
        :func:`ndtmap.workbench.state.default_procedure`).
    background : bool, optional
        Compute on a worker thread (default: for large or dask-backed grids).

    Returns
    -------
    Workbench
        Display it (``display(wb)`` or as the last expression of a cell);
        ``wb.widget`` is the root widget and ``wb.state`` the state.

    Raises
    ------
    GridError, FileFormatError, ProcedureError, GateError
        For a grid or procedure that cannot be used.
    """
    from ndtmap.io import open_grid

    if isinstance(grid_or_path, xr.Dataset):
        grid, source = grid_or_path, None
    elif isinstance(grid_or_path, str | os.PathLike):
        source = str(grid_or_path)
        grid = open_grid(grid_or_path)
    else:
        raise ParameterTypeError(
            f"`grid_or_path` must be a scan grid (xarray.Dataset) or a path, got {type(grid_or_path).__name__}"
        )
    return Workbench(WorkbenchState(grid, procedure=procedure, source=source), background=background)


def _message(exc: BaseException) -> str:
    if isinstance(exc, NdtmapError):
        return str(exc)
    return f"unexpected {type(exc).__name__}: {exc}"




class Workbench:
    """The workbench: views and controls on a :class:`WorkbenchState`.

    Parameters
    ----------
    state : WorkbenchState
    background : bool, optional
        Compute maps and the indication list on a worker thread (default:
        grids above :data:`BACKGROUND_MIN_SAMPLES` samples or dask-backed).

    Attributes
    ----------
    state : WorkbenchState
    widget : ipywidgets.VBox
        The root widget.
    controls : dict of str to ipywidgets.Widget
        Every control by name (see :meth:`control_names`).
    figures : dict of str to plotly.graph_objects.FigureWidget
        ``plan``, ``ascan``, ``bscan``, ``dscan``, ``profile``.
    """

    def __init__(self, state: WorkbenchState, *, background: bool | None = None) -> None:
        if not isinstance(state, WorkbenchState):
            raise ParameterTypeError(f"`state` must be a WorkbenchState, got {type(state).__name__}")
        self.state = state
        self._asked_background = background
        background = self._background_asked_or_needed()
        self.controls: dict[str, Any] = {}
        self.figures: dict[str, go.FigureWidget] = {}
        self._draw_lock = threading.RLock()
        self._local = threading.local()  # per thread: True while the view itself sets control values
        self._shown_map: xr.DataArray | None = None
        self._clickable: set[int] = set()
        self._build()
        self._runner = TaskRunner(background=bool(background), report=self._report)
        # the indication list (run_procedure) goes to a worker thread unless told not to
        self._list_runner = TaskRunner(background=self._asked_background is not False, report=self._report)
        self.refresh()

    @property
    def _syncing(self) -> bool:
        return getattr(self._local, "syncing", False)

    @_syncing.setter
    def _syncing(self, value: bool) -> None:
        self._local.syncing = value

    # ------------------------------------------------------------------ display
    def _repr_mimebundle_(self, **kwargs: Any) -> Any:
        return self.widget._repr_mimebundle_(**kwargs)

    def _ipython_display_(self) -> None:
        from IPython.display import display

        display(self.widget)

    @property
    def background(self) -> bool:
        """True when maps and the indication list are computed on a worker thread."""
        return self._runner.background

    def wait(self, timeout: float | None = 120.0) -> bool:
        """Wait until the computations asked for are done and drawn; False if `timeout` (s) passed."""
        end = None if timeout is None else time.monotonic() + timeout
        for runner in (self._runner, self._list_runner, self._runner):
            left = None if end is None else max(0.0, end - time.monotonic())
            if not runner.wait(left):
                return False
        return True

    def control_names(self) -> list[str]:
        """Names of the controls in :attr:`controls`."""
        return sorted(self.controls)

    # ------------------------------------------------------------------ building
    def _build(self) -> None:
        """Build every widget, in named parts, then link them to the state."""
        head = self._build_head()
        toolbar = self._build_toolbar()
        self._build_figures()
        tabs = W.Tab(children=[self._build_gates_panel(), self._build_ruler_panel(), self._build_indications_panel(),
                               self._build_save_panel()], layout=W.Layout(width="100%"))
        for k, title in enumerate(("Gates", "Drop ruler", "Indications", "Save")):
            tabs.set_title(k, title)
        self.tabs = tabs
        left = W.VBox([toolbar, self.figures["plan"], tabs], layout=W.Layout(width=f"{PLAN_WIDTH + 45}px"))
        right = W.VBox([self.figures["ascan"], self.figures["bscan"], self.figures["dscan"]],
                       layout=W.Layout(width=f"{SIDE_WIDTH + 10}px"))
        body = W.HBox([left, right], layout=W.Layout(flex_flow="row wrap", align_items="flex-start"))
        self.widget = W.VBox([*head, body])
        self.widget.add_class("ndtmap-workbench")
        self._sync_gate_controls()
        self._link()

    def _build_head(self) -> list[Any]:
        """The head line (part, file, size), the status line, the progress bar and the caution."""
        st = self.state
        self.status = W.HTML(value="", layout=W.Layout(flex="1 1 auto"))
        self.progress = W.FloatProgress(value=1.0, min=0.0, max=1.0, bar_style="info",
                                        layout=W.Layout(width="140px"))
        self.progress.add_class("ndtmap-progress")
        head = W.HTML(f"<b style='font-size:14px'>ndtmap workbench</b>&nbsp; {html.escape(st.describe())}")
        caution = W.HTML(
            "<div style='border-left:4px solid #D55E00;background:#FFF4EC;padding:4px 8px;font-size:12px;"
            f"line-height:1.35'><b>Caution.</b> {html.escape(st.caution)}</div>"
        )
        caution.add_class("ndtmap-caution")
        return [W.HBox([head, self.status, self.progress], layout=W.Layout(align_items="center")), caution]

    def _build_toolbar(self) -> W.HBox:
        """The plan view's tool bar: map kind, gate, tool, whole map."""
        st, c = self.state, self.controls
        c["map_kind"] = W.Dropdown(options=_KIND_LABELS, value=st.map_kind, description="map",
                                   style={"description_width": "32px"}, layout=W.Layout(width="170px"))
        c["gate"] = W.Dropdown(options=list(st.gate_names), value=st.active_gate, description="gate",
                               style={"description_width": "32px"}, layout=W.Layout(width="140px"))
        c["tool"] = W.ToggleButtons(options=[("inspect", "inspect"), ("measure", "measure")], value=st.tool,
                                    tooltips=["a click selects the A-scan and the sections",
                                              "two clicks draw a line to measure the drop length along"],
                                    style={"button_width": "80px"})
        c["whole_map"] = W.Button(description="all", tooltip="show the whole scanned area",
                                  layout=W.Layout(width="44px"))
        return W.HBox([c["map_kind"], c["gate"], c["tool"], c["whole_map"]],
                      layout=W.Layout(flex_flow="row wrap", align_items="center"))

    def _build_figures(self) -> None:
        """The five views; the A-scan and the sections are filled when the first position is drawn."""
        self.figures["plan"] = self._first_plan()
        for key, height in (("ascan", ASCAN_HEIGHT), ("bscan", SECTION_HEIGHT), ("dscan", SECTION_HEIGHT)):
            self.figures[key] = go.FigureWidget(layout=dict(width=SIDE_WIDTH, height=height, meta=f"ndtmap-{key}"))
        self.figures["profile"] = figure_widget(vf.profile_view(None, width=PLAN_WIDTH - 20, height=PROFILE_HEIGHT),
                                                meta="ndtmap-profile")

    def _build_gates_panel(self) -> W.VBox:
        """The shown gate's fields, the detection signal, display options, adding and removing gates."""
        st, c = self.state, self.controls
        names = list(st.gate_names)
        full = float(st.grid.attrs.get("digitiser_full_scale_fsh", 100.0) or 100.0)
        c["start"] = W.FloatText(description="start", continuous_update=False, style={"description_width": "60px"},
                                 layout=W.Layout(width="170px"))
        c["end"] = W.FloatText(description="end", continuous_update=False, style={"description_width": "60px"},
                               layout=W.Layout(width="170px"))
        c["unit"] = W.Dropdown(options=[("mm", "mm"), ("us", "us")], description="unit",
                               style={"description_width": "40px"}, layout=W.Layout(width="120px"))
        c["threshold"] = W.FloatSlider(min=0.0, max=max(100.0, full), step=0.5, description="threshold",
                                       continuous_update=False, readout_format=".1f",
                                       style={"description_width": "70px"}, layout=W.Layout(width="370px"))
        c["mode"] = W.Dropdown(options=list(GATE_MODES), description="detection", layout=W.Layout(width="210px"))
        c["follows"] = W.Dropdown(options=[("(none)", "")] + [(n, n) for n in names], description="follows",
                                  layout=W.Layout(width="210px"))
        c["detect"] = W.Dropdown(options=[("rectified", "rectified"), ("envelope (RF)", "envelope")],
                                 value=st.settings.detect, description="signal", layout=W.Layout(width="210px"))
        c["show_below_threshold"] = W.Checkbox(value=st.show_below_threshold, description="show below threshold",
                                               indent=False, layout=W.Layout(width="190px"))
        is_rf = st.grid["ascan"].attrs.get("signal", "rf") == "rf"
        c["show_rf"] = W.Checkbox(value=False, disabled=not is_rf, description="RF on the A-scan", indent=False,
                                  layout=W.Layout(width="150px"))
        c["new_gate_name"] = W.Text(placeholder="name of a new gate", layout=W.Layout(width="170px"))
        c["add_gate"] = W.Button(description="add gate", tooltip="a new gate with the window of the shown gate",
                                 layout=W.Layout(width="90px"))
        c["remove_gate"] = W.Button(description="remove gate", tooltip="remove the shown gate",
                                    layout=W.Layout(width="112px"))
        for key in ("start", "end", "threshold", "unit", "mode", "follows", "detect"):
            c[key].add_class(f"ndtmap-gate-{key}")
        self.gate_message = W.HTML()
        return W.VBox([
            W.HTML(_NOTE + "The shown gate (tool bar). Start and end are depths below the surface in mm, or "
                   "times on the record in us; for a gate that follows another, after that gate's event.</div>"),
            W.HBox([c["start"], c["end"], c["unit"]]),
            W.HBox([c["threshold"], W.HTML("%FSH")]),
            W.HBox([c["mode"], c["follows"]]),
            c["detect"],
            W.HBox([c["show_below_threshold"], c["show_rf"]]),
            W.HBox([c["new_gate_name"], c["add_gate"], c["remove_gate"]]),
            self.gate_message,
        ])

    def _build_ruler_panel(self) -> W.VBox:
        """The drop ruler: the line's ends, the drop in dB, the result and the profile along the line."""
        c = self.controls
        for key, desc in (("ruler_start_scan", "from scan"), ("ruler_start_index", "index"),
                          ("ruler_end_scan", "to scan"), ("ruler_end_index", "index")):
            c[key] = W.FloatText(description=desc, layout=W.Layout(width="150px"))
        c["drop_db"] = W.BoundedFloatText(value=self.state.drop_db, min=0.5, max=40.0, step=0.5,
                                          description="drop dB", layout=W.Layout(width="150px"))
        c["measure"] = W.Button(description="measure", button_style="primary", layout=W.Layout(width="90px"))
        c["clear_measure"] = W.Button(description="clear", layout=W.Layout(width="70px"))
        self.ruler_result = W.HTML()
        return W.VBox([
            W.HTML(_NOTE + "Choose <i>measure</i> in the tool bar and click the two ends of a line across an "
                   "indication on the plan view (or on a section), or type them here. The length is where the "
                   "amplitude along the line has dropped the set number of dB below the indication's peak "
                   "(6 dB: half the peak).</div>"),
            W.HBox([c["ruler_start_scan"], c["ruler_start_index"]]),
            W.HBox([c["ruler_end_scan"], c["ruler_end_index"]]),
            W.HBox([c["drop_db"], c["measure"], c["clear_measure"]]),
            self.ruler_result,
            self.figures["profile"],
        ])

    def _build_indications_panel(self) -> W.VBox:
        """The settings of the indication list, the list and the details of the selected indication."""
        c, proc = self.controls, self.state.settings
        names = list(self.state.gate_names)
        c["detection_gate"] = W.Dropdown(options=names, value=proc.detection_gate, description="search gate",
                                         style={"description_width": "initial"}, layout=W.Layout(width="210px"))
        c["backwall_gate"] = W.Dropdown(options=[("(none)", "")] + [(n, n) for n in names],
                                        value=proc.backwall_gate or "", description="back-wall gate",
                                        style={"description_width": "initial"}, layout=W.Layout(width="230px"))
        c["loss_threshold_db"] = W.BoundedFloatText(value=proc.backwall_loss_threshold_db or 0.0, min=0.0, max=60.0,
                                                    step=0.5, description="back-wall loss \u2265 dB (0: off)",
                                                    style={"description_width": "initial"},
                                                    layout=W.Layout(width="230px"))
        c["min_area_mm2"] = W.BoundedFloatText(value=proc.min_area_mm2, min=0.0, max=1e9, step=1.0,
                                               description="least area mm\u00b2",
                                               style={"description_width": "initial"}, layout=W.Layout(width="210px"))
        c["refresh_indications"] = W.Button(description="list again", layout=W.Layout(width="90px"))
        c["indications"] = W.Select(options=[], rows=7, layout=W.Layout(width="98%"))
        c["indications"].add_class("ndtmap-indications")
        self.indication_head = W.HTML()
        self.indication_details = W.HTML()
        return W.VBox([
            W.HBox([c["detection_gate"], c["backwall_gate"]]),
            W.HBox([c["loss_threshold_db"], c["min_area_mm2"], c["refresh_indications"]]),
            self.indication_head, c["indications"], self.indication_details,
        ])

    def _build_save_panel(self) -> W.VBox:
        """Saving the views (HTML, PNG/SVG with Chromium) and the settings as a procedure file."""
        c = self.controls
        c["save_folder"] = W.Text(value=str(Path.cwd() / "workbench-output"), description="folder",
                                  layout=W.Layout(width="98%"))
        c["save_stem"] = W.Text(value=str(self.state.grid.attrs.get("part_id", "workbench")), description="name")
        browser = find_chromium() is not None
        c["save_png"] = W.Checkbox(value=browser, disabled=not browser, description="PNG", indent=False,
                                   layout=W.Layout(width="70px"))
        c["save_svg"] = W.Checkbox(value=False, disabled=not browser, description="SVG", indent=False,
                                   layout=W.Layout(width="70px"))
        c["save_figures"] = W.Button(description="save views", tooltip="plan, A-scan, sections (and the profile)",
                                     layout=W.Layout(width="100px"))
        c["save_procedure"] = W.Button(description="save procedure",
                                       tooltip="gates and settings as a procedure file for `ndtmap indications "
                                               "--procedure`", layout=W.Layout(width="120px"))
        self.save_message = W.HTML()
        return W.VBox([
            c["save_folder"], c["save_stem"],
            W.HBox([W.HTML("HTML always" + ("; also&nbsp;" if browser else " (no Chromium: no PNG/SVG)&nbsp;")),
                    c["save_png"], c["save_svg"]]),
            W.HBox([c["save_figures"], c["save_procedure"]]),
            self.save_message,
        ])

    def _first_plan(self) -> go.FigureWidget:
        """The plan view's widget, made from the first map when it is at hand (one message, not many)."""
        st = self.state
        if not self._background_asked_or_needed():
            try:
                m = st.map()
                widget = figure_widget(vf.plan_view(st, m, width=PLAN_WIDTH), meta="ndtmap-plan")
                self._shown_map = m
                return widget
            except NdtmapError as exc:
                self._error(exc)
        empty = go.Figure(data=[go.Heatmap(z=[[None]])] + [go.Scatter(x=[], y=[]) for _ in PLAN_TRACES[1:]],
                          layout=dict(width=PLAN_WIDTH, height=360, meta="ndtmap-plan"))
        return go.FigureWidget(empty)

    def _background_asked_or_needed(self) -> bool:
        if self._asked_background is not None:
            return bool(self._asked_background)
        grid = self.state.grid
        return is_lazy(grid) or int(grid["ascan"].size) > BACKGROUND_MIN_SAMPLES

    def _link(self) -> None:
        c = self.controls
        c["map_kind"].observe(self._on_kind, "value")
        c["gate"].observe(self._on_active_gate, "value")
        c["tool"].observe(self._on_tool, "value")
        c["whole_map"].on_click(lambda _b: self._whole_map())
        for key in ("start", "end", "threshold", "mode", "follows"):
            c[key].observe(self._on_gate_field, "value")
        c["unit"].observe(self._on_unit, "value")
        c["detect"].observe(self._on_detect, "value")
        c["show_below_threshold"].observe(self._on_show_below, "value")
        c["show_rf"].observe(lambda _ch: self._request_point(), "value")
        c["add_gate"].on_click(lambda _b: self._guard(self._add_gate, self.gate_message))
        c["remove_gate"].on_click(lambda _b: self._guard(self._remove_gate, self.gate_message))
        c["measure"].on_click(lambda _b: self._guard(self._measure_typed, self.ruler_result))
        c["clear_measure"].on_click(lambda _b: self._clear_measure())
        c["drop_db"].observe(self._on_drop_db, "value")
        c["detection_gate"].observe(self._on_detection_settings, "value")
        c["backwall_gate"].observe(self._on_detection_settings, "value")
        c["loss_threshold_db"].observe(self._on_detection_settings, "value")
        c["min_area_mm2"].observe(self._on_detection_settings, "value")
        c["refresh_indications"].on_click(lambda _b: self._request_indications())
        c["indications"].observe(self._on_pick, "value")
        c["save_figures"].on_click(lambda _b: self._guard(self._save_figures, self.save_message))
        c["save_procedure"].on_click(lambda _b: self._guard(self._save_procedure, self.save_message))
        self._clicks_on()

    def _clicks_on(self) -> None:
        """Make sure every trace of the plan view and the sections reports clicks (traces may be replaced)."""
        handlers = {"plan": self._on_plan_click, "bscan": self._on_bscan_click, "dscan": self._on_dscan_click}
        with self._draw_lock:
            for key, handler in handlers.items():
                for trace in self.figures[key].data:
                    if id(trace) not in self._clickable:
                        trace.on_click(handler)
                        self._clickable.add(id(trace))

    # ------------------------------------------------------------------ status
    def _report(self, fraction: float | None, text: str) -> None:
        if text:
            self.status.value = f"<span style='color:#555'>{html.escape(text)}\u2026</span>"
            self.progress.bar_style = "info"
            self.progress.value = 0.5 if fraction is None else float(fraction)
        else:
            if _ERROR not in self.status.value:
                self.status.value = "<span style='color:#2E7D32'>ready</span>"
            self.progress.value = 1.0
            self.progress.bar_style = "success"

    def _error(self, exc: BaseException, where: W.HTML | None = None) -> None:
        text = html.escape(_message(exc))
        self.status.value = f"<span style='{_ERROR}'>{text}</span>"
        if where is not None:
            where.value = f"<span style='{_ERROR}'>{text}</span>"

    def _guard(self, action: Callable[[], Any], where: W.HTML | None = None) -> Any:
        """Run a user's action; show its error (if any) in the status line and in `where`."""
        if where is not None and _ERROR in where.value:
            where.value = ""
        if _ERROR in self.status.value:
            self.status.value = "<span style='color:#2E7D32'>ready</span>"
        try:
            return action()
        except Exception as exc:  # noqa: BLE001 - shown in the interface; nothing escapes into a callback
            self._error(exc, where)
            return None

    # ------------------------------------------------------------------ refreshing
    def refresh(self) -> None:
        """Recompute (as needed) and redraw every view."""
        self._request_map()
        self._request_point()
        self._request_indications()

    def _request_map(self) -> None:
        st = self.state
        kind, gate = st.map_kind, st.active_gate

        def work(progress: Any) -> tuple[xr.DataArray, Any, BaseException | None]:
            m = st.map(kind, gate, progress=progress)
            meas, err = None, None
            try:
                meas = st.measurement()
            except NdtmapError as exc:
                err = exc
            return m, meas, err

        def done(result: tuple[xr.DataArray, Any, BaseException | None]) -> None:
            m, meas, err = result
            if (st.map_kind, st.active_gate) != (kind, gate):
                return  # a newer request draws
            self._draw_plan(m, meas)
            self._draw_ruler(meas, err)

        if st.has_gate_result(gate) or not self._runner.background:
            try:
                done(work(None))
            except Exception as exc:  # noqa: BLE001
                self._error(exc)
        else:
            self._runner.submit("map", work, done, self._error)

    def _request_point(self) -> None:
        st = self.state

        def work(progress: Any) -> tuple[Any, ...]:
            if progress is not None:
                progress(None, "A-scan and sections")
            return (st.point, st.ascan(), st.b_scan(), st.section_gates("scan"), st.d_scan(),
                    st.section_gates("index"))

        def done(result: tuple[Any, ...]) -> None:
            point, ascan, bscan, bgates, dscan, dgates = result
            if point != st.point:
                return
            self._draw_point(ascan, bscan, bgates, dscan, dgates)
            self._draw_overlays()

        self._runner.submit("point", work, done, self._error)

    def _request_indications(self) -> None:
        st = self.state
        try:
            proc = st.procedure()
        except NdtmapError as exc:
            self._error(exc, self.indication_head)
            return
        det = proc.gate(proc.detection_gate)
        level = f"\u2265 {html.escape(proc.detection_level)}"
        extra = ""
        if proc.backwall_gate:
            extra = f"; back-wall gate {html.escape(proc.backwall_gate)}"
            if proc.backwall_loss_threshold_db:
                extra += f" (loss \u2265 {proc.backwall_loss_threshold_db:g} dB listed)"
        self.indication_head.value = (f"<small>Indications of gate <b>{html.escape(det.name)}</b> {level}"
                                      f"{extra}: <i>listing\u2026</i></small>")

        def work(progress: Any) -> list[dict[str, Any]]:
            return st.indications(progress=progress)

        def done(records: list[dict[str, Any]]) -> None:
            self.indication_head.value = (f"<small>Indications of gate <b>{html.escape(det.name)}</b> {level}"
                                          f"{extra}: {len(records)} found (6 dB drop sizes, as "
                                          "<code>ndtmap indications</code>)</small>")
            self._fill_indications(records)
            self._draw_overlays()

        def failed(exc: BaseException) -> None:
            self._error(exc, self.indication_head)

        self._list_runner.submit("indications", work, done, failed)


    # ------------------------------------------------------------------ drawing
    def _draw_plan(self, m: xr.DataArray, meas: Any) -> None:
        fig = vf.plan_view(self.state, m, meas, width=PLAN_WIDTH)
        with self._draw_lock:
            first_draw = self._shown_map is None
            sync_traces(self.figures["plan"], fig, parts=("title",), whole_layout=first_draw, meta="ndtmap-plan")
            self._shown_map = m
        self._clicks_on()

    def _draw_overlays(self) -> None:
        if self._shown_map is None:
            return
        traces = vf.plan_view_overlays(self.state, self.state.cached_measurement())
        with self._draw_lock:
            sync_traces(self.figures["plan"], go.Figure(data=[go.Heatmap(), *traces]), first=1)
        self._clicks_on()

    def _draw_point(self, ascan: Any, bscan: Any, bgates: Any, dscan: Any, dgates: Any) -> None:
        st = self.state
        figs = {
            "ascan": vf.ascan_view(st, ascan, show_rf=bool(self.controls["show_rf"].value), width=SIDE_WIDTH,
                                   height=ASCAN_HEIGHT),
            "bscan": vf.section_view(st, "scan", bscan, bgates, width=SIDE_WIDTH, height=SECTION_HEIGHT),
            "dscan": vf.section_view(st, "index", dscan, dgates, width=SIDE_WIDTH, height=SECTION_HEIGHT),
        }
        with self._draw_lock:
            for key, fig in figs.items():
                w = self.figures[key]
                parts = ("title", "shapes", "annotations") + (("yaxis",) if key == "ascan" else ())
                sync_traces(w, fig, parts=parts, whole_layout=len(w.data) == 0, meta=f"ndtmap-{key}",
                            **_SIDE_LAYOUT[key])
        self._clicks_on()

    def _draw_ruler(self, meas: Any, err: BaseException | None = None) -> None:
        fig = vf.profile_view(meas, width=PLAN_WIDTH - 20, height=PROFILE_HEIGHT)
        with self._draw_lock:
            sync_traces(self.figures["profile"], fig, parts=("title",))
        if err is not None:
            self.ruler_result.value = f"<span style='{_ERROR}'>{html.escape(_message(err))}</span>"
        elif meas is None:
            self.ruler_result.value = ""
        else:
            r = meas.result
            rows = [meas.summary()]
            if r.start_mm is not None and r.end_mm is not None:
                rows.append(f"ends at ({r.start_mm[0]:.1f}, {r.start_mm[1]:.1f}) and ({r.end_mm[0]:.1f}, "
                            f"{r.end_mm[1]:.1f}) mm; uncertainty from the sampling at the two ends")
            rows += list(r.notes)
            self.ruler_result.value = "<br>".join(html.escape(x) for x in rows)
            (a, b), (c2, d) = meas.line_mm
            self._set_quietly({"ruler_start_scan": a, "ruler_start_index": b, "ruler_end_scan": c2,
                               "ruler_end_index": d})

    def _fill_indications(self, records: list[dict[str, Any]]) -> None:
        st = self.state
        options = [(indication_label(r), r["id"]) for r in records]
        value = st.selected_indication if any(r["id"] == st.selected_indication for r in records) else None
        self._set_quietly({"indications": None})
        self._syncing = True
        try:
            self.controls["indications"].options = options
            self.controls["indications"].value = value
        finally:
            self._syncing = False
        self._show_details(st.selected_record())

    def _show_details(self, rec: dict[str, Any] | None) -> None:
        if rec is None:
            self.indication_details.value = "<small>Select an indication to centre the views on it.</small>"
            return
        rows = "".join(f"<tr><td style='padding-right:8px;vertical-align:top'><b>{html.escape(k)}</b></td>"
                       f"<td>{html.escape(v)}</td></tr>" for k, v in indication_details(rec))
        self.indication_details.value = f"<table style='font-size:12px'>{rows}</table>"

    # ------------------------------------------------------------------ gate panel
    def _set_quietly(self, values: dict[str, Any]) -> None:
        self._syncing = True
        try:
            for key, value in values.items():
                self.controls[key].value = value
        finally:
            self._syncing = False

    def _sync_gate_controls(self) -> None:
        st = self.state
        g = st.gate()
        names = list(st.gate_names)
        self._syncing = True
        try:
            c = self.controls
            c["gate"].options = names
            c["gate"].value = st.active_gate
            c["follows"].options = [("(none)", "")] + [(n, n) for n in names if n != g.name]
            c["detection_gate"].options = names
            c["detection_gate"].value = st.settings.detection_gate
            c["backwall_gate"].options = [("(none)", "")] + [(n, n) for n in names]
            c["backwall_gate"].value = st.settings.backwall_gate or ""
            c["start"].value = g.start
            c["end"].value = g.end
            c["unit"].value = g.unit
            c["threshold"].disabled = g.level_re_curve  # a level re the DAC has no single %FSH value
            c["threshold"].value = g.threshold_fsh if g.threshold_fsh is not None else 0.0
            c["mode"].value = g.mode
            c["follows"].value = g.follows or ""
            c["detect"].value = st.settings.detect
            c["start"].description = f"start {g.unit}"
            c["end"].description = f"end {g.unit}"
        finally:
            self._syncing = False

    def _after_gate_change(self) -> None:
        self._request_map()
        self._request_point()
        self._request_indications()

    def _on_gate_field(self, change: dict[str, Any]) -> None:
        if self._syncing:
            return
        c = self.controls
        fields = {"start": float(c["start"].value), "end": float(c["end"].value),
                  "threshold_fsh": float(c["threshold"].value), "mode": c["mode"].value,
                  "follows": c["follows"].value or None}
        if self.state.gate(self.state.active_gate).level_re_curve:
            del fields["threshold_fsh"]  # the level stays in dB re the DAC
        done = self._guard(lambda: self.state.set_gate(self.state.active_gate, **fields), self.gate_message)
        if done is None:
            self._sync_gate_controls()
            return
        self._after_gate_change()

    def _on_unit(self, change: dict[str, Any]) -> None:
        if self._syncing:
            return
        done = self._guard(lambda: self.state.convert_unit(self.state.active_gate, change["new"]), self.gate_message)
        self._sync_gate_controls()
        if done is not None:
            self._after_gate_change()

    def _on_active_gate(self, change: dict[str, Any]) -> None:
        if self._syncing or change["new"] is None:
            return
        if self._guard(lambda: self.state.set_active_gate(change["new"]) or True, self.gate_message):
            self._sync_gate_controls()
            self._request_map()

    def _on_kind(self, change: dict[str, Any]) -> None:
        if self._syncing:
            return
        if self._guard(lambda: self.state.set_map_kind(change["new"]) or True):
            self._request_map()

    def _on_detect(self, change: dict[str, Any]) -> None:
        if self._syncing:
            return
        if self._guard(lambda: self.state.set_detect(change["new"]) or True, self.gate_message):
            self._after_gate_change()
        else:
            self._sync_gate_controls()

    def _on_show_below(self, change: dict[str, Any]) -> None:
        self.state.show_below_threshold = bool(change["new"])
        self._request_map()

    def _add_gate(self) -> None:
        name = self.controls["new_gate_name"].value
        g = self.state.add_gate(name)
        self.state.set_active_gate(g.name)
        self.controls["new_gate_name"].value = ""
        self._sync_gate_controls()
        self.gate_message.value = f"added gate {html.escape(g.name)} (a copy of the window of the shown gate)"
        self._after_gate_change()

    def _remove_gate(self) -> None:
        name = self.state.active_gate
        self.state.remove_gate(name)
        self._sync_gate_controls()
        self.gate_message.value = f"removed gate {html.escape(name)}"
        self._after_gate_change()

    # ------------------------------------------------------------------ tools
    def _on_tool(self, change: dict[str, Any]) -> None:
        if self._syncing:
            return
        self.state.set_tool(change["new"])
        if change["new"] == "measure":
            self.tabs.selected_index = 1
        self._draw_overlays()

    def click_map(self, scan_mm: float, index_mm: float) -> None:
        """Act as a click on the plan view at (`scan_mm`, `index_mm`) with the current tool."""
        st = self.state
        if st.tool == "inspect":
            if self._guard(lambda: st.select_point(scan_mm, index_mm)):
                self._request_point()
            return
        meas = self._guard(lambda: st.add_measure_point(scan_mm, index_mm) or True, self.ruler_result)
        if meas is None:
            st.measure_points = []
        self._draw_overlays()
        if len(st.measure_points) == 2 and meas is not None:
            self.tabs.selected_index = 1
            self._request_map()

    def _on_plan_click(self, trace: Any, points: Any, state: Any) -> None:
        if not points.xs:
            return
        self.click_map(float(points.xs[0]), float(points.ys[0]))

    def _on_bscan_click(self, trace: Any, points: Any, state: Any) -> None:
        if points.xs:
            self.click_map(float(points.xs[0]), self.state.point[1])

    def _on_dscan_click(self, trace: Any, points: Any, state: Any) -> None:
        if points.xs:
            self.click_map(self.state.point[0], float(points.xs[0]))

    def _whole_map(self) -> None:
        st = self.state
        s, i = st.scan_mm, st.index_mm
        hs = 0.5 * float(s[1] - s[0]) if s.size > 1 else 0.5
        hi = 0.5 * float(i[1] - i[0]) if i.size > 1 else 0.5
        with self._draw_lock:
            self.figures["plan"].layout.update(xaxis={"range": [float(s[0]) - hs, float(s[-1]) + hs]},
                                               yaxis={"range": [float(i[0]) - hi, float(i[-1]) + hi]})

    def _zoom_to(self, rec: dict[str, Any]) -> None:
        s0, s1 = rec["scan_min_mm"], rec["scan_max_mm"]
        i0, i1 = rec["index_min_mm"], rec["index_max_mm"]
        pad = max(10.0, 0.5 * max(s1 - s0, i1 - i0))
        with self._draw_lock:
            self.figures["plan"].layout.update(xaxis={"range": [s0 - pad, s1 + pad]},
                                               yaxis={"range": [i0 - pad, i1 + pad]})

    def _measure_typed(self) -> None:
        c = self.controls
        p0 = (float(c["ruler_start_scan"].value), float(c["ruler_start_index"].value))
        p1 = (float(c["ruler_end_scan"].value), float(c["ruler_end_index"].value))
        self.state.measure(p0, p1, drop_db=float(c["drop_db"].value))
        self._request_map()

    def _clear_measure(self) -> None:
        self.state.clear_measurement()
        self._draw_ruler(None)
        self._draw_overlays()

    def _on_drop_db(self, change: dict[str, Any]) -> None:
        if self._syncing:
            return
        if self._guard(lambda: setattr(self.state, "drop_db", float(change["new"])) or True, self.ruler_result):
            if self.state.line is not None:
                self._request_map()

    # ------------------------------------------------------------------ indications
    def _on_detection_settings(self, change: dict[str, Any]) -> None:
        if self._syncing:
            return
        c = self.controls

        def apply() -> Any:
            return self.state.set_detection(
                detection_gate=c["detection_gate"].value, backwall_gate=c["backwall_gate"].value or None,
                loss_threshold_db=float(c["loss_threshold_db"].value) or None,
                min_area_mm2=float(c["min_area_mm2"].value))

        if self._guard(apply, self.indication_head):
            self._request_indications()
        else:
            self._sync_gate_controls()

    def _on_pick(self, change: dict[str, Any]) -> None:
        if self._syncing or change["new"] is None:
            return
        rec = self._guard(lambda: self.state.pick_indication(int(change["new"])), self.indication_details)
        if rec is None:
            return
        self._show_details(rec)
        self._zoom_to(rec)
        self._request_point()

    # ------------------------------------------------------------------ saving
    def _save_folder(self) -> Path:
        folder = Path(self.controls["save_folder"].value).expanduser()
        folder.mkdir(parents=True, exist_ok=True)
        return folder

    def _save_figures(self) -> list[Path]:
        c = self.controls
        formats = ["html"] + [f for f in ("png", "svg") if c[f"save_{f}"].value and not c[f"save_{f}"].disabled]
        self._report(None, "saving the views")
        try:
            paths = vf.save_views(self.state, self._save_folder(), stem=c["save_stem"].value, formats=formats)
        finally:
            self._report(1.0, "")
        self.save_message.value = "wrote " + ", ".join(f"<code>{html.escape(p.name)}</code>" for p in paths) + \
            f" in <code>{html.escape(str(paths[0].parent))}</code>"
        return paths

    def _save_procedure(self) -> Path:
        c = self.controls
        path = self.state.save_procedure(self._save_folder() / f"{c['save_stem'].value.strip() or 'workbench'}.toml")
        self.save_message.value = (f"wrote <code>{html.escape(str(path))}</code>; replay with <code>ndtmap "
                                   f"indications GRID --procedure {html.escape(path.name)}</code>")
        return path
