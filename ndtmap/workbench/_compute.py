"""Computation helpers of the workbench (private): gate chains, the time-window crop, progress.

The crop
    A gate in ``'rectified'`` detection only reads the samples inside its
    window (and, for a following gate, inside the windows of the gates it
    follows), so the workbench evaluates gates on the grid cut to the time
    span that the gate chain can reach (from
    :func:`ndtmap.gates.gate_time_span_us`, which also checks the windows
    against the full record), plus two samples each side and, on RF grids, the
    reach of the envelope filter that times the events
    (:func:`ndtmap.gates.timing_reach_samples`). The missing-A-scan
    mask of the full grid is carried into the cut grid as its ``missing``
    variable, so an A-scan with a NaN outside the window stays missing. The
    results equal those on the whole grid up to rounding of the sampling
    interval (the tests compare both). The Hilbert envelope depends on the
    whole A-scan, so ``detect='envelope'`` is evaluated on the whole grid.

Parallel slabs
    A large in-memory cut grid is split into slabs along ``scan`` and
    evaluated by dask's threaded scheduler: the two cores share the work and
    the progress of the slabs can be shown.
"""

from __future__ import annotations

import contextlib
import math
import uuid
from collections.abc import Callable, Iterator
from typing import Any

import numpy as np
import xarray as xr

from ndtmap._shared.arrays import is_lazy
from ndtmap.gates import KERNEL_ENV, Gate, gate_time_span_us, timing_reach_samples

#: A function told the fraction of work done (0..1, or None when unknown) and what is being done.
Progress = Callable[[float | None, str], None]

#: Cut grids with more samples than this are evaluated in slabs on dask's threaded scheduler.
PARALLEL_MIN_SAMPLES = 4_000_000
#: Samples per slab.
SLAB_SAMPLES = 4_000_000
#: Samples kept beyond the reach of the gate windows on each side of the cut.
CROP_MARGIN_SAMPLES = 2


def chain_key(chain: list[Gate], detect: str) -> tuple[Any, ...]:
    """A hashable key of a gate chain's definitions and the detection signal."""
    return (detect, *(tuple(sorted(g.to_dict().items(), key=lambda kv: kv[0])) for g in chain))


def chain_bounds_us(grid: xr.Dataset, chain: list[Gate], detect: str) -> tuple[float, float]:
    """Earliest and latest time (us) that the windows of `chain` can reach, checked against the record.

    Raises
    ------
    GateError
        When a window lies outside the record (the message of
        :func:`ndtmap.gates.gate_time_span_us`).
    """
    spans = [gate_time_span_us(grid, chain, g.name, detect=detect) for g in chain]
    return min(s[0] for s in spans), max(s[1] for s in spans)


def crop_to_chain(grid: xr.Dataset, chain: list[Gate], detect: str, missing: xr.DataArray | None) -> xr.Dataset:
    """The grid cut to the time span that `chain` can reach (see the module notes).

    `missing` is the missing-A-scan mask of the whole grid (None: none
    missing). With ``detect='envelope'`` the grid is returned whole.
    """
    if detect != "rectified":
        return grid
    lo, hi = chain_bounds_us(grid, chain, detect)
    t = np.asarray(grid["time"].values, dtype=np.float64)
    dt = (t[-1] - t[0]) / (t.size - 1)
    margin = CROP_MARGIN_SAMPLES + timing_reach_samples(grid, detect)
    k0 = max(0, int(math.floor((lo - t[0]) / dt)) - margin)
    k1 = min(t.size - 1, int(math.ceil((hi - t[0]) / dt)) + margin)
    if k1 - k0 < 2:
        k1 = min(t.size - 1, k0 + 2)
        k0 = max(0, k1 - 2)
    if k0 == 0 and k1 == t.size - 1:
        return grid
    out = grid.isel(time=slice(k0, k1 + 1))
    if missing is not None:
        mask = missing.astype(bool)
        if "missing" in out.data_vars:
            mask = mask | out["missing"].astype(bool)
        out = out.assign(missing=mask.rename("missing"))
    return out


def in_slabs(grid: xr.Dataset) -> xr.Dataset:
    """A large in-memory grid as a dask-backed one in slabs along ``scan`` (whole A-scans per slab).

    Only with the numpy reference kernel: the compiled kernel already shares an in-memory grid
    between the cores itself, and slabs would only add dask's task overhead.
    """
    import os

    if is_lazy(grid) or os.environ.get(KERNEL_ENV, "compiled") != "numpy":
        return grid
    n_scan, n_index, n_time = (grid.sizes[d] for d in ("scan", "index", "time"))
    total = n_scan * n_index * n_time
    if total < PARALLEL_MIN_SAMPLES or n_scan < 2:
        return grid
    per = max(1, int(SLAB_SAMPLES // max(1, n_index * n_time)))
    # a fresh token: dask would otherwise hash all the samples to name the array
    return grid.chunk({"scan": per, "index": -1, "time": -1}, token=uuid.uuid4().hex)


@contextlib.contextmanager
def dask_progress(report: Progress | None, text: str) -> Iterator[None]:
    """Report the fraction of finished dask tasks to `report` while computing inside the block."""
    if report is None:
        yield
        return
    from dask.callbacks import Callback

    class _Tasks(Callback):  # type: ignore[misc]
        def _start_state(self, dsk: Any, state: Any) -> None:
            self._total = max(1, sum(len(state[k]) for k in ("ready", "waiting", "running", "finished")))
            self._last = -1.0

        def _posttask(self, key: Any, result: Any, dsk: Any, state: Any, worker_id: Any) -> None:
            done = len(state["finished"]) / self._total
            if done - self._last >= 0.02 or done >= 1.0:
                self._last = done
                report(done, text)

    with _Tasks():
        yield


def computed(obj: Any, report: Progress | None, text: str) -> Any:
    """`obj` computed (when dask-backed), with progress reported; unchanged otherwise."""
    if is_lazy(obj):
        with dask_progress(report, text):
            return obj.compute()
    return obj
