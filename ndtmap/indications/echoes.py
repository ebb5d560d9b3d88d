"""Telling real reflectors from repeat and geometry echoes, by looking at the A-scans.

A gated amplitude map keeps only the highest echo in the gate, so a repeat
echo (the double reflection of a reflector, reflector - front surface -
reflector, at twice its depth) is often the only echo in a deep gate while its
primary sits in another gate or above the gate start. A practitioner then
looks at the A-scan: is there a stronger echo at half (or a third) of the
depth at the same probe position? :func:`classify_echoes` does that for every
indication, and also finds echoes at the back-wall depth (geometry: the back
wall itself reached by the gate).

Its findings, per indication id, are built into the records by
:func:`ndtmap.size_indications` (``echoes=EchoCheck(grid)``); records are
never changed afterwards. Flags found (vocabulary in
:data:`ndtmap.indications.flags.FLAG_MEANINGS`):

``repeat_echo``
    At the indication's peak position the A-scan holds an echo at least as
    strong at 1/k of its depth (k = 2, 3), within the depth tolerance.
``backwall_echo``
    Straight beam: the depth equals the nominal back-wall depth within one
    echo half-length (:func:`echo_half_length_mm`, the pulse's depth
    resolution from its centre frequency, bandwidth and the velocity; not a
    fraction of the wall): a geometry echo, not a reflector inside the wall.
    A reflector further above the back wall than that (3 mm above the back
    wall of a 100 mm part with a 5 MHz probe) is a separate echo and is not
    flagged. With a back-wall depth map (the back-wall gate's), the echo is
    also the back wall where it lies at the back-wall depth measured at its
    own position (a thinned wall reached by the flaw gate).

With an angle beam (``beam_angle_deg`` > 0) the back wall sends no echo
back to the probe: an echo at the wall depth comes from a corner between a
reflector and the far surface (a corner reflection, typically a
surface-breaking crack at the far surface). It is not flagged
``backwall_echo``; a note says so, and the indication is evaluated as a
reflector.

The tolerance of the repeat check is ``max(tolerance_mm, tolerance_fraction * depth)``
plus one echo half-length, so that the diffraction phase of each echo does
not matter.
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from dataclasses import dataclass
from typing import Any

import numpy as np
import xarray as xr

from ndtmap._shared.validate import nonnegative_float
from ndtmap.errors import ParameterTypeError
from ndtmap.grid.geometry import part_constants
from ndtmap.grid.schema import ascan_in_fsh, grid_attr

__all__ = ["EchoFindings", "EchoCheck", "classify_echoes", "echo_half_length_mm"]


def echo_half_length_mm(grid: xr.Dataset) -> float:
    """Depth extent of half an echo (to -20 dB of the envelope), mm.

    From the probe frequency and the fractional bandwidth attribute
    ``probe_bandwidth`` (0.5 when absent) for a Gaussian pulse:
    ``sqrt(2 ln 10) sigma_t``, ``sigma_t = 2 sqrt(2 ln 2) / (2 pi B f)``,
    turned into depth by the grid's time-to-depth mapping
    (:class:`ndtmap.grid.geometry.PartConstants`).

    Examples
    --------
    >>> from ndtmap.grid.examples import example_grid
    >>> g = example_grid().assign_attrs(probe_frequency_mhz=5.0, probe_bandwidth=0.6, velocity_m_s=5920.0)
    >>> round(echo_half_length_mm(g), 2)
    0.8
    """
    f = float(grid_attr(grid, "probe_frequency_mhz"))
    bw = min(max(float(grid_attr(grid, "probe_bandwidth", 0.5)), 0.2), 1.5)
    sigma_t = 2.0 * math.sqrt(2.0 * math.log(2.0)) / (2.0 * math.pi * bw * f)
    return part_constants(grid).depth_per_us() * math.sqrt(2.0 * math.log(10.0)) * sigma_t


@dataclass(frozen=True)
class EchoFindings:
    """What the A-scan at an indication's peak says about it: flags (``repeat_echo``, ``backwall_echo``) and notes."""

    flags: tuple[str, ...] = ()
    notes: tuple[str, ...] = ()


