"""Tests of write_report with analyses already computed by run_procedure (and of the demo, which uses them).

The plate sample and its example procedure are the simulator's (ndtmap.simulate); file identity by SHA-256
(FIPS 180-4, hashlib). No other external reference.
"""

from __future__ import annotations

import hashlib
import json
import re
from dataclasses import replace
from pathlib import Path

import pytest

import ndtmap
import ndtmap.procedure
import ndtmap.procedure.run
import ndtmap.report.bundle
from ndtmap.errors import ParameterError
from ndtmap.io import open_grid
from ndtmap.procedure import load_procedure, run_procedure
from ndtmap.report import write_report
from ndtmap.simulate import sample_path

PLATE_PROCEDURE = Path(ndtmap.__file__).resolve().parent / "data" / "plate_lamination_procedure.toml"
RUN_TIME = re.compile(r"\d{4}-\d\d-\d\d \d\d:\d\d:\d\d")


@pytest.fixture
def count_runs(monkeypatch):
    """Count the calls of run_procedure, whichever module name the caller imports it by."""
    calls = []
    real = ndtmap.procedure.run.run_procedure

    def counted(*args, **kwargs):
        calls.append(kwargs.get("source"))
        return real(*args, **kwargs)

    monkeypatch.setattr(ndtmap.procedure.run, "run_procedure", counted)
    monkeypatch.setattr(ndtmap.procedure, "run_procedure", counted)
    monkeypatch.setattr(ndtmap.report.bundle, "run_procedure", counted)
    return calls


def test_an_analysis_gives_the_bundle_of_its_file_without_running_again(tmp_path, count_runs):
    src = sample_path("plate_laminations.nc")
    proc = load_procedure(PLATE_PROCEDURE)
    analysis = ndtmap.procedure.run_procedure(open_grid(src), proc, source=str(src))
    assert len(count_runs) == 1
    a = write_report(analysis, tmp_path / "a", figures=["amplitude", "bscan"], formats=())
    assert len(count_runs) == 1  # reported as it is
    b = write_report(src, tmp_path / "b", procedure=proc, figures=["amplitude", "bscan"], formats=())
    assert len(count_runs) == 2
    for name in ("indications.csv", "indications.json", "metadata.json", "settings.json", "procedure.toml",
                 "rules.toml", "provenance.json"):
        x, y = ((r.output_dir / name).read_text() for r in (a, b))
        if name == "provenance.json":  # each run's map steps carry their own time
            x, y = (re.sub(r'"utc_time": "[^"]*"', "", t) for t in (x, y))
        assert x == y, name
    pa, pb = (RUN_TIME.sub("T", (r.output_dir / "index.html").read_text()) for r in (a, b))
    assert pa == pb
    run = json.loads((a.output_dir / "run.json").read_text())
    assert run["inputs"] == [{"file": str(src), "sha256": hashlib.sha256(src.read_bytes()).hexdigest()}]
    assert run["procedure"] == proc.name
    assert a.parts[0].source == str(src) and a.parts[0].part_id == "KFP-PL-2041"


def test_an_analysis_in_memory_and_a_batch_with_files(tmp_path, count_runs):
    grid = open_grid(sample_path("corroded_wall.nc"))
    analysis = ndtmap.procedure.run_procedure(grid, ndtmap.procedure.first_look_procedure(grid))  # no source
    r = write_report([analysis, sample_path("plate_laminations.nc")], tmp_path / "out", figures=["amplitude"],
                     formats=())
    assert r.batch and r.exit_status == 0 and len(count_runs) == 2  # the file's procedure ran, not the analysis'
    assert [p.source for p in r.parts] == ["analysis 1 (in memory)", str(sample_path("plate_laminations.nc"))]
    assert [p.folder.name for p in r.parts] == ["KFP-PW-1180", "KFP-PL-2041"]
    run = json.loads((tmp_path / "out" / "run.json").read_text())
    assert run["inputs"][0] == {"file": "analysis 1 (in memory)", "sha256": None}
    assert run["procedure"].startswith("first look (derived from each grid) for files and grids; ")


def test_an_analysis_keeps_its_own_procedure(tmp_path):
    grid = open_grid(sample_path("plate_laminations.nc"))
    proc = load_procedure(PLATE_PROCEDURE)
    analysis = run_procedure(grid, proc)
    other = proc.with_gate(replace(proc.gate("flaw"), threshold_fsh=30.0))
    with pytest.raises(ParameterError, match="differs from the procedure"):
        write_report(analysis, tmp_path / "out", procedure=other, formats=())
    assert not (tmp_path / "out").exists()  # refused before anything was written
    r = write_report(analysis, tmp_path / "same", procedure=load_procedure(PLATE_PROCEDURE), figures=["depth"],
                     formats=())
    assert r.exit_status == 0


def test_the_grid_of_a_calibrating_procedure_is_stated_as_calibrated(tmp_path):
    src = sample_path("plate_laminations.nc")
    proc = replace(load_procedure(PLATE_PROCEDURE), velocity_m_s=5900.0)
    analysis = run_procedure(open_grid(src), proc, source=str(src))
    a = write_report(analysis, tmp_path / "a", figures=["amplitude"], formats=())
    b = write_report(src, tmp_path / "b", procedure=proc, figures=["amplitude"], formats=())
    assert "Grid (as read, then calibrated by the procedure)" in (a.output_dir / "index.html").read_text()
    assert "Grid (as read from the file)" in (b.output_dir / "index.html").read_text()
    meta = json.loads((a.output_dir / "metadata.json").read_text())
    assert meta["attrs"]["velocity_m_s"] == 5900.0  # the analysed grid's metadata


def test_the_demo_runs_the_procedure_once(tmp_path, monkeypatch, count_runs):
    from ndtmap.cli.demo import run_demo

    empty = tmp_path / "empty-path"  # no browser: the report has the interactive figures only
    empty.mkdir()
    monkeypatch.delenv("BROWSER_PATH", raising=False)
    monkeypatch.setenv("PATH", str(empty))
    lines = []
    assert run_demo(output=tmp_path / "demo", echo=lines.append) == 0
    assert len(count_runs) == 1
    text = "\n".join(lines)
    assert f"report bundle: {tmp_path / 'demo' / 'report' / 'index.html'}" in text
    doc = json.loads((tmp_path / "demo" / "report" / "indications.json").read_text())
    assert doc == json.loads((tmp_path / "demo" / "indications.json").read_text())
