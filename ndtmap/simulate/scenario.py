"""The set-up of a simulated scan: probe, material, part, scan plan and noise.

These frozen dataclasses describe *what* is scanned and *how*; the reflectors
inside the part are in :mod:`ndtmap.simulate.reflectors` and
:func:`ndtmap.simulate.scan.simulate_scan` turns both into a grid. Every value
is checked on construction, so an impossible set-up fails where it is typed.

The material's handbook values (velocities, density) come from
:mod:`ndtmap.physics.materials`, the one table of them in ndtmap.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ndtmap._shared.validate import finite_float, float_in_range, nonnegative_float, one_of, positive_float
from ndtmap.errors import ParameterError
from ndtmap.physics.materials import MaterialData, material

__all__ = ["Probe", "Material", "WallLoss", "Part", "ScanPlan", "Noise"]

#: Handbook steel: the default material of the simulator.
_STEEL = material("steel")
#: Handbook water: the default couplant in immersion.
_WATER = material("water")


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

    The defaults are handbook steel (:func:`ndtmap.physics.materials.material`);
    :meth:`from_handbook` takes any material of that table.

    Parameters
    ----------
    velocity_m_s : float, default: handbook steel, longitudinal (5920)
        Sound velocity of the wave mode used, m/s.
    attenuation_db_per_mm : float, default 0
        One-way attenuation, dB/mm.
    name : str, default "steel"
    wave_mode : {'longitudinal', 'shear'}, default 'longitudinal'
    density_kg_m3 : float, default: handbook steel (7850)
        Used for the acoustic impedance in immersion, kg/m^3.

    Examples
    --------
    >>> Material().velocity_m_s
    5920.0
    >>> Material.from_handbook("aluminium", wave_mode="shear").velocity_m_s
    3130.0
    """

    velocity_m_s: float = _STEEL.longitudinal_m_s
    attenuation_db_per_mm: float = 0.0
    name: str = _STEEL.name
    wave_mode: str = "longitudinal"
    density_kg_m3: float = _STEEL.density_kg_m3

    def __post_init__(self) -> None:
        float_in_range("velocity_m_s", self.velocity_m_s, 100.0, 20000.0)
        float_in_range("attenuation_db_per_mm", self.attenuation_db_per_mm, 0.0, 10.0)
        one_of("wave_mode", self.wave_mode, ("longitudinal", "shear"))
        positive_float("density_kg_m3", self.density_kg_m3)

    @classmethod
    def from_handbook(
        cls,
        name: str | MaterialData,
        *,
        wave_mode: str = "longitudinal",
        attenuation_db_per_mm: float = 0.0,
    ) -> Material:
        """The material with the handbook velocity and density of `name`.

        Parameters
        ----------
        name : str or MaterialData
            A name of :data:`ndtmap.physics.materials.MATERIALS` (``"steel"``,
            ``"aluminium"``, ...) or a :class:`~ndtmap.physics.materials.MaterialData`.
        wave_mode : {'longitudinal', 'shear'}, default 'longitudinal'
            The wave mode whose velocity is used.
        attenuation_db_per_mm : float, default 0
            One-way attenuation, dB/mm (the handbook table holds none).

        Raises
        ------
        ParameterError
            For a name not in the table, an unknown wave mode, or shear waves in
            a material that carries none (a liquid).
        """
        data = name if isinstance(name, MaterialData) else material(name)
        velocity = data.velocity(wave_mode)
        if not math.isfinite(velocity):
            raise ParameterError(
                f"`wave_mode` {wave_mode!r}: {data.name} carries no {wave_mode} waves (no handbook velocity); "
                "use 'longitudinal'"
            )
        return cls(velocity, attenuation_db_per_mm, data.name, wave_mode, data.density_kg_m3)


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
        """Loss of wall in mm at scan/index positions x, y (mm)."""
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
    water_velocity_m_s : float, default: handbook water (1483)
        Sound velocity in the water, m/s.
    """

    thickness_mm: float
    wall_losses: tuple[WallLoss, ...] = ()
    water_path_mm: float | None = None
    surface_tilt_deg: float = 0.0
    water_velocity_m_s: float = _WATER.longitudinal_m_s

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
        """Recorded sample times, us: from `time_start_us` every ``1 / sampling_mhz`` up to `time_end_us`."""
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