def _checked_indication(ind: Any, k: int) -> Any:
    for name in ("id", "kind", "scan_mm", "index_mm", "depth_mm", "peak_fsh"):
        if not hasattr(ind, name):
            raise ParameterTypeError(
                f"`indications[{k}]` must be an Indication or an IndicationRecord (it has no `{name}`), "
                f"got {type(ind).__name__}"
            )
    return ind


def classify_echoes(
    grid: xr.Dataset,
    indications: Iterable[Any],
    *,
    backwall_depth_mm: float | None = None,
    multiples: tuple[int, ...] = (2, 3),
    tolerance_mm: float = 1.0,
    tolerance_fraction: float = 0.03,
    min_depth_mm: float | None = None,
    backwall_depth_map: xr.DataArray | None = None,
) -> dict[int, EchoFindings]:
    """Find repeat echoes and back-wall (geometry) echoes among indications, from the A-scans.

    Parameters
    ----------
    grid : xarray.Dataset
        The scan grid the indications come from (immersion grids are skipped:
        their depth axis depends on the interface).
    indications : iterable of Indication or IndicationRecord
        With ``id``, ``kind``, ``scan_mm``, ``index_mm``, ``depth_mm`` and
        ``peak_fsh`` (only amplitude indications with a depth are looked at).
        Not changed.
    backwall_depth_mm : float, optional
        Nominal back-wall depth; default the grid's ``part_thickness_mm``.
    multiples : tuple of int, default (2, 3)
        Repeat orders looked for.
    tolerance_mm, tolerance_fraction : float
        Depth tolerance of the repeat check, see the module docstring (the
        back-wall check uses one echo half-length).
    min_depth_mm : float, optional
        Shallowest depth searched for a primary (default: one echo length, to
        keep clear of the surface).
    backwall_depth_map : xarray.DataArray (scan, index), optional
        Depth of the back-wall echo at each position (the back-wall gate's
        depth map), mm: an echo at the local back-wall depth is the back wall.

    Returns
    -------
    dict of int to EchoFindings
        By indication id, for the indications with a finding. The sizing
        pipeline builds the records with them
        (:func:`ndtmap.size_indications` with ``echoes=EchoCheck(grid)``).

    Examples
    --------
    >>> from ndtmap.grid.examples import example_grid
    >>> g = example_grid((4.0, 8.0), (90.0, 30.0))  # echoes at 4 us and 8 us: depths 11.8 and 23.7 mm
    >>> class Echo:  # anything with these attributes, e.g. an Indication
    ...     id, kind, scan_mm, index_mm, depth_mm, peak_fsh = 1, "amplitude", 0.0, 0.0, 23.68, 30.0
    >>> classify_echoes(g, [Echo()])[1].flags
    ('repeat_echo',)
    """
    indications = [_checked_indication(ind, k) for k, ind in enumerate(indications)]
    if "water_path_mm" in grid.attrs or "water_velocity_m_s" in grid.attrs:
        return {}
    nonnegative_float("tolerance_mm", tolerance_mm)
    nonnegative_float("tolerance_fraction", tolerance_fraction)
    if backwall_depth_mm is None:
        t = grid_attr(grid, "part_thickness_mm")
        backwall_depth_mm = t if isinstance(t, float) else None
    pc = part_constants(grid)
    depth = pc.depth_mm(pc.time_us)
    half = echo_half_length_mm(grid)
    angle_deg = pc.beam_angle_deg
    floor = half * 2.0 if min_depth_mm is None else float(min_depth_mm)
    signal = ascan_in_fsh(grid)
    found: dict[int, EchoFindings] = {}
    for ind in indications:
        if ind.kind != "amplitude" or ind.depth_mm is None or ind.peak_fsh is None:
            continue
        flags: list[str] = []
        notes: list[str] = []
        d, peak = float(ind.depth_mm), float(ind.peak_fsh)
        at_wall = _wall_depth_at(ind, d, half, backwall_depth_mm, backwall_depth_map)
        if at_wall is not None:
            if angle_deg > 0:
                notes.append(_corner_note(at_wall, angle_deg))
            else:
                flags.append("backwall_echo")
                notes.append(
                    f"the echo lies at the back-wall depth ({at_wall:.4g} mm, within one echo half-length "
                    f"{half:.2f} mm): a geometry echo of the back wall reached by the gate, not a reflector inside "
                    "the wall"
                )
        a = np.abs(np.asarray(signal.sel(scan=ind.scan_mm, index=ind.index_mm, method="nearest").values,
                              dtype=np.float64))
        if np.all(np.isfinite(a)):
            repeat = _repeat_note(a, depth, d, peak, multiples, tolerance_mm, tolerance_fraction, half, floor)
            if repeat is not None:
                flags.append("repeat_echo")
                notes.append(repeat)
        if flags or notes:
            found[int(ind.id)] = EchoFindings(tuple(flags), tuple(notes))
    return found


