"""A generated corpus of malformed inputs for the fuzz tests.

Each case is a small object that writes one input (a grid file, a raw dump with
its JSON sidecar, a procedure file) into a folder and says which command line
to run on it. The expectation is the same for every case: the command ends
with an ndtmap error (exit status 1 or 2, one line on stderr, no traceback) or
with a correct result (exit status 0) - never another exception, never a hang,
never an allocation of a size the file merely claims.

The cases are deterministic (built from fixed seeds) so that a failure can be
reproduced by its name.
"""

from __future__ import annotations

import itertools
import json
import warnings
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr

N_SCAN, N_INDEX, N_TIME = 4, 3, 240
DT_US = 0.02


def good_arrays(dtype: str = "float32") -> tuple[np.ndarray, dict[str, np.ndarray]]:
    """A tiny valid grid: a back-wall echo at 6.76 us (20 mm of steel) in every A-scan."""
    t = np.arange(N_TIME) * DT_US
    pulse = 80.0 * np.exp(-0.5 * ((t - 3.378) / 0.12) ** 2) * np.cos(2 * np.pi * 5.0 * (t - 3.378))
    a = np.broadcast_to(pulse, (N_SCAN, N_INDEX, N_TIME)).astype(np.float64)
    if dtype == "int16":
        a = np.round(a / 100.0 * 32767).astype(np.int16)
    else:
        a = a.astype(dtype)
    coords = {"scan": np.arange(N_SCAN) * 1.0, "index": np.arange(N_INDEX) * 2.0, "time": t}
    return a, coords


GOOD_ATTRS: dict[str, Any] = {
    "velocity_m_s": 5920.0,
    "beam_angle_deg": 0.0,
    "probe_frequency_mhz": 5.0,
    "probe_diameter_mm": 10.0,
    "part_thickness_mm": 10.0,
}


def dataset(ascan: np.ndarray | None = None, coords: dict[str, Any] | None = None, attrs: dict[str, Any] | None = None,
            *, dims: tuple[str, ...] = ("scan", "index", "time"), coord_units: dict[str, Any] | None = None,
            ascan_attrs: dict[str, Any] | None = None) -> xr.Dataset:
    a, c = good_arrays()
    ascan = a if ascan is None else ascan
    c = dict(c if coords is None else coords)
    units = {"scan": "mm", "index": "mm", "time": "us"}
    units.update(coord_units or {})
    cvars = {}
    for name, values in c.items():
        u = units.get(name)
        cvars[name] = xr.Variable((name,), np.asarray(values), attrs={} if u is None else {"units": u})
    aattrs = {"units": "%FSH", "signal": "rf"}
    aattrs.update(ascan_attrs or {})
    aattrs = {k: v for k, v in aattrs.items() if v is not None}
    gattrs = dict(GOOD_ATTRS)
    gattrs.update(attrs or {})
    gattrs = {k: v for k, v in gattrs.items() if v is not None}
    return xr.Dataset({"ascan": xr.Variable(dims, ascan, attrs=aattrs)}, coords=cvars, attrs=gattrs)


@dataclass
class Case:
    """One malformed (or, for control, valid) input and the command to run on it."""

    name: str
    category: str
    write: Callable[[Path], Path]
    commands: tuple[str, ...] = ("info", "map", "indications")
    extra: dict[str, Any] = field(default_factory=dict)

    def argv(self, command: str, path: Path, out: Path) -> list[str]:
        gate = self.extra.get("gate", ("1", "8"))
        threshold = self.extra.get("threshold", "20")
        if command == "info":
            return ["info", str(path), "--json"]
        if command == "map":
            return ["map", str(path), "--kind", self.extra.get("kind", "amplitude"), "--gate-mm", *gate,
                    "--threshold-fsh", threshold, "-o", str(out / "m.nc")]
        if command == "indications":
            return ["indications", str(path), "--gate-mm", *gate, "--threshold-fsh", threshold, "--format", "json"]
        if command == "report":
            return ["report", str(path), "-o", str(out / "report"), "--formats", "--quiet"]
        if command == "convert":
            return ["convert", str(path), str(out / "converted.zarr"), "--quiet"]
        raise ValueError(command)


def _nc(ds: xr.Dataset) -> Callable[[Path], Path]:
    def write(folder: Path) -> Path:
        p = folder / "grid.nc"
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # h5netcdf warns that some faults are not valid netCDF: that is the point
            ds.to_netcdf(p, engine="h5netcdf", invalid_netcdf=True)
        return p

    return write


