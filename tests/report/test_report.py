"""Tests of ndtmap.report.bundle and the ``ndtmap report`` command: the bundle, its safety and the example procedures.

External references: HTML is parsed with the standard library's html.parser (Python documentation,
html.parser) and escaping follows html.escape (Python documentation); CSV by the csv module (RFC 4180);
PNG dimensions from the IHDR chunk (W3C PNG specification, 11.2.2); SVG parsed as XML (W3C SVG 1.1); file
identity by SHA-256 (FIPS 180-4, hashlib). The truth the example procedures are checked against is the
simulator's own record of the reflectors (ndtmap.simulate.scan_truth); the DGS equivalent size of a
flat-bottom hole equals its diameter (Krautkramer, Ultrasonic Testing of Materials, DGS chapter, from
memory), within the model and sampling errors allowed below.
"""

from __future__ import annotations

import csv
import hashlib
import io
import json
import os
import re
import shutil
import struct
import xml.etree.ElementTree as ET
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest

import ndtmap
from ndtmap import CAUTION
from ndtmap.cli import main
from ndtmap.errors import NdtmapError, ParameterError
from ndtmap.io import open_grid, save_grid
from ndtmap.plot import find_chromium
from ndtmap.procedure import load_procedure, run_procedure
from ndtmap.report import safe_name, write_report
from ndtmap.simulate import sample_path, scan_truth

DATA = Path(ndtmap.__file__).resolve().parent / "data"
PLATE_PROCEDURE = DATA / "plate_lamination_procedure.toml"
FORGING_PROCEDURE = DATA / "forging_procedure.toml"
BROWSER = find_chromium() is not None
REQUIRE = os.environ.get("NDTMAP_REQUIRE_BROWSER") == "1"


def need_browser():
    if not BROWSER:
        if REQUIRE:
            pytest.fail("NDTMAP_REQUIRE_BROWSER=1 but no Chromium was found for static figure export")
        pytest.skip("static figure export needs Chromium (apt-get install chromium)")


def sha(path):
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


@pytest.fixture(scope="module")
def session():
    """One kaleido browser for the module (reports inside share it)."""
    if not BROWSER:
        if REQUIRE:
            pytest.fail("NDTMAP_REQUIRE_BROWSER=1 but no Chromium was found")
        yield False
        return
    from ndtmap.plot import export_session

    with export_session():
        yield True


@pytest.fixture(scope="module")
def plate(tmp_path_factory, session):
    """The plate sample reported twice with its example procedure (all figure kinds)."""
    src = tmp_path_factory.mktemp("in") / "plate_laminations.nc"
    shutil.copy(sample_path("plate_laminations.nc"), src)
    before = sha(src)
    formats = ("png", "svg") if session else ()
    root = tmp_path_factory.mktemp("plate")
    runs = [write_report(src, root / f"run{k}", procedure=PLATE_PROCEDURE, formats=formats) for k in (1, 2)]
    return {"src": src, "before": before, "runs": runs, "static": bool(session)}


