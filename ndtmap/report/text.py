"""How a report writes numbers, gates and errors in words."""

from __future__ import annotations

import math
from typing import Any

from ndtmap.errors import NdtmapError

__all__ = ["fmt_number", "gate_text", "one_line"]


def one_line(exc: BaseException) -> str:
    """The message of `exc` on one line (with its type unless it is an ndtmap error)."""
    text = " ".join(str(exc).split())
    return text if isinstance(exc, NdtmapError) else f"{type(exc).__name__}: {text}"


def fmt_number(value: Any, spec: str = ".1f") -> str:
    """`value` formatted with `spec`; a dash for None or a non-finite number.

    Examples
    --------
    >>> fmt_number(2.345), fmt_number(None), fmt_number(float("nan")), fmt_number(12, "g")
    ('2.3', '-', '-', '12')
    """
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return "-"
    try:
        return format(float(value), spec)
    except (TypeError, ValueError):
        return str(value)


def gate_text(g: Any) -> str:
    """A gate in words: name, window, threshold, mode and the gate it follows."""
    follows = f", following gate “{g.follows}”" if g.follows else ""
    return (f"gate “{g.name}” ({g.start:g} to {g.end:g} {g.unit}, threshold {g.level_text()}, "
            f"{g.mode}{follows})")
