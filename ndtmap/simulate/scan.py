"""Simulate an encoded pulse-echo scan with known truth: :func:`simulate_scan`.

:func:`simulate_scan` builds a scan grid of A-scans from a probe, a material,
a part and a list of reflectors, and stores the truth (true sizes, depths,
the thickness map) in the grid, so that every later result can be checked
against it. It runs in named steps:

1. check the scenario (:func:`_checked_reflectors`, :func:`_thinnest_wall_mm`);
2. the coupling at the front surface (:func:`_coupling`) and the amplitude
   scale set by the gain or by the back-wall echo (:func:`_amplitude_scale_fsh`);
3. the noise-free A-scans, chunk by chunk of probe positions
   (:func:`_noise_free_ascans`), each chunk collecting the echoes of the
   back wall, the planar reflectors, the compact reflectors and the
   immersion interface (:mod:`ndtmap.simulate.echo_sources`);
4. noise, clipping, drop-outs and the sample type
   (:mod:`ndtmap.simulate.acquisition`);
5. the grid with its attributes (:func:`_scan_grid`) and truth (:mod:`ndtmap.simulate.truth`).

The model behind the echoes and its approximations are described in
:mod:`ndtmap.simulate.model`.
"""

from __future__ import annotations

import json
import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import xarray as xr

from ndtmap._shared.validate import finite_float, one_of, positive_float
from ndtmap.errors import ParameterError
from ndtmap.grid.provenance import with_step
from ndtmap.grid.schema import make_grid
from ndtmap.physics import beam
from ndtmap.simulate.acquisition import _acquired, _digitised
from ndtmap.simulate.echo_sources import _extended_layer, _point_layer, _point_patches
from ndtmap.simulate.model import _OVERSAMPLE, _build_model, _Histogram, _Model, _water_delay
from ndtmap.simulate.reflectors import PlanarReflector, Reflector
from ndtmap.simulate.scenario import Material, Noise, Part, Probe, ScanPlan
from ndtmap.simulate.truth import _truth_record

__all__ = ["simulate_scan", "FRONT_SURFACE_REFLECTION"]

#: Magnitude of the reflection at the coupled front surface seen from inside
#: the part (steel to a water-like couplant: (46.4 - 1.5) / (46.4 + 1.5) ~ 0.94,
#: less in contact with a thin layer; a round figure is used).
FRONT_SURFACE_REFLECTION = 0.9
#: Acoustic impedance of the water in immersion, MRayl: handbook water (1483 m/s x 998 kg/m^3 = 1.480)
#: rounded; kept as typed so that simulated immersion scans stay the same bit for bit.
_WATER_IMPEDANCE_MRAYL = 1.48


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
    reflectors = _checked_reflectors(reflectors, probe, part)

    model = _build_model(probe, material, part, plan)
    coupling = _coupling(material, part)
    c_fsh = _amplitude_scale_fsh(model, plan, coupling, gain_db=gain_db, backwall_fsh=backwall_fsh)
    gain_used_db = 20.0 * math.log10(c_fsh / 100.0)
    thick_min = _thinnest_wall_mm(model, plan, reflectors)

    rf = _noise_free_ascans(
        model,
        plan,
        reflectors,
        c_fsh=c_fsh,
        coupling=coupling,
        thick_min=thick_min,
        repeat_echoes=repeat_echoes,
        chunk_positions=chunk_positions,
    )
    rf, dropout = _acquired(rf, model, plan, noise, seed=seed, signal_kind=signal_kind, full_scale_fsh=full_scale_fsh)

    grid_attrs = _grid_attrs(model, plan, gain_used_db=gain_used_db, full_scale_fsh=full_scale_fsh)
    grid_attrs.update(attrs or {})
    data, fsh_per_count = _digitised(rf, dropout, dtype, full_scale_fsh)
    thickness = part.thickness_at(np.asarray(plan.scan_mm)[:, None], np.asarray(plan.index_mm)[None, :])
    ds = _scan_grid(
        data,
        model,
        plan,
        signal_kind=signal_kind,
        fsh_per_count=fsh_per_count,
        attrs=grid_attrs,
        missing=dropout if dtype == "int16" else None,
        thickness_mm=thickness,
    )
    truth = _truth_record(
        model, reflectors, noise, thickness_mm=thickness, gain_db=gain_used_db, dropout=dropout, seed=seed
    )
    ds.attrs["truth"] = json.dumps(truth)
    return with_step(
        ds,
        "simulate_scan",
        {"reflectors": len(reflectors), "seed": seed, "signal": signal_kind, "dtype": dtype},
    )


