"""The bundled sample grids: an invented workshop, three parts, known truth.

Kestrel Forge & Plate is a fictional fabricator. Its inspection bay scans

* ``plate_laminations.nc`` -- plate KFP-PL-2041, 25 mm rolled steel, straight
  beam 4 MHz / 8 mm in contact, with laminations at three depths (one runs off
  the scanned area);
* ``forging_block.nc`` -- forging KFP-FG-0317, a 160 mm block, 2 MHz / 20 mm,
  with flat-bottom-hole-like reflectors at 100-140 mm and a planar reflector
  at 55 mm that shows a repeat echo at 110 mm;
* ``corroded_wall.nc`` -- wall section KFP-PW-1180 of a vessel, 12 mm nominal,
  5 MHz / 6 mm, with areas of wall loss on the far side and a few encoder
  drop-outs.

Every file is simulated by :func:`ndtmap.simulate.scan.simulate_scan` from a fixed
random seed, so ``ndtmap make-samples DIR`` rebuilds the same A-scans; the
truth travels inside each file. The data is synthetic and for demonstration
and testing only.
"""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path

import xarray as xr

from ndtmap.errors import FileFormatError, ParameterError
from ndtmap.io import save_grid
from ndtmap.simulate.reflectors import FlatBottomHole, PlanarReflector
from ndtmap.simulate.scan import simulate_scan
from ndtmap.simulate.scenario import Material, Noise, Part, Probe, ScanPlan, WallLoss

__all__ = ["SAMPLES", "build_sample", "build_samples", "sample_path"]

_NOTE = "Synthetic scan made by ndtmap's simulator for demonstration; not a real part."


def plate_laminations() -> xr.Dataset:
    """Plate KFP-PL-2041: laminations in 25 mm plate."""
    reflectors = [
        PlanarReflector.rectangle((22.0, 52.0), (14.0, 34.0), 11.0, label="L1 mid-wall lamination"),
        PlanarReflector.ellipse((86.0, 52.0), (12.0, 8.0), 17.0, label="L2 lamination"),
        PlanarReflector.rectangle((70.0, 78.0), (12.0, 18.0), 9.0, label="L3 small lamination"),
        PlanarReflector.rectangle((104.0, 130.0), (60.0, 74.0), 14.0, label="L4 lamination at scan edge"),
    ]
    plan = ScanPlan.raster((0.0, 120.0), (0.0, 80.0), (1.5, 2.0), (0.0, 17.5), sampling_mhz=40.0)
    return simulate_scan(
        Probe(4.0, 8.0, bandwidth=0.6),
        Material.from_handbook("steel", attenuation_db_per_mm=0.004),
        Part(25.0),
        reflectors,
        plan,
        noise=Noise(grain_fsh=0.8, electronic_fsh=0.4),
        backwall_fsh=60.0,
        dtype="int16",
        seed=2041,
        attrs={
            "part_id": "KFP-PL-2041",
            "operator_notes": "Plate KFP-PL-2041, heat 7Q, as rolled. " + _NOTE,
            "scenario": "Kestrel Forge & Plate (fictional): plate lamination survey",
        },
    )


def forging_block() -> xr.Dataset:
    """Forging KFP-FG-0317: small reflectors deep in a block, one planar reflector."""
    reflectors = [
        FlatBottomHole(30.0, 25.0, 100.0, 2.0, label="R1"),
        FlatBottomHole(70.0, 55.0, 120.0, 3.0, label="R2"),
        FlatBottomHole(95.0, 20.0, 140.0, 4.0, label="R3"),
        # a partly bonded planar reflector (oxide-filled): reflects 40 % of the wave
        PlanarReflector.rectangle((14.0, 30.0), (52.0, 64.0), 55.0, reflectivity=-0.4, label="P1 planar reflector"),
    ]
    plan = ScanPlan.raster((0.0, 120.0), (0.0, 80.0), 2.5, (0.0, 57.0), sampling_mhz=20.0)
    return simulate_scan(
        Probe(2.0, 20.0, bandwidth=0.5),
        Material.from_handbook("steel", attenuation_db_per_mm=0.01),
        Part(160.0),
        reflectors,
        plan,
        noise=Noise(grain_fsh=0.2, electronic_fsh=0.08),
        backwall_fsh=90.0,
        dtype="int16",
        seed=317,
        attrs={
            "part_id": "KFP-FG-0317",
            "operator_notes": "Forging KFP-FG-0317, upset block, after heat treatment. " + _NOTE,
            "scenario": "Kestrel Forge & Plate (fictional): forging examination",
        },
    )


def corroded_wall() -> xr.Dataset:
    """Wall section KFP-PW-1180: far-side wall loss for thickness mapping."""
    losses = (
        WallLoss(30.0, 22.0, 28.0, 3.0),
        WallLoss(64.0, 40.0, 22.0, 4.5),
        WallLoss(82.0, 14.0, 26.0, 2.0),
        WallLoss(46.0, 46.0, 12.0, 1.2),
    )
    plan = ScanPlan.raster((0.0, 100.0), (0.0, 60.0), 1.25, (0.0, 9.0), sampling_mhz=50.0)
    return simulate_scan(
        Probe(5.0, 6.0, bandwidth=0.7),
        Material.from_handbook("steel", attenuation_db_per_mm=0.005),
        Part(12.0, wall_losses=losses),
        [],
        plan,
        noise=Noise(grain_fsh=0.5, electronic_fsh=0.4, dropout_fraction=0.004),
        backwall_fsh=80.0,
        dtype="int16",
        seed=1180,
        attrs={
            "part_id": "KFP-PW-1180",
            "operator_notes": "Vessel wall section KFP-PW-1180, far-side corrosion survey. " + _NOTE,
            "scenario": "Kestrel Forge & Plate (fictional): remaining wall survey",
        },
    )


#: File name -> function that builds the sample.
SAMPLES: dict[str, Callable[[], xr.Dataset]] = {
    "plate_laminations.nc": plate_laminations,
    "forging_block.nc": forging_block,
    "corroded_wall.nc": corroded_wall,
}


def build_sample(name: str) -> xr.Dataset:
    """Build one sample grid by file name (see :data:`SAMPLES`)."""
    if name not in SAMPLES:
        raise ParameterError(f"`name` must be one of {sorted(SAMPLES)}, got {name!r}")
    return SAMPLES[name]()


def build_samples(directory: str | Path, *, names: list[str] | None = None) -> list[Path]:
    """Write the sample grids into `directory` (atomically), return their paths."""
    out = Path(directory)
    out.mkdir(parents=True, exist_ok=True)
    paths = []
    for name in names or list(SAMPLES):
        ds = build_sample(name)
        paths.append(save_grid(ds, out / name))
    return paths


def sample_path(name: str) -> Path:
    """Path of a bundled sample grid in the source tree's ``sample_grids/`` folder.

    Raises
    ------
    FileFormatError
        When the folder is not there (e.g. an installed wheel without the
        samples): rebuild them with ``ndtmap make-samples DIR``.
    """
    here = Path(__file__).resolve().parents[2] / "sample_grids" / name
    if not here.exists():
        raise FileFormatError(
            f"sample grid {name!r} not found at {here}; rebuild the samples with `ndtmap make-samples DIR`"
        )
    return here
