"""Report bundles: a self-contained folder of evidence for an assessment.

:func:`write_report` runs a procedure (or the first-look procedure derived
from the grid) on one or more scan grids, or takes analyses already computed
by :func:`ndtmap.procedure.run_procedure`, and writes, for each part, a page
``index.html`` that opens offline (plotly.js is written once as
``plotly.min.js`` into the output folder and referenced relatively; no
network is needed), the figures as PNG at print resolution and SVG (PDF on
request), the indication table (``indications.csv`` and
``indications.json``, the same fields as ``ndtmap indications``), the scan
metadata, the settings that produced the results (``procedure.toml``,
``settings.json``), the provenance record and the cautions. Several inputs
give one sub-folder per part and a summary page across parts. The layout is
described in ``docs/report-bundle.md``.

The pages come from autoescaping templates (:mod:`ndtmap.report.pages`):
every text that comes from a file (part id, material, notes, procedure and
rule names, attributes) is shown as text, never run; file names inside the
output folder are made from safe slugs, never from raw text. The same inputs
give the same figures and tables; the time of the run is stated once per page
(and in ``run.json``).

The report states results; it makes no acceptance decision (see
:data:`ndtmap.CAUTION`).
"""

from __future__ import annotations

import contextlib
import datetime as _dt
import os
import sys
import time
from collections.abc import Sequence
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import xarray as xr
from tqdm import tqdm

from ndtmap._shared.caution import CAUTION
from ndtmap._version import __version__
from ndtmap.errors import FileFormatError, NdtmapError, ParameterError, ParameterTypeError
from ndtmap.grid.provenance import jsonable, read_provenance
from ndtmap.grid.schema import grid_attr, validate_grid
from ndtmap.grid.summary import grid_summary
from ndtmap.indications.tables import indications_csv
from ndtmap.io import open_grid
from ndtmap.plot import export_session, find_chromium, write_plotly_js
from ndtmap.procedure import (
    FIGURE_KINDS,
    Procedure,
    first_look_procedure,
    load_procedure,
    procedure_to_toml,
    run_procedure,
)
from ndtmap.report.figures import BuiltFigure, build_figures, export_bytes
from ndtmap.report.inputs import ReportInput, collect_inputs, file_sha256, safe_name, unique_name
from ndtmap.report.pages import GRID_AS_READ, PartPage, render_part_page, render_summary_page
from ndtmap.report.results import (
    LARGEST_BY,
    FigureFile,
    PartReport,
    ReportError,
    ReportResult,
    largest_summary,
)
from ndtmap.report.text import one_line
from ndtmap.report.writer import BundleWriter, check_output_dir

__all__ = ["REPORT_FORMATS", "write_report"]

#: Static figure formats a report can hold.
REPORT_FORMATS = ("png", "svg", "pdf")
_TOP_FILES = ("index.html", "summary.json", "run.json", "plotly.min.js")
_GRID_CALIBRATED = "Grid (as read, then calibrated by the procedure)"


# --------------------------------------------------------------------------- the run


@dataclass
class _StaticExport:
    """Static figure files across a run: on while a browser works, off for the rest once it fails.

    `notes` say why static files were skipped; `seconds` hold the time of each export.
    """

    formats: list[str]
    on: bool = False
    notes: list[str] = field(default_factory=list)
    seconds: list[float] = field(default_factory=list)

    def start(self, stack: contextlib.ExitStack) -> None:
        """Find Chromium and keep one browser running for the run (entered on `stack`)."""

        self.on = bool(self.formats)
        if self.on and find_chromium() is None:
            self.on = False
            self.notes.append("no Chromium browser was found (install Debian's `chromium` or set BROWSER_PATH); "
                              "the page has the interactive figures only")
        if self.on:
            try:
                stack.enter_context(export_session())
            except FileFormatError as exc:
                self.on = False
                self.notes.append(one_line(exc))

    def write(self, built: BuiltFigure, folder: Path, writer: BundleWriter) -> dict[str, Path]:
        """Write the figure's files (``figures/<kind>.<format>``); none once export has failed."""
        files: dict[str, Path] = {}
        for fmt in self.formats:
            if not self.on:
                break
            t0 = time.perf_counter()
            try:
                data = export_bytes(built.figure, fmt, built.kind)
            except FileFormatError as exc:
                self.on = False
                self.notes.append(f"static images were skipped from here on: {one_line(exc)}")
                break
            self.seconds.append(time.perf_counter() - t0)
            files[fmt] = writer.data(folder / "figures" / f"{built.kind}.{fmt}", data)
        return files

    def skipped(self) -> str | None:
        """The note that static images were skipped, with the reasons, or None."""
        if not self.formats or self.on:
            return None
        return "static images (PNG/SVG/PDF) were skipped: " + "; ".join(self.notes)


