"""The ``ndtmap`` command line.

The command line only parses arguments and calls library functions; every
behaviour is available from Python too. A user mistake (a bad file, a bad
option) ends with one line on stderr that says what is wrong and exit
status 2; nothing prints a traceback unless ``--debug`` is given.

Exit status: 0 success; 1 the command ran but found problems (``info`` on
an invalid grid) or finished a batch partially; 2 usage or input error;
70 an internal error (a bug: please report it with ``--debug`` output).
"""

from __future__ import annotations

import argparse
import json
import math
import sys
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

from . import CAUTION, __version__
from .errors import NdtmapError

__all__ = ["main", "build_parser"]

EXIT_OK = 0
EXIT_PROBLEMS = 1
EXIT_USAGE = 2
EXIT_INTERNAL = 70


class _Parser(argparse.ArgumentParser):
    """argparse, but usage errors are one line and exit status 2."""

    def error(self, message: str) -> None:  # pragma: no cover - exercised through main
        self.exit(EXIT_USAGE, f"{self.prog}: error: {message} (see `{self.prog} --help`)\n")


# --------------------------------------------------------------------------
# info
# --------------------------------------------------------------------------
def grid_summary(ds: Any, *, source: str) -> dict[str, Any]:
    """Summarise a (possibly invalid) scan grid as plain JSON-able values.

    Parameters
    ----------
    ds : xarray.Dataset
        The grid as read from the file, before validation.
    source : str
        Path shown in the summary.

    Returns
    -------
    dict
        Keys ``file``, ``shape``, ``scan_mm``, ``index_mm``, ``time_us``,
        ``depth_mm``, ``dtype``, ``signal``, ``attrs``, ``missing_ascans``,
        ``problems`` (list of str) and ``valid``.
    """
    import numpy as np

    from .grid import REQUIRED_ATTRS, grid_attr, grid_problems, missing_ascans
    from .provenance import jsonable

    problems = grid_problems(ds, check_values=False)
    out: dict[str, Any] = {"file": source}
    out["shape"] = {d: int(n) for d, n in ds.sizes.items()} if hasattr(ds, "sizes") else {}

    def extent(name: str) -> list[float] | None:
        if name not in getattr(ds, "coords", {}):
            return None
        v = np.asarray(ds[name].values, dtype=np.float64)
        v = v[np.isfinite(v)]
        return [float(v.min()), float(v.max())] if v.size else None

    out["scan_mm"] = extent("scan")
    out["index_mm"] = extent("index")
    out["time_us"] = extent("time")
    depth = None
    velocity = grid_attr(ds, "velocity_m_s")
    angle = grid_attr(ds, "beam_angle_deg", 0.0)
    zero = grid_attr(ds, "zero_offset_us", 0.0)
    if (
        out["time_us"] is not None
        and isinstance(velocity, float)
        and math.isfinite(velocity)
        and velocity > 0
        and isinstance(angle, float)
        and 0 <= angle < 90
        and isinstance(zero, float)
    ):
        k = velocity * 1e-3 / 2.0 * math.cos(math.radians(angle))
        depth = [max(0.0, (out["time_us"][0] - zero) * k), (out["time_us"][1] - zero) * k]
    out["depth_mm"] = depth
    if "ascan" in getattr(ds, "data_vars", {}):
        a = ds["ascan"]
        out["dtype"] = str(a.dtype)
        out["signal"] = a.attrs.get("signal")
        out["lazy"] = a.chunks is not None
        if not problems:
            try:
                m = missing_ascans(ds)
                out["missing_ascans"] = int(m.sum().values)
                if out["missing_ascans"] == m.size:
                    problems.append("every A-scan is missing (NaN); the file holds no usable data")
            except Exception as exc:  # noqa: BLE001 - a summary must not fail on odd data
                problems.append(f"could not read the A-scans: {exc}")
    attrs = {}
    for key, value in getattr(ds, "attrs", {}).items():
        if key in ("provenance", "truth"):
            continue
        attrs[key] = jsonable(value)
    out["attrs"] = attrs
    out["required_attrs"] = {k: jsonable(ds.attrs.get(k)) for k in REQUIRED_ATTRS} if hasattr(ds, "attrs") else {}
    try:
        from .provenance import read_provenance

        out["provenance_steps"] = [s.get("step") for s in read_provenance(ds)]
    except NdtmapError as exc:
        problems.append(str(exc))
    out["problems"] = problems
    out["valid"] = not problems
    return out


