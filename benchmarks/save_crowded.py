"""Saving a small map into a crowded folder costs what it costs in an empty one.

    python benchmarks/save_crowded.py                     # 68,000 unrelated files below the folder
    python benchmarks/save_crowded.py --files 5000 --json
    python benchmarks/save_crowded.py --old-walk          # also time what a save used to add (see below)

In a temporary folder, ``crowded/`` is filled with N small unrelated files in subfolders (1,000 per subfolder,
as an inspection archive grows) and ``empty/`` is left empty. A wall-thickness map of about 60 kB (80 x 90
float64 values, as written by ``ndtmap map``) is then saved with :func:`ndtmap.io.save_map` into each folder;
each save is timed 3 times (``--repeat``), alternating between the folders after one untimed save in each,
and the best time of each is kept. The result is the ratio crowded / empty, which should be close to 1: an
atomic save flushes the file it wrote and the folder's entry for it, not what else is in the folder.
Filling and removing 68,000 files takes minutes on a slow disk; that time is reported but not part of the
result.

``--old-walk`` also times, once, what every save did before this was fixed: opening and fsyncing every file
and folder below the destination folder: the time the fix saves on every save, measured in the same run.
Before the fix, a save into a folder with 68,000 files below it was measured at 18.4 s on the
development machine.
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import sys
import tempfile
import time
from collections.abc import Callable
from pathlib import Path

import numpy as np
import xarray as xr

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))  # run from a checkout without installing

from ndtmap.io import save_map  # noqa: E402
from ndtmap.scans.maps import map_dataset  # noqa: E402

FILES_PER_FOLDER = 1000


def thickness_map() -> xr.Dataset:
    """A seeded 80 x 90 wall-thickness map of a 12 mm plate (float64, about 58 kB of values)."""
    rng = np.random.default_rng(2207)
    values = 12.0 + rng.normal(0.0, 0.05, (80, 90))
    values[30:42, 40:55] -= 1.5  # a corroded patch
    da = xr.DataArray(values, dims=("scan", "index"), name="thickness_mm",
                      coords={"scan": np.arange(80) * 0.5, "index": np.arange(90) * 0.5},
                      attrs={"units": "mm", "long_name": "wall thickness", "part_id": "KFP-2207-A"})
    return map_dataset(da)


def fill(folder: Path, n_files: int) -> None:
    """`n_files` small unrelated files below `folder`, in subfolders of FILES_PER_FOLDER."""
    for i in range(n_files):
        sub = folder / f"plate-{i // FILES_PER_FOLDER:03d}"
        if i % FILES_PER_FOLDER == 0:
            sub.mkdir()
        (sub / f"reading-{i:06d}.txt").write_bytes(b"KFP reading\n")


def best_of(repeat: int, actions: dict[str, Callable[[], object]]) -> dict[str, float]:
    """Best wall time of each action in seconds, the actions alternating, after one untimed run each."""
    for action in actions.values():
        action()
    best = dict.fromkeys(actions, float("inf"))
    for _ in range(repeat):
        for name, action in actions.items():
            t0 = time.perf_counter()
            action()
            best[name] = min(best[name], time.perf_counter() - t0)
    return best


def old_walk(folder: Path) -> float:
    """Seconds to open and fsync every file and folder below `folder`, as each save did before the fix."""
    t0 = time.perf_counter()
    for root, dirs, files in os.walk(folder):
        for name in (*files, *dirs):
            fd = os.open(Path(root) / name, os.O_RDONLY)
            try:
                os.fsync(fd)
            finally:
                os.close(fd)
    return time.perf_counter() - t0


def run(n_files: int, *, repeat: int = 3, parent: Path | None = None, with_old_walk: bool = False) -> dict:
    """Fill a crowded folder, time the saves; returns the measurements (seconds, bytes)."""
    ds = thickness_map()
    with tempfile.TemporaryDirectory(prefix="ndtmap-save-crowded-", dir=parent) as tmp:
        empty, crowded = Path(tmp) / "empty", Path(tmp) / "crowded"
        empty.mkdir()
        crowded.mkdir()
        t0 = time.perf_counter()
        fill(crowded, n_files)
        if hasattr(os, "sync"):
            os.sync()  # the new files reach the disk now, not while a save is timed
        fill_s = time.perf_counter() - t0
        targets = {"empty": empty / "KFP-2207-A_thickness.nc", "crowded": crowded / "KFP-2207-A_thickness.nc"}
        best = best_of(repeat, {name: (lambda p=path: save_map(ds, p)) for name, path in targets.items()})
        out = {
            "files": n_files,
            "map_bytes": targets["crowded"].stat().st_size,
            "repeat": repeat,
            "fill_s": round(fill_s, 2),
            "empty_s": best["empty"],
            "crowded_s": best["crowded"],
            "ratio": best["crowded"] / best["empty"],
        }
        if with_old_walk:
            out["old_walk_s"] = old_walk(crowded)
            out["old_walk_ratio"] = out["old_walk_s"] / best["crowded"]
        print(f"removing the {n_files:,} files (slow on some disks)...", file=sys.stderr)
        t0 = time.perf_counter()
        shutil.rmtree(crowded, ignore_errors=True)
        out["cleanup_s"] = round(time.perf_counter() - t0, 2)
    return out


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("--files", type=int, default=68_000, help="unrelated files below the crowded folder")
    p.add_argument("--repeat", type=int, default=3, help="timed saves per folder; the best is kept")
    p.add_argument("--dir", type=Path, default=None, help="where to make the temporary folder (default: system)")
    p.add_argument("--old-walk", action="store_true", help="also time the per-save fsync walk of before the fix")
    p.add_argument("--json", action="store_true", help="print the result as JSON")
    args = p.parse_args(argv)
    if args.files < 0 or args.repeat < 1:
        p.error("--files must be >= 0 and --repeat >= 1")
    out = run(args.files, repeat=args.repeat, parent=args.dir, with_old_walk=args.old_walk)
    if args.json:
        print(json.dumps(out, indent=2))
        return 0
    rows = [
        ("into an empty folder", f"{out['empty_s'] * 1000:.1f} ms"),
        (f"into a folder with {out['files']:,} files below it", f"{out['crowded_s'] * 1000:.1f} ms"),
        ("ratio crowded / empty", f"{out['ratio']:.2f}"),
    ]
    if "old_walk_s" in out:
        rows.append(("fsync walk each save did before the fix",
                     f"{out['old_walk_s'] * 1000:.1f} ms ({out['old_walk_ratio']:.0f}x a save now)"))
    width = max(len(label) for label, _ in rows)
    print(f"save_map of a {out['map_bytes'] / 1000:.0f} kB map, best of {out['repeat']} "
          f"(filling the folder took {out['fill_s']:.1f} s):")
    for label, value in rows:
        print(f"  {label:<{width}}  {value}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