@dataclass
class _Run:
    """The settings and state of one :func:`write_report` call, shared by its parts."""

    root: Path
    writer: BundleWriter
    procedure: Any
    figures: list[str] | None
    lazy: bool | None
    batch: bool
    run_time: str
    static: _StaticExport
    used_names: set[str] = field(default_factory=lambda: set(_TOP_FILES))


def _check_arguments(items: Sequence[ReportInput], output_dir: Any, procedure: Any, figures: Any, formats: Any,
                     paths: Sequence[Path]) -> tuple[Path, Any, list[str] | None, list[str]]:
    """The output folder, procedure, figure kinds and formats, checked and normalised."""

    if isinstance(output_dir, xr.Dataset) or not isinstance(output_dir, str | os.PathLike):
        raise ParameterTypeError(f"`output_dir` must be a folder path, got {type(output_dir).__name__}")
    root = Path(output_dir)
    check_output_dir(root, paths)
    if procedure is not None and not isinstance(procedure, Procedure):
        if isinstance(procedure, str | os.PathLike):
            procedure = load_procedure(procedure)
        else:
            raise ParameterTypeError(f"`procedure` must be a Procedure or a path, got {type(procedure).__name__}")
    for item in items:
        if procedure is not None and item.analysis is not None and item.analysis.procedure != procedure:
            raise ParameterError(
                f"`procedure` {procedure.name!r} differs from the procedure {item.analysis.procedure.name!r} of the "
                f"analysis of {item.label}; an analysis is reported with its own procedure: leave `procedure` out"
            )
    if figures is not None:
        figures = [figures] if isinstance(figures, str) else list(figures)
        bad = [f for f in figures if f not in FIGURE_KINDS]
        if bad:
            raise ParameterError(f"`figures` must be kinds from {list(FIGURE_KINDS)}, got {bad}")
    if isinstance(formats, str):
        formats = [formats]
    formats = [str(f).lower().lstrip(".") for f in formats]
    bad = [f for f in formats if f not in REPORT_FORMATS]
    if bad:
        raise ParameterError(f"`formats` must be from {list(REPORT_FORMATS)}, got {bad}")
    return root, procedure, figures, list(dict.fromkeys(formats))


def _grid_and_procedure(item: ReportInput, run: _Run) -> tuple[xr.Dataset, Any]:
    """The grid of an input and the procedure it is reported with."""

    if item.analysis is not None:
        return item.analysis.grid, item.analysis.procedure
    if item.grid is not None:
        grid = validate_grid(item.grid, check_values=False)
    else:
        grid = open_grid(item.path, lazy=run.lazy)
    return grid, run.procedure if run.procedure is not None else first_look_procedure(grid)


def _part_folder(item: ReportInput, grid: xr.Dataset, run: _Run, k: int) -> tuple[Path, str]:
    """The folder of the `k`-th input (1-based) and the address of plotly.js from its page."""
    if not run.batch:
        return run.root, "plotly.min.js"
    pid = grid.attrs.get("part_id")
    stem = item.path.stem if item.path is not None else f"grid-{k}"
    base = safe_name(pid if pid not in (None, "") else stem, default="part")
    return run.root / unique_name(base, run.used_names), "../plotly.min.js"


