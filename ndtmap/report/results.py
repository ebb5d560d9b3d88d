"""What a report run returns: the figures, parts, errors and the run as a whole.

Also the one rule the report uses to name a part's largest indication
(:func:`largest_indication`, stated as :data:`LARGEST_BY`).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

__all__ = ["FigureFile", "PartReport", "ReportError", "ReportResult", "LARGEST_BY", "largest_indication"]

#: How the largest indication of a part is chosen (stated on the pages and in ``summary.json``).
LARGEST_BY = "longest 6 dB drop length (the longer of scan and index) of the amplitude indications"


def largest_indication(records: Sequence[Mapping[str, Any]]) -> dict[str, Any] | None:
    """The amplitude indication with the longest 6 dB drop length, or None.

    Parameters
    ----------
    records : sequence of dict
        Indication records (``kind``, ``id``, ``length_scan_mm``, ``length_index_mm``, ``ers_mm``).

    Returns
    -------
    dict or None
        ``id``, ``length_mm`` (mm), ``axis`` ({'scan', 'index'}), ``ers_mm`` and ``by`` (:data:`LARGEST_BY`).

    Examples
    --------
    >>> recs = [{"id": 1, "kind": "amplitude", "length_scan_mm": 4.0, "length_index_mm": 6.5},
    ...         {"id": 2, "kind": "backwall_loss", "length_scan_mm": 30.0, "length_index_mm": 30.0}]
    >>> best = largest_indication(recs)
    >>> best["id"], best["length_mm"], best["axis"]
    (1, 6.5, 'index')
    >>> largest_indication([]) is None
    True
    """
    best = None
    for r in records:
        if r.get("kind") != "amplitude":
            continue
        lengths = [v for v in (r.get("length_scan_mm"), r.get("length_index_mm")) if v is not None]
        if not lengths:
            continue
        length = max(lengths)
        axis = "scan" if r.get("length_scan_mm") == length else "index"
        if best is None or length > best["length_mm"]:
            best = {"id": r["id"], "length_mm": float(length), "axis": axis, "ers_mm": r.get("ers_mm"),
                    "by": LARGEST_BY}
    return best


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
