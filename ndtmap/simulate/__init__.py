"""ndtmap.simulate."""

from ndtmap.simulate.model import (
    FlatBottomHole,
    Material,
    Noise,
    Part,
    PlanarReflector,
    Probe,
    ScanPlan,
    SideDrilledHole,
    WallLoss,
    scan_truth,
    simulate_scan,
    tone_burst,
)
from ndtmap.simulate.samples import (
    SAMPLES,
    build_sample,
    build_samples,
    sample_path,
)

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
    "SAMPLES",
    "build_sample",
    "build_samples",
    "sample_path",
]
