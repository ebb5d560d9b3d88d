"""The one screening step of sized indications: the same records whether screening is asked from Python or a procedure.

:func:`screen_records` screens records against rules
(:func:`ndtmap.indications.rules.screen`) and returns new records that carry
the result: ``screening`` (the statement), ``exceeded_rules`` and the
screening notes appended to ``notes``. :func:`ndtmap.size_indications` with
``rules=`` and :func:`ndtmap.procedure.run_procedure` with a procedure that
names rules both go through it.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import replace

from ndtmap.errors import ParameterTypeError
from ndtmap.indications.record import IndicationRecord
from ndtmap.indications.rules import Rules, ScreeningResult, screen

__all__ = ["screen_records"]


def screen_records(
    records: Sequence[IndicationRecord], rules: Rules, *, scanned_area_mm2: float
) -> tuple[list[IndicationRecord], ScreeningResult]:
    """Screen sized records against rules; the records returned carry the result.

    Parameters
    ----------
    records : sequence of IndicationRecord
        From :func:`ndtmap.size_indications` (not changed).
    rules : Rules
        From :func:`ndtmap.indications.rules.load_rules`.
    scanned_area_mm2 : float
        Area scanned, mm^2, for the density rules
        (:func:`ndtmap.indications.pipeline.scanned_area_mm2`).

    Returns
    -------
    records : list of IndicationRecord
        Copies with ``screening``, ``exceeded_rules`` and the screening notes.
    result : ScreeningResult
        The whole screening (overall statement, densities, caution).

    Examples
    --------
    >>> import numpy as np, xarray as xr
    >>> from ndtmap.indications import parse_rules, size_indications
    >>> a = np.full((20, 20), 2.0); a[5:15, 6:12] = 80.0
    >>> m = xr.DataArray(a, dims=("scan", "index"), coords={"scan": np.arange(20.0), "index": np.arange(20.0)})
    >>> rules = parse_rules('[[limit]]\\nname = "long"\\nquantity = "length_mm"\\nmax = 8')
    >>> (rec,), result = screen_records(size_indications(m, threshold_fsh=20), rules, scanned_area_mm2=400.0)
    >>> rec.screening, rec.exceeded_rules, result.overall
    ('exceeds rule long', ('long',), 'exceeds rule long')
    """
    records = list(records)
    for k, rec in enumerate(records):
        if not isinstance(rec, IndicationRecord):
            raise ParameterTypeError(
                f"`records[{k}]` must be an IndicationRecord (from size_indications), got {type(rec).__name__}"
            )
    result = screen(records, rules, scanned_area_mm2=scanned_area_mm2)
    screened = [
        replace(rec, screening=s.statement, exceeded_rules=s.exceeded, notes=rec.notes + s.notes)
        for rec, s in zip(records, result.indications, strict=True)
    ]
    return screened, result
