"""Out-of-core mapping: build a large Zarr store chunk by chunk, map it, and measure the peak memory.

    python benchmarks/out_of_core.py                  # 10 GB store in /tmp, removed afterwards
    python benchmarks/out_of_core.py --size-gb 0.3 --json

Steps, each in its own child process so that its peak resident memory (``ru_maxrss``) is its own:

1. *build*: a seeded synthetic int16 plate scan (back-wall echo, corrosion patches, laminar reflectors as tone
   bursts, noise; ``benchmarks/synthetic.py``) of the requested size is written to a Zarr v3 store with
   :func:`ndtmap.io.convert.write_zarr` (the writer of ``ndtmap convert``), one chunk of whole A-scans at a time;
   the grid never exists in memory (``--writer save_grid`` uses :func:`ndtmap.io.save_grid` instead);
2. *map*: the store is opened lazily and ``amplitude_map``, ``depth_map`` and ``backwall_loss_map`` (nominal
   level from the data) are computed on dask's local threads.

The child reports its resident memory after the imports, after opening and after a first small map (the
baseline; the peak counter is then reset through /proc/self/clear_refs so that a first compilation of the
kernel does not count) and its peak while mapping (VmHWM); the parent also reads
``resource.getrusage(RUSAGE_CHILDREN).ru_maxrss`` (the lifetime peak of the children). Free disk space is
checked first; the store is deleted at the end unless ``--keep``.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
N_TIME = 1000
N_INDEX = 2000


def shape_for(size_gb: float, n_index: int = N_INDEX, n_time: int = N_TIME) -> tuple[int, int, int]:
    """(scan, index, time) of an int16 grid of about `size_gb` GB (1e9 bytes)."""
    n_scan = max(1, int(round(size_gb * 1e9 / (2 * n_index * n_time))))
    return n_scan, n_index, n_time


def _rss_mb() -> float:
    """Current resident memory of this process, MB (from /proc)."""
    with open("/proc/self/status", encoding="ascii") as fh:
        for line in fh:
            if line.startswith("VmRSS:"):
                return int(line.split()[1]) / 1024.0
    return float("nan")


def _peak_mb() -> float:
    """Peak resident memory of this process since the last :func:`_reset_peak`, MB (VmHWM; else ru_maxrss)."""
    try:
        with open("/proc/self/status", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("VmHWM:"):
                    return int(line.split()[1]) / 1024.0
    except OSError:
        pass
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0  # kB on Linux


def _reset_peak() -> bool:
    """Reset the peak resident memory to the current one (Linux >= 4.0: write 5 to /proc/self/clear_refs)."""
    try:
        with open("/proc/self/clear_refs", "w", encoding="ascii") as fh:
            fh.write("5")
        return True
    except OSError:
        return False


def child_build(store: Path, n_scan: int, n_index: int, n_time: int, chunk_scan: int, seed: int,
                writer: str) -> dict:
    sys.path[:0] = [str(HERE), str(ROOT)]
    from synthetic import synthetic_grid

    from ndtmap.io import save_grid, write_zarr

    base = _rss_mb()
    t0 = time.perf_counter()
    grid = synthetic_grid(n_scan, n_index, n_time, chunk_scan=chunk_scan, seed=seed)
    if writer == "save_grid":
        save_grid(grid, store)
    else:
        write_zarr(grid, store, chunk_scan=chunk_scan)
    return {"build_s": time.perf_counter() - t0, "baseline_mb": base, "peak_mb": _peak_mb(),
            "samples_gb": n_scan * n_index * n_time * 2 / 1e9, "writer": writer}


def child_map(store: Path, chunk_scan: int | None) -> dict:
    sys.path[:0] = [str(ROOT)]
    import numpy as np

    from ndtmap.gates import Gate
    from ndtmap.io import open_grid
    from ndtmap.scans import amplitude_map, backwall_loss_map, depth_map

    chunks = {"scan": chunk_scan} if chunk_scan else None
    grid = open_grid(store, chunks=chunks, lazy=True)
    flaw = Gate("flaw", 3.0, 23.0, threshold_fsh=20.0)
    backwall = Gate("backwall", 15.0, 27.0, threshold_fsh=20.0)
    amplitude_map(grid.isel(scan=slice(0, 1)), flaw).compute()  # load (or compile) the kernel before the baseline
    base = _rss_mb()
    reset = _reset_peak()  # the peak of a first compilation must not count as mapping memory
    times = {}
    out = {}
    for name, func in (("amplitude_map", lambda: amplitude_map(grid, flaw)),
                       ("depth_map", lambda: depth_map(grid, flaw)),
                       ("backwall_loss_map", lambda: backwall_loss_map(grid, backwall))):
        t0 = time.perf_counter()
        m = func().compute()
        times[name] = time.perf_counter() - t0
        out[name] = {"finite": int(np.isfinite(m.values).sum()), "max": float(np.nanmax(m.values))}
    a = grid["ascan"]
    return {"map_s": times, "maps": out, "baseline_mb": base, "peak_mb": _peak_mb(), "peak_reset": reset,
            "lifetime_peak_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0,
            "dask_chunk_mb": a.dtype.itemsize * math.prod(c[0] for c in a.chunks) / 1e6,
            "store_gb": sum(p.stat().st_size for p in store.rglob("*") if p.is_file()) / 1e9}


def _run_child(args: list[str]) -> dict:
    """Run this script as a child; return its JSON report plus the children's peak memory seen by the parent."""
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join([str(ROOT), env.get("PYTHONPATH", "")])
    proc = subprocess.run([sys.executable, str(Path(__file__).resolve()), *args], capture_output=True, text=True,
                          env=env, check=False)
    if proc.returncode != 0:
        raise RuntimeError(f"child {args[0]} failed ({proc.returncode}):\n{proc.stderr[-4000:]}")
    report = json.loads(proc.stdout.strip().splitlines()[-1])
    report["children_peak_mb"] = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024.0
    return report


