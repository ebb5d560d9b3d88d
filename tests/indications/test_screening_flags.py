"""Screening reads the validity flags: an undermined size is never "within rules".

The logic checked here is the reading of a size a validity flag undermines
(common practice, no source): a size cut by the edge of the scan is a lower
bound, so a limit it exceeds stays exceeded but "within" cannot be said; a
size measured on a clipped echo, by the beam, in the near field, or of an
echo that may be a repeat or geometry echo settles neither.
"""

import contextlib
import io
import json
from pathlib import Path

import numpy as np
import pytest
from helpers.sizing_maps import RectangleModel, make_map, probe_attrs

from ndtmap.cli import main
from ndtmap.indications import (
    FLAGS,
    SCREENING_UNDERMINED_BY,
    UNDERMINING_FLAGS,
    parse_rules,
    scanned_area_mm2,
    screen,
    screen_records,
    size_indications,
)
from ndtmap.indications.rules import QUANTITIES, QUANTITY_GROUPS, REVIEW_REQUIRED
from ndtmap.simulate.samples import sample_path

PLATE_RULES = Path(__file__).resolve().parents[2] / "ndtmap" / "data" / "plate_lamination_rules.toml"

# one limit on every quantity group, each well above the values of the clean record below
RULES = parse_rules("""
[recording]
name = "record"
level_fsh = 20
[[limit]]
name = "long"
quantity = "length_mm"
max = 25
[[limit]]
name = "big"
quantity = "area_mm2"
max = 200
[[limit]]
name = "long20"
quantity = "length_20db_mm"
max = 30
[[limit]]
name = "ers"
quantity = "ers_mm"
max = 6
[[limit]]
name = "loud"
quantity = "peak_fsh"
max = 150
[[limit]]
name = "loss"
quantity = "backwall_loss_db"
kind = "backwall_loss"
max = 12
""")


def _rec(i=1, flags=(), **kw):
    base = {"id": i, "kind": "amplitude", "peak_fsh": 60.0, "length_scan_mm": 10.0, "length_index_mm": 8.0,
            "length_scan_20db_mm": 12.0, "length_index_20db_mm": 9.0, "area_mm2": 60.0, "ers_mm": 3.0,
            "flags": list(flags)}
    base.update(kw)
    return base


def _one(rec, rules=RULES):
    return screen([rec], rules, scanned_area_mm2=1e6).indications[0]


def test_undermining_flags_are_defined_once_and_known():
    # every name is a flag of ndtmap
    for name in UNDERMINING_FLAGS:
        assert name in FLAGS, name
    assert set(UNDERMINING_FLAGS) == set(SCREENING_UNDERMINED_BY)
    assert {"saturated", "smaller_than_beam", "at_scan_edge", "data_gap", "repeat_echo", "backwall_echo",
            "methods_disagree", "near_field", "depth_neighbour"} == set(UNDERMINING_FLAGS)
    groups = set(QUANTITY_GROUPS.values()) | {"count"}
    for name, effects in SCREENING_UNDERMINED_BY.items():
        assert effects and set(effects) <= groups, name
        assert set(effects.values()) <= {"lower_bound", "uncertain"}, name
    assert set(QUANTITY_GROUPS) == set(QUANTITIES)
    assert not {"low_snr", "beam_limited_20db"} & UNDERMINING_FLAGS  # they do not bear on a screened value


def test_clean_records_screen_as_before():
    assert _one(_rec()).statement == "within rules"
    s = _one(_rec(length_index_mm=30.0, area_mm2=250.0))
    assert s.statement == "exceeds rule long; exceeds rule big" and s.open_rules == () and s.review_flags == ()
    # flags that undermine nothing screened leave the statement as it was
    assert _one(_rec(flags=["low_snr", "beam_limited_20db"])).statement == "within rules"