def _bytes(name: str, content: bytes) -> Callable[[Path], Path]:
    def write(folder: Path) -> Path:
        p = folder / name
        p.write_bytes(content)
        return p

    return write


def _sidecar(doc: Any, data: bytes | None, *, raw_text: str | None = None) -> Callable[[Path], Path]:
    def write(folder: Path) -> Path:
        if data is not None:
            (folder / "scan.bin").write_bytes(data)
        p = folder / "scan.json"
        p.write_text(raw_text if raw_text is not None else json.dumps(doc))
        return p

    return write


def _good_sidecar(dtype: str = "<f4") -> tuple[dict[str, Any], bytes]:
    a, c = good_arrays("int16" if dtype == "<i2" else "float32")
    doc = {
        "format": "ndtmap raw sidecar",
        "version": 1,
        "data_file": "scan.bin",
        "dtype": dtype,
        "byte_offset": 0,
        "shape": {"scan": N_SCAN, "index": N_INDEX, "time": N_TIME},
        "axis_order": ["scan", "index", "time"],
        "coords": {
            "scan_mm": {"start": 0.0, "step": 1.0},
            "index_mm": {"start": 0.0, "step": 2.0},
            "time_us": {"start": 0.0, "step": DT_US},
        },
        "signal": "rf",
        "attrs": dict(GOOD_ATTRS),
    }
    if dtype == "<i2":
        doc["fsh_per_count"] = 100.0 / 32767
    return doc, a.astype(np.dtype(dtype)).tobytes()


