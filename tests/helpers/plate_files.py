"""A steel plate scan grid that carries everything a file round trip must keep, and file helpers.

Shared by the tests of ndtmap.io (imported as ``from helpers.plate_files import plate``; pytest puts this folder
on the path). Physical values: steel longitudinal velocity 5920 m/s, Krautkramer, Ultrasonic Testing of
Materials, table of velocities (from memory).
"""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

import numpy as np
import xarray as xr

from ndtmap.grid import make_grid, read_provenance, with_step

STEEL_L_M_S = 5920.0  # Krautkramer, Ultrasonic Testing of Materials, table of velocities (from memory)


def tone_burst(t_us, t0_us, f_mhz, cycles=3.0):
    """Gaussian-windowed sine burst (a common model of a broadband echo, no source)."""
    sigma = cycles / (f_mhz * 2.0 * np.sqrt(2.0 * np.log(2.0)))
    return np.exp(-0.5 * ((t_us - t0_us) / sigma) ** 2) * np.sin(2 * np.pi * f_mhz * (t_us - t0_us))


def plate(dtype="float32", n_scan=7, n_index=5, n_time=240, thickness_mm=12.0, seed=1):
    """A straight-beam scan of a steel plate with a thinner patch, one lost A-scan and a full record.

    Carries everything a round trip must keep: float32 NaNs, int16 counts, number and string
    attributes, the provenance record, coordinate attributes, the `missing` mask and a
    simulator-style truth variable.
    """
    rng = np.random.default_rng(seed)
    t = np.arange(n_time) * 0.02  # 50 MHz sampling
    truth = np.full((n_scan, n_index), thickness_mm)
    truth[2:4, 1:3] = 0.75 * thickness_mm
    t_bw = 2 * truth / (STEEL_L_M_S * 1e-3)  # pulse-echo time of flight t = 2 d / v (common practice, no source)
    a = 80 * tone_burst(t[None, None, :], t_bw[..., None], 5.0) + rng.normal(0, 0.5, (n_scan, n_index, n_time))
    kw = dict(
        scan_mm=np.r_[0.0, 0.5, 1.0, 2.0, 2.5, 4.0, 4.5][:n_scan] if n_scan <= 7 else np.arange(n_scan) * 0.5,
        index_mm=np.arange(n_index) * 1.5,
        time_us=t,
        velocity_m_s=STEEL_L_M_S,
        probe_frequency_mhz=5.0,
        probe_diameter_mm=10.0,
        attrs={
            "part_id": "KFP-2207-A",
            "material": "carbon steel plate",
            "part_thickness_mm": thickness_mm,
            "gain_db": 32.5,
            "wave_mode": "longitudinal",
            "operator_notes": "scan from datum edge — µs timing, 3 passes",
            "scan_count": np.int32(3),
            "truth": json.dumps({"reflectors": [{"kind": "wall loss", "depth_mm": 9.0}]}),
        },
    )
    if dtype == "int16":
        counts = np.clip(np.round(a / (100 / 32767)), -32767, 32767).astype(np.int16)
        g = make_grid(counts, fsh_per_count=100 / 32767, **kw)
        g["missing"] = (("scan", "index"), np.zeros((n_scan, n_index), dtype=bool))
        g["missing"][3, 4] = True
    else:
        a = a.astype(np.float32)
        a[5, 0, :] = np.nan  # a lost record
        g = make_grid(a, **kw)
        g["missing"] = (("scan", "index"), np.zeros((n_scan, n_index), dtype=bool))
        g["missing"][1, 1] = True
    g["truth_thickness_mm"] = (("scan", "index"), truth, {"units": "mm", "long_name": "true wall thickness"})
    g["scan"].attrs["encoder"] = "wheel, 0.5 mm"
    return with_step(g, "acquire", {"gain_db": 32.5, "pulser": "square 100 ns"})


def file_digest(path: Path) -> str:
    """SHA-256 of a file, or of the names and bytes of every file below a folder (a Zarr store)."""
    h = hashlib.sha256()
    files = sorted(p for p in Path(path).rglob("*") if p.is_file()) if Path(path).is_dir() else [Path(path)]
    for p in files:
        h.update(str(p.relative_to(path) if Path(path).is_dir() else p.name).encode())
        h.update(p.read_bytes())
    return h.hexdigest()


def assert_same_grid(back: xr.Dataset, g: xr.Dataset) -> None:
    """Identical values, dims, coords and attrs; A-scan bits compared exactly (NaN payloads included)."""
    back = back.load()
    xr.testing.assert_identical(back.drop_encoding(), g)
    assert back["ascan"].dtype == g["ascan"].dtype
    bits = np.uint32 if g["ascan"].dtype == np.float32 else np.uint16
    np.testing.assert_array_equal(back["ascan"].values.view(bits), g["ascan"].values.view(bits))
    assert read_provenance(back) == read_provenance(g)
    for name in g.variables:
        assert back[name].attrs == g[name].attrs, name


def listing(folder: Path) -> list[str]:
    """Sorted names of the entries of `folder` (temporary files would show here)."""
    return sorted(p.name for p in folder.iterdir())
