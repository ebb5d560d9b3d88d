"""Fuzz the command line with a generated corpus of malformed inputs (see fuzz_corpus.py).

Every case must end in one of two ways: a correct result (exit 0; for `info`, exit 1 when
the grid has problems, with the problems listed) or an ndtmap error (exit 2 and exactly one
line on stderr). A result is checked against the input read and computed without ndtmap
(helpers/fuzz_reference.py: the map against a numpy computation of the same map on the valid
A-scans, indications against it, the grid summary and a converted store against the input);
the outcome classes are counted and each must occur, no other. Never exit 70 (an internal
error: an exception ndtmap did not expect), never a traceback, never longer than the time
limit, never a memory peak anywhere near a size a sidecar merely claims, and never a change to
the input file.
"""

from __future__ import annotations

import collections
import contextlib
import gc
import hashlib
import io
import json
import signal
import sys
import tracemalloc
from pathlib import Path

import numpy as np
import pytest
import xarray as xr
from helpers.fuzz_corpus import all_cases
from helpers.fuzz_reference import gate_peak, missing_mask, read_input, samples_fsh

from ndtmap.cli import main

CASES = all_cases()
TIME_LIMIT_S = 60
MEMORY_LIMIT_BYTES = 256 * 2**20  # the inputs are tiny: anything near this is a claimed size being allocated


def _digest(path: Path) -> str:
    h = hashlib.sha256()
    if path.is_dir():
        for p in sorted(path.rglob("*")):
            if p.is_file():
                h.update(p.name.encode())
                h.update(p.read_bytes())
    elif path.exists():
        h.update(path.read_bytes())
    return h.hexdigest()


class _Timeout(Exception):
    pass


@contextlib.contextmanager
def _time_limit(seconds: int):
    def handler(signum, frame):
        raise _Timeout

    old = signal.signal(signal.SIGALRM, handler)
    signal.alarm(seconds)
    try:
        yield
    finally:
        signal.alarm(0)
        signal.signal(signal.SIGALRM, old)


@contextlib.contextmanager
def _catch_unraisable(found: list[str]):
    """Record exceptions raised in destructors (they would print a traceback on the user's stderr)."""
    previous = sys.unraisablehook
    sys.unraisablehook = lambda u: found.append(f"{u.exc_type.__name__}: {u.exc_value} in {u.object!r}")
    try:
        yield
        gc.collect(1)  # the young generations: where a command's own garbage is (a full collection is slow)
    finally:
        sys.unraisablehook = previous


def _run(argv: list[str], *, trace_memory: bool = False) -> tuple[int, str, str, int]:
    out, err = io.StringIO(), io.StringIO()
    if not trace_memory:
        stray: list[str] = []
        with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err), _time_limit(TIME_LIMIT_S), \
                _catch_unraisable(stray):
            try:
                code = main(argv)
            except SystemExit as exc:
                code = int(exc.code or 0)
        assert not stray, f"exceptions in destructors would reach stderr: {stray}"
        return code, out.getvalue(), err.getvalue(), 0
    tracemalloc.start()
    try:
        with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err), _time_limit(TIME_LIMIT_S):
            try:
                code = main(argv)
            except SystemExit as exc:  # argparse usage errors
                code = int(exc.code or 0)
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    return code, out.getvalue(), err.getvalue(), peak


OUTCOMES: collections.Counter = collections.Counter()

#: Every way a case may end; each must occur in the corpus, no other may (a report of one input that cannot
#: be read is an ndtmap error, not a partial batch).
OUTCOME_CLASSES = {"result", "problems listed", "ndtmap error"}

#: Categories whose inputs are valid: every command gives its result.
VALID_CATEGORIES = {"control", "data-ok"}


def _close(actual, expected, what: str, *, atol: float = 0.0) -> None:
    actual, expected = np.asarray(actual, dtype=float), np.asarray(expected, dtype=float)
    assert actual.shape == expected.shape, f"{what}: shape {actual.shape}, expected {expected.shape}"
    np.testing.assert_array_equal(np.isnan(actual), np.isnan(expected), err_msg=f"{what}: missing positions")
    ok = ~np.isnan(expected)
    np.testing.assert_allclose(actual[ok], expected[ok], rtol=1e-5, atol=atol, err_msg=what)


def _gate(case) -> tuple[float, float]:
    a, b = case.extra.get("gate", ("1", "8"))
    return float(a), float(b)


