"""ndtmap speed benchmarks: each operation against a roof and against the straightforward numpy script.

    python benchmarks/run.py                 # full run (grids of 0.5, 1 and 2 GB), a table
    python benchmarks/run.py --quick --json  # 0.5 GB int16 + 1 GB float32 grids, one JSON object (< 5 min)

Every time is the median of ``--repeat`` runs after one warm-up run, measured in this one process, so the
ratios compare like with like on the machine as it is at that moment:

``roof_ratio``  = time / roof time     (1.0 would be as fast as the machine can stream the data)
``naive_ratio`` = naive time / time    (how many times faster than the script a user would write)

The roofs and the straightforward scripts are defined per operation (``ROOFS`` below, and
docs/performance.md). The data are seeded synthetic plate scans (benchmarks/synthetic.py) built in memory;
the convert benchmark writes a raw dump and Zarr stores to the temporary folder and removes them.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import shutil
import statistics
import sys
import tempfile
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path[:0] = [str(HERE), str(HERE.parent)]

from synthetic import DT_US, FSH_PER_COUNT, synthetic_block  # noqa: E402

import ndtmap  # noqa: E402
from ndtmap.gates import Gate, evaluate_gate, gate_window_us  # noqa: E402
from ndtmap.gates import _compiled as _fastgate  # noqa: E402
from ndtmap.grid import make_grid  # noqa: E402
from ndtmap.scans import (  # noqa: E402
    amplitude_map,
    b_scan,  # noqa: E402
    depth_map,
)
from ndtmap.signal import envelope  # noqa: E402

ROOFS = {
    "gate": "np.max over a contiguous int16/float32 array of the window's byte size (streaming read)",
    "envelope": "np.fft.rfft (float64) of the same A-scans, once",
    "cscan": "as for gate: np.max over contiguous bytes of the window size",
    "bscan": "np.copy of the section's samples (a[:, k, :])",
    "sizing": "scipy.ndimage.label of the thresholded map (finding the indications, nothing else)",
    "convert": "shutil.copyfile of the raw data file and fsync of the copy (the same bytes written durably, as "
               "the atomic convert must)",
}
NAIVE = {
    "gate": "np.abs of the window (as float32 %FSH), then separate max, argmax, parabola, threshold and argmax "
            "passes (no crossing-echo peak, no missing A-scans: less work than ndtmap does)",
    "envelope": "np.abs(scipy.signal.hilbert(a, axis=-1)) on the whole block (complex128 of the block)",
    "cscan": "np.abs(a[..., lo:hi] as float32 %FSH).max(axis=-1)",
    "bscan": "ds.ascan.sel(index=x, method='nearest'), then np.abs of the %FSH values",
    "sizing": "label, then per indication a boolean mask of the whole map for peak, area and 6 dB extent",
    "convert": "import_raw into memory, then ds.to_zarr with xarray's default chunks and codecs (memory grows "
               "with the grid; no fsync, not atomic)",
}


# --------------------------------------------------------------------------- timing


def median_time(func: Callable[[], Any], repeat: int, *, setup: Callable[[], Any] | None = None) -> float:
    """Median wall time of `func` over `repeat` runs after one warm-up run."""
    times = []
    for k in range(repeat + 1):
        if setup is not None:
            setup()
        t0 = time.perf_counter()
        func()
        dt = time.perf_counter() - t0
        if k:
            times.append(dt)
    return statistics.median(times)


def entry(kind: str, seconds: float, roof: float, naive: float | None, **extra: Any) -> dict[str, Any]:
    out = {"median_s": seconds, "roof_s": roof, "roof_ratio": seconds / roof,
           "naive_s": naive, "naive_ratio": None if naive is None else naive / seconds,
           "roof": ROOFS[kind], "naive": NAIVE[kind]}
    out.update(extra)
    return out


# --------------------------------------------------------------------------- data


def plate_counts(n_scan: int, n_index: int, n_time: int, seed: int = 7730) -> np.ndarray:
    out = np.empty((n_scan, n_index, n_time), dtype=np.int16)
    step = 25
    for s0 in range(0, n_scan, step):
        s1 = min(n_scan, s0 + step)
        out[s0:s1] = synthetic_block(s0, s1 - s0, n_scan, n_index, n_time, seed)
    return out


def as_grid(data: np.ndarray) -> Any:
    n_scan, n_index, n_time = data.shape
    kw = {"fsh_per_count": FSH_PER_COUNT} if data.dtype == np.int16 else {}
    return make_grid(data, scan_mm=np.arange(n_scan) * 1.0, index_mm=np.arange(n_index) * 1.0,
                     time_us=np.arange(n_time) * DT_US, velocity_m_s=5920.0, probe_frequency_mhz=5.0,
                     probe_diameter_mm=10.0, attrs={"part_id": "KFP-PL-7730", "part_thickness_mm": 25.0}, **kw)


# --------------------------------------------------------------------------- straightforward scripts


def naive_gate(a: np.ndarray, lo: int, hi: int, thr: float, t0: float, dt: float) -> tuple:
    w = a[..., lo:hi + 1]
    w = np.abs(w.astype(np.float32) * np.float32(FSH_PER_COUNT)) if w.dtype == np.int16 else np.abs(w)
    peak = w.max(axis=-1)
    k = w.argmax(axis=-1)
    n = w.shape[-1]
    y0 = np.take_along_axis(w, np.clip(k - 1, 0, n - 1)[..., None], -1)[..., 0].astype(np.float64)
    y2 = np.take_along_axis(w, np.clip(k + 1, 0, n - 1)[..., None], -1)[..., 0].astype(np.float64)
    den = y0 - 2.0 * peak + y2
    with np.errstate(invalid="ignore", divide="ignore"):
        delta = np.where(den < 0, 0.5 * (y0 - y2) / den, 0.0)
    peak_time = t0 + (k + delta) * dt
    above = w >= thr
    has = above.any(axis=-1)
    c = above.argmax(axis=-1)
    yc = np.take_along_axis(w, c[..., None], -1)[..., 0].astype(np.float64)
    yp = np.take_along_axis(w, np.clip(c - 1, 0, n - 1)[..., None], -1)[..., 0].astype(np.float64)
    with np.errstate(invalid="ignore", divide="ignore"):
        frac = np.clip(np.where(c > 0, (thr - yp) / (yc - yp), 1.0), 0.0, 1.0)
    cross_time = np.where(has, t0 + (c - 1 + frac) * dt, np.nan)
    return peak, peak_time, cross_time


def naive_sizing(amp: np.ndarray, thr: float, dx: float, dy: float) -> list[dict]:
    from scipy import ndimage

    labels, n = ndimage.label(amp >= thr)
    out = []
    for k in range(1, n + 1):
        mask = labels == k
        peak = float(amp[mask].max())
        drop = mask & (amp >= peak / 2.0)
        rows, cols = np.nonzero(drop)
        out.append({"peak": peak, "area_mm2": float(mask.sum()) * dx * dy,
                    "length_scan_mm": float(rows.max() - rows.min() + 1) * dx,
                    "length_index_mm": float(cols.max() - cols.min() + 1) * dy})
    return out


# --------------------------------------------------------------------------- benchmarks


def bench_gates(g16: Any, g32: Any, repeat: int, results: dict) -> None:
    a16 = g16["ascan"].values
    a32 = g32["ascan"].values
    n_time = a16.shape[-1]
    t_end = (n_time - 1) * DT_US
    whole = Gate("record", 0.0, t_end, unit="us", threshold_fsh=20.0)
    flaw = Gate("flaw", 3.0, 23.0, threshold_fsh=20.0)  # 3 .. 23 mm of steel: about a third of the record
    for label, grid, a in (("int16", g16, a16), ("float32", g32, a32)):
        for gate_label, gate in (("record", whole), ("window", flaw)):
            t_a, t_b = gate_window_us(grid, gate)
            lo = int(np.ceil(t_a / DT_US - 1e-6))
            hi = int(np.floor(t_b / DT_US + 1e-6))
            width = hi - lo + 1
            flat = a.reshape(-1)[: a.shape[0] * a.shape[1] * width]
            roof = median_time(lambda flat=flat: flat.max(), repeat)
            strided = a[..., lo:hi + 1]
            strided_roof = median_time(lambda strided=strided: strided.max(), repeat)
            seconds = median_time(lambda grid=grid, gate=gate: evaluate_gate(grid, gate), repeat)

            def kernel_only(a=a, lo=lo, width=width, label=label):
                return _fastgate.gate_kernel(a, 0.0, float(width - 1), t0_us=lo * DT_US, dt_us=DT_US, threshold=20.0,
                                             hold=10, base=lo, length=width, scale=FSH_PER_COUNT,
                                             rectify=True, check_record=label == "float32", threads=1)

            kernel = median_time(kernel_only, repeat)
            naive = median_time(lambda a=a, lo=lo, hi=hi: naive_gate(a, lo, hi, 20.0, lo * DT_US, DT_US),
                                max(1, repeat // 2))
            extra = {}
            if label == "float32" and width < n_time:
                # a float32 A-scan with a NaN anywhere is missing, so the whole record is read once
                record_roof = median_time(lambda a=a: a.max(), repeat)
                extra = {"record_roof_s": record_roof, "record_roof_ratio": seconds / record_roof}
            name = f"gate_outputs_{label}_{gate_label}"
            results[name] = entry(
                "gate", seconds, roof, naive, window_samples=width, record_samples=n_time,
                window_bytes=int(flat.nbytes), strided_roof_s=strided_roof,
                strided_roof_ratio=seconds / strided_roof, kernel_one_thread_s=kernel,
                kernel_one_thread_roof_ratio=kernel / roof,
                what="evaluate_gate: amplitude, parabolic peak time, first crossing, crossing-echo peak, "
                     "triggered, sound path, depth, surface distance" + (
                         "; the missing-A-scan check reads the whole record" if label == "float32" else ""),
                **extra,
            )
    lazy = g16.chunk({"scan": 25, "index": -1, "time": -1})
    seconds = median_time(lambda: evaluate_gate(lazy, whole).compute(), repeat)
    r = results["gate_outputs_int16_record"]
    results["gate_outputs_int16_record_dask"] = entry(
        "gate", seconds, r["roof_s"], r["naive_s"], what="as gate_outputs_int16_record on a dask-backed grid "
        "(chunks of 25 scan lines, dask threads)")


def bench_cscan(g16: Any, repeat: int, results: dict) -> None:
    a = g16["ascan"].values
    flaw = Gate("flaw", 3.0, 23.0, threshold_fsh=20.0)
    t_a, t_b = gate_window_us(g16, flaw)
    lo, hi = int(np.ceil(t_a / DT_US - 1e-6)), int(np.floor(t_b / DT_US + 1e-6))
    flat = a.reshape(-1)[: a.shape[0] * a.shape[1] * (hi - lo + 1)]
    roof = median_time(lambda: flat.max(), repeat)
    seconds = median_time(lambda: amplitude_map(g16, flaw), repeat)
    naive = median_time(lambda: np.abs(a[..., lo:hi + 1].astype(np.float32) * np.float32(FSH_PER_COUNT)).max(-1),
                        max(1, repeat // 2))
    results["cscan_amplitude_int16"] = entry("cscan", seconds, roof, naive,
                                             strided_roof_s=median_time(lambda: a[..., lo:hi + 1].max(), repeat),
                                             what="amplitude_map for one (edited) gate: the workbench's hot path")


def bench_envelope(g16: Any, repeat: int, results: dict, n_ascans: int) -> None:
    from scipy import signal as sps

    a = g16["ascan"].values
    n_scan = max(1, n_ascans // a.shape[1])
    block = as_grid(a[:n_scan].copy())
    raw = block["ascan"].values
    f64 = raw.astype(np.float64) * FSH_PER_COUNT
    roof = median_time(lambda: np.fft.rfft(f64, axis=-1), repeat)
    seconds = median_time(lambda: envelope(block), repeat)
    naive = median_time(lambda: np.abs(sps.hilbert(raw.astype(np.float64) * FSH_PER_COUNT, axis=-1)),
                        max(1, repeat // 2))
    results["envelope_int16"] = entry("envelope", seconds, roof, naive, ascans=int(raw.shape[0] * raw.shape[1]),
                                      samples_mb=raw.nbytes / 1e6,
                                      what="ndtmap.signal.envelope (blocks of A-scans, rfft + irfft in float64)")


def bench_bscan(g16: Any, repeat: int, results: dict) -> None:
    a = g16["ascan"].values
    k = a.shape[1] // 3
    x = float(g16["index"].values[k])
    roof = median_time(lambda: np.copy(a[:, k, :]), repeat)
    seconds = median_time(lambda: b_scan(g16, x), repeat)
    naive = median_time(
        lambda: np.abs(g16["ascan"].sel(index=x, method="nearest").values.astype(np.float32)
                       * np.float32(FSH_PER_COUNT)), repeat)
    results["bscan_cut_int16"] = entry("bscan", seconds, roof, naive, section_bytes=int(a[:, k, :].nbytes),
                                       what="b_scan(grid, index_mm): nearest line, rectified, with depth axis")


def bench_sizing(g16: Any, repeat: int, results: dict) -> None:
    from scipy import ndimage

    from ndtmap.indications import size_indications

    flaw = Gate("flaw", 3.0, 23.0, threshold_fsh=20.0)
    amp = amplitude_map(g16, flaw)
    dep = depth_map(g16, flaw)
    values = amp.values
    roof = median_time(lambda: ndimage.label(values >= 20.0), repeat)
    seconds = median_time(lambda: size_indications(amp, threshold_fsh=20.0, depth_map=dep), repeat)
    naive = median_time(lambda: naive_sizing(values, 20.0, 1.0, 1.0), max(1, repeat // 2))
    n = len(size_indications(amp, threshold_fsh=20.0, depth_map=dep))
    results["indication_sizing"] = entry("sizing", seconds, roof, naive, indications=n, map_shape=list(values.shape),
                                         what="size_indications: detection, 6/20 dB drop sizing, depth, flags")


def bench_convert(g16: Any, repeat: int, results: dict, folder: Path) -> None:
    from ndtmap.io import convert_to_zarr, export_raw, import_raw

    work = Path(tempfile.mkdtemp(prefix="ndtmap-bench-", dir=folder))
    try:
        sidecar = export_raw(g16, work / "KFP-PL-7730.json")
        data_file = sidecar.with_suffix(".bin")
        targets = {"copy": work / "copy.bin", "fast": work / "fast.zarr", "naive": work / "naive.zarr"}

        def clean() -> None:
            for p in targets.values():
                if p.is_dir():
                    shutil.rmtree(p)
                elif p.exists():
                    p.unlink()

        def durable_copy() -> None:
            shutil.copyfile(data_file, targets["copy"])
            fd = os.open(targets["copy"], os.O_RDONLY)
            try:
                os.fsync(fd)
            finally:
                os.close(fd)

        roof = median_time(durable_copy, repeat, setup=clean)
        seconds = median_time(lambda: convert_to_zarr(sidecar, targets["fast"]), repeat, setup=clean)

        def naive() -> None:
            ds = import_raw(sidecar, lazy=False)
            ds.to_zarr(targets["naive"], zarr_format=3, consolidated=False)

        naive_s = median_time(naive, max(1, repeat // 2), setup=clean)
        convert_to_zarr(sidecar, targets["fast"], overwrite=True)
        stored = sum(p.stat().st_size for p in targets["fast"].rglob("*") if p.is_file())
        results["convert_raw_to_zarr"] = entry(
            "convert", seconds, roof, naive_s, samples_mb=data_file.stat().st_size / 1e6, stored_mb=stored / 1e6,
            what="convert_to_zarr: raw dump (memory map) to chunked Zarr v3, Blosc-zstd + CRC32C, atomic")
    finally:
        shutil.rmtree(work, ignore_errors=True)


def machine() -> dict[str, Any]:
    import numba
    import scipy
    import xarray
    import zarr

    cpu = platform.processor()
    try:
        with open("/proc/cpuinfo", encoding="ascii", errors="replace") as fh:
            cpu = next((line.split(":", 1)[1].strip() for line in fh if line.startswith("model name")), cpu)
    except OSError:
        pass
    return {"cpu": cpu, "cores": os.cpu_count(), "usable_cores": len(os.sched_getaffinity(0)),
            "load_average_1min": os.getloadavg()[0], "python": platform.python_version(),
            "numpy": np.__version__, "numba": numba.__version__, "scipy": scipy.__version__,
            "xarray": xarray.__version__, "zarr": zarr.__version__, "ndtmap": ndtmap.__version__,
            "platform": platform.platform(), "OPENBLAS_CORETYPE": os.environ.get("OPENBLAS_CORETYPE")}


def run(quick: bool, repeat: int, folder: Path, progress: Callable[[str], None]) -> dict[str, Any]:
    results: dict[str, Any] = {}
    sizes = [(500, 500, 1000)] if quick else [(500, 500, 1000), (500, 500, 2000)]
    for k, shape in enumerate(sizes):
        progress(f"building a {shape} int16 grid ({np.prod(shape) * 2 / 1e9:.1f} GB) and its float32 copy")
        counts = plate_counts(*shape)
        g16 = as_grid(counts)
        g32 = as_grid(counts.astype(np.float32) * np.float32(FSH_PER_COUNT))
        part: dict[str, Any] = {}
        progress("gates")
        bench_gates(g16, g32, repeat, part)
        del g32
        if k == 0:
            progress("C-scan, B-scan, envelope, sizing")
            bench_cscan(g16, repeat, part)
            bench_bscan(g16, repeat, part)
            bench_envelope(g16, repeat, part, 50_000)
            bench_sizing(g16, repeat, part)
            progress("convert")
            bench_convert(g16, repeat, part, folder)
        suffix = "" if k == 0 else f"_{shape[2]}"
        for name, value in part.items():
            value["grid_shape"] = list(shape)
            results[name + suffix] = value
        del g16, counts
    return results


def table(results: dict[str, Any]) -> str:
    lines = [f"{'operation':42s} {'median':>10s} {'roof':>10s} {'x roof':>7s} {'naive':>10s} {'x faster':>8s}"]
    for name, r in results.items():
        naive = "-" if r["naive_s"] is None else f"{r['naive_s'] * 1e3:8.1f}ms"
        faster = "-" if r["naive_ratio"] is None else f"{r['naive_ratio']:7.1f}x"
        lines.append(f"{name:42s} {r['median_s'] * 1e3:8.1f}ms {r['roof_s'] * 1e3:8.1f}ms {r['roof_ratio']:6.2f}x "
                     f"{naive:>10s} {faster:>8s}")
        if "strided_roof_s" in r and r.get("window_samples") != r.get("record_samples"):
            lines.append(f"{'':42s} strided-window roof {r['strided_roof_s'] * 1e3:.1f} ms "
                         f"-> {r['median_s'] / r['strided_roof_s']:.2f}x")
        if "record_roof_s" in r:
            lines.append(f"{'':42s} whole-record roof {r['record_roof_s'] * 1e3:.1f} ms "
                         f"-> {r['record_roof_ratio']:.2f}x")
        if "kernel_one_thread_s" in r:
            lines.append(f"{'':42s} kernel alone, one thread {r['kernel_one_thread_s'] * 1e3:.1f} ms "
                         f"-> {r['kernel_one_thread_roof_ratio']:.2f}x roof")
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("--quick", action="store_true", help="one grid size (0.5 GB int16 + 1 GB float32), 3 repeats")
    p.add_argument("--json", action="store_true", help="print one JSON object (operation -> numbers) on stdout")
    p.add_argument("--repeat", type=int, help="timed runs per measurement (default 3 quick, 5 full)")
    p.add_argument("--dir", type=Path, default=Path(tempfile.gettempdir()), help="folder for the convert files")
    args = p.parse_args(argv)
    repeat = args.repeat or (3 if args.quick else 5)
    t0 = time.perf_counter()

    def progress(text: str) -> None:
        print(f"[{time.perf_counter() - t0:6.1f} s] {text}", file=sys.stderr, flush=True)

    info = machine()
    results = run(args.quick, repeat, args.dir, progress)
    progress(f"done; machine: {json.dumps(info)}")
    if args.json:
        print(json.dumps(results, indent=1))
    else:
        print(f"machine: {info['cpu']}, {info['usable_cores']} cores, load {info['load_average_1min']:.2f}; "
              f"numpy {info['numpy']}, numba {info['numba']}")
        print(table(results))
    return 0


if __name__ == "__main__":
    sys.exit(main())
