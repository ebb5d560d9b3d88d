"""The "ndtmap raw sidecar": the JSON file that describes a raw binary A-scan dump.

A sidecar (schema version :data:`RAW_SIDECAR_VERSION`, written down in
``docs/grid-format.md``) names the data file (relative to the sidecar's
folder), its sample type (:data:`RAW_DTYPES`), header size, shape, the byte
order of the axes, the coordinates, the signal kind and the global
attributes. This module reads a sidecar safely (size limit, UTF-8, no
duplicate keys, no code executed) and lists every problem of its structure
before any data file is touched; :mod:`ndtmap.io.raw` reads and writes the
dumps themselves.
"""

from __future__ import annotations

import json
import math
from pathlib import Path, PurePosixPath, PureWindowsPath
from typing import Any

import numpy as np

from ndtmap.errors import FileFormatError
from ndtmap.grid.schema import DIMS, SIGNAL_KINDS
from ndtmap.io.attributes import attr_problem
from ndtmap.io.paths import failure_reason

__all__ = [
    "RAW_SIDECAR_FORMAT",
    "RAW_SIDECAR_VERSION",
    "RAW_DTYPES",
    "SIDECAR_SUFFIX",
    "SIDECAR_COORDS",
    "load_sidecar",
    "sidecar_problems",
    "coordinate_values",
    "coordinate_spec",
]

#: Value of the ``format`` key of a raw sidecar, and the schema version.
RAW_SIDECAR_FORMAT = "ndtmap raw sidecar"
RAW_SIDECAR_VERSION = 1

#: Sample types of raw dumps: sidecar spelling -> numpy dtype (little-endian).
RAW_DTYPES: dict[str, np.dtype] = {
    "<i2": np.dtype("<i2"),
    "<f4": np.dtype("<f4"),
    "<u2": np.dtype("<u2"),
    "<u1": np.dtype("u1"),
    "|u1": np.dtype("u1"),
    "<i1": np.dtype("i1"),
    "|i1": np.dtype("i1"),
    "<f8": np.dtype("<f8"),
}

#: Suffix of a sidecar file.
SIDECAR_SUFFIX = ".json"
#: Keys of the sidecar's ``coords`` object, by grid dimension.
SIDECAR_COORDS = {"scan": "scan_mm", "index": "index_mm", "time": "time_us"}

_SIDECAR_MAX_BYTES = 64 * 2**20  # a sidecar is a small text file; refuse to parse anything larger
_SIDECAR_REQUIRED = ("format", "version", "data_file", "dtype", "shape", "axis_order", "coords", "signal", "attrs")
_SIDECAR_OPTIONAL = ("byte_offset", "fsh_per_count", "missing", "description")


# --------------------------------------------------------------------------- reading the JSON


def load_sidecar(path: Path) -> dict[str, Any]:
    """The sidecar at `path` as a dict, read as UTF-8 JSON with no duplicate keys.

    Raises
    ------
    FileFormatError
        When the file is missing, too large for a sidecar, not UTF-8, not
        valid JSON (line and column given), repeats a key, or is not a JSON
        object.
    """
    if not path.is_file():
        raise FileFormatError(f"no raw sidecar at {path}; check the path")
    size = path.stat().st_size
    if size > _SIDECAR_MAX_BYTES:
        raise FileFormatError(
            f"{path} is {size} bytes, too large for a raw sidecar (at most {_SIDECAR_MAX_BYTES}); "
            "is it the data file rather than its .json description?"
        )

    def no_duplicates(pairs: list[tuple[str, Any]]) -> dict[str, Any]:
        out: dict[str, Any] = {}
        for key, value in pairs:
            if key in out:
                raise FileFormatError(f"{path}: the key {key!r} appears twice in one JSON object; keep one")
            out[key] = value
        return out

    try:
        text = path.read_text(encoding="utf-8-sig")
    except UnicodeDecodeError as exc:
        raise FileFormatError(
            f"{path} is not UTF-8 text ({failure_reason(exc)}); a raw sidecar is a JSON file"
        ) from None
    except OSError as exc:
        raise FileFormatError(f"cannot read {path} ({failure_reason(exc)})") from None
    try:
        doc = json.loads(text, object_pairs_hook=no_duplicates)
    except json.JSONDecodeError as exc:
        raise FileFormatError(
            f"{path} is not valid JSON: {exc.msg} at line {exc.lineno}, column {exc.colno}"
        ) from None
    if not isinstance(doc, dict):
        raise FileFormatError(f"{path}: a raw sidecar must be a JSON object {{...}}, got {type(doc).__name__}")
    return doc


# --------------------------------------------------------------------------- checking the structure


def _is_whole(value: Any) -> bool:
    return isinstance(value, int) and not isinstance(value, bool)


