"""ndtmap.report."""

from ndtmap.report.bundle import (
    FIGURE_SIZES,
    REPORT_FORMATS,
    FigureFile,
    PartReport,
    ReportError,
    ReportResult,
    grid_files,
    safe_name,
    write_report,
)

__all__ = [
    "REPORT_FORMATS",
    "FIGURE_SIZES",
    "FigureFile",
    "PartReport",
    "ReportError",
    "ReportResult",
    "write_report",
    "safe_name",
    "grid_files",
]
