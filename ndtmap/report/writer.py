"""Writing a report folder: atomically, only inside it, never over an input."""

from __future__ import annotations

import json
from collections.abc import Iterable, Sequence
from pathlib import Path
from typing import Any

from ndtmap.errors import ParameterError
from ndtmap.io import atomic_write_bytes, atomic_write_text

__all__ = ["BundleWriter", "check_output_dir"]


def _inside(path: Path, folder: Path) -> bool:
    try:
        path.relative_to(folder)
        return True
    except ValueError:
        return False


def check_output_dir(out: Path, paths: Sequence[Path]) -> None:
    """Refuse an output folder that is one of the input paths (or inside a Zarr store given) or a file.

    Raises
    ------
    ParameterError
        With the folder named and what to do instead.
    """
    o = out.resolve()
    for p in paths:
        r = p.resolve()
        if o == r or (r.is_dir() and _inside(o, r) and (r / "zarr.json").exists()):
            raise ParameterError(
                f"`output_dir` `{out}` is one of the input paths; write the report into a new folder"
            )
    if out.exists() and not out.is_dir():
        raise ParameterError(f"`output_dir` `{out}` exists and is a file; give a folder")


class BundleWriter:
    """Writes files atomically, only inside the output folder and never over an input.

    Every path is resolved first (so ``..`` and links cannot lead out of the
    folder); the files written are listed in :attr:`written`.
    """

    def __init__(self, root: Path, inputs: Iterable[Path]):
        self.root = root.resolve()
        self.inputs = {p.resolve() for p in inputs}
        self.written: list[Path] = []

    def target(self, path: Path) -> Path:
        """The resolved `path` after the checks, its folder created.

        Raises
        ------
        ParameterError
            When `path` lies outside the output folder or is (inside) an input.
        """
        target = path.resolve()
        if not _inside(target, self.root):
            raise ParameterError(f"refusing to write `{path}`: it lies outside the output folder `{self.root}`")
        if target in self.inputs or any(_inside(target, p) for p in self.inputs if p.is_dir()):
            raise ParameterError(f"refusing to write `{path}`: it is one of the input files")
        target.parent.mkdir(parents=True, exist_ok=True)
        return target

    def text(self, path: Path, text: str) -> Path:
        """Write UTF-8 text."""
        out = atomic_write_text(self.target(path), text)
        self.written.append(out)
        return out

    def data(self, path: Path, data: bytes) -> Path:
        """Write bytes."""
        out = atomic_write_bytes(self.target(path), data)
        self.written.append(out)
        return out

    def json(self, path: Path, doc: Any) -> Path:
        """Write a JSON document (indented, UTF-8, no NaN)."""
        return self.text(path, json.dumps(doc, indent=2, allow_nan=False, ensure_ascii=False) + "\n")

    def record(self, path: Path) -> Path:
        """Note a file written by another function (after :meth:`target` allowed it)."""
        self.written.append(path)
        return path
