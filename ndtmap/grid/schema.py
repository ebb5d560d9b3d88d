"""The scan grid: one labelled dataset for an encoded grid of A-scans.

The format is written down for other programs in ``docs/grid-format.md``. In
short, a scan grid is an :class:`xarray.Dataset` with

* dimensions ``scan``, ``index`` and ``time`` (in that order for ``ascan``);
* coordinates ``scan`` and ``index`` in millimetres and ``time`` in
  microseconds, each 1-D, finite and strictly increasing, with ``units``
  and ``long_name`` attributes; ``time`` is uniformly sampled;
* the data variable ``ascan(scan, index, time)`` in percent of full screen
  height (``units="%FSH"``), with attribute ``signal`` = ``"rf"`` or
  ``"rectified"``;
* required global attributes ``velocity_m_s``, ``beam_angle_deg``,
  ``probe_frequency_mhz`` and ``probe_diameter_mm``, optional ones listed in
  :data:`OPTIONAL_ATTRS`, and a provenance record (see
  :mod:`ndtmap.grid.provenance`).

This module holds that schema, stated once: :func:`make_grid` builds a grid
from numpy arrays, :func:`grid_problems` lists everything wrong with a
dataset, :func:`validate_grid` raises :class:`~ndtmap.errors.GridError` with
all of them, and :func:`canonical_grid` brings a lenient reading (aliases
of units, another dimension order) into the canonical form.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

import numpy as np
import xarray as xr

from ndtmap.errors import GridError, ParameterError, ParameterTypeError

__all__ = [
    "count_missing_ascans",
    "nonfinite_along_time",
    "check_grid",
    "replace_ascan",
    "DIMS",
    "REQUIRED_ATTRS",
    "OPTIONAL_ATTRS",
    "make_grid",
    "grid_problems",
    "validate_grid",
    "canonical_grid",
    "missing_ascans",
    "ascan_in_fsh",
    "time_step_us",
    "grid_attr",
    "grid_format_version",
    "with_grid_format",
    "V2_ATTRS",
    "PART_SHAPES",
    "SCANNED_SURFACES",
]

#: Dimension names of ``ascan``, in storage order.
DIMS: tuple[str, str, str] = ("scan", "index", "time")

#: Units and long names of the coordinates.
COORD_UNITS: dict[str, str] = {"scan": "mm", "index": "mm", "time": "us"}
COORD_LONG_NAMES: dict[str, str] = {
    "scan": "scan axis position",
    "index": "index axis position",
    "time": "time from pulse entry into the part",
}

#: Accepted spellings of units, mapped to the canonical spelling.
UNIT_ALIASES: dict[str, str] = {
    "mm": "mm",
    "millimetre": "mm",
    "millimetres": "mm",
    "millimeter": "mm",
    "millimeters": "mm",
    "us": "us",
    "µs": "us",
    "μs": "us",
    "microsecond": "us",
    "microseconds": "us",
    "%FSH": "%FSH",
    "%fsh": "%FSH",
    "percent FSH": "%FSH",
    "deg": "deg",
    "degree": "deg",
    "degrees": "deg",
    "°": "deg",
}

#: Required global attributes: name -> (description, unit).
REQUIRED_ATTRS: dict[str, tuple[str, str]] = {
    "velocity_m_s": ("sound velocity of the wave mode used, in the part", "m/s"),
    "beam_angle_deg": ("refracted beam angle in the part, 0 for a straight beam", "deg"),
    "probe_frequency_mhz": ("probe centre frequency", "MHz"),
    "probe_diameter_mm": ("probe element diameter", "mm"),
}

#: Optional global attributes: name -> (description, unit or allowed values).
OPTIONAL_ATTRS: dict[str, tuple[str, str]] = {
    "zero_offset_us": ("time subtracted from `time` so that 0 is pulse entry", "us"),
    "wave_mode": ("wave mode in the part", "longitudinal|shear"),
    "part_thickness_mm": ("nominal wall thickness of the part", "mm"),
    "material": ("material of the part", "text"),
    "part_id": ("identifier of the part", "text"),
    "gain_db": ("instrument gain at acquisition", "dB"),
    "attenuation_db_per_mm": ("one-way material attenuation", "dB/mm"),
    "digitiser_full_scale_fsh": ("digitiser full scale (clipping level)", "%FSH"),
    "operator_notes": ("free text from the acquisition", "text"),
    "water_path_mm": ("water path (immersion or water column) from probe to part surface", "mm"),
    "water_velocity_m_s": ("sound velocity in the water path", "m/s"),
    # format version 2: the part's shape and the beam's direction on the scanned surface
    "beam_skew_deg": ("direction of the beam on the scanned surface: 0 +scan, 90 +index, 180 -scan, 270 -index",
                      "deg"),
    "part_shape": ("shape of the part", "plate|cylinder"),
    "outer_diameter_mm": ("outer diameter of a cylinder", "mm"),
    "inner_diameter_mm": ("bore diameter of a cylinder, 0 for a solid shaft", "mm"),
    "scanned_surface": ("surface of a cylinder the probe is on", "outer|inner"),
}

#: Attributes introduced by version 2 of the format; a grid using any of them (or a rotary
#: index in degrees) is written as version 2, any other grid as version 1.
V2_ATTRS: tuple[str, ...] = ("beam_skew_deg", "part_shape", "outer_diameter_mm", "inner_diameter_mm",
                             "scanned_surface")
#: Attributes that describe a cylinder and need ``part_shape = "cylinder"``.
CYLINDER_ATTRS: tuple[str, ...] = ("outer_diameter_mm", "inner_diameter_mm", "scanned_surface")
PART_SHAPES = ("plate", "cylinder")
SCANNED_SURFACES = ("outer", "inner")
#: Units the ``index`` coordinate may have on a cylinder (mm of arc on the scanned surface, or degrees).
INDEX_UNITS_CYLINDER = ("mm", "deg")
#: Beam skews an angle beam may have on a cylinder: axial (0, 180) or circumferential (90, 270).
CYLINDER_SKEWS_DEG = (0.0, 90.0, 180.0, 270.0)

WAVE_MODES = ("longitudinal", "shear")
SIGNAL_KINDS = ("rf", "rectified")
ALLOWED_DTYPES = ("float32", "float64", "int16", "int8", "uint8", "uint16")

# Plausibility limits: a value outside them is almost surely a unit mistake.
_LIMITS: dict[str, tuple[float, float, bool, bool]] = {
    # name: (low, high, low_inclusive, high_inclusive)
    "velocity_m_s": (100.0, 20000.0, False, True),
    "beam_angle_deg": (0.0, 90.0, True, False),
    "probe_frequency_mhz": (0.01, 200.0, False, True),
    "probe_diameter_mm": (0.05, 500.0, False, True),
}
_OPTIONAL_LIMITS: dict[str, tuple[float, float, bool, bool]] = {
    "zero_offset_us": (-1e6, 1e6, True, True),
    "part_thickness_mm": (0.0, 1e5, False, True),
    "gain_db": (-200.0, 200.0, True, True),
    "attenuation_db_per_mm": (0.0, 100.0, True, True),
    "digitiser_full_scale_fsh": (0.0, 1e6, False, True),
    "water_path_mm": (0.0, 1e4, True, True),
    "water_velocity_m_s": (100.0, 20000.0, False, True),
    "beam_skew_deg": (0.0, 360.0, True, False),
    "outer_diameter_mm": (0.0, 1e5, False, True),
    "inner_diameter_mm": (0.0, 1e5, True, True),
}

_UNIFORM_RTOL = 1e-3


def _number(value: Any) -> float | None:
    """Return a float for a real scalar attribute, else None."""
    if isinstance(value, bool | str | bytes) or value is None:
        return None
    try:
        arr = np.asarray(value)
    except Exception:  # pragma: no cover - defensive
        return None
    if arr.ndim == 1 and arr.size == 1:  # netCDF sometimes stores scalars as 1-element arrays
        arr = arr.reshape(())
    if arr.ndim != 0 or not np.issubdtype(arr.dtype, np.number) or np.iscomplexobj(arr):
        return None
    return float(arr)


def grid_attr(ds: xr.Dataset, name: str, default: Any = None) -> Any:
    """Return the global attribute `name` as a Python value (float for numbers).

    Parameters
    ----------
    ds : xarray.Dataset
        A scan grid.
    name : str
        Attribute name, e.g. ``"velocity_m_s"``.
    default : object, optional
        Returned when the attribute is absent.

    Returns
    -------
    object
        A float for numeric attributes, the stored value otherwise.

    Examples
    --------
    >>> import xarray as xr
    >>> grid_attr(xr.Dataset(attrs={"velocity_m_s": 5920}), "velocity_m_s")
    5920.0
    """
    if name not in ds.attrs:
        return default
    value = ds.attrs[name]
    number = _number(value)
    return number if number is not None else value


def _check_coord(ds: xr.Dataset, name: str, problems: list[str], units_allowed: tuple[str, ...] = ()) -> None:
    if name not in ds.coords:
        problems.append(
            f"coordinate `{name}` is missing; add it in {COORD_UNITS[name]} "
            f"(e.g. ds.assign_coords({name}=values))"
        )
        return
    c = ds.coords[name]
    if c.dims != (name,):
        problems.append(f"coordinate `{name}` must be 1-D along `{name}`, has dims {c.dims}")
        return
    units = c.attrs.get("units")
    if units is None:
        problems.append(f"coordinate `{name}` has no `units` attribute; set units={COORD_UNITS[name]!r}")
    elif UNIT_ALIASES.get(str(units)) not in (units_allowed or (COORD_UNITS[name],)):
        if name == "index" and UNIT_ALIASES.get(str(units)) == "deg":
            problems.append(
                "coordinate `index` is in degrees, which only a cylinder's rotary index may be; "
                "set part_shape='cylinder' (with its diameters) or give the index in mm"
            )
        else:
            expected = " or ".join(repr(u) for u in (units_allowed or (COORD_UNITS[name],)))
            problems.append(
                f"coordinate `{name}` has units {units!r}; expected {expected} "
                "(convert the values and set the attribute)"
            )
    values = np.asarray(c.values)
    if values.size == 0:
        problems.append(f"coordinate `{name}` is empty; a grid needs at least one position")
        return
    if not np.issubdtype(values.dtype, np.number) or np.iscomplexobj(values):
        problems.append(f"coordinate `{name}` must be real numbers, has dtype {values.dtype}")
        return
    if not np.all(np.isfinite(values)):
        bad = int(np.count_nonzero(~np.isfinite(values)))
        problems.append(f"coordinate `{name}` has {bad} NaN or infinite value(s); every position must be finite")
        return
    if name == "time" and values.size < 2:
        problems.append("coordinate `time` has a single sample; an A-scan needs at least two samples")
        return
    if values.size > 1:
        steps = np.diff(values.astype(np.float64))
        if np.any(steps <= 0):
            where = int(np.argmax(steps <= 0))
            kind = "repeats a value" if steps[where] == 0 else "decreases"
            problems.append(
                f"coordinate `{name}` must be strictly increasing but {kind} at position {where + 1} "
                f"({float(values[where])!r} then {float(values[where + 1])!r}); sort with ds.sortby({name!r}) "
                "or remove duplicate positions"
            )
        elif name == "time":
            dt = float(np.median(steps))
            if np.max(np.abs(steps - dt)) > _UNIFORM_RTOL * dt:
                problems.append(
                    "coordinate `time` must be uniformly sampled; steps range from "
                    f"{steps.min():g} to {steps.max():g} us (resample to a constant step)"
                )


def _check_attrs(ds: xr.Dataset, problems: list[str]) -> None:
    for name, (desc, unit) in REQUIRED_ATTRS.items():
        if name not in ds.attrs:
            problems.append(f"global attribute `{name}` ({desc}, in {unit}) is missing")
            continue
        value = _number(ds.attrs[name])
        if value is None:
            problems.append(f"global attribute `{name}` must be a number in {unit}, got {ds.attrs[name]!r}")
            continue
        low, high, lo_inc, hi_inc = _LIMITS[name]
        if not math.isfinite(value) or (value < low if lo_inc else value <= low) or (
            value > high if hi_inc else value >= high
        ):
            lb, hb = ("[" if lo_inc else "("), ("]" if hi_inc else ")")
            problems.append(
                f"global attribute `{name}` is {value:g} {unit}, outside the plausible range "
                f"{lb}{low:g}, {high:g}{hb} {unit}"
            )
    for name, (low, high, lo_inc, hi_inc) in _OPTIONAL_LIMITS.items():
        if name not in ds.attrs:
            continue
        value = _number(ds.attrs[name])
        unit = OPTIONAL_ATTRS[name][1]
        if value is None:
            problems.append(f"global attribute `{name}` must be a number in {unit}, got {ds.attrs[name]!r}")
        elif not math.isfinite(value) or (value < low if lo_inc else value <= low) or (
            value > high if hi_inc else value >= high
        ):
            lb, hb = ("[" if lo_inc else "("), ("]" if hi_inc else ")")
            problems.append(
                f"global attribute `{name}` is {value:g} {unit}, outside the plausible range "
                f"{lb}{low:g}, {high:g}{hb} {unit}"
            )
    mode = ds.attrs.get("wave_mode")
    if mode is not None and mode not in WAVE_MODES:
        problems.append(f"global attribute `wave_mode` must be one of {WAVE_MODES}, got {mode!r}")


def _check_ascan(ds: xr.Dataset, problems: list[str], *, check_values: bool) -> None:
    if "ascan" not in ds.data_vars:
        names = ", ".join(map(str, ds.data_vars)) or "none"
        problems.append(f"data variable `ascan` is missing (data variables present: {names})")
        return
    a = ds["ascan"]
    if set(a.dims) != set(DIMS) or a.ndim != 3:
        problems.append(f"`ascan` must have the dimensions {DIMS}, has {a.dims}")
        return
    if a.dims != DIMS:
        problems.append(
            f"`ascan` dimensions must be in the order {DIMS}, are {a.dims} (use ds.transpose(*ndtmap.DIMS))"
        )
    if a.dtype.name not in ALLOWED_DTYPES:
        problems.append(
            f"`ascan` has dtype {a.dtype}; use float32 or int16 "
            f"(readers also accept {', '.join(ALLOWED_DTYPES[1:])})"
        )
        return
    units = a.attrs.get("units")
    if units is None:
        problems.append("`ascan` has no `units` attribute; set units='%FSH'")
    elif UNIT_ALIASES.get(str(units)) != "%FSH":
        problems.append(f"`ascan` has units {units!r}; amplitudes must be in '%FSH'")
    signal = a.attrs.get("signal")
    if signal not in SIGNAL_KINDS:
        problems.append(f"`ascan` attribute `signal` must be 'rf' or 'rectified', got {signal!r}")
    if np.issubdtype(a.dtype, np.integer) and "fsh_per_count" in a.attrs:
        scale = _number(a.attrs["fsh_per_count"])
        if scale is None or not math.isfinite(scale) or scale <= 0:
            problems.append(f"`ascan` attribute `fsh_per_count` must be a number > 0, got {a.attrs['fsh_per_count']!r}")
    if 0 in a.shape:
        problems.append(f"`ascan` is empty (shape {dict(zip(a.dims, a.shape, strict=True))})")
        return
    mask_ok = True
    if "missing" in ds.data_vars:
        m = ds["missing"]
        if m.dims != ("scan", "index") or m.dtype != bool:
            mask_ok = False
            problems.append(f"data variable `missing` must be boolean on ('scan', 'index'), has {m.dims} {m.dtype}")
    if check_values and mask_ok and (np.issubdtype(a.dtype, np.floating) or "missing" in ds.data_vars):
        missing = missing_ascans(ds)
        if bool(missing.all()):
            problems.append(
                "every A-scan is missing (NaN or marked in `missing`); the file holds no usable data"
            )


def grid_problems(ds: Any, *, check_values: bool = True) -> list[str]:
    """List every way in which `ds` departs from the scan-grid format.

    Parameters
    ----------
    ds : xarray.Dataset
        The dataset to check.
    check_values : bool, default True
        Also look at the A-scan values (whether every A-scan is missing).
        Set False to check only metadata, e.g. on a huge lazy grid.

    Returns
    -------
    list of str
        One sentence per problem; empty when the grid is valid.

    Examples
    --------
    >>> import xarray as xr
    >>> grid_problems(xr.Dataset())[0]
    'coordinate `scan` is missing; add it in mm (e.g. ds.assign_coords(scan=values))'
    """
    if not isinstance(ds, xr.Dataset):
        return [f"expected an xarray.Dataset, got {type(ds).__name__}"]
    problems: list[str] = []
    cylinder = ds.attrs.get("part_shape") == "cylinder"
    for name in DIMS:
        _check_coord(ds, name, problems, INDEX_UNITS_CYLINDER if (cylinder and name == "index") else ())
    _check_ascan(ds, problems, check_values=check_values)
    _check_attrs(ds, problems)
    _check_part_shape(ds, problems)
    return problems


def _check_part_shape(ds: xr.Dataset, problems: list[str]) -> None:
    """Check the format-2 attributes together: shape, diameters, scanned surface, skew."""
    shape = ds.attrs.get("part_shape", "plate")
    if shape not in PART_SHAPES:
        problems.append(f"global attribute `part_shape` must be 'plate' or 'cylinder', got {shape!r}")
        return
    if shape == "plate":
        for name in CYLINDER_ATTRS:
            if name in ds.attrs:
                problems.append(
                    f"global attribute `{name}` describes a cylinder but `part_shape` is 'plate' (the default); "
                    "set part_shape='cylinder' or remove it"
                )
        return
    outer = _number(ds.attrs.get("outer_diameter_mm"))
    inner = _number(ds.attrs.get("inner_diameter_mm"))
    for name in ("outer_diameter_mm", "inner_diameter_mm"):
        if name not in ds.attrs:
            hint = " (0 for a solid shaft)" if name == "inner_diameter_mm" else ""
            problems.append(f"a cylinder needs the global attribute `{name}` in mm{hint}; it is missing")
    surface = ds.attrs.get("scanned_surface")
    if surface not in SCANNED_SURFACES:
        problems.append(
            f"a cylinder needs the global attribute `scanned_surface` = 'outer' or 'inner' (probe in the bore), "
            f"got {surface!r}"
        )
    if outer is not None and inner is not None and math.isfinite(outer) and math.isfinite(inner):
        if inner >= outer:
            problems.append(
                f"`inner_diameter_mm` ({inner:g} mm) must be smaller than `outer_diameter_mm` ({outer:g} mm)"
            )
        elif surface == "inner" and inner == 0:
            problems.append("`scanned_surface` is 'inner' but the shaft is solid (`inner_diameter_mm` = 0)")
        thickness = _number(ds.attrs.get("part_thickness_mm"))
        wall = (outer - inner) / 2.0
        if inner > 0 and thickness is not None and inner < outer and abs(thickness - wall) > max(0.01 * wall, 0.1):
            problems.append(
                f"`part_thickness_mm` ({thickness:g} mm) differs from the wall (D - d)/2 = {wall:g} mm of the "
                "cylinder's diameters; correct one of them or remove `part_thickness_mm`"
            )
    skew = _number(ds.attrs.get("beam_skew_deg", 0.0))
    angle = _number(ds.attrs.get("beam_angle_deg"))
    if skew is not None and angle is not None and angle > 0 and math.isfinite(skew) and not any(
        abs(skew - allowed) <= 1e-6 for allowed in CYLINDER_SKEWS_DEG
    ):
        problems.append(
            f"`beam_skew_deg` is {skew:g} deg; an angle beam on a cylinder must travel axially (0 or 180) "
            "or circumferentially (90 or 270): skewed helical paths are not modelled"
        )


def grid_format_version(ds: xr.Dataset) -> str:
    """The lowest format version that describes `ds`: ``"ndtmap-grid 2"`` if it uses a version-2 feature.

    Version 2 features are the attributes :data:`V2_ATTRS` and an ``index``
    coordinate in degrees. Writers stamp this version, so that files of a
    plain flat part stay readable by releases that know only version 1.

    Examples
    --------
    >>> import xarray as xr
    >>> grid_format_version(xr.Dataset(attrs={"velocity_m_s": 5920.0}))
    'ndtmap-grid 1'
    >>> grid_format_version(xr.Dataset(attrs={"beam_skew_deg": 90.0}))
    'ndtmap-grid 2'
    """
    uses_v2 = any(name in ds.attrs for name in V2_ATTRS)
    if "index" in ds.coords and UNIT_ALIASES.get(str(ds.coords["index"].attrs.get("units"))) == "deg":
        uses_v2 = True
    return GRID_FORMAT_VERSION if uses_v2 else GRID_FORMAT_V1


def with_grid_format(ds: xr.Dataset) -> xr.Dataset:
    """A shallow copy of `ds` whose ``grid_format`` names the version its content needs (never lowered).

    A grid that declares a higher version than it needs keeps its declaration.
    """
    needed = grid_format_version(ds)
    declared = ds.attrs.get("grid_format")
    try:
        keep = int(str(declared).split()[1]) >= int(needed.split()[1]) and str(declared).startswith("ndtmap-grid ")
    except (IndexError, ValueError):
        keep = False
    if keep:
        return ds
    out = ds.copy(deep=False)
    out.attrs = {**ds.attrs, "grid_format": needed}
    return out


def validate_grid(ds: Any, *, check_values: bool = True, source: str | None = None) -> xr.Dataset:
    """Check `ds` against the scan-grid format and return it unchanged.

    Parameters
    ----------
    ds : xarray.Dataset
        The dataset to check.
    check_values : bool, default True
        See :func:`grid_problems`.
    source : str, optional
        Where the dataset came from (a path), named in the error message.

    Returns
    -------
    xarray.Dataset
        `ds` itself, so that ``validate_grid(ds)`` can be chained.

    Raises
    ------
    GridError
        With every problem found, in ``err.problems``.
    """
    problems = grid_problems(ds, check_values=check_values)
    if problems:
        raise GridError(problems, source=source)
    return ds


def canonical_grid(ds: xr.Dataset) -> xr.Dataset:
    """Return `ds` in canonical form: dimension order, unit spellings, long names.

    Only harmless differences are mended (``"µs"`` becomes ``"us"``, dims are
    transposed to ``(scan, index, time)``, missing ``long_name`` attributes
    are added, numeric attributes stored as 1-element arrays become scalars).
    Nothing is converted between units.
    """
    if not isinstance(ds, xr.Dataset):
        raise GridError(f"expected an xarray.Dataset, got {type(ds).__name__}")
    out = ds.copy()
    if "ascan" in out.data_vars and set(out["ascan"].dims) == set(DIMS):
        out["ascan"] = out["ascan"].transpose(*DIMS)
    for name in DIMS:
        if name in out.coords:
            attrs = dict(out.coords[name].attrs)
            units = attrs.get("units")
            if units is not None and str(units) in UNIT_ALIASES:
                attrs["units"] = UNIT_ALIASES[str(units)]
            attrs.setdefault("long_name", COORD_LONG_NAMES[name])
            out.coords[name].attrs = attrs
    if "ascan" in out.data_vars:
        attrs = dict(out["ascan"].attrs)
        units = attrs.get("units")
        if units is not None and str(units) in UNIT_ALIASES:
            attrs["units"] = UNIT_ALIASES[str(units)]
        attrs.setdefault("long_name", "A-scan amplitude")
        out["ascan"].attrs = attrs
    attrs = dict(out.attrs)
    for name in (*REQUIRED_ATTRS, *_OPTIONAL_LIMITS):
        if name in attrs:
            number = _number(attrs[name])
            if number is not None:
                attrs[name] = number
    out.attrs = attrs
    return out


def make_grid(
    ascan: Any,
    *,
    scan_mm: Any,
    index_mm: Any,
    time_us: Any,
    velocity_m_s: float,
    probe_frequency_mhz: float,
    probe_diameter_mm: float,
    beam_angle_deg: float = 0.0,
    signal: str = "rf",
    fsh_per_count: float | None = None,
    attrs: Mapping[str, Any] | None = None,
) -> xr.Dataset:
    """Build a scan grid from numpy (or dask) arrays.

    Parameters
    ----------
    ascan : array_like, shape (n_scan, n_index, n_time)
        A-scans in %FSH (float) or in digitiser counts (integer, with
        `fsh_per_count`). A-scans that are NaN mark missing positions.
    scan_mm, index_mm : array_like, shape (n_scan,) and (n_index,)
        Probe positions along the scan and index axes, in mm, strictly
        increasing (spacing may vary).
    time_us : array_like, shape (n_time,)
        Sample times in microseconds from pulse entry into the part,
        uniformly spaced.
    velocity_m_s : float
        Sound velocity of the wave mode used, in the part, in m/s.
    probe_frequency_mhz, probe_diameter_mm : float
        Probe centre frequency (MHz) and element diameter (mm).
    beam_angle_deg : float, default 0
        Refracted beam angle in the part, in degrees (0: straight beam).
    signal : {'rf', 'rectified'}, default 'rf'
        Whether the A-scans are bipolar RF or rectified.
    fsh_per_count : float, optional
        For integer `ascan`: %FSH per digitiser count.
    attrs : mapping, optional
        Further global attributes (see :data:`OPTIONAL_ATTRS`).

    Returns
    -------
    xarray.Dataset
        A valid scan grid, float32 or integer as given (float64 and float16
        input are stored as float32).

    Raises
    ------
    GridError
        When the arrays or attributes do not make a valid grid; every
        problem is listed.

    Examples
    --------
    >>> import numpy as np
    >>> g = make_grid(np.zeros((2, 3, 4)), scan_mm=[0, 1], index_mm=[0, 2, 4],
    ...               time_us=[0, 0.02, 0.04, 0.06], velocity_m_s=5920,
    ...               probe_frequency_mhz=5, probe_diameter_mm=10)
    >>> dict(g.sizes)
    {'scan': 2, 'index': 3, 'time': 4}
    >>> g.ascan.attrs["units"]
    '%FSH'
    """
    if hasattr(ascan, "dask") or type(ascan).__module__.startswith("dask"):
        data = ascan
    else:
        data = np.asarray(ascan)
    if data.ndim != 3:
        raise GridError(f"`ascan` must be 3-D (scan, index, time), got {data.ndim}-D with shape {data.shape}")
    if data.dtype in (np.float64, np.float16):
        data = data.astype(np.float32)
    coords = {}
    for name, values in (("scan", scan_mm), ("index", index_mm), ("time", time_us)):
        arr = np.asarray(values, dtype=np.float64)
        if arr.ndim != 1:
            raise GridError(f"`{name}` coordinate must be 1-D, got shape {arr.shape}")
        coords[name] = xr.Variable(
            (name,), arr, attrs={"units": COORD_UNITS[name], "long_name": COORD_LONG_NAMES[name]}
        )
    expected = tuple(coords[d].size for d in DIMS)
    if tuple(data.shape) != expected:
        raise GridError(
            f"`ascan` shape {tuple(data.shape)} does not match the coordinates "
            f"(scan={expected[0]}, index={expected[1]}, time={expected[2]})"
        )
    if signal not in SIGNAL_KINDS:
        raise ParameterError(f"`signal` must be one of {{'rf', 'rectified'}}, got {signal!r}")
    ascan_attrs: dict[str, Any] = {"units": "%FSH", "long_name": "A-scan amplitude", "signal": signal}
    if fsh_per_count is not None:
        ascan_attrs["fsh_per_count"] = float(fsh_per_count)
    global_attrs: dict[str, Any] = {
        "velocity_m_s": velocity_m_s,
        "beam_angle_deg": beam_angle_deg,
        "probe_frequency_mhz": probe_frequency_mhz,
        "probe_diameter_mm": probe_diameter_mm,
    }
    global_attrs.update(dict(attrs or {}))
    for key, value in list(global_attrs.items()):
        number = _number(value)
        if number is not None:
            global_attrs[key] = number
    ds = xr.Dataset(
        {"ascan": xr.Variable(DIMS, data, attrs=ascan_attrs)},
        coords=coords,
        attrs=global_attrs,
    )
    ds.attrs.setdefault("provenance", "[]")
    ds.attrs.setdefault("grid_format", grid_format_version(ds))
    return validate_grid(ds, check_values=not hasattr(data, "dask"))


#: The newest version of the grid format this release reads and writes.
GRID_FORMAT_VERSION = "ndtmap-grid 2"
#: Version 1, still written for grids that use no version-2 feature (see :func:`grid_format_version`).
GRID_FORMAT_V1 = "ndtmap-grid 1"


def missing_ascans(ds: xr.Dataset) -> xr.DataArray:
    """Mark the A-scans that are missing.

    An A-scan is missing when any of its samples is NaN or infinite (an
    encoder drop-out, a lost record), or when the optional boolean variable
    ``missing(scan, index)`` says so. Results at missing positions are
    missing, never zero.

    Parameters
    ----------
    ds : xarray.Dataset
        A scan grid.

    Returns
    -------
    xarray.DataArray of bool, dims (scan, index)
        True where the A-scan is missing. Lazy when `ds` is dask-backed.

    Examples
    --------
    >>> import numpy as np
    >>> a = np.ones((2, 2, 3), dtype=np.float32); a[1, 0, :] = np.nan
    >>> g = make_grid(a, scan_mm=[0, 1], index_mm=[0, 1], time_us=[0, 1, 2],
    ...               velocity_m_s=5920, probe_frequency_mhz=5, probe_diameter_mm=10)
    >>> missing_ascans(g).values.tolist()
    [[False, False], [True, False]]
    """
    a = ds["ascan"]
    if np.issubdtype(a.dtype, np.floating):  # integer counts cannot hold a NaN: nothing to read
        # dask="allowed": the kernel works on dask arrays as they are, whatever their chunks along time
        bad = xr.apply_ufunc(nonfinite_along_time, a, input_core_dims=[["time"]], dask="allowed")
    else:
        bad = xr.zeros_like(a.isel(time=0, drop=True), dtype=bool)
    if "missing" in ds.data_vars:
        bad = bad | ds["missing"].astype(bool)
    bad = bad.rename("missing")
    bad.attrs = {"long_name": "A-scan missing", "units": "1"}
    return bad


def nonfinite_along_time(samples: Any) -> Any:
    """True where an A-scan (the last axis) holds a NaN or infinite sample: the definition of a missing A-scan.

    Works on numpy and dask arrays alike.

    Examples
    --------
    >>> nonfinite_along_time(np.array([[1.0, 2.0], [1.0, np.inf]])).tolist()
    [False, True]
    """
    return ~np.isfinite(samples).all(axis=-1)


def count_missing_ascans(ds: xr.Dataset) -> int:
    """The number of missing A-scans (``missing_ascans(ds).sum()``).

    For an in-memory grid the count is made on the arrays themselves,
    without building an xarray result (so a quick summary, ``ndtmap info``,
    does not load dask).

    Examples
    --------
    >>> a = np.ones((2, 2, 3), dtype=np.float32); a[1, 0, 1] = np.nan
    >>> g = make_grid(a, scan_mm=[0, 1], index_mm=[0, 1], time_us=[0, 1, 2],
    ...               velocity_m_s=5920, probe_frequency_mhz=5, probe_diameter_mm=10)
    >>> count_missing_ascans(g)
    1
    """
    a = ds["ascan"]
    if a.chunks is not None:
        return int(missing_ascans(ds).sum().compute())
    order = [a.get_axis_num(d) for d in ("scan", "index", "time")]
    if np.issubdtype(a.dtype, np.floating):
        bad = nonfinite_along_time(np.transpose(np.asarray(a.values), order))
    else:
        bad = np.zeros((a.sizes["scan"], a.sizes["index"]), dtype=bool)
    if "missing" in ds.data_vars:
        flagged = ds["missing"]
        bad = bad | np.transpose(np.asarray(flagged.values), [flagged.get_axis_num(d) for d in ("scan", "index")])
    return int(bad.sum())


def ascan_in_fsh(ds: xr.Dataset) -> xr.DataArray:
    """Return ``ascan`` as float32 in %FSH (integer counts scaled).

    Parameters
    ----------
    ds : xarray.Dataset
        A scan grid.

    Returns
    -------
    xarray.DataArray, dims (scan, index, time)
        Floating-point A-scans in %FSH; lazy when `ds` is dask-backed.
        Integer data is scaled by ``fsh_per_count`` (default 1).
    """
    a = ds["ascan"]
    if np.issubdtype(a.dtype, np.floating):
        out = a if a.dtype == np.float32 else a.astype(np.float32)
    else:
        scale = float(a.attrs.get("fsh_per_count", 1.0))
        out = a.astype(np.float32) * np.float32(scale)
    if "missing" in ds.data_vars:
        out = out.where(~ds["missing"].astype(bool))
    out.attrs = {k: v for k, v in a.attrs.items() if k != "fsh_per_count"}
    out.attrs["units"] = "%FSH"
    return out


def time_step_us(ds: xr.Dataset) -> float:
    """Return the sampling interval of ``time`` in microseconds.

    Raises
    ------
    GridError
        When the grid has fewer than two time samples.
    """
    t = np.asarray(ds["time"].values, dtype=np.float64)
    if t.size < 2:
        raise GridError("the grid has fewer than two time samples; no sampling interval is defined")
    return float((t[-1] - t[0]) / (t.size - 1))


def check_grid(grid: Any, name: str = "grid") -> xr.Dataset:
    """Return `grid` after a metadata check (values are not read, so dask grids stay lazy)."""
    if not isinstance(grid, xr.Dataset):
        raise ParameterTypeError(f"`{name}` must be a scan grid (xarray.Dataset), got {type(grid).__name__}")
    return validate_grid(grid, check_values=False)


def replace_ascan(grid: xr.Dataset, data: xr.DataArray, **ascan_attrs: Any) -> xr.Dataset:
    """Return a copy of `grid` whose ``ascan`` is `data` (float32 %FSH), attributes updated."""
    attrs = {k: v for k, v in grid["ascan"].attrs.items() if k != "fsh_per_count"}
    attrs.update(ascan_attrs)
    attrs["units"] = "%FSH"
    out = grid.copy(deep=False)
    out.attrs = dict(grid.attrs)
    data = data.astype(np.float32).transpose("scan", "index", "time")
    out["ascan"] = xr.Variable(("scan", "index", "time"), data.data, attrs=attrs)
    return out