def _report_items(items: Sequence[ReportInput], run: _Run, progress: bool) -> tuple[list[PartReport],
                                                                                    list[ReportError]]:
    """Report every input; in a batch an input that fails is listed with its reason and the others go on."""
    parts: list[PartReport] = []
    errors: list[ReportError] = []
    bar = tqdm(items, desc="ndtmap report", unit="part", file=sys.stderr, disable=not progress, leave=False)
    for item in bar:
        try:
            grid, proc = _grid_and_procedure(item, run)
            folder, js = _part_folder(item, grid, run, len(parts) + len(errors) + 1)
            parts.append(_write_part(item, grid, proc, folder, js, run))
        except (NdtmapError, OSError) as exc:
            if not run.batch:
                raise
            errors.append(ReportError(item.label, one_line(exc)))
        except Exception as exc:  # noqa: BLE001 - a batch goes on; the reason is listed
            if not run.batch:
                raise
            errors.append(ReportError(item.label, "internal error (please report): " + one_line(exc)))
    bar.close()
    return parts, errors


# --------------------------------------------------------------------------- one part


def _copy_rules(proc: Any, writer: BundleWriter, folder: Path) -> Any:
    """Copy the rules file into the part folder; the saved procedure then refers to the copy."""
    path = proc.rules_path()
    if path is None:
        return proc
    try:
        text = Path(path).read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise FileFormatError(f"cannot read the rules file `{path}`: {exc}") from None
    writer.text(folder / "rules.toml", text)
    return replace(proc, rules="rules.toml", base_dir=None)


def _write_settings(analysis: Any, proc: Any, figures: Sequence[FigureFile], folder: Path,
                    writer: BundleWriter) -> Any:
    """Write ``procedure.toml`` (and the rules beside it) and ``settings.json``; return the procedure saved."""

    saved = _copy_rules(proc, writer, folder)
    writer.text(folder / "procedure.toml", procedure_to_toml(saved))
    settings = {
        "procedure": saved.to_dict(),
        "calibration": {
            "velocity_m_s": grid_attr(analysis.grid, "velocity_m_s"),
            "zero_offset_us": grid_attr(analysis.grid, "zero_offset_us", 0.0),
            "beam_angle_deg": grid_attr(analysis.grid, "beam_angle_deg", 0.0),
        },
        "first_look": bool(proc.first_look),
        "figures": [ff.kind for ff in figures],
        "formats": sorted({fmt for ff in figures for fmt in ff.files}),
    }
    if "backwall_loss" in analysis.maps:
        settings["backwall_nominal_fsh"] = analysis.maps["backwall_loss"].attrs.get("nominal_fsh")
    writer.json(folder / "settings.json", jsonable(settings))
    return saved


