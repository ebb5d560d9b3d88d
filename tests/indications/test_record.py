"""The indication record: made once, read-only, its JSON form, what figures need, the largest indication."""

import dataclasses
import json
import math

import numpy as np
import pytest
import xarray as xr
from helpers.sizing_maps import make_map

from ndtmap.errors import ParameterError, ParameterTypeError
from ndtmap.gates import Gate
from ndtmap.indications import (
    OPTIONAL_KEYS,
    RECORD_KEYS,
    LossOptions,
    largest_indication,
    map_detection_level,
    parse_rules,
    size_indications,
)

SCAN = np.arange(30.0)
INDEX = np.arange(30.0)


def _map(values, **attrs):
    return make_map(np.asarray(values, dtype=float), SCAN, INDEX, attrs or None)


def _two_plates():
    a = np.full((30, 30), 2.0)
    a[2:6, 2:20] = 90.0  # 18 mm along index, 4 along scan
    a[10:25, 10:16] = 60.0  # 15 mm along scan
    return _map(a)


def test_json_record_has_the_keys_in_order_and_optional_keys_only_when_they_apply():
    (rec, _) = size_indications(_two_plates(), threshold_fsh=20)
    assert list(rec.to_dict()) == list(RECORD_KEYS)
    assert not set(OPTIONAL_KEYS) & set(rec)
    rules = parse_rules('[[limit]]\nname = "long"\nquantity = "length_mm"\nmax = 16')
    screened = size_indications(_two_plates(), threshold_fsh=20, rules=rules)
    assert list(screened[0].to_dict())[-2:] == ["screening", "exceeded_rules"]
    assert screened[0].to_dict()["exceeded_rules"] == ["long"] and screened[1]["exceeded_rules"] == []
    json.dumps([r.to_dict() for r in screened], allow_nan=False)


def test_record_reads_as_attributes_and_as_a_read_only_mapping():
    rec = size_indications(_two_plates(), threshold_fsh=20)[0]
    assert rec["length_index_mm"] == rec.length_index_mm and rec.get("screening") is None
    assert "screening" not in rec and "flags" in rec and len(rec) == len(RECORD_KEYS)
    assert rec["flags"] == list(rec.flags)  # the JSON value, a fresh list
    rec["notes"].append("changed?")
    assert "changed?" not in rec.notes
    with pytest.raises(KeyError):
        rec["peak_index"]  # figure fields are attributes only
    with pytest.raises(dataclasses.FrozenInstanceError):
        rec.area_mm2 = 0.0
    with pytest.raises(ValueError):
        rec.detected_region[0, 0] = True


def test_figure_fields_are_those_the_sizing_used():
    a = np.full((30, 30), 2.0)
    a[10:20, 5:15] = 80.0
    (rec,) = size_indications(_map(a), threshold_fsh=20)
    assert rec.peak_index == (10, 5)  # first maximum in scan, then index order
    assert rec.detected_region.sum() == rec.n_positions == 100
    # the outline crosses 40 %FSH at t = 40/78 of a step beyond the plateau, and cuts each corner by a
    # right triangle of legs t (geometry by hand)
    t = 40.0 / 78.0
    assert rec.sized_region.sum() == 100 and rec.area_mm2 == pytest.approx((9.0 + 2 * t) ** 2 - 2 * t**2)
    assert rec.sizing_level_fsh == 40.0 and rec.sizing_level_db is None  # 6 dB: half the peak
    s0, s1 = rec.length_scan_ends_mm
    assert s1 - s0 == pytest.approx(rec.length_scan_mm)
    assert s0 < rec.scan_min_mm and s1 > rec.scan_max_mm  # crossings beyond the outermost positions
    assert rec.edge_rule == "first"


