"""Screening rules from TOML: parsing, validation and the screening statements."""

import json
import pathlib
import re

import numpy as np
import pytest
from helpers.sizing_maps import RectangleModel, make_map, probe_attrs

import ndtmap
from ndtmap.indications import Rules, load_rules, parse_rules, scanned_area_mm2, screen, size_indications

EXAMPLE = pathlib.Path(__file__).resolve().parents[2] / "docs" / "examples" / "screening-rules.toml"
FORBIDDEN = re.compile(r"\b(accept\w*|reject\w*|pass\w*|fail\w*)\b", re.IGNORECASE)

RULES_TEXT = """
name = "test set"
[recording]
name = "record-20"
level_fsh = 20
[[limit]]
name = "long"
quantity = "length_mm"
max = 25
[[limit]]
name = "big"
quantity = "area_mm2"
max = 200
[[density]]
name = "crowded"
max_per_m2 = 100
"""


def _rec(i, **kw):
    base = {"id": i, "kind": "amplitude", "peak_fsh": 50.0, "length_scan_mm": 10.0, "length_index_mm": 8.0,
            "area_mm2": 60.0, "ers_mm": None, "flags": []}
    base.update(kw)
    return base


def _all_text(result):
    return json.dumps(result.as_dict())


def test_example_file_loads():
    rules = load_rules(EXAMPLE)
    assert isinstance(rules, Rules)
    assert rules.recording.level_fsh == 20.0
    assert "long indication" in rules.rule_names and "clustered indications" in rules.rule_names
    assert "invented" in EXAMPLE.read_text().lower()


def test_recording_level_and_limits():
    rules = parse_rules(RULES_TEXT)
    recs = [
        _rec(1),  # within
        _rec(2, length_index_mm=30.0),  # exceeds long (the larger of the two lengths)
        _rec(3, area_mm2=250.0, length_scan_mm=26.0),  # exceeds both
        _rec(4, peak_fsh=12.0, length_scan_mm=99.0),  # below recording level: not screened further
    ]
    res = screen(recs, rules, scanned_area_mm2=1e6)  # 1 m^2
    s = {r.id: r for r in res.indications}
    assert s[1].statement == "within rules"
    assert s[2].statement == "exceeds rule long" and s[2].exceeded == ("long",)
    assert s[3].statement == "exceeds rule long; exceeds rule big"
    assert s[4].statement == "below recording level record-20" and not s[4].recorded
    assert res.overall == "exceeds rule long; exceeds rule big"
    assert res.densities_per_m2["crowded"] == pytest.approx(3.0)  # 3 recorded on 1 m^2
    assert res.caution == ndtmap.CAUTION
    assert not FORBIDDEN.search(_all_text(res).replace(ndtmap.CAUTION, ""))


def test_density_rule():
    rules = parse_rules(RULES_TEXT)
    recs = [_rec(i) for i in range(1, 6)]
    # 5 indications on 0.04 m^2 = 125 per m^2 > 100
    res = screen(recs, rules, scanned_area_mm2=0.04e6)
    assert res.overall == "exceeds rule crowded"
    assert all(r.statement == "within rules" for r in res.indications)
    assert screen(recs, rules, scanned_area_mm2=0.06e6).overall == "within rules"


def test_caution_is_always_present():
    rules = parse_rules(RULES_TEXT)
    res = screen([], rules, scanned_area_mm2=1e5)
    assert res.overall == "within rules" and res.indications == ()
    assert res.caution == ndtmap.CAUTION and "qualified personnel" in res.as_dict()["caution"]


def test_missing_quantity_is_not_evaluated():
    rules = parse_rules('[[limit]]\nname = "ers"\nquantity = "ers_mm"\nmax = 2\n')
    res = screen([_rec(1)], rules, scanned_area_mm2=1e5)
    assert res.indications[0].statement == "within rules (not evaluated: ers)"
    assert res.indications[0].exceeded == ()
    res = screen([_rec(1, ers_mm=2.5)], rules, scanned_area_mm2=1e5)
    assert res.indications[0].statement == "exceeds rule ers"


