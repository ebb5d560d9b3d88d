"""ndtmap: an open workbench for encoded pulse-echo ultrasonic scans.

A scan grid (an :class:`xarray.Dataset` of A-scans on scan and index
positions, see :mod:`ndtmap.grid.schema`) goes in; gates, C-scan maps, B- and
D-scan sections, sized indications and reports come out.

Results of ndtmap are inputs to an engineering assessment. They must be
reviewed by qualified personnel (e.g. certified to ISO 9712 or the
employer's scheme) and judged under the applicable code, contract and
regulations; ndtmap makes no acceptance decision.
"""

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
from ndtmap.grid.provenance import read_provenance, with_step
from ndtmap.grid.schema import (
    DIMS,
    ascan_in_fsh,
    canonical_grid,
    grid_problems,
    make_grid,
    missing_ascans,
    validate_grid,
)
from ndtmap.indications.pipeline import size_indications
from ndtmap.io import export_raw, import_raw, open_grid, save_grid

CAUTION = (
    "Results must be reviewed by qualified personnel (e.g. certified to ISO 9712 or the "
    "employer's scheme) and accepted under the applicable code, contract and local "
    "regulations. ndtmap makes no acceptance decision."
)

__all__ = [
    "__version__",
    "CAUTION",
    "DIMS",
    "NdtmapError",
    "GridError",
    "FileFormatError",
    "ParameterError",
    "ParameterTypeError",
    "GateError",
    "CalibrationError",
    "SizingError",
    "ProcedureError",
    "make_grid",
    "grid_problems",
    "validate_grid",
    "canonical_grid",
    "missing_ascans",
    "ascan_in_fsh",
    "read_provenance",
    "with_step",
    "size_indications",
    "open_grid",
    "save_grid",
    "import_raw",
    "export_raw",
]
