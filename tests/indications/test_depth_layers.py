"""Reflectors at different depths are different indications; one inclined reflector stays one.

The maps are built here from the geometry of the reflectors (amplitude and
depth written cell by cell), not with ndtmap.simulate: the truth is the
geometry put in.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import xarray as xr
from scipy import signal

from ndtmap.indications import detect_indications, size_indications
from ndtmap.indications.depth_layers import depth_noise_mm, depth_resolution_mm, split_by_depth

ATTRS = {"probe_frequency_mhz": 5.0, "probe_bandwidth": 0.6, "velocity_m_s": 5920.0, "probe_diameter_mm": 10.0}
SCAN = np.arange(0.0, 60.0, 1.0)
INDEX = np.arange(0.0, 40.0, 1.0)


def _maps(amp: np.ndarray, depth: np.ndarray) -> tuple[xr.DataArray, xr.DataArray]:
    c = {"scan": SCAN, "index": INDEX}
    return (xr.DataArray(amp, dims=("scan", "index"), coords=c, attrs=ATTRS),
            xr.DataArray(depth, dims=("scan", "index"), coords=c, attrs=ATTRS))


def _two_laminations(noise_mm: float = 0.0, seed: int = 0) -> tuple[xr.DataArray, xr.DataArray]:
    """20 x 20 mm laminations side by side along scan: 10-30 mm at 12 mm depth, 30-50 mm at 24 mm depth."""
    s, i = np.meshgrid(SCAN, INDEX, indexing="ij")
    amp = np.full(s.shape, 3.0)
    depth = np.random.default_rng(seed).uniform(2.0, 30.0, s.shape)  # noise picks outside the reflectors
    a = (s >= 10) & (s < 30) & (i >= 10) & (i < 30)
    b = (s >= 30) & (s < 50) & (i >= 10) & (i < 30)
    amp[a], amp[b] = 80.0, 60.0
    depth[a], depth[b] = 12.0, 24.0
    if noise_mm:
        depth = depth + np.random.default_rng(seed + 1).normal(0.0, noise_mm, depth.shape)
    return _maps(amp, depth)


def test_depth_resolution_against_a_scipy_gaussian_pulse():
    # scipy.signal.gausspulse: Gaussian-modulated pulse with fractional bandwidth `bw` at `bwr` = -6 dB of the
    # spectrum peak, the same definition as `probe_bandwidth`; its envelope above -20 dB, times c/2, is the
    # length in depth of one echo (an independent numerical computation, not ndtmap's formula)
    t = np.linspace(-2e-6, 2e-6, 400001)
    _, env = signal.gausspulse(t, fc=5e6, bw=0.6, bwr=-6, retenv=True)
    above = t[env >= 0.1]
    length_mm = (above[-1] - above[0]) * 5920.0 / 2.0 * 1e3
    # rel 1 %: scipy takes -6 dB as 10**(-6/20) = 0.501, ndtmap the half amplitude (-6.02 dB): 0.2 % apart
    assert depth_resolution_mm(ATTRS) == pytest.approx(length_mm, rel=1e-2)
    # an angle beam: depth per time is c cos(theta) / 2 (geometry of the sound path)
    angled = depth_resolution_mm({**ATTRS, "beam_angle_deg": 60.0})
    assert angled == pytest.approx(length_mm * math.cos(math.radians(60.0)), rel=1e-2)


def test_two_laminations_side_by_side_are_two_indications():
    amp, depth = _two_laminations()
    inds = detect_indications(amp, threshold_fsh=20.0, depth_map=depth)
    assert [(i.depth_mm, i.depth_min_mm, i.depth_max_mm, i.n_positions) for i in inds] == [
        (12.0, 12.0, 12.0, 400), (24.0, 24.0, 24.0, 400)]  # the geometry put in: 20 x 20 cells each
    recs = size_indications(amp, threshold_fsh=20.0, depth_map=depth)
    assert len(recs) == 2
    for rec in recs:
        # truth 20 x 20 mm (the geometry); within max(2 mm, 10 %) as the issue asks
        assert rec.length_scan_mm == pytest.approx(20.0, abs=2.0)
        assert rec.length_index_mm == pytest.approx(20.0, abs=2.0)
        assert "repeat_echo" not in rec.flags  # 24 mm = 2 x 12 mm, but beside it, not under it
        assert "depth_neighbour" in rec.flags  # sized on the map alone next to a reflector at another depth


def test_two_laminations_with_depth_noise_stay_two():
    amp, depth = _two_laminations(noise_mm=0.25)
    inds = detect_indications(amp, threshold_fsh=20.0, depth_map=depth)
    assert len(inds) == 2
    assert inds[0].depth_mm == pytest.approx(12.0, abs=1.0)
    assert inds[1].depth_mm == pytest.approx(24.0, abs=1.0)


def test_no_split_without_the_probe_data_or_when_switched_off():
    amp, depth = _two_laminations()
    assert len(detect_indications(amp, threshold_fsh=20.0, depth_map=depth, depth_step_mm=math.inf)) == 1
    bare_amp = amp.copy()
    bare_amp.attrs = {}
    assert len(detect_indications(bare_amp, threshold_fsh=20.0, depth_map=depth)) == 1
    assert len(detect_indications(bare_amp, threshold_fsh=20.0, depth_map=depth, depth_step_mm=2.0)) == 2


@pytest.mark.parametrize("slope_mm_per_mm", [0.1, 0.5, 2.5])
def test_inclined_reflector_stays_one_indication(slope_mm_per_mm):
    # a plane reflector tilted along scan: depth rises linearly, 0.1 to 2.5 mm per 1 mm cell (the last steeper
    # than the depth resolution, 1.59 mm, from cell to cell); absolute depth bins would cut it into bands
    s, i = np.meshgrid(SCAN, INDEX, indexing="ij")
    region = (s >= 10) & (s < 40) & (i >= 10) & (i < 30)
    amp = np.where(region, 70.0, 3.0)
    depth = np.where(region, 10.0 + slope_mm_per_mm * (s - 10.0), 5.0)
    a, d = _maps(amp, depth)
    inds = detect_indications(a, threshold_fsh=20.0, depth_map=d)
    assert len(inds) == 1
    assert inds[0].depth_min_mm == pytest.approx(10.0)
    assert inds[0].depth_max_mm == pytest.approx(10.0 + 29 * slope_mm_per_mm)


def test_inclined_reflector_with_noise_stays_one():
    rng = np.random.default_rng(3)
    s, i = np.meshgrid(SCAN, INDEX, indexing="ij")
    region = (s >= 10) & (s < 40) & (i >= 10) & (i < 30)
    depth = np.where(region, 10.0 + 0.8 * (s - 10.0) + rng.normal(0.0, 0.2, s.shape), 5.0)
    a, d = _maps(np.where(region, 70.0, 3.0), depth)
    assert len(detect_indications(a, threshold_fsh=20.0, depth_map=d)) == 1
    assert depth_noise_mm(depth, region) == pytest.approx(0.2, rel=0.3)  # the noise put in


def test_split_by_depth_keeps_cells_without_depth_with_their_neighbours():
    region = np.ones((4, 4), bool)
    depth = np.full((4, 4), 12.0)
    depth[1, 1] = np.nan
    assert len(split_by_depth(region, depth, 1.0)) == 1


# ---------------------------------------------------------------- with the A-scans (overlapping reflectors)
T_US = np.arange(0.0, 12.0, 0.02)  # 50 MHz sampling, 0..35 mm of steel
A_SCAN = np.arange(0.0, 60.0, 1.0)
A_INDEX = np.arange(0.0, 30.0, 1.0)


def _box(s, i, s0, s1, i0, i1):
    return (s >= s0) & (s <= s1) & (i >= i0) & (i <= i1)


def _overlap_grid():
    """A lamination at 12 mm (scan 10-30, index 8-22, 80 %FSH) over part of one at 22 mm (scan 24-49, 60 %FSH,
    40 %FSH where the shallower one shadows it) and, wholly under the first, a third at 19 mm (scan 14-22,
    index 12-18, 40 %FSH); back wall at 30 mm. Echoes: scipy.signal.gausspulse at the geometric time 2 z / c."""
    from ndtmap.grid import make_grid

    s, i = np.meshgrid(A_SCAN, A_INDEX, indexing="ij")
    a = _box(s, i, 10, 30, 8, 22)
    b = _box(s, i, 24, 49, 8, 22)
    c = _box(s, i, 14, 22, 12, 18)
    echoes = [(12.0, np.where(a, 80.0, 0.0)), (22.0, np.where(b, np.where(a, 40.0, 60.0), 0.0)),
              (19.0, np.where(c, 40.0, 0.0)), (30.0, np.where(a | b, 0.0, 80.0))]
    data = np.zeros((A_SCAN.size, A_INDEX.size, T_US.size))
    for z, amp in echoes:
        t0 = 2.0 * z / 5.92  # pulse-echo time, us (geometry)
        pulse = signal.gausspulse((T_US - t0) * 1e-6, fc=5e6, bw=0.6)
        data += amp[..., None] * pulse
    return make_grid(data.astype(np.float32), scan_mm=A_SCAN, index_mm=A_INDEX, time_us=T_US,
                     velocity_m_s=5920.0, probe_frequency_mhz=5.0, probe_diameter_mm=10.0,
                     attrs={"probe_bandwidth": 0.6, "part_thickness_mm": 30.0})


def test_overlapping_reflectors_at_three_depths_from_the_a_scans():
    from ndtmap.gates import Gate
    from ndtmap.indications import EchoCheck
    from ndtmap.scans import amplitude_map, depth_map

    grid = _overlap_grid()
    gate = Gate("flaw", 2.0, 27.0, threshold_fsh=20.0)
    amp, dep = amplitude_map(grid, gate), depth_map(grid, gate)
    maps_only = size_indications(amp, depth_map=dep)
    assert [round(r.depth_mm) for r in maps_only] == [12, 22]  # the 19 mm reflector is not in the gated map
    recs = size_indications(amp, depth_map=dep, echoes=EchoCheck(grid))
    by_depth = {round(r.depth_mm): r for r in recs}
    assert sorted(by_depth) == [12, 19, 22]
    # truth (the geometry put in): 12 mm 21 x 15 mm; 22 mm 26 x 15 mm (6 mm of it under the first);
    # 19 mm 9 x 7 mm; within max(2 mm, 10 %). (Not 24 mm: an echo hidden at exactly twice the depth of the
    # stronger one above it cannot be told from that one's repeat and is taken for it.)
    for z, (ls, li) in {12: (21.0, 15.0), 22: (26.0, 15.0), 19: (9.0, 7.0)}.items():
        r = by_depth[z]
        assert r.length_scan_mm == pytest.approx(ls, abs=max(2.0, 0.1 * ls)), z
        assert r.length_index_mm == pytest.approx(li, abs=max(2.0, 0.1 * li)), z
        assert "depth_neighbour" not in r.flags  # sized on its own depth layer from the A-scans
    assert by_depth[19].peak_fsh == pytest.approx(40.0, rel=0.05)
    assert any("found in the A-scans" in n for n in by_depth[19].notes)
    # the map alone sizes the 22 mm lamination only where it is the stronger echo, and says so
    short = {round(r.depth_mm): r for r in maps_only}[22]
    assert short.length_scan_mm < 22.0 and "depth_neighbour" in short.flags


def test_a_few_positions_reading_the_repeat_echo_stay_with_their_reflector():
    # at two corner positions of a 12 mm lamination the gate picks its repeat echo at 24 mm (weaker edge echo):
    # they are the lamination's positions, not a reflector at 24 mm (a repeat lies under its primary)
    s, i = np.meshgrid(SCAN, INDEX, indexing="ij")
    lam = (s >= 10) & (s < 30) & (i >= 10) & (i < 30)
    amp = np.where(lam, 80.0, 3.0)
    depth = np.where(lam, 12.0, 5.0)
    for corner in ((10, 10), (10, 29)):
        amp[corner], depth[corner] = 40.0, 24.0
    a, d = _maps(amp, depth)
    (ind,) = detect_indications(a, threshold_fsh=20.0, depth_map=d)
    assert ind.n_positions == 400 and (ind.depth_min_mm, ind.depth_max_mm) == (12.0, 12.0)


def test_consistency_two_laminations_side_by_side_from_the_simulator():
    # ndtmap.simulate shares ndtmap's beam model: a consistency test. It also writes the 12 mm lamination's
    # repeat echo at 24 mm, which the A-scan depth layers must not take for the 24 mm lamination.
    from ndtmap.gates import Gate
    from ndtmap.indications import EchoCheck
    from ndtmap.scans import amplitude_map, depth_map
    from ndtmap.simulate import Material, Noise, Part, PlanarReflector, Probe, ScanPlan, simulate_scan

    refl = [PlanarReflector.rectangle((10.0, 30.0), (10.0, 30.0), 12.0),
            PlanarReflector.rectangle((30.0, 50.0), (10.0, 30.0), 24.0)]
    plan = ScanPlan.raster((0.0, 60.0), (0.0, 40.0), (1.0, 1.0), (0.0, 12.0), sampling_mhz=50.0)
    grid = simulate_scan(Probe(5.0, 10.0, bandwidth=0.6), Material.from_handbook("steel"), Part(30.0), refl, plan,
                         noise=Noise(grain_fsh=0.5, electronic_fsh=0.3), seed=1)
    gate = Gate("flaw", 2.0, 27.0, threshold_fsh=20.0)
    amp, dep = amplitude_map(grid, gate), depth_map(grid, gate)
    for echoes in (None, EchoCheck(grid)):
        recs = size_indications(amp, depth_map=dep, echoes=echoes)
        assert [round(r.depth_mm) for r in recs] == [12, 24]
        assert all(r.depth_max_mm - r.depth_min_mm < 1.0 for r in recs)
    for rec in recs:  # with the A-scans: 20 x 20 mm each, within max(2 mm, 10 %)
        assert rec.length_scan_mm == pytest.approx(20.0, abs=2.0)
        assert rec.length_index_mm == pytest.approx(20.0, abs=2.0)
