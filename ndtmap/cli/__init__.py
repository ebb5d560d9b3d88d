"""The ``ndtmap`` command line: one module per command, each with ``register(subparsers)``."""

from ndtmap.cli.app import build_parser, main

__all__ = ["main", "build_parser"]
