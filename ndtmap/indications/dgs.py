"""DGS (distance-gain-size) evaluation: equivalent flat-bottom-hole size of an echo.

The equivalent reflector size (ERS) of an indication is the diameter of the
flat-bottom hole (FBH) at the same sound path that would give the same echo.
It is found by comparison with the back-wall echo of a sound area of the
part (or of a reference block, with a transfer correction).

Far field (sound paths beyond about 3 near-field lengths ``N``) the echo
ratio of a small FBH of diameter ``d`` at sound path ``z`` to a back wall at
``z_BW`` is

``H_FBH / H_BW = pi d**2 z_BW / (2 lambda z**2)``,

so ``d = sqrt(2 lambda z**2 (H_FBH / H_BW) / (pi z_BW))``. Closer to the
probe the relation does not hold; there (and whenever asked with
``model="piston"``) the echoes come from the circular-piston model: the
back wall from :func:`~ndtmap.physics.beam.backwall_echo_relative` (Lommel's
diffraction integral), the hole from
:func:`~ndtmap.physics.piston_field.disc_echo_relative` (the piston's field
integrated over the hole's face, the peak of the pulse's envelope over the
probe spectrum), and the diameter whose modelled echo matches is found
numerically. Both agree with the far-field relation beyond ~3 N. The
probe's bandwidth matters inside the near field: a single frequency has
on-axis zeros (near N/2, N/3, ...) where a small hole would read far too
large; a pulsed probe fills them in.

Corrections, all in dB:

* attenuation ``alpha`` (dB/mm, one way): the indication amplitude is raised
  by ``2 alpha z`` and the back wall by ``2 alpha z_BW``;
* transfer correction: added to the indication amplitude when the
  reference (back wall) was taken on a different block or surface;
* back-wall gain reduction: how many dB less gain the back-wall reading was
  taken at than the indication (the back wall then counts that much
  stronger).

The ERS is an *equivalent* size: a natural flaw of irregular shape or
orientation is usually larger than its ERS.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import xarray as xr
from scipy import ndimage, optimize

from ndtmap._shared import mapgeom as mg
from ndtmap._shared.validate import (
    finite_float,
    float_in_range,
    nonnegative_float,
    one_of,
    positive_float,
    positive_int,
)
from ndtmap.errors import CalibrationError, ParameterError, ParameterTypeError
from ndtmap.grid.provenance import with_step
from ndtmap.indications.detection import Indication
from ndtmap.physics import beam, piston_field
from ndtmap.scans import nominal_backwall_fsh

__all__ = [
    "DgsResult",
    "equivalent_fbh_diameter",
    "far_field_fbh_diameter",
    "backwall_reference_fsh",
    "sound_region_mask",
    "dgs_diagram",
]

MODELS = ("auto", "far-field", "piston")


@dataclass(frozen=True)
class DgsResult:
    """Equivalent flat-bottom-hole size of one echo.

    Attributes
    ----------
    ers_mm : float or None
        Equivalent FBH diameter, mm (None when it cannot be computed; see
        `notes`).
    method : {'far-field', 'piston'}
        Which relation was used.
    near_field : bool
        The indication's sound path is shorter than `near_field_factor`
        near-field lengths.
    ratio_db : float
        Corrected echo ratio indication / back wall, dB.
    sound_path_mm, backwall_sound_path_mm, near_field_length_mm : float
        Inputs and the probe's near-field length, mm.
    notes : tuple of str
        Remarks for the report.
    """

    ers_mm: float | None
    method: str
    near_field: bool
    ratio_db: float
    sound_path_mm: float
    backwall_sound_path_mm: float
    near_field_length_mm: float
    notes: tuple[str, ...] = ()


def far_field_fbh_diameter(ratio: Any, sound_path_mm: Any, backwall_sound_path_mm: Any, wavelength: float) -> Any:
    """FBH diameter from the far-field DGS relation, mm.

    ``d = sqrt(2 lambda z**2 r / (pi z_BW))`` with ``r = H_FBH / H_BW``
    (amplitude ratio, not dB).

    Examples
    --------
    >>> round(float(far_field_fbh_diameter(10 ** (-18.5 / 20), 100.0, 100.0, 1.184)), 2)
    3.0
    """
    r = np.asarray(ratio, dtype=np.float64)
    z = np.asarray(sound_path_mm, dtype=np.float64)
    zb = np.asarray(backwall_sound_path_mm, dtype=np.float64)
    lam = positive_float("wavelength", wavelength)
    return np.sqrt(2.0 * lam * z * z * r / (np.pi * zb))


def equivalent_fbh_diameter(
    amplitude_fsh: float,
    sound_path_mm: float,
    *,
    backwall_fsh: float,
    backwall_sound_path_mm: float,
    probe_diameter_mm: float,
    frequency_mhz: float,
    velocity_m_s: float,
    attenuation_db_per_mm: float = 0.0,
    transfer_correction_db: float = 0.0,
    backwall_gain_reduction_db: float = 0.0,
    model: str = "auto",
    near_field_factor: float = 3.0,
    bandwidth: float = 0.0,
    full_scale_fsh: float = 100.0,
) -> DgsResult:
    """Equivalent FBH diameter of an echo, by comparison with a back-wall echo.

    Parameters
    ----------
    amplitude_fsh : float
        Peak echo amplitude of the indication, %FSH.
    sound_path_mm : float
        Sound path to the indication, mm.
    backwall_fsh : float
        Back-wall echo amplitude in a sound area, %FSH (see
        :func:`backwall_reference_fsh`).
    backwall_sound_path_mm : float
        Sound path to that back wall (the wall thickness for a straight beam), mm.
    probe_diameter_mm, frequency_mhz, velocity_m_s : float
        Probe element diameter (mm), centre frequency (MHz), sound velocity (m/s).
    attenuation_db_per_mm : float, default 0
        One-way material attenuation, dB/mm.
    transfer_correction_db : float, default 0
        Added to the indication amplitude (reference and part differ).
    backwall_gain_reduction_db : float, default 0
        dB less gain used for the back-wall reading than for the indication.
    model : {'auto', 'far-field', 'piston'}, default 'auto'
        'auto' uses the far-field relation when both sound paths are at least
        `near_field_factor` near-field lengths, else the piston model.
    near_field_factor : float, default 3
        Near-field lengths below which the far-field relation is not used
        (and the ``near_field`` flag is set).
    bandwidth : float, default 0
        Fractional -6 dB bandwidth of the probe for the piston model (0: a
        single frequency, whose near-field zeros are deepest; give the
        probe's, e.g. the grid's ``probe_bandwidth``).
    full_scale_fsh : float, default 100
        Digitiser full scale; a back-wall reading at it is refused.

    Returns
    -------
    DgsResult

    Raises
    ------
    CalibrationError
        For a back-wall reading that is not > 0 or is saturated.

    Examples
    --------
    A 3 mm FBH at 100 mm gives an echo 18.5 dB below the back wall at 100 mm
    (5 MHz, 10 mm probe in steel):

    >>> r = equivalent_fbh_diameter(9.51, 100.0, backwall_fsh=80.0, backwall_sound_path_mm=100.0,
    ...                             probe_diameter_mm=10, frequency_mhz=5, velocity_m_s=5920)
    >>> round(r.ers_mm, 1), r.method, r.near_field
    (3.0, 'far-field', False)
    """
    a = finite_float("amplitude_fsh", amplitude_fsh)
    if a <= 0:
        raise ParameterError(f"`amplitude_fsh` must be greater than 0 %FSH, got {amplitude_fsh!r}")
    z = positive_float("sound_path_mm", sound_path_mm)
    b = finite_float("backwall_fsh", backwall_fsh)
    if b <= 0:
        raise CalibrationError(f"`backwall_fsh` must be greater than 0 %FSH, got {backwall_fsh!r}")
    fs = positive_float("full_scale_fsh", full_scale_fsh)
    if b >= fs * (1.0 - 1e-3):  # clipped by the digitiser (a 150 %FSH echo on a 200 %FSH one is not)
        raise CalibrationError(
            f"`backwall_fsh` is {b:g} %FSH, at the full scale: the back-wall reference is saturated; "
            "take it at lower gain and give the difference as `backwall_gain_reduction_db`"
        )
    zb = positive_float("backwall_sound_path_mm", backwall_sound_path_mm)
    dprobe = positive_float("probe_diameter_mm", probe_diameter_mm)
    f = positive_float("frequency_mhz", frequency_mhz)
    c = positive_float("velocity_m_s", velocity_m_s)
    alpha = nonnegative_float("attenuation_db_per_mm", attenuation_db_per_mm)
    transfer = finite_float("transfer_correction_db", transfer_correction_db)
    gain_red = finite_float("backwall_gain_reduction_db", backwall_gain_reduction_db)
    model = one_of("model", model, MODELS)
    nf = positive_float("near_field_factor", near_field_factor)
    lam = beam.wavelength_mm(c, f)
    n = beam.near_field_length_mm(dprobe, f, c)
    ratio_db = 20.0 * math.log10(a / b) + 2.0 * alpha * (z - zb) + transfer - gain_red
    ratio = 10.0 ** (ratio_db / 20.0)
    near = z < nf * n
    notes: list[str] = []
    if model == "auto":
        model = "far-field" if (z >= nf * n and zb >= nf * n) else "piston"
    bw = float_in_range("bandwidth", bandwidth, 0.0, 1.5)
    if near:
        notes.append(
            f"sound path {z:.1f} mm is inside {nf:g} near-field lengths ({nf * n:.1f} mm): the far-field DGS "
            "relation does not hold" + (
                f"; the piston model of a hole of finite size was used (bandwidth {bw:g}): an estimate that "
                "leaves out the real element's apodisation and the hole's tilt" if model == "piston" else "")
        )
        if model == "piston" and bw == 0:
            notes.append("single-frequency piston model inside the near field: its on-axis zeros make the size "
                         "very uncertain; give the probe's bandwidth")
    if zb < nf * n:
        notes.append(f"the back-wall reference at {zb:.1f} mm is inside {nf:g} near-field lengths")
    if model == "far-field":
        d = float(far_field_fbh_diameter(ratio, z, zb, lam))
    else:
        target = ratio * float(beam.backwall_echo_relative(zb, dprobe, f, c, bandwidth=bw))
        d = _piston_model_diameter(target, z, dprobe, f, c, bw)
        if d is None:
            notes.append(
                f"the echo is stronger than the modelled echo of a flat-bottom hole as wide as the probe "
                f"({dprobe:g} mm) at {z:.1f} mm: no equivalent size; size by the drop methods"
            )
            return DgsResult(None, "piston", near, ratio_db, z, zb, n, tuple(notes))
    if d >= 0.5 * dprobe:
        notes.append(
            f"equivalent size {d:.1f} mm is not small compared with the probe ({dprobe:g} mm): the DGS relation "
            "for small reflectors does not apply; size by the drop methods"
        )
    return DgsResult(float(d), model, near, float(ratio_db), z, zb, n, tuple(notes))


def _piston_model_diameter(target: float, z: float, dprobe: float, f: float, c: float, bandwidth: float
                           ) -> float | None:
    """The hole diameter whose modelled echo at sound path `z` is `target` (re a plane at zero distance).

    The smallest one, found on a grid of diameters up to the probe's and refined by root finding; below
    the grid the echo grows as the hole's area (the small-hole law). None when even a hole as wide as the
    probe echoes less.
    """
    sizes = np.geomspace(0.02 * dprobe, dprobe, 25)

    def echo(size: float) -> float:
        return float(piston_field.disc_echo_relative(z, size, dprobe, f, c, bandwidth=bandwidth))

    echoes = np.array([echo(s) for s in sizes])
    if target <= echoes[0]:
        return float(sizes[0] * math.sqrt(target / echoes[0]))
    above = np.flatnonzero(echoes >= target)
    if above.size == 0:
        return None
    i = int(above[0])
    return float(optimize.brentq(lambda s: math.log(echo(s) / target), sizes[i - 1], sizes[i], xtol=1e-5))


def sound_region_mask(
    value_map: xr.DataArray,
    *,
    sound_region: xr.DataArray | np.ndarray | None = None,
    exclude: Iterable[Indication] = (),
    grow: int = 2,
    name: str = "backwall_map",
) -> np.ndarray:
    """Valid positions of a map that count as sound: in `sound_region`, outside the indications grown by `grow`.

    Parameters
    ----------
    value_map : xarray.DataArray (scan, index)
        The map (back-wall amplitude or depth); NaN positions are left out.
    sound_region : bool array or DataArray (scan, index), optional
        Positions known to be sound. Default: every valid position outside
        the regions of `exclude` grown by `grow` positions.
    exclude : iterable of Indication, optional
        Indications whose neighbourhood is left out.
    grow : int, default 2
        Positions added around excluded regions.
    name : str
        Name of the map in error messages.

    Returns
    -------
    numpy.ndarray of bool
        True at the sound, valid positions (possibly none).
    """
    bm = mg.as_map(name, value_map)
    values = bm.values
    keep = np.isfinite(values)
    if sound_region is not None:
        if isinstance(sound_region, xr.DataArray):
            sr = mg.as_map("sound_region", sound_region)
            mg.check_same_grid("sound_region", sr, name, bm)
            region = sr.values != 0
        else:
            region = np.asarray(sound_region)
            if region.shape != values.shape:
                raise ParameterError(
                    f"`sound_region` must have the map's shape {values.shape}, got {region.shape}"
                )
            region = region.astype(bool)
        keep &= region
    grown = np.zeros(values.shape, dtype=bool)
    for k, ind in enumerate(exclude):
        if not isinstance(ind, Indication):
            raise ParameterTypeError(f"`exclude[{k}]` must be an Indication, got {type(ind).__name__}")
        if ind.region.shape == values.shape:
            grown |= ind.region
    if grown.any() and grow > 0:
        grown = ndimage.binary_dilation(grown, structure=mg.STRUCTURE_8, iterations=int(grow))
    return keep & ~grown


def backwall_reference_fsh(
    backwall_map: xr.DataArray,
    *,
    sound_region: xr.DataArray | np.ndarray | None = None,
    exclude: Iterable[Indication] = (),
    grow: int = 2,
) -> float:
    """Back-wall reference level: the nominal back-wall amplitude of a sound region.

    The median of the back-wall amplitude over the sound positions
    (:func:`sound_region_mask`), by the one definition of the nominal level,
    :func:`ndtmap.scans.nominal_backwall_fsh` (amplitudes below its floor of
    0.1 %FSH count as the floor).

    Parameters
    ----------
    backwall_map : xarray.DataArray (scan, index)
        Back-wall echo amplitude, %FSH.
    sound_region, exclude, grow
        The sound positions, see :func:`sound_region_mask`.

    Returns
    -------
    float
        %FSH.

    Raises
    ------
    CalibrationError
        When no valid position is left, or the back-wall gate finds no echo there.

    Examples
    --------
    >>> import numpy as np, xarray as xr
    >>> bw = np.full((4, 4), 80.0); bw[0, 0] = 10.0
    >>> m = xr.DataArray(bw, dims=("scan", "index"), coords={"scan": np.arange(4.0), "index": np.arange(4.0)})
    >>> backwall_reference_fsh(m)
    80.0
    """
    keep = sound_region_mask(backwall_map, sound_region=sound_region, exclude=exclude, grow=grow)
    if not keep.any():
        raise CalibrationError(
            "no valid back-wall position is left in the sound region; give a `sound_region` or a back-wall "
            "level in %FSH"
        )
    return nominal_backwall_fsh(backwall_map, mask=keep)


def dgs_diagram(
    probe_diameter_mm: float,
    frequency_mhz: float,
    velocity_m_s: float,
    fbh_diameters_mm: Sequence[float],
    *,
    max_distance_n: float = 10.0,
    min_distance_n: float = 0.05,
    n_points: int = 400,
    bandwidth: float = 0.0,
    attenuation_db_per_mm: float = 0.0,
) -> xr.Dataset:
    """Echo curves of a DGS diagram for one probe: back wall and a family of FBHs.

    Normalisation: every echo is in dB re the echo of an infinite plane
    reflector at zero distance (the classic general DGS diagram's 0 dB). The
    diagram is given both against the sound path (``distance_mm``, with the
    normalised distance ``distance_n = z / N`` as a second coordinate) and
    for each hole against its normalised size ``size_ratio = d / D``. Far
    field the curves are universal in (z/N, d/D): back wall
    ``(pi/2) (N/z)`` (-20 dB per decade), FBH ``pi**2 (d/D)**2 (N/z)**2``
    (-40 dB per decade); inside the near field the piston-model curves
    (the holes' finite size included, see
    :func:`ndtmap.physics.piston_field.disc_echo_relative`, the model
    :func:`equivalent_fbh_diameter` inverts) depend on ``D / lambda`` and on
    the bandwidth too, and are no longer 40 log10 of the diameter apart.
    ``gain_*`` variables are the negatives (the gain needed to raise the
    echo to the 0 dB reference).

    Parameters
    ----------
    probe_diameter_mm, frequency_mhz, velocity_m_s : float
        Probe and material.
    fbh_diameters_mm : sequence of float
        FBH diameters of the curves, mm.
    max_distance_n, min_distance_n : float
        Distance range in near-field lengths (logarithmically spaced).
    n_points : int, default 400
        Points per curve.
    bandwidth : float, default 0
        Fractional bandwidth of the probe for the model curves.
    attenuation_db_per_mm : float, default 0
        One-way attenuation included in the model and far-field curves
        (``-2 alpha z``); 0 for the classic diagram.

    Returns
    -------
    xarray.Dataset
        Variables ``backwall_echo_db(distance_mm)``,
        ``fbh_echo_db(fbh_diameter_mm, distance_mm)``, their far-field
        forms ``*_far_field_db`` and ``gain_backwall_db``, ``gain_fbh_db``;
        attrs: probe, ``near_field_length_mm``, ``wavelength_mm``,
        ``normalisation``.

    Examples
    --------
    >>> ds = dgs_diagram(10, 5, 5920, [1, 2, 4], max_distance_n=20, n_points=50)
    >>> sorted(ds.data_vars)[:2]
    ['backwall_echo_db', 'backwall_echo_far_field_db']
    >>> ds.sizes["fbh_diameter_mm"], ds.attrs["near_field_length_mm"].__round__(2)
    (3, 21.11)
    """
    dprobe = positive_float("probe_diameter_mm", probe_diameter_mm)
    f = positive_float("frequency_mhz", frequency_mhz)
    c = positive_float("velocity_m_s", velocity_m_s)
    try:
        sizes = np.asarray(list(fbh_diameters_mm), dtype=np.float64).reshape(-1)
    except (TypeError, ValueError):
        raise ParameterTypeError(
            f"`fbh_diameters_mm` must be a sequence of numbers, got {fbh_diameters_mm!r}"
        ) from None
    if sizes.size == 0 or not np.all(np.isfinite(sizes)) or np.any(sizes <= 0):
        raise ParameterError(f"`fbh_diameters_mm` must be one or more diameters > 0 mm, got {fbh_diameters_mm!r}")
    if np.unique(sizes).size != sizes.size:
        raise ParameterError("`fbh_diameters_mm` must not repeat a diameter")
    zmax = positive_float("max_distance_n", max_distance_n)
    zmin = positive_float("min_distance_n", min_distance_n)
    if not zmin < zmax:
        raise ParameterError(f"`min_distance_n` must be less than `max_distance_n`, got {zmin:g} and {zmax:g}")
    npts = positive_int("n_points", n_points)
    if npts < 2:
        raise ParameterError(f"`n_points` must be at least 2, got {n_points!r}")
    alpha = nonnegative_float("attenuation_db_per_mm", attenuation_db_per_mm)
    lam = beam.wavelength_mm(c, f)
    n = beam.near_field_length_mm(dprobe, f, c)
    zn = np.geomspace(zmin, zmax, npts)
    z = zn * n
    att = -2.0 * alpha * z
    a = 0.5 * dprobe
    bw = 20.0 * np.log10(beam.backwall_echo_relative(z, dprobe, f, c, bandwidth=bandwidth)) + att
    bw_ff = 20.0 * np.log10(np.pi * a * a / (2.0 * lam * z)) + att
    with np.errstate(divide="ignore"):
        fbh = np.stack(
            [20.0 * np.log10(piston_field.disc_echo_relative(z, d, dprobe, f, c, bandwidth=bandwidth)) + att
             for d in sizes]
        )
    fbh_ff = np.stack([20.0 * np.log10(np.pi**2 * a * a * (0.5 * d) ** 2 / (lam * z) ** 2) + att for d in sizes])
    fbh = np.where(np.isfinite(fbh), fbh, np.nan)
    coords = {
        "distance_mm": ("distance_mm", z, {"units": "mm", "long_name": "sound path"}),
        "distance_n": ("distance_mm", zn, {"units": "1", "long_name": "sound path / near-field length"}),
        "fbh_diameter_mm": ("fbh_diameter_mm", sizes, {"units": "mm", "long_name": "flat-bottom-hole diameter"}),
        "size_ratio": ("fbh_diameter_mm", sizes / dprobe, {"units": "1", "long_name": "FBH diameter / probe diameter"}),
    }
    db = {"units": "dB"}
    ds = xr.Dataset(
        {
            "backwall_echo_db": ("distance_mm", bw, {**db, "long_name": "back-wall echo, piston model"}),
            "backwall_echo_far_field_db": ("distance_mm", bw_ff, {**db, "long_name": "back-wall echo, far field"}),
            "fbh_echo_db": (("fbh_diameter_mm", "distance_mm"), fbh, {**db, "long_name": "FBH echo, piston model"}),
            "fbh_echo_far_field_db": (
                ("fbh_diameter_mm", "distance_mm"),
                fbh_ff,
                {**db, "long_name": "FBH echo, far field"},
            ),
            "gain_backwall_db": ("distance_mm", -bw, {**db, "long_name": "gain to bring the back wall to 0 dB"}),
            "gain_fbh_db": (
                ("fbh_diameter_mm", "distance_mm"),
                -fbh,
                {**db, "long_name": "gain to bring an FBH to 0 dB"},
            ),
        },
        coords=coords,
        attrs={
            "probe_diameter_mm": dprobe,
            "probe_frequency_mhz": f,
            "velocity_m_s": c,
            "wavelength_mm": lam,
            "near_field_length_mm": n,
            "bandwidth": float(bandwidth),
            "attenuation_db_per_mm": alpha,
            "normalisation": "dB re the echo of an infinite plane reflector at zero distance; distance_n = z/N, "
            "size_ratio = d/D",
        },
    )
    params = {
        "probe_diameter_mm": dprobe,
        "frequency_mhz": f,
        "velocity_m_s": c,
        "fbh_diameters_mm": sizes.tolist(),
        "max_distance_n": zmax,
        "min_distance_n": zmin,
        "n_points": npts,
        "bandwidth": float(bandwidth),
        "attenuation_db_per_mm": alpha,
    }
    ds.attrs["provenance"] = "[]"
    return with_step(ds, "dgs_diagram", params)
