"""ndtmap.procedure."""

from ndtmap.procedure.definition import (
    FIGURE_KINDS,
    PROCEDURE_FORMAT,
    Analysis,
    Procedure,
    first_look_procedure,
    load_procedure,
    parse_procedure,
    procedure_to_toml,
    run_procedure,
    save_procedure,
)

__all__ = [
    "PROCEDURE_FORMAT",
    "FIGURE_KINDS",
    "Procedure",
    "Analysis",
    "load_procedure",
    "parse_procedure",
    "procedure_to_toml",
    "save_procedure",
    "first_look_procedure",
    "run_procedure",
]
