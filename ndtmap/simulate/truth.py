"""The truth a simulated grid carries, written by the simulator and read back.

:func:`ndtmap.simulate.scan.simulate_scan` stores, as JSON in the grid's
attribute ``truth``, everything needed to check a later result: the set-up
(probe, material, part with its thinnest wall), each reflector's own record
(:meth:`~ndtmap.simulate.reflectors.PlanarReflector.truth` and the like,
numbered from 1), the noise, the near-field length and wavelength, the gain
used, the number of drop-outs and the seed. :func:`scan_truth` reads it back.
"""

from __future__ import annotations

import json
from collections.abc import Sequence
from dataclasses import asdict
from typing import Any

import numpy as np
import xarray as xr

from ndtmap._version import __version__
from ndtmap.errors import ParameterError
from ndtmap.simulate.model import _Model
from ndtmap.simulate.reflectors import Reflector
from ndtmap.simulate.scenario import Noise

__all__ = ["scan_truth"]


def _truth_record(
    model: _Model,
    reflectors: Sequence[Reflector],
    noise: Noise,
    *,
    thickness_mm: np.ndarray,
    gain_db: float,
    dropout: np.ndarray,
    seed: int,
) -> dict[str, Any]:
    """The truth of one simulated scan (see the module docstring), ready for JSON.

    `thickness_mm` is the true remaining wall on the scan positions, `dropout` the mask of lost A-scans.
    """
    part = model.part
    return {
        "simulator": f"ndtmap {__version__}",
        "probe": asdict(model.probe),
        "material": asdict(model.material),
        "part": {
            "thickness_mm": part.thickness_mm,
            "wall_losses": [asdict(w) for w in part.wall_losses],
            "water_path_mm": part.water_path_mm,
            "surface_tilt_deg": part.surface_tilt_deg,
            "water_velocity_m_s": part.water_velocity_m_s,
            "min_thickness_mm": float(thickness_mm.min()),
        },
        "reflectors": [dict(r.truth(), id=i + 1) for i, r in enumerate(reflectors)],
        "noise": asdict(noise),
        "near_field_mm": model.n_mm,
        "wavelength_mm": model.lam,
        "gain_db": gain_db,
        "dropouts": int(dropout.sum()),
        "seed": seed,
    }


def scan_truth(ds: xr.Dataset) -> dict[str, Any]:
    """Return the truth a simulated grid carries (reflectors, part, probe).

    Parameters
    ----------
    ds : xarray.Dataset
        A grid made by :func:`~ndtmap.simulate.scan.simulate_scan` (or read from such a file).

    Returns
    -------
    dict
        Empty when the grid carries no truth (measured data).

    Raises
    ------
    ParameterError
        When the attribute ``truth`` is there but not valid JSON.

    Examples
    --------
    >>> scan_truth(xr.Dataset(attrs={"truth": '{"seed": 3}'}))
    {'seed': 3}
    >>> scan_truth(xr.Dataset())
    {}
    """
    raw = ds.attrs.get("truth")
    if not raw:
        return {}
    try:
        return json.loads(raw)
    except (TypeError, json.JSONDecodeError):
        raise ParameterError("attribute `truth` is not valid JSON") from None
