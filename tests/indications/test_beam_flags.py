"""Sizes that rest on the beam: ``smaller_than_beam``, ``near_field`` and the 20 dB correction, on maps made
independently of ndtmap's beam model.

The amplitude maps here come from the Rayleigh integral (tests/helpers/rayleigh.py, which shares nothing with
ndtmap): the echo of a flat disc at lateral offset s is (1/(pi a^2)) |int_disc (p/p0)^2 dS| (Kirchhoff, the
reflector returns the incident field) averaged over a 60 % Gaussian band; and, for comparison, the same disc
seen through the band-averaged intensity (|p|^2 convolved with the disc), the picture of a reflector that
scatters incoherently.

References: Kinsler, Frey et al., *Fundamentals of Acoustics*, ch. 7 (Rayleigh integral); J. and H.
Krautkramer, *Ultrasonic Testing of Materials*, ch. 4 (beam spread, near field) and the DGS chapter;
ISO 16827, in general terms (the 6 dB drop measures reflectors larger than the beam; the 20 dB drop with the
beam width subtracted, reflectors comparable to it).
"""

from __future__ import annotations

import math
from functools import lru_cache

import numpy as np
import pytest
from helpers import rayleigh
from helpers.sizing_maps import RectangleModel, make_map, probe_attrs

from ndtmap.indications import FLAG_MEANINGS, beam_corrected_length, detect_indications, size_indications
from ndtmap.physics import beam

D, F, C, BW = 10.0, 5.0, 5920.0, 0.6
A = D / 2
N = beam.near_field_length_mm(D, F, C)  # 21.1 mm
ATTRS = probe_attrs(D, F, C, probe_bandwidth=BW)


@lru_cache(maxsize=8)
def _radial_field(z: float, r_max: float) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """p/p0 times exp(i k R) (smooth in r) on a radial line at depth z, for an 11-frequency 60 % band."""
    f, w = rayleigh.spectrum(F, BW, n=11, span_sigma=2.5)
    k = rayleigh.wavenumbers(f, C)
    r = np.arange(0.0, r_max + 0.5, 0.4)
    smooth = np.array([rayleigh.field(v, z, A, k, n_radial=64, n_angle=128) for v in r])
    smooth *= np.exp(1j * np.outer(np.hypot(r, z), k))
    return r, smooth, k, w


def _disc_profile(z: float, d: float, offsets: np.ndarray, *, coherent: bool = True, h: float = 0.25) -> np.ndarray:
    """Echo of a flat disc of diameter d at depth z against the probe's lateral offset (see the module notes)."""
    r, smooth, k, w = _radial_field(z, float(d / 2 + offsets.max() + 1.0))
    g = np.arange(-d / 2 + h / 2, d / 2, h)
    x, y = np.meshgrid(g, g)
    inside = x**2 + y**2 <= (d / 2) ** 2
    x, y = x[inside], y[inside]
    out = []
    for s in offsets:
        rho = np.hypot(x - s, y)
        p = np.stack([np.interp(rho, r, smooth[:, j].real) + 1j * np.interp(rho, r, smooth[:, j].imag)
                      for j in range(k.size)], axis=1)
        p *= np.exp(-1j * np.outer(np.hypot(rho, z), k))
        area = h * h / (math.pi * A * A)
        per_frequency = np.abs((p**2).sum(0)) if coherent else (np.abs(p) ** 2).sum(0)
        out.append(float(np.sum(w * per_frequency) * area))
    return np.array(out)


def _map_of(profile_offsets: np.ndarray, profile: np.ndarray, peak_fsh: float, step: float = 0.5,
            half_span: float = 30.0):
    """A C-scan of a round reflector centred in the map, from its echo against the offset."""
    scan = np.arange(-half_span, half_span + 1e-9, step)
    s, i = np.meshgrid(scan, scan, indexing="ij")
    values = peak_fsh * np.interp(np.hypot(s, i), profile_offsets, profile / profile.max(), right=0.0)
    return make_map(values, scan, scan, ATTRS)


def _depth(m, z):
    return m.copy(data=np.full(m.shape, z))


@pytest.mark.parametrize("d", [9.0, 12.0, 30.0])
@pytest.mark.parametrize("coherent", [True, False])
def test_discs_at_100_mm_flagged_when_their_length_is_a_point_reflectors(d, coherent):
    # The case: at 100 mm the -6 dB beam is 12.2 mm wide (one frequency; 11.0 mm over a 60 % band), and
    # discs of 9 and 12 mm were reported oversize, unflagged. A flat disc echoing coherently (Kirchhoff) gives
    # 6 dB lengths of 8.9 and 9.4 mm, one scattering incoherently 12.5 and 13.7 mm: all lie in the range a point
    # reflector gives there (8.5 to 15.7 mm) and are flagged; a 30 mm disc (28.5 / 29.1 mm) is not.
    z = 100.0
    offsets = np.arange(0.0, 26.0, 0.25)
    m = _map_of(offsets, _disc_profile(z, d, offsets, coherent=coherent), 60.0)
    (rec,) = size_indications(m, threshold_fsh=10, depth_map=_depth(m, z))
    small = d < 20
    assert ("smaller_than_beam" in rec.flags) == small
    assert "near_field" not in rec.flags  # 100 mm is beyond 3 N (63 mm)
    if small:
        assert any("range a point reflector gives" in n for n in rec.notes)
    else:
        assert rec.length_scan_mm == pytest.approx(d, rel=0.1)  # the 6 dB drop sizes a disc larger than the beam