def _format_summary(s: dict[str, Any]) -> str:
    lines = [f"Scan grid: {s['file']}"]
    shape = s.get("shape") or {}
    if shape:
        lines.append("  shape        " + " x ".join(f"{k} {v}" for k, v in shape.items()))

    def rng(v: list[float] | None, unit: str) -> str:
        return "-" if v is None else f"{v[0]:.3f} .. {v[1]:.3f} {unit}"

    lines.append(f"  scan axis    {rng(s.get('scan_mm'), 'mm')}")
    lines.append(f"  index axis   {rng(s.get('index_mm'), 'mm')}")
    lines.append(f"  time         {rng(s.get('time_us'), 'us')}")
    lines.append(f"  depth        {rng(s.get('depth_mm'), 'mm')} (from velocity and beam angle)")
    if "dtype" in s:
        lines.append(f"  samples      {s['dtype']}, signal {s.get('signal')}, {'lazy' if s.get('lazy') else 'in memory'}")
    if "missing_ascans" in s:
        lines.append(f"  missing      {s['missing_ascans']} A-scan(s)")
    attrs = s.get("attrs") or {}
    if attrs:
        lines.append("  metadata")
        width = max(len(k) for k in attrs)
        for k in sorted(attrs):
            lines.append(f"    {k.ljust(width)}  {attrs[k]}")
    steps = s.get("provenance_steps") or []
    lines.append(f"  provenance   {' -> '.join(map(str, steps)) if steps else 'none recorded'}")
    if s["problems"]:
        lines.append(f"  PROBLEMS ({len(s['problems'])}):")
        lines.extend(f"    - {p}" for p in s["problems"])
    else:
        lines.append("  valid        yes (follows the ndtmap grid format)")
    return "\n".join(lines)


def cmd_info(args: argparse.Namespace) -> int:
    from .io import open_grid

    ds = open_grid(args.path, validate=False)
    summary = grid_summary(ds, source=str(args.path))
    if args.json:
        print(json.dumps(summary, indent=2, allow_nan=False))
    else:
        print(_format_summary(summary))
    return EXIT_OK if summary["valid"] else EXIT_PROBLEMS


# --------------------------------------------------------------------------
# make-samples
# --------------------------------------------------------------------------
def cmd_make_samples(args: argparse.Namespace) -> int:
    from .samples import SAMPLES, build_samples

    names = args.only or list(SAMPLES)
    unknown = [n for n in names if n not in SAMPLES]
    if unknown:
        raise NdtmapError(f"unknown sample {unknown[0]!r}; choose from {', '.join(SAMPLES)}")
    for path in build_samples(args.directory, names=names):
        print(f"wrote {path}")
    return EXIT_OK


# --------------------------------------------------------------------------
# demo
# --------------------------------------------------------------------------
def cmd_demo(args: argparse.Namespace) -> int:
    from .demo import run_demo

    return run_demo(output=Path(args.output), sample=args.sample, echo=print)


# --------------------------------------------------------------------------
def build_parser() -> argparse.ArgumentParser:
    """The argument parser of ``ndtmap`` (for documentation and tests)."""
    parser = _Parser(
        prog="ndtmap",
        description="Open workbench for encoded pulse-echo ultrasonic scans. " + CAUTION,
    )
    parser.add_argument("--version", action="version", version=f"ndtmap {__version__}")
    parser.add_argument("--debug", action="store_true", help="show the full traceback of an error")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)

    p = sub.add_parser("info", help="summarise a scan grid and list what is wrong with it")
    p.add_argument("path", type=Path, help="grid file: .nc, .zarr or raw-dump .json sidecar")
    p.add_argument("--json", action="store_true", help="print one JSON object instead of text")
    p.set_defaults(func=cmd_info)

    p = sub.add_parser("demo", help="run the main job end to end on a bundled sample grid")
    p.add_argument("-o", "--output", default="ndtmap-demo-output", help="folder for the results")
    p.add_argument("--sample", default="plate_laminations.nc", help="sample grid to use")
    p.set_defaults(func=cmd_demo)

    p = sub.add_parser("make-samples", help="rebuild the bundled sample grids (deterministic)")
    p.add_argument("directory", type=Path, help="folder to write the samples into")
    p.add_argument("--only", nargs="+", metavar="NAME", help="build only these samples")
    p.set_defaults(func=cmd_make_samples)

    for register in _EXTRA_COMMANDS:
        register(sub)
    return parser


#: Functions that add further sub-commands (other modules register theirs here).
_EXTRA_COMMANDS: list[Callable[[Any], None]] = []


def main(argv: Sequence[str] | None = None) -> int:
    """Run ``ndtmap`` with `argv` (default: ``sys.argv[1:]``); return the exit status."""
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "func", None):
        parser.print_help()
        return EXIT_USAGE
    try:
        return int(args.func(args) or 0)
    except NdtmapError as exc:
        if args.debug:
            raise
        print(f"ndtmap {args.command}: error: {exc}", file=sys.stderr)
        return EXIT_USAGE
    except KeyboardInterrupt:
        print(f"ndtmap {args.command}: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        return EXIT_OK
    except Exception as exc:  # noqa: BLE001 - the last line of defence against tracebacks
        if args.debug:
            raise
        print(
            f"ndtmap {args.command}: internal error: {type(exc).__name__}: {exc} "
            "(this is a bug; rerun with --debug and report the output)",
            file=sys.stderr,
        )
        return EXIT_INTERNAL


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
