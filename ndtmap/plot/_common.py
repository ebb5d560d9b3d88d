"""Helpers shared by the figure modules of ndtmap.plot (private): text, cell edges, records, finishing.

Figures are deterministic: :func:`finish` sets the template, the trace ids
(from the figure kind and trace number; plotly.js would otherwise choose
random ones) and the title; nothing carries a time stamp.
"""

from __future__ import annotations

import functools
import html
import math
from collections.abc import Mapping
from typing import Any

import numpy as np
import xarray as xr

from ndtmap._shared import mapgeom as mg
from ndtmap.errors import ParameterError, ParameterTypeError
from ndtmap.indications import IndicationRecord
from ndtmap.plot.style import ndtmap_template

#: Keys every indication record must have to be drawn.
RECORD_KEYS_NEEDED = ("id", "kind", "scan_mm", "index_mm")


def escape(value: Any) -> str:
    """Text from a file for a plotly label: HTML-escaped (plotly reads a subset of HTML).

    Examples
    --------
    >>> escape("<b>KFP</b>")
    '&lt;b&gt;KFP&lt;/b&gt;'
    """
    return html.escape(str(value), quote=False)


def fmt(value: Any, spec: str = ".1f", none: str = "-") -> str:
    """A number for a label (`none` for None or a value that is not finite).

    Examples
    --------
    >>> fmt(2.345), fmt(None), fmt(float("nan"))
    ('2.3', '-', '-')
    """
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return none
    try:
        return format(float(value), spec)
    except (TypeError, ValueError):
        return str(value)


def field(rec: Any, key: str, default: Any = None) -> Any:
    """``rec[key]`` of an indication record, or `default` when the record has no such field (or it is None)."""
    try:
        value = rec[key]
    except (KeyError, IndexError, TypeError, AttributeError):
        return default
    return default if value is None else value


def checked_records(name: str, indications: Any) -> list[Any]:
    """The indication records of argument `name` as a list (None: none), each with an id, kind and position.

    Records are read with ``rec[key]`` (dicts from :func:`ndtmap.size_indications` or records
    that read the same way).
    """
    if indications is None:
        return []
    if isinstance(indications, Mapping | str | bytes) or not hasattr(indications, "__iter__"):
        raise ParameterTypeError(
            f"`{name}` must be a list of indication records (dicts), got one {type(indications).__name__}"
        )
    out = []
    for k, rec in enumerate(indications):
        if not hasattr(rec, "__getitem__") or isinstance(rec, str | bytes):
            raise ParameterTypeError(
                f"`{name}[{k}]` must be an indication record (a dict from size_indications), got {type(rec).__name__}"
            )
        for key in RECORD_KEYS_NEEDED:
            if field(rec, key) is None:
                raise ParameterError(f"`{name}[{k}]` has no `{key}`; pass records from ndtmap.size_indications")
        out.append(rec)
    return out


def cell_edges(x: Any) -> np.ndarray:
    """Cell edges of positions: midpoints, half a spacing beyond the ends (1 mm cells for one position).

    Examples
    --------
    >>> cell_edges([0.0, 1.0, 3.0]).tolist()
    [-0.5, 0.5, 2.0, 4.0]
    """
    x = np.asarray(x, dtype=np.float64)
    if x.size == 1:
        return np.array([x[0] - 0.5, x[0] + 0.5])
    w = mg.cell_widths(x)
    return np.concatenate([[x[0] - 0.5 * w[0]], 0.5 * (x[1:] + x[:-1]), [x[-1] + 0.5 * w[-1]]])


def axis_title(da: xr.DataArray, dim: str, default: str) -> str:
    """``"long_name [units]"`` of the coordinate `dim` of `da` (`default` [mm] without one)."""
    if dim in da.coords:
        c = da.coords[dim]
        name = c.attrs.get("long_name") or default
        units = c.attrs.get("units", "mm")
        return f"{escape(name)} [{escape(units)}]"
    return f"{default} [mm]"


