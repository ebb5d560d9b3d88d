"""ndtmap: an open workbench for encoded pulse-echo ultrasonic scans.

A scan grid (an :class:`xarray.Dataset` of A-scans on scan and index
positions, see :mod:`ndtmap.grid`) goes in; gates, C-scan maps, B- and
D-scan sections, sized indications and reports come out.

Results of ndtmap are inputs to an engineering assessment. They must be
reviewed by qualified personnel (e.g. certified to ISO 9712 or the
employer's scheme) and judged under the applicable code, contract and
regulations; ndtmap makes no acceptance decision.

The names below are the curated public API. ``import ndtmap`` is cheap: the
version, :data:`CAUTION` and the error classes are loaded at once, every other
name (and every subpackage, e.g. ``ndtmap.io``) on first use (PEP 562), so the
command line starts without loading xarray, numpy or scipy.

Examples
--------
>>> import ndtmap
>>> ndtmap.Gate.__module__
'ndtmap.gates.gate'
>>> "open_grid" in dir(ndtmap)
True
"""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING, Any

from ndtmap._shared.caution import CAUTION
from ndtmap._version import __version__
from ndtmap.errors import (
    CalibrationError,
    FileFormatError,
    GateError,
    GridError,
    NdtmapError,
    ParameterError,
    ParameterTypeError,
    ProcedureError,
    SizingError,
)

if TYPE_CHECKING:  # the same names, for type checkers and editors; at run time __getattr__ loads them
    from ndtmap.gates import Gate, evaluate_gate, evaluate_gates
    from ndtmap.grid import (
        DIMS,
        ascan_in_fsh,
        calibrate,
        canonical_grid,
        grid_problems,
        make_grid,
        missing_ascans,
        read_provenance,
        validate_grid,
        with_step,
    )
    from ndtmap.indications import detect_indications, drop_length, equivalent_fbh_diameter, size_indications
    from ndtmap.io import export_raw, import_raw, open_grid, save_grid
    from ndtmap.procedure import Procedure, first_look_procedure, load_procedure, run_procedure
    from ndtmap.report import write_report
    from ndtmap.scans import amplitude_map, b_scan, backwall_loss_map, d_scan, depth_map, thickness_map

#: Public name -> the subpackage that defines it (imported on first use).
_LAZY_NAMES: dict[str, str] = {
    "DIMS": "ndtmap.grid",
    "make_grid": "ndtmap.grid",
    "validate_grid": "ndtmap.grid",
    "grid_problems": "ndtmap.grid",
    "canonical_grid": "ndtmap.grid",
    "missing_ascans": "ndtmap.grid",
    "ascan_in_fsh": "ndtmap.grid",
    "read_provenance": "ndtmap.grid",
    "with_step": "ndtmap.grid",
    "calibrate": "ndtmap.grid",
    "open_grid": "ndtmap.io",
    "save_grid": "ndtmap.io",
    "import_raw": "ndtmap.io",
    "export_raw": "ndtmap.io",
    "Gate": "ndtmap.gates",
    "evaluate_gate": "ndtmap.gates",
    "evaluate_gates": "ndtmap.gates",
    "amplitude_map": "ndtmap.scans",
    "depth_map": "ndtmap.scans",
    "thickness_map": "ndtmap.scans",
    "backwall_loss_map": "ndtmap.scans",
    "b_scan": "ndtmap.scans",
    "d_scan": "ndtmap.scans",
    "detect_indications": "ndtmap.indications",
    "size_indications": "ndtmap.indications",
    "drop_length": "ndtmap.indications",
    "equivalent_fbh_diameter": "ndtmap.indications",
    "Procedure": "ndtmap.procedure",
    "load_procedure": "ndtmap.procedure",
    "run_procedure": "ndtmap.procedure",
    "first_look_procedure": "ndtmap.procedure",
    "write_report": "ndtmap.report",
}

#: Library subpackages and modules reachable as attributes (``ndtmap.io``) without an import statement of their
#: own (the command line, ``ndtmap.cli``, is not part of the library).
_SUBMODULES = frozenset(
    {
        "cluster", "errors", "gates", "grid", "indications", "io", "physics", "plot", "procedure", "report",
        "scans", "signal", "simulate", "workbench",
    }
)

__all__ = [
    "__version__",
    "CAUTION",
    # errors
    "NdtmapError",
    "GridError",
    "FileFormatError",
    "ParameterError",
    "ParameterTypeError",
    "GateError",
    "CalibrationError",
    "SizingError",
    "ProcedureError",
    # grids: files, format, provenance, calibration
    "open_grid",
    "save_grid",
    "import_raw",
    "export_raw",
    "DIMS",
    "make_grid",
    "validate_grid",
    "grid_problems",
    "canonical_grid",
    "missing_ascans",
    "ascan_in_fsh",
    "read_provenance",
    "with_step",
    "calibrate",
    # gates, C-scan maps, sections
    "Gate",
    "evaluate_gate",
    "evaluate_gates",
    "amplitude_map",
    "depth_map",
    "thickness_map",
    "backwall_loss_map",
    "b_scan",
    "d_scan",
    # indications
    "detect_indications",
    "size_indications",
    "drop_length",
    "equivalent_fbh_diameter",
    # procedures and reports
    "Procedure",
    "load_procedure",
    "run_procedure",
    "first_look_procedure",
    "write_report",
]


def __getattr__(name: str) -> Any:
    """Import a public name (or a subpackage) of ndtmap on first use; later uses find it in the module."""
    if name in _LAZY_NAMES:
        value = getattr(importlib.import_module(_LAZY_NAMES[name]), name)
    elif name in _SUBMODULES:
        value = importlib.import_module(f"{__name__}.{name}")
    else:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__) | _SUBMODULES)