def _is_real(value: Any) -> bool:
    return isinstance(value, int | float) and not isinstance(value, bool) and math.isfinite(value)


def sidecar_problems(doc: dict[str, Any]) -> list[str]:
    """Check the sidecar's structure (nothing on disk yet); one sentence per problem, none when it is sound.

    Examples
    --------
    >>> sidecar_problems({"format": "ndtmap raw sidecar", "version": 1, "data_file": "../KFP-0003.bin"})[-1]
    "`data_file` must stay inside the sidecar's folder, got '../KFP-0003.bin' (remove '..')"
    """
    shape = _valid_shape(doc)
    return [
        *_key_problems(doc),
        *_data_file_problems(doc),
        *_layout_problems(doc),
        *_coords_problems(doc, shape),
        *_amplitude_problems(doc),
        *_extra_problems(doc, shape),
    ]


def _key_problems(doc: dict[str, Any]) -> list[str]:
    """Missing and unknown keys, `format` and `version`."""
    problems = [f"required key `{key}` is missing" for key in _SIDECAR_REQUIRED if key not in doc]
    unknown = sorted(set(doc) - set(_SIDECAR_REQUIRED) - set(_SIDECAR_OPTIONAL))
    if unknown:
        known = ", ".join((*_SIDECAR_REQUIRED, *_SIDECAR_OPTIONAL))
        problems.append(f"unknown key(s) {', '.join(map(repr, unknown))} (known keys: {known})")
    if "format" in doc and doc["format"] != RAW_SIDECAR_FORMAT:
        problems.append(f"`format` must be {RAW_SIDECAR_FORMAT!r}, got {doc['format']!r}")
    if "version" in doc:
        version = doc["version"]
        if not _is_whole(version) or version < 1:
            problems.append(f"`version` must be the whole number {RAW_SIDECAR_VERSION}, got {version!r}")
        elif version > RAW_SIDECAR_VERSION:
            problems.append(f"`version` {version} is newer than this ndtmap reads ({RAW_SIDECAR_VERSION}); update")
    return problems


def _data_file_problems(doc: dict[str, Any]) -> list[str]:
    """`data_file` must be a relative name that stays inside the sidecar's folder."""
    if "data_file" not in doc:
        return []
    name = doc["data_file"]
    if not isinstance(name, str) or not name.strip():
        return [f"`data_file` must be a file name relative to the sidecar, got {name!r}"]
    if PurePosixPath(name).is_absolute() or PureWindowsPath(name).is_absolute() or PureWindowsPath(name).drive:
        return [f"`data_file` must be relative to the sidecar's folder, got the absolute path {name!r}"]
    if ".." in PurePosixPath(name.replace("\\", "/")).parts:
        return [f"`data_file` must stay inside the sidecar's folder, got {name!r} (remove '..')"]
    if "\\" in name:
        return [f"`data_file` must use '/' to separate folders, got {name!r}"]
    return []


def _valid_shape(doc: dict[str, Any]) -> dict[str, int] | None:
    """The `shape` object when it is sound, else None."""
    shape = doc.get("shape")
    if not isinstance(shape, dict) or set(shape) != set(DIMS):
        return None
    if any(not _is_whole(v) or v <= 0 for v in shape.values()):
        return None
    return shape


def _layout_problems(doc: dict[str, Any]) -> list[str]:
    """`dtype`, `byte_offset`, `shape` and `axis_order`: how the bytes are laid out."""
    problems = []
    dtype = doc.get("dtype")
    if "dtype" in doc and dtype not in RAW_DTYPES:
        hint = " (big-endian data is not supported: swap the bytes first)" if str(dtype).startswith(">") else ""
        problems.append(f"`dtype` must be one of {', '.join(map(repr, RAW_DTYPES))}, got {dtype!r}{hint}")
    offset = doc.get("byte_offset", 0)
    if not _is_whole(offset) or offset < 0:
        problems.append(f"`byte_offset` must be a whole number of bytes >= 0, got {offset!r}")
    shape = doc.get("shape")
    if "shape" in doc:
        if not isinstance(shape, dict) or set(shape) != set(DIMS):
            problems.append(f"`shape` must be an object with the keys 'scan', 'index' and 'time', got {shape!r}")
        else:
            bad = {k: v for k, v in shape.items() if not _is_whole(v) or v <= 0}
            if bad:
                problems.append(f"`shape` entries must be whole numbers > 0, got {bad}")
    order = doc.get("axis_order")
    if "axis_order" in doc and (not isinstance(order, list) or sorted(map(str, order)) != sorted(DIMS)):
        problems.append(f"`axis_order` must list 'scan', 'index' and 'time' once each, slowest first, got {order!r}")
    return problems


