"""Choices of a command-line option that the library defines, read only when argparse needs them.

The allowed figure kinds of ``ndtmap report --figures`` are ``ndtmap.procedure.FIGURE_KINDS``; importing that
module to build the parser would load the whole processing chain and slow every command's start. A
:class:`LibraryChoices` stands in for the tuple: argparse asks it for its values only to check an option's value or
to print help (write ``%(choices)s`` in the help text), and it imports the library then.
"""

from __future__ import annotations

import importlib
from collections.abc import Iterator, Sequence

__all__ = ["LibraryChoices"]


class LibraryChoices(Sequence[str]):
    """The tuple `name` of module `module`, imported on first use.

    Examples
    --------
    >>> kinds = LibraryChoices("ndtmap.scans", "MAP_KINDS")
    >>> "depth" in kinds, list(kinds)[0]
    (True, 'amplitude')
    """

    def __init__(self, module: str, name: str) -> None:
        self._where = (module, name)
        self._values: tuple[str, ...] | None = None

    def _load(self) -> tuple[str, ...]:
        if self._values is None:
            module, name = self._where
            self._values = tuple(getattr(importlib.import_module(module), name))
        return self._values

    def __getitem__(self, k):  # type: ignore[override]
        return self._load()[k]

    def __len__(self) -> int:
        return len(self._load())

    def __iter__(self) -> Iterator[str]:
        return iter(self._load())

    def __contains__(self, value: object) -> bool:
        return value in self._load()

    def __repr__(self) -> str:
        return f"LibraryChoices({self._where[0]}.{self._where[1]})"
