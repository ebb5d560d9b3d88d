"""Nothing lost, nothing executed, no silently wrong number: interrupted writes, concurrent writers,
numeric traps.
"""

from __future__ import annotations

import contextlib
import hashlib
import os
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import numpy as np
import pytest
import xarray as xr

from ndtmap import make_grid
from ndtmap.cli import main
from ndtmap.gates import Gate
from ndtmap.indications import size_indications
from ndtmap.io import open_grid, save_grid
from ndtmap.scans import amplitude_map
from ndtmap.signal import apply_tcg, dac_curve

ROOT = Path(__file__).resolve().parents[2]


def digest(path: Path) -> str:
    h = hashlib.sha256()
    if path.is_dir():
        for p in sorted(path.rglob("*")):
            if p.is_file():
                h.update(str(p.relative_to(path)).encode())
                h.update(p.read_bytes())
    else:
        h.update(path.read_bytes())
    return h.hexdigest()


def small_grid(value: float = 10.0, shape=(4, 3, 200)) -> xr.Dataset:
    t = np.arange(shape[2]) * 0.02
    a = np.full(shape, value, dtype=np.float32)
    return make_grid(a, scan_mm=np.arange(shape[0]) * 1.0, index_mm=np.arange(shape[1]) * 1.0, time_us=t,
                     velocity_m_s=5920, probe_frequency_mhz=5, probe_diameter_mm=10)


WRITER = textwrap.dedent(
    """
    import sys, numpy as np
    from ndtmap import make_grid
    from ndtmap.io import save_grid
    target, value, n_scan = sys.argv[1], float(sys.argv[2]), int(sys.argv[3])
    rng = np.random.default_rng(int(value))
    a = rng.normal(value, 1.0, (n_scan, 200, 1000)).astype(np.float32)  # noise: compresses badly, writes slowly
    g = make_grid(a, scan_mm=np.arange(n_scan) * 1.0, index_mm=np.arange(200) * 1.0,
                  time_us=np.arange(1000) * 0.02, velocity_m_s=5920, probe_frequency_mhz=5, probe_diameter_mm=10)
    print("ready", flush=True)
    save_grid(g, target)
    print("done", flush=True)
    """
)


def _writer(target: Path, value: float, n_scan: int) -> subprocess.Popen:
    env = dict(os.environ, PYTHONPATH=os.pathsep.join([str(ROOT), os.environ.get("PYTHONPATH", "")]))
    return subprocess.Popen([sys.executable, "-c", WRITER, str(target), str(value), str(n_scan)],
                            stdout=subprocess.PIPE, text=True, env=env)


@pytest.mark.parametrize("suffix", [".nc", ".zarr"])
def test_killed_save_leaves_previous_output_intact(tmp_path, suffix):
    # a process killed (SIGKILL) during a save leaves the previous file as it was and no partial file
    # under the final name
    target = tmp_path / f"grid{suffix}"
    save_grid(small_grid(1.0), target)
    before = digest(target)
    proc = _writer(target, 7.0, 300)  # 240 MB of noise: several seconds to write
    assert proc.stdout.readline().strip() == "ready"
    deadline = time.monotonic() + 60
    while not any(p.name.startswith(f".{target.name}.") for p in tmp_path.iterdir()):
        assert time.monotonic() < deadline, "the writer never started its temporary file"
        assert proc.poll() is None, "the writer finished before it could be interrupted"
        time.sleep(0.01)
    time.sleep(0.3)  # well inside the write
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait(timeout=30)
    assert proc.returncode == -signal.SIGKILL
    assert digest(target) == before
    g = open_grid(target)
    assert float(g.ascan.mean()) == pytest.approx(1.0)
    names = {p.name for p in tmp_path.iterdir() if not p.name.startswith(".")}
    assert names == {target.name}  # only hidden temporary files may remain from the killed writer