def _write_part(item: ReportInput, grid: xr.Dataset, proc: Any, folder: Path, plotly_js: str,
                run: _Run) -> PartReport:
    """Evaluate one input (unless it is an analysis already) and write its folder."""

    writer = run.writer
    analysis = item.analysis if item.analysis is not None else run_procedure(grid, proc, source=item.label)
    kinds = list(run.figures) if run.figures is not None else list(proc.figures)
    part_id = grid.attrs.get("part_id")
    part_id = None if part_id in (None, "") else str(part_id)
    folder.mkdir(parents=True, exist_ok=True)
    part_label = part_id or (item.path.stem if item.path is not None else item.label)
    built, fig_notes = build_figures(analysis, kinds, part_label)
    (folder / "figures").mkdir(exist_ok=True)
    written = [(FigureFile(b.kind, b.title, b.caption, run.static.write(b, folder, writer)), b.figure) for b in built]
    writer.text(folder / "indications.csv", indications_csv(analysis.indications))
    writer.json(folder / "indications.json", analysis.indications_document())
    summary = grid_summary(grid, source=item.label)
    writer.json(folder / "metadata.json", summary)
    saved = _write_settings(analysis, proc, [ff for ff, _ in written], folder, writer)
    grid_prov = read_provenance(grid)
    map_prov = {name: read_provenance(m) for name, m in analysis.maps.items()}
    writer.json(folder / "provenance.json", {"grid": grid_prov, "maps": map_prov})
    listing = ["indications.csv", "indications.json", "metadata.json", "settings.json", "procedure.toml",
               "provenance.json"] + (["rules.toml"] if saved.rules else [])
    listing += [f"figures/{p.name}" for ff, _ in written for p in ff.files.values()]
    notes = list(fig_notes)
    skipped = run.static.skipped()
    if skipped:
        notes.append(skipped)
    if grid.attrs.get("truth"):
        notes.append("the grid carries the truth of a simulated scan: it is synthetic data, not a real part")
    calibrated = item.analysis is not None and (proc.velocity_m_s is not None or proc.zero_offset_us is not None)
    page = PartPage(
        analysis=analysis, part_id=part_id, source=item.label, run_time=run.run_time, batch=run.batch,
        figures=written, figure_notes=fig_notes, notes=[n for n in notes if n not in fig_notes], metadata=summary,
        grid_provenance=grid_prov, map_provenance=map_prov, files=listing, plotly_js=plotly_js,
        grid_heading=_GRID_CALIBRATED if calibrated else GRID_AS_READ,
    )
    index = writer.text(folder / "index.html", render_part_page(page))
    screening = analysis.screening
    return PartReport(
        source=item.label,
        part_id=part_id,
        folder=folder,
        index_html=index,
        n_indications=len(analysis.indications),
        n_amplitude=sum(1 for r in analysis.indications if r["kind"] == "amplitude"),
        n_backwall_loss=sum(1 for r in analysis.indications if r["kind"] == "backwall_loss"),
        largest=largest_summary(analysis.indications),
        rules_exceeded=tuple(screening.get("exceeded", ())) if screening else (),
        screening=screening.get("overall") if screening else None,
        first_look=bool(proc.first_look),
        figures=tuple(ff for ff, _ in written),
        notes=tuple(notes),
    )


# --------------------------------------------------------------------------- the bundle


def _procedure_statement(procedure: Any, items: Sequence[ReportInput]) -> str:
    """Which procedure the run used, for ``run.json``."""
    if procedure is not None:
        return procedure.name
    given = list(dict.fromkeys(i.analysis.procedure.name for i in items if i.analysis is not None))
    if not given:
        return "first look (derived from each grid)"
    if all(i.analysis is not None for i in items):
        return ", ".join(given)
    return f"first look (derived from each grid) for files and grids; {', '.join(given)} for the given analyses"


def _write_run_documents(run: _Run, items: Sequence[ReportInput], parts: Sequence[PartReport],
                         errors: Sequence[ReportError], notes: Sequence[str], t_start: float) -> tuple[Path, float]:
    """Write ``summary.json``, the summary page of a batch and ``run.json``; return the page to open and the time."""
    root = run.root
    cautions = [CAUTION]
    summary_doc = {
        "run_time_utc": run.run_time,
        "ndtmap_version": __version__,
        "parts": [p.summary(root) for p in parts],
        "errors": [{"file": x.source, "reason": x.reason} for x in errors],
        "largest_summary_by": LARGEST_BY,
        "static_images": bool(run.static.on),
        "notes": list(notes),
        "cautions": cautions,
    }
    run.writer.json(root / "summary.json", summary_doc)
    if run.batch:
        index = run.writer.text(root / "index.html",
                                render_summary_page(parts, errors, root, run.run_time, notes, cautions))
    else:
        index = parts[0].index_html
    seconds = time.perf_counter() - t_start
    run_doc = {
        "run_time_utc": run.run_time,
        "ndtmap_version": __version__,
        "inputs": [{"file": i.label, "sha256": file_sha256(i.path)} for i in items],
        "procedure": _procedure_statement(run.procedure, items),
        "formats": run.static.formats,
        "static_images": bool(run.static.on),
        "plotly_js": "plotly.min.js in the report folder, referenced relatively (no network needed)",
        "seconds": round(seconds, 3),
        "figure_export_seconds": [round(s, 3) for s in run.static.seconds],
        "notes": list(notes),
    }
    run.writer.json(root / "run.json", run_doc)
    return index, seconds