def _coords_problems(doc: dict[str, Any], shape: dict[str, int] | None) -> list[str]:
    """`coords`: each axis as {'start', 'step'} or an explicit list of `shape` finite numbers."""
    if "coords" not in doc:
        return []
    coords = doc["coords"]
    if not isinstance(coords, dict) or set(coords) != set(SIDECAR_COORDS.values()):
        return [f"`coords` must be an object with the keys 'scan_mm', 'index_mm' and 'time_us', got {coords!r}"]
    problems = []
    for dim, key in SIDECAR_COORDS.items():
        spec = coords[key]
        if isinstance(spec, dict):
            if set(spec) != {"start", "step"} or not all(_is_real(spec[k]) for k in ("start", "step")):
                problems.append(f"`coords.{key}` must be {{'start': number, 'step': number}}, got {spec!r}")
            elif spec["step"] <= 0:
                problems.append(f"`coords.{key}.step` must be greater than 0, got {spec['step']!r}")
        elif isinstance(spec, list):
            if not all(_is_real(v) for v in spec):
                problems.append(f"`coords.{key}` must hold finite numbers only")
            elif shape is not None and len(spec) != shape[dim]:
                problems.append(f"`coords.{key}` has {len(spec)} values but `shape.{dim}` is {shape[dim]}")
        else:
            problems.append(f"`coords.{key}` must be a list of numbers or {{'start': x, 'step': dx}}")
    return problems


def _amplitude_problems(doc: dict[str, Any]) -> list[str]:
    """`signal`, and `fsh_per_count` (required for integer samples, refused for floating-point ones)."""
    problems = []
    if "signal" in doc and doc["signal"] not in SIGNAL_KINDS:
        problems.append(f"`signal` must be 'rf' or 'rectified', got {doc['signal']!r}")
    dtype = doc.get("dtype")
    is_int = dtype in RAW_DTYPES and RAW_DTYPES[dtype].kind in "iu"
    if "fsh_per_count" in doc:
        scale = doc["fsh_per_count"]
        if dtype in RAW_DTYPES and not is_int:
            problems.append("`fsh_per_count` applies to integer data only; floating-point samples are %FSH already")
        elif not _is_real(scale) or scale <= 0:
            problems.append(f"`fsh_per_count` must be a number > 0 (%FSH per count), got {scale!r}")
    elif is_int:
        problems.append(
            f"`fsh_per_count` is required for integer data ({dtype}): give %FSH per digitiser count, "
            "e.g. 100/32767 when full scale is 32767 counts"
        )
    return problems


def _extra_problems(doc: dict[str, Any], shape: dict[str, int] | None) -> list[str]:
    """`missing` positions, the global `attrs` and the `description`."""
    problems = []
    if "missing" in doc:
        missing = doc["missing"]
        pairs_ok = isinstance(missing, list) and all(
            isinstance(p, list) and len(p) == 2 and all(_is_whole(i) and i >= 0 for i in p) for p in missing
        )
        if not pairs_ok:
            problems.append("`missing` must be a list of [scan_position, index_position] pairs of whole numbers >= 0")
        elif shape is not None and any(i >= shape["scan"] or j >= shape["index"] for i, j in missing):
            problems.append("`missing` names a position outside `shape`; positions count from 0")
    if "attrs" in doc:
        attrs = doc["attrs"]
        if not isinstance(attrs, dict):
            problems.append(f"`attrs` must be an object of global attributes, got {type(attrs).__name__}")
        else:
            for name, value in attrs.items():
                why = attr_problem(value)
                if why:
                    problems.append(f"`attrs.{name}` {why}")
    if "description" in doc and not isinstance(doc["description"], str):
        problems.append("`description` must be a string")
    return problems


# --------------------------------------------------------------------------- coordinates


def coordinate_values(spec: Any, n: int) -> np.ndarray:
    """The `n` values of a checked coordinate spec: ``{'start', 'step'}`` or an explicit list.

    Examples
    --------
    >>> coordinate_values({"start": 0.0, "step": 0.5}, 3)
    array([0. , 0.5, 1. ])
    """
    if isinstance(spec, dict):
        return float(spec["start"]) + float(spec["step"]) * np.arange(n, dtype=np.float64)
    return np.asarray(spec, dtype=np.float64)


def coordinate_spec(values: np.ndarray) -> Any:
    """``{'start', 'step'}`` when that reproduces `values` exactly, else the explicit list.

    Examples
    --------
    >>> coordinate_spec([0.0, 1.5, 3.0]), coordinate_spec([0.0, 0.5, 2.0])
    ({'start': 0.0, 'step': 1.5}, [0.0, 0.5, 2.0])
    """
    values = np.asarray(values, dtype=np.float64)
    if values.size >= 2:
        start, step = float(values[0]), float(values[1] - values[0])
        if step > 0 and np.array_equal(start + step * np.arange(values.size, dtype=np.float64), values):
            return {"start": start, "step": step}
    return [float(v) for v in values]