# --------------------------------------------------------------------------
# Checks of the scenario
# --------------------------------------------------------------------------
def _is_angle_beam(probe: Probe) -> bool:
    """True for an angle beam: no specular echo from horizontal surfaces, second-leg images instead."""
    return probe.beam_angle_deg > 0.5


def _checked_reflectors(reflectors: Sequence[Reflector], probe: Probe, part: Part) -> list[Reflector]:
    """The reflectors as a list, each of a known kind and inside the part; no angle beam in immersion."""
    reflectors = list(reflectors)
    for refl in reflectors:
        if not isinstance(refl, Reflector):
            raise ParameterError(
                f"`reflectors` must hold FlatBottomHole, SideDrilledHole or PlanarReflector, got {refl!r}"
            )
        if not 0.0 < refl.depth_mm < part.thickness_mm:
            raise ParameterError(
                f"reflector {refl.label or refl!r} at depth {refl.depth_mm:g} mm lies outside the part "
                f"(thickness {part.thickness_mm:g} mm)"
            )
    if _is_angle_beam(probe) and part.water_path_mm is not None:
        raise ParameterError("angle beams in immersion are not simulated; use contact (water_path_mm=None)")
    return reflectors


def _thinnest_wall_mm(model: _Model, plan: ScanPlan, reflectors: Sequence[Reflector]) -> float:
    """Thinnest wall in mm under the scanned area (plus a 20 mm margin); it must exceed the reflectors' depths."""
    part = model.part
    scan = np.asarray(plan.scan_mm)
    index = np.asarray(plan.index_mm)
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
    return thick_min


# --------------------------------------------------------------------------
# Coupling and gain
# --------------------------------------------------------------------------
@dataclass(frozen=True)
class _Coupling:
    """The front surface: transmission into the part (both ways), interface echo, reflection seen from inside."""

    transmission: float = 1.0
    interface_r: float = 0.0
    front_r: float = FRONT_SURFACE_REFLECTION


def _coupling(material: Material, part: Part) -> _Coupling:
    """Contact: a round figure for the front surface; immersion: from the impedances of water and part."""
    if part.water_path_mm is None:
        return _Coupling()
    z_part = material.velocity_m_s * material.density_kg_m3 * 1e-6
    z_w = _WATER_IMPEDANCE_MRAYL
    interface_r = (z_part - z_w) / (z_part + z_w)
    transmission = 4.0 * z_part * z_w / (z_part + z_w) ** 2
    return _Coupling(transmission, interface_r, abs(interface_r))