def test_two_writers_never_corrupt_the_file(tmp_path):
    # two processes saving to the same name: the result is one of the two complete files
    target = tmp_path / "grid.nc"
    a, b = _writer(target, 3.0, 20), _writer(target, 5.0, 20)
    for p in (a, b):
        p.wait(timeout=300)
        assert p.returncode == 0
    g = open_grid(target)
    assert float(g.ascan.mean()) == pytest.approx(3.0, abs=0.05) or float(g.ascan.mean()) == pytest.approx(5.0,
                                                                                                          abs=0.05)
    assert g.sizes["scan"] == 20


def test_reading_never_executes_code_from_a_file(tmp_path, capsys):
    # metadata is data: text that looks like code is shown (escaped in HTML), never run
    flag = tmp_path / "pwned"
    code = f"__import__('os').system('touch {flag}')"
    g = small_grid()
    g.attrs.update(part_id=code, operator_notes=f"{{{{{code}}}}} ${{{code}}} `{code}`")
    path = tmp_path / "g.nc"
    save_grid(g, path)
    assert main(["info", str(path)]) == 0
    assert code in capsys.readouterr().out
    assert not flag.exists()


def test_package_has_no_pickle_or_eval():
    # reading never executes code: no pickle-like modules, no eval/exec, no allow_pickle=True in the package
    import ast

    forbidden_modules = {"pickle", "cPickle", "marshal", "shelve", "dill", "cloudpickle"}
    for path in (ROOT / "ndtmap").rglob("*.py"):
        tree = ast.parse(path.read_text(), filename=str(path))
        for node in ast.walk(tree):
            if isinstance(node, ast.Import):
                assert not {a.name.split(".")[0] for a in node.names} & forbidden_modules, (path.name, node.lineno)
            elif isinstance(node, ast.ImportFrom):
                assert (node.module or "").split(".")[0] not in forbidden_modules, (path.name, node.lineno)
            elif isinstance(node, ast.Call):
                if isinstance(node.func, ast.Name):
                    assert node.func.id not in ("eval", "exec"), (path.name, node.lineno)
                for kw in node.keywords:
                    if kw.arg == "allow_pickle":
                        assert isinstance(kw.value, ast.Constant) and kw.value.value is False, (path.name, node.lineno)


def test_int16_minimum_does_not_overflow():
    # np.abs(np.int16(-32768)) is -32768 in int16; amplitudes must come out positive and exact
    a = np.zeros((2, 2, 200), dtype=np.int16)
    a[:, :, 100] = -32768
    g = make_grid(a, scan_mm=[0, 1], index_mm=[0, 1], time_us=np.arange(200) * 0.02, velocity_m_s=5920,
                  probe_frequency_mhz=5, probe_diameter_mm=10, fsh_per_count=100 / 32767)
    m = amplitude_map(g, Gate("g", 1.0, 10.0, threshold_fsh=20))
    assert np.allclose(m.values, 32768 * 100 / 32767)


def test_float16_input_is_widened():
    a = np.full((2, 2, 100), 50.0, dtype=np.float16)
    g = make_grid(a, scan_mm=[0, 1], index_mm=[0, 1], time_us=np.arange(100) * 0.02, velocity_m_s=5920,
                  probe_frequency_mhz=5, probe_diameter_mm=10)
    assert g.ascan.dtype == np.float32