def test_near_field_small_disc_is_flagged_and_sized_by_dgs():
    # The case: a 1.5 mm disc at 0.6 N gave 7.7 x 7.7 mm, no flag (the near-field width was a floor of
    # 0.26 D). The -6 dB beam there is 6.5 mm wide (Rayleigh integral, 60 % band): the 6 dB lengths are the
    # beam's, flagged smaller_than_beam and near_field; the DGS size, from a back wall at 60 mm computed from
    # the same integral, is right within 1 dB in echo terms.
    z = 0.6 * N
    offsets = np.arange(0.0, 12.0, 0.2)
    profile = _disc_profile(z, 1.5, offsets, h=0.1)
    f, w = rayleigh.spectrum(F, BW, n=41)
    fbh = rayleigh.echo_peak(rayleigh.disc_echo_spectrum(z, 0.75, A, f, C), f, w, z, C)
    backwall = rayleigh.echo_peak(rayleigh.plane_echo_spectrum(60.0, A, f, C), f, w, 60.0, C)
    m = _map_of(offsets, profile, 80.0 * fbh / backwall, step=0.25, half_span=15.0)
    (rec,) = size_indications(m, threshold_fsh=0.5 * m.values.max(), depth_map=_depth(m, z), backwall=80.0,
                              backwall_depth_mm=60.0)
    assert {"smaller_than_beam", "near_field"} <= set(rec.flags)
    assert rec.beam_width_6db_mm == pytest.approx(6.5, abs=0.15)
    assert rec.length_scan_mm == pytest.approx(rec.beam_width_6db_mm, abs=1.0)
    assert rec.ers_method == "piston" and abs(40 * math.log10(rec.ers_mm / 1.5)) <= 1.0
    assert any("inside 3 near-field lengths" in n and "rests on the beam" in n for n in rec.notes)


def test_large_lamination_in_the_near_field_is_not_flagged_near_field():
    # A plate much larger than the beam: its 6 dB lengths do not rest on the beam, even inside 3 N
    # (ISO 16827, general principle of the 6 dB drop), and no 20 dB beam-corrected length is given for it.
    rect = (35.5, 65.5, 30.5, 50.5)
    m = RectangleModel(rect, 12.0, 80.0, ATTRS).map(np.arange(0.0, 101.0), np.arange(0.0, 81.0), ATTRS)
    (rec,) = size_indications(m, threshold_fsh=20, depth_map=_depth(m, 12.0))
    assert "near_field" not in rec.flags and "smaller_than_beam" not in rec.flags
    assert rec.length_scan_20db_mm is None and rec.length_index_20db_mm is None
    assert rec.length_scan_20db_raw_mm is not None
    assert any("extends beyond the beam" in n for n in rec.notes)


def test_elongated_reflector_20db_correction_only_across_it():
    # A 40 x 3 mm strip at 30 mm (inside 3 N): along its length it extends beyond the beam, where the 20 dB beam
    # correction would undersize it (none is given, the note says why); across it, it is narrower than the
    # beam: the 6 dB width is the beam's (smaller_than_beam) and the sizes there rest on the near-field beam.
    rect = (30.5, 70.5, 38.5, 41.5)
    m = RectangleModel(rect, 30.0, 80.0, ATTRS).map(np.arange(0.0, 101.0, 0.5), np.arange(0.0, 81.0, 0.5), ATTRS)
    (ind,) = detect_indications(m, threshold_fsh=5.0, depth_map=_depth(m, 30.0))
    along = beam_corrected_length(m, ind, axis="scan")
    across = beam_corrected_length(m, ind, axis="index")
    assert along.extends_beyond_beam and along.length_mm is None
    assert any("undersize" in n for n in along.notes)
    assert not across.extends_beyond_beam
    (rec,) = size_indications(m, threshold_fsh=5.0, depth_map=_depth(m, 30.0))
    assert {"smaller_than_beam", "near_field"} <= set(rec.flags)
    assert rec.length_scan_mm == pytest.approx(40.0, abs=1.0)
    assert rec.length_scan_20db_mm is None


def test_20db_correction_uncertainty_is_an_estimate_and_says_so():
    # the uncertainty of a beam-corrected length adds half the spread of the beam width over the band
    # (an estimate) to the sampling of the drop length; the note says what it leaves out
    m = RectangleModel((45.5, 52.5, 36.5, 43.5), 80.0, 80.0, ATTRS).map(np.arange(0.0, 101.0, 0.5),
                                                                       np.arange(0.0, 81.0, 0.5), ATTRS)
    (ind,) = detect_indications(m, threshold_fsh=5.0, depth_map=_depth(m, 80.0))
    b = beam_corrected_length(m, ind, axis="scan")
    assert b.uncertainty_mm > b.raw.uncertainty_mm + 1.0
    assert any("an estimate, not a bound" in n and "leaves out" in n for n in b.notes)


def test_flag_meanings_say_what_the_flags_now_mean():
    assert "range a point reflector gives" in FLAG_MEANINGS["smaller_than_beam"]
    assert "resting on the beam" in FLAG_MEANINGS["near_field"]