def test_loss_record_carries_its_level_and_total_loss():
    amp = _map(np.full((30, 30), 2.0))
    loss_db = np.zeros((30, 30))
    loss_db[5:15, 5:12] = 12.0
    loss_db[9, 8] = np.inf  # the back wall vanished there
    (rec,) = size_indications(amp, threshold_fsh=20, loss=LossOptions(6.0, loss_map=_map(loss_db)))
    assert rec.kind == "backwall_loss" and rec.sizing_level_db == 6.0 and rec.sizing_level_fsh is None
    assert rec.total_backwall_loss and rec.backwall_loss_db is None
    assert rec.to_dict()["total_backwall_loss"] is True and list(rec.to_dict())[-1] == "total_backwall_loss"
    assert rec.sizing_method == "back-wall loss >= 6 dB"


def test_largest_is_the_largest_dimension_not_a_repeat_echo_ties_by_peak():
    recs = size_indications(_two_plates(), threshold_fsh=20)
    assert [(r.id, r.length_axis) for r in recs] == [(1, "index"), (2, "scan")]
    assert recs[0].length_index_mm == pytest.approx(18.0, abs=0.1)
    assert recs[1].length_scan_mm == pytest.approx(15.0, abs=0.1)
    for r in recs:  # a largest dimension is at least every extent and at most the diagonal of the extents (geometry)
        assert max(r.length_scan_mm, r.length_index_mm) < r.length_mm <= math.hypot(r.length_scan_mm, r.length_index_mm)
    assert largest_indication(recs).id == 1
    # a repeat echo does not count, however long
    recs[0] = dataclasses.replace(recs[0], flags=("repeat_echo",))
    assert largest_indication(recs).id == 2
    # equal lengths: the higher peak
    a = np.full((30, 30), 2.0)
    a[2:6, 2:12] = 50.0
    a[15:19, 2:12] = 70.0
    tied = [dataclasses.replace(r, length_mm=10.0) for r in size_indications(_map(a), threshold_fsh=20)]
    assert tied[0].length_mm == tied[1].length_mm == 10.0
    assert largest_indication(tied).peak_fsh == 70.0 and largest_indication(tied[::-1]).peak_fsh == 70.0
    assert largest_indication([]) is None
    with pytest.raises(ParameterTypeError, match="IndicationRecord"):
        largest_indication([recs[0].to_dict()])


def test_level_defaults_to_the_gate_that_made_the_map():
    a = np.full((30, 30), 2.0)
    a[10:20, 5:15] = 80.0
    a[25:28, 20:23] = 25.0
    m = _map(a, gate_threshold_fsh=30.0)
    assert [r.peak_fsh for r in size_indications(m)] == [80.0]  # 25 %FSH is below the gate's 30
    m.attrs["gate"] = json.dumps(Gate("flaw", 2.0, 20.0, threshold_db=-12.0, reference=90.0).to_dict())
    assert map_detection_level(m) == {"threshold_db": -12.0, "reference": 90.0}
    recs = size_indications(m)  # -12 dB re 90 %FSH: 22.6 %FSH, below the 25 %FSH plate
    assert [r.detection_level for r in recs] == [">= -12 dB re reference"] * 2
    assert recs[1].peak_db == pytest.approx(20 * np.log10(25.0 / 90.0))
    with pytest.raises(ParameterError, match="gate"):
        size_indications(_map(a))
    bare = xr.DataArray(a, dims=("scan", "index"), coords={"scan": SCAN, "index": INDEX})
    with pytest.raises(ParameterError, match="threshold_fsh"):
        size_indications(bare)


def test_options_are_checked_by_name():
    from ndtmap.indications import DetectionOptions, SizingOptions

    with pytest.raises(ParameterError, match="detection.min_positions"):
        DetectionOptions(min_positions=0)
    with pytest.raises(ParameterError, match="sizing.edge"):
        SizingOptions(edge="last")
    with pytest.raises(ParameterTypeError, match="`sizing`"):
        size_indications(_two_plates(), threshold_fsh=20, sizing="outermost")
    with pytest.raises(ParameterError, match="loss.threshold_db"):
        LossOptions(0.0)
