"""The HTML pages of a report, rendered from jinja2 templates with autoescaping.

The templates (``ndtmap/report/templates``: ``base.html`` the shared
layout, ``style.css``, ``macros.html``, ``part.html`` and ``summary.html``)
hold every tag. The functions here gather what each page shows as plain
values: text and numbers already worded, never markup, so that every text
that comes from a file (part id, material, notes, procedure and rule names,
attributes) is escaped by the template. The only markup passed in is the
HTML snippet plotly writes for each interactive figure, marked safe where it
is made (:func:`_plot_snippet`).
"""

from __future__ import annotations

import json
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from jinja2 import Environment, PackageLoader, StrictUndefined, select_autoescape
from markupsafe import Markup

from ndtmap._shared.caution import CAUTION
from ndtmap._version import __version__
from ndtmap.grid.schema import grid_attr
from ndtmap.indications.flags import FLAG_MEANINGS
from ndtmap.indications.rules import REVIEW_REQUIRED
from ndtmap.report.figures import FIGURE_SIZES
from ndtmap.report.results import LARGEST_BY, FigureFile, PartReport, ReportError, largest_summary, relative_path
from ndtmap.report.text import fmt_number

__all__ = ["ENVIRONMENT", "PartPage", "render_part_page", "render_summary_page"]

#: The template environment. Autoescaping is on for every template whatever its name
#: (``default=True``) and for templates made from strings; None is shown as a dash.
ENVIRONMENT = Environment(
    loader=PackageLoader("ndtmap", "report/templates"),
    autoescape=select_autoescape(enabled_extensions=("html", "htm", "xml"), default_for_string=True, default=True),
    undefined=StrictUndefined,
    finalize=lambda value: "-" if value is None else value,
    trim_blocks=True,
    lstrip_blocks=True,
    keep_trailing_newline=True,
)
ENVIRONMENT.globals.update(version=__version__, caution=CAUTION)

#: Heading of the grid's provenance table on a part page.
GRID_AS_READ = "Grid (as read from the file)"


@dataclass(frozen=True)
class PartPage:
    """What the page of one part shows besides the analysis itself.

    Attributes
    ----------
    analysis : ndtmap.procedure.Analysis
    part_id : str or None
    source : str
        The file (or in-memory label) the grid came from.
    run_time : str
        UTC time of the run, stated once on the page.
    batch : bool
        The page is one part of a batch (it links to the summary).
    figures : sequence of (FigureFile, plotly figure)
    figure_notes : sequence of str
        Why figure kinds are missing.
    notes : sequence of str
        Further remarks (after the analysis' own notes).
    metadata : mapping
        The grid summary (:func:`ndtmap.grid.summary.grid_summary`).
    grid_provenance : list of dict
    map_provenance : mapping of str to list of dict
    files : sequence of str
        The files of the part folder, relative to it.
    plotly_js : str
        Relative address of ``plotly.min.js``.
    grid_heading : str
        Heading of the grid's provenance steps.
    """

    analysis: Any
    part_id: str | None
    source: str
    run_time: str
    batch: bool
    figures: Sequence[tuple[FigureFile, Any]]
    figure_notes: Sequence[str]
    notes: Sequence[str]
    metadata: Mapping[str, Any]
    grid_provenance: Sequence[Mapping[str, Any]]
    map_provenance: Mapping[str, Sequence[Mapping[str, Any]]]
    files: Sequence[str]
    plotly_js: str
    grid_heading: str = GRID_AS_READ


def _text(value: Any) -> str:
    return "-" if value is None else str(value)


def _rows(pairs: Iterable[tuple[str, Any]]) -> list[tuple[str, str]]:
    return [(key, _text(value)) for key, value in pairs]


# --------------------------------------------------------------------------- the part page