def colour_range(units: str | None, values: np.ndarray) -> dict[str, Any]:
    """Explicit colour limits of a heatmap (``zauto`` off, so a redrawn figure never keeps stale limits).

    %FSH from 0 to the largest value; dB symmetric about 0 (the diverging
    scale centred on no change); other units from the smallest to the
    largest value.

    Examples
    --------
    >>> colour_range("dB", np.array([-3.0, 20.0]))
    {'zmin': -20.0, 'zmax': 20.0, 'zmid': 0.0, 'zauto': False}
    """
    finite = np.asarray(values, dtype=np.float64)
    finite = finite[np.isfinite(finite)]
    if units == "dB":
        top = float(np.max(np.abs(finite))) if finite.size else 1.0
        top = top if top > 0 else 1.0
        return dict(zmin=-top, zmax=top, zmid=0.0, zauto=False)
    if units == "%FSH":
        top = float(finite.max()) if finite.size else 100.0
        return dict(zmin=0.0, zmax=top if top > 0 else 100.0, zauto=False)
    if not finite.size:
        return dict(zauto=True)
    lo, hi = float(finite.min()), float(finite.max())
    if hi - lo < 1e-9:
        lo, hi = lo - 0.5, hi + 0.5
    return dict(zmin=lo, zmax=hi, zauto=False)


def title_text(title: str | None, note: str | None = None) -> str | None:
    """The escaped title, with a smaller note line under it (e.g. that the display is thinned)."""
    if title is None and not note:
        return None
    head = escape(title) if title is not None else ""
    if not note:
        return head
    return head + ("<br>" if head else "") + f"<sup>{escape(note)}</sup>"


@functools.lru_cache(maxsize=1)
def _template() -> Any:
    """ndtmap's template, made once (plotly copies it into every figure that uses it)."""
    return ndtmap_template()


def _frame(kind: str, title: str | None, note: str | None, width: int | None, height: int | None) -> dict[str, Any]:
    frame: dict[str, Any] = dict(template=_template(), uirevision=kind)
    text = title_text(title, note)
    if text is not None:
        frame["title"] = dict(text=text)
    if width is not None:
        frame["width"] = int(width)
    if height is not None:
        frame["height"] = int(height)
    return frame


def finish(fig: Any, kind: str, title: str | None, *, note: str | None = None, width: int | None = None,
           height: int | None = None) -> Any:
    """Apply ndtmap's template, stable trace ids, the title (and note) and an optional size to `fig`."""
    fig.update_layout(**_frame(kind, title, note, width, height))
    for k, trace in enumerate(fig.data):
        trace.uid = f"{kind}-{k}"
    return fig


def new_figure(kind: str, traces: list[Any], layout: dict[str, Any], *, title: str | None = None,
               note: str | None = None, width: int | None = None, height: int | None = None) -> Any:
    """A finished figure (as :func:`finish`) made in one step from its traces and layout.

    One constructor call validates everything once, which is several times
    faster than adding traces, shapes and annotations one by one (it matters
    for the workbench, which redraws on every click).
    """
    import plotly.graph_objects as go  # plotly is imported when a figure is made

    for k, trace in enumerate(traces):
        trace.uid = f"{kind}-{k}"
    return go.Figure(data=traces, layout={**layout, **_frame(kind, title, note, width, height)})


def typed_records(name: str, indications: Any) -> list[Any]:
    """:func:`checked_records`, each an :class:`~ndtmap.indications.IndicationRecord` (which carries its regions).

    Raises
    ------
    ParameterTypeError
        For a record of another type (a plain dict, say).
    """
    recs = checked_records(name, indications)
    for k, rec in enumerate(recs):
        if not isinstance(rec, IndicationRecord):
            raise ParameterTypeError(
                f"`{name}[{k}]` must be an IndicationRecord (from ndtmap.size_indications or run_procedure), which "
                f"carries the region it was sized on; got {type(rec).__name__}"
            )
    return recs