def grid_cases() -> Iterator[Case]:
    a, c = good_arrays()
    yield Case("control-valid-float32", "control", _nc(dataset()))
    ai, _ = good_arrays("int16")
    yield Case("control-valid-int16", "control", _nc(dataset(ai, ascan_attrs={"fsh_per_count": 100.0 / 32767})))
    # wrong or missing dims
    yield Case("dims-renamed", "dims", _nc(dataset(dims=("x", "y", "t"), coords={"x": c["scan"], "y": c["index"],
                                                                                  "t": c["time"]})))
    yield Case("dims-2d", "dims", _nc(dataset(a[:, 0, :], dims=("scan", "time"),
                                              coords={"scan": c["scan"], "time": c["time"]})))
    yield Case("dims-4d", "dims", _nc(dataset(a[..., None], dims=("scan", "index", "time", "gate"),
                                              coords={**c, "gate": [0.0]})))
    yield Case("dims-transposed", "dims", _nc(dataset(np.ascontiguousarray(a.transpose(2, 0, 1)),
                                                      dims=("time", "scan", "index"))))
    for name in ("scan", "index", "time"):
        cc = dict(c)
        del cc[name]
        yield Case(f"coord-missing-{name}", "coords", _nc(dataset(coords=cc)))
    # non-monotonic, duplicate, NaN and inf coordinates
    for name in ("scan", "index", "time"):
        for kind in ("reversed", "duplicate", "nan", "inf", "shuffled", "nonuniform"):
            if kind == "nonuniform" and name != "time":
                continue
            cc = {k: np.array(v, dtype=float) for k, v in c.items()}
            v = cc[name]
            if kind == "reversed":
                v = v[::-1].copy()
            elif kind == "duplicate":
                v[1] = v[0]
            elif kind == "nan":
                v[-1] = np.nan
            elif kind == "inf":
                v[0] = -np.inf
            elif kind == "shuffled":
                v[[0, 2]] = v[[2, 0]]
            elif kind == "nonuniform":
                v = v + np.where(np.arange(v.size) % 7 == 3, 0.4 * DT_US, 0.0)
            cc[name] = v
            yield Case(f"coord-{name}-{kind}", "coords", _nc(dataset(coords=cc)))
    # units
    for name in ("scan", "index", "time"):
        for units in (None, "m", "inch", "seconds", "", "µs" if name == "time" else "millimetres"):
            yield Case(f"units-{name}-{units!r}", "units", _nc(dataset(coord_units={name: units})))
    for units in (None, "V", "counts", "dB"):
        yield Case(f"units-ascan-{units!r}", "units", _nc(dataset(ascan_attrs={"units": units})))
    for sig in (None, "log", "RF", 3):
        yield Case(f"signal-{sig!r}", "attrs", _nc(dataset(ascan_attrs={"signal": sig})))
    # required and optional attributes: missing, absurd, wrong type
    bad_values: dict[str, list[Any]] = {
        "velocity_m_s": [None, 0.0, -5920.0, np.nan, np.inf, 1e9, 5.92, "5920", "fast"],
        "beam_angle_deg": [None, 90.0, 95.0, -10.0, np.nan, "45"],
        "probe_frequency_mhz": [None, 0.0, -5.0, np.nan, 5e6, "5 MHz"],
        "probe_diameter_mm": [None, 0.0, -10.0, np.nan, 1e6],
        "zero_offset_us": [np.nan, np.inf, "0", 1e12],
        "part_thickness_mm": [0.0, -10.0, np.nan, "thick"],
        "attenuation_db_per_mm": [-1.0, np.nan, 1e6],
        "digitiser_full_scale_fsh": [0.0, -100.0, np.nan],
        "wave_mode": ["transverse", 1],
        "gain_db": [np.nan, 1e9],
    }
    for attr, values in bad_values.items():
        for v in values:
            yield Case(f"attr-{attr}-{v!r}", "attrs", _nc(dataset(attrs={attr: v})))
    # data values and dtypes
    yield Case("data-all-nan", "data", _nc(dataset(np.full_like(a, np.nan))))
    partial = a.copy()
    partial[1, 1, :] = np.nan
    yield Case("data-one-nan-ascan", "data-ok", _nc(dataset(partial)))
    spotty = a.copy()
    spotty[2, 0, 100] = np.nan
    yield Case("data-one-nan-sample", "data-ok", _nc(dataset(spotty)))
    infs = a.copy()
    infs[0, 0, 50] = np.inf
    yield Case("data-inf-sample", "data-ok", _nc(dataset(infs)))
    yield Case("data-int16-minimum", "numeric", _nc(dataset(np.full(a.shape, -32768, dtype=np.int16),
                                                            ascan_attrs={"fsh_per_count": 100.0 / 32767})))
    yield Case("data-float16", "numeric", _nc(dataset(a.astype(np.float16))))
    yield Case("data-float64", "numeric", _nc(dataset(a.astype(np.float64))))
    yield Case("data-huge-values", "numeric", _nc(dataset((a * 1e30).astype(np.float32))))
    yield Case("data-uint8", "numeric", _nc(dataset(np.clip(a + 100, 0, 255).astype(np.uint8))))
    yield Case("data-int32", "dtype", _nc(dataset(a.astype(np.int32))))
    yield Case("data-complex", "dtype", _nc(dataset(a.astype(np.complex64))))
    yield Case("data-bool", "dtype", _nc(dataset(a > 0)))
    for bad in (0, -1.0, np.nan, "x"):
        yield Case(f"data-fsh_per_count-{bad!r}", "attrs", _nc(dataset(ai, ascan_attrs={"fsh_per_count": bad})))
    # empty arrays
    for axis, name in enumerate(("scan", "index", "time")):
        shape = list(a.shape)
        shape[axis] = 0
        cc = dict(c)
        cc[name] = np.zeros(0)
        yield Case(f"empty-{name}", "empty", _nc(dataset(np.zeros(shape, np.float32), coords=cc)))
    yield Case("single-position", "data-ok", _nc(dataset(a[:1, :1], coords={"scan": [0.0], "index": [0.0],
                                                                            "time": c["time"]})))
    yield Case("single-sample", "empty", _nc(dataset(a[:, :, :1], coords={**c, "time": c["time"][:1]})))
    # no ascan variable, extra junk
    ds = dataset().rename({"ascan": "signal"})
    yield Case("no-ascan", "vars", _nc(ds))
    ds = dataset()
    ds["missing"] = (("scan", "index"), np.ones((N_SCAN, N_INDEX), dtype=np.int8) * 2)
    yield Case("missing-var-not-bool", "vars", _nc(ds))
    ds = dataset()
    ds.attrs["provenance"] = "{not json"
    yield Case("provenance-not-json", "attrs", _nc(ds))
    ds = dataset()
    ds.attrs["grid_format"] = "ndtmap-grid 99"
    yield Case("grid-format-newer", "attrs", _nc(ds))


