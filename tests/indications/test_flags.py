"""Validity flags on sized indications, through size_indications and directly."""

import json
import math

import numpy as np
import pytest
from helpers.sizing_maps import RectangleModel, make_map, point_map, probe_attrs

from ndtmap.indications import (
    FLAG_MEANINGS,
    FLAGS,
    RECORD_KEYS,
    DetectionOptions,
    LossOptions,
    detect_indications,
    is_low_snr,
    is_saturated,
    noise_level_fsh,
    repeat_echo_notes,
    size_indications,
)
from ndtmap.physics import beam

ATTRS = probe_attrs()
SCAN = np.arange(0.0, 101.0, 1.0)
INDEX = np.arange(0.0, 81.0, 1.0)
CLI_KEYS = ("id", "scan_mm", "index_mm", "depth_mm", "peak_fsh", "length_scan_mm", "length_index_mm", "area_mm2",
            "ers_mm", "flags")


def _depth(m, z):
    return make_map(np.full(m.shape, float(z)), m.scan.values, m.index.values, units="mm")


def _plate(z=30.0, plateau=80.0, rect=(35.5, 65.5, 30.5, 50.5), scan=SCAN, index=INDEX, attrs=ATTRS):
    return RectangleModel(rect, z, plateau, attrs).map(scan, index, attrs)


def test_every_flag_has_a_meaning_and_records_are_json():
    assert set(FLAGS) == set(FLAG_MEANINGS)
    for name in ("saturated", "smaller_than_beam", "at_scan_edge", "repeat_echo", "near_field", "low_snr",
                 "data_gap"):
        assert name in FLAG_MEANINGS and FLAG_MEANINGS[name]
    m = _plate()
    recs = size_indications(m, threshold_fsh=20, depth_map=_depth(m, 30.0), backwall=80.0, backwall_depth_mm=60.0)
    docs = [r.to_dict() for r in recs]
    text = json.dumps(docs, allow_nan=False)  # floats, None, lists of strings only
    assert json.loads(text) == docs
    assert list(docs[0]) == list(RECORD_KEYS)
    for key in CLI_KEYS:
        assert key in recs[0] and recs[0][key] == docs[0][key]  # the read-only mapping of the JSON record
    assert all(f in FLAG_MEANINGS for r in recs for f in r.flags)


def test_large_plate_carries_no_flag():
    # a plate much larger than the beam, away from the edges, unsaturated, far above the noise
    m = _plate(z=80.0)
    (rec,) = size_indications(m, threshold_fsh=20, depth_map=_depth(m, 80.0))
    assert rec.flags == ()
    assert abs(rec.length_scan_mm - 30.0) <= 1.0 and abs(rec.length_index_mm - 20.0) <= 1.0


def test_small_reflector_is_flagged_smaller_than_beam():
    # Krautkramer, Ultrasonic Testing of Materials: the 6 dB length of a reflector much smaller than the
    # beam equals the -6 dB beam width 2 z tan(gamma), sin(gamma) = 0.51 lambda / D
    z = 60.0
    scan = np.arange(0.0, 100.01, 0.5)
    index = np.arange(0.0, 80.01, 0.5)
    m = point_map(scan, index, (50.0, 40.0), z, 60.0, ATTRS)
    (rec,) = size_indications(m, threshold_fsh=10, depth_map=_depth(m, z), backwall=80.0, backwall_depth_mm=120.0)
    assert "smaller_than_beam" in rec.flags
    w6 = 2 * z * math.tan(math.asin(0.51 * 1.184 / 10.0))
    assert abs(rec.length_scan_mm - w6) <= 0.5
    assert rec.ers_mm is not None  # the size to report instead
    assert any("DGS" in n for n in rec.notes)
    # a plate is not
    m = _plate(z=z)
    (rec,) = size_indications(m, threshold_fsh=20, depth_map=_depth(m, z))
    assert "smaller_than_beam" not in rec.flags


def test_cut_by_scan_edge_is_flagged():
    m = _plate(rect=(-20.0, 15.5, 30.5, 50.5))
    (rec,) = size_indications(m, threshold_fsh=20, depth_map=_depth(m, 30.0))
    assert "at_scan_edge" in rec.flags
    assert rec.length_scan_mm < 35.5  # a lower bound of the true 35.5 mm
    m = _plate()
    assert "at_scan_edge" not in size_indications(m, threshold_fsh=20)[0]["flags"]


def test_clipped_plateau_is_flagged_saturated():
    # common practice: an echo at full screen height has an unknown true peak
    m = _plate(plateau=150.0)
    clipped = m.copy(data=np.minimum(m.values, 100.0))
    (rec,) = size_indications(clipped, threshold_fsh=20)
    assert "saturated" in rec.flags
    # an 8-bit digitiser clipping at 80 %FSH (full scale in the attrs)
    attrs = {**ATTRS, "digitiser_full_scale_fsh": 80.0}
    low = clipped.copy(data=np.minimum(m.values, 80.0))
    low.attrs = attrs
    assert "saturated" in size_indications(low, threshold_fsh=20)[0]["flags"]
    assert "saturated" not in size_indications(m.copy(data=m.values * 0.5), threshold_fsh=20)[0]["flags"]
    assert is_saturated(100.0) and not is_saturated(99.0) and is_saturated(79.95, full_scale_fsh=80.0)


