"""`ndtmap indications --gate-us`: the flaw gate in time from pulse entry, beside --gate-mm."""

from __future__ import annotations

import contextlib
import io
import json

import pytest

from ndtmap.cli import main
from ndtmap.io import open_grid
from ndtmap.simulate import sample_path

PLATE = sample_path("plate_laminations.nc")


def _run(args: list[str]) -> tuple[int, str]:
    out = io.StringIO()
    with contextlib.redirect_stdout(out):
        code = main(args)
    return code, out.getvalue()


def test_a_gate_in_us_gives_the_records_of_the_same_gate_in_mm():
    c = float(open_grid(PLATE).attrs["velocity_m_s"])
    zero = float(open_grid(PLATE).attrs.get("zero_offset_us", 0.0))
    # pulse-echo straight beam: t = t0 + 2 z / c (Krautkramer ch. 4; elementary)
    t0, t1 = (zero + 2.0 * z / (c * 1e-3) for z in (2.0, 20.0))
    code_mm, text_mm = _run(["indications", str(PLATE), "--gate-mm", "2", "20", "--threshold-fsh", "20",
                             "--format", "json"])
    code_us, text_us = _run(["indications", str(PLATE), "--gate-us", f"{t0:.6f}", f"{t1:.6f}", "--threshold-fsh",
                             "20", "--format", "json"])
    assert code_mm == code_us == 0
    mm, us = json.loads(text_mm), json.loads(text_us)
    assert us["gate"]["unit"] == "us" and us["gate"]["start"] == pytest.approx(t0)
    assert len(us["indications"]) == len(mm["indications"]) >= 1
    for a, b in zip(mm["indications"], us["indications"], strict=True):
        for key in ("depth_mm", "length_scan_mm", "length_index_mm", "length_mm", "area_mm2", "peak_fsh"):
            assert b[key] == pytest.approx(a[key], abs=1e-6), key


@pytest.mark.parametrize("gates", [[], ["--gate-mm", "2", "20", "--gate-us", "0.7", "6.8"]])
def test_exactly_one_flaw_gate_is_asked_for(gates, capsys):
    code = main(["indications", str(PLATE), *gates, "--threshold-fsh", "20", "--format", "json"])
    err = capsys.readouterr().err
    assert code != 0 and "--gate-us" in err and "Traceback" not in err
