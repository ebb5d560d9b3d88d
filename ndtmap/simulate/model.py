"""Synthetic pulse-echo scans with known truth.

:func:`simulate_scan` builds a scan grid of A-scans from a probe, a material,
a part and a list of reflectors, and stores the truth (true sizes, depths,
the thickness map) in the grid, so that every later result can be checked
against it.

The model
---------
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
"""

from __future__ import annotations

import json
import math
from collections.abc import Sequence
from dataclasses import asdict, dataclass, field
from typing import Any

import numpy as np
import xarray as xr
from scipy import ndimage, signal

from ndtmap._shared.validate import finite_float, float_in_range, nonnegative_float, one_of, positive_float
from ndtmap._version import __version__
from ndtmap.errors import ParameterError
from ndtmap.grid.provenance import with_step
from ndtmap.grid.schema import make_grid
from ndtmap.physics import beam

__all__ = [
    "Probe",
    "Material",
    "Part",
    "WallLoss",
    "FlatBottomHole",
    "SideDrilledHole",
    "PlanarReflector",
    "ScanPlan",
    "Noise",
    "simulate_scan",
    "scan_truth",
    "tone_burst",
]

#: Magnitude of the reflection at the coupled front surface seen from inside
#: the part (steel to a water-like couplant: (46.4 - 1.5) / (46.4 + 1.5) ~ 0.94,
#: less in contact with a thin layer; a round figure is used).
FRONT_SURFACE_REFLECTION = 0.9
_WATER_IMPEDANCE_MRAYL = 1.48


# --------------------------------------------------------------------------
# Scenario description
# --------------------------------------------------------------------------
@dataclass(frozen=True)
class Probe:
    """A circular single-element probe.

    Parameters
    ----------
    frequency_mhz : float
        Centre frequency, MHz.
    diameter_mm : float
        Element diameter, mm.
    bandwidth : float, default 0.6
        Fractional -6 dB bandwidth of the (Gaussian) spectrum.
    beam_angle_deg : float, default 0
        Refracted angle in the part; the beam points towards +scan.
    """

    frequency_mhz: float
    diameter_mm: float
    bandwidth: float = 0.6
    beam_angle_deg: float = 0.0

    def __post_init__(self) -> None:
        positive_float("frequency_mhz", self.frequency_mhz)
        positive_float("diameter_mm", self.diameter_mm)
        float_in_range("bandwidth", self.bandwidth, 0.05, 1.5)
        float_in_range("beam_angle_deg", self.beam_angle_deg, 0.0, 80.0)


@dataclass(frozen=True)
class Material:
    """The part's material.

    Parameters
    ----------
    velocity_m_s : float
        Sound velocity of the wave mode used, m/s.
    attenuation_db_per_mm : float, default 0
        One-way attenuation, dB/mm.
    name : str, default "steel"
    wave_mode : {'longitudinal', 'shear'}, default 'longitudinal'
    density_kg_m3 : float, default 7850
        Used for the acoustic impedance in immersion.
    """

    velocity_m_s: float = 5920.0
    attenuation_db_per_mm: float = 0.0
    name: str = "steel"
    wave_mode: str = "longitudinal"
    density_kg_m3: float = 7850.0

    def __post_init__(self) -> None:
        float_in_range("velocity_m_s", self.velocity_m_s, 100.0, 20000.0)
        float_in_range("attenuation_db_per_mm", self.attenuation_db_per_mm, 0.0, 10.0)
        one_of("wave_mode", self.wave_mode, ("longitudinal", "shear"))
        positive_float("density_kg_m3", self.density_kg_m3)


@dataclass(frozen=True)
class WallLoss:
    """A smooth area of wall loss on the back wall (raised-cosine profile).

    Parameters
    ----------
    scan_mm, index_mm : float
        Centre of the loss, mm.
    radius_mm : float
        Radius at which the loss falls to zero, mm.
    loss_mm : float
        Greatest loss of wall, at the centre, mm.
    """

    scan_mm: float
    index_mm: float
    radius_mm: float
    loss_mm: float

    def __post_init__(self) -> None:
        finite_float("scan_mm", self.scan_mm)
        finite_float("index_mm", self.index_mm)
        positive_float("radius_mm", self.radius_mm)
        nonnegative_float("loss_mm", self.loss_mm)

    def loss_at(self, x: np.ndarray, y: np.ndarray) -> np.ndarray:
        r = np.hypot(x - self.scan_mm, y - self.index_mm)
        shape = 0.5 * (1.0 + np.cos(np.pi * np.minimum(r / self.radius_mm, 1.0)))
        return self.loss_mm * shape


@dataclass(frozen=True)
class Part:
    """A plate-like part with a flat front surface.

    Parameters
    ----------
    thickness_mm : float
        Nominal wall thickness, mm.
    wall_losses : sequence of WallLoss, optional
        Corrosion or erosion of the back wall.
    water_path_mm : float, optional
        Immersion: water path at the first scan position (None: contact).
    surface_tilt_deg : float, default 0
        Immersion: tilt of the part along the scan axis; the water path grows
        by ``tan(tilt)`` per mm of scan.
    water_velocity_m_s : float, default 1483
        Sound velocity in the water, m/s.
    """

    thickness_mm: float
    wall_losses: tuple[WallLoss, ...] = ()
    water_path_mm: float | None = None
    surface_tilt_deg: float = 0.0
    water_velocity_m_s: float = 1483.0

    def __post_init__(self) -> None:
        positive_float("thickness_mm", self.thickness_mm)
        object.__setattr__(self, "wall_losses", tuple(self.wall_losses))
        if self.water_path_mm is not None:
            positive_float("water_path_mm", self.water_path_mm)
        float_in_range("surface_tilt_deg", self.surface_tilt_deg, -20.0, 20.0)
        positive_float("water_velocity_m_s", self.water_velocity_m_s)
        for w in self.wall_losses:
            if not isinstance(w, WallLoss):
                raise ParameterError(f"`wall_losses` must hold WallLoss items, got {w!r}")
            if w.loss_mm >= self.thickness_mm:
                raise ParameterError(
                    f"a wall loss of {w.loss_mm:g} mm is not less than the thickness {self.thickness_mm:g} mm"
                )

    def thickness_at(self, x: np.ndarray, y: np.ndarray) -> np.ndarray:
        """Remaining wall thickness in mm at scan/index positions."""
        t = np.full(np.broadcast(x, y).shape, float(self.thickness_mm))
        for loss in self.wall_losses:
            t = t - loss.loss_at(x, y)
        return t


