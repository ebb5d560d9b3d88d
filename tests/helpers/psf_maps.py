"""Amplitude C-scans of known reflector shapes from a beam model that is not ndtmap's.

The map is the reflector's reflectivity (an indicator on a fine raster,
%FSH where the beam is fully on it) convolved with a pulse-echo point-spread
function computed here, normalised to unit sum, then sampled on the probe
positions (1 mm by default). Two point-spread functions:

``"gaussian"``
    A Gaussian whose -6 dB full width (half amplitude) is the pulse-echo
    -6 dB beam width of a circular piston in the far field,
    ``w6 = 2 z tan(gamma6)`` with ``sin(gamma6) = 0.51 lambda / D``
    (Krautkramer, Ultrasonic Testing of Materials, ch. 4, the -6 dB edge of
    the pulse-echo beam).
``"piston"``
    The far-field directivity of a circular piston, squared for
    transmit-receive: ``(2 J1(x) / x)**2`` with ``x = k a sin(theta)``,
    ``sin(theta) = r / sqrt(r**2 + z**2)`` (Kinsler & Frey, Fundamentals of
    Acoustics, ch. 7; Krautkramer ch. 4), side lobes included, from
    ``scipy.special.j1``.

Nothing of :mod:`ndtmap.physics` or :mod:`ndtmap.simulate` is used.
"""

from __future__ import annotations

import math

import numpy as np
import xarray as xr
from scipy import signal, special

STEEL_M_S = 5920.0  # longitudinal wave speed of steel, from memory (Krautkramer appendix tables)


def w6_far_field_mm(depth_mm, diameter_mm, frequency_mhz, velocity_m_s=STEEL_M_S):
    """Pulse-echo -6 dB beam width 2 z tan(gamma6), sin(gamma6) = 0.51 lambda / D (Krautkramer ch. 4)."""
    lam = velocity_m_s / (frequency_mhz * 1e3)
    g6 = math.asin(0.51 * lam / diameter_mm)
    return 2.0 * depth_mm * math.tan(g6)


def psf(kind, depth_mm, diameter_mm, frequency_mhz, fine_mm, velocity_m_s=STEEL_M_S):
    """The pulse-echo point-spread function on a square fine raster, unit sum."""
    w6 = w6_far_field_mm(depth_mm, diameter_mm, frequency_mhz, velocity_m_s)
    half = 4.0 * w6 if kind == "gaussian" else 6.0 * w6
    x = np.arange(-half, half + 0.5 * fine_mm, fine_mm)
    xx, yy = np.meshgrid(x, x, indexing="ij")
    r = np.hypot(xx, yy)
    if kind == "gaussian":
        sigma = w6 / (2.0 * math.sqrt(2.0 * math.log(2.0)))  # FWHM of the amplitude = w6
        k = np.exp(-0.5 * (r / sigma) ** 2)
    elif kind == "piston":
        lam = velocity_m_s / (frequency_mhz * 1e3)
        arg = (2.0 * math.pi / lam) * (0.5 * diameter_mm) * r / np.hypot(r, depth_mm)
        with np.errstate(invalid="ignore", divide="ignore"):
            d = np.where(arg > 1e-12, 2.0 * special.j1(arg) / arg, 1.0)
        k = d**2  # transmit and receive
    else:
        raise ValueError(kind)
    return k / k.sum()


def reflector_map(reflectivity, fine_mm, kernel, step_mm=1.0, noise_fsh=0.0, seed=0, attrs=None):
    """Convolve a fine reflectivity raster (%FSH) with `kernel` and sample it every `step_mm` (a map, %FSH)."""
    blurred = signal.fftconvolve(reflectivity, kernel, mode="same")
    k = int(round(step_mm / fine_mm))
    sampled = blurred[::k, ::k]
    if noise_fsh:
        rng = np.random.default_rng(seed)
        sampled = np.abs(sampled + noise_fsh * rng.standard_normal(sampled.shape))
    n_s, n_i = sampled.shape
    scan = np.arange(n_s) * step_mm
    index = np.arange(n_i) * step_mm
    return xr.DataArray(
        sampled, dims=("scan", "index"),
        coords={"scan": ("scan", scan, {"units": "mm"}), "index": ("index", index, {"units": "mm"})},
        attrs={**(attrs or {}), "units": "%FSH"},
    )


def fine_raster(extent_scan_mm, extent_index_mm, fine_mm):
    """Coordinates (mm) of a fine raster covering the map, and the mesh (scan, index)."""
    s = np.arange(0.0, extent_scan_mm + 0.5 * fine_mm, fine_mm)
    i = np.arange(0.0, extent_index_mm + 0.5 * fine_mm, fine_mm)
    return np.meshgrid(s, i, indexing="ij")


PROBE = {"probe_diameter_mm": 10.0, "probe_frequency_mhz": 5.0, "velocity_m_s": STEEL_M_S,
         "beam_angle_deg": 0.0, "digitiser_full_scale_fsh": 100.0, "probe_bandwidth": 0.6}
DEPTH_MM = 25.0
FINE_MM = 0.1


def _finish(refl, kind, noise_fsh, seed):
    k = psf(kind, DEPTH_MM, PROBE["probe_diameter_mm"], PROBE["probe_frequency_mhz"], FINE_MM)
    return reflector_map(refl, FINE_MM, k, noise_fsh=noise_fsh, seed=seed, attrs=dict(PROBE))


def lamination_with_hot_spot(kind="gaussian", noise_fsh=0.5, seed=1):
    """Case (a): a 40 x 30 mm lamination at 40 %FSH with a 6 mm hot spot at 90 %FSH (truth 40 x 30 mm)."""
    ss, ii = fine_raster(80.0, 70.0, FINE_MM)
    refl = np.where((np.abs(ss - 40.0) <= 20.0) & (np.abs(ii - 35.0) <= 15.0), 40.0, 1.0)
    refl = np.where(np.hypot(ss - 44.0, ii - 37.0) <= 3.0, 90.0, refl)
    return _finish(refl, kind, noise_fsh, seed)


def oblique_strip(kind="gaussian", angle_deg=45.0, noise_fsh=0.5, seed=2):
    """Case (b): a 40 x 4 mm strip at `angle_deg` to the scan axis, 80 %FSH (truth: 40 mm long)."""
    ss, ii = fine_raster(70.0, 70.0, FINE_MM)
    a = math.radians(angle_deg)
    u = (ss - 35.0) * math.cos(a) + (ii - 35.0) * math.sin(a)
    v = -(ss - 35.0) * math.sin(a) + (ii - 35.0) * math.cos(a)
    refl = np.where((np.abs(u) <= 20.0) & (np.abs(v) <= 2.0), 80.0, 1.0)
    return _finish(refl, kind, noise_fsh, seed)


def rising_ellipse(kind="gaussian", noise_fsh=0.5, seed=3):
    """Case (c): a 24 x 16 mm ellipse whose echo rises linearly from 30 to 90 %FSH along scan."""
    ss, ii = fine_raster(60.0, 50.0, FINE_MM)
    inside = ((ss - 30.0) / 12.0) ** 2 + ((ii - 25.0) / 8.0) ** 2 <= 1.0
    level = 30.0 + 60.0 * (ss - 18.0) / 24.0
    refl = np.where(inside, level, 1.0)
    return _finish(refl, kind, noise_fsh, seed)