def test_gain_past_full_scale_is_not_saturated_when_the_record_was_not_clipped():
    # time-corrected gain is applied after digitising: it may lift an unclipped echo past the digitiser full scale
    # without clipping it, so the peak stays a measurement and is not flagged saturated; a record that reached the
    # full scale is (see tests/indications/test_recording_levels.py for the clipped case after TCG)
    t = np.arange(500) * 0.02
    echo = 60.0 * np.exp(-0.5 * ((t - 5.0) / 0.1) ** 2) * np.cos(2 * np.pi * 5 * (t - 5.0))
    a = np.zeros((9, 9, t.size), np.float32)
    a[3:6, 3:6] = echo
    g = make_grid(a, scan_mm=np.arange(9.0), index_mm=np.arange(9.0), time_us=t, velocity_m_s=5920,
                  probe_frequency_mhz=5, probe_diameter_mm=10, attrs={"digitiser_full_scale_fsh": 100.0})
    boosted = apply_tcg(g, dac_curve([5.0, 20.0], [20.0, 10.0]), target_fsh=80.0)
    m = amplitude_map(boosted, Gate("g", 5.0, 25.0))
    recs = size_indications(m, threshold_fsh=50.0)
    assert recs and recs[0]["peak_fsh"] > 100
    assert "saturated" not in recs[0]["flags"]
    clipped = apply_tcg(g.assign(ascan=g.ascan.clip(-50.0, 50.0)).assign_attrs(digitiser_full_scale_fsh=50.0),
                        dac_curve([5.0, 20.0], [20.0, 10.0]), target_fsh=80.0)
    recs = size_indications(amplitude_map(clipped, Gate("g", 5.0, 25.0)), threshold_fsh=50.0)
    assert recs and "saturated" in recs[0]["flags"]


ESCAPING_PART_IDS = ("../escaped", "sub/../../escaped2")  # each would land in tmp_path, next to the output


def _escaping_inputs(tmp_path: Path) -> list[Path]:
    """Two grids named like path escapes, with a back wall so that the first-look procedure runs to the end."""
    t = np.arange(400) * 0.02
    pulse = 80.0 * np.exp(-0.5 * ((t - 3.378) / 0.12) ** 2) * np.cos(2 * np.pi * 5.0 * (t - 3.378))  # 10 mm steel
    a = np.broadcast_to(pulse, (6, 5, t.size)).astype(np.float32)
    g = make_grid(a, scan_mm=np.arange(6.0), index_mm=np.arange(5.0), time_us=t, velocity_m_s=5920,
                  probe_frequency_mhz=5, probe_diameter_mm=10, attrs={"part_thickness_mm": 10.0})
    src = tmp_path / "in"
    src.mkdir()
    paths = []
    for k, pid in enumerate(ESCAPING_PART_IDS):
        g.attrs["part_id"] = pid
        paths.append(src / f"..%2F..%2Fevil{k}.nc")
        save_grid(g, paths[-1])
    return paths


def _files_outside(tmp_path: Path) -> list[Path]:
    """Every file under `tmp_path` that is neither an input (in/) nor in the report folder (out/)."""
    return [p for p in tmp_path.rglob("*")
            if p.is_file() and not (p.is_relative_to(tmp_path / "out") or p.is_relative_to(tmp_path / "in"))]


def test_bundle_never_writes_outside_its_folder(tmp_path):
    # grid files and part ids named like path escapes: a batch report writes its part folders inside only
    from ndtmap.report import write_report

    result = write_report(_escaping_inputs(tmp_path), tmp_path / "out", formats=())  # no error caught: it must end
    assert result.exit_status == 0 and not result.errors
    assert len(result.parts) == 2  # both part folders were written, so the check below saw them
    for part in result.parts:
        assert part.folder.parent == tmp_path / "out" and part.index_html.is_file()
    assert _files_outside(tmp_path) == []


def test_bundle_check_catches_a_file_written_outside(tmp_path, monkeypatch):
    # the check of the test above is not vacuous: with both guards removed (part folders named from the raw
    # part id, the writer's path check skipped), the report writes outside and the check says so
    from ndtmap.report import bundle, write_report, writer

    def unchecked(self, path):
        target = path.resolve()
        target.parent.mkdir(parents=True, exist_ok=True)
        return target

    monkeypatch.setattr(bundle, "safe_name", lambda text, default="part", **_: str(text) or default)
    monkeypatch.setattr(writer.BundleWriter, "target", unchecked)
    paths = _escaping_inputs(tmp_path)
    with contextlib.suppress(ValueError):  # the summary cannot link a part folder outside: it stops there
        write_report(paths, tmp_path / "out", formats=())
    outside = _files_outside(tmp_path)
    assert outside and {p.relative_to(tmp_path).parts[0] for p in outside} == {"escaped", "escaped2"}
