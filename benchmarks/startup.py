"""Start-up time of the ``ndtmap`` command line, against ``python -c pass`` measured in the same run.

Run from the repository root (with ``PYTHONPATH`` set to it, as for the tests)::

    python benchmarks/startup.py            # 7 runs of each command, a table
    python benchmarks/startup.py -n 11 --json

Each command runs as a fresh subprocess with this interpreter; the runs go round-robin over the commands
(so a burst of load on the shared machine hits all of them alike) after one untimed warm-up run of each
(so the file cache is warm). Printed per command: the median wall time, the ratio to the median of
``python -c pass`` (the interpreter's own start-up) and, for the two commands with a start-up target, the
target. ``import xarray, h5netcdf, dask.array`` is the floor of ``ndtmap info``: it reads the grid with
xarray and h5netcdf, and xarray imports dask.array (and with it parts of scipy) the first time it builds a
variable from an indexing result whenever dask is installed. The ``ndtmap`` commands run through the
console script next to this interpreter when there is one, else through ``python -m ndtmap``.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import statistics
import subprocess
import sys
import time
from pathlib import Path
from typing import Any

ROOT = Path(__file__).resolve().parent.parent
SAMPLE = ROOT / "sample_grids" / "plate_laminations.nc"
#: Start-up targets, s (for this project's 2-core development machine).
TARGETS_S = {"ndtmap --help": 0.3, "ndtmap info plate_laminations.nc": 1.0}


def ndtmap_command() -> list[str]:
    """How to start ``ndtmap``: the console script beside the interpreter, else ``python -m ndtmap``."""
    script = Path(sys.executable).parent / "ndtmap"
    return [str(script)] if script.is_file() else [sys.executable, "-m", "ndtmap"]


def commands() -> dict[str, list[str]]:
    """Label -> argument list of every command measured (the baseline first)."""
    ndtmap = ndtmap_command()
    table = {
        "python -c pass": [sys.executable, "-c", "pass"],
        "import xarray, h5netcdf": [sys.executable, "-c", "import xarray, h5netcdf"],
        "import xarray, h5netcdf, dask.array": [sys.executable, "-c", "import xarray, h5netcdf, dask.array"],
        "import ndtmap": [sys.executable, "-c", "import ndtmap"],
        "ndtmap --version": [*ndtmap, "--version"],
        "ndtmap --help": [*ndtmap, "--help"],
    }
    if SAMPLE.is_file():
        table["ndtmap info plate_laminations.nc"] = [*ndtmap, "info", str(SAMPLE)]
    return table


def run_once(argv: list[str], env: dict[str, str]) -> float:
    """Wall time of one run, s; raise if the command fails."""
    start = time.perf_counter()
    proc = subprocess.run(argv, cwd=ROOT, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
    seconds = time.perf_counter() - start
    if proc.returncode != 0:
        raise SystemExit(f"{' '.join(argv)} exited with {proc.returncode}: {proc.stderr.strip()[-500:]}")
    return seconds


def measure(repeat: int) -> dict[str, Any]:
    """Median wall times of every command over `repeat` round-robin runs, and their ratio to the baseline."""
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join(p for p in (str(ROOT), env.get("PYTHONPATH", "")) if p)
    table = commands()
    times: dict[str, list[float]] = {label: [] for label in table}
    for argv in table.values():  # warm-up: file cache, bytecode caches
        run_once(argv, env)
    for _ in range(repeat):
        for label, argv in table.items():
            times[label].append(run_once(argv, env))
    baseline = statistics.median(times["python -c pass"])
    rows = []
    for label, argv in table.items():
        median = statistics.median(times[label])
        rows.append({
            "command": label,
            "argv": argv,
            "median_s": median,
            "min_s": min(times[label]),
            "ratio_to_python": median / baseline,
            "target_s": TARGETS_S.get(label),
        })
    return {
        "python": sys.version.split()[0],
        "machine": platform.platform(),
        "cpus": os.cpu_count(),
        "repeat": repeat,
        "baseline_s": baseline,
        "rows": rows,
    }


def print_table(result: dict[str, Any]) -> None:
    print(f"start-up, median of {result['repeat']} runs (python {result['python']}, {result['cpus']} cpus)")
    print(f"{'command':<40}{'median s':>10}{'min s':>9}{'x python':>10}{'target s':>10}")
    for row in result["rows"]:
        target = "" if row["target_s"] is None else f"{row['target_s']:.1f}"
        print(f"{row['command']:<40}{row['median_s']:>10.3f}{row['min_s']:>9.3f}{row['ratio_to_python']:>10.1f}"
              f"{target:>10}")


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n", 1)[0])
    parser.add_argument("-n", "--repeat", type=int, default=7, help="timed runs of each command (default 7)")
    parser.add_argument("--json", action="store_true", help="print one JSON object instead of a table")
    args = parser.parse_args(argv)
    if args.repeat < 1:
        parser.error(f"--repeat must be at least 1, got {args.repeat}")
    result = measure(args.repeat)
    if args.json:
        print(json.dumps(result, indent=2))
    else:
        print_table(result)
    return 0


if __name__ == "__main__":
    sys.exit(main())
