"""The committed sample grids are exactly what ``ndtmap make-samples`` rebuilds.

The simulator is deterministic (fixed seeds): a change that moves any sample of
any A-scan by one bit shows here, and the committed files then need rebuilding
on purpose (``ndtmap make-samples sample_grids``).
"""

from __future__ import annotations

import json

import numpy as np
import pytest
import xarray as xr

from ndtmap.cli import main
from ndtmap.simulate import SAMPLES, sample_path


def _without_run_stamps(attrs: dict) -> dict:
    """Global attributes without what changes from run to run (time, version of ndtmap)."""
    out = dict(attrs)
    steps = json.loads(out.pop("provenance"))
    for step in steps:
        step.pop("utc_time", None)
        step.pop("ndtmap_version", None)
    truth = json.loads(out.pop("truth"))
    truth.pop("simulator")
    return {"provenance": steps, "truth": truth, **{k: str(v) for k, v in out.items()}}


@pytest.mark.slow
def test_make_samples_rebuilds_the_committed_grids_bit_for_bit(tmp_path):
    assert main(["make-samples", str(tmp_path)]) == 0
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted(SAMPLES)
    for name in SAMPLES:
        with (
            xr.open_dataset(sample_path(name), mask_and_scale=False) as old,
            xr.open_dataset(tmp_path / name, mask_and_scale=False) as new,
        ):
            assert set(new.variables) == set(old.variables), name
            for var in old.variables:
                a, b = old[var], new[var]
                assert a.dims == b.dims and a.dtype == b.dtype, (name, var)
                # bit for bit: compare the raw bytes, not the values within a tolerance
                assert np.ascontiguousarray(a.values).tobytes() == np.ascontiguousarray(b.values).tobytes(), (
                    name, var
                )
                assert {k: str(v) for k, v in a.attrs.items()} == {k: str(v) for k, v in b.attrs.items()}, (name, var)
            assert _without_run_stamps(new.attrs) == _without_run_stamps(old.attrs), name