@pytest.mark.parametrize("flag", sorted(UNDERMINING_FLAGS))
def test_each_undermining_flag_gives_review_required(flag):
    s = _one(_rec(flags=[flag]))
    assert s.statement == f"{REVIEW_REQUIRED} ({flag})"
    assert s.recorded and s.exceeded == () and s.review_flags == (flag,)
    undermined = set(SCREENING_UNDERMINED_BY[flag])
    expected = [lim.name for lim in RULES.limits
                if lim.kind in (None, "amplitude") and QUANTITY_GROUPS[lim.quantity] in undermined]
    assert list(s.open_rules) == expected
    assert all("not screened" in n for n in s.notes)


@pytest.mark.parametrize("flag", sorted(UNDERMINING_FLAGS))
@pytest.mark.parametrize("quantity", sorted(QUANTITIES))
def test_an_undermined_value_is_never_within(flag, quantity):
    # one rule on one quantity; values on both sides of the limit
    rules = parse_rules(f'[[limit]]\nname = "r"\nquantity = "{quantity}"\nmax = 10\n')
    kind = "backwall_loss" if quantity == "backwall_loss_db" else "amplitude"
    how = SCREENING_UNDERMINED_BY[flag].get(QUANTITY_GROUPS[quantity])
    for value in (5.0, 10.0, 15.0):
        keys = {"length_mm": ("length_scan_mm",), "length_20db_mm": ("length_scan_20db_mm",)}.get(quantity,
                                                                                                 (quantity,))
        rec = {"id": 1, "kind": kind, "flags": [flag], **dict.fromkeys(keys, value)}
        s = _one(rec, rules)
        if how is None:
            assert s.statement == ("exceeds rule r" if value > 10 else "within rules")
        elif how == "lower_bound" and value > 10:
            assert s.statement == "exceeds rule r"  # a lower bound above the limit: exceeded whatever the truth
        else:
            assert s.statement == f"{REVIEW_REQUIRED} ({flag})" and s.exceeded == ()


def test_lower_bound_keeps_exceeds_and_opens_the_rest():
    s = _one(_rec(length_scan_mm=40.0, flags=["at_scan_edge"]))
    assert s.exceeded == ("long",)
    assert s.statement == f"exceeds rule long; {REVIEW_REQUIRED} (at_scan_edge)"
    assert "long" not in s.open_rules and "big" in s.open_rules
    assert any(n.startswith("long:") and "lower bound" in n for n in s.notes)


def test_saturated_peak_and_ers_are_lower_bounds_drop_sizes_are_not():
    # a clipped echo's true peak is higher, so is its DGS size; its drop lengths settle nothing
    s = _one(_rec(peak_fsh=180.0, ers_mm=8.0, length_scan_mm=40.0, flags=["saturated"]))
    assert s.exceeded == ("ers", "loud")
    assert "long" in s.open_rules and "big" in s.open_rules
    assert s.statement == f"exceeds rule ers; exceeds rule loud; {REVIEW_REQUIRED} (saturated)"


def test_beam_and_identity_flags_do_not_let_a_size_exceed():
    # the drop measured the beam: a length over the limit is not a finding either way
    for flag in ("smaller_than_beam", "near_field", "methods_disagree", "repeat_echo", "backwall_echo"):
        s = _one(_rec(length_scan_mm=40.0, flags=[flag]))
        assert s.exceeded == () and s.statement == f"{REVIEW_REQUIRED} ({flag})", flag


def test_review_reason_lists_every_flag_in_report_order():
    s = _one(_rec(flags=["methods_disagree", "at_scan_edge", "saturated", "low_snr"]))
    assert s.statement == f"{REVIEW_REQUIRED} (saturated, at_scan_edge, methods_disagree)"


def test_recording_level_with_an_undermined_peak_is_not_decided():
    # at the edge of the scan the peak may lie outside: below the level is not known
    s = _one(_rec(peak_fsh=15.0, flags=["at_scan_edge"]))
    assert s.recorded and "record" in s.open_rules and s.statement.startswith(REVIEW_REQUIRED)
    assert _one(_rec(peak_fsh=15.0)).statement == "below recording level record"
    assert _one(_rec(peak_fsh=15.0, flags=["smaller_than_beam"])).statement == "below recording level record"