def _everywhere(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Coverage of a surface that extends everywhere (the back wall)."""
    return np.ones(np.broadcast(x, y).shape, dtype=bool)


def _amplitude_scale_fsh(
    model: _Model,
    plan: ScanPlan,
    coupling: _Coupling,
    *,
    gain_db: float | None,
    backwall_fsh: float | None,
) -> float:
    """Amplitude scale C: %FSH of an infinite plane at zero distance (see :func:`simulate_scan`)."""
    if gain_db is not None:
        return 100.0 * 10.0 ** (finite_float("gain_db", gain_db) / 20.0)
    if backwall_fsh is None or _is_angle_beam(model.probe):
        return 100.0
    # one reference A-scan of the flat, sound plate at the first position: the gain puts its
    # first back-wall echo (highest sample of |A|) at `backwall_fsh`
    part = model.part
    target = positive_float("backwall_fsh", backwall_fsh)
    ref_part = Part(part.thickness_mm, (), part.water_path_mm, part.surface_tilt_deg, part.water_velocity_m_s)
    px0, py0 = np.array([plan.scan_mm[0]]), np.array([plan.index_mm[0]])
    ref = _Histogram(1, model)
    _extended_layer(
        ref,
        px0,
        py0,
        model,
        covers=_everywhere,
        depth_fn=ref_part.thickness_at,
        z_range=(part.thickness_mm, part.thickness_mm),
        gain=coupling.transmission,
        shadowers=[],
        full_cover=True,
    )
    a_ref = ref.rendered(model.point_wavelet())[0, ::_OVERSAMPLE]
    t_bw = 2.0 * part.thickness_mm / model.c_mm_us + float(_water_delay(model, px0)[0])
    near = np.abs(plan.time_us() - t_bw) <= 2.0 * model.pad
    if not np.any(near):
        raise ParameterError(
            f"`backwall_fsh` needs the back-wall echo (at {t_bw:.2f} us) inside the record "
            f"[{plan.time_start_us:g}, {plan.time_end_us:g}] us; give `gain_db` instead"
        )
    return target / float(np.abs(a_ref[near]).max())


# --------------------------------------------------------------------------
# The noise-free A-scans
# --------------------------------------------------------------------------
def _noise_free_ascans(
    model: _Model,
    plan: ScanPlan,
    reflectors: list[Reflector],
    *,
    c_fsh: float,
    coupling: _Coupling,
    thick_min: float,
    repeat_echoes: bool,
    chunk_positions: int,
) -> np.ndarray:
    """All echoes at every probe position, ``(scan, index, time)`` in %FSH, `chunk_positions` at a time."""
    scan = np.asarray(plan.scan_mm)
    index = np.asarray(plan.index_mm)
    n_scan, n_index, n_time = scan.size, index.size, plan.time_us().size
    px_all, py_all = (a.ravel() for a in np.meshgrid(scan, index, indexing="ij"))
    angle = _is_angle_beam(model.probe)
    planars = [r for r in reflectors if isinstance(r, PlanarReflector)]
    compact = [r for r in reflectors if not isinstance(r, PlanarReflector)]

    point_wavelet = model.point_wavelet()
    plane_wavelet = model.plane_wavelet()
    patches = {id(r): _point_patches(r, model) for r in compact}
    # second-leg images (angle beams): reflectors mirrored in the back wall
    images = []
    if angle:
        for r in compact:
            x, y, z, area = patches[id(r)]
            images.append((r, (x, y, 2.0 * model.part.thickness_mm - z, area)))

    rf = np.empty((n_scan * n_index, n_time), dtype=np.float64)
    for start in range(0, px_all.size, chunk_positions):
        stop = min(start + chunk_positions, px_all.size)
        px, py = px_all[start:stop], py_all[start:stop]
        hist = _Histogram(stop - start, model)
        plane_hist = _Histogram(stop - start, model)
        if not angle:
            _deposit_backwall(
                hist, px, py, model, plan, reflectors, c_fsh=c_fsh, coupling=coupling, thick_min=thick_min,
                repeat_echoes=repeat_echoes,
            )
            _deposit_planars(
                hist, px, py, model, planars, reflectors, c_fsh=c_fsh, coupling=coupling, repeat_echoes=repeat_echoes
            )
        for refl in compact:
            above = [s for s in planars if s.depth_mm < refl.depth_mm]
            _point_layer(
                hist, px, py, model, patches[id(refl)], gain=-c_fsh * coupling.transmission, shadowers=above
            )
        for _refl, img in images:
            _point_layer(hist, px, py, model, img, gain=c_fsh * coupling.transmission, shadowers=[])
        if model.immersion:
            _deposit_interface(plane_hist, px, model, c_fsh=c_fsh, coupling=coupling)
        a = hist.rendered(point_wavelet) + plane_hist.rendered(plane_wavelet)
        rf[start:stop] = a[:, ::_OVERSAMPLE][:, :n_time]
    return rf.reshape(n_scan, n_index, n_time)


def _deposit_backwall(
    hist: _Histogram,
    px: np.ndarray,
    py: np.ndarray,
    model: _Model,
    plan: ScanPlan,
    reflectors: list[Reflector],
    *,
    c_fsh: float,
    coupling: _Coupling,
    thick_min: float,
    repeat_echoes: bool,
) -> None:
    """The back wall (shadowed by all reflectors) and, if asked, its multiples that reach the record."""
    part = model.part
    bw_gain = -1.0 * c_fsh * coupling.transmission
    _extended_layer(
        hist,
        px,
        py,
        model,
        covers=_everywhere,
        depth_fn=part.thickness_at,
        z_range=(thick_min, part.thickness_mm),
        gain=bw_gain,
        shadowers=reflectors,
        full_cover=True,
    )
    if not repeat_echoes:
        return
    for k in (2, 3, 4):
        if 2.0 * k * thick_min / model.c_mm_us + _water_delay(model, px).min() > plan.time_end_us + model.pad:
            break
        _extended_layer(
            hist,
            px,
            py,
            model,
            covers=_everywhere,
            depth_fn=part.thickness_at,
            z_range=(thick_min, part.thickness_mm),
            gain=bw_gain * (coupling.front_r ** (k - 1)),
            shadowers=reflectors,
            multiple=k,
            full_cover=True,
        )


def _deposit_planars(
    hist: _Histogram,
    px: np.ndarray,
    py: np.ndarray,
    model: _Model,
    planars: list[PlanarReflector],
    reflectors: list[Reflector],
    *,
    c_fsh: float,
    coupling: _Coupling,
    repeat_echoes: bool,
) -> None:
    """Each planar reflector (shadowed by the reflectors above it) and, if asked, its repeat echo."""
    transmission, front_r = coupling.transmission, coupling.front_r
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


def _deposit_interface(
    plane_hist: _Histogram, px: np.ndarray, model: _Model, *, c_fsh: float, coupling: _Coupling
) -> None:
    """The immersion interface echo, in closed form (Lommel law over the water path)."""
    probe, part = model.probe, model.part
    w_path = model.water_path_at(px)
    amp = (
        c_fsh
        * coupling.interface_r
        * beam.backwall_echo_relative(
            w_path, probe.diameter_mm, probe.frequency_mhz, part.water_velocity_m_s, bandwidth=probe.bandwidth
        )
    )
    plane_hist.deposit(np.arange(px.size), _water_delay(model, px), -amp)


def _grid_attrs(model: _Model, plan: ScanPlan, *, gain_used_db: float, full_scale_fsh: float) -> dict[str, Any]:
    """Global attributes of the simulated grid (before the caller's own)."""
    probe, material, part = model.probe, model.material, model.part
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
    return grid_attrs


def _scan_grid(
    data: np.ndarray,
    model: _Model,
    plan: ScanPlan,
    *,
    signal_kind: str,
    fsh_per_count: float | None,
    attrs: dict[str, Any],
    missing: np.ndarray | None,
    thickness_mm: np.ndarray,
) -> xr.Dataset:
    """The scan grid of the samples, with the drop-out mask (if any are missing) and the true thickness map."""
    probe = model.probe
    ds = make_grid(
        data,
        scan_mm=np.asarray(plan.scan_mm),
        index_mm=np.asarray(plan.index_mm),
        time_us=plan.time_us(),
        velocity_m_s=model.material.velocity_m_s,
        beam_angle_deg=probe.beam_angle_deg,
        probe_frequency_mhz=probe.frequency_mhz,
        probe_diameter_mm=probe.diameter_mm,
        signal=signal_kind,
        fsh_per_count=fsh_per_count,
        attrs=attrs,
    )
    if missing is not None and missing.any():
        ds["missing"] = (("scan", "index"), missing, {"long_name": "A-scan missing (encoder drop-out)"})
    ds["truth_thickness_mm"] = (
        ("scan", "index"),
        thickness_mm.astype(np.float64),
        {"units": "mm", "long_name": "true remaining wall thickness (simulation)"},
    )
    return ds
