"""Computation helpers of the workbench (private): gate chains, the time-window crop, progress.

The crop
    A gate in ``'rectified'`` detection only reads the samples inside its
    window (and, for a following gate, inside the windows of the gates it
    follows), so the workbench evaluates gates on the grid cut to the time
    span that the gate chain can reach (from
    :meth:`ndtmap.gates.evaluate._Evaluator.bounds`, which also checks the windows
    against the full record), plus two samples each side. The missing-A-scan
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
from collections.abc import Callable, Iterator, Mapping
from typing import Any

import numpy as np
import xarray as xr

from ndtmap._shared.arrays import is_lazy
from ndtmap.errors import GateError
from ndtmap.gates.evaluate import Gate

#: A function told the fraction of work done (0..1, or None when unknown) and what is being done.
Progress = Callable[[float | None, str], None]

#: Cut grids with more samples than this are evaluated in slabs on dask's threaded scheduler.
PARALLEL_MIN_SAMPLES = 4_000_000
#: Samples per slab.
SLAB_SAMPLES = 4_000_000
#: Samples kept beyond the reach of the gate windows on each side of the cut.
CROP_MARGIN_SAMPLES = 2


def gate_chain(gates: Mapping[str, Gate], name: str) -> list[Gate]:
    """The gate called `name` followed by the gates it follows, nearest first.

    Raises
    ------
    GateError
        An unknown gate, a followed gate that is not defined, or a cycle.
    """
    if name not in gates:
        raise GateError(f"no gate named {name!r}; gates: {list(gates)}")
    chain = [gates[name]]
    seen = {name}
    cur = gates[name]
    while cur.follows is not None:
        if cur.follows not in gates:
            raise GateError(f"gate {cur.name!r} follows {cur.follows!r}, which is not defined; gates: {list(gates)}")
        if cur.follows in seen:
            raise GateError(f"gates {sorted(seen)} follow each other in a circle; make one of them stand alone")
        seen.add(cur.follows)
        cur = gates[cur.follows]
        chain.append(cur)
    return chain


def chain_key(chain: list[Gate], detect: str) -> tuple[Any, ...]:
    """A hashable key of a gate chain's definitions and the detection signal."""
    return (detect, *(tuple(sorted(g.to_dict().items(), key=lambda kv: kv[0])) for g in chain))


def chain_bounds_us(grid: xr.Dataset, chain: list[Gate], detect: str) -> tuple[float, float]:
    """Earliest and latest time (us) that the windows of `chain` can reach, checked against the record.

    Raises
    ------
    GateError
        When a window lies outside the record (the message of
        :mod:`ndtmap.gates.evaluate`).
    """
    from ndtmap.gates.evaluate import _Evaluator  # the authoritative window logic, also used by ndtmap.maps

    table = {g.name: g for g in chain}
    ev = _Evaluator(grid, table, detect, None)
    spans = [ev.bounds(g.name) for g in chain]
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
    k0 = max(0, int(math.floor((lo - t[0]) / dt)) - CROP_MARGIN_SAMPLES)
    k1 = min(t.size - 1, int(math.ceil((hi - t[0]) / dt)) + CROP_MARGIN_SAMPLES)
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

    from ndtmap.gates.evaluate import KERNEL_ENV

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
