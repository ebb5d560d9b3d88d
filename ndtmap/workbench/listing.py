"""Text of the workbench's indication list: one line per indication, and the details of the selected one."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from ndtmap.indications import FLAG_MEANINGS

__all__ = ["indication_label", "indication_details"]


def _get(rec: Any, key: str, default: Any = None) -> Any:
    """``rec[key]``, or `default` when the record has no such field (records are read by key only)."""
    try:
        return rec[key]
    except (KeyError, IndexError, TypeError):
        return default


def indication_label(rec: Mapping[str, Any] | Any) -> str:
    """A one-line label of an indication record for a list."""
    if rec["kind"] == "amplitude":
        what = f"{rec['peak_fsh']:.1f} %FSH"
    else:
        loss = _get(rec, "backwall_loss_db")
        what = "back wall lost" if loss is None else f"back wall -{loss:.1f} dB"
    depth = f", {rec['depth_mm']:.1f} mm deep" if _get(rec, "depth_mm") is not None else ""
    flags = f" [{', '.join(rec['flags'])}]" if _get(rec, "flags") else ""
    return f"#{rec['id']} {what} at ({rec['scan_mm']:.1f}, {rec['index_mm']:.1f}) mm{depth}{flags}"


def indication_details(rec: Mapping[str, Any] | Any) -> list[tuple[str, str]]:
    """(label, text) pairs of an indication's sizes, flags (with their meanings) and notes."""

    def mm(v: Any, unc: Any = None) -> str:
        if v is None:
            return "\u2013"
        return f"{v:.1f} \u00b1 {unc:.1f} mm" if unc is not None else f"{v:.1f} mm"

    rows = [
        ("kind", "amplitude" if rec["kind"] == "amplitude" else "back-wall loss"),
        ("peak position", f"scan {rec['scan_mm']:.1f} mm, index {rec['index_mm']:.1f} mm"),
    ]
    if _get(rec, "peak_fsh") is not None:
        rows.append(("peak", f"{rec['peak_fsh']:.1f} %FSH"))
    if _get(rec, "backwall_loss_db") is not None:
        rows.append(("back-wall loss", f"{rec['backwall_loss_db']:.1f} dB"))
    if _get(rec, "depth_mm") is not None:
        rows.append(("depth", f"{rec['depth_mm']:.1f} mm"))
    method = _get(rec, "sizing_method") or "6 dB drop"
    rows.append((f"length along scan ({method})",
                 mm(_get(rec, "length_scan_mm"), _get(rec, "length_scan_uncertainty_mm"))))
    rows.append((f"length along index ({method})",
                 mm(_get(rec, "length_index_mm"), _get(rec, "length_index_uncertainty_mm"))))
    if _get(rec, "area_mm2") is not None:
        unc = _get(rec, "area_uncertainty_mm2")
        pm = f" \u00b1 {unc:.0f}" if unc is not None else ""
        rows.append(("area", f"{rec['area_mm2']:.0f}{pm} mm\u00b2"))
    if _get(rec, "ers_mm") is not None:
        rows.append(("DGS equivalent size", f"{rec['ers_mm']:.1f} mm ({_get(rec, 'ers_method') or 'DGS'})"))
    for f in _get(rec, "flags") or []:
        rows.append((f"flag {f}", FLAG_MEANINGS.get(f, "")))
    if not _get(rec, "flags"):
        rows.append(("flags", "none"))
    for n in _get(rec, "notes") or []:
        rows.append(("note", n))
    if _get(rec, "screening"):
        rows.append(("screening", str(rec["screening"])))
    return rows
