"""Synthetic pulse-echo scans with known truth: the simulator behind the sample grids and the tests.

:func:`simulate_scan` turns a probe, a material, a part (thickness, wall
loss, immersion) and reflectors (flat-bottomed and side-drilled holes,
planar reflectors) into a scan grid of A-scans, and stores the truth (true
sizes, depths, the thickness map) in the grid, so that every later result
can be checked against it (:func:`scan_truth`).

The echoes come from a coherent sum over small patches of every reflecting
surface, weighted with the band-averaged piston beam of
:mod:`ndtmap.physics.beam`: plane and disc echoes follow the diffraction
laws (back wall ~ 1/z, small disc ~ 1/z**2, the DGS ratio), with shadows,
repeat echoes, immersion, angle beams, noise and drop-outs. It remains a
model: scalar waves without mode conversion, far-field directivity, and
more; :mod:`ndtmap.simulate.model` lists the approximations.

Modules: :mod:`~ndtmap.simulate.scenario` (probe, material, part, scan plan,
noise), :mod:`~ndtmap.simulate.reflectors`, :mod:`~ndtmap.simulate.pulse`,
:mod:`~ndtmap.simulate.scan` (:func:`simulate_scan`),
:mod:`~ndtmap.simulate.truth`, :mod:`~ndtmap.simulate.samples` (the bundled
Kestrel Forge & Plate sample grids); the engine is in
:mod:`~ndtmap.simulate.model`, :mod:`~ndtmap.simulate.echo_sources` and
:mod:`~ndtmap.simulate.acquisition`.
"""

from ndtmap.simulate.pulse import tone_burst
from ndtmap.simulate.reflectors import FlatBottomHole, PlanarReflector, SideDrilledHole
from ndtmap.simulate.samples import SAMPLES, build_sample, build_samples, sample_path
from ndtmap.simulate.scan import simulate_scan
from ndtmap.simulate.scenario import Material, Noise, Part, Probe, ScanPlan, WallLoss
from ndtmap.simulate.truth import scan_truth

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