def file_cases() -> Iterator[Case]:
    rng = np.random.default_rng(7)
    yield Case("file-empty", "file", _bytes("grid.nc", b""))
    for i in range(8):
        yield Case(f"file-garbage-{i}", "file", _bytes("grid.nc", rng.bytes(int(rng.integers(1, 5000)))))
    yield Case("file-text", "file", _bytes("grid.nc", b"scan,index,time\n1,2,3\n" * 20))
    yield Case("file-hdf5-magic-only", "file", _bytes("grid.nc", b"\x89HDF\r\n\x1a\n" + bytes(200)))
    yield Case("file-netcdf3-magic", "file", _bytes("grid.nc", b"CDF\x01" + bytes(200)))
    yield Case("file-unknown-extension", "file", _bytes("grid.xyz", b"whatever"))

    # truncated copies of a valid file
    def truncated(fraction: float) -> Callable[[Path], Path]:
        def write(folder: Path) -> Path:
            full = folder / "full.nc"
            dataset().to_netcdf(full, engine="h5netcdf")
            data = full.read_bytes()
            full.unlink()
            p = folder / "grid.nc"
            p.write_bytes(data[: int(len(data) * fraction)])
            return p

        return write

    for frac in (0.01, 0.1, 0.25, 0.5, 0.75, 0.9, 0.99):
        yield Case(f"file-truncated-{frac}", "file", truncated(frac))

    def flipped(seed: int) -> Callable[[Path], Path]:
        def write(folder: Path) -> Path:
            p = folder / "grid.nc"
            dataset().to_netcdf(p, engine="h5netcdf")
            data = bytearray(p.read_bytes())
            r = np.random.default_rng(seed)
            for pos in r.integers(0, len(data), 20):
                data[pos] ^= 0xFF
            p.write_bytes(bytes(data))
            return p

        return write

    for seed in range(12):
        yield Case(f"file-bitflips-{seed}", "file", flipped(seed))

    def folder_case(kind: str) -> Callable[[Path], Path]:
        def write(folder: Path) -> Path:
            p = folder / "grid.zarr"
            p.mkdir()
            if kind == "broken-meta":
                (p / "zarr.json").write_text("{ not json")
            elif kind == "wrong-meta":
                (p / "zarr.json").write_text(json.dumps({"zarr_format": 3, "node_type": "array"}))
            return p

        return write

    for kind in ("empty-dir", "broken-meta", "wrong-meta"):
        yield Case(f"zarr-{kind}", "file", folder_case(kind))


