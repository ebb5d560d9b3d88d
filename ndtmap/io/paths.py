"""Path arguments, Zarr store detection and one-line failure texts shared by the io modules."""

from __future__ import annotations

import os
from pathlib import Path
from typing import Any

from ndtmap.errors import ParameterTypeError

__all__ = ["as_path", "failure_reason", "is_zarr_store"]


def as_path(name: str, value: Any) -> Path:
    """The path argument `name` as a :class:`~pathlib.Path` (``~`` expanded).

    Raises
    ------
    ParameterTypeError
        When `value` is not a non-empty str or os.PathLike.

    Examples
    --------
    >>> as_path("path", "KFP-0001.nc").name
    'KFP-0001.nc'
    """
    if isinstance(value, str | os.PathLike):
        text = os.fspath(value)
        if isinstance(text, str) and text:
            return Path(text).expanduser()
    raise ParameterTypeError(f"`{name}` must be a non-empty str or os.PathLike, got {value!r}")


def failure_reason(exc: BaseException) -> str:
    """An exception as one short line, ``"TypeName: message"``, for error messages.

    Examples
    --------
    >>> failure_reason(OSError("disk\\n  full"))
    'OSError: disk full'
    """
    text = " ".join(str(exc).split()) or "no details"
    if len(text) > 240:
        text = text[:237] + "..."
    return f"{type(exc).__name__}: {text}"


def is_zarr_store(path: Path) -> bool:
    """True when `path` is a folder holding a Zarr v3 (``zarr.json``) or v2 (``.zgroup``) group."""
    return path.is_dir() and ((path / "zarr.json").is_file() or (path / ".zgroup").is_file())