def threshold_text(analysis: Any) -> str:
    """The detection level in words, with its value in %FSH when it is given in dB."""
    gate = analysis.gates[analysis.procedure.detection_gate]  # as evaluated: a level re the back wall in %FSH too
    if gate.threshold_db is None:
        return f"{gate.threshold_fsh:g} %FSH"
    if gate.reference == "dac":
        curve = getattr(analysis, "curve", None)
        return f"{gate.threshold_db:g} dB re the {curve.label if curve is not None else 'DAC'} (a level per depth)"
    if gate.reference == "backwall":
        ref = float(analysis.maps["backwall_loss"].attrs["nominal_fsh"])
        what = f"the nominal back-wall echo, {ref:.2f} %FSH"
    else:
        ref = float(gate.reference)
        what = f"{ref:g} %FSH"
    return f"{gate.threshold_db:g} dB re {what} (= {gate.threshold_fsh:.2f} %FSH)"


def _gate_level(gate: Any) -> str:
    """A gate's level in %FSH as evaluated, and how it was stated when in dB."""
    if gate.reference == "dac":
        return f"{gate.threshold_db:g} dB re the DAC"
    level = fmt_number(gate.threshold_fsh, ".3g")
    if gate.threshold_db is None:
        return level
    ref = "back wall" if gate.reference == "backwall" else f"{gate.reference:g} %FSH"
    return f"{level} ({gate.threshold_db:g} dB re {ref})"


def _first_look(proc: Any) -> dict[str, Any] | None:
    if not proc.first_look:
        return None
    return {
        "gates": [{"name": g.name, "start": f"{g.start:g}", "end": f"{g.end:g}", "unit": g.unit,
                   "threshold": f"{g.threshold_fsh:g}"} for g in proc.gates],
        "threshold": proc.detection_level,
        "detection_gate": proc.detection_gate,
        "backwall_loss": f"{proc.backwall_loss_threshold_db:g} dB" if proc.backwall_loss_threshold_db else None,
        "description": proc.description,
    }


def _direction(largest: dict[str, Any]) -> str:
    """' at 35 deg from the scan axis' for a largest dimension with an orientation, else ''."""
    deg = largest.get("orientation_deg")
    return "" if deg is None else f" at {deg:.0f}\u00b0 from the scan axis"


def _summary_rows(analysis: Any) -> list[tuple[str, str]]:
    recs = analysis.indications
    n_amp = sum(1 for r in recs if r["kind"] == "amplitude")
    largest = largest_summary(recs)
    rows = [
        ("indications", f"{len(recs)} ({n_amp} amplitude, {len(recs) - n_amp} back-wall loss)"),
        ("largest indication", f"#{largest['id']}: {largest['length_mm']:.1f} mm{_direction(largest)} "
                               f"(by the {LARGEST_BY})" if largest else "-"),
    ]
    if analysis.screening is not None:
        rows.append(("screening", f"{analysis.screening.get('overall')} "
                                  f"(rules: {analysis.screening.get('rules') or analysis.procedure.rules})"))
    return _rows(rows)


def _settings(analysis: Any) -> dict[str, Any]:
    proc = analysis.procedure
    grid = analysis.grid
    calibration = [
        ("sound velocity", f"{grid_attr(grid, 'velocity_m_s'):g} m/s"
         + (" (from the procedure)" if proc.velocity_m_s is not None else " (from the grid)")),
        ("zero offset", f"{grid_attr(grid, 'zero_offset_us', 0.0):g} us"
         + (" (from the procedure)" if proc.zero_offset_us is not None else " (from the grid)")),
        ("beam angle", f"{grid_attr(grid, 'beam_angle_deg', 0.0):g} deg"),
    ]
    gates = [{"name": g.name, "start": fmt_number(g.start, "g"), "end": fmt_number(g.end, "g"), "unit": g.unit,
              "threshold": _gate_level(g), "mode": g.mode, "follows": g.follows or "-"}
             for g in analysis.gates.values()]
    detection = [
        ("procedure", proc.name + (" (first look, derived from the grid)" if proc.first_look else "")),
        ("description", proc.description or "-"),
        ("detection gate", proc.detection_gate),
        ("detection threshold", threshold_text(analysis)),
        ("smallest indication", f"{proc.min_area_mm2:g} mm², {proc.min_positions} position(s)"),
        ("detection signal", proc.detect),
        ("back-wall gate", proc.backwall_gate or "none"),
        ("nominal back-wall echo", f"{proc.backwall_nominal_fsh:g} %FSH" if proc.backwall_nominal_fsh
         else "median over the scan" if proc.backwall_gate else "-"),
        ("back-wall-loss indications", f"from {proc.backwall_loss_threshold_db:g} dB"
         if proc.backwall_loss_threshold_db else "not detected"),
        ("drop-sizing walk", proc.edge),
        ("DGS transfer correction", f"{proc.transfer_correction_db:g} dB"),
        ("screening rules", proc.rules or "none"),
    ]
    return {"calibration": _rows(calibration), "gates": gates, "detection": _rows(detection)}


