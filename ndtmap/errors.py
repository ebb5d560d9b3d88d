"""The one exception family of ndtmap.

Every mistake a user can make (a bad file, a bad argument, a gate outside the
record) raises a subclass of :class:`NdtmapError`. The command line turns any
of them into one clear line and a non-zero exit status; library users can
catch the whole family with ``except ndtmap.NdtmapError``.

Classes that describe a bad *value* also derive from :class:`ValueError`, and
those that describe a bad *type* from :class:`TypeError`, so code written
against the usual Python conventions keeps working.
"""

from __future__ import annotations

__all__ = [
    "NdtmapError",
    "GridError",
    "FileFormatError",
    "ParameterError",
    "ParameterTypeError",
    "GateError",
    "CalibrationError",
    "SizingError",
    "ProcedureError",
    "UnitsError",
]


class NdtmapError(Exception):
    """Base class of every error ndtmap raises on purpose."""


class GridError(NdtmapError, ValueError):
    """A scan grid does not follow the grid format.

    Attributes
    ----------
    problems : list of str
        Every problem found, one sentence each, so a user can fix them all at
        once instead of one per run.
    """

    def __init__(self, problems: list[str] | str, *, source: str | None = None) -> None:
        if isinstance(problems, str):
            problems = [problems]
        self.problems = list(problems)
        self.source = source
        where = f" in {source}" if source else ""
        if len(self.problems) == 1:
            message = f"invalid scan grid{where}: {self.problems[0]}"
        else:
            listed = "; ".join(f"({i}) {p}" for i, p in enumerate(self.problems, 1))
            message = f"invalid scan grid{where}, {len(self.problems)} problems: {listed}"
        super().__init__(message)


class FileFormatError(NdtmapError, ValueError):
    """A file cannot be read or written (missing, truncated, wrong format)."""


class ParameterError(NdtmapError, ValueError):
    """A function argument has a value that cannot be used."""


class ParameterTypeError(NdtmapError, TypeError):
    """A function argument has a type that cannot be used."""


class GateError(ParameterError):
    """A gate is defined in a way that cannot be evaluated on this grid."""


class CalibrationError(ParameterError):
    """A calibration cannot be computed from the values given."""


class SizingError(ParameterError):
    """An indication cannot be sized with the method asked for."""


class ProcedureError(ParameterError):
    """A procedure or screening-rule file is malformed."""


class UnitsError(ParameterError):
    """A map or its coordinates are in units the method cannot use (a dB map for a %FSH drop, angles for mm)."""