def sidecar_cases() -> Iterator[Case]:
    doc, data = _good_sidecar()
    yield Case("sidecar-control-f4", "control", _sidecar(doc, data))
    doc_i, data_i = _good_sidecar("<i2")
    yield Case("sidecar-control-i2", "control", _sidecar(doc_i, data_i))
    yield Case("sidecar-short-data", "sidecar", _sidecar(doc, data[:-4]))
    yield Case("sidecar-long-data", "sidecar", _sidecar(doc, data + b"\0" * 4))
    yield Case("sidecar-no-data-file", "sidecar", _sidecar(doc, None))
    for key in ("data_file", "dtype", "shape", "coords", "signal", "attrs"):
        d = json.loads(json.dumps(doc))
        del d[key]
        yield Case(f"sidecar-missing-{key}", "sidecar", _sidecar(d, data))
    shapes = [
        {"scan": 10**6, "index": 10**6, "time": 10**6},
        {"scan": 2**40, "index": 1, "time": 1},
        {"scan": -4, "index": 3, "time": 240},
        {"scan": 4.5, "index": 3, "time": 240},
        {"scan": 0, "index": 3, "time": 240},
        {"scan": "4", "index": 3, "time": 240},
        {"scan": 4, "index": 3},
        {"scan": 4, "index": 3, "time": 240, "extra": 1},
        [4, 3, 240],
        None,
    ]
    for i, shape in enumerate(shapes):
        d = json.loads(json.dumps(doc))
        d["shape"] = shape
        yield Case(f"sidecar-shape-{i}", "sidecar", _sidecar(d, data))
    for dtype in (">f4", "<c8", "object", "|S4", "<f2", "float32", "", 5, "<u8"):
        d = json.loads(json.dumps(doc))
        d["dtype"] = dtype
        yield Case(f"sidecar-dtype-{dtype!r}", "sidecar", _sidecar(d, data))
    for order in (["scan", "scan", "time"], ["x", "y", "z"], ["scan", "index"], "scan,index,time", None):
        d = json.loads(json.dumps(doc))
        d["axis_order"] = order
        yield Case(f"sidecar-axis-order-{order!r}", "sidecar", _sidecar(d, data))
    for path in ("../scan.bin", "/etc/passwd", "sub/../../scan.bin", "", "scan.bin\0x", 7):
        d = json.loads(json.dumps(doc))
        d["data_file"] = path
        yield Case(f"sidecar-data-file-{path!r}", "sidecar", _sidecar(d, data))
    for off in (-1, 10**15, 3.5, "0", len(data) + 1):
        d = json.loads(json.dumps(doc))
        d["byte_offset"] = off
        yield Case(f"sidecar-offset-{off!r}", "sidecar", _sidecar(d, data))
    for coord in ("scan_mm", "index_mm", "time_us"):
        d = json.loads(json.dumps(doc))
        del d["coords"][coord]
        yield Case(f"sidecar-coords-missing-{coord}", "sidecar", _sidecar(d, data))
    for coord in ("scan_mm", "time_us"):
        for spec in ({"start": 0.0, "step": 0.0}, {"start": 0.0, "step": -1.0}, {"start": "a", "step": 1.0},
                     {"start": 0.0}, [0.0, 1.0], [0.0, 0.0, 0.0, 0.0], {"start": float("nan"), "step": 1.0}):
            d = json.loads(json.dumps(doc))
            d["coords"][coord] = spec
            yield Case(f"sidecar-{coord}-{json.dumps(spec)}", "sidecar", _sidecar(d, data))
    for attr, value in (("velocity_m_s", -1), ("velocity_m_s", None), ("beam_angle_deg", 90),
                        ("probe_frequency_mhz", "five")):
        d = json.loads(json.dumps(doc))
        if value is None:
            del d["attrs"][attr]
        else:
            d["attrs"][attr] = value
        yield Case(f"sidecar-attr-{attr}-{value!r}", "sidecar", _sidecar(d, data))
    for i, text in enumerate(("", "{", "[]", "null", "42", '{"format": "ndtmap raw sidecar"', "\x00\x01",
                              '{"a": NaN}', json.dumps(doc).replace('"version": 1', '"version": 1, "version": 2'))):
        yield Case(f"sidecar-json-{i}", "sidecar", _sidecar(None, data, raw_text=text))


def gate_cases() -> Iterator[Case]:
    good = _nc(dataset())
    gates = [("40", "60"), ("-5", "-1"), ("8", "1"), ("3", "3"), ("0", "1e9"), ("nan", "5"), ("1", "inf"),
             ("1e-9", "2e-9"), ("-1", "5"), ("abc", "5")]
    for g in gates:
        yield Case(f"gate-{g[0]}-{g[1]}", "gate", good, commands=("map", "indications"), extra={"gate": g})
    for thr in ("-10", "1e9", "nan", "inf", "1001", "x"):
        yield Case(f"threshold-{thr}", "threshold", good, commands=("map", "indications"),
                   extra={"threshold": thr})
    for kind in ("thickness", "backwall-loss", "depth"):
        for g in (("1", "8"), ("40", "60"), ("8", "1")):
            yield Case(f"map-{kind}-{g[0]}-{g[1]}", "gate", good, commands=("map",), extra={"gate": g, "kind": kind})