class Page(HTMLParser):
    """Collects tags, attributes and visible text of an HTML page."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.tags, self.text, self.scripts, self.links, self._in_script = [], [], [], [], False

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        self.tags.append((tag, a))
        if tag == "script":
            self._in_script = True
            self.scripts.append(a.get("src"))
        for key in ("src", "href"):
            if a.get(key):
                self.links.append(a[key])

    def handle_endtag(self, tag):
        if tag == "script":
            self._in_script = False

    def handle_data(self, data):
        if not self._in_script:
            self.text.append(data)


def parse(path):
    p = Page()
    p.feed(Path(path).read_text(encoding="utf-8"))
    p.close()
    return p


def png_size(data):
    assert data[:8] == b"\x89PNG\r\n\x1a\n" and data[12:16] == b"IHDR"  # W3C PNG spec, 11.2.2
    return struct.unpack(">II", data[16:24])


# --------------------------------------------------------------------------- the bundle


def test_bundle_files_exist_and_the_page_is_offline(plate):
    r = plate["runs"][0]
    root = r.output_dir
    assert r.index_html == root / "index.html" and not r.batch and r.exit_status == 0
    for name in ("index.html", "plotly.min.js", "indications.csv", "indications.json", "metadata.json",
                 "settings.json", "procedure.toml", "rules.toml", "provenance.json", "summary.json", "run.json"):
        assert (root / name).is_file(), name
    page = parse(root / "index.html")
    assert page.scripts[0] == "plotly.min.js"  # relative, written once into the folder
    assert all(s is None for s in page.scripts[1:])  # the rest are inline figure scripts
    assert not [u for u in page.links if re.match(r"(https?:)?//", u)]  # nothing from the network
    for link in page.links:
        if not link.startswith("#"):
            assert (root / link).exists(), link
    text = " ".join(page.text)
    assert " ".join(CAUTION.split()) in " ".join(text.split())
    assert "KFP-PL-2041" in text and "KFP plate lamination survey" in text
    # the procedure saved in the bundle reproduces the settings (rules copied next to it)
    saved = load_procedure(root / "procedure.toml")
    assert saved.gates == load_procedure(PLATE_PROCEDURE).gates and saved.rules_path() == root / "rules.toml"
    # figure files for the procedure's figure list
    kinds = {f.kind for f in r.parts[0].figures}
    assert kinds == set(load_procedure(PLATE_PROCEDURE).figures)
    assert plate["before"] == sha(plate["src"])  # the input is unchanged


def test_csv_and_json_agree_field_by_field(plate):
    root = plate["runs"][0].output_dir
    doc = json.loads((root / "indications.json").read_text())
    rows = list(csv.DictReader(io.StringIO((root / "indications.csv").read_text())))
    assert len(rows) == len(doc["indications"]) >= 4  # at least the four laminations of the sample
    for row, rec in zip(rows, doc["indications"], strict=True):
        for key, cell in row.items():
            value = rec.get(key)
            if value is None:
                assert cell == "", key
            elif isinstance(value, bool):
                assert cell == str(value), key
            elif isinstance(value, float):
                assert float(cell) == value, key  # full precision both ways
            elif isinstance(value, int):
                assert int(cell) == value, key
            elif isinstance(value, list):
                assert cell == ";".join(value), key
            else:
                assert cell == value, key
    page = parse(root / "index.html")
    tables = [t for t, a in page.tags if t == "tr"]
    assert len(tables) > len(rows)  # header + one row per indication among the page's tables


def test_report_reproduces_the_indications_command(plate, capsys):
    root = plate["runs"][0].output_dir
    src = str(plate["src"])
    assert main(["indications", src, "--procedure", str(PLATE_PROCEDURE), "--format", "json"]) == 0
    cli_doc = json.loads(capsys.readouterr().out)
    assert cli_doc == json.loads((root / "indications.json").read_text())
    assert main(["indications", src, "--procedure", str(PLATE_PROCEDURE), "--format", "csv"]) == 0
    assert capsys.readouterr().out == (root / "indications.csv").read_text()


def test_two_runs_give_identical_figures_and_tables(plate):
    a, b = (r.output_dir for r in plate["runs"])
    for name in ("indications.csv", "indications.json", "metadata.json", "settings.json", "procedure.toml"):
        assert (a / name).read_bytes() == (b / name).read_bytes(), name
    strip = re.compile(r"\d{4}-\d\d-\d\d \d\d:\d\d:\d\d")  # the one stated run time
    pa, pb = ((d / "index.html").read_text() for d in (a, b))
    assert len(strip.findall(pa)) == 1
    assert strip.sub("T", pa) == strip.sub("T", pb)
    if not plate["static"]:
        need_browser()
    files = sorted(p.name for p in (a / "figures").iterdir())
    assert len(files) == 2 * len(plate["runs"][0].parts[0].figures)  # PNG and SVG of each
    for name in files:
        assert (a / "figures" / name).read_bytes() == (b / "figures" / name).read_bytes(), name


def test_images_decode_with_the_expected_size(plate):
    if not plate["static"]:
        need_browser()
    from ndtmap.report import FIGURE_SIZES

    root = plate["runs"][0].output_dir / "figures"
    made = {f.kind for f in plate["runs"][0].parts[0].figures}
    assert made
    for kind, (w, h) in FIGURE_SIZES.items():
        if kind not in made:
            continue
        assert png_size((root / f"{kind}.png").read_bytes()) == (3 * w, 3 * h)  # print resolution: 3x
        svg = ET.fromstring((root / f"{kind}.svg").read_bytes())
        assert (svg.get("width"), svg.get("height")) == (str(w), str(h))


def test_pdf_figures_when_asked(tmp_path, session):
    if not session:
        need_browser()
    r = write_report(sample_path("corroded_wall.nc"), tmp_path / "out", figures=["thickness"], formats=["pdf"])
    data = (tmp_path / "out" / "figures" / "thickness.pdf").read_bytes()
    assert data.startswith(b"%PDF-") and b"%%EOF" in data[-1024:]  # ISO 32000-1, 7.5
    assert r.parts[0].figures[0].files == {"pdf": tmp_path / "out" / "figures" / "thickness.pdf"}


def test_no_verdict_words(plate):
    page = parse(plate["runs"][0].output_dir / "index.html")
    text = " ".join(" ".join(page.text).split()).replace(" ".join(CAUTION.split()), "")
    text = text.replace("makes no acceptance decision", "").replace("not an acceptance decision", "")
    assert not re.findall(r"\b(accept\w*|reject\w*|pass(ed)?|fail\w*)\b", text, flags=re.IGNORECASE)


# --------------------------------------------------------------------------- first look, no browser


def no_browser(monkeypatch, tmp_path):
    """As on a machine without Chromium: no BROWSER_PATH, nothing on PATH."""
    empty = tmp_path / "empty-path"
    empty.mkdir(exist_ok=True)
    monkeypatch.delenv("BROWSER_PATH", raising=False)
    monkeypatch.setenv("PATH", str(empty))
    assert find_chromium() is None


def test_first_look_is_stated_with_the_derived_values(tmp_path, monkeypatch, capsys):
    no_browser(monkeypatch, tmp_path)
    out = tmp_path / "fl"
    code = main(["report", str(sample_path("corroded_wall.nc")), "-o", str(out), "--figures", "amplitude",
                 "thickness", "--quiet"])
    captured = capsys.readouterr()
    assert code == 0
    assert "static images" in captured.err and "skipped" in captured.err
    page = parse(out / "index.html")
    text = " ".join(" ".join(page.text).split())
    assert "First look: settings derived from the grid" in text
    proc = ndtmap.procedure.first_look_procedure(open_grid(sample_path("corroded_wall.nc")))
    assert f"detection threshold {proc.gate('flaw').threshold_fsh:g} %FSH" in text
    flaw = proc.gate("flaw")
    assert f"gate “flaw”: {flaw.start:g} to {flaw.end:g} mm" in text
    assert "static images (PNG/SVG/PDF) were skipped" in text
    assert not (out / "figures").exists() or not list((out / "figures").iterdir())
    assert [t for t, a in page.tags if t == "div" and a.get("class") == "plot"]  # interactive figures instead
    summary = json.loads((out / "summary.json").read_text())
    assert summary["parts"][0]["first_look"] is True and summary["static_images"] is False


# --------------------------------------------------------------------------- safety


def test_text_from_files_is_escaped_and_nothing_is_written_outside(tmp_path):
    evil = "<script>alert(1)</script>"
    g = open_grid(sample_path("corroded_wall.nc"))
    g = g.assign_attrs(part_id=f"../../{evil}", operator_notes=f"{evil} & notes", material=evil)
    (tmp_path / "a" / "b").mkdir(parents=True)
    save_grid(g, tmp_path / "evil.nc")
    other = tmp_path / "other.nc"
    shutil.copy(sample_path("plate_laminations.nc"), other)
    before = {p: sha(p) for p in (tmp_path / "evil.nc", other)}
    listing = {p for p in tmp_path.rglob("*")}
    out = tmp_path / "out"
    r = write_report([str(tmp_path / "a" / "b" / ".." / ".." / "evil.nc"), other], out, figures=["amplitude"],
                     formats=())
    assert r.exit_status == 0 and r.batch
    new = {p for p in tmp_path.rglob("*")} - listing
    assert new and all(p == out or out in p.parents for p in new)  # everything inside DIR
    assert {p.name for p in out.iterdir() if p.is_dir()} == {"script-alert-1-script", "KFP-PL-2041"}
    for page in (out / "index.html", out / "script-alert-1-script" / "index.html"):
        raw = page.read_text()
        assert "<script>alert" not in raw and "alert(1)</script>" not in raw
        assert "&lt;script&gt;alert(1)&lt;/script&gt;" in raw
        assert evil in " ".join(parse(page).text)  # shown to the reader as text
    assert before == {p: sha(p) for p in before}
    assert safe_name("CON") == "part-CON" and safe_name("..") == "part" and "/" not in safe_name("a/b\\c")


def test_refuses_to_write_into_an_input(tmp_path, capsys):
    folder = tmp_path / "grids"
    folder.mkdir()
    shutil.copy(sample_path("plate_laminations.nc"), folder / "p.nc")
    assert main(["report", str(folder), "-o", str(folder), "--quiet"]) == 2
    assert "one of the input paths" in capsys.readouterr().err
    with pytest.raises(ParameterError, match="input"):
        write_report(folder / "p.nc", folder / "p.nc")
    assert sorted(p.name for p in folder.iterdir()) == ["p.nc"]


def test_batch_with_a_corrupt_file_finishes_the_others(tmp_path, capsys, session):
    folder = tmp_path / "grids"
    folder.mkdir()
    shutil.copy(sample_path("plate_laminations.nc"), folder / "plate.nc")
    shutil.copy(sample_path("forging_block.nc"), folder / "forging.nc")
    (folder / "broken.nc").write_bytes(b"\x89HDF\r\n\x1a\n" + bytes(range(256)) * 8)
    (folder / "notes.txt").write_text("not a grid")
    hashes = {p.name: sha(p) for p in folder.iterdir()}
    out = tmp_path / "out"
    fmt = ["png"] if session else []
    code = main(["report", str(folder), "-o", str(out), "--figures", "amplitude", "--quiet", "--formats", *fmt])
    err = capsys.readouterr().err
    assert code == 1  # a partial batch
    assert "broken.nc" in err
    summary = json.loads((out / "summary.json").read_text())
    assert [e["file"] for e in summary["errors"]] == [str(folder / "broken.nc")]
    reason = summary["errors"][0]["reason"]
    assert reason and "\n" not in reason
    assert {p["part_id"] for p in summary["parts"]} == {"KFP-PL-2041", "KFP-FG-0317"}
    text = " ".join(" ".join(parse(out / "index.html").text).split())
    assert "broken.nc" in text and reason in text
    for part in summary["parts"]:
        assert (out / part["page"]).is_file()
        assert part["largest_indication"]["by"].startswith("largest dimension of the sized outline")
        if session:
            assert png_size((out / part["folder"] / "figures" / "amplitude.png").read_bytes()) == (2700, 1950)
    assert hashes == {p.name: sha(p) for p in folder.iterdir()}  # inputs unchanged
    # every input unreadable: nothing reported, exit status 2
    (tmp_path / "only").mkdir()
    (tmp_path / "only" / "x.nc").write_bytes(b"garbage")
    assert main(["report", str(tmp_path / "only"), "-o", str(tmp_path / "o2"), "--quiet", "--formats"]) == 2


def test_single_unreadable_file_is_a_one_line_error(tmp_path, capsys):
    bad = tmp_path / "bad.nc"
    bad.write_bytes(b"\x00" * 64)
    assert main(["report", str(bad), "-o", str(tmp_path / "o"), "--quiet"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("ndtmap report: error:")
    with pytest.raises(NdtmapError):
        write_report(bad, tmp_path / "o2")


# --------------------------------------------------------------------------- the example procedures


def _match(truth, recs):
    out = {}
    for t in truth:
        s0, s1 = t.get("scan_range_mm", (t["scan_mm"] - 3, t["scan_mm"] + 3))
        i0, i1 = t.get("index_range_mm", (t["index_mm"] - 3, t["index_mm"] + 3))
        hits = [r for r in recs if r["kind"] == "amplitude" and s0 - 3 <= r["scan_mm"] <= s1 + 3
                and i0 - 3 <= r["index_mm"] <= i1 + 3 and abs(r["depth_mm"] - t["depth_mm"]) < 3]
        assert len(hits) == 1, t["label"]
        out[t["label"]] = hits[0]
    return out


def test_plate_procedure_finds_every_lamination():
    g = open_grid(sample_path("plate_laminations.nc"))
    a = run_procedure(g, load_procedure(PLATE_PROCEDURE))
    truth = scan_truth(g)["reflectors"]
    found = _match(truth, a.indications)
    assert len([r for r in a.indications if r["kind"] == "amplitude"]) == len(truth)
    for t in truth:
        r = found[t["label"]]
        assert abs(r["depth_mm"] - t["depth_mm"]) < 0.5  # depth resolution of a 4 MHz pulse, about half a wavelength
        if t["type"] == "planar" and "edge" not in t["label"] and "L2" not in t["label"]:
            # rectangles scanned whole: 6 dB drop length within one scan step (1.5 mm) / index step (2 mm)
            assert abs(r["length_scan_mm"] - t["length_scan_mm"]) <= 1.5
            assert abs(r["length_index_mm"] - t["length_index_mm"]) <= 2.0
    assert "at_scan_edge" in found["L4 lamination at scan edge"]["flags"]
    assert a.screening is not None and a.screening["exceeded"]
    rules = (DATA / "plate_lamination_rules.toml").read_text()
    assert "INVENTED EXAMPLES" in rules and "Kestrel Forge & Plate" in rules


def test_forging_procedure_finds_the_small_reflectors_and_sizes_them_by_dgs():
    g = open_grid(sample_path("forging_block.nc"))
    a = run_procedure(g, load_procedure(FORGING_PROCEDURE))
    truth = scan_truth(g)["reflectors"]
    found = _match(truth, a.indications)
    for t in truth:
        r = found[t["label"]]
        assert abs(r["depth_mm"] - t["depth_mm"]) < 1.5  # 2 MHz: about one wavelength (2.96 mm) / 2
        if t["type"] == "flat_bottom_hole":
            # the DGS equivalent size of a flat-bottom hole is its diameter (within 10 %)
            assert r["ers_mm"] == pytest.approx(t["diameter_mm"], rel=0.10), t["label"]
            assert 3.0 <= r["peak_fsh"] <= 8.0
    # the recording level is some 10 dB above the noise (median amplitude outside indications ~1 %FSH)
    amp = a.maps["amplitude"].values
    assert np.median(amp) < 1.5 and a.procedure.gate("volume").threshold_db == pytest.approx(-28.2)


def test_a_folder_gives_every_grid_file_in_it(tmp_path):
    from ndtmap.io import export_raw
    from ndtmap.report import grid_files

    g = open_grid(sample_path("corroded_wall.nc"))
    save_grid(g, tmp_path / "wall.zarr")
    export_raw(g, tmp_path / "wall_raw.json")
    (tmp_path / "other.json").write_text('{"a": 1}')  # not a raw sidecar
    (tmp_path / "sub").mkdir()
    shutil.copy(sample_path("forging_block.nc"), tmp_path / "sub" / "deeper.nc")  # sub-folders are not searched
    assert [p.name for p in grid_files(tmp_path)] == ["wall.zarr", "wall_raw.json"]
    r = write_report(tmp_path, tmp_path / "sub" / "out", figures=["amplitude"], formats=())
    assert [p.folder.name for p in r.parts] == ["KFP-PW-1180", "KFP-PW-1180-2"]  # a repeated part id
    a, b = (json.loads((p.folder / "indications.json").read_text())["indications"] for p in r.parts)
    assert a == b  # the same grid through both containers
