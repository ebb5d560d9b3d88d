"""What a report run returns: the figures, parts, errors and the run as a whole.

Also the one rule the report uses to name a part's largest indication
(:func:`largest_summary`, stated as :data:`LARGEST_BY`).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from ndtmap.indications import IndicationRecord, largest_indication

__all__ = ["FigureFile", "PartReport", "ReportError", "ReportResult", "LARGEST_BY", "largest_summary"]

#: How the largest indication of a part is chosen (stated on the pages and in ``summary.json``); the rule is
#: :func:`ndtmap.indications.largest_indication`.
LARGEST_BY = ("largest dimension of the sized outline, in any direction, of the amplitude indications that are not "
              "repeat echoes")


def largest_summary(records: Sequence[IndicationRecord]) -> dict[str, Any] | None:
    """The largest indication (:func:`ndtmap.indications.largest_indication`) as ``summary.json`` states it.

    Returns
    -------
    dict or None
        ``id``, ``length_mm`` (mm, the largest dimension), ``orientation_deg`` (its direction from the scan
        axis), ``axis`` ({'scan', 'index'}: the axis of the longer extent), ``ers_mm`` and ``by``
        (:data:`LARGEST_BY`).

    Examples
    --------
    >>> import numpy as np, xarray as xr
    >>> from ndtmap.indications import size_indications
    >>> a = np.full((20, 20), 2.0); a[5:9, 3:12] = 80.0
    >>> m = xr.DataArray(a, dims=("scan", "index"), coords={"scan": np.arange(20.0), "index": np.arange(20.0)})
    >>> best = largest_summary(size_indications(m, threshold_fsh=20))
    >>> best["id"], round(best["length_mm"], 1), best["axis"]  # 4 x 9 mm: the largest dimension is nearly the diagonal
    (1, 9.5, 'index')
    >>> largest_summary([]) is None
    True
    """
    best = largest_indication(records)
    if best is None:
        return None
    return {"id": best.id, "length_mm": float(best.length_mm), "orientation_deg": best.length_orientation_deg,
            "axis": best.length_axis, "ers_mm": best.ers_mm, "by": LARGEST_BY}


def relative_path(path: Path, root: Path) -> str:
    """`path` relative to `root`, with forward slashes (for links and ``summary.json``)."""
    return path.resolve().relative_to(root.resolve()).as_posix()


@dataclass(frozen=True)
class FigureFile:
    """One figure of a report: its kind, caption and the files written."""

    kind: str
    title: str
    caption: str
    files: dict[str, Path] = field(default_factory=dict)


@dataclass(frozen=True)
class PartReport:
    """The report of one part (one grid)."""

    source: str
    part_id: str | None
    folder: Path
    index_html: Path
    n_indications: int
    n_amplitude: int
    n_backwall_loss: int
    largest: dict[str, Any] | None
    rules_exceeded: tuple[str, ...]
    screening: str | None
    first_look: bool
    figures: tuple[FigureFile, ...]
    notes: tuple[str, ...]

    def summary(self, root: Path) -> dict[str, Any]:
        """The part's row of ``summary.json`` (paths relative to `root`)."""
        return {
            "part_id": self.part_id,
            "file": self.source,
            "folder": relative_path(self.folder, root),
            "page": relative_path(self.index_html, root),
            "indications": self.n_indications,
            "amplitude_indications": self.n_amplitude,
            "backwall_loss_indications": self.n_backwall_loss,
            "largest_indication": self.largest,
            "rules_exceeded": list(self.rules_exceeded),
            "screening": self.screening,
            "first_look": self.first_look,
            "figures": [f.kind for f in self.figures],
            "notes": list(self.notes),
        }


@dataclass(frozen=True)
class ReportError:
    """An input that could not be reported, with the one-line reason."""

    source: str
    reason: str


@dataclass(frozen=True)
class ReportResult:
    """What :func:`ndtmap.report.write_report` wrote.

    Attributes
    ----------
    output_dir : pathlib.Path
    index_html : pathlib.Path
        The page to open (the part page for one grid, the summary for a batch).
    parts : tuple of PartReport
    errors : tuple of ReportError
        Inputs of a batch that could not be read or evaluated.
    static_images : bool
        False when PNG/SVG/PDF files were skipped (no browser) or not asked for.
    notes : tuple of str
        Remarks on the run (e.g. why static images are missing).
    run_time_utc : str
    batch : bool
    seconds : float
        Wall time of the run.
    """

    output_dir: Path
    index_html: Path
    parts: tuple[PartReport, ...]
    errors: tuple[ReportError, ...]
    static_images: bool
    notes: tuple[str, ...]
    run_time_utc: str
    batch: bool
    seconds: float = 0.0

    @property
    def exit_status(self) -> int:
        """0 all reported, 1 a partial batch (some inputs could not be reported), 2 nothing reported."""
        if not self.errors:
            return 0
        return 1 if self.parts else 2