def _plot_snippet(kind: str, fig: Any) -> Markup:
    """plotly's HTML for an interactive figure (a div and its script), the one markup a page takes as is."""
    html = fig.to_html(full_html=False, include_plotlyjs=False, div_id=f"figure-{kind}",
                       config={"displaylogo": False, "responsive": True},
                       default_height=f"{FIGURE_SIZES.get(kind, (900, 650))[1]}px")
    return Markup(html)


def _figures(figures: Sequence[tuple[FigureFile, Any]]) -> list[dict[str, Any]]:
    return [
        {
            "number": k + 1,
            "kind": ff.kind,
            "title": ff.title,
            "caption": ff.caption,
            "plot": _plot_snippet(ff.kind, fig),
            "png": ff.files["png"].name if "png" in ff.files else None,
            "files": [(fmt.upper(), p.name) for fmt, p in ff.files.items()],
        }
        for k, (ff, fig) in enumerate(figures)
    ]


def _indication_row(r: Mapping[str, Any], meanings: Mapping[str, str]) -> dict[str, Any]:
    ers = fmt_number(r.get("ers_mm"), ".2f")
    if r.get("ers_mm") is not None and r.get("ers_method"):
        ers += f" ({r['ers_method']})"
    return {
        "id": _text(r["id"]),
        "kind": _text(r.get("kind")),
        "numbers": [
            fmt_number(r.get("scan_mm")), fmt_number(r.get("index_mm")), fmt_number(r.get("depth_mm")),
            fmt_number(r.get("peak_fsh")),
            "total" if r.get("total_backwall_loss") else fmt_number(r.get("backwall_loss_db")),
            f"{fmt_number(r.get('length_scan_mm'))} ± {fmt_number(r.get('length_scan_uncertainty_mm'))}",
            f"{fmt_number(r.get('length_index_mm'))} ± {fmt_number(r.get('length_index_uncertainty_mm'))}",
            f"{fmt_number(r.get('area_mm2'), '.0f')} ± {fmt_number(r.get('area_uncertainty_mm2'), '.0f')}",
            ers,
        ],
        "flags": [(f, meanings.get(f, "")) for f in r.get("flags") or []],
        "screening": r.get("screening") or "-",
    }


def _indications(analysis: Any) -> dict[str, Any]:
    recs = analysis.indications
    used: list[str] = []
    for r in recs:
        used += [f for f in r.get("flags") or [] if f not in used]
    proc = analysis.procedure
    return {
        "gate": proc.gate(proc.detection_gate).name,
        "threshold": threshold_text(analysis),
        "rows": [_indication_row(r, FLAG_MEANINGS) for r in recs],
        "flags": [(f, FLAG_MEANINGS.get(f, "")) for f in used],
        "notes": [(_text(r["id"]), [_text(n) for n in r["notes"]]) for r in recs if r.get("notes")],
    }


def _metadata_rows(summary: Mapping[str, Any]) -> list[tuple[str, str]]:
    attrs = summary.get("attrs") or {}
    shape = summary.get("shape") or {}

    def rng(v: Any, unit: str) -> str:
        return "-" if not v else f"{v[0]:.3f} to {v[1]:.3f} {unit}"

    rows = [
        ("file", summary.get("file")),
        ("positions", " x ".join(f"{k} {v}" for k, v in shape.items())),
        ("scan axis", rng(summary.get("scan_mm"), "mm")),
        ("index axis", rng(summary.get("index_mm"), summary.get("index_units", "mm"))),
        ("time", rng(summary.get("time_us"), "us")),
        ("depth range", rng(summary.get("depth_mm"), "mm")),
        ("samples", f"{summary.get('dtype')}, signal {summary.get('signal')}"),
        ("missing A-scans", summary.get("missing_ascans")),
    ]
    rows += [(k, attrs[k]) for k in sorted(attrs)]
    return _rows(rows)


