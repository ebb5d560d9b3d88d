"""Report bundles: a self-contained folder of evidence for an assessment.

:func:`write_report` runs a procedure (or the first-look procedure derived
from the grid) on one or more scan grids and writes, for each part, a page
``index.html`` that opens offline (plotly.js is written once as
``plotly.min.js`` into the output folder and referenced relatively; no
network is needed), the figures as PNG at print resolution and SVG (PDF on
request), the indication table (``indications.csv`` and
``indications.json``, the same fields as ``ndtmap indications``), the scan
metadata, the settings that produced the results (``procedure.toml``,
``settings.json``), the provenance record and the cautions. Several grids
give one sub-folder per part and a summary page across parts. The layout is
described in ``docs/report-bundle.md``.

Every text that comes from a file (part id, material, notes, procedure and
rule names, attributes) is HTML-escaped; file names inside the output folder
are made from safe slugs, never from raw text. The same inputs give the same
figures and tables; the time of the run is stated once per page (and in
``run.json``).

The report states results; it makes no acceptance decision (see
:data:`ndtmap.CAUTION`).
"""

from __future__ import annotations

import contextlib
import datetime as _dt
import hashlib
import html
import json
import math
import os
import re
import sys
import time
import unicodedata
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr

from ndtmap import CAUTION, __version__
from ndtmap.errors import FileFormatError, NdtmapError, ParameterError, ParameterTypeError

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

#: Static figure formats a report can hold.
REPORT_FORMATS = ("png", "svg", "pdf")
#: Size of each figure kind in CSS pixels (PNG files are written at 3x: print resolution).
FIGURE_SIZES: dict[str, tuple[int, int]] = {
    "amplitude": (900, 650),
    "depth": (900, 650),
    "backwall_loss": (900, 650),
    "thickness": (900, 650),
    "bscan": (900, 560),
    "dscan": (900, 560),
    "ascan": (900, 480),
    "dgs": (900, 620),
}
_GRID_SUFFIXES = (".nc", ".nc4", ".h5", ".hdf5")
_TOP_FILES = ("index.html", "summary.json", "run.json", "plotly.min.js")
_DGS_FAMILY_MM = (0.5, 1.0, 2.0, 3.0, 4.0, 6.0, 8.0, 10.0, 12.0, 16.0, 20.0)
_LARGEST_BY = "longest 6 dB drop length (the longer of scan and index) of the amplitude indications"


