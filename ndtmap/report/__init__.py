"""Report bundles: a folder of evidence for an assessment that opens offline.

:func:`write_report` takes grid files, folders of them, grids in memory or
analyses already computed by :func:`ndtmap.procedure.run_procedure`, and
writes for each part an HTML page (interactive figures, settings, indication
table, scan metadata, provenance, cautions), the figures as PNG/SVG/PDF, the
indication table as CSV and JSON and the procedure that produced it; several
inputs also get a summary page. It returns a :class:`ReportResult` (one
:class:`PartReport` per part, a :class:`ReportError` per input of a batch that
could not be reported). The layout is described in ``docs/report-bundle.md``.

The modules, by idea:

- :mod:`ndtmap.report.bundle`: :func:`write_report`, one part's folder, the run documents;
- :mod:`ndtmap.report.inputs`: what a report is made from, :func:`grid_files`, :func:`safe_name`;
- :mod:`ndtmap.report.figures`: one figure builder per kind (:data:`FIGURE_SIZES`);
- :mod:`ndtmap.report.pages`: the pages, from autoescaping jinja2 templates (``templates/``);
- :mod:`ndtmap.report.results`: the result types;
- :mod:`ndtmap.report.writer`, :mod:`ndtmap.report.text`: atomic writes inside the folder, wording.

The report states measurements and screening statements; it makes no
acceptance decision (:data:`ndtmap.CAUTION`).
"""

from ndtmap.report.bundle import REPORT_FORMATS, write_report
from ndtmap.report.figures import FIGURE_SIZES
from ndtmap.report.inputs import grid_files, safe_name
from ndtmap.report.results import FigureFile, PartReport, ReportError, ReportResult

__all__ = [
    "write_report",
    "REPORT_FORMATS",
    "FIGURE_SIZES",
    "ReportResult",
    "PartReport",
    "FigureFile",
    "ReportError",
    "grid_files",
    "safe_name",
]
