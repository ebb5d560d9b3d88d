"""The coherent patch-sum model of pulse-echo A-scans, and its approximations.

Each reflecting surface is cut into small patches. For a probe at position
``p`` the A-scan is the sum over all patches ``q`` of a wavelet delayed by the
two-way travel time ``2 R / c`` (``R = |q - p|``) and weighted by

``w = C * S(R) * L(rho, l) * dA * r * 10**(-2 alpha R / 20)``

* ``S(R) = <p(R)**2> / (pi a**2)``: the band-averaged on-axis piston pressure
  squared per unit area, so that a small disc of radius ``b`` on the axis
  gives ``<p**2> b**2 / a**2`` (:func:`ndtmap.physics.beam.fbh_echo_relative`);
* ``L``: the pulse-echo lateral sensitivity
  (:func:`ndtmap.physics.beam.lateral_sensitivity`), whose -6 dB half-angle obeys
  ``sin(gamma) = 0.51 lambda / D`` in the far field;
* ``r``: the reflection coefficient (and the sign of the echo).

Because the patches add coherently (each carries its own delay), a plane
reflector's echo follows the Fresnel (stationary-phase) law ``~ 1/z`` in the
far field while a small disc falls as ``1/z**2``, in the ratio of the DGS
relation ``H_FBH / H_BW = pi d**2 / (2 lambda z)``; the edge of a large
planar reflector gives half the plateau amplitude (the beam is half covered).
Extended reflectors carry a depth-dependent factor that makes an infinite
plane give exactly the Lommel back-wall law
(:func:`ndtmap.physics.beam.backwall_echo_relative`) also in the near field.

Also modelled: the back wall shadowed by reflectors above it (straight-ray
shadows), back-wall multiples and the double reflection of planar
reflectors (reflector - front surface - reflector, at twice the depth),
a corroded back wall (a smooth thickness map), immersion with an
interface echo and a water path that varies with a tilted part surface,
angle beams (point-like reflectors and their second-leg images in the back
wall), spatially correlated grain noise, electronic noise, encoder drop-outs
and clipping at the digitiser full scale.

Approximations (stated so that nobody mistakes the model for more than it
is): far-field directivity with the near-field length as the least
distance; scalar waves, no mode conversion; in immersion the beam enters
the part normally (the tilt changes only the water path) and beam spread
uses the paraxial equivalent path ``z + w c_water / c_part``; an angle beam
gets no specular return from horizontal surfaces (back wall, laminations).

This module holds the model's state (:class:`_Model`: the tabulated echo
laws, the plane correction, the water path), the impulse histogram that
collects the patches' delayed weights and its rendering into A-scans. How
each kind of surface is cut into patches is in
:mod:`ndtmap.simulate.echo_sources`; :func:`ndtmap.simulate.scan.simulate_scan`
puts the pieces together.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy import signal

from ndtmap.physics import beam
from ndtmap.simulate.pulse import _plane_wavelet, _point_wavelet, _pulse_half_length_us
from ndtmap.simulate.scenario import Material, Part, Probe, ScanPlan

#: Time oversampling of the impulse histogram over the recorded sampling.
_OVERSAMPLE = 4
#: First zero of the Bessel function J1 (the edge of the directivity's main lobe).
_FIRST_ZERO_J1 = 3.8317059702075125


@dataclass
class _Model:
    """Everything the patch-sum engine needs, derived once from the scenario by :func:`_build_model`.

    Beyond the scalars (wavelength, near-field length, time steps), it holds two
    tables: the band-averaged on-axis echo per unit area against distance
    (``s_table_*``, see :meth:`s_law`) and the plane correction against log distance
    (``corr_*``, see :meth:`plane_correction`). Its methods give the water path and
    its paraxial equivalent at scan positions, the patch step and the lateral
    cut-off radius of a patch stencil, and the two wavelets.
    """

    probe: Probe
    material: Material
    part: Part
    lam: float  # wavelength in the part, mm
    a: float  # element radius, mm
    n_mm: float  # near-field length in the part, mm
    c_mm_us: float  # velocity, mm/us
    alpha: float  # attenuation dB/mm
    dt_os: float  # oversampled time step, us
    t0: float  # first recorded time, us
    n_os: int  # oversampled record length
    pad: float  # time margin for pulse tails
    sin_t: float  # sine of the refracted beam angle
    cos_t: float  # cosine of the refracted beam angle
    x_ref: float = 0.0  # first scan position: the water path is `water_path_mm` there
    s_table_z: np.ndarray = field(default_factory=lambda: np.zeros(0))
    s_table_v: np.ndarray = field(default_factory=lambda: np.zeros(0))
    corr_z: np.ndarray = field(default_factory=lambda: np.zeros(0))
    corr_v: np.ndarray = field(default_factory=lambda: np.zeros(0))

    @property
    def immersion(self) -> bool:
        """True for an immersion set-up (a water path), False in contact."""
        return self.part.water_path_mm is not None

    def water_equivalent_mm(self, x: np.ndarray) -> np.ndarray:
        """Paraxial equivalent part distance of the water path at scan positions x."""
        if not self.immersion:
            return np.zeros_like(x)
        return self.water_path_at(x) * self.part.water_velocity_m_s / self.material.velocity_m_s

    def water_path_at(self, x: np.ndarray) -> np.ndarray:
        """Water path in mm at scan positions x (it grows with the part's tilt along scan)."""
        w0 = float(self.part.water_path_mm or 0.0)
        return w0 + (x - self.x_ref) * math.tan(math.radians(self.part.surface_tilt_deg))

    def s_law(self, distance: np.ndarray) -> np.ndarray:
        """Band-averaged <p**2>/(pi a**2): the echo per unit area on the axis."""
        return np.interp(distance, self.s_table_z, self.s_table_v)

    def plane_correction(self, distance: np.ndarray) -> np.ndarray:
        """Factor on an extended surface's patches that makes an infinite plane follow the Lommel law."""
        return np.interp(np.log(np.maximum(distance, 1e-6)), self.corr_z, self.corr_v)

    def stencil_step(self, z_min: float) -> float:
        """Patch side in mm for surfaces from depth z_min on: fine against the element and the beam width."""
        width6 = float(
            beam.beam_width_mm(z_min, self.probe.diameter_mm, self.probe.frequency_mhz, self.material.velocity_m_s)
        )
        return min(self.probe.diameter_mm / 12.0, width6 / 8.0)

    def cutoff_radius(self, z_max: float) -> float:
        """Lateral radius of the first null of the pulse-echo directivity at z_max."""
        z = max(z_max, self.n_mm)
        s = _FIRST_ZERO_J1 * self.lam / (2.0 * math.pi * self.a)
        if s >= 1.0:
            return 10.0 * z
        return z * s / math.sqrt(1.0 - s * s)

    def point_wavelet(self) -> np.ndarray:
        """Wavelet of one patch on the oversampled time step (see :func:`ndtmap.simulate.pulse._point_wavelet`)."""
        return _point_wavelet(self.probe.frequency_mhz, self.probe.bandwidth, self.pad, self.dt_os)

    def plane_wavelet(self) -> np.ndarray:
        """Wavelet of an analytic plane echo on the oversampled time step."""
        return _plane_wavelet(self.probe.frequency_mhz, self.probe.bandwidth, self.pad, self.dt_os)


def _build_model(probe: Probe, material: Material, part: Part, plan: ScanPlan) -> _Model:
    """Derive the model of a scenario: scalars, the on-axis echo table and the plane correction."""
    lam = beam.wavelength_mm(material.velocity_m_s, probe.frequency_mhz)
    a = 0.5 * probe.diameter_mm
    n_mm = a * a / lam
    dt = 1.0 / plan.sampling_mhz
    pad = _pulse_half_length_us(probe.frequency_mhz, probe.bandwidth)
    n_time = plan.time_us().size
    theta = math.radians(probe.beam_angle_deg)
    model = _Model(
        probe=probe,
        material=material,
        part=part,
        lam=lam,
        a=a,
        n_mm=n_mm,
        c_mm_us=material.velocity_m_s * 1e-3,
        alpha=material.attenuation_db_per_mm,
        dt_os=dt / _OVERSAMPLE,
        t0=plan.time_start_us,
        n_os=n_time * _OVERSAMPLE,
        pad=pad,
        sin_t=math.sin(theta),
        cos_t=math.cos(theta),
    )
    model.x_ref = float(plan.scan_mm[0])
    # band-averaged on-axis law, tabulated on a fine grid of distances
    z_max = 4.0 * (part.thickness_mm + (part.water_path_mm or 0.0) * 2.0) / max(model.cos_t, 0.2) + 10 * lam
    zt = np.concatenate([np.linspace(0.0, 4.0 * n_mm, 4001)[:-1], np.geomspace(4.0 * n_mm, z_max + 4 * n_mm, 2000)])
    s = beam.fbh_echo_relative(
        zt, probe.diameter_mm, probe.diameter_mm, probe.frequency_mhz, material.velocity_m_s, bandwidth=probe.bandwidth
    )
    model.s_table_z = zt
    model.s_table_v = s / (math.pi * a * a)
    _calibrate_plane_correction(model, z_max)
    return model


class _Histogram:
    """Accumulates delayed, weighted impulses for a chunk of positions.

    The histogram runs from ``t0 - pad`` to ``t_end + pad`` on the oversampled
    time step, so that echoes just outside the record still contribute their
    pulse tails; :meth:`rendered` crops it back to the record.
    """

    def __init__(self, n_pos: int, model: _Model) -> None:
        self.model = model
        self.n_pos = n_pos
        self.n_pad = int(math.ceil(model.pad / model.dt_os)) + 1
        self.length = model.n_os + 2 * self.n_pad + 2
        self.data = np.zeros(n_pos * self.length)

    def deposit(self, pos: np.ndarray, tau_us: np.ndarray, weight: np.ndarray) -> None:
        """Add impulses of `weight` at delays `tau_us` to the rows `pos`, split linearly between two bins."""
        m = self.model
        u = (tau_us - m.t0) / m.dt_os + self.n_pad
        keep = (u >= 0) & (u < self.length - 2) & (weight != 0)
        if not np.any(keep):
            return
        u, pos, weight = u[keep], pos[keep], weight[keep]
        i0 = np.floor(u).astype(np.int64)
        frac = u - i0
        flat = pos * self.length + i0
        n = self.data.size
        self.data += np.bincount(flat, weights=weight * (1.0 - frac), minlength=n)[:n]
        self.data += np.bincount(flat + 1, weights=weight * frac, minlength=n)[:n]

    def rendered(self, wavelet: np.ndarray) -> np.ndarray:
        """The impulses convolved with `wavelet`, cropped to the record (oversampled), one row per position."""
        rows = self.data.reshape(self.n_pos, self.length)
        out = _render(rows, wavelet)
        return out[:, self.n_pad : self.n_pad + self.model.n_os]


def _render(hist: np.ndarray, wavelet: np.ndarray) -> np.ndarray:
    """Convolve each row of the impulse histogram with the wavelet (centred), oversampled."""
    n = hist.shape[1]
    k = wavelet.size
    nfft = 1 << int(math.ceil(math.log2(n + k)))
    out = np.fft.irfft(np.fft.rfft(hist, nfft, axis=1) * np.fft.rfft(wavelet, nfft)[None, :], nfft, axis=1)
    start = k // 2
    return out[:, start : start + n]


def _stencil(step: float, radius: float) -> tuple[np.ndarray, np.ndarray]:
    """Patch centres on a square lattice, symmetric about the beam axis (no patch on the axis)."""
    n = int(math.ceil(radius / step))
    g = (np.arange(-n, n) + 0.5) * step
    ox, oy = np.meshgrid(g, g, indexing="ij")
    keep = ox**2 + oy**2 <= radius * radius
    return ox[keep], oy[keep]


def _lateral(model: _Model, rho: np.ndarray, along: np.ndarray) -> np.ndarray:
    """Pulse-echo lateral sensitivity at lateral offset rho and distance along the beam (mm)."""
    return beam.lateral_sensitivity(rho, along, model.probe.diameter_mm, model.lam, model.n_mm)


def _calibrate_plane_correction(model: _Model, z_max: float) -> None:
    """Factor that makes the patch sum over an infinite plane follow the Lommel law."""
    depths = np.geomspace(max(0.05 * model.n_mm, 2 * model.lam), z_max + 2 * model.n_mm, 48)
    measured = np.empty_like(depths)
    wavelet = model.point_wavelet()
    for i, z in enumerate(depths):
        step = model.stencil_step(z)
        ox, oy = _stencil(step, model.cutoff_radius(z))
        r = np.hypot(ox, oy)
        dist = np.sqrt(r * r + z * z)
        w = model.s_law(dist) * _lateral(model, r, np.full_like(r, z)) * step * step
        tau = 2.0 * dist / model.c_mm_us
        # render one A-scan around the echo on its own time base
        tloc0 = 2.0 * z / model.c_mm_us - 2 * model.pad
        nloc = int(math.ceil((4 * model.pad + tau.max() - tau.min()) / model.dt_os)) + 8
        u = (tau - tloc0) / model.dt_os
        i0 = np.floor(u).astype(np.int64)
        frac = u - i0
        h = np.bincount(i0, w * (1 - frac), minlength=nloc + 2)[: nloc + 2]
        h += np.bincount(i0 + 1, w * frac, minlength=nloc + 2)[: nloc + 2]
        a = _render(h[None, :], wavelet)[0]
        measured[i] = np.abs(signal.hilbert(a)).max()
    target = beam.backwall_echo_relative(
        depths,
        model.probe.diameter_mm,
        model.probe.frequency_mhz,
        model.material.velocity_m_s,
        bandwidth=model.probe.bandwidth,
    )
    model.corr_z = np.log(depths)
    model.corr_v = target / measured


def _water_delay(model: _Model, px: np.ndarray) -> np.ndarray:
    """Two-way travel time in the water, us, at scan positions px (zero in contact)."""
    if not model.immersion:
        return np.zeros_like(px)
    return 2.0 * model.water_path_at(px) / (model.part.water_velocity_m_s * 1e-3)