def _check_map(case, path: Path, out: Path) -> None:
    """The map written equals the numpy computation of the same map on the input (fuzz_reference)."""
    ds = read_input(path)
    peak, at = gate_peak(ds, _gate(case))
    kind = case.extra.get("kind", "amplitude")
    with xr.open_dataset(out / "m.nc") as m:
        if kind == "amplitude":
            _close(m["amplitude_fsh"].transpose("scan", "index").values, peak, f"{case.name}: amplitude map")
            return
        assert kind in ("depth", "thickness"), kind
        with np.errstate(invalid="ignore"):
            expected = np.where(peak >= float(case.extra.get("threshold", "20")), at, np.nan)
        one_sample_mm = float(ds.attrs["velocity_m_s"]) * 1e-3 * float(np.diff(ds["time"].values[:2])[0]) / 2
        _close(m[f"{kind}_mm"].transpose("scan", "index").values, expected, f"{case.name}: {kind} map",
               atol=one_sample_mm)  # sub-sample timing moves the depth by less than a sample


def _check_indications(case, path: Path, stdout: str) -> None:
    """No indication where no valid position reaches the threshold; else the highest peak is the map's maximum."""
    doc = json.loads(stdout)
    peak, _ = gate_peak(read_input(path), _gate(case))
    threshold = float(case.extra.get("threshold", "20"))
    valid = peak[np.isfinite(peak)]
    peaks = [r["peak_fsh"] for r in doc["indications"] if r["kind"] == "amplitude"]
    if not (valid >= threshold).any():
        assert peaks == [], f"{case.name}: indications above no valid position over {threshold} %FSH"
    else:
        assert peaks and max(peaks) == pytest.approx(float(valid.max()), rel=1e-5), case.name


def _check_grid_summary(case, path: Path, doc: dict) -> None:
    ds = read_input(path)
    shape = {d: int(ds.sizes[d]) for d in ("scan", "index", "time")}
    assert doc["shape"] == shape, f"{case.name}: shape {doc['shape']}, input {shape}"
    assert doc["missing_ascans"] == int(missing_mask(ds).sum()), case.name


def _check_convert(case, path: Path, out: Path) -> None:
    """The converted store holds the input's samples (in %FSH), missing A-scans and coordinates."""
    ds = read_input(path)
    conv = read_input(out / "converted.zarr")
    a, b = samples_fsh(conv), samples_fsh(ds)
    np.testing.assert_array_equal(np.isfinite(a), np.isfinite(b), err_msg=case.name)
    ok = np.isfinite(b)
    np.testing.assert_allclose(a[ok], b[ok], rtol=1e-6, err_msg=case.name)
    np.testing.assert_array_equal(missing_mask(conv), missing_mask(ds), err_msg=case.name)
    for d in ("scan", "index", "time"):
        np.testing.assert_allclose(conv[d].values, ds[d].values, rtol=1e-9, err_msg=f"{case.name}: {d}")


def _check_result(case, command: str, path: Path, out: Path, stdout: str) -> None:
    """An exit 0 output, checked against the input read and computed without ndtmap."""
    if command == "map":
        _check_map(case, path, out)
    elif command == "indications":
        _check_indications(case, path, stdout)
    elif command == "info":
        doc = json.loads(stdout)
        assert doc["valid"] and doc["problems"] == [], case.name
        _check_grid_summary(case, path, doc)
    elif command == "report":
        assert (out / "report" / "index.html").exists()
        _check_grid_summary(case, path, json.loads((out / "report" / "metadata.json").read_text()))
    elif command == "convert":
        _check_convert(case, path, out)
    else:
        raise AssertionError(command)