def test_backwall_loss_rule_and_kind_filter():
    rules = parse_rules('[[limit]]\nname = "bwl"\nquantity = "backwall_loss_db"\nkind = "backwall_loss"\nmax = 12\n')
    recs = [_rec(1), {"id": 2, "kind": "backwall_loss", "backwall_loss_db": 14.0, "flags": []},
            {"id": 3, "kind": "backwall_loss", "backwall_loss_db": None, "total_backwall_loss": True, "flags": []}]
    res = screen(recs, rules, scanned_area_mm2=1e5)
    assert [r.statement for r in res.indications] == ["within rules", "exceeds rule bwl", "exceeds rule bwl"]


@pytest.mark.parametrize(
    ("text", "pattern"),
    [
        ('[[limit]\nname = "x"', r"not valid TOML"),
        ('[[limit]]\nname = "x"\nquantity = "length_mm"\nmax = 5\nmaximum = 3\n', r"line 5.*unknown key `maximum`"),
        ('colour = "red"\n[[limit]]\nname = "x"\nquantity = "length_mm"\nmax = 5\n', r"line 1.*unknown key `colour`"),
        ('[[limit]]\nname = "x"\nquantity = "length_mm"\nmax = "5"\n', r"line 4.*`max`.*must be a number"),
        ('[[limit]]\nname = "x"\nquantity = "length_mm"\nmax = -5\n', r"line 4.*`max`.*0 or greater"),
        ('[[limit]]\nname = "x"\nquantity = "width"\nmax = 5\n', r"line 3.*`quantity`"),
        ('[[limit]]\nquantity = "length_mm"\nmax = 5\n', r"needs a `name`"),
        ('[[limit]]\nname = "x"\nquantity = "length_mm"\n', r"needs a `max`"),
        ('[recording]\nname = "r"\nlevel_fsh = 20\nlevel_db = -6\n', r"exactly one"),
        ('[recording]\nname = "r"\nlevel_fsh = true\n', r"must be a number"),
        ('[[density]]\nname = "d"\nmax_per_m2 = -1\n', r"`max_per_m2`.*0 or greater"),
        ('[[limit]]\nname = "x"\nquantity = "length_mm"\nmax = 5\n[[limit]]\nname = "x"\nquantity = "area_mm2"\n'
         'max = 5\n', r"used twice"),
        ('[limit]\nname = "x"\nquantity = "length_mm"\nmax = 5\n', r"\[\[limit\]\]"),
        ('name = "nothing"\n', r"no rule"),
    ],
)
def test_malformed_files_raise_procedure_error(text, pattern):
    with pytest.raises(ndtmap.ProcedureError, match=pattern):
        parse_rules(text, source="rules.toml")


def test_load_rules_errors(tmp_path):
    with pytest.raises(ndtmap.FileFormatError, match="cannot read"):
        load_rules(tmp_path / "none.toml")
    bad = tmp_path / "bad.toml"
    bad.write_text('[[limit]]\nname = "x"\nquantity = "length_mm"\nmax = 5\nunits = "mm"\n')
    with pytest.raises(ndtmap.ProcedureError, match=r"bad.toml, line 5: unknown key `units`"):
        load_rules(bad)
    with pytest.raises(ndtmap.ParameterError, match="`scanned_area_mm2`"):
        screen([], parse_rules(RULES_TEXT), scanned_area_mm2=0)


def test_size_indications_with_rules(tmp_path):
    attrs = probe_attrs()
    scan = np.arange(0.0, 101.0, 1.0)
    index = np.arange(0.0, 81.0, 1.0)
    m = RectangleModel((35.5, 65.5, 30.5, 50.5), 30.0, 80.0, attrs).map(scan, index, attrs)
    path = tmp_path / "r.toml"
    path.write_text(RULES_TEXT)
    (rec,) = size_indications(m, threshold_fsh=20, rules=path)
    # 30 mm long > 25 and 600 mm^2 > 200
    assert rec.screening == "exceeds rule long; exceeds rule big"
    assert rec.exceeded_rules == ("long", "big")
    assert rec.to_dict()["exceeded_rules"] == ["long", "big"]
    res = screen([rec], load_rules(path), scanned_area_mm2=scanned_area_mm2(m))
    assert res.densities_per_m2["crowded"] == pytest.approx(1 / (101 * 81 * 1e-6))
    json.dumps(rec.to_dict(), allow_nan=False)
    assert scanned_area_mm2(make_map(np.full((2, 2), np.nan), [0.0, 1.0], [0.0, 1.0])) == 0.0