@dataclass(frozen=True)
class FlatBottomHole:
    """A flat-bottomed hole drilled from the back wall (a disc reflector).

    Parameters
    ----------
    scan_mm, index_mm : float
        Centre of the hole, mm.
    depth_mm : float
        Depth of the hole bottom below the front surface, mm.
    diameter_mm : float
        Hole diameter, mm.
    label : str, optional
    """

    scan_mm: float
    index_mm: float
    depth_mm: float
    diameter_mm: float
    label: str = ""

    @property
    def bbox(self) -> tuple[float, float, float, float]:
        r = 0.5 * self.diameter_mm
        return self.scan_mm - r, self.scan_mm + r, self.index_mm - r, self.index_mm + r

    def covers(self, x: np.ndarray, y: np.ndarray) -> np.ndarray:
        r = 0.5 * self.diameter_mm
        return (x - self.scan_mm) ** 2 + (y - self.index_mm) ** 2 <= r * r

    def truth(self) -> dict[str, Any]:
        return {
            "type": "flat_bottom_hole",
            "label": self.label,
            "scan_mm": self.scan_mm,
            "index_mm": self.index_mm,
            "depth_mm": self.depth_mm,
            "diameter_mm": self.diameter_mm,
            "length_scan_mm": self.diameter_mm,
            "length_index_mm": self.diameter_mm,
            "area_mm2": math.pi * self.diameter_mm**2 / 4.0,
        }


@dataclass(frozen=True)
class SideDrilledHole:
    """A side-drilled hole: a cylinder parallel to the surface.

    Parameters
    ----------
    depth_mm : float
        Depth of the hole axis, mm.
    diameter_mm : float
        Hole diameter, mm.
    start_mm, end_mm : (float, float)
        Plan-view end points of the hole axis as (scan, index), mm.
    label : str, optional
    """

    depth_mm: float
    diameter_mm: float
    start_mm: tuple[float, float]
    end_mm: tuple[float, float]
    label: str = ""

    @property
    def bbox(self) -> tuple[float, float, float, float]:
        (x0, y0), (x1, y1) = self.start_mm, self.end_mm
        r = 0.5 * self.diameter_mm
        return min(x0, x1) - r, max(x0, x1) + r, min(y0, y1) - r, max(y0, y1) + r

    def covers(self, x: np.ndarray, y: np.ndarray) -> np.ndarray:
        (x0, y0), (x1, y1) = self.start_mm, self.end_mm
        dx, dy = x1 - x0, y1 - y0
        length2 = dx * dx + dy * dy
        t = np.clip(((x - x0) * dx + (y - y0) * dy) / length2, 0.0, 1.0)
        return np.hypot(x - (x0 + t * dx), y - (y0 + t * dy)) <= 0.5 * self.diameter_mm

    def truth(self) -> dict[str, Any]:
        (x0, y0), (x1, y1) = self.start_mm, self.end_mm
        return {
            "type": "side_drilled_hole",
            "label": self.label,
            "depth_mm": self.depth_mm,
            "diameter_mm": self.diameter_mm,
            "start_mm": list(self.start_mm),
            "end_mm": list(self.end_mm),
            "length_mm": math.hypot(x1 - x0, y1 - y0),
            "scan_mm": 0.5 * (x0 + x1),
            "index_mm": 0.5 * (y0 + y1),
        }


@dataclass(frozen=True)
class PlanarReflector:
    """A planar reflector parallel to the surface (e.g. a lamination).

    Parameters
    ----------
    depth_mm : float
        Depth below the front surface, mm.
    outline_mm : sequence of (scan, index)
        Polygon of the reflector in plan view, mm (at least 3 vertices).
    reflectivity : float, default -1
        Reflection coefficient (-1: a gap filled with air).
    label : str, optional
    """

    depth_mm: float
    outline_mm: tuple[tuple[float, float], ...]
    reflectivity: float = -1.0
    label: str = ""

    def __post_init__(self) -> None:
        pts = tuple((float(a), float(b)) for a, b in self.outline_mm)
        if len(pts) < 3:
            raise ParameterError(f"`outline_mm` needs at least 3 vertices, got {len(pts)}")
        object.__setattr__(self, "outline_mm", pts)
        float_in_range("reflectivity", self.reflectivity, -1.0, 1.0)

    @classmethod
    def rectangle(
        cls,
        scan_mm: tuple[float, float],
        index_mm: tuple[float, float],
        depth_mm: float,
        *,
        reflectivity: float = -1.0,
        label: str = "",
    ) -> PlanarReflector:
        """A rectangle with sides along the scan and index axes."""
        (x0, x1), (y0, y1) = sorted(scan_mm), sorted(index_mm)
        return cls(depth_mm, ((x0, y0), (x1, y0), (x1, y1), (x0, y1)), reflectivity, label)

    @classmethod
    def ellipse(
        cls,
        centre_mm: tuple[float, float],
        semi_axes_mm: tuple[float, float],
        depth_mm: float,
        *,
        vertices: int = 96,
        reflectivity: float = -1.0,
        label: str = "",
    ) -> PlanarReflector:
        """An ellipse with axes along scan and index (a polygon of `vertices`)."""
        phi = np.linspace(0.0, 2.0 * np.pi, vertices, endpoint=False)
        pts = tuple(
            (centre_mm[0] + semi_axes_mm[0] * math.cos(p), centre_mm[1] + semi_axes_mm[1] * math.sin(p)) for p in phi
        )
        return cls(depth_mm, pts, reflectivity, label)

    @property
    def bbox(self) -> tuple[float, float, float, float]:
        xs = [p[0] for p in self.outline_mm]
        ys = [p[1] for p in self.outline_mm]
        return min(xs), max(xs), min(ys), max(ys)

    def covers(self, x: np.ndarray, y: np.ndarray) -> np.ndarray:
        """Even-odd point-in-polygon test, vectorised over points."""
        x, y = np.broadcast_arrays(np.asarray(x, dtype=np.float64), np.asarray(y, dtype=np.float64))
        x0, x1, y0, y1 = self.bbox
        cand = (x >= x0) & (x <= x1) & (y >= y0) & (y <= y1)
        inside = np.zeros(x.shape, dtype=bool)
        if not cand.any():
            return inside
        xc, yc = x[cand], y[cand]
        hit = np.zeros(xc.shape, dtype=bool)
        pts = self.outline_mm
        n = len(pts)
        for i in range(n):
            xa, ya = pts[i]
            xb, yb = pts[(i + 1) % n]
            if ya == yb:
                continue
            crosses = (ya > yc) != (yb > yc)
            x_at = xa + (yc - ya) * (xb - xa) / (yb - ya)
            hit ^= crosses & (xc < x_at)
        inside[cand] = hit
        return inside

    def truth(self) -> dict[str, Any]:
        xs = np.array([p[0] for p in self.outline_mm])
        ys = np.array([p[1] for p in self.outline_mm])
        area = 0.5 * abs(float(np.dot(xs, np.roll(ys, -1)) - np.dot(ys, np.roll(xs, -1))))
        return {
            "type": "planar",
            "label": self.label,
            "depth_mm": self.depth_mm,
            "outline_mm": [list(p) for p in self.outline_mm],
            "scan_range_mm": [float(xs.min()), float(xs.max())],
            "index_range_mm": [float(ys.min()), float(ys.max())],
            "length_scan_mm": float(xs.max() - xs.min()),
            "length_index_mm": float(ys.max() - ys.min()),
            "area_mm2": area,
            "scan_mm": float(0.5 * (xs.min() + xs.max())),
            "index_mm": float(0.5 * (ys.min() + ys.max())),
            "reflectivity": self.reflectivity,
        }