@pytest.mark.parametrize("case", CASES, ids=[c.name for c in CASES])
def test_case_ends_cleanly(case, tmp_path):
    folder = tmp_path / "in"
    folder.mkdir()
    out = tmp_path / "out"
    out.mkdir()
    path = case.write(folder)
    before = _digest(folder)
    for command in case.commands:
        argv = case.argv(command, path, out)
        # memory is traced where a file could claim a size: raw sidecars (tracing slows the rest down)
        code, stdout, stderr, peak = _run(argv, trace_memory="sidecar" in case.category)
        assert code != 70, f"{case.name}: internal error for {argv}: {stderr}"
        assert "Traceback" not in stderr, f"{case.name}: traceback for {argv}"
        assert peak < MEMORY_LIMIT_BYTES, f"{case.name}: {peak / 2**20:.0f} MiB allocated for {argv}"
        if code == 0:
            outcome = "result"
            _check_result(case, command, path, out, stdout)
        elif code == 1 and command == "info":
            outcome = "problems listed"
            doc = json.loads(stdout)
            assert doc["problems"] and not doc["valid"], f"{case.name}: exit 1 without problems"
        else:
            assert code == 2, f"{case.name}: exit {code} for {argv}"
            lines = stderr.strip().splitlines()
            assert len(lines) == 1, f"{case.name}: {len(lines)} error lines for {argv}: {stderr}"
            assert lines[0].startswith("ndtmap") and "error" in lines[0]
            outcome = "ndtmap error"
        if case.category in VALID_CATEGORIES:
            assert outcome == "result", f"{case.name}: a valid input gave {outcome} for {command}: {stderr}"
        OUTCOMES[(case.category, command, outcome)] += 1
    assert _digest(folder) == before, f"{case.name}: the input was modified"


def test_outcome_counter():
    # runs after the cases (tests of a file run in order on one worker: --dist loadfile)
    ran = sum(OUTCOMES.values())
    expected = sum(len(c.commands) for c in CASES)
    if ran < expected:
        pytest.skip(f"only {ran} of {expected} command runs in this session (run the whole file)")
    assert ran == expected
    seen = {outcome for (_, _, outcome) in OUTCOMES}
    assert seen == OUTCOME_CLASSES, f"outcomes seen: {seen}"
    for category in VALID_CATEGORIES:
        assert {o for (c, _, o) in OUTCOMES if c == category} == {"result"}
    for category in {c.category for c in CASES} - VALID_CATEGORIES:  # a malformed input is refused somewhere
        assert {o for (c, _, o) in OUTCOMES if c == category} & {"ndtmap error", "problems listed"}, category
    assert {o for (c, _, o) in OUTCOMES if c == "file"} == {"ndtmap error"}  # no grid in garbage or cut files


def test_corpus_size():
    # the hardening issue asks for at least 500 malformed inputs
    malformed = [c for c in CASES if c.category != "control"]
    assert len(malformed) >= 500


def test_controls_give_results(tmp_path):
    for case in (c for c in CASES if c.category == "control"):
        folder = tmp_path / case.name
        folder.mkdir()
        path = case.write(folder)
        for command in case.commands:
            code, _, stderr, _ = _run(case.argv(command, path, folder))
            assert code == 0, f"{case.name} {command}: {stderr}"


def _case(name: str):
    return next(c for c in CASES if c.name == name)


def test_checks_catch_a_wrong_map(tmp_path, monkeypatch):
    # the result checks are not vacuous: a map with one position wrong (a finite value where the input's
    # A-scan is missing, as an infinite sample once gave) fails the case
    import ndtmap.io

    save_map = ndtmap.io.save_map

    def corrupt(ds, path, **kw):
        ds = ds.copy(deep=True)
        ds["amplitude_fsh"][0, 0] = 12.5
        return save_map(ds, path, **kw)

    monkeypatch.setattr(ndtmap.io, "save_map", corrupt)
    monkeypatch.setattr(sys.modules[__name__], "OUTCOMES", collections.Counter())  # keep the corpus count clean
    for name in ("control-valid-float32", "data-one-nan-ascan", "data-inf-sample"):
        case = _case(name)
        case_path = tmp_path / name
        case_path.mkdir()
        with pytest.raises(AssertionError, match="amplitude map"):
            test_case_ends_cleanly(case, case_path)


def test_checks_catch_wrong_indications_and_a_wrong_store(tmp_path, monkeypatch):
    case = _case("control-valid-float32")
    path = case.write(tmp_path)
    with pytest.raises(AssertionError):  # an indication where no valid position reaches the threshold
        _check_indications(case, path, json.dumps({"indications": [{"kind": "amplitude", "peak_fsh": 30.0}]}))
    out = tmp_path / "out"
    out.mkdir()
    ds = read_input(path)
    ds["ascan"][1, 1, 60] += 1.0
    ds.to_zarr(out / "converted.zarr", consolidated=False)
    with pytest.raises(AssertionError):
        _check_convert(case, path, out)