def run(size_gb: float, *, folder: Path | None = None, chunk_scan: int | None = None,
        map_chunk_scan: int | None = None,
        seed: int = 7730, keep: bool = False, n_index: int = N_INDEX, n_time: int = N_TIME,
        writer: str = "write_zarr") -> dict:
    """Build, map and measure; returns the numbers (see the module docstring)."""
    n_scan, n_index, n_time = shape_for(size_gb, n_index, n_time)
    if chunk_scan is None:  # the chunks `ndtmap convert` would choose
        sys.path[:0] = [str(ROOT)]
        from ndtmap.io import zarr_chunks

        chunk_scan = zarr_chunks((n_scan, n_index, n_time), 2)[0]
    folder = Path(folder or tempfile.gettempdir())
    need = 1.2 * n_scan * n_index * n_time * 2
    free = shutil.disk_usage(folder).free
    if free < need:
        raise SystemExit(f"{folder} has {free / 1e9:.1f} GB free; the store needs up to {need / 1e9:.1f} GB")
    work = Path(tempfile.mkdtemp(prefix="ndtmap-ooc-", dir=folder))
    store = work / "KFP-PL-7730.zarr"
    try:
        build = _run_child(["--child-build", str(store), str(n_scan), str(n_index), str(n_time), str(chunk_scan),
                            str(seed), writer])
        mapped = _run_child(["--child-map", str(store), str(map_chunk_scan or 0)])
    finally:
        if not keep:
            shutil.rmtree(work, ignore_errors=True)
    return {"shape": [n_scan, n_index, n_time], "samples_gb": n_scan * n_index * n_time * 2 / 1e9,
            "store_chunks": [chunk_scan, n_index, n_time],
            "free_disk_gb_before": free / 1e9, "store": str(store) if keep else None, "build": build, "map": mapped}


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("--size-gb", type=float, default=10.0, help="size of the int16 samples, GB (default 10)")
    p.add_argument("--dir", type=Path, help="folder for the store (default the temp folder)")
    p.add_argument("--chunk-scan", type=int, help="scan lines per chunk of the store (default: as ndtmap convert)")
    p.add_argument("--keep", action="store_true", help="keep the store")
    p.add_argument("--writer", choices=("write_zarr", "save_grid"), default="write_zarr",
                   help="how the store is built (default write_zarr, the writer of `ndtmap convert`)")
    p.add_argument("--map-chunk-scan", type=int, help="scan lines per dask chunk while mapping (default: as stored)")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.add_argument("--child-build", nargs=7, help=argparse.SUPPRESS)
    p.add_argument("--child-map", nargs=2, help=argparse.SUPPRESS)
    args = p.parse_args(argv)
    if args.child_build:
        store, *numbers, writer = args.child_build
        print(json.dumps(child_build(Path(store), *map(int, numbers), writer)))
        return 0
    if args.child_map:
        store, chunk = args.child_map
        print(json.dumps(child_map(Path(store), int(chunk) or None)))
        return 0
    report = run(args.size_gb, folder=args.dir, chunk_scan=args.chunk_scan, map_chunk_scan=args.map_chunk_scan,
                 keep=args.keep, writer=args.writer)
    if args.json:
        print(json.dumps(report, indent=2))
        return 0
    b, m = report["build"], report["map"]
    print(f"grid {' x '.join(map(str, report['shape']))} int16 = {report['samples_gb']:.2f} GB of samples; "
          f"store {m['store_gb']:.2f} GB on disk (Blosc-zstd), chunks {tuple(report['store_chunks'])}")
    print(f"build ({b['writer']}, chunk by chunk): {b['build_s']:.1f} s, peak RSS {b['peak_mb']:.0f} MB "
          f"(after imports {b['baseline_mb']:.0f} MB)")
    for name, seconds in m["map_s"].items():
        rate = report["samples_gb"] / seconds
        print(f"{name}: {seconds:.1f} s ({rate:.2f} GB/s of samples)")
    print(f"mapping: peak RSS {m['peak_mb']:.0f} MB (baseline after imports and opening {m['baseline_mb']:.0f} MB; "
          f"dask chunks of {m['dask_chunk_mb']:.0f} MB); largest child peak seen by the parent "
          f"{m['children_peak_mb']:.0f} MB")
    return 0


if __name__ == "__main__":
    sys.exit(main())
