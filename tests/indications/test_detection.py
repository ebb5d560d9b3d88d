"""Detection of indications: thresholds, 8-connected labelling, size filters, records."""

import json

import numpy as np
import pytest
from helpers.sizing_maps import make_map, point_map, probe_attrs
from scipy import ndimage

import ndtmap
from ndtmap.indications import (
    Indication,
    detect_backwall_loss,
    detect_indications,
    indications_table,
    reference_from_curve,
)

ATTRS = probe_attrs()


def _blocks():
    values = np.zeros((12, 10))
    values[1:3, 1:3] = 60.0  # block A, 4 positions
    values[3:5, 3:5] = 40.0  # block B touches A only by a corner
    values[8:10, 6:9] = 90.0  # block C, 6 positions
    values[11, 0] = 25.0  # single position
    return values


def test_labelling_is_8_connected_like_scipy():
    # scipy.ndimage.label with a 3x3 structure is the reference for 8-connectivity
    values = _blocks()
    m = make_map(values, np.arange(12.0), np.arange(10.0))
    inds = detect_indications(m, threshold_fsh=20)
    _, n_ref = ndimage.label(values >= 20, structure=np.ones((3, 3)))
    assert len(inds) == n_ref == 3
    sizes = sorted(i.n_positions for i in inds)
    assert sizes == [1, 6, 8]  # A and B joined through their corner
    _, n4 = ndimage.label(values >= 20)  # 4-connected would split A and B
    assert n4 == 4


def test_ids_follow_decreasing_peak_then_scan_position():
    values = _blocks()
    values[11, 0] = 60.0  # tie with block A's peak: the lower scan position comes first
    m = make_map(values, np.arange(12.0), np.arange(10.0))
    inds = detect_indications(m, threshold_fsh=20)
    assert [i.id for i in inds] == [1, 2, 3]
    assert [i.peak_fsh for i in inds] == [90.0, 60.0, 60.0]
    assert inds[1].scan_mm == 1.0 and inds[2].scan_mm == 11.0
    by_scan = detect_indications(m, threshold_fsh=20, order="scan")
    assert [i.scan_mm for i in by_scan] == sorted(i.scan_mm for i in by_scan)


def test_size_filters_use_cell_areas_from_coordinates():
    values = _blocks()
    scan = np.r_[0.0, np.cumsum(np.full(11, 2.0))]  # 2 mm scan steps
    index = np.arange(10.0) * 0.5  # 0.5 mm index steps: 1 mm^2 cells
    m = make_map(values, scan, index)
    inds = detect_indications(m, threshold_fsh=20)
    areas = sorted(i.area_mm2 for i in inds)
    assert areas == [1.0, 6.0, 8.0]
    kept = detect_indications(m, threshold_fsh=20, min_area_mm2=5.0)
    assert sorted(i.n_positions for i in kept) == [6, 8]
    kept = detect_indications(m, threshold_fsh=20, min_positions=7)
    assert [i.n_positions for i in kept] == [8]


def test_record_fields_peak_depth_and_extents():
    scan = np.arange(0.0, 40.0, 0.5)
    index = np.arange(0.0, 30.0, 0.5)
    m = point_map(scan, index, (20.0, 12.0), 40.0, 70.0, ATTRS)
    depth = np.full(m.shape, 40.0) + np.linspace(-1, 1, m.shape[1])[None, :]
    dm = make_map(depth, scan, index, units="mm")
    (ind,) = detect_indications(m, threshold_fsh=35.0, depth_map=dm)  # -6 dB re the peak
    assert ind.peak_fsh == pytest.approx(70.0)
    assert (ind.scan_mm, ind.index_mm) == (20.0, 12.0)
    assert ind.depth_mm == pytest.approx(depth[ind.peak_position])
    assert ind.depth_min_mm < ind.depth_mm < ind.depth_max_mm
    assert ind.scan_min_mm < 20.0 < ind.scan_max_mm
    assert ind.index_min_mm < 12.0 < ind.index_max_mm
    assert not ind.touches_edge and ind.missing_adjacent == 0
    table = indications_table([ind])
    json.dumps(table)  # JSON-serialisable
    assert table[0]["peak_position"] == list(ind.peak_position)
    assert "region" not in table[0]


