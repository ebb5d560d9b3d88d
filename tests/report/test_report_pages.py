"""Tests of ndtmap.report.pages: the pages come from autoescaping jinja2 templates.

External references: HTML is parsed with the standard library's html.parser (Python documentation,
html.parser); jinja2's autoescaping and its template syntax (``{{ }}``, ``{% %}``, ``{# #}``) as documented
in the Jinja documentation (API, Autoescaping; Template Designer Documentation).
"""

from __future__ import annotations

import json
import shutil
from html.parser import HTMLParser
from pathlib import Path

from ndtmap.io import open_grid
from ndtmap.report import write_report
from ndtmap.report.pages import ENVIRONMENT
from ndtmap.simulate import sample_path

HOSTILE = "<script>alert(1)</script> {{ 7*7 }} {% if true %}yes{% endif %} {# gone #} \"q\" 'a' & <b>bold</b>"


class Cells(HTMLParser):
    """The visible text of a page, and its key-value rows (``<th>key</th><td>value</td>``)."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.text, self.rows, self.tags, self._cell, self._key = [], {}, [], None, None

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)
        if tag in ("th", "td"):
            self._cell = []

    def handle_endtag(self, tag):
        if tag == "th" and self._cell is not None:
            self._key = "".join(self._cell)
        elif tag == "td" and self._cell is not None and self._key is not None:
            self.rows.setdefault(self._key, "".join(self._cell))
            self._key = None
        if tag in ("th", "td"):
            self._cell = None

    def handle_data(self, data):
        self.text.append(data)
        if self._cell is not None:
            self._cell.append(data)


def cells(path):
    p = Cells()
    p.feed(Path(path).read_text(encoding="utf-8"))
    p.close()
    return p


def test_autoescaping_is_on_for_every_template():
    names = ENVIRONMENT.list_templates()
    assert {"base.html", "part.html", "summary.html", "macros.html", "style.css"} <= set(names)
    assert all(ENVIRONMENT.autoescape(name) for name in names)
    assert ENVIRONMENT.autoescape(None) and ENVIRONMENT.autoescape("any-new-name.txt")
    rendered = ENVIRONMENT.from_string("{{ value }}").render(value=HOSTILE)
    assert "<script>" not in rendered and "&lt;script&gt;" in rendered and "{{ 7*7 }}" in rendered


def test_metadata_with_markup_and_template_syntax_is_shown_as_text(tmp_path):
    grid = open_grid(sample_path("corroded_wall.nc"))
    grid = grid.assign_attrs(operator_notes=HOSTILE, material=HOSTILE, part_id="KFP-{{ part }}")
    r = write_report(grid, tmp_path / "out", figures=["amplitude"], formats=())
    raw = (tmp_path / "out" / "index.html").read_text(encoding="utf-8")
    assert "<script>alert" not in raw and "<b>bold" not in raw  # never markup
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in raw and "&lt;b&gt;bold&lt;/b&gt;" in raw
    page = cells(tmp_path / "out" / "index.html")
    # the reader sees the text exactly as in the file: template syntax is not interpreted
    assert page.rows["operator_notes"] == HOSTILE
    assert page.rows["material"] == HOSTILE
    assert "Ultrasonic scan evidence: part KFP-{{ part }}" in "".join(page.text)
    assert r.parts[0].part_id == "KFP-{{ part }}" and r.parts[0].folder == tmp_path / "out"
    scripts = raw.count("<script")
    assert scripts == 1 + len(r.parts[0].figures)  # plotly.min.js and one script per interactive figure


def test_summary_page_escapes_file_names_and_reasons(tmp_path):
    folder = tmp_path / "grids"
    folder.mkdir()
    shutil.copy(sample_path("corroded_wall.nc"), folder / "wall.nc")
    hostile = "<img src=x onerror=alert(1)> {{ 7*7 }}.nc"
    (folder / hostile).write_bytes(b"garbage")
    out = tmp_path / "out"
    r = write_report(folder, out, figures=["amplitude"], formats=())
    assert r.exit_status == 1 and len(r.errors) == 1
    raw = (out / "index.html").read_text(encoding="utf-8")
    assert "<img" not in raw and "&lt;img src=x onerror=alert(1)&gt;" in raw
    page = cells(out / "index.html")
    text = "".join(page.text)
    assert str(folder / hostile) in text and r.errors[0].reason in text
    assert json.loads((out / "summary.json").read_text())["errors"][0]["file"] == str(folder / hostile)


def test_only_the_plotly_snippets_are_marked_safe():
    # every other value reaches the templates as plain text: no Markup elsewhere, no `safe` filter in a template
    import ast

    import ndtmap.report

    folder = Path(ndtmap.report.__file__).parent
    calls = []
    for path in sorted(folder.glob("*.py")):
        tree = ast.parse(path.read_text(encoding="utf-8"))
        for fn in ast.walk(tree):
            if isinstance(fn, ast.FunctionDef):
                calls += [(path.name, fn.name) for node in ast.walk(fn)
                          if isinstance(node, ast.Call) and getattr(node.func, "id", None) == "Markup"]
    assert calls == [("pages.py", "_plot_snippet")]
    for name in ENVIRONMENT.list_templates():
        source = ENVIRONMENT.loader.get_source(ENVIRONMENT, name)[0]
        assert "|safe" not in source.replace(" ", "") and "autoescape false" not in source, name