Reflector = FlatBottomHole | SideDrilledHole | PlanarReflector


@dataclass(frozen=True)
class ScanPlan:
    """Where the probe goes and what is recorded.

    Parameters
    ----------
    scan_mm, index_mm : sequence of float
        Probe positions (beam index point) along each axis, mm, increasing.
    time_start_us, time_end_us : float
        Recorded time window, us (contact: from pulse entry into the part;
        immersion: from the pulse leaving the probe).
    sampling_mhz : float, default 50
        Digitiser sampling frequency, MHz.
    """

    scan_mm: tuple[float, ...]
    index_mm: tuple[float, ...]
    time_start_us: float
    time_end_us: float
    sampling_mhz: float = 50.0

    def __post_init__(self) -> None:
        for name in ("scan_mm", "index_mm"):
            values = np.asarray(getattr(self, name), dtype=np.float64).ravel()
            if values.size == 0 or not np.all(np.isfinite(values)) or np.any(np.diff(values) <= 0):
                raise ParameterError(f"`{name}` must be finite, strictly increasing positions, got {values!r}")
            object.__setattr__(self, name, tuple(values.tolist()))
        t0 = finite_float("time_start_us", self.time_start_us)
        t1 = finite_float("time_end_us", self.time_end_us)
        if not t1 > t0:
            raise ParameterError(f"`time_end_us` ({t1:g}) must be after `time_start_us` ({t0:g})")
        positive_float("sampling_mhz", self.sampling_mhz)

    @classmethod
    def raster(
        cls,
        scan_range_mm: tuple[float, float],
        index_range_mm: tuple[float, float],
        step_mm: float | tuple[float, float],
        time_range_us: tuple[float, float],
        sampling_mhz: float = 50.0,
    ) -> ScanPlan:
        """A regular raster; end points included when they fall on the step."""
        steps = (step_mm, step_mm) if np.isscalar(step_mm) else tuple(step_mm)
        axes = []
        for (lo, hi), st in zip((scan_range_mm, index_range_mm), steps, strict=True):
            st = positive_float("step_mm", st)
            n = int(math.floor((hi - lo) / st + 1e-9)) + 1
            axes.append(tuple((lo + st * np.arange(n)).tolist()))
        return cls(axes[0], axes[1], time_range_us[0], time_range_us[1], sampling_mhz)

    def time_us(self) -> np.ndarray:
        dt = 1.0 / self.sampling_mhz
        n = int(math.floor((self.time_end_us - self.time_start_us) / dt + 1e-9)) + 1
        return self.time_start_us + dt * np.arange(n)


@dataclass(frozen=True)
class Noise:
    """Noise and acquisition faults.

    Parameters
    ----------
    grain_fsh : float, default 0
        RMS of grain (structural) noise just below the surface, %FSH; it decays
        with attenuation and is correlated over about a beam width.
    electronic_fsh : float, default 0
        RMS of electronic noise, %FSH (in the probe's band).
    dropout_fraction : float, default 0
        Share of A-scans lost to encoder drop-outs, in short runs along scan.
    """

    grain_fsh: float = 0.0
    electronic_fsh: float = 0.0
    dropout_fraction: float = 0.0

    def __post_init__(self) -> None:
        nonnegative_float("grain_fsh", self.grain_fsh)
        nonnegative_float("electronic_fsh", self.electronic_fsh)
        float_in_range("dropout_fraction", self.dropout_fraction, 0.0, 0.5)


# --------------------------------------------------------------------------
# Pulse
# --------------------------------------------------------------------------
def tone_burst(t_us: Any, frequency_mhz: float, bandwidth: float, *, quadrature: bool = False) -> np.ndarray:
    """Gaussian-windowed tone burst centred on ``t = 0`` with unit envelope peak.

    Parameters
    ----------
    t_us : array_like
        Times in us.
    frequency_mhz : float
        Centre frequency, MHz.
    bandwidth : float
        Fractional -6 dB bandwidth of the (Gaussian) amplitude spectrum.
    quadrature : bool, default False
        Return the sine (90 degree) burst instead of the cosine one.

    Returns
    -------
    numpy.ndarray

    Examples
    --------
    >>> float(tone_burst(0.0, 5.0, 0.6))
    1.0
    """
    f0 = positive_float("frequency_mhz", frequency_mhz)
    sigma_f = float(bandwidth) * f0 / (2.0 * math.sqrt(2.0 * math.log(2.0)))
    sigma_t = 1.0 / (2.0 * math.pi * sigma_f)
    t = np.asarray(t_us, dtype=np.float64)
    carrier = np.sin(2 * np.pi * f0 * t) if quadrature else np.cos(2 * np.pi * f0 * t)
    return np.exp(-0.5 * (t / sigma_t) ** 2) * carrier