def test_density_counts_doubtful_records_but_is_exceeded_only_by_firm_ones():
    rules = parse_rules('[[density]]\nname = "crowded"\nmax_per_m2 = 2\n')
    firm = [_rec(1), _rec(2, flags=["at_scan_edge"])]  # at the edge, still a reflector: counts
    res = screen([*firm, _rec(3, flags=["repeat_echo"])], rules, scanned_area_mm2=1e6)
    assert res.densities_per_m2["crowded"] == pytest.approx(3.0)
    assert res.exceeded == () and res.open_rules == ("crowded",)
    assert res.overall == f"{REVIEW_REQUIRED} (rule crowded: repeat_echo)"
    res = screen([*firm, _rec(3), _rec(4, flags=["backwall_echo"])], rules, scanned_area_mm2=1e6)
    assert res.exceeded == ("crowded",) and res.overall == "exceeds rule crowded"


def test_overall_names_the_indications_and_the_flags():
    res = screen([_rec(1), _rec(2, flags=["smaller_than_beam"]), _rec(3, length_scan_mm=40.0, flags=["at_scan_edge"])],
                 RULES, scanned_area_mm2=1e6)
    assert res.review_required == (2, 3) and res.exceeded == ("long",)
    assert res.overall == f"exceeds rule long; {REVIEW_REQUIRED} (indications 2, 3: smaller_than_beam, at_scan_edge)"
    d = res.as_dict()
    assert d["review_required"] == [2, 3] and d["review_flags"] == ["smaller_than_beam", "at_scan_edge"]
    assert {"rules", "overall", "exceeded", "densities_per_m2", "scanned_area_mm2", "indications",
            "caution"} <= set(d)
    json.dumps(d, allow_nan=False)


def test_records_cut_by_the_scan_edge_are_not_screened_within():
    # a 35.5 x 20 mm plate lamination cut by the scan edge: its sizes are lower bounds
    attrs = probe_attrs()
    scan, index = np.arange(0.0, 101.0, 1.0), np.arange(0.0, 81.0, 1.0)
    m = RectangleModel((-20.0, 15.5, 30.5, 50.5), 30.0, 80.0, attrs).map(scan, index, attrs)
    depth = make_map(np.full(m.shape, 30.0), scan, index, units="mm")
    rules = parse_rules('[[limit]]\nname = "long"\nquantity = "length_mm"\nmax = 25\n')
    (rec,), result = screen_records(size_indications(m, threshold_fsh=20, depth_map=depth), rules,
                                    scanned_area_mm2=scanned_area_mm2(m))
    assert "at_scan_edge" in rec.flags and rec.length_mm < 25.0  # measured within, truly 35.5 mm
    assert rec.screening == f"{REVIEW_REQUIRED} (at_scan_edge)" and rec.exceeded_rules == ()
    assert any("lower bound" in n for n in rec.notes)
    assert result.review_required == (rec.id,)


def test_cli_plate_sample_with_rules():
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main(["indications", str(sample_path("plate_laminations.nc")), "--gate-mm", "2", "23",
                     "--threshold-fsh", "20", "--backwall-gate-mm", "23.5", "27", "--rules", str(PLATE_RULES),
                     "--format", "json"])
    assert code == 0, err.getvalue()
    doc = json.loads(out.getvalue())
    for rec in doc["indications"]:
        undermined = [f for f in rec["flags"] if f in UNDERMINING_FLAGS]
        if undermined:
            assert REVIEW_REQUIRED in rec["screening"] and "within rules" not in rec["screening"]
            assert all(f in rec["screening"] for f in undermined)
        else:
            assert REVIEW_REQUIRED not in rec["screening"]
    flagged = [r["id"] for r in doc["indications"] if set(r["flags"]) & UNDERMINING_FLAGS]
    assert flagged  # the sample holds a lamination at the scan edge and one smaller than the beam
    assert doc["screening"]["review_required"] == flagged
    assert REVIEW_REQUIRED in doc["screening"]["overall"]
