"""Small argument checks used at the public boundary.

Each helper checks one argument and returns the cleaned value, or raises an
error whose message names the argument (in backticks) and the value received.
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from numbers import Real
from typing import Any

import numpy as np

from ndtmap.errors import ParameterError, ParameterTypeError


def _as_float(name: str, value: Any) -> float:
    if isinstance(value, bool) or not isinstance(value, Real | str):
        if isinstance(value, np.generic) and np.issubdtype(type(value), np.number):
            return float(value)
        raise ParameterTypeError(f"`{name}` must be a number, got {value!r} ({type(value).__name__})")
    if isinstance(value, str):
        raise ParameterTypeError(f"`{name}` must be a number, got the string {value!r}")
    return float(value)


def finite_float(name: str, value: Any) -> float:
    """Return `value` as a finite float or raise naming `name`."""
    out = _as_float(name, value)
    if not math.isfinite(out):
        raise ParameterError(f"`{name}` must be a finite number, got {value!r}")
    return out


def positive_float(name: str, value: Any) -> float:
    """Return `value` as a finite float > 0 or raise naming `name`."""
    out = finite_float(name, value)
    if out <= 0:
        raise ParameterError(f"`{name}` must be greater than 0, got {value!r}")
    return out


def nonnegative_float(name: str, value: Any) -> float:
    """Return `value` as a finite float >= 0 or raise naming `name`."""
    out = finite_float(name, value)
    if out < 0:
        raise ParameterError(f"`{name}` must be 0 or greater, got {value!r}")
    return out


def float_in_range(
    name: str,
    value: Any,
    low: float,
    high: float,
    *,
    low_inclusive: bool = True,
    high_inclusive: bool = True,
    unit: str = "",
) -> float:
    """Return `value` as a float within [low, high] (bounds as flagged)."""
    out = finite_float(name, value)
    too_low = out < low if low_inclusive else out <= low
    too_high = out > high if high_inclusive else out >= high
    if too_low or too_high:
        lb = "[" if low_inclusive else "("
        hb = "]" if high_inclusive else ")"
        u = f" {unit}" if unit else ""
        raise ParameterError(f"`{name}` must lie in {lb}{low:g}, {high:g}{hb}{u}, got {value!r}")
    return out


def positive_int(name: str, value: Any) -> int:
    """Return `value` as an int > 0 or raise naming `name`."""
    if isinstance(value, np.integer):
        value = int(value)
    if isinstance(value, bool) or not isinstance(value, int):
        raise ParameterTypeError(f"`{name}` must be a whole number, got {value!r} ({type(value).__name__})")
    if value <= 0:
        raise ParameterError(f"`{name}` must be greater than 0, got {value!r}")
    return int(value)


def one_of(name: str, value: Any, allowed: Iterable[str]) -> str:
    """Return `value` if it is one of `allowed`, else raise listing them."""
    allowed = tuple(allowed)
    if not isinstance(value, str) or value not in allowed:
        listed = ", ".join(repr(a) for a in allowed)
        raise ParameterError(f"`{name}` must be one of {{{listed}}}, got {value!r}")
    return value


def interval(name: str, value: Any, *, unit: str = "") -> tuple[float, float]:
    """Return a (start, end) pair of finite floats with start < end."""
    try:
        start, end = value
    except (TypeError, ValueError):
        raise ParameterError(
            f"`{name}` must be a pair (start, end), got {value!r}"
        ) from None
    start = finite_float(f"{name}[0]", start)
    end = finite_float(f"{name}[1]", end)
    if not start < end:
        u = f" {unit}" if unit else ""
        raise ParameterError(
            f"`{name}` must have start < end, got ({start:g}, {end:g}){u}; swap the two values"
        )
    return start, end
