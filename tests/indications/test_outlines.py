"""Sized outlines and their properties, against scikit-image and geometry by hand.

The polygons' properties are checked against exact geometry worked by hand
and against scikit-image's ``regionprops`` (area, ``feret_diameter_max``,
``orientation``) on a fine raster of the same shape; the sub-cell contours
against the same shapes drawn as smooth amplitude fields on a coarse grid.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import xarray as xr
from skimage import measure

from ndtmap.indications import (
    detect_indications,
    drop_outline,
    edge_maximum_outline,
    level_outline,
    outline_properties,
    size_indications,
)
from ndtmap.indications.sizing_methods import local_maximum, significant_maxima


def _map(values, scan, index, units="%FSH"):
    return xr.DataArray(np.asarray(values, float), dims=("scan", "index"),
                        coords={"scan": ("scan", np.asarray(scan, float), {"units": "mm"}),
                                "index": ("index", np.asarray(index, float), {"units": "mm"})},
                        attrs={"units": units})


def _rect(cx, cy, length, width, angle_deg):
    a = math.radians(angle_deg)
    u, v = np.array([math.cos(a), math.sin(a)]), np.array([-math.sin(a), math.cos(a)])
    c = np.array([cx, cy])
    return np.array([c + su * 0.5 * length * u + sv * 0.5 * width * v
                     for su, sv in ((-1, -1), (1, -1), (1, 1), (-1, 1))])


def _ellipse(cx, cy, a, b, n=720):
    t = np.linspace(0.0, 2.0 * math.pi, n, endpoint=False)
    return np.column_stack([cx + a * np.cos(t), cy + b * np.sin(t)])


# ---------------------------------------------------------------- polygon properties by hand


def test_properties_of_a_rectangle_by_hand():
    p = outline_properties([_rect(10.0, 20.0, 40.0, 30.0, 0.0)])
    assert p.length_scan_mm == pytest.approx(40.0) and p.length_index_mm == pytest.approx(30.0)
    assert p.length_mm == pytest.approx(50.0)  # the diagonal, 3-4-5
    assert abs(p.orientation_deg) == pytest.approx(math.degrees(math.atan2(30.0, 40.0)))
    assert p.area_mm2 == pytest.approx(1200.0) and p.perimeter_mm == pytest.approx(140.0)
    assert p.width_mm == pytest.approx(40.0 * 30.0 / 50.0 * 2.0)  # twice the height of the 3-4-5 triangle


def test_properties_of_a_rotated_strip_by_hand():
    p = outline_properties([_rect(0.0, 0.0, 40.0, 4.0, 30.0)])
    c, s = math.cos(math.radians(30.0)), math.sin(math.radians(30.0))
    assert p.length_scan_mm == pytest.approx(40.0 * c + 4.0 * s)
    assert p.length_index_mm == pytest.approx(40.0 * s + 4.0 * c)
    assert p.length_mm == pytest.approx(math.hypot(40.0, 4.0))
    # the largest dimension is a diagonal: 30 deg +- atan(4 / 40)
    assert abs(abs(p.orientation_deg - 30.0) - math.degrees(math.atan(0.1))) < 1e-9
    assert p.area_mm2 == pytest.approx(160.0)


def test_holes_are_subtracted_and_orientation_folds_into_half_turn():
    outer = _rect(0.0, 0.0, 20.0, 10.0, 0.0)
    hole = _rect(0.0, 0.0, 4.0, 2.0, 0.0)[::-1]  # clockwise
    assert outline_properties([outer, hole]).area_mm2 == pytest.approx(200.0 - 8.0)
    p = outline_properties([_rect(0.0, 0.0, 30.0, 0.5, -60.0)])
    assert -90.0 < p.orientation_deg <= 90.0 and p.orientation_deg == pytest.approx(-60.0, abs=1.0)


def test_properties_of_an_ellipse_by_hand():
    p = outline_properties([_ellipse(5.0, 5.0, 12.0, 8.0)])
    assert p.length_scan_mm == pytest.approx(24.0) and p.length_index_mm == pytest.approx(16.0, abs=1e-3)
    assert p.length_mm == pytest.approx(24.0) and p.orientation_deg == pytest.approx(0.0, abs=1e-6)
    assert p.area_mm2 == pytest.approx(math.pi * 12.0 * 8.0, rel=1e-4)  # pi a b


# ---------------------------------------------------------------- contours against scikit-image


FINE = 0.05  # mm, the raster regionprops measures


def _shape_field(kind, ss, ii):
    """A smooth amplitude field (%FSH) that is 50 on the boundary of the shape: 50 + 10 x signed distance (mm)."""
    if kind == "ellipse":  # (approximately) signed distance of the ellipse 24 x 16 at (30, 25)
        r = np.hypot((ss - 30.0) / 12.0, (ii - 25.0) / 8.0)
        sd = (1.0 - r) * 8.0 * 12.0 / np.hypot(8.0 * np.cos(np.arctan2(ii - 25.0, ss - 30.0)),
                                              12.0 * np.sin(np.arctan2(ii - 25.0, ss - 30.0)))
    else:
        length, width, angle = (30.0, 20.0, 0.0) if kind == "rectangle" else (40.0, 4.0, 35.0)
        a = math.radians(angle)
        u = (ss - 30.0) * math.cos(a) + (ii - 25.0) * math.sin(a)
        v = -(ss - 30.0) * math.sin(a) + (ii - 25.0) * math.cos(a)
        sd = np.minimum(0.5 * length - np.abs(u), 0.5 * width - np.abs(v))
    return np.clip(50.0 + 10.0 * sd, 0.0, 100.0)


def _regionprops(kind):
    s = np.arange(0.0, 60.0 + FINE / 2, FINE)
    i = np.arange(0.0, 50.0 + FINE / 2, FINE)
    ss, ii = np.meshgrid(s, i, indexing="ij")
    (props,) = measure.regionprops((_shape_field(kind, ss, ii) >= 50.0).astype(int))
    return props


@pytest.mark.parametrize("kind", ["rectangle", "strip", "ellipse"])
@pytest.mark.parametrize("uneven", [False, True])
def test_sub_cell_contour_against_regionprops_on_a_fine_raster(kind, uneven):
    # the coarse map: 1 mm, or uneven scan steps from 0.6 to 1.4 mm
    if uneven:
        scan = np.cumsum(np.r_[0.0, 1.0 + 0.4 * np.sin(np.arange(70) * 1.3)])
        scan = scan[scan <= 60.0]
    else:
        scan = np.arange(0.0, 61.0)
    index = np.arange(0.0, 51.0)
    ss, ii = np.meshgrid(scan, index, indexing="ij")
    m = _map(_shape_field(kind, ss, ii), scan, index)
    ind = detect_indications(m, threshold_fsh=20.0)[0]
    o = level_outline(m, ind, level_fsh=50.0)
    rp = _regionprops(kind)
    # scikit-image regionprops on the fine raster: area in pixels, Feret diameter in pixels
    assert o.area_mm2 == pytest.approx(rp.area * FINE**2, rel=0.01)
    # a corner is cut within its cell, which moves a diagonal by up to about the largest step on the uneven grid
    tol = 0.01 * rp.feret_diameter_max * FINE if not uneven or kind == "ellipse" else float(np.diff(scan).max())
    assert o.length_mm == pytest.approx(rp.feret_diameter_max * FINE, abs=tol)
    # regionprops' orientation: angle between axis 0 (scan) and the major axis of the ellipse of equal moments
    along = math.degrees(math.atan2(math.sin(rp.orientation), math.cos(rp.orientation)))
    if kind == "strip":  # the Feret diameter of a 40 x 4 strip is its diagonal: atan(4/40) off the long axis
        assert abs(o.orientation_deg - along) <= math.degrees(math.atan(0.1)) + 1.0
        assert abs(along - 35.0) < 0.5
    elif kind == "ellipse":
        assert o.orientation_deg == pytest.approx(0.0, abs=1.0) and abs(along) < 0.5
    bbox = np.array(rp.bbox) * FINE  # (min_row, min_col, max_row, max_col), max exclusive
    assert o.length_scan_mm == pytest.approx(bbox[2] - bbox[0], abs=0.5)  # corners are cut within a cell
    assert o.length_index_mm == pytest.approx(bbox[3] - bbox[1], abs=0.5)


def test_neighbours_do_not_merge_and_the_outline_is_closed():
    a = np.zeros((30, 30))
    a[5:15, 5:12] = 80.0
    a[5:15, 12:20] = 60.0  # touches the first: one region at 20 %FSH
    m = _map(a, np.arange(30.0), np.arange(30.0))
    ind = detect_indications(m, threshold_fsh=20.0)[0]
    other = np.zeros_like(ind.region)
    other[:, 12:] = True
    o = drop_outline(m, ind, exclude=other)
    assert o.index_ends_mm[1] <= 12.0  # stops at the neighbour's cells
    assert all(len(p) >= 3 for p in o.polygons) and not o.region[:, 12:].any()


def test_outline_at_the_map_end_runs_along_the_last_samples():
    a = np.zeros((20, 20))
    a[:8, 5:10] = 80.0
    m = _map(a, np.arange(20.0), np.arange(20.0))
    o = drop_outline(m, detect_indications(m, threshold_fsh=20.0)[0])
    assert o.lower_bound and o.scan_ends_mm[0] == 0.0
    assert o.length_scan_mm == pytest.approx(7.5)  # from the first sample to half-way past the last above


def test_local_maximum_by_hand_on_uneven_positions():
    v = np.array([[10.0, 50.0, 20.0, 30.0]])
    got = local_maximum(v, v > 0, np.array([0.0]), np.array([0.0, 1.0, 3.0, 3.5]), 1.5)
    assert got[0].tolist() == [50.0, 50.0, 30.0, 30.0]


def test_significant_maxima_counts_separate_peaks_not_a_plateau_with_a_hot_spot():
    plateau = np.full((1, 9), 40.0)
    plateau[0, 4] = 90.0
    assert significant_maxima(plateau, plateau > 20) == 1
    two = np.array([[30.0, 90.0, 40.0, 22.0, 50.0, 30.0]])
    assert significant_maxima(two, two > 20) == 2  # 50 stands 7.1 dB above the 22 saddle


def test_edge_method_equals_the_peak_drop_for_one_maximum():
    x = np.arange(0.0, 41.0)
    ss, ii = np.meshgrid(x, x, indexing="ij")
    a = 90.0 * np.exp(-0.5 * ((ss - 20.0) ** 2 + (ii - 20.0) ** 2) / 3.0**2)
    m = _map(a, x, x)
    ind = detect_indications(m, threshold_fsh=20.0)[0]
    p, e = drop_outline(m, ind), edge_maximum_outline(m, ind, radius_mm=6.0)
    assert e.area_mm2 == pytest.approx(p.area_mm2)
    # the 6 dB width of a Gaussian: 2 sigma sqrt(2 ln 2), by hand
    assert p.length_scan_mm == pytest.approx(2.0 * 3.0 * math.sqrt(2.0 * math.log(2.0)), abs=0.1)


def test_consistency_record_and_json_carry_the_outline():
    a = np.full((40, 40), 2.0)
    ss, ii = np.meshgrid(np.arange(40.0), np.arange(40.0), indexing="ij")
    a = np.where(np.abs((ss - 20) * 0.8 + (ii - 20) * 0.6) <= 10, 80.0, a)
    a = np.where(np.abs(-(ss - 20) * 0.6 + (ii - 20) * 0.8) <= 3, a, 2.0)
    rec = size_indications(_map(a, np.arange(40.0), np.arange(40.0)), threshold_fsh=20)[0]
    d = rec.to_dict()
    pts = np.array(d["outline_mm"])
    assert d["length_scan_mm"] == pytest.approx(np.ptp(pts[:, 0]), abs=1e-3)
    assert d["length_index_mm"] == pytest.approx(np.ptp(pts[:, 1]), abs=1e-3)
    x, y = pts[:, 0], pts[:, 1]
    assert d["area_mm2"] == pytest.approx(0.5 * abs(np.dot(x, np.roll(y, -1)) - np.dot(np.roll(x, -1), y)), abs=0.05)
    assert d["length_mm"] == pytest.approx(outline_properties([pts]).length_mm, abs=1e-3)
    assert d["length_orientation_deg"] == pytest.approx(math.degrees(math.atan2(0.6, 0.8)), abs=4.0)
    assert d["sizing_method"] == "6 dB drop" and d["length_uncertainty_mm"] > 0