def test_repeat_echo_at_twice_the_depth_of_a_stronger_indication():
    # common practice: a multiple echo of a reflector at z appears at 2 z, 3 z, weaker, at the same positions
    m1 = _plate(z=15.0, plateau=90.0)
    m2 = _plate(z=30.0, plateau=35.0)  # the second gate sees the repeat at 30.4 mm
    first = detect_indications(m1, threshold_fsh=20, depth_map=_depth(m1, 15.0))
    (rec,) = size_indications(m2, threshold_fsh=20, depth_map=_depth(m2, 30.4), other_indications=first)
    assert "repeat_echo" in rec.flags
    assert any("2 x the depth of indication" in n for n in rec.notes)
    # 1.5 z is not a multiple
    (rec,) = size_indications(m2, threshold_fsh=20, depth_map=_depth(m2, 22.5), other_indications=first)
    assert "repeat_echo" not in rec.flags
    # tolerance max(2 mm, 3 % of depth): 2 * 15 + 2.5 mm is outside
    second = detect_indications(m2, threshold_fsh=20, depth_map=_depth(m2, 32.5))
    assert repeat_echo_notes(second, others=first) == {}


def test_back_wall_multiple_is_flagged_repeat_echo():
    m = _plate(z=40.0)
    (rec,) = size_indications(m, threshold_fsh=20, depth_map=_depth(m, 40.5), backwall_depth_mm=20.0)
    assert "repeat_echo" in rec.flags
    assert any("back-wall depth" in n for n in rec.notes)


def test_nan_positions_inside_give_data_gap():
    m = _plate()
    values = m.values.copy()
    values[48:50, 38:41] = np.nan
    (rec,) = size_indications(m.copy(data=values), threshold_fsh=20)
    assert "data_gap" in rec.flags
    assert "data_gap" not in size_indications(m, threshold_fsh=20)[0]["flags"]


def test_low_snr_against_the_map_noise():
    # noise estimate: median of the map outside the (grown) indications; flagged below 6 dB above it
    rng = np.random.default_rng(7)
    base = 10.0 + rng.uniform(0.0, 2.0, (101, 81))  # grass between 10 and 12 %FSH, median 11
    weak = base + _plate(plateau=8.0).values  # peak about 20 %FSH: 5.2 dB above the noise
    strong = base + _plate(plateau=60.0).values  # peak about 72 %FSH: 16 dB above
    noise = noise_level_fsh(make_map(base, SCAN, INDEX))
    assert noise == pytest.approx(np.median(base))
    big = DetectionOptions(min_area_mm2=50.0)
    rec_w = size_indications(make_map(weak, SCAN, INDEX, ATTRS), threshold_fsh=15.0, detection=big)
    rec_s = size_indications(make_map(strong, SCAN, INDEX, ATTRS), threshold_fsh=40.0, detection=big)
    assert rec_w and all("low_snr" in r.flags for r in rec_w)
    assert rec_s and all("low_snr" not in r.flags for r in rec_s)
    assert is_low_snr(15.0, 10.0) and not is_low_snr(25.0, 10.0)


def test_near_field_flag_with_dgs():
    n = beam.near_field_length_mm(10.0, 5.0, 5920.0)
    z = 1.5 * n
    scan = np.arange(0.0, 60.01, 0.5)
    m = point_map(scan, scan, (30.0, 30.0), z, 50.0, ATTRS)
    (rec,) = size_indications(m, threshold_fsh=10, depth_map=_depth(m, z), backwall=80.0, backwall_depth_mm=100.0)
    assert "near_field" in rec.flags and rec.ers_method == "piston"
    (rec,) = size_indications(m, threshold_fsh=10, depth_map=_depth(m, 4 * n), backwall=80.0,
                              backwall_depth_mm=100.0)
    assert "near_field" not in rec.flags and rec.ers_method == "far-field"


def test_backwall_loss_indications_in_the_table():
    bw_values = np.full((101, 81), 80.0)
    shadow = _plate(plateau=1.0).values  # fraction of the beam covered by a lamination
    bw_values = bw_values * (1.0 - shadow)
    bw = make_map(bw_values, SCAN, INDEX, ATTRS)
    amp = _plate(plateau=60.0)
    # merge=False: the loss region under the lamination echo is reported on its own as well
    recs = size_indications(amp, threshold_fsh=20, backwall=bw, backwall_depth_mm=60.0,
                            loss=LossOptions(6.0, merge=False), depth_map=_depth(amp, 30.0))
    kinds = [r.kind for r in recs]
    assert kinds == ["amplitude", "backwall_loss"]
    loss = recs[1]
    assert loss.id == 2 and loss.ers_mm is None
    # 6 dB back-wall loss = half the back wall: the edge of the lamination (common practice)
    assert abs(loss.length_scan_mm - 30.0) <= 1.0 and abs(loss.length_index_mm - 20.0) <= 1.0
    assert loss.sizing_level_db == 6.0 and loss.sized_region.sum() > 0
    json.dumps([r.to_dict() for r in recs], allow_nan=False)
