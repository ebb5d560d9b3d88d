"""The package top: a curated public API, loaded lazily so that ``import ndtmap`` stays cheap."""

from __future__ import annotations

import importlib
import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

import ndtmap

ROOT = Path(ndtmap.__file__).resolve().parent.parent


def modules_after(code: str) -> set[str]:
    """The modules loaded by a fresh interpreter after running `code`."""
    env = dict(os.environ, PYTHONPATH=os.pathsep.join(filter(None, (str(ROOT), os.environ.get("PYTHONPATH")))))
    proc = subprocess.run([sys.executable, "-c", f"{code}\nimport json, sys; print(json.dumps(sorted(sys.modules)))"],
                          capture_output=True, text=True, env=env, timeout=120, check=True)
    return set(json.loads(proc.stdout.splitlines()[-1]))


def test_import_ndtmap_loads_no_heavy_module_and_no_subpackage():
    loaded = modules_after("import ndtmap\nndtmap.CAUTION, ndtmap.__version__, ndtmap.NdtmapError")
    assert "xarray" not in loaded and "numpy" not in loaded
    assert {m for m in loaded if m.startswith("ndtmap.")} <= {
        "ndtmap._shared", "ndtmap._shared.caution", "ndtmap._version", "ndtmap.errors"}


@pytest.mark.parametrize("name", ndtmap.__all__)
def test_every_public_name_resolves(name):
    assert getattr(ndtmap, name) is not None
    assert name in dir(ndtmap)


def test_lazy_names_are_the_subpackages_objects():
    for name, module in ndtmap._LAZY_NAMES.items():
        assert getattr(ndtmap, name) is getattr(importlib.import_module(module), name)


def test_the_curated_api():
    assert {"open_grid", "Gate", "amplitude_map", "b_scan", "detect_indications", "size_indications",
            "run_procedure", "write_report", "CAUTION", "NdtmapError"} <= set(ndtmap.__all__)
    assert len(ndtmap.__all__) == len(set(ndtmap.__all__))


def test_subpackages_are_reachable_as_attributes():
    assert ndtmap.io is importlib.import_module("ndtmap.io")
    assert "scans" in dir(ndtmap)


def test_an_unknown_name_is_an_attribute_error():
    with pytest.raises(AttributeError, match="no attribute 'open_grids'"):
        ndtmap.open_grids  # noqa: B018
    assert not hasattr(ndtmap, "open_grids")


def test_caution_lives_in_one_place():
    from ndtmap import CAUTION
    from ndtmap._shared.caution import CAUTION as shared

    assert CAUTION is shared is ndtmap.CAUTION
    assert "qualified personnel" in CAUTION and "makes no acceptance decision" in CAUTION


def test_all_lists_the_eager_and_every_lazy_name():
    eager = {"__version__", "CAUTION", *(n for n in ndtmap.__all__ if n.endswith("Error"))}
    assert set(ndtmap.__all__) == eager | set(ndtmap._LAZY_NAMES)
