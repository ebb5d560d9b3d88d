"""Amplitude maps of known reflectors, built from the pulse-echo beam model.

The C-scan amplitude of a reflector at depth z, as the probe moves over
it, is modelled as the pulse-echo lateral sensitivity of the probe
(:func:`ndtmap.physics.beam.lateral_sensitivity`) integrated over the reflector's
area and normalised so that a reflector covering the whole beam gives the
plateau level; a point-like reflector gives the sensitivity itself.

The sensitivity kernel is tabulated on a fine square grid out to
`kernel_radius_mm` (default: twice the -20 dB beam width, i.e. the main lobe
and the first side lobes); its summed-area table, interpolated bilinearly,
gives the integral over any axis-aligned rectangle without re-integrating.
"""

from __future__ import annotations

import math

import numpy as np
import xarray as xr
from scipy import interpolate

from ndtmap.physics import beam

STEEL_M_S = 5920.0  # longitudinal, from memory (Krautkramer appendix tables)


def probe_attrs(diameter_mm=10.0, frequency_mhz=5.0, velocity_m_s=STEEL_M_S, **extra):
    """The grid attrs a gated map carries (only the ones the sizing reads)."""
    attrs = {
        "probe_diameter_mm": float(diameter_mm),
        "probe_frequency_mhz": float(frequency_mhz),
        "velocity_m_s": float(velocity_m_s),
        "beam_angle_deg": 0.0,
        "digitiser_full_scale_fsh": 100.0,
    }
    attrs.update(extra)
    return attrs


def make_map(values, scan_mm, index_mm, attrs=None, units="%FSH"):
    """A (scan, index) map with coordinates in mm."""
    return xr.DataArray(
        np.asarray(values, dtype=np.float64),
        dims=("scan", "index"),
        coords={
            "scan": ("scan", np.asarray(scan_mm, dtype=np.float64), {"units": "mm"}),
            "index": ("index", np.asarray(index_mm, dtype=np.float64), {"units": "mm"}),
        },
        attrs={**(attrs or {}), "units": units},
    )


def beam_constants(attrs):
    d = attrs["probe_diameter_mm"]
    f = attrs["probe_frequency_mhz"]
    c = attrs["velocity_m_s"]
    lam = beam.wavelength_mm(c, f)
    n = beam.near_field_length_mm(d, f, c)
    return d, f, c, lam, n


def point_map(scan_mm, index_mm, centre_mm, depth_mm, peak_fsh, attrs):
    """A point-like reflector at `centre_mm` = (scan, index): peak x the lateral sensitivity."""
    d, _, _, lam, n = beam_constants(attrs)
    s, i = np.meshgrid(np.asarray(scan_mm, float), np.asarray(index_mm, float), indexing="ij")
    r = np.hypot(s - centre_mm[0], i - centre_mm[1])
    return make_map(peak_fsh * beam.lateral_sensitivity(r, depth_mm, d, lam, n), scan_mm, index_mm, attrs)


class RectangleModel:
    """Amplitude of a rectangular planar reflector (normal to the beam) at any probe position."""

    def __init__(self, rect_mm, depth_mm, plateau_fsh, attrs, *, kernel_radius_mm=None, step_mm=None):
        d, f, c, lam, n = beam_constants(attrs)
        w20 = float(beam.beam_width_mm(depth_mm, d, f, c, drop_db=20))
        radius = 2.0 * w20 if kernel_radius_mm is None else float(kernel_radius_mm)
        h = w20 / 120.0 if step_mm is None else float(step_mm)
        m = int(math.ceil(radius / h))
        edges = (np.arange(-m, m + 1)) * h
        centres = 0.5 * (edges[1:] + edges[:-1])
        u, v = np.meshgrid(centres, centres, indexing="ij")
        rr = np.hypot(u, v)
        k = beam.lateral_sensitivity(rr, depth_mm, d, lam, n)
        k[rr > radius] = 0.0
        k /= k.sum()
        sat = np.zeros((k.shape[0] + 1, k.shape[1] + 1))
        sat[1:, 1:] = k.cumsum(0).cumsum(1)
        self._cdf = interpolate.RegularGridInterpolator((edges, edges), sat, method="linear")
        self._lo, self._hi = edges[0], edges[-1]
        self.rect = tuple(float(x) for x in rect_mm)  # (scan0, scan1, index0, index1)
        self.plateau = float(plateau_fsh)
        self.kernel_radius_mm = radius

    def _f(self, uu, vv):
        pts = np.column_stack([np.clip(uu, self._lo, self._hi).ravel(), np.clip(vv, self._lo, self._hi).ravel()])
        return self._cdf(pts).reshape(np.shape(uu))

    def amplitude(self, ps, pi):
        """Amplitude (%FSH) with the probe at (ps, pi) mm (arrays broadcast)."""
        s0, s1, i0, i1 = self.rect
        ps, pi = np.broadcast_arrays(np.asarray(ps, float), np.asarray(pi, float))
        u0, u1, v0, v1 = s0 - ps, s1 - ps, i0 - pi, i1 - pi
        frac = self._f(u1, v1) - self._f(u0, v1) - self._f(u1, v0) + self._f(u0, v0)
        return self.plateau * frac

    def map(self, scan_mm, index_mm, attrs):
        s, i = np.meshgrid(np.asarray(scan_mm, float), np.asarray(index_mm, float), indexing="ij")
        return make_map(self.amplitude(s, i), scan_mm, index_mm, attrs)