def test_threshold_in_db_re_reference_number_and_dac():
    values = np.zeros((3, 6))
    values[1, 1] = 40.0  # -6 dB re 80
    values[1, 4] = 20.0  # -12 dB re 80
    m = make_map(values, np.arange(3.0), np.arange(6.0) * 2)
    inds = detect_indications(m, threshold_db=-6.5, reference=80.0)
    assert [i.peak_fsh for i in inds] == [40.0]
    assert inds[0].peak_db == pytest.approx(20 * np.log10(0.5))
    # a DAC: 20 %FSH at the depth of the second reflector, 80 at the first
    depth = np.full(values.shape, 10.0)
    depth[:, 3:] = 30.0
    dm = make_map(depth, np.arange(3.0), np.arange(6.0) * 2, units="mm")
    dac = reference_from_curve(dm, [10.0, 30.0], [80.0, 20.0])
    inds = detect_indications(m, threshold_db=-6.5, reference=dac)
    assert sorted(i.peak_fsh for i in inds) == [20.0, 40.0]
    deep = [i for i in inds if i.peak_fsh == 20.0][0]
    assert deep.reference_fsh == pytest.approx(20.0) and deep.peak_db == pytest.approx(0.0)
    with pytest.raises(ndtmap.CalibrationError, match="outside the reference"):
        reference_from_curve(dm, [10.0, 20.0], [80.0, 40.0])


def test_backwall_loss_regions():
    loss = np.zeros((10, 10))
    loss[2:6, 3:8] = 14.0
    loss[4, 5] = np.inf  # the back wall vanished
    loss[8, 8] = 4.0  # below the level
    m = make_map(loss, np.arange(10.0), np.arange(10.0), units="dB")
    (ind,) = detect_backwall_loss(m, threshold_db=6.0)
    assert ind.kind == "backwall_loss" and ind.n_positions == 20
    assert ind.backwall_loss_db == np.inf and (ind.scan_mm, ind.index_mm) == (4.0, 5.0)
    rec = ind.as_dict()
    assert rec["backwall_loss_db"] is None and rec["total_backwall_loss"] is True
    json.dumps(rec)


def test_missing_positions_are_never_detected_and_are_counted():
    values = np.zeros((8, 8))
    values[2:6, 2:6] = 50.0
    values[3:5, 3:5] = np.nan  # drop-outs inside the reflector
    m = make_map(values, np.arange(8.0), np.arange(8.0))
    (ind,) = detect_indications(m, threshold_fsh=20)
    assert ind.n_positions == 12 and ind.missing_adjacent == 4
    # a drop-out line splits a reflector unless missing data is bridged
    values = np.zeros((8, 8))
    values[1:7, 2:6] = 50.0
    values[3, :] = np.nan
    m = make_map(values, np.arange(8.0), np.arange(8.0))
    assert len(detect_indications(m, threshold_fsh=20)) == 2
    assert len(detect_indications(m, threshold_fsh=20, bridge_missing=True)) == 1


def test_bad_inputs_raise_named_errors():
    m = make_map(np.zeros((3, 3)), np.arange(3.0), np.arange(3.0))
    with pytest.raises(ndtmap.ParameterError, match="exactly one"):
        detect_indications(m)
    with pytest.raises(ndtmap.ParameterError, match="exactly one"):
        detect_indications(m, threshold_fsh=20, threshold_db=-6)
    with pytest.raises(ndtmap.ParameterError, match="needs a `reference`"):
        detect_indications(m, threshold_db=-6)
    with pytest.raises(ndtmap.ParameterTypeError, match="`amplitude_map`"):
        detect_indications(np.zeros((3, 3)), threshold_fsh=20)
    with pytest.raises(ndtmap.ParameterError, match="dims"):
        detect_indications(m.rename(index="x"), threshold_fsh=20)
    with pytest.raises(ndtmap.ParameterError, match="strictly increasing"):
        detect_indications(m.assign_coords(scan=[0.0, 2.0, 1.0]), threshold_fsh=20)
    with pytest.raises(ndtmap.ParameterError, match="`threshold_fsh`"):
        detect_indications(m, threshold_fsh=-1)
    with pytest.raises(ndtmap.ParameterError, match="same `index` positions"):
        detect_indications(m, threshold_fsh=20, depth_map=make_map(np.zeros((3, 2)), np.arange(3.0), [0.0, 1.0]))
    with pytest.raises(ndtmap.ParameterError, match="`order`"):
        detect_indications(m, threshold_fsh=20, order="size")
    with pytest.raises(ndtmap.ParameterTypeError):
        indications_table([{"id": 1}])


def test_index_scan_dim_order_is_accepted_and_input_unchanged():
    values = _blocks()
    m = make_map(values, np.arange(12.0), np.arange(10.0))
    before = m.copy(deep=True)
    a = detect_indications(m, threshold_fsh=20)
    b = detect_indications(m.transpose("index", "scan"), threshold_fsh=20)
    assert a == b  # regions are not compared; every other field is
    assert m.identical(before)
    assert isinstance(a[0], Indication) and hash(a[0]) == hash(b[0])