def _pulse_half_length_us(frequency_mhz: float, bandwidth: float) -> float:
    sigma_f = bandwidth * frequency_mhz / (2.0 * math.sqrt(2.0 * math.log(2.0)))
    return 4.0 / (2.0 * math.pi * sigma_f)  # 4 sigma_t: envelope below 3.4e-4


# --------------------------------------------------------------------------
# The patch-sum engine
# --------------------------------------------------------------------------
_OVERSAMPLE = 4
_FIRST_ZERO_J1 = 3.8317059702075125


@dataclass
class _Model:
    """Everything the engine needs, derived once from the scenario."""

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
    sin_t: float
    cos_t: float
    x_ref: float = 0.0  # first scan position: the water path is `water_path_mm` there
    s_table_z: np.ndarray = field(default_factory=lambda: np.zeros(0))
    s_table_v: np.ndarray = field(default_factory=lambda: np.zeros(0))
    corr_z: np.ndarray = field(default_factory=lambda: np.zeros(0))
    corr_v: np.ndarray = field(default_factory=lambda: np.zeros(0))

    @property
    def immersion(self) -> bool:
        return self.part.water_path_mm is not None

    def water_equivalent_mm(self, x: np.ndarray) -> np.ndarray:
        """Paraxial equivalent part distance of the water path at scan positions x."""
        if not self.immersion:
            return np.zeros_like(x)
        return self.water_path_at(x) * self.part.water_velocity_m_s / self.material.velocity_m_s

    def water_path_at(self, x: np.ndarray) -> np.ndarray:
        w0 = float(self.part.water_path_mm or 0.0)
        return w0 + (x - self.x_ref) * math.tan(math.radians(self.part.surface_tilt_deg))

    def s_law(self, distance: np.ndarray) -> np.ndarray:
        """Band-averaged <p**2>/(pi a**2): the echo per unit area on the axis."""
        return np.interp(distance, self.s_table_z, self.s_table_v)

    def plane_correction(self, distance: np.ndarray) -> np.ndarray:
        return np.interp(np.log(np.maximum(distance, 1e-6)), self.corr_z, self.corr_v)

    def stencil_step(self, z_min: float) -> float:
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


def _build_model(probe: Probe, material: Material, part: Part, plan: ScanPlan) -> _Model:
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
        rows = self.data.reshape(self.n_pos, self.length)
        out = _render(rows, wavelet)
        return out[:, self.n_pad : self.n_pad + self.model.n_os]


def _point_wavelet(model: _Model) -> np.ndarray:
    """Wavelet of a single small patch: the time derivative of the pulse, unit envelope peak."""
    t = _centred_times(model.pad, model.dt_os)
    p = tone_burst(t, model.probe.frequency_mhz, model.probe.bandwidth)
    h = np.gradient(p, model.dt_os)
    env = np.abs(signal.hilbert(h))
    return h / env.max()


def _plane_wavelet(model: _Model) -> np.ndarray:
    """Wavelet of a plane echo computed analytically (the interface): the pulse itself."""
    t = _centred_times(model.pad, model.dt_os)
    return -tone_burst(t, model.probe.frequency_mhz, model.probe.bandwidth)


def _centred_times(half: float, dt: float) -> np.ndarray:
    """Sample times -n dt .. n dt with n dt >= half: t = 0 falls exactly on the centre sample."""
    n = int(math.ceil(half / dt))
    return np.arange(-n, n + 1) * dt


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
    return beam.lateral_sensitivity(rho, along, model.probe.diameter_mm, model.lam, model.n_mm)


def _calibrate_plane_correction(model: _Model, z_max: float) -> None:
    """Factor that makes the patch sum over an infinite plane follow the Lommel law."""
    depths = np.geomspace(max(0.05 * model.n_mm, 2 * model.lam), z_max + 2 * model.n_mm, 48)
    measured = np.empty_like(depths)
    wavelet = _point_wavelet(model)
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


# --------------------------------------------------------------------------
# Sources of echoes
# --------------------------------------------------------------------------
_SUB = (np.arange(3) - 1.0) / 3.0  # 3 x 3 sub-points per patch for fractional coverage


def _coverage(covers, x: np.ndarray, y: np.ndarray, step: float | None, bbox=None) -> np.ndarray:
    """Fraction of each patch (centre x, y, side `step`) that `covers` says is inside.

    Patches whose centre lies farther than a patch from the reflector's bounding box
    are outside; the others are sampled on 3 x 3 sub-points.
    """
    x, y = np.broadcast_arrays(x, y)
    if step is None:
        return covers(x, y).astype(np.float64)
    total = np.zeros(x.shape)
    if bbox is not None:
        x0, x1, y0, y1 = bbox
        cand = (x >= x0 - step) & (x <= x1 + step) & (y >= y0 - step) & (y <= y1 + step)
        if not cand.any():
            return total
        xc, yc = x[cand], y[cand]
    else:
        cand, xc, yc = None, x, y
    acc = np.zeros(xc.shape)
    for sx in _SUB:
        for sy in _SUB:
            acc += covers(xc + sx * step, yc + sy * step)
    acc /= _SUB.size**2
    if cand is None:
        return acc
    total[cand] = acc
    return total


