"""End to end on simulated scans: the processing chain against the truth the simulator put in.

These tests join the simulator (whose physics is checked against published
relations in test_simulate.py) with gates, calibration, maps and sizing, the
way a practitioner would use them, and compare with the true geometry.

References
----------
- J. and H. Krautkramer, *Ultrasonic Testing of Materials*: pulse-echo timing,
  two-point (step-wedge) calibration, beam spread sin(gamma) = 0.51 lambda/D,
  DGS relation H_FBH/H_BW = pi d^2 z_BW/(2 lambda z^2).
- ISO 16827, general principle of the 6 dB drop for reflectors larger than the beam.
- Kinsler, Frey et al., *Fundamentals of Acoustics*, ch. 7: the Rayleigh integral, computed in
  tests/helpers/rayleigh.py independently of ndtmap (the simulator shares ndtmap's beam model, so
  tests comparing the two are named ``test_consistency_*``).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from helpers import rayleigh

from ndtmap.gates import Gate, evaluate_gate
from ndtmap.grid import calibration
from ndtmap.indications import DetectionOptions, size_indications
from ndtmap.io import open_grid
from ndtmap.physics import beam
from ndtmap.scans import maps
from ndtmap.simulate import (
    FlatBottomHole,
    Material,
    Noise,
    Part,
    PlanarReflector,
    Probe,
    ScanPlan,
    sample_path,
    scan_truth,
    simulate_scan,
)

STEEL = Material(5920.0)


def _backwall_time(probe: Probe, thickness: float) -> float:
    plan = ScanPlan.raster((0, 0), (0, 0), 1.0, (0, 2 * thickness / 5.92 + 3))
    g = simulate_scan(probe, STEEL, Part(thickness), [], plan, repeat_echoes=False)
    return float(evaluate_gate(g, Gate("bw", thickness - 3, thickness + 3, threshold_fsh=10)).time_us.values[0, 0])


def test_plate_thickness_after_step_wedge_calibration():
    # Two-point calibration on reference steps of 15 and 25 mm (Krautkramer, time-base calibration), then a
    # 20 mm plate with noise is measured within 0.05 mm. The calibration absorbs the diffraction phase of the
    # back-wall echo, which shifts the carrier crest by up to a quarter period.
    probe = Probe(5.0, 6.0)
    cal = calibration.two_point_calibration(15.0, _backwall_time(probe, 15.0), 25.0, _backwall_time(probe, 25.0))
    assert cal.velocity_m_s == pytest.approx(5920.0, rel=0.01)
    plate = simulate_scan(
        probe,
        STEEL,
        Part(20.0),
        [],
        ScanPlan.raster((0, 10), (0, 10), 2.0, (0, 15)),
        noise=Noise(electronic_fsh=1.0, grain_fsh=1.0),
        seed=3,
    )
    plate = calibration.calibrate(plate, velocity_m_s=cal.velocity_m_s, zero_offset_us=cal.zero_offset_us)
    thickness = maps.thickness_map(plate, Gate("bw", 17, 23, threshold_fsh=20)).values
    assert np.abs(thickness - 20.0).max() < 0.05


def test_plate_thickness_echo_to_echo_needs_no_zero():
    # the multiple-echo method measures the spacing of back-wall echoes 1 and 2 (Krautkramer), independent
    # of the zero offset: within 0.05 mm without any calibration, also with a wrong zero in the grid
    probe = Probe(5.0, 6.0)
    plate = simulate_scan(
        probe,
        STEEL,
        Part(20.0),
        [],
        ScanPlan.raster((0, 10), (0, 10), 2.0, (0, 15)),
        noise=Noise(electronic_fsh=1.0, grain_fsh=1.0),
        seed=4,
    )
    plate = calibration.calibrate(plate, zero_offset_us=0.37)
    th = maps.thickness_map(
        plate,
        Gate("bw2", 37, 43, threshold_fsh=5),
        reference_gate=Gate("bw1", 17, 23, threshold_fsh=20),
        method="echo-to-echo",
    ).values
    assert np.abs(th - 20.0).max() < 0.05


def test_corroded_wall_sample_thickness_against_truth():
    # Remaining-wall map of the bundled corroded wall against the simulator's thickness map. The beam
    # averages over the sloping flanks of the wall loss and the near-field diffraction phase shifts the
    # echo crest (see above); where the back-wall echo stays above the gate threshold the RMS error is
    # below 0.2 mm and the thinnest wall is found at its true place within 0.15 mm.
    grid = open_grid(sample_path("corroded_wall.nc"))
    thickness = maps.thickness_map(grid, Gate("bw", 3.0, 13.5, threshold_fsh=10.0))
    truth = grid["truth_thickness_mm"]
    err = (thickness - truth).values
    ok = np.isfinite(err)
    assert ok.mean() > 0.95  # the rest: encoder drop-outs and the steepest flanks
    assert float(np.sqrt(np.mean(err[ok] ** 2))) < 0.2
    i = np.unravel_index(np.nanargmin(thickness.values), thickness.shape)
    j = np.unravel_index(np.argmin(truth.values), truth.shape)
    assert float(thickness.values[i]) == pytest.approx(float(truth.values[j]), abs=0.15)
    assert abs(float(thickness.scan[i[0]]) - float(truth.scan[j[0]])) <= 2.5
    assert abs(float(thickness.index[i[1]]) - float(truth.index[j[1]])) <= 2.5


def test_interface_following_gate_on_tilted_immersion_part():
    # With the gate synchronised on the interface echo, depth is counted from the part's surface: a hole
    # 12 mm below a surface tilted by 3 degrees stays at 12 mm while the water path grows by 3 mm
    # (common practice, no source).
    probe = Probe(5.0, 10.0)
    part = Part(25.0, water_path_mm=30.0, surface_tilt_deg=3.0)
    plan = ScanPlan.raster((0, 60), (0, 0), 4.0, (35, 55))
    holes = [FlatBottomHole(x, 0.0, 12.0, 4.0) for x in (8.0, 32.0, 56.0)]
    grid = simulate_scan(probe, STEEL, part, holes, plan, full_scale_fsh=1000.0)
    interface = Gate("interface", 38.0, 48.0, unit="us", threshold_fsh=50.0)
    flaw = Gate("flaw", 5.0, 20.0, threshold_fsh=5.0, follows="interface")
    depth = maps.depth_map(grid, flaw, others=[interface])
    for x in (8.0, 32.0, 56.0):
        assert float(depth.sel(scan=x, index=0.0)) == pytest.approx(12.0, abs=0.25)
    fixed = maps.depth_map(grid, Gate("fixed", 43.0, 52.0, unit="us", threshold_fsh=5.0))
    drift = float(fixed.sel(scan=56.0, index=0.0) - fixed.sel(scan=8.0, index=0.0))
    assert abs(drift) > 0.5  # without the interface synchronisation the fixed gate reads other depths


def test_repeat_echo_of_lamination_at_twice_its_depth():
    # a reflector's double reflection arrives at twice its depth (common practice, no source)
    z = 7.0
    lam = PlanarReflector.rectangle((-30.0, 30.0), (-30.0, 30.0), z)
    grid = simulate_scan(
        Probe(5.0, 6.0), STEEL, Part(25.0), [lam], ScanPlan.raster((0, 4), (0, 4), 2.0, (0, 10)), backwall_fsh=20.0
    )
    first = maps.depth_map(grid, Gate("first", 4.0, 10.0, threshold_fsh=20.0))
    second = maps.depth_map(grid, Gate("second", 11.0, 17.0, threshold_fsh=5.0))
    # each echo carries its own small diffraction phase shift (a fraction of a period), hence 0.3 mm
    assert float(first.mean()) == pytest.approx(z, abs=0.3)
    assert float(second.mean()) == pytest.approx(2 * z, abs=0.3)


def test_plate_sample_laminations_sized_against_truth():
    # 6 dB drop sizing of laminations much larger than the beam: true length and width within one scan or
    # index step (ISO 16827, 6 dB drop principle); the one cut by the scan edge is flagged.
    grid = open_grid(sample_path("plate_laminations.nc"))
    truth = {r["label"]: r for r in scan_truth(grid)["reflectors"]}
    flaw = Gate("flaw", 1.0, 23.0, threshold_fsh=20.0)
    amp = maps.amplitude_map(grid, flaw)
    recs = size_indications(amp, threshold_fsh=20.0, depth_map=maps.depth_map(grid, flaw),
                            detection=DetectionOptions(min_positions=2))
    step_scan, step_index = 1.5, 2.0

    def record_at(t):
        return min(recs, key=lambda r: math.hypot(r["scan_mm"] - t["scan_mm"], r["index_mm"] - t["index_mm"]))

    l1 = truth["L1 mid-wall lamination"]
    r1 = record_at(l1)
    assert r1["length_scan_mm"] == pytest.approx(l1["length_scan_mm"], abs=step_scan)
    assert r1["length_index_mm"] == pytest.approx(l1["length_index_mm"], abs=step_index)
    assert r1["area_mm2"] == pytest.approx(l1["area_mm2"], rel=0.12)
    assert r1["depth_mm"] == pytest.approx(l1["depth_mm"], abs=0.3)
    l3 = truth["L3 small lamination"]
    r3 = record_at(l3)
    assert r3["length_scan_mm"] == pytest.approx(l3["length_scan_mm"], abs=step_scan)
    assert r3["length_index_mm"] == pytest.approx(l3["length_index_mm"], abs=step_index)
    r4 = record_at(truth["L4 lamination at scan edge"])
    assert "at_scan_edge" in r4["flags"]
    assert all("at_scan_edge" not in r["flags"] for r in (r1, r3))


def _forging_records():
    grid = open_grid(sample_path("forging_block.nc"))
    truth = [r for r in scan_truth(grid)["reflectors"] if r["type"] == "flat_bottom_hole"]
    flaw = Gate("flaw", 80.0, 150.0, threshold_fsh=2.0)
    bw = Gate("backwall", 150.0, 166.0, threshold_fsh=20.0)
    amp = maps.amplitude_map(grid, flaw)
    recs = size_indications(
        amp,
        threshold_fsh=2.0,
        depth_map=maps.depth_map(grid, flaw),
        backwall=maps.amplitude_map(grid, bw),
        backwall_depth_mm=maps.depth_map(grid, bw),
        detection=DetectionOptions(min_positions=3),
    )
    return truth, recs


def _nearest(recs, t):
    return min(recs, key=lambda r: math.hypot(r["scan_mm"] - t["scan_mm"], r["index_mm"] - t["index_mm"]))


def test_consistency_forging_small_reflectors_dgs_and_beam_width():
    # Consistency: the simulator and ndtmap's DGS rest on the same piston model, and the simulator's lateral
    # model is the one-frequency far-field directivity. DGS equivalent size of flat-bottom holes from the
    # back-wall reference within 1.5 dB (Krautkramer, DGS); their 6 dB length is the -6 dB beam width
    # 2 z tan(gamma), sin(gamma) = 0.51 lambda/D, and is flagged. Independent check of the echoes:
    # test_forging_hole_echo_ratios_against_the_rayleigh_integral.
    truth, recs = _forging_records()
    lam = beam.wavelength_mm(5920.0, 2.0)
    for t in truth:
        rec = _nearest(recs, t)
        assert math.hypot(rec["scan_mm"] - t["scan_mm"], rec["index_mm"] - t["index_mm"]) <= 2.5
        assert rec["depth_mm"] == pytest.approx(t["depth_mm"], abs=1.0)
        error_db = 40 * math.log10(rec["ers_mm"] / t["diameter_mm"])  # echo ~ d^2
        assert abs(error_db) < 1.5
        width = 2 * t["depth_mm"] * math.tan(math.asin(0.51 * lam / 20.0))
        assert rec["length_scan_mm"] == pytest.approx(width, abs=2.5 + 0.1 * width)
        assert "smaller_than_beam" in rec["flags"]


def test_forging_hole_echo_ratios_against_the_rayleigh_integral():
    # Independent: the echo ratio hole / back wall that ndtmap measures on the forging sample (corrected for
    # attenuation, the DGS ratio of each record) against the ratio computed here from the Rayleigh integral
    # (Kinsler & Frey ch. 7): the hole's reflected field integrated over its face and the image piston averaged
    # over the probe face, for the sample's 20 mm, 2 MHz probe of 50 % bandwidth, each the peak of the pulse's
    # envelope; within 1 dB (grain noise, the scan step of 2.5 mm). Where the far-field relation holds
    # (beyond 3 N = 101 mm) the equivalent size then follows by hand (Krautkramer, DGS chapter).
    truth, recs = _forging_records()
    a, c, z_bw = 10.0, 5920.0, 160.0
    f, w = rayleigh.spectrum(2.0, 0.5, n=41)
    backwall = rayleigh.echo_peak(rayleigh.plane_echo_spectrum(z_bw, a, f, c), f, w, z_bw, c)
    lam = c / 2e3
    for t in truth:
        rec = _nearest(recs, t)
        z, d = t["depth_mm"], t["diameter_mm"]
        hole = rayleigh.echo_peak(rayleigh.disc_echo_spectrum(z, d / 2, a, f, c), f, w, z, c)
        assert rec["ers_ratio_db"] == pytest.approx(20 * math.log10(hole / backwall), abs=1.0)
        if z >= 3 * beam.near_field_length_mm(20.0, 2.0, c):
            ratio = hole / backwall
            by_hand = math.sqrt(2 * lam * z * z * ratio / (math.pi * z_bw))  # d = sqrt(2 lambda z^2 r/(pi z_BW))
            assert rec["ers_method"] == "far-field"
            assert abs(40 * math.log10(rec["ers_mm"] / by_hand)) <= 1.0


def test_clipped_echo_is_flagged_saturated():
    # an echo clipped at the digitiser full scale cannot be drop-sized (common practice, no source)
    refl = [PlanarReflector.rectangle((-6.0, 6.0), (-6.0, 6.0), 8.0)]
    grid = simulate_scan(
        Probe(5.0, 6.0),
        STEEL,
        Part(25.0),
        refl,
        ScanPlan.raster((-12, 12), (-12, 12), 1.0, (0, 10)),
        gain_db=12.0,
        full_scale_fsh=100.0,
    )
    flaw = Gate("flaw", 2.0, 20.0, threshold_fsh=20.0)
    recs = size_indications(maps.amplitude_map(grid, flaw), threshold_fsh=20.0, depth_map=maps.depth_map(grid, flaw))
    assert recs and recs[0]["peak_fsh"] == pytest.approx(100.0)
    assert "saturated" in recs[0]["flags"]
