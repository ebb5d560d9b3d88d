"""Indication tables as text and CSV: the same fields everywhere (CLI, reports)."""

from __future__ import annotations

import csv
import io
import math
from collections.abc import Iterable, Mapping, Sequence
from typing import Any

from ndtmap.indications.record import NESTED_KEYS, RECORD_KEYS, IndicationRecord

__all__ = ["CSV_COLUMNS", "indications_csv", "indications_text", "format_value"]

#: Columns of ``indications.csv``: every flat record key (not the outline's vertices), flags joined with ``;``.
CSV_COLUMNS: tuple[str, ...] = (*(k for k in RECORD_KEYS if k not in NESTED_KEYS), "screening")

_TEXT_COLUMNS: tuple[tuple[str, str, str], ...] = (
    # key, heading, format
    ("id", "id", "{:d}"),
    ("kind", "kind", "{}"),
    ("scan_mm", "scan mm", "{:.1f}"),
    ("index_mm", "index mm", "{:.1f}"),
    ("depth_mm", "depth mm", "{:.1f}"),
    ("peak_fsh", "peak %FSH", "{:.1f}"),
    ("backwall_loss_db", "BW loss dB", "{:.1f}"),
    ("length_scan_mm", "6dB scan mm", "{:.1f}"),
    ("length_index_mm", "6dB index mm", "{:.1f}"),
    ("area_mm2", "-6dB area mm2", "{:.0f}"),
    ("ers_mm", "ERS mm", "{:.2f}"),
    ("flags", "flags", "{}"),
)


def format_value(value: Any, fmt: str = "{}") -> str:
    """Format one table cell: ``-`` for missing values, flags joined by commas."""
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return "-"
    if isinstance(value, list | tuple):
        return ", ".join(map(str, value)) if value else "-"
    try:
        return fmt.format(value)
    except (ValueError, TypeError):
        return str(value)


def _plain(rec: IndicationRecord | Mapping[str, Any]) -> Mapping[str, Any]:
    """The JSON form of a record (records read back from JSON are already plain mappings)."""
    return rec.to_dict() if isinstance(rec, IndicationRecord) else rec


def indications_text(records: Sequence[IndicationRecord | Mapping[str, Any]]) -> str:
    """A fixed-width table of indications for a terminal (records, or their JSON form).

    Examples
    --------
    >>> print(indications_text([]))
    no indications above the detection threshold
    """
    if not records:
        return "no indications above the detection threshold"
    rows = [[h for _, h, _ in _TEXT_COLUMNS]]
    for rec in map(_plain, records):
        rows.append([format_value(rec.get(k), f) for k, _, f in _TEXT_COLUMNS])
    widths = [max(len(r[i]) for r in rows) for i in range(len(rows[0]))]
    lines = []
    for n, row in enumerate(rows):
        cells = [
            c.rjust(w) if 0 < i < len(row) - 1 and i != 1 else c.ljust(w)
            for i, (c, w) in enumerate(zip(row, widths, strict=True))
        ]
        lines.append("  ".join(cells).rstrip())
        if n == 0:
            lines.append("  ".join("-" * w for w in widths))
    return "\n".join(lines)


def _csv_cell(value: Any) -> Any:
    if value is None:
        return ""
    if isinstance(value, float):
        return "" if not math.isfinite(value) else repr(value)
    if isinstance(value, list | tuple):
        return ";".join(map(str, value))
    return value


def indications_csv(records: Iterable[IndicationRecord | Mapping[str, Any]]) -> str:
    """CSV text of indication records (or their JSON form), one row each, columns :data:`CSV_COLUMNS`.

    Floats are written with full precision (``repr``) so the CSV and JSON
    outputs agree exactly; missing values are empty cells.
    """
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow(CSV_COLUMNS)
    for rec in map(_plain, records):
        writer.writerow([_csv_cell(rec.get(k)) for k in CSV_COLUMNS])
    return buf.getvalue()
