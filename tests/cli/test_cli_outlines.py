"""The sized outline through the command line: JSON and CSV carry the same sizes, read off the outline."""

from __future__ import annotations

import csv
import io
import json
import math

import numpy as np
import pytest

from ndtmap.cli import main
from ndtmap.indications import outline_properties
from ndtmap.io import open_grid
from ndtmap.simulate import sample_path, scan_truth

PLATE = sample_path("plate_laminations.nc")
ARGS = ("indications", str(PLATE), "--gate-mm", "1", "23", "--threshold-fsh", "20")


def _run(capsys, *argv):
    code = main(list(argv))
    out, err = capsys.readouterr()
    assert code == 0, err
    return out


def _shoelace(pts):
    x, y = pts[:, 0], pts[:, 1]
    return 0.5 * abs(float(np.dot(x, np.roll(y, -1)) - np.dot(np.roll(x, -1), y)))


def test_consistency_json_sizes_are_those_of_the_outline_and_csv_agrees(capsys):
    recs = json.loads(_run(capsys, *ARGS, "--format", "json"))["indications"]
    rows = list(csv.DictReader(io.StringIO(_run(capsys, *ARGS, "--format", "csv"))))
    assert len(rows) == len(recs) and "outline_mm" not in rows[0]
    for rec, row in zip(recs, rows, strict=True):
        pts = np.array(rec["outline_mm"])
        assert pts.ndim == 2 and pts.shape[1] == 2 and len(pts) >= 3
        assert rec["length_scan_mm"] == pytest.approx(np.ptp(pts[:, 0]), abs=2e-3)
        assert rec["length_index_mm"] == pytest.approx(np.ptp(pts[:, 1]), abs=2e-3)
        assert rec["area_mm2"] == pytest.approx(_shoelace(pts), rel=1e-3)  # no holes on these laminations
        assert rec["length_mm"] == pytest.approx(outline_properties([pts]).length_mm, abs=2e-3)
        assert max(rec["length_scan_mm"], rec["length_index_mm"]) <= rec["length_mm"] + 1e-9
        assert -90.0 < rec["length_orientation_deg"] <= 90.0
        for key in ("length_mm", "length_orientation_deg", "length_scan_mm", "area_mm2"):
            assert float(row[key]) == rec[key]
        assert row["sizing_method"] == rec["sizing_method"]


def test_consistency_plate_laminations_against_the_simulated_truth(capsys):
    # the sample plate is written by ndtmap's own simulator: a consistency test, not a validation
    recs = json.loads(_run(capsys, *ARGS, "--format", "json"))["indications"]
    grid = open_grid(PLATE)
    s_max, i_max = float(grid.scan.max()), float(grid.index.max())
    for t in scan_truth(grid)["reflectors"]:
        rec = min(recs, key=lambda r: math.hypot(r["scan_mm"] - t["scan_mm"], r["index_mm"] - t["index_mm"]))
        # the part of the reflector inside the scanned area
        ls = min(t["scan_range_mm"][1], s_max) - max(t["scan_range_mm"][0], 0.0)
        li = min(t["index_range_mm"][1], i_max) - max(t["index_range_mm"][0], 0.0)
        assert abs(rec["length_scan_mm"] - ls) <= max(2.0, 0.1 * ls), t["label"]
        assert abs(rec["length_index_mm"] - li) <= max(2.0, 0.1 * li), t["label"]