def write_report(
    paths_or_grids: Any,
    output_dir: str | os.PathLike[str],
    *,
    procedure: Any = None,
    figures: Sequence[str] | None = None,
    formats: Sequence[str] = ("png", "svg"),
    progress: bool = False,
    lazy: bool | None = None,
) -> ReportResult:
    """Write a report folder for one or more scan grids or computed analyses.

    Parameters
    ----------
    paths_or_grids : path, xarray.Dataset, Analysis, or a list of them
        Grid files (.nc, .zarr stores, raw .json sidecars), folders (every
        grid file in them), grids in memory, or analyses already computed by
        :func:`ndtmap.procedure.run_procedure` (reported as they are, without
        running the procedure again: the procedure and the grid come from
        the :class:`~ndtmap.procedure.Analysis`, the file from its
        ``source``; the scan metadata and the grid's provenance are then
        those of the analysed grid, after the procedure's calibration if it
        has one). One input gives one page in `output_dir`; several (or a
        folder) give one sub-folder per part and a summary page.
    output_dir : path
        The report folder (created; files in it are replaced atomically). It
        must not be one of the inputs.
    procedure : Procedure or path, optional
        The procedure (or its TOML file) for grid files and grids. Default:
        for each grid the first-look procedure derived from it
        (:func:`ndtmap.procedure.first_look_procedure`), stated as such in
        the report. An analysis keeps its own procedure (given here, it must
        be the same).
    figures : sequence of str, optional
        Figure kinds (:data:`ndtmap.procedure.FIGURE_KINDS`); default the
        procedure's ``figures``.
    formats : sequence of {'png', 'svg', 'pdf'}, default ('png', 'svg')
        Static files of each figure (needs Chromium; without it the page
        has the interactive figures only and says so). Empty: none.
    progress : bool, default False
        Show a progress bar on stderr.
    lazy : bool, optional
        Open grid files lazily (dask-backed; True when a Dask scheduler is
        used, so that the cluster computes); default: lazy only when a grid
        is larger than a share of memory (see :func:`ndtmap.io.open_grid`).

    Returns
    -------
    ReportResult

    Raises
    ------
    NdtmapError
        For bad arguments, an output folder that is an input, a `procedure`
        that differs from an analysis' own, and, for a single input, when it
        cannot be read or evaluated (in a batch such inputs are listed in the
        summary instead).

    Examples
    --------
    An analysis computed before is reported without running the procedure again:

    >>> import tempfile
    >>> from ndtmap.procedure import first_look_procedure, run_procedure
    >>> from ndtmap.simulate import sample_path
    >>> grid = open_grid(sample_path("plate_laminations.nc"))
    >>> analysis = run_procedure(grid, first_look_procedure(grid))
    >>> with tempfile.TemporaryDirectory() as out:
    ...     result = write_report(analysis, out, figures=["amplitude"], formats=())
    ...     (result.exit_status, result.parts[0].part_id, result.parts[0].n_indications == len(analysis.indications))
    (0, 'KFP-PL-2041', True)
    """

    t_start = time.perf_counter()
    items, batch, paths = collect_inputs(paths_or_grids)
    root, procedure, figures, formats = _check_arguments(items, output_dir, procedure, figures, formats, paths)
    root.mkdir(parents=True, exist_ok=True)
    input_files = [i.path for i in items if i.path is not None]
    writer = BundleWriter(root, [*input_files, *[p for p in paths if not p.is_dir()]])
    run = _Run(root=root, writer=writer, procedure=procedure, figures=figures, lazy=lazy, batch=batch,
               run_time=_dt.datetime.now(_dt.UTC).strftime("%Y-%m-%d %H:%M:%S"), static=_StaticExport(formats))
    writer.target(root / "plotly.min.js")
    writer.record(write_plotly_js(root))
    with contextlib.ExitStack() as stack:
        run.static.start(stack)
        parts, errors = _report_items(items, run, progress)
    skipped = run.static.skipped()
    notes = [skipped] if skipped else []
    index, seconds = _write_run_documents(run, items, parts, errors, notes, t_start)
    return ReportResult(
        output_dir=root,
        index_html=index,
        parts=tuple(parts),
        errors=tuple(errors),
        static_images=bool(run.static.on),
        notes=tuple(notes),
        run_time_utc=run.run_time,
        batch=batch,
        seconds=seconds,
    )