# --------------------------------------------------------------------------- results


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
            "folder": _rel(self.folder, root),
            "page": _rel(self.index_html, root),
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
    """What :func:`write_report` wrote.

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


# --------------------------------------------------------------------------- names and inputs


_WINDOWS_RESERVED = {"con", "prn", "aux", "nul", *(f"com{k}" for k in range(1, 10)), *(f"lpt{k}" for k in range(1, 10))}


def safe_name(text: Any, default: str = "part", *, max_length: int = 64) -> str:
    """A file-name slug of `text`: ASCII letters, digits, ``.``, ``_`` and ``-`` only, never a path.

    Parameters
    ----------
    text : str
        E.g. a part id or a file name from a grid.
    default : str
        Used when nothing safe is left.
    max_length : int
        Longest slug.

    Examples
    --------
    >>> safe_name("KFP-PL-2041"), safe_name("../../evil.nc"), safe_name("<script>"), safe_name("..")
    ('KFP-PL-2041', 'evil.nc', 'script', 'part')
    """
    s = unicodedata.normalize("NFKD", str(text)).encode("ascii", "ignore").decode("ascii")
    s = re.sub(r"[^A-Za-z0-9._-]+", "-", s)
    s = re.sub(r"-{2,}", "-", s).strip("-._")
    s = s[:max_length].strip("-._")
    if not s or s.split(".")[0].lower() in _WINDOWS_RESERVED:
        s = default if not s else f"{default}-{s}"
    return s


def _is_sidecar(path: Path) -> bool:
    from ndtmap.io.grid_files import RAW_SIDECAR_FORMAT

    try:
        if path.stat().st_size > 64 * 2**20:
            return False
        with open(path, encoding="utf-8-sig", errors="replace") as fh:
            return RAW_SIDECAR_FORMAT in fh.read(4096)
    except OSError:
        return False


def grid_files(folder: str | os.PathLike[str]) -> list[Path]:
    """The grid files in `folder` (not its sub-folders): NetCDF files, Zarr stores and raw sidecars, by name.

    ``.json`` files count when they are raw-dump sidecars (their first 4 kB
    name the ``"ndtmap raw sidecar"`` format).

    Raises
    ------
    FileFormatError
        When `folder` is not a folder.
    """
    p = Path(folder)
    if not p.is_dir():
        raise FileFormatError(f"`{p}` is not a folder")
    out = []
    for child in sorted(p.iterdir(), key=lambda c: c.name):
        suffix = child.suffix.lower()
        if child.is_dir():
            if (child / "zarr.json").exists():
                out.append(child)
        elif suffix in _GRID_SUFFIXES or (suffix == ".json" and _is_sidecar(child)):
            out.append(child)
    return out


@dataclass
class _Input:
    label: str
    path: Path | None
    grid: xr.Dataset | None


def _inputs(paths_or_grids: Any) -> tuple[list[_Input], bool, list[Path]]:
    """Inputs, whether they form a batch, and every path given (for the output-folder check)."""
    if isinstance(paths_or_grids, xr.Dataset | str | os.PathLike):
        given = [paths_or_grids]
    elif isinstance(paths_or_grids, Iterable):
        given = list(paths_or_grids)
    else:
        raise ParameterTypeError(
            f"`paths_or_grids` must be a path, a scan grid or a list of them, got {type(paths_or_grids).__name__}"
        )
    if not given:
        raise ParameterError("`paths_or_grids` is empty; give at least one grid file, folder or grid")
    items: list[_Input] = []
    paths: list[Path] = []
    batch = len(given) > 1
    for k, g in enumerate(given):
        if isinstance(g, xr.Dataset):
            items.append(_Input(f"grid {k + 1} (in memory)", None, g))
        elif isinstance(g, str | os.PathLike):
            p = Path(g)
            paths.append(p)
            if p.is_dir() and not (p / "zarr.json").exists():
                found = grid_files(p)
                if not found:
                    raise ParameterError(
                        f"the folder `{p}` holds no grid files (.nc, .zarr stores, raw .json sidecars)"
                    )
                items += [_Input(str(f), f, None) for f in found]
                batch = True
            else:
                items.append(_Input(str(p), p, None))
        else:
            raise ParameterTypeError(
                f"`paths_or_grids[{k}]` must be a path or a scan grid (xarray.Dataset), got {type(g).__name__}"
            )
    return items, batch, paths


def _inside(path: Path, folder: Path) -> bool:
    try:
        path.relative_to(folder)
        return True
    except ValueError:
        return False


def _rel(path: Path, root: Path) -> str:
    return path.resolve().relative_to(root.resolve()).as_posix()


class _Writer:
    """Writes files atomically, only inside the output folder and never over an input."""

    def __init__(self, root: Path, inputs: Iterable[Path]):
        self.root = root.resolve()
        self.inputs = {p.resolve() for p in inputs}
        self.written: list[Path] = []

    def _target(self, path: Path) -> Path:
        target = path.resolve()
        if not _inside(target, self.root):
            raise ParameterError(f"refusing to write `{path}`: it lies outside the output folder `{self.root}`")
        if target in self.inputs or any(_inside(target, p) for p in self.inputs if p.is_dir()):
            raise ParameterError(f"refusing to write `{path}`: it is one of the input files")
        target.parent.mkdir(parents=True, exist_ok=True)
        return target

    def text(self, path: Path, text: str) -> Path:
        from ndtmap.io.grid_files import atomic_write_text

        out = atomic_write_text(self._target(path), text)
        self.written.append(out)
        return out

    def data(self, path: Path, data: bytes) -> Path:
        from ndtmap.io.grid_files import atomic_write_bytes

        out = atomic_write_bytes(self._target(path), data)
        self.written.append(out)
        return out

    def json(self, path: Path, doc: Any) -> Path:
        return self.text(path, json.dumps(doc, indent=2, allow_nan=False, ensure_ascii=False) + "\n")


def _check_output(out: Path, paths: Sequence[Path]) -> None:
    o = out.resolve()
    for p in paths:
        r = p.resolve()
        if o == r or (r.is_dir() and _inside(o, r) and (r / "zarr.json").exists()):
            raise ParameterError(
                f"`output_dir` `{out}` is one of the input paths; write the report into a new folder"
            )
    if out.exists() and not out.is_dir():
        raise ParameterError(f"`output_dir` `{out}` exists and is a file; give a folder")


def _sha256(path: Path) -> str | None:
    if not path.is_file():
        return None
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def _one_line(exc: BaseException) -> str:
    text = " ".join(str(exc).split())
    return text if isinstance(exc, NdtmapError) else f"{type(exc).__name__}: {text}"


# --------------------------------------------------------------------------- figures


def _fmt(value: Any, spec: str = ".1f") -> str:
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return "-"
    try:
        return format(float(value), spec)
    except (TypeError, ValueError):
        return str(value)


def _gate_text(g: Any) -> str:
    follows = f", following gate “{g.follows}”" if g.follows else ""
    return (f"gate “{g.name}” ({g.start:g} to {g.end:g} {g.unit}, threshold {g.threshold_fsh:g} %FSH, "
            f"{g.mode}{follows})")


def _focus(analysis: Any) -> tuple[dict[str, Any] | None, float, float, str]:
    """The position sections and the A-scan are drawn through, and why."""
    grid = analysis.grid
    amp = [r for r in analysis.indications if r["kind"] == "amplitude"]
    loss = [r for r in analysis.indications if r["kind"] == "backwall_loss"]
    if amp:
        r = amp[0]
        return r, float(r["scan_mm"]), float(r["index_mm"]), f"through the peak of indication #{r['id']} (highest peak)"
    if loss:
        r = loss[0]
        return r, float(r["scan_mm"]), float(r["index_mm"]), f"through back-wall-loss indication #{r['id']}"
    s = np.asarray(grid["scan"].values)
    i = np.asarray(grid["index"].values)
    sm, im = float(s[s.size // 2]), float(i[i.size // 2])
    return None, sm, im, "through the middle of the scanned area (no indication)"


def _dgs_family(probe_mm: float, ers: Sequence[float]) -> list[float]:
    top = 0.5 * probe_mm
    fam = [d for d in _DGS_FAMILY_MM if d <= top]
    if not fam:
        fam = [round(top, 2)]
    if ers:
        hi = max(ers)
        above = [d for d in _DGS_FAMILY_MM if d >= hi]
        if above and above[0] not in fam and above[0] <= probe_mm:
            fam.append(above[0])
    return sorted(set(fam))[-6:]


def _part_figures(analysis: Any, kinds: Sequence[str], part: str) -> tuple[list[tuple[str, Any, str, str]], list[str]]:
    """Build the figures of one part: (kind, figure, title, caption) and notes on figures not made."""
    from ndtmap.gates import evaluate_gates
    from ndtmap.grid.schema import grid_attr
    from ndtmap.indications.dgs import dgs_diagram
    from ndtmap.plot import (
        ascan_at,
        ascan_figure,
        dgs_figure,
        dgs_points,
        map_figure,
        section_figure,
        thickness_figure,
    )
    from ndtmap.scans.sections import b_scan, d_scan

    proc = analysis.procedure
    maps = analysis.maps
    grid = analysis.grid
    recs = analysis.indications
    amp_recs = [r for r in recs if r["kind"] == "amplitude"]
    loss_recs = [r for r in recs if r["kind"] == "backwall_loss"]
    det = proc.gate(proc.detection_gate)
    bw = proc.gate(proc.backwall_gate) if proc.backwall_gate else None
    out: list[tuple[str, Any, str, str]] = []
    notes: list[str] = []
    missing = "grey: no value (missing A-scan, or the gate did not trigger)"
    focus, fs, fi, why = _focus(analysis)
    for kind in kinds:
        try:
            if kind == "amplitude":
                title = f"{part}: peak amplitude in gate {det.name}"
                fig = map_figure(maps["amplitude"], indications=amp_recs, title=title)
                cap = (f"C-scan of the peak amplitude in {_gate_text(det)}, %FSH, on the recorded scan and index "
                       "positions (mm, equal scale). Outlines: the -6 dB region of each amplitude indication "
                       "(positions connected to the peak with at least half its amplitude; the enclosed area is the "
                       "table's -6 dB area), dashed when the indication is flagged; labels give the 6 dB drop "
                       f"lengths along scan x index. {missing}.")
            elif kind == "depth":
                title = f"{part}: event depth in gate {det.name}"
                fig = map_figure(maps["depth"], indications=amp_recs, outline_map=maps["amplitude"], title=title)
                cap = (f"C-scan of the depth of the gate event in {_gate_text(det)}, mm below the scanning surface. "
                       f"Outlines as in the amplitude map. {missing}.")
            elif kind == "backwall_loss":
                if "backwall_loss" not in maps:
                    notes.append("no back-wall-loss figure: the procedure has no back-wall gate")
                    continue
                loss = maps["backwall_loss"]
                title = f"{part}: back-wall echo loss"
                fig = map_figure(loss, indications=loss_recs, title=title)
                level = proc.backwall_loss_threshold_db
                cap = (f"C-scan of the back-wall echo loss in {_gate_text(bw)}, dB re the nominal back-wall echo "
                       f"({_fmt(loss.attrs.get('nominal_fsh'))} %FSH, {loss.attrs.get('nominal_source', '')}); "
                       "positive: weaker than nominal. The colour scale is centred on 0 dB. "
                       + (f"Outlines: back-wall-loss indications (loss >= {level:g} dB). " if level else "")
                       + f"{missing}.")
            elif kind == "thickness":
                if "thickness" not in maps:
                    notes.append("no thickness figure: " + ("the procedure has no back-wall gate" if bw is None
                                                             else "the thickness map could not be made"))
                    continue
                nominal = grid_attr(grid, "part_thickness_mm")
                title = f"{part}: wall thickness"
                fig = thickness_figure(maps["thickness"], nominal_mm=nominal if isinstance(nominal, float) else None,
                                       title=title)
                cap = (f"Wall thickness from the back-wall echo in {_gate_text(bw)} "
                       f"({maps['thickness'].attrs.get('thickness_method', 'first-echo')}: sound velocity "
                       f"{grid_attr(grid, 'velocity_m_s'):g} m/s, zero offset "
                       f"{grid_attr(grid, 'zero_offset_us', 0.0):g} us), mm; "
                       "the minimum remaining wall is marked. Where an indication shadows the back wall the gate may "
                       f"find a repeat echo instead. {missing}.")
            elif kind in ("bscan", "dscan"):
                if kind == "bscan":
                    sec = b_scan(grid, fi, detect=proc.detect)
                    title = f"{part}: B-scan at index {sec.attrs['index_mm_used']:.1f} mm"
                    cursor = fs
                    cap = (f"B-scan (A-scans along the scan axis) at index {sec.attrs['index_mm_used']:.1f} mm, "
                           f"{why}; {proc.detect} signal, %FSH, depth increasing downwards (mm). Marks: amplitude "
                           "indications crossed by the section at their peak depth, brackets over their 6 dB drop "
                           "length along the scan axis; dotted line: the position of the A-scan figure.")
                else:
                    sec = d_scan(grid, fs, detect=proc.detect)
                    title = f"{part}: D-scan at scan {sec.attrs['scan_mm_used']:.1f} mm"
                    cursor = fi
                    cap = (f"D-scan (A-scans along the index axis) at scan {sec.attrs['scan_mm_used']:.1f} mm, "
                           f"{why}; {proc.detect} signal, %FSH, depth increasing downwards (mm). Marks as in the "
                           "B-scan, brackets along the index axis.")
                fig = section_figure(sec, indications=amp_recs, amplitude_map=maps["amplitude"], cursor_mm=cursor,
                                     title=title, edge=proc.edge)
            elif kind == "ascan":
                a = ascan_at(grid, fs, fi, detect=proc.detect)
                sub = grid.sel(scan=[float(a["scan"])], index=[float(a["index"])])
                results = evaluate_gates(sub, list(proc.gates), detect=proc.detect)
                results = {k: v.compute() for k, v in results.items()}
                title = f"{part}: A-scan at scan {float(a['scan']):.1f} mm, index {float(a['index']):.1f} mm"
                fig = ascan_figure(a, list(proc.gates), gate_results=results, title=title)
                cap = (f"A-scan at scan {float(a['scan']):.1f} mm, index {float(a['index']):.1f} mm ({why}), "
                       f"{proc.detect} signal in %FSH against depth (mm). Every gate of the procedure is drawn in its "
                       "own colour: the shaded window and a bar at its threshold; diamonds mark the gate events.")
            elif kind == "dgs":
                with_ers = [r for r in amp_recs if r.get("ers_mm") is not None]
                if bw is None:
                    notes.append("no DGS figure: the procedure has no back-wall gate (the DGS reference)")
                    continue
                if not with_ers:
                    notes.append("no DGS figure: no indication has a DGS equivalent size")
                    continue
                d = float(grid_attr(grid, "probe_diameter_mm"))
                f = float(grid_attr(grid, "probe_frequency_mhz"))
                c = float(grid_attr(grid, "velocity_m_s"))
                cos = math.cos(math.radians(float(grid_attr(grid, "beam_angle_deg", 0.0))))
                zb = float(np.nanmedian(np.asarray(maps["backwall_depth"].values, dtype=np.float64))) / cos
                from ndtmap.physics.beam import near_field_length_mm

                n = near_field_length_mm(d, f, c)
                z_ind = [float(r["depth_mm"]) / cos for r in with_ers]
                zmax = 1.5 * max(zb, *z_ind)
                zmin = 0.5 * min(z_ind)
                diagram = dgs_diagram(d, f, c, _dgs_family(d, [float(r["ers_mm"]) for r in with_ers]),
                                      max_distance_n=max(zmax / n, 3.5), min_distance_n=min(0.2, zmin / n),
                                      n_points=300)
                points = dgs_points(with_ers, diagram, backwall_sound_path_mm=zb,
                                    beam_angle_deg=float(grid_attr(grid, "beam_angle_deg", 0.0)))
                zz = np.asarray(diagram["distance_mm"].values)
                bw_level = float(np.interp(math.log(zb), np.log(zz), diagram["backwall_echo_db"].values))
                title = f"{part}: DGS diagram, {d:g} mm {f:g} MHz probe"
                fig = dgs_figure(diagram, points=points, backwall_point=(zb, bw_level), title=title)
                cap = (f"DGS diagram of the {d:g} mm, {f:g} MHz probe in the part ({c:g} m/s; near-field length "
                       f"{n:.1f} mm): back-wall and flat-bottom-hole echoes in dB re a plane reflector at zero "
                       "distance against the sound path (log scale); solid: circular-piston model, dotted: far-field "
                       f"relation. The back-wall reference (median back-wall depth {zb:.1f} mm, gate "
                       f"“{bw.name}”) is the open square; each indication is placed at the back-wall level plus its "
                       "corrected echo ratio (attenuation and transfer corrections applied), so it lies on the curve "
                       "of its equivalent size (ERS).")
            else:  # pragma: no cover - kinds are checked before
                continue
        except NdtmapError as exc:
            notes.append(f"no {kind} figure: {_one_line(exc)}")
            continue
        out.append((kind, fig, title, cap))
    return out, notes


def _export_bytes(fig: Any, fmt: str, kind: str) -> bytes:
    from ndtmap.plot.export import figure_bytes

    w, h = FIGURE_SIZES.get(kind, (900, 650))
    return figure_bytes(fig, fmt, width=w, height=h)


# --------------------------------------------------------------------------- HTML


def e(value: Any) -> str:
    """HTML-escape any value as text (None as a dash)."""
    if value is None:
        return "-"
    return html.escape(str(value), quote=True)


_CSS = """
:root { --ink:#1f2328; --muted:#57606a; --line:#d0d7de; --soft:#f6f8fa; --accent:#0072B2; --warn:#D55E00; }
* { box-sizing: border-box; }
body { font-family: "DejaVu Sans", Arial, sans-serif; color: var(--ink); margin: 0; background: #fff;
       font-size: 14px; line-height: 1.45; }
main { max-width: 1180px; margin: 0 auto; padding: 0 24px 48px; }
header.top { border-bottom: 3px solid var(--accent); padding: 20px 24px 12px; max-width: 1180px; margin: 0 auto; }
header.top h1 { font-size: 22px; margin: 0 0 4px; }
header.top .sub { color: var(--muted); }
header.top dl { display: grid; grid-template-columns: max-content 1fr; gap: 2px 14px; margin: 10px 0 0; }
header.top dt { color: var(--muted); } header.top dd { margin: 0; }
h2 { font-size: 18px; border-bottom: 1px solid var(--line); padding-bottom: 4px; margin-top: 32px; }
h3 { font-size: 15px; margin: 18px 0 6px; }
.box { border: 1px solid var(--line); border-left: 5px solid var(--accent); background: var(--soft);
       padding: 10px 14px; margin: 16px 0; }
.box.caution { border-left-color: var(--warn); }
.box.firstlook { border-left-color: #E69F00; background: #fff8e6; }
.box h2, .box h3 { margin: 0 0 6px; border: 0; font-size: 15px; }
.box ul { margin: 4px 0 0 18px; padding: 0; }
table { border-collapse: collapse; margin: 8px 0 12px; font-size: 13px; }
th, td { border: 1px solid var(--line); padding: 3px 7px; text-align: left; vertical-align: top; }
th { background: var(--soft); font-weight: 600; }
td.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
table.kv th { width: 16em; }
figure { margin: 18px 0 26px; border: 1px solid var(--line); padding: 8px; page-break-inside: avoid; }
figure .plot { width: 100%; }
figure img { width: 100%; height: auto; display: block; }
figcaption { color: var(--ink); font-size: 13px; margin-top: 6px; }
figcaption .files a { margin-right: 10px; }
code, pre { font-family: "DejaVu Sans Mono", monospace; font-size: 12px; }
pre { background: var(--soft); border: 1px solid var(--line); padding: 8px; overflow-x: auto; white-space: pre-wrap; }
details { margin: 4px 0; } summary { cursor: pointer; color: var(--accent); }
.muted { color: var(--muted); }
.flag { display: inline-block; border: 1px solid var(--warn); color: var(--warn); border-radius: 3px;
        padding: 0 4px; margin: 1px 2px 1px 0; font-size: 12px; }
footer { color: var(--muted); border-top: 1px solid var(--line); margin-top: 40px; padding-top: 8px; font-size: 12px; }
@media print { body { font-size: 11px; } figure.has-print .plot { display: none; } figure .print { display: block; }
               a { color: inherit; text-decoration: none; } main, header.top { max-width: none; } }
@media screen { figure .print { display: none; } }
"""


def _page(title: str, head_extra: str, header: str, body: str) -> str:
    return (
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
        "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n"
        f"<meta name=\"generator\" content=\"ndtmap {e(__version__)}\">\n"
        f"<title>{e(title)}</title>\n<style>{_CSS}</style>\n{head_extra}</head>\n<body>\n"
        f"{header}\n<main>\n{body}\n"
        f"<footer>Written by ndtmap {e(__version__)}, an open workbench for encoded pulse-echo ultrasonic scans. "
        f"{e(CAUTION)}</footer>\n</main>\n</body>\n</html>\n"
    )


def _kv_table(rows: Iterable[tuple[str, Any]]) -> str:
    cells = "".join(f"<tr><th>{e(k)}</th><td>{e(v)}</td></tr>" for k, v in rows)
    return f"<table class=\"kv\">{cells}</table>"


def _table(head: Sequence[str], rows: Iterable[Sequence[str]], num: Sequence[bool] | None = None) -> str:
    """A table; `rows` hold already escaped HTML cells."""
    num = list(num or [False] * len(head))
    h = "".join(f"<th>{e(c)}</th>" for c in head)
    body = "".join(
        "<tr>" + "".join(f"<td class=\"num\">{c}</td>" if n else f"<td>{c}</td>" for c, n in zip(r, num, strict=True))
        + "</tr>"
        for r in rows
    )
    return f"<table><thead><tr>{h}</tr></thead><tbody>{body}</tbody></table>"


def _cautions_box(cautions: Sequence[str]) -> str:
    items = "".join(f"<li>{e(c)}</li>" for c in cautions)
    return (f"<section class=\"box caution\" id=\"cautions\"><h2>Cautions</h2><ul>{items}</ul>"
            "<p class=\"muted\">This report states measurements and screening statements only. It makes no "
            "acceptance decision.</p></section>")


def _first_look_box(proc: Any) -> str:
    gates = "".join(
        f"<li>gate “{e(g.name)}”: {g.start:g} to {g.end:g} {e(g.unit)}, threshold {e(g.level_text())}</li>"
        for g in proc.gates
    )
    thr = e(proc.detection_level)
    loss = (f"<li>back-wall-loss indications from {proc.backwall_loss_threshold_db:g} dB</li>"
            if proc.backwall_loss_threshold_db else "")
    return (
        "<section class=\"box firstlook\" id=\"first-look\"><h2>First look: settings derived from the grid</h2>"
        "<p><strong>No procedure file was given.</strong> The gates and the detection threshold below were derived "
        "from the grid itself (ndtmap's first-look rules), not taken from a written procedure. Use these results to "
        "decide how to examine the part; write a procedure for the record.</p>"
        f"<ul>{gates}<li>detection threshold {thr} in gate “{e(proc.detection_gate)}”</li>{loss}</ul>"
        f"<p class=\"muted\">{e(proc.description)}</p></section>"
    )


def _indication_rows(records: Sequence[Mapping[str, Any]]) -> tuple[str, str]:
    from ndtmap.indications.flags import FLAG_MEANINGS

    head = ["id", "kind", "scan mm", "index mm", "depth mm", "peak %FSH", "back-wall loss dB",
            "6 dB length scan mm", "6 dB length index mm", "-6 dB area mm²", "ERS mm", "flags", "screening"]
    num = [True, False, True, True, True, True, True, True, True, True, True, False, False]
    rows = []
    used: list[str] = []
    for r in records:
        flags = list(r.get("flags") or [])
        used += [f for f in flags if f not in used]
        loss = "total" if r.get("total_backwall_loss") else _fmt(r.get("backwall_loss_db"))
        ers = _fmt(r.get("ers_mm"), ".2f")
        if r.get("ers_mm") is not None and r.get("ers_method"):
            ers += f" ({e(r['ers_method'])})"
        rows.append([
            e(r["id"]), e(r.get("kind")), _fmt(r.get("scan_mm")), _fmt(r.get("index_mm")), _fmt(r.get("depth_mm")),
            _fmt(r.get("peak_fsh")), loss,
            f"{_fmt(r.get('length_scan_mm'))} ± {_fmt(r.get('length_scan_uncertainty_mm'))}",
            f"{_fmt(r.get('length_index_mm'))} ± {_fmt(r.get('length_index_uncertainty_mm'))}",
            f"{_fmt(r.get('area_mm2'), '.0f')} ± {_fmt(r.get('area_uncertainty_mm2'), '.0f')}",
            ers,
            "".join(f"<span class=\"flag\" title=\"{e(FLAG_MEANINGS.get(f, ''))}\">{e(f)}</span>" for f in flags)
            or "-",
            e(r.get("screening") or "-"),
        ])
    table = _table(head, rows, num)
    legend = ""
    if used:
        items = "".join(f"<li><span class=\"flag\">{e(f)}</span> {e(FLAG_MEANINGS.get(f, ''))}</li>" for f in used)
        legend = f"<h3>Flags</h3><ul>{items}</ul>"
    notes = []
    for r in records:
        if r.get("notes"):
            li = "".join(f"<li>{e(n)}</li>" for n in r["notes"])
            notes.append(f"<details><summary>Notes on indication #{e(r['id'])}</summary><ul>{li}</ul></details>")
    return table, legend + "".join(notes)


def _largest(records: Sequence[Mapping[str, Any]]) -> dict[str, Any] | None:
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
                    "by": _LARGEST_BY}
    return best


def _provenance_html(grid_record: list[dict[str, Any]], maps: Mapping[str, list[dict[str, Any]]]) -> str:
    def steps(record: Sequence[Mapping[str, Any]], times: bool) -> str:
        rows = []
        for s in record:
            params = json.dumps(s.get("parameters", {}), sort_keys=True, ensure_ascii=False)
            row = [e(s.get("step")), f"<code>{e(params)}</code>", e(s.get("ndtmap_version"))]
            if times:
                row.append(e(s.get("utc_time")))
            rows.append(row)
        head = ["step", "parameters", "ndtmap"] + (["UTC time"] if times else [])
        return _table(head, rows) if rows else "<p class=\"muted\">none recorded</p>"

    out = ["<h3>Grid (as read from the file)</h3>", steps(grid_record, True)]
    for name, record in maps.items():
        new = record[len(grid_record):] if record[: len(grid_record)] == grid_record else record
        out.append(f"<h3>Map “{e(name)}” (steps of this run; their times are in provenance.json)</h3>")
        out.append(steps(new, False))
    return "".join(out)


def _threshold_text(analysis: Any) -> str:
    """The detection level in words, with its value in %FSH when it is given in dB."""
    gate = analysis.gates[analysis.procedure.detection_gate]
    if gate.threshold_db is None:
        return f"{gate.threshold_fsh:g} %FSH"
    if gate.reference == "backwall":
        ref = float(analysis.maps["backwall_loss"].attrs["nominal_fsh"])
        what = f"the nominal back-wall echo, {ref:.2f} %FSH"
    else:
        ref = float(gate.reference)
        what = f"{ref:g} %FSH"
    return f"{gate.threshold_db:g} dB re {what} (= {gate.threshold_fsh:.2f} %FSH)"


def _settings_html(analysis: Any) -> str:
    from ndtmap.grid.schema import grid_attr

    proc = analysis.procedure
    grid = analysis.grid
    cal = [
        ("sound velocity", f"{grid_attr(grid, 'velocity_m_s'):g} m/s"
         + (" (from the procedure)" if proc.velocity_m_s is not None else " (from the grid)")),
        ("zero offset", f"{grid_attr(grid, 'zero_offset_us', 0.0):g} us"
         + (" (from the procedure)" if proc.zero_offset_us is not None else " (from the grid)")),
        ("beam angle", f"{grid_attr(grid, 'beam_angle_deg', 0.0):g} deg"),
    ]
    gates = _table(
        ["gate", "start", "end", "unit", "threshold %FSH", "mode", "follows"],
        [[e(g.name), _fmt(g.start, "g"), _fmt(g.end, "g"), e(g.unit), _fmt(g.threshold_fsh, "g"), e(g.mode),
          e(g.follows or "-")] for g in proc.gates],
        [False, True, True, False, True, False, False],
    )
    thr = _threshold_text(analysis)
    det = [
        ("procedure", proc.name + (" (first look, derived from the grid)" if proc.first_look else "")),
        ("description", proc.description or "-"),
        ("detection gate", proc.detection_gate),
        ("detection threshold", thr),
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
    return ("<h3>Calibration</h3>" + _kv_table(cal) + "<h3>Gates</h3>" + gates
            + "<h3>Detection, sizing and screening</h3>" + _kv_table(det)
            + "<p class=\"muted\">The full procedure is in <a href=\"procedure.toml\">procedure.toml</a> (it "
              "reproduces this report with <code>ndtmap report FILE --procedure procedure.toml</code>) and "
              "<a href=\"settings.json\">settings.json</a>.</p>")


def _metadata_html(summary: Mapping[str, Any]) -> str:
    attrs = summary.get("attrs") or {}
    shape = summary.get("shape") or {}

    def rng(v: Any, unit: str) -> str:
        return "-" if not v else f"{v[0]:.3f} to {v[1]:.3f} {unit}"

    rows = [
        ("file", summary.get("file")),
        ("positions", " x ".join(f"{k} {v}" for k, v in shape.items())),
        ("scan axis", rng(summary.get("scan_mm"), "mm")),
        ("index axis", rng(summary.get("index_mm"), "mm")),
        ("time", rng(summary.get("time_us"), "us")),
        ("depth range", rng(summary.get("depth_mm"), "mm")),
        ("samples", f"{summary.get('dtype')}, signal {summary.get('signal')}"),
        ("missing A-scans", summary.get("missing_ascans")),
    ]
    rows += [(k, attrs[k]) for k in sorted(attrs)]
    return _kv_table(rows)


def _figure_html(k: int, ff: FigureFile, fig: Any, embed: bool) -> str:
    links = " ".join(f"<a href=\"figures/{e(p.name)}\">{e(fmt.upper())}</a>" for fmt, p in ff.files.items())
    body = ""
    if embed:
        body = fig.to_html(full_html=False, include_plotlyjs=False, div_id=f"figure-{ff.kind}",
                           config={"displaylogo": False, "responsive": True},
                           default_height=f"{FIGURE_SIZES.get(ff.kind, (900, 650))[1]}px")
        body = f"<div class=\"plot\">{body}</div>"
    if "png" in ff.files:
        body += f"<img class=\"print\" src=\"figures/{e(ff.files['png'].name)}\" alt=\"{e(ff.title)}\">"
    files = f"<span class=\"files\">Files: {links}</span>" if links else "<span class=\"muted\">no static files</span>"
    printable = " class=\"has-print\"" if "png" in ff.files else ""
    return (f"<figure id=\"fig-{e(ff.kind)}\"{printable}>{body}<figcaption><strong>Figure {k}.</strong> "
            f"{e(ff.caption)} {files}</figcaption></figure>")


def _part_page(ctx: dict[str, Any]) -> str:
    analysis = ctx["analysis"]
    proc = analysis.procedure
    recs = analysis.indications
    part = ctx["part_id"]
    src = ctx["source"]
    n_amp = sum(1 for r in recs if r["kind"] == "amplitude")
    n_loss = len(recs) - n_amp
    header = (
        "<header class=\"top\">"
        f"<h1>Ultrasonic scan evidence: part {e(part or 'without id')}</h1>"
        f"<div class=\"sub\">file {e(src)}</div><dl>"
        f"<dt>procedure</dt><dd>{e(proc.name)}</dd>"
        f"<dt>material</dt><dd>{e(analysis.grid.attrs.get('material', '-'))}</dd>"
        f"<dt>report written</dt><dd>{e(ctx['run_time'])} (UTC)</dd>"
        f"<dt>ndtmap</dt><dd>{e(__version__)}</dd>"
        + ("<dt>summary</dt><dd><a href=\"../index.html\">all parts of this run</a></dd>" if ctx["batch"] else "")
        + "</dl></header>"
    )
    body = [_cautions_box(analysis.cautions)]
    if proc.first_look:
        body.append(_first_look_box(proc))
    largest = _largest(recs)
    summary_rows = [
        ("indications", f"{len(recs)} ({n_amp} amplitude, {n_loss} back-wall loss)"),
        ("largest indication", f"#{largest['id']}: {largest['length_mm']:.1f} mm along {largest['axis']} "
                               f"(by the {_LARGEST_BY})" if largest else "-"),
    ]
    if analysis.screening is not None:
        summary_rows.append(("screening", f"{analysis.screening.get('overall')} "
                                          f"(rules: {analysis.screening.get('rules') or proc.rules})"))
    body.append("<section id=\"summary\"><h2>Summary</h2>" + _kv_table(summary_rows) + "</section>")
    nav = " · ".join(f"<a href=\"#{a}\">{t}</a>" for a, t in (
        ("settings", "settings"), ("figures", "figures"), ("indications", "indications"),
        ("metadata", "scan metadata"), ("provenance", "provenance"), ("files", "files")))
    body.append(f"<p class=\"muted\">{nav}</p>")
    body.append("<section id=\"settings\"><h2>Settings</h2>" + _settings_html(analysis) + "</section>")
    figs = ctx["figures"]
    fig_html = [_figure_html(k + 1, ff, fig, True) for k, (ff, fig) in enumerate(figs)]
    skipped = "".join(f"<li>{e(n)}</li>" for n in ctx["figure_notes"])
    body.append("<section id=\"figures\"><h2>Figures</h2>" + "".join(fig_html)
                + (f"<ul class=\"muted\">{skipped}</ul>" if skipped else "") + "</section>")
    table, legend = _indication_rows(recs)
    thr = _threshold_text(analysis)
    det = proc.gate(proc.detection_gate)
    body.append(
        "<section id=\"indications\"><h2>Indications</h2>"
        f"<p>Detected in gate “{e(det.name)}” at {e(thr)}; sized by the 6 dB drop (half the peak) along the scan "
        "and index axes through the peak, with the sampling bound (±) of the two ends; -6 dB area: the positions "
        "connected to the peak with at least half its amplitude; ERS: DGS equivalent flat-bottom-hole diameter "
        "against the back-wall reference. Back-wall-loss indications are sized at the loss level. The same table "
        "is in <a href=\"indications.csv\">indications.csv</a> and <a href=\"indications.json\">indications.json"
        "</a>.</p>"
        + (table if recs else "<p>No indications above the detection threshold.</p>") + legend
        + ("<h3>Screening</h3><p>" + e(analysis.screening.get("overall")) + " — screening compares the sizes with "
           "the limits of the rules file; it is not an acceptance decision.</p>" if analysis.screening else "")
        + "</section>"
    )
    if analysis.notes or ctx["notes"]:
        li = "".join(f"<li>{e(n)}</li>" for n in (*analysis.notes, *ctx["notes"]))
        body.append(f"<section id=\"notes\"><h2>Notes</h2><ul>{li}</ul></section>")
    body.append("<section id=\"metadata\"><h2>Scan metadata</h2>" + _metadata_html(ctx["metadata"]) + "</section>")
    body.append("<section id=\"provenance\"><h2>Provenance</h2>"
                + _provenance_html(ctx["grid_provenance"], ctx["map_provenance"]) + "</section>")
    files = "".join(f"<li><a href=\"{e(p)}\">{e(p)}</a></li>" for p in ctx["files"])
    body.append(f"<section id=\"files\"><h2>Files</h2><ul>{files}</ul></section>")
    head = f"<script src=\"{e(ctx['plotly_js'])}\" charset=\"utf-8\"></script>\n"
    return _page(f"ndtmap report {part or src}", head, header, "\n".join(body))


def _summary_page(parts: Sequence[PartReport], errors: Sequence[ReportError], root: Path, run_time: str,
                  notes: Sequence[str], cautions: Sequence[str]) -> str:
    header = (
        "<header class=\"top\"><h1>Ultrasonic scan evidence: summary of the run</h1>"
        f"<div class=\"sub\">{len(parts)} part(s) reported, {len(errors)} input(s) not reported</div><dl>"
        f"<dt>report written</dt><dd>{e(run_time)} (UTC)</dd><dt>ndtmap</dt><dd>{e(__version__)}</dd></dl></header>"
    )
    body = [_cautions_box(cautions)]
    if any(p.first_look for p in parts):
        body.append("<section class=\"box firstlook\"><h2>First look</h2><p>Parts marked “first look” were "
                    "evaluated with gates and thresholds derived from their own grid, not with a written procedure; "
                    "the derived values are on each part's page.</p></section>")
    rows = []
    for p in parts:
        lg = p.largest
        rows.append([
            f"<a href=\"{e(_rel(p.index_html, root))}\">{e(p.part_id or '-')}</a>",
            e(p.source),
            f"{p.n_indications} ({p.n_amplitude} amplitude, {p.n_backwall_loss} back-wall loss)",
            e(f"#{lg['id']}: {lg['length_mm']:.1f} mm ({lg['axis']})") if lg else "-",
            e(", ".join(p.rules_exceeded)) if p.rules_exceeded else ("none" if p.screening else "no rules"),
            "first look" if p.first_look else "procedure",
        ])
    body.append("<section id=\"parts\"><h2>Parts</h2>"
                + _table(["part", "file", "indications found", "largest indication", "rules exceeded", "settings"],
                         rows)
                + f"<p class=\"muted\">Largest indication: by the {e(_LARGEST_BY)}.</p></section>")
    if errors:
        li = "".join(f"<li><strong>{e(x.source)}</strong>: {e(x.reason)}</li>" for x in errors)
        body.append(f"<section id=\"errors\" class=\"box caution\"><h2>Inputs not reported</h2><ul>{li}</ul>"
                    "</section>")
    if notes:
        li = "".join(f"<li>{e(n)}</li>" for n in notes)
        body.append(f"<section id=\"notes\"><h2>Notes</h2><ul>{li}</ul></section>")
    body.append("<p class=\"muted\">Machine-readable: <a href=\"summary.json\">summary.json</a>, "
                "<a href=\"run.json\">run.json</a>.</p>")
    return _page("ndtmap report summary", "", header, "\n".join(body))


# --------------------------------------------------------------------------- one part


def _copy_rules(proc: Any, writer: _Writer, folder: Path) -> Any:
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


def _write_part(item: _Input, grid: xr.Dataset, proc: Any, folder: Path, writer: _Writer, *, kinds: Sequence[str],
                formats: Sequence[str], static: dict[str, Any], plotly_js: str, run_time: str,
                batch: bool) -> PartReport:
    from ndtmap.grid.provenance import jsonable, read_provenance
    from ndtmap.grid.summary import grid_summary
    from ndtmap.indications.tables import indications_csv
    from ndtmap.procedure.definition import procedure_to_toml, run_procedure

    analysis = run_procedure(grid, proc, source=item.label)
    part_id = grid.attrs.get("part_id")
    part_id = None if part_id in (None, "") else str(part_id)
    part_label = part_id or (item.path.stem if item.path is not None else item.label)
    folder.mkdir(parents=True, exist_ok=True)
    figs, fig_notes = _part_figures(analysis, kinds, part_label)
    (folder / "figures").mkdir(exist_ok=True)
    written: list[tuple[FigureFile, Any]] = []
    for kind, fig, title, cap in figs:
        files: dict[str, Path] = {}
        for fmt in formats:
            if not static["on"]:
                break
            t0 = time.perf_counter()
            try:
                data = _export_bytes(fig, fmt, kind)
            except FileFormatError as exc:
                static["on"] = False
                static["notes"].append(f"static images were skipped from here on: {_one_line(exc)}")
                break
            static["seconds"].append(time.perf_counter() - t0)
            files[fmt] = writer.data(folder / "figures" / f"{kind}.{fmt}", data)
        written.append((FigureFile(kind, title, cap, files), fig))
    doc = analysis.indications_document()
    writer.text(folder / "indications.csv", indications_csv(analysis.indications))
    writer.json(folder / "indications.json", doc)
    summary = grid_summary(grid, source=item.label)
    writer.json(folder / "metadata.json", summary)
    saved = _copy_rules(proc, writer, folder)
    writer.text(folder / "procedure.toml", procedure_to_toml(saved))
    from ndtmap.grid.schema import grid_attr

    settings = {
        "procedure": saved.to_dict(),
        "calibration": {
            "velocity_m_s": grid_attr(analysis.grid, "velocity_m_s"),
            "zero_offset_us": grid_attr(analysis.grid, "zero_offset_us", 0.0),
            "beam_angle_deg": grid_attr(analysis.grid, "beam_angle_deg", 0.0),
        },
        "first_look": bool(proc.first_look),
        "figures": [ff.kind for ff, _ in written],
        "formats": sorted({fmt for ff, _ in written for fmt in ff.files}),
    }
    if "backwall_loss" in analysis.maps:
        settings["backwall_nominal_fsh"] = analysis.maps["backwall_loss"].attrs.get("nominal_fsh")
    writer.json(folder / "settings.json", jsonable(settings))
    grid_prov = read_provenance(grid)
    map_prov = {name: read_provenance(m) for name, m in analysis.maps.items()}
    writer.json(folder / "provenance.json", {"grid": grid_prov, "maps": map_prov})
    listing = ["indications.csv", "indications.json", "metadata.json", "settings.json", "procedure.toml",
               "provenance.json"] + (["rules.toml"] if saved.rules else [])
    listing += [f"figures/{p.name}" for ff, _ in written for p in ff.files.values()]
    notes = list(fig_notes)
    if not static["on"] and formats:
        notes.append("static images (PNG/SVG/PDF) were skipped: " + "; ".join(static["notes"]))
    if grid.attrs.get("truth"):
        notes.append("the grid carries the truth of a simulated scan: it is synthetic data, not a real part")
    ctx = {
        "analysis": analysis, "part_id": part_id, "source": item.label, "run_time": run_time, "batch": batch,
        "figures": written, "figure_notes": fig_notes, "notes": [n for n in notes if n not in fig_notes],
        "metadata": summary, "grid_provenance": grid_prov, "map_provenance": map_prov, "files": listing,
        "plotly_js": plotly_js,
    }
    index = writer.text(folder / "index.html", _part_page(ctx))
    screening = analysis.screening
    return PartReport(
        source=item.label,
        part_id=part_id,
        folder=folder,
        index_html=index,
        n_indications=len(analysis.indications),
        n_amplitude=sum(1 for r in analysis.indications if r["kind"] == "amplitude"),
        n_backwall_loss=sum(1 for r in analysis.indications if r["kind"] == "backwall_loss"),
        largest=_largest(analysis.indications),
        rules_exceeded=tuple(screening.get("exceeded", ())) if screening else (),
        screening=screening.get("overall") if screening else None,
        first_look=bool(proc.first_look),
        figures=tuple(ff for ff, _ in written),
        notes=tuple(notes),
    )


# --------------------------------------------------------------------------- the bundle


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
    """Write a report folder for one or more scan grids.

    Parameters
    ----------
    paths_or_grids : path, xarray.Dataset, or a list of them
        Grid files (.nc, .zarr stores, raw .json sidecars), folders (every
        grid file in them) or grids in memory. One grid gives one page in
        `output_dir`; several (or a folder) give one sub-folder per part and
        a summary page.
    output_dir : path
        The report folder (created; files in it are replaced atomically). It
        must not be one of the inputs.
    procedure : Procedure or path, optional
        The procedure (or its TOML file). Default: for each grid the
        first-look procedure derived from it
        (:func:`ndtmap.procedure.definition.first_look_procedure`), stated as such in
        the report.
    figures : sequence of str, optional
        Figure kinds (:data:`ndtmap.procedure.definition.FIGURE_KINDS`); default the
        procedure's ``figures``.
    formats : sequence of {'png', 'svg', 'pdf'}, default ('png', 'svg')
        Static files of each figure (needs Chromium; without it the page
        has the interactive figures only and says so). Empty: none.
    progress : bool, default False
        Show a progress bar on stderr.

    lazy : bool, optional
        Open grid files lazily (dask-backed; True when a Dask scheduler is
        used, so that the cluster computes); default: lazy only when a grid
        is larger than a share of memory (see :func:`ndtmap.io.grid_files.open_grid`).

    Returns
    -------
    ReportResult

    Raises
    ------
    NdtmapError
        For bad arguments, an output folder that is an input, and, for a
        single input, when it cannot be read or evaluated (in a batch such
        inputs are listed in the summary instead).
    """
    from tqdm import tqdm

    from ndtmap.io.grid_files import open_grid
    from ndtmap.plot.export import export_session, find_chromium, write_plotly_js
    from ndtmap.procedure.definition import FIGURE_KINDS, Procedure, first_look_procedure, load_procedure

    t_start = time.perf_counter()
    items, batch, paths = _inputs(paths_or_grids)
    if isinstance(output_dir, xr.Dataset) or not isinstance(output_dir, str | os.PathLike):
        raise ParameterTypeError(f"`output_dir` must be a folder path, got {type(output_dir).__name__}")
    root = Path(output_dir)
    _check_output(root, paths)
    if procedure is not None and not isinstance(procedure, Procedure):
        if isinstance(procedure, str | os.PathLike):
            procedure = load_procedure(procedure)
        else:
            raise ParameterTypeError(f"`procedure` must be a Procedure or a path, got {type(procedure).__name__}")
    if figures is not None:
        if isinstance(figures, str):
            figures = [figures]
        bad = [f for f in figures if f not in FIGURE_KINDS]
        if bad:
            raise ParameterError(f"`figures` must be kinds from {list(FIGURE_KINDS)}, got {bad}")
    if isinstance(formats, str):
        formats = [formats]
    formats = [str(f).lower().lstrip(".") for f in formats]
    bad = [f for f in formats if f not in REPORT_FORMATS]
    if bad:
        raise ParameterError(f"`formats` must be from {list(REPORT_FORMATS)}, got {bad}")
    formats = list(dict.fromkeys(formats))
    root.mkdir(parents=True, exist_ok=True)
    input_files = [i.path for i in items if i.path is not None]
    writer = _Writer(root, [*input_files, *[p for p in paths if not p.is_dir()]])
    run_time = _dt.datetime.now(_dt.UTC).strftime("%Y-%m-%d %H:%M:%S")
    notes: list[str] = []
    static: dict[str, Any] = {"on": bool(formats), "notes": [], "seconds": []}
    if formats and find_chromium() is None:
        static["on"] = False
        static["notes"].append("no Chromium browser was found (install Debian's `chromium` or set BROWSER_PATH); "
                               "the page has the interactive figures only")
    writer._target(root / "plotly.min.js")
    writer.written.append(write_plotly_js(root))
    parts: list[PartReport] = []
    errors: list[ReportError] = []
    used: set[str] = set(_TOP_FILES)
    with contextlib.ExitStack() as stack:
        if static["on"]:
            try:
                stack.enter_context(export_session())
            except FileFormatError as exc:
                static["on"] = False
                static["notes"].append(_one_line(exc))
        bar = tqdm(items, desc="ndtmap report", unit="part", file=sys.stderr, disable=not progress, leave=False)
        for item in bar:
            try:
                grid = item.grid if item.grid is not None else open_grid(item.path, lazy=lazy)
                if item.grid is not None:
                    from ndtmap.grid.schema import validate_grid

                    grid = validate_grid(grid, check_values=False)
                proc = procedure if procedure is not None else first_look_procedure(grid)
                kinds = list(figures) if figures is not None else list(proc.figures)
                if batch:
                    pid = grid.attrs.get("part_id")
                    stem = item.path.stem if item.path is not None else f"grid-{len(parts) + len(errors) + 1}"
                    base = safe_name(pid if pid not in (None, "") else stem, default="part")
                    name = base
                    k = 2
                    while name.lower() in used:
                        name = f"{base}-{k}"
                        k += 1
                    used.add(name.lower())
                    folder = root / name
                    js = "../plotly.min.js"
                else:
                    folder = root
                    js = "plotly.min.js"
                parts.append(_write_part(item, grid, proc, folder, writer, kinds=kinds, formats=formats,
                                         static=static, plotly_js=js, run_time=run_time, batch=batch))
            except (NdtmapError, OSError) as exc:
                if not batch:
                    raise
                errors.append(ReportError(item.label, _one_line(exc)))
            except Exception as exc:  # noqa: BLE001 - a batch goes on; the reason is listed
                if not batch:
                    raise
                errors.append(ReportError(item.label, "internal error (please report): " + _one_line(exc)))
        bar.close()
    if formats and not static["on"]:
        notes.append("static images (PNG/SVG/PDF) were skipped: " + "; ".join(static["notes"]))
    cautions = [CAUTION]
    summary_doc = {
        "run_time_utc": run_time,
        "ndtmap_version": __version__,
        "parts": [p.summary(root) for p in parts],
        "errors": [{"file": x.source, "reason": x.reason} for x in errors],
        "largest_indication_by": _LARGEST_BY,
        "static_images": bool(static["on"]),
        "notes": notes,
        "cautions": cautions,
    }
    writer.json(root / "summary.json", summary_doc)
    if batch:
        index = writer.text(root / "index.html", _summary_page(parts, errors, root, run_time, notes, cautions))
    else:
        index = parts[0].index_html
    seconds = time.perf_counter() - t_start
    run_doc = {
        "run_time_utc": run_time,
        "ndtmap_version": __version__,
        "inputs": [{"file": i.label, "sha256": _sha256(i.path) if i.path is not None else None} for i in items],
        "procedure": procedure.name if procedure is not None else "first look (derived from each grid)",
        "formats": formats,
        "static_images": bool(static["on"]),
        "plotly_js": "plotly.min.js in the report folder, referenced relatively (no network needed)",
        "seconds": round(seconds, 3),
        "figure_export_seconds": [round(s, 3) for s in static["seconds"]],
        "notes": notes,
    }
    writer.json(root / "run.json", run_doc)
    return ReportResult(
        output_dir=root,
        index_html=index,
        parts=tuple(parts),
        errors=tuple(errors),
        static_images=bool(static["on"]),
        notes=tuple(notes),
        run_time_utc=run_time,
        batch=batch,
        seconds=seconds,
    )

