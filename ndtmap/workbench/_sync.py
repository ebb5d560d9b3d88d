"""Widget synchronisation of the workbench (private): copy a figure into a live plotly ``FigureWidget``.

2-D arrays (heatmap ``z``) travel to the browser as binary rows of float32
(NaN shown as gaps), not as JSON; the axis ranges of a widget are left alone
unless asked for, so a zoom survives a redraw.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import plotly.graph_objects as go

__all__ = ["figure_widget", "sync_traces", "sync_layout"]

#: Layout parts that are lists: replaced whole, never merged item by item.
_LIST_PARTS = ("shapes", "annotations")


def _split(trace: Any) -> tuple[dict[str, Any], dict[str, np.ndarray]]:
    """A trace as a dict without its type, and its 2-D arrays (heatmap ``z``) apart."""
    spec = trace.to_plotly_json()
    spec.pop("type", None)
    arrays = {k: v for k, v in spec.items() if isinstance(v, np.ndarray) and v.ndim == 2}
    for k in arrays:
        spec.pop(k)
    return spec, arrays


def _push_arrays(widget: go.FigureWidget, k: int, arrays: dict[str, np.ndarray]) -> None:
    """Send 2-D arrays as rows of float32: binary to the browser, NaN shown as gaps."""
    if arrays:
        rows = {key: [[np.ascontiguousarray(r, dtype=np.float32) for r in v]] for key, v in arrays.items()}
        widget.plotly_restyle(rows, trace_indexes=[k])


def figure_widget(fig: go.Figure, **layout: Any) -> go.FigureWidget:
    """A FigureWidget showing `fig` (with `layout` on top), its 2-D arrays sent as binary rows."""
    parts = [_split(t) for t in fig.data]
    widget = go.FigureWidget(data=[{"type": t.type, **spec} for t, (spec, _) in zip(fig.data, parts, strict=True)],
                             layout=fig.layout)
    for k, (_, arrays) in enumerate(parts):
        _push_arrays(widget, k, arrays)
    if layout:
        widget.layout.update(layout)
    return widget


def sync_layout(widget: go.FigureWidget, fig: go.Figure, parts: tuple[str, ...], **extra: Any) -> None:
    """Copy the layout `parts` of `fig` (e.g. 'title', 'shapes') and the values `extra` into `widget`."""
    for key in parts:
        value = fig.layout[key]
        if key in _LIST_PARTS:
            setattr(widget.layout, key, value)
        else:
            widget.layout.update({key: value.to_plotly_json() if hasattr(value, "to_plotly_json") else value})
    if extra:
        widget.layout.update(extra)


def sync_traces(widget: go.FigureWidget, fig: go.Figure, *, first: int = 0, last: int | None = None,
                parts: tuple[str, ...] = (), whole_layout: bool = False, **extra: Any) -> None:
    """Copy the traces `first`..`last` of `fig` (and the layout `parts`, or all of it) into `widget`.

    When the number or the types of the traces differ, all traces are
    replaced. The axis ranges of `widget` are left alone unless the layout
    parts set them, so a zoom survives a redraw.
    """
    new = list(fig.data)
    with widget.batch_update():
        same = len(widget.data) == len(new) and all(a.type == b.type for a, b in zip(widget.data, new, strict=True))
        if not same:
            widget.data = ()
            specs = [_split(t) for t in new]
            widget.add_traces([{"type": t.type, **spec} for t, (spec, _) in zip(new, specs, strict=True)])
            for k, (_, arrays) in enumerate(specs):
                _push_arrays(widget, k, arrays)
        else:
            for k in range(first, len(new) if last is None else last):
                spec, arrays = _split(new[k])
                widget.data[k].update(spec, overwrite=True)
                _push_arrays(widget, k, arrays)
        if whole_layout:
            widget.layout = fig.layout
            if extra:
                widget.layout.update(extra)
        else:
            sync_layout(widget, fig, parts, **extra)