def _transmitted(qx, qy, qz, px, py, shadowers, step: float | None = None) -> np.ndarray:
    """Fraction of each patch that the straight ray from the probe (px, py, 0) reaches past shadowers."""
    clear = np.ones(np.broadcast(qx, qy, qz, px, py).shape)
    for refl in shadowers:
        zs = refl.depth_mm
        above = qz > zs + 1e-6
        if not np.any(above):
            continue
        ratio = np.where(above, zs / np.maximum(qz, 1e-9), 0.0)
        cx = px + (qx - px) * ratio
        cy = py + (qy - py) * ratio
        scaled = None if step is None else step * float(np.max(ratio))
        clear *= 1.0 - np.where(above, _coverage(refl.covers, cx, cy, scaled, refl.bbox), 0.0)
    return clear


def _extended_layer(
    hist: _Histogram,
    px: np.ndarray,
    py: np.ndarray,
    model: _Model,
    *,
    covers,
    bbox=None,
    depth_fn,
    z_range: tuple[float, float],
    gain: float,
    shadowers: Sequence[Reflector],
    multiple: int = 1,
    covers_fraction: float = 1.0,
    full_cover: bool = False,
) -> None:
    """Deposit the echo of an extended horizontal surface for each probe position."""
    z_lo, z_hi = z_range
    weq_all = model.water_equivalent_mm(px)
    step = model.stencil_step(z_lo * multiple + float(weq_all.min()))
    ox, oy = _stencil(step, model.cutoff_radius(z_hi * multiple + float(weq_all.max())))
    block = max(1, int(2_000_000 // max(ox.size, 1)))
    for b0 in range(0, px.size, block):
        sel = slice(b0, min(b0 + block, px.size))
        bx, by, weq = px[sel], py[sel], weq_all[sel]
        r = np.hypot(ox, oy)[None, :]
        qx = bx[:, None] + ox[None, :]
        qy = by[:, None] + oy[None, :]
        z = depth_fn(qx, qy) * np.ones_like(qx)
        zm = z * multiple
        if full_cover:
            frac = np.ones(qx.shape)
        else:
            frac = _coverage(
                covers,
                bx[:, None] + ox[None, :] * covers_fraction,
                by[:, None] + oy[None, :] * covers_fraction,
                step * covers_fraction,
                bbox,
            )
        frac = frac * _transmitted(qx, qy, z, bx[:, None], by[:, None], shadowers, step)
        inside = frac > 0
        pos = np.broadcast_to(np.arange(sel.start, sel.stop)[:, None], qx.shape)
        along = zm + weq[:, None]
        dist = np.sqrt(r * r + along * along)
        path = np.sqrt(r * r + zm * zm)
        w = (
            gain
            * model.s_law(dist)
            * _lateral(model, np.broadcast_to(r, qx.shape), along)
            * model.plane_correction(along)
            * (step * step)
            * frac
            * 10.0 ** (-2.0 * model.alpha * path / 20.0)
        )
        tau = 2.0 * path / model.c_mm_us + _water_delay(model, bx)[:, None]
        hist.deposit(pos[inside], tau[inside], w[inside])


def _water_delay(model: _Model, px: np.ndarray) -> np.ndarray:
    if not model.immersion:
        return np.zeros_like(px)
    return 2.0 * model.water_path_at(px) / (model.part.water_velocity_m_s * 1e-3)


def _point_patches(refl: Reflector, model: _Model) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Sample a compact reflector as patches: x, y, depth, area (mm^2 or mm^2-equivalent)."""
    h = model.stencil_step(refl.depth_mm)
    if model.sin_t > 0.05:
        h = min(h, model.lam / (6.0 * model.sin_t))
    if isinstance(refl, FlatBottomHole):
        r = 0.5 * refl.diameter_mm
        hs = min(h, refl.diameter_mm / 8.0)
        g = np.arange(-r, r + hs / 2, hs)
        gx, gy = np.meshgrid(g, g, indexing="ij")
        keep = gx**2 + gy**2 <= r * r
        gx, gy = gx[keep], gy[keep]
        area = np.full(gx.size, math.pi * r * r / gx.size)
        return gx + refl.scan_mm, gy + refl.index_mm, np.full(gx.size, refl.depth_mm), area
    if isinstance(refl, SideDrilledHole):
        (x0, y0), (x1, y1) = refl.start_mm, refl.end_mm
        length = math.hypot(x1 - x0, y1 - y0)
        n = max(2, int(math.ceil(length / h)) + 1)
        t = np.linspace(0.0, 1.0, n)
        # effective specular width across a cylinder of radius rho: |int exp(i k x^2/rho) dx| = sqrt(lambda rho / 2)
        # (Kirchhoff stationary-phase estimate)
        width = math.sqrt(model.lam * 0.5 * refl.diameter_mm / 2.0)
        area = np.full(n, width * length / (n - 1))
        area[[0, -1]] *= 0.5
        return x0 + t * (x1 - x0), y0 + t * (y1 - y0), np.full(n, refl.depth_mm), area
    raise TypeError(type(refl))  # pragma: no cover


def _point_layer(
    hist: _Histogram,
    px: np.ndarray,
    py: np.ndarray,
    model: _Model,
    patches: tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray],
    *,
    gain: float,
    shadowers: Sequence[Reflector],
) -> None:
    qx, qy, qz, area = patches
    dx = qx[None, :] - px[:, None]
    dy = qy[None, :] - py[:, None]
    dz = np.broadcast_to(qz[None, :], dx.shape)
    path = np.sqrt(dx * dx + dy * dy + dz * dz)
    along_part = dx * model.sin_t + dz * model.cos_t
    rho = np.sqrt(np.maximum(path * path - along_part * along_part, 0.0))
    weq = model.water_equivalent_mm(px)[:, None]
    along = along_part + weq
    dist = path + weq
    front = along_part > 0
    clear = _transmitted(qx[None, :], qy[None, :], dz, px[:, None], py[:, None], shadowers)
    w = (
        gain
        * model.s_law(dist)
        * _lateral(model, rho, along)
        * area[None, :]
        * clear
        * 10.0 ** (-2.0 * model.alpha * path / 20.0)
    )
    keep = front & (clear > 0)
    pos = np.broadcast_to(np.arange(px.size)[:, None], dx.shape)
    tau = 2.0 * path / model.c_mm_us + _water_delay(model, px)[:, None]
    hist.deposit(pos[keep], tau[keep], w[keep])


# --------------------------------------------------------------------------
# The simulator
# --------------------------------------------------------------------------
def simulate_scan(
    probe: Probe,
    material: Material,
    part: Part,
    reflectors: Sequence[Reflector],
    plan: ScanPlan,
    *,
    noise: Noise | None = None,
    backwall_fsh: float | None = 80.0,
    gain_db: float | None = None,
    signal_kind: str = "rf",
    dtype: str = "float32",
    full_scale_fsh: float = 100.0,
    repeat_echoes: bool = True,
    seed: int = 0,
    attrs: dict[str, Any] | None = None,
    chunk_positions: int = 256,
) -> xr.Dataset:
    """Simulate an encoded pulse-echo scan of a part with known reflectors.

    Parameters
    ----------
    probe : Probe
        The probe (frequency, element diameter, bandwidth, beam angle).
    material : Material
        Velocity and attenuation of the part.
    part : Part
        Thickness, wall loss, immersion set-up.
    reflectors : sequence of FlatBottomHole, SideDrilledHole, PlanarReflector
        The reflectors; shallower ones shadow deeper ones and the back wall.
    plan : ScanPlan
        Probe positions and recorded time window.
    noise : Noise, optional
        Grain and electronic noise, encoder drop-outs (none by default).
    backwall_fsh : float or None, default 80
        Set the gain so that the nominal back-wall echo (flat wall, nominal
        thickness, straight beam) peaks at this level in %FSH. Ignored when
        `gain_db` is given; for angle beams the gain is set so that an infinite
        plane at zero distance would give 100 %FSH, plus `gain_db`.
    gain_db : float, optional
        Gain relative to that 100 %FSH plane-at-zero reference, dB.
    signal_kind : {'rf', 'rectified'}, default 'rf'
        Record the RF signal or its full-wave rectification.
    dtype : {'float32', 'int16'}, default 'float32'
        Sample type; int16 uses ``fsh_per_count = full_scale_fsh / 32767`` and
        marks drop-outs in a ``missing`` variable.
    full_scale_fsh : float, default 100
        Digitiser full scale; larger amplitudes are clipped.
    repeat_echoes : bool, default True
        Add back-wall multiples and double reflections of planar reflectors.
    seed : int, default 0
        Seed of the random generator (noise, drop-outs): same seed, same grid.
    attrs : dict, optional
        Further global attributes (``part_id``, ``material``, ...).
    chunk_positions : int, default 256
        Probe positions processed at once (memory vs. speed).

    Returns
    -------
    xarray.Dataset
        A valid scan grid with the truth in attrs ``truth`` (JSON) and the
        variable ``truth_thickness_mm(scan, index)``.

    Raises
    ------
    ParameterError
        For reflectors outside the part, an angle beam in immersion, or
        other impossible set-ups.

    Examples
    --------
    >>> plan = ScanPlan.raster((0, 4), (0, 2), 2.0, (0, 10), sampling_mhz=50)
    >>> g = simulate_scan(Probe(5, 10), Material(), Part(20.0), [], plan)
    >>> dict(g.sizes)
    {'scan': 3, 'index': 2, 'time': 501}
    >>> round(float(abs(g.ascan).max()), 0)  # the back-wall echo, set to 80 %FSH
    80.0
    """
    noise = noise or Noise()
    one_of("signal_kind", signal_kind, ("rf", "rectified"))
    one_of("dtype", dtype, ("float32", "int16"))
    positive_float("full_scale_fsh", full_scale_fsh)
    reflectors = list(reflectors)
    for refl in reflectors:
        if not isinstance(refl, FlatBottomHole | SideDrilledHole | PlanarReflector):
            raise ParameterError(
                f"`reflectors` must hold FlatBottomHole, SideDrilledHole or PlanarReflector, got {refl!r}"
            )
        if not 0.0 < refl.depth_mm < part.thickness_mm:
            raise ParameterError(
                f"reflector {refl.label or refl!r} at depth {refl.depth_mm:g} mm lies outside the part "
                f"(thickness {part.thickness_mm:g} mm)"
            )
    angle = probe.beam_angle_deg > 0.5
    if angle and part.water_path_mm is not None:
        raise ParameterError("angle beams in immersion are not simulated; use contact (water_path_mm=None)")

    model = _build_model(probe, material, part, plan)
    scan = np.asarray(plan.scan_mm)
    index = np.asarray(plan.index_mm)
    time = plan.time_us()
    n_scan, n_index, n_time = scan.size, index.size, time.size
    px_all, py_all = (a.ravel() for a in np.meshgrid(scan, index, indexing="ij"))

    transmission = 1.0
    interface_r = 0.0
    front_r = FRONT_SURFACE_REFLECTION
    if part.water_path_mm is not None:
        z_part = material.velocity_m_s * material.density_kg_m3 * 1e-6
        z_w = _WATER_IMPEDANCE_MRAYL
        interface_r = (z_part - z_w) / (z_part + z_w)
        transmission = 4.0 * z_part * z_w / (z_part + z_w) ** 2
        front_r = abs(interface_r)

    # amplitude scale C: %FSH of an infinite plane at zero distance
    if gain_db is not None:
        c_fsh = 100.0 * 10.0 ** (finite_float("gain_db", gain_db) / 20.0)
    elif backwall_fsh is not None and not angle:
        # one reference A-scan of the flat, sound plate at the first position: the gain puts its
        # first back-wall echo (highest sample of |A|) at `backwall_fsh`
        target = positive_float("backwall_fsh", backwall_fsh)
        ref_part = Part(part.thickness_mm, (), part.water_path_mm, part.surface_tilt_deg, part.water_velocity_m_s)
        px0, py0 = np.array([scan[0]]), np.array([index[0]])
        ref = _Histogram(1, model)
        _extended_layer(
            ref,
            px0,
            py0,
            model,
            covers=lambda x, y: np.ones(np.broadcast(x, y).shape, dtype=bool),
            depth_fn=ref_part.thickness_at,
            z_range=(part.thickness_mm, part.thickness_mm),
            gain=transmission,
            shadowers=[],
            full_cover=True,
        )
        a_ref = ref.rendered(_point_wavelet(model))[0, ::_OVERSAMPLE]
        t_bw = 2.0 * part.thickness_mm / model.c_mm_us + float(_water_delay(model, px0)[0])
        near = np.abs(time - t_bw) <= 2.0 * model.pad
        if not np.any(near):
            raise ParameterError(
                f"`backwall_fsh` needs the back-wall echo (at {t_bw:.2f} us) inside the record "
                f"[{plan.time_start_us:g}, {plan.time_end_us:g}] us; give `gain_db` instead"
            )
        c_fsh = target / float(np.abs(a_ref[near]).max())
    else:
        c_fsh = 100.0
    gain_used_db = 20.0 * math.log10(c_fsh / 100.0)

    planars = [r for r in reflectors if isinstance(r, PlanarReflector)]
    compact = [r for r in reflectors if not isinstance(r, PlanarReflector)]
    fine_x = np.linspace(scan[0] - 20.0, scan[-1] + 20.0, 4 * scan.size + 41)
    fine_y = np.linspace(index[0] - 20.0, index[-1] + 20.0, 4 * index.size + 41)
    thick_min = float(part.thickness_at(fine_x[:, None], fine_y[None, :]).min())
    if thick_min <= 2.0 * model.lam:
        raise ParameterError(
            f"the wall losses leave only {thick_min:.2f} mm of wall somewhere in the scanned area; "
            "the simulator needs at least two wavelengths"
        )
    for refl in reflectors:
        if refl.depth_mm >= thick_min:
            raise ParameterError(
                f"reflector {refl.label or refl!r} at {refl.depth_mm:g} mm is not above the thinnest wall "
                f"({thick_min:.2f} mm)"
            )

    point_wavelet = _point_wavelet(model)
    plane_wavelet = _plane_wavelet(model)
    patches = {id(r): _point_patches(r, model) for r in compact}
    # second-leg images (angle beams): reflectors mirrored in the back wall
    images = []
    if angle:
        for r in compact:
            x, y, z, area = patches[id(r)]
            images.append((r, (x, y, 2.0 * part.thickness_mm - z, area)))

    rf = np.empty((n_scan * n_index, n_time), dtype=np.float64)
    for start in range(0, px_all.size, chunk_positions):
        stop = min(start + chunk_positions, px_all.size)
        px, py = px_all[start:stop], py_all[start:stop]
        hist = _Histogram(stop - start, model)
        plane_hist = _Histogram(stop - start, model)
        if not angle:
            bw_gain = -1.0 * c_fsh * transmission
            _extended_layer(
                hist,
                px,
                py,
                model,
                covers=lambda x, y: np.ones(np.broadcast(x, y).shape, dtype=bool),
                depth_fn=part.thickness_at,
                z_range=(thick_min, part.thickness_mm),
                gain=bw_gain,
                shadowers=reflectors,
                full_cover=True,
            )
            if repeat_echoes:
                for k in (2, 3, 4):
                    if (
                        2.0 * k * thick_min / model.c_mm_us + _water_delay(model, px).min()
                        > plan.time_end_us + model.pad
                    ):
                        break
                    _extended_layer(
                        hist,
                        px,
                        py,
                        model,
                        covers=lambda x, y: np.ones(np.broadcast(x, y).shape, dtype=bool),
                        depth_fn=part.thickness_at,
                        z_range=(thick_min, part.thickness_mm),
                        gain=bw_gain * (front_r ** (k - 1)),
                        shadowers=reflectors,
                        multiple=k,
                        full_cover=True,
                    )
            for refl in planars:
                above = [s for s in reflectors if s is not refl and s.depth_mm < refl.depth_mm]
                layer = {
                    "covers": refl.covers,
                    "bbox": refl.bbox,
                    "depth_fn": lambda x, y, d=refl.depth_mm: d,
                    "z_range": (refl.depth_mm, refl.depth_mm),
                    "shadowers": above,
                }
                _extended_layer(hist, px, py, model, gain=c_fsh * transmission * refl.reflectivity, **layer)
                if repeat_echoes:  # reflector - front surface - reflector: the image at twice the depth
                    _extended_layer(
                        hist, px, py, model, gain=c_fsh * transmission * refl.reflectivity**2 * (-front_r),
                        multiple=2, covers_fraction=0.5, **layer,
                    )
        for refl in compact:
            above = [s for s in planars if s.depth_mm < refl.depth_mm]
            _point_layer(hist, px, py, model, patches[id(refl)], gain=-c_fsh * transmission, shadowers=above)
        for _refl, img in images:
            _point_layer(hist, px, py, model, img, gain=c_fsh * transmission, shadowers=[])
        if part.water_path_mm is not None:
            w_path = model.water_path_at(px)
            amp = (
                c_fsh
                * interface_r
                * beam.backwall_echo_relative(
                    w_path, probe.diameter_mm, probe.frequency_mhz, part.water_velocity_m_s, bandwidth=probe.bandwidth
                )
            )
            plane_hist.deposit(np.arange(px.size), _water_delay(model, px), -amp)
        a = hist.rendered(point_wavelet) + plane_hist.rendered(plane_wavelet)
        rf[start:stop] = a[:, ::_OVERSAMPLE][:, :n_time]
    rf = rf.reshape(n_scan, n_index, n_time)

    rng = np.random.default_rng(seed)
    if noise.grain_fsh > 0:
        rf += _grain_noise(rng, model, plan, part, scan, index, time, noise.grain_fsh)
    if noise.electronic_fsh > 0:
        rf += _band_noise(rng, model, rf.shape, time) * noise.electronic_fsh
    if signal_kind == "rectified":
        rf = np.abs(rf)
    rf = np.clip(rf, -full_scale_fsh, full_scale_fsh)

    dropout = _dropouts(rng, n_scan, n_index, noise.dropout_fraction)
    grid_attrs: dict[str, Any] = {
        "wave_mode": material.wave_mode,
        "part_thickness_mm": part.thickness_mm,
        "material": material.name,
        "gain_db": round(gain_used_db, 3),
        "attenuation_db_per_mm": material.attenuation_db_per_mm,
        "digitiser_full_scale_fsh": full_scale_fsh,
        "zero_offset_us": 0.0,
        "probe_bandwidth": probe.bandwidth,
        "sampling_mhz": plan.sampling_mhz,
    }
    if part.water_path_mm is not None:
        grid_attrs["water_path_mm"] = part.water_path_mm
        grid_attrs["water_velocity_m_s"] = part.water_velocity_m_s
    grid_attrs.update(attrs or {})
    fsh_per_count = None
    if dtype == "int16":
        fsh_per_count = full_scale_fsh / 32767.0
        data = np.round(rf / fsh_per_count).astype(np.int16)
    else:
        data = rf.astype(np.float32)
        data[dropout] = np.nan
    ds = make_grid(
        data,
        scan_mm=scan,
        index_mm=index,
        time_us=time,
        velocity_m_s=material.velocity_m_s,
        beam_angle_deg=probe.beam_angle_deg,
        probe_frequency_mhz=probe.frequency_mhz,
        probe_diameter_mm=probe.diameter_mm,
        signal=signal_kind,
        fsh_per_count=fsh_per_count,
        attrs=grid_attrs,
    )
    if dtype == "int16" and dropout.any():
        ds["missing"] = (("scan", "index"), dropout, {"long_name": "A-scan missing (encoder drop-out)"})
    thickness = part.thickness_at(scan[:, None], index[None, :])
    ds["truth_thickness_mm"] = (
        ("scan", "index"),
        thickness.astype(np.float64),
        {"units": "mm", "long_name": "true remaining wall thickness (simulation)"},
    )
    truth = {
        "simulator": f"ndtmap {__version__}",
        "probe": asdict(probe),
        "material": asdict(material),
        "part": {
            "thickness_mm": part.thickness_mm,
            "wall_losses": [asdict(w) for w in part.wall_losses],
            "water_path_mm": part.water_path_mm,
            "surface_tilt_deg": part.surface_tilt_deg,
            "water_velocity_m_s": part.water_velocity_m_s,
            "min_thickness_mm": float(thickness.min()),
        },
        "reflectors": [dict(r.truth(), id=i + 1) for i, r in enumerate(reflectors)],
        "noise": asdict(noise),
        "near_field_mm": model.n_mm,
        "wavelength_mm": model.lam,
        "gain_db": gain_used_db,
        "dropouts": int(dropout.sum()),
        "seed": seed,
    }
    ds.attrs["truth"] = json.dumps(truth)
    return with_step(
        ds,
        "simulate_scan",
        {"reflectors": len(reflectors), "seed": seed, "signal": signal_kind, "dtype": dtype},
    )


def _grain_noise(rng, model: _Model, plan: ScanPlan, part: Part, scan, index, time, level: float) -> np.ndarray:
    n_scan, n_index, n_time = scan.size, index.size, time.size
    mid = 0.5 * part.thickness_mm
    width = float(
        beam.beam_width_mm(mid, model.probe.diameter_mm, model.probe.frequency_mhz, model.material.velocity_m_s)
    )
    sigma_mm = width / 2.3548
    ds_scan = float(np.median(np.diff(scan))) if n_scan > 1 else 1.0
    ds_index = float(np.median(np.diff(index))) if n_index > 1 else 1.0
    sig = (sigma_mm / ds_scan, sigma_mm / ds_index)
    # draw the noise on a grid padded by 4 sigma and crop, so the edges are as noisy as the middle
    pad = [int(math.ceil(4 * s)) for s in sig]
    white = rng.standard_normal((n_scan + 2 * pad[0], n_index + 2 * pad[1], n_time))
    white = ndimage.gaussian_filter(white, (sig[0], sig[1], 0.0), mode="wrap")
    white = white[pad[0] : pad[0] + n_scan, pad[1] : pad[1] + n_index]
    dt = 1.0 / plan.sampling_mhz
    t = _centred_times(model.pad, dt)
    pulse = tone_burst(t, model.probe.frequency_mhz, model.probe.bandwidth)
    colored = signal.fftconvolve(white, pulse[None, None, :], mode="same", axes=2)
    colored /= max(float(colored.std()), 1e-12)
    delay = np.zeros((n_scan, n_index))
    if part.water_path_mm is not None:
        delay = (2.0 * model.water_path_at(scan) / (part.water_velocity_m_s * 1e-3))[:, None] * np.ones((1, n_index))
    depth = 0.5 * model.c_mm_us * (time[None, None, :] - delay[:, :, None])
    thickness = part.thickness_at(scan[:, None], index[None, :])[:, :, None]
    inside = (depth > 0) & (depth < thickness)
    decay = 10.0 ** (-2.0 * model.alpha * np.clip(depth, 0, None) / 20.0)
    return level * colored * decay * inside


def _band_noise(rng, model: _Model, shape, time) -> np.ndarray:
    white = rng.standard_normal(shape)
    dt = float(time[1] - time[0]) if time.size > 1 else 0.02
    t = _centred_times(model.pad, dt)
    pulse = tone_burst(t, model.probe.frequency_mhz, model.probe.bandwidth)
    out = signal.fftconvolve(white, pulse[None, None, :], mode="same", axes=2)
    return out / max(float(out.std()), 1e-12)


def _dropouts(rng, n_scan: int, n_index: int, fraction: float) -> np.ndarray:
    mask = np.zeros((n_scan, n_index), dtype=bool)
    if fraction <= 0:
        return mask
    target = int(round(fraction * n_scan * n_index))
    while mask.sum() < target:
        j = rng.integers(n_index)
        i = rng.integers(n_scan)
        run = int(rng.integers(1, 6))
        mask[i : i + run, j] = True
    return mask


def scan_truth(ds: xr.Dataset) -> dict[str, Any]:
    """Return the truth a simulated grid carries (reflectors, part, probe).

    Parameters
    ----------
    ds : xarray.Dataset
        A grid made by :func:`simulate_scan` (or read from such a file).

    Returns
    -------
    dict
        Empty when the grid carries no truth (measured data).
    """
    raw = ds.attrs.get("truth")
    if not raw:
        return {}
    try:
        return json.loads(raw)
    except (TypeError, json.JSONDecodeError):
        raise ParameterError("attribute `truth` is not valid JSON") from None
