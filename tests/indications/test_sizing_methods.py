"""Sizing methods for extended and uneven reflectors, on maps written by a beam model that is not ndtmap's.

The maps (tests/helpers/psf_maps.py) are the reflector's reflectivity
convolved with a pulse-echo point-spread function computed there: a Gaussian
with the published -6 dB width 2 z tan(gamma6), sin(gamma6) = 0.51 lambda / D,
or the far-field piston directivity squared (2 J1(x) / x)**2 (Krautkramer,
Ultrasonic Testing of Materials, ch. 4; Kinsler & Frey, Fundamentals of
Acoustics, ch. 7). The sizing rules are the 6 dB drop and the maximum
amplitude at the edge as ISO 16827 and EN 10160 (plate laminations)
describe them, in general terms: the edge of an extended reflector lies
where the echo has fallen to half the local maximum met at that edge.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import xarray as xr
from helpers import psf_maps as pm

from ndtmap.errors import NdtmapError, UnitsError
from ndtmap.indications import (
    EDGE_METHOD,
    FLAG_MEANINGS,
    detect_indications,
    drop_area,
    drop_length,
    drop_outline,
    level_length,
    level_outline,
    size_indications,
)

PSF = ["gaussian", "piston"]


def _tol(true_mm):
    return max(2.0, 0.1 * true_mm)  # the acceptance: max(2 mm, 10 %)


def _size(m):
    depth = xr.full_like(m, pm.DEPTH_MM)
    (rec,) = size_indications(m, threshold_fsh=20.0, depth_map=depth)
    return rec


@pytest.mark.parametrize("kind", PSF)
def test_lamination_with_a_hot_spot_is_not_shrunk_to_the_hot_spot(kind):
    m = pm.lamination_with_hot_spot(kind)
    ind = detect_indications(m, threshold_fsh=20.0)[0]
    assert drop_outline(m, ind).length_scan_mm < 15.0  # the failure: the drop from the hot spot alone
    rec = _size(m)
    assert abs(rec.length_scan_mm - 40.0) <= _tol(40.0) and abs(rec.length_index_mm - 30.0) <= _tol(30.0)
    assert rec.area_mm2 == pytest.approx(1200.0, rel=0.1)
    assert rec.sizing_method == EDGE_METHOD or "methods_disagree" in rec.flags
    assert any("uneven" in n for n in rec.notes)


@pytest.mark.parametrize("kind", PSF)
def test_oblique_strip_largest_dimension_and_orientation(kind):
    rec = _size(pm.oblique_strip(kind))
    assert rec.length_mm == pytest.approx(40.0, rel=0.1)
    assert rec.length_orientation_deg == pytest.approx(45.0, abs=6.0)  # a diagonal: within atan(4/40) and the beam
    # extents of a 40 x 4 strip at 45 deg: (40 + 4) / sqrt(2), less the corners the beam rounds
    assert rec.length_scan_mm == pytest.approx(44.0 / math.sqrt(2.0), abs=_tol(31.1))
    assert rec.length_index_mm == pytest.approx(44.0 / math.sqrt(2.0), abs=_tol(31.1))


@pytest.mark.parametrize("kind", PSF)
def test_ellipse_with_a_rising_echo(kind):
    m = pm.rising_ellipse(kind)
    ind = detect_indications(m, threshold_fsh=20.0)[0]
    # the chord through the peak, as before: the index line through an off-centre peak is short
    assert drop_length(m, ind, axis="index").length_mm < 14.0
    rec = _size(m)
    assert abs(rec.length_scan_mm - 24.0) <= _tol(24.0) and abs(rec.length_index_mm - 16.0) <= _tol(16.0)
    assert rec.area_mm2 == pytest.approx(math.pi * 12.0 * 8.0, rel=0.1)


def test_two_reflectors_in_one_region_take_the_larger_size_with_a_flag():
    ss, ii = pm.fine_raster(70.0, 50.0, pm.FINE_MM)
    refl = np.full(ss.shape, 1.0)
    refl = np.where(np.abs(ii - 25.0) <= 3.0, 20.0, refl)  # a weak bridge joins them above the level
    refl = np.where((ss < 12.0) | (ss > 58.0), 1.0, refl)
    refl = np.where(np.hypot(ss - 20.0, ii - 25.0) <= 5.0, 90.0, refl)
    refl = np.where(np.hypot(ss - 50.0, ii - 25.0) <= 5.0, 50.0, refl)
    m = pm._finish(refl, "gaussian", 0.3, 4)
    depth = xr.full_like(m, pm.DEPTH_MM)
    (rec,) = size_indications(m, threshold_fsh=10.0, depth_map=depth)
    assert "methods_disagree" in rec.flags and "larger" in FLAG_MEANINGS["methods_disagree"]
    assert rec.scan_mm == pytest.approx(20.0, abs=1.0)
    assert rec.length_scan_mm > 35.0  # both discs, not the 90 %FSH one alone (about 10 mm)


def test_consistency_even_reflector_keeps_the_drop_from_the_peak():
    a = np.full((40, 40), 2.0)
    a[10:30, 8:20] = 80.0
    m = pm.reflector_map(np.kron(a, np.ones((10, 10))), 0.1,
                         pm.psf("gaussian", pm.DEPTH_MM, 10.0, 5.0, 0.1), attrs=dict(pm.PROBE))
    rec = _size(m)
    assert rec.sizing_method == "6 dB drop" and "methods_disagree" not in rec.flags
    assert rec.length_scan_mm == pytest.approx(20.0, abs=1.0) and rec.length_index_mm == pytest.approx(12.0, abs=1.0)


# ---------------------------------------------------------------- units at the sizing boundary


def _small(units="%FSH", coord_units="mm"):
    a = np.zeros((9, 9))
    a[2:7, 3:6] = 80.0
    return xr.DataArray(a, dims=("scan", "index"),
                        coords={"scan": ("scan", np.arange(9.0), {"units": "mm"}),
                                "index": ("index", np.arange(9.0), {"units": coord_units})},
                        attrs={"units": units})


def test_a_map_in_db_is_refused_for_a_drop_in_fsh_terms():
    m = _small(units="dB")
    ind = detect_indications(_small(), threshold_fsh=20)[0]
    for call in (lambda: drop_length(m, ind), lambda: drop_area(m, ind), lambda: drop_outline(m, ind),
                 lambda: level_length(m, ind, level_fsh=40.0)):
        with pytest.raises(UnitsError, match=r"amplitude_map.*'dB'.*level_db") as err:
            call()
        assert isinstance(err.value, NdtmapError)
    # stated in dB, the level is read in the map's own dB
    o = level_outline(m, ind, level_db=40.0)
    assert o.length_scan_mm == pytest.approx(5.0) and o.method == "fixed level 40 dB"
    with pytest.raises(UnitsError, match="reference"):
        level_outline(m, ind, level_db=-6.0, reference=80.0)


@pytest.mark.parametrize("units", ["deg", "degree", "rad"])
def test_angular_positions_are_refused_as_mm(units):
    m = _small(coord_units=units)
    with pytest.raises(UnitsError, match=rf"coordinate `index` has units '{units}'.*convert the index positions to mm"):
        size_indications(m, threshold_fsh=20)
    ind = detect_indications(_small(), threshold_fsh=20)[0]
    with pytest.raises(UnitsError, match="an angle"):
        drop_outline(m, ind)


def _lamination_and_loss(echo_half_mm, shadow_half_mm):
    """An amplitude map of a square lamination echo and the back-wall loss of a (possibly larger) shadow.

    The back-wall echo behind a planar reflector is the part of the beam that misses it:
    100 %FSH x (1 - covered fraction) (Krautkramer ch. 4, in general terms: the beam's energy is shared
    between the two reflectors); the loss is -20 log10 of that, so half the beam covered gives 6.02 dB.
    """
    ss, ii = pm.fine_raster(70.0, 70.0, pm.FINE_MM)
    k = pm.psf("gaussian", pm.DEPTH_MM, 10.0, 5.0, pm.FINE_MM)
    echo = np.where((np.abs(ss - 35.0) <= echo_half_mm) & (np.abs(ii - 35.0) <= echo_half_mm), 60.0, 0.5)
    amp = pm.reflector_map(echo, pm.FINE_MM, k, attrs=dict(pm.PROBE))
    shadow = np.where((np.abs(ss - 35.0) <= shadow_half_mm) & (np.abs(ii - 35.0) <= shadow_half_mm), 1.0, 0.0)
    covered = pm.reflector_map(shadow, pm.FINE_MM, k).values
    loss = xr.DataArray(-20.0 * np.log10(np.clip(1.0 - covered, 1e-6, None)), dims=("scan", "index"),
                        coords=amp.coords, attrs={"units": "dB"})
    return amp, loss


def test_back_wall_loss_boundary_that_agrees_leaves_the_echo_size():
    from ndtmap.indications import LossOptions

    amp, loss = _lamination_and_loss(10.0, 10.0)
    recs = size_indications(amp, threshold_fsh=20.0, depth_map=xr.full_like(amp, pm.DEPTH_MM),
                            loss=LossOptions(6.0, loss_map=loss))
    rec = [r for r in recs if r.kind == "amplitude"][0]
    assert rec.sizing_method == "6 dB drop" and "methods_disagree" not in rec.flags
    assert any("agrees" in n for n in rec.notes)
    assert rec.length_scan_mm == pytest.approx(20.0, abs=_tol(20.0))


def test_back_wall_loss_boundary_larger_than_the_echo_is_taken_with_a_flag():
    from ndtmap.indications import LossOptions

    amp, loss = _lamination_and_loss(8.0, 14.0)  # the lamination shadows 28 mm, its echo comes from 16 mm
    recs = size_indications(amp, threshold_fsh=20.0, depth_map=xr.full_like(amp, pm.DEPTH_MM),
                            loss=LossOptions(6.0, loss_map=loss))
    rec = [r for r in recs if r.kind == "amplitude"][0]
    assert "methods_disagree" in rec.flags and rec.sizing_method == "back-wall loss >= 6 dB"
    assert rec.length_scan_mm == pytest.approx(28.0, abs=_tol(28.0))
    assert rec.sizing_level_fsh is None