def _wall_depth_at(ind: Any, d: float, half: float, nominal_mm: float | None,
                   depth_map: xr.DataArray | None) -> float | None:
    """The back-wall depth (nominal, else measured at the indication's peak) that `d` matches within `half`."""
    if nominal_mm is not None and abs(d - nominal_mm) <= half:
        return float(nominal_mm)
    if depth_map is not None:
        local = float(depth_map.sel(scan=ind.scan_mm, index=ind.index_mm, method="nearest"))
        if math.isfinite(local) and abs(d - local) <= half:
            return local
    return None


def _corner_note(backwall_depth_mm: float, angle_deg: float) -> str:
    return (
        f"the echo lies at the wall depth ({backwall_depth_mm:g} mm) with an angle beam ({angle_deg:g} deg): the back "
        "wall sends no echo back to an angle-beam probe, so this is a corner reflection at the far surface "
        "(typically a surface-breaking crack there), not a geometry echo; evaluate it as a reflector"
    )


def _repeat_note(a: np.ndarray, depth: np.ndarray, d: float, peak: float, multiples: tuple[int, ...],
                 tolerance_mm: float, tolerance_fraction: float, half: float, floor: float) -> str | None:
    """The note of the first repeat order k whose primary (at d / k) is at least as strong, or None."""
    for k in multiples:
        target = d / k
        tol = max(tolerance_mm, tolerance_fraction * target) + half
        sel = (depth >= max(target - tol, floor)) & (depth <= target + tol)
        if not np.any(sel):
            continue
        primary = float(a[sel].max())
        if primary >= peak:
            at = float(depth[sel][int(np.argmax(a[sel]))])
            return (
                f"the A-scan at the peak position holds a stronger echo ({primary:.1f} %FSH) at {at:.1f} mm, "
                f"1/{k} of this depth: probably its repeat echo (multiple reflection), not a separate reflector"
            )
    return None


@dataclass(frozen=True, eq=False)
class EchoCheck:
    """Look at the A-scans of `grid` for repeat and back-wall echoes while sizing (see :func:`classify_echoes`).

    Give it to :func:`ndtmap.size_indications` as ``echoes=``; ``curve`` is
    the depth-dependent recording curve (a DacCurve: a DAC or a DGS level)
    that a level in dB re the DAC is re, so that echoes the map hides at
    other depths are judged against the curve at their own depth (without
    it, such a level is not searched for hidden echoes); the other fields
    are :func:`classify_echoes`'s options.
    """

    grid: xr.Dataset
    backwall_depth_mm: float | None = None
    multiples: tuple[int, ...] = (2, 3)
    tolerance_mm: float = 1.0
    tolerance_fraction: float = 0.03
    min_depth_mm: float | None = None
    backwall_depth_map: xr.DataArray | None = None
    curve: Any = None

    def __post_init__(self) -> None:
        if not isinstance(self.grid, xr.Dataset):
            raise ParameterTypeError(
                f"`echoes.grid` must be a scan grid (xarray.Dataset), got {type(self.grid).__name__}"
            )

    def findings(self, indications: Iterable[Any]) -> dict[int, EchoFindings]:
        """:func:`classify_echoes` of `indications` with these options."""
        return classify_echoes(
            self.grid, indications, backwall_depth_mm=self.backwall_depth_mm, multiples=self.multiples,
            tolerance_mm=self.tolerance_mm, tolerance_fraction=self.tolerance_fraction,
            min_depth_mm=self.min_depth_mm, backwall_depth_map=self.backwall_depth_map,
        )