def random_grid_cases(n: int, seed: int = 2026) -> Iterator[Case]:
    """Grids with two to four mutations drawn at random (seeded) from a pool of single faults."""
    rng = np.random.default_rng(seed)
    a, c = good_arrays()

    def mutate(kind: str, ds_args: dict[str, Any]) -> None:
        attrs = ds_args.setdefault("attrs", {})
        coords = ds_args.setdefault("coords", {k: np.array(v, dtype=float) for k, v in c.items()})
        if kind == "attr-drop":
            attrs[str(rng.choice(list(GOOD_ATTRS)))] = None
        elif kind == "attr-scale":
            key = str(rng.choice(["velocity_m_s", "probe_frequency_mhz", "probe_diameter_mm", "part_thickness_mm"]))
            attrs[key] = float(GOOD_ATTRS[key]) * float(rng.choice([-1.0, 0.0, 1e-6, 1e6, np.nan]))
        elif kind == "angle":
            attrs["beam_angle_deg"] = float(rng.choice([-1.0, 89.999, 90.0, 180.0, np.inf]))
        elif kind == "coord-jitter":
            name = str(rng.choice(["scan", "index", "time"]))
            v = coords[name].copy()
            v[int(rng.integers(v.size))] += float(rng.normal(0, 3))
            coords[name] = v
        elif kind == "coord-nan":
            name = str(rng.choice(["scan", "index", "time"]))
            v = coords[name].copy()
            v[int(rng.integers(v.size))] = np.nan
            coords[name] = v
        elif kind == "nan-rows":
            arr = ds_args.setdefault("ascan", a.copy())
            arr[int(rng.integers(N_SCAN)), :, :] = np.nan
        elif kind == "nan-all":
            ds_args["ascan"] = np.full_like(a, np.nan)
        elif kind == "units":
            ds_args.setdefault("coord_units", {})[str(rng.choice(["scan", "index", "time"]))] = str(
                rng.choice(["", "m", "ns", "inch"]))
        elif kind == "signal":
            ds_args.setdefault("ascan_attrs", {})["signal"] = str(rng.choice(["", "bipolar", "RF"]))
        elif kind == "spikes":
            arr = ds_args.setdefault("ascan", a.copy())
            arr[rng.integers(N_SCAN), rng.integers(N_INDEX), rng.integers(N_TIME)] = float(
                rng.choice([np.inf, -np.inf, 1e38, -1e38]))

    pool = ["attr-drop", "attr-scale", "angle", "coord-jitter", "coord-nan", "nan-rows", "nan-all", "units",
            "signal", "spikes"]
    for i in range(n):
        kinds = list(rng.choice(pool, size=int(rng.integers(2, 5)), replace=True))
        args: dict[str, Any] = {}
        for kind in kinds:
            mutate(str(kind), args)
        yield Case(f"random-grid-{i}-{'+'.join(map(str, kinds))}", "random-grid", _nc(dataset(**args)))


def random_sidecar_cases(n: int, seed: int = 9712) -> Iterator[Case]:
    """Raw sidecars with random faults: numbers replaced, keys dropped, bytes cut."""
    rng = np.random.default_rng(seed)
    doc, data = _good_sidecar()
    keys = ["dtype", "byte_offset", "shape", "axis_order", "coords", "signal", "attrs", "data_file", "version",
            "format", "fsh_per_count", "missing"]
    junk = [None, -1, 0, 1e300, "x", [], {}, True, 2**63, float("inf")]
    for i in range(n):
        d = json.loads(json.dumps(doc))
        faults = []
        for _ in range(int(rng.integers(1, 4))):
            key = str(rng.choice(keys))
            choice = int(rng.integers(3))
            if choice == 0:
                d.pop(key, None)
                faults.append(f"drop-{key}")
            elif choice == 1:
                d[key] = junk[int(rng.integers(len(junk)))]
                faults.append(f"junk-{key}")
            else:
                if isinstance(d.get("shape"), dict):
                    axis = str(rng.choice(["scan", "index", "time"]))
                    d["shape"][axis] = int(rng.choice([1, 2, 5, 10**9]))
                faults.append("reshape")
        cut = int(rng.integers(0, 3))
        payload = data if cut == 0 else data[: int(len(data) * rng.uniform(0, 1))]
        text = json.dumps(d, allow_nan=True) if d is not None else "null"
        yield Case(f"random-sidecar-{i}-{'+'.join(faults)}-cut{cut}", "random-sidecar",
                   _sidecar(None, payload, raw_text=text))


#: Categories on which the report command runs too (a first-look report needs a back wall, which the tiny
#: grids have at 10 mm); interactive figures only, to keep the run short.
REPORT_CATEGORIES = {"control", "dims", "coords", "units", "attrs", "data", "data-ok", "numeric", "dtype", "empty",
                     "vars", "file", "sidecar"}


#: Categories on which the convert command runs too (its inputs: raw dumps and NetCDF files).
CONVERT_CATEGORIES = {"control", "file", "sidecar", "random-sidecar", "numeric", "data", "data-ok", "empty"}


def all_cases() -> list[Case]:
    cases = list(itertools.chain(grid_cases(), file_cases(), sidecar_cases(), gate_cases(),
                                 random_grid_cases(160), random_sidecar_cases(120)))
    for case in cases:
        if case.category in REPORT_CATEGORIES and "report" not in case.commands:
            case.commands = (*case.commands, "report")
        if case.category in CONVERT_CATEGORIES and "convert" not in case.commands:
            case.commands = (*case.commands, "convert")
    names = [c.name for c in cases]
    assert len(set(names)) == len(names), "case names must be unique"
    return cases
