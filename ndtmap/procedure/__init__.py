"""Procedures: an analysis of a scan grid captured in a small TOML file, and running it.

A procedure names the gates (each with its own detection level), the gate
searched for indications, the back-wall gate, sizing options, screening rules
and the figures of a report. The same file drives the command line
(``ndtmap indications --procedure``, ``ndtmap report``), the notebooks and
the workbench.

* :mod:`ndtmap.procedure.definition`: :class:`Procedure`, checked when made;
* :mod:`ndtmap.procedure.file`: :func:`parse_procedure`, :func:`load_procedure`,
  :func:`procedure_to_toml`, :func:`save_procedure` (format
  :data:`PROCEDURE_FORMAT`; format-1 files are read by moving the level in
  ``[detection]`` onto the detection gate);
* :mod:`ndtmap.procedure.first_look`: :func:`first_look_procedure`, gates and a
  level derived from the grid when there is no written procedure;
* :mod:`ndtmap.procedure.run`: :func:`run_procedure` and its result
  :class:`Analysis`; :func:`procedure_from_options` for the command line's
  options.

Examples
--------
>>> from ndtmap.gates import Gate
>>> p = Procedure("survey", (Gate("flaw", 2.0, 20.0, threshold_fsh=25.0),), "flaw")
>>> parse_procedure(procedure_to_toml(p)) == p
True
"""

from ndtmap.procedure.definition import (
    FIGURE_KINDS,
    PROCEDURE_FORMAT,
    Procedure,
)
from ndtmap.procedure.file import (
    READABLE_FORMATS,
    load_procedure,
    parse_procedure,
    procedure_to_toml,
    save_procedure,
)
from ndtmap.procedure.first_look import first_look_procedure
from ndtmap.procedure.run import (
    Analysis,
    procedure_from_options,
    run_procedure,
)

__all__ = [
    "PROCEDURE_FORMAT",
    "READABLE_FORMATS",
    "FIGURE_KINDS",
    "Procedure",
    "Analysis",
    "load_procedure",
    "parse_procedure",
    "procedure_to_toml",
    "save_procedure",
    "first_look_procedure",
    "run_procedure",
    "procedure_from_options",
]