def _steps(record: Sequence[Mapping[str, Any]]) -> list[dict[str, str]]:
    return [{"step": _text(s.get("step")),
             "parameters": json.dumps(s.get("parameters", {}), sort_keys=True, ensure_ascii=False),
             "version": _text(s.get("ndtmap_version")), "time": _text(s.get("utc_time"))} for s in record]


def _provenance(page: PartPage) -> dict[str, Any]:
    grid_record = list(page.grid_provenance)
    maps = []
    for name, record in page.map_provenance.items():
        record = list(record)
        new = record[len(grid_record):] if record[: len(grid_record)] == grid_record else record
        maps.append((name, _steps(new)))
    return {"grid_heading": page.grid_heading, "grid": _steps(grid_record), "maps": maps}


def render_part_page(page: PartPage) -> str:
    """The HTML of one part's page (``index.html`` of its folder)."""
    analysis = page.analysis
    proc = analysis.procedure
    context = {
        "title": f"ndtmap report {page.part_id or page.source}",
        "plotly_js": page.plotly_js,
        "part_id": page.part_id,
        "source": page.source,
        "procedure_name": proc.name,
        "material": _text(analysis.grid.attrs.get("material", "-")),
        "run_time": page.run_time,
        "batch": page.batch,
        "cautions": list(analysis.cautions),
        "first_look": _first_look(proc),
        "summary_rows": _summary_rows(analysis),
        "settings": _settings(analysis),
        "figures": _figures(page.figures),
        "figure_notes": list(page.figure_notes),
        "indications": _indications(analysis),
        "screening": _text(analysis.screening.get("overall")) if analysis.screening else None,
        "notes": [*analysis.notes, *page.notes],
        "metadata_rows": _metadata_rows(page.metadata),
        "provenance": _provenance(page),
        "files": list(page.files),
    }
    return ENVIRONMENT.get_template("part.html").render(context)


# --------------------------------------------------------------------------- the summary of a batch


def _rules_cell(p: PartReport) -> str:
    """The rules a part exceeds, and whether validity flags leave some of its screening open."""
    if p.screening is None:
        return "no rules"
    text = ", ".join(p.rules_exceeded) if p.rules_exceeded else "none"
    if REVIEW_REQUIRED in p.screening:
        text += "; review required (validity flags)"
    return text


def _part_row(p: PartReport, root: Path) -> dict[str, str]:
    lg = p.largest
    return {
        "page": relative_path(p.index_html, root),
        "part_id": p.part_id or "-",
        "source": p.source,
        "indications": f"{p.n_indications} ({p.n_amplitude} amplitude, {p.n_backwall_loss} back-wall loss)",
        "largest": f"#{lg['id']}: {lg['length_mm']:.1f} mm{_direction(lg)}" if lg else "-",
        "rules": _rules_cell(p),
        "settings": "first look" if p.first_look else "procedure",
    }


def render_summary_page(parts: Sequence[PartReport], errors: Sequence[ReportError], root: Path, run_time: str,
                        notes: Sequence[str], cautions: Sequence[str]) -> str:
    """The HTML of a batch's summary page (``index.html`` of the report folder)."""
    context = {
        "title": "ndtmap report summary",
        "run_time": run_time,
        "cautions": list(cautions),
        "any_first_look": any(p.first_look for p in parts),
        "parts": [_part_row(p, root) for p in parts],
        "largest_by": LARGEST_BY,
        "errors": [{"source": x.source, "reason": x.reason} for x in errors],
        "notes": list(notes),
    }
    return ENVIRONMENT.get_template("summary.html").render(context)
