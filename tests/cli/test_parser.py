"""The parser of ``ndtmap``: one module per command, cheap to build, one-line errors and the exit codes."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

import ndtmap
from ndtmap.cli import (
    COMMANDS,
    EXIT_INTERNAL,
    EXIT_INTERRUPTED,
    EXIT_OK,
    EXIT_PROBLEMS,
    EXIT_USAGE,
    build_parser,
    main,
)
from ndtmap.cli import info as info_command
from ndtmap.cli import report as report_command
from ndtmap.cli._scheduler import add_scheduler_argument, with_scheduler
from ndtmap.errors import GateError
from ndtmap.simulate import sample_path

ROOT = Path(ndtmap.__file__).resolve().parent.parent
HEAVY = ("xarray", "numpy", "scipy", "pandas", "plotly", "dask", "distributed", "numba", "zarr", "h5py", "h5netcdf")
PROCESSING = ("gates", "grid", "indications", "io", "physics", "plot", "procedure", "report", "scans", "simulate",
              "workbench", "signal")


def modules_after(code: str) -> set[str]:
    """The modules loaded by a fresh interpreter after running `code`."""
    env = dict(os.environ, PYTHONPATH=os.pathsep.join(filter(None, (str(ROOT), os.environ.get("PYTHONPATH")))))
    proc = subprocess.run([sys.executable, "-c", f"{code}\nimport json, sys; print(json.dumps(sorted(sys.modules)))"],
                          capture_output=True, text=True, env=env, timeout=120, check=True)
    return set(json.loads(proc.stdout.splitlines()[-1]))


def test_building_the_parser_imports_nothing_heavy():
    loaded = modules_after("from ndtmap.cli import build_parser\nbuild_parser()")
    assert "ndtmap.cli.map" in loaded  # the command modules themselves are loaded
    assert not {m for m in loaded if m.split(".")[0] in HEAVY}
    assert not {m for m in loaded if m.startswith("ndtmap.") and m.split(".")[1] in PROCESSING}


def test_every_command_module_registers_one_command_with_its_function():
    names = [c.__name__.rsplit(".", 1)[1].replace("_", "-") for c in COMMANDS]
    assert names == ["info", "demo", "make-samples", "map", "indications", "report", "convert"]
    sub = build_parser()._subparsers._group_actions[0]
    assert list(sub.choices) == names  # `ndtmap --help` lists them in this order
    for module, name in zip(COMMANDS, names, strict=True):
        func = sub.choices[name].get_default("func")
        assert getattr(func, "__wrapped__", func) is getattr(module, "cmd_" + name.replace("-", "_"))


def test_exit_codes():
    # 0, 1, 2 as documented in ndtmap.cli; 70 is EX_SOFTWARE of BSD sysexits.h; 130 = 128 + SIGINT (2)
    assert (EXIT_OK, EXIT_PROBLEMS, EXIT_USAGE, EXIT_INTERNAL, EXIT_INTERRUPTED) == (0, 1, 2, 70, 130)


def test_no_command_prints_help_and_exits_2(capsys):
    assert main([]) == EXIT_USAGE
    assert "COMMAND" in capsys.readouterr().out


def test_version(capsys):
    with pytest.raises(SystemExit) as exc:
        main(["--version"])
    assert exc.value.code == 0 and capsys.readouterr().out.strip() == f"ndtmap {ndtmap.__version__}"


def failing_command(exc: BaseException):
    def command(args):
        raise exc

    return command


@pytest.mark.parametrize(
    ("exc", "code", "line"),
    [
        (GateError("`start` must be below `end`, got 5 and 1"), EXIT_USAGE,
         "ndtmap info: error: `start` must be below `end`, got 5 and 1"),
        (KeyboardInterrupt(), EXIT_INTERRUPTED, "ndtmap info: interrupted"),
        (ZeroDivisionError("division by zero"), EXIT_INTERNAL,
         "ndtmap info: internal error: ZeroDivisionError: division by zero (this is a bug; rerun with --debug and "
         "report the output)"),
    ],
)
def test_errors_are_one_line_with_their_exit_code(monkeypatch, capsys, exc, code, line):
    monkeypatch.setattr(info_command, "cmd_info", failing_command(exc))
    assert main(["info", "grid.nc"]) == code
    out, err = capsys.readouterr()
    assert out == "" and err == line + "\n"


def test_debug_shows_the_traceback(monkeypatch):
    monkeypatch.setattr(info_command, "cmd_info", failing_command(GateError("bad gate")))
    with pytest.raises(GateError, match="bad gate"):
        main(["--debug", "info", "grid.nc"])


def test_a_closed_pipe_is_not_an_error(monkeypatch, capsys):
    monkeypatch.setattr(info_command, "cmd_info", failing_command(BrokenPipeError()))
    assert main(["info", "grid.nc"]) == EXIT_OK
    assert capsys.readouterr().err == ""


def test_report_choices_are_the_library_ones(capsys):
    from ndtmap.procedure import FIGURE_KINDS
    from ndtmap.report import REPORT_FORMATS

    assert tuple(report_command.FIGURE_KINDS) == FIGURE_KINDS
    assert tuple(report_command.REPORT_FORMATS) == REPORT_FORMATS
    with pytest.raises(SystemExit):
        main(["report", "--help"])
    assert "from " + ", ".join(FIGURE_KINDS) in " ".join(capsys.readouterr().out.split())
    with pytest.raises(SystemExit) as stop:
        main(["report", "g.nc", "-o", "out", "--figures", "volume"])  # not a figure kind
    assert stop.value.code == EXIT_USAGE and "invalid choice: 'volume'" in capsys.readouterr().err


def test_scheduler_option_and_wrapper():
    import argparse

    parser = argparse.ArgumentParser()
    add_scheduler_argument(parser)
    assert parser.parse_args([]).scheduler is None
    seen = []
    run = with_scheduler(lambda args: seen.append(args.scheduler) or 3)
    assert run(parser.parse_args([])) == 3 and seen == [None]


def test_python_m_ndtmap_runs_the_command_line():
    proc = subprocess.run([sys.executable, "-m", "ndtmap", "info", str(sample_path("plate_laminations.nc")),
                           "--json"], capture_output=True, text=True, timeout=120, cwd=ROOT)
    assert proc.returncode == 0 and proc.stderr == ""
    assert json.loads(proc.stdout)["valid"] is True


def test_info_on_a_netcdf_grid_loads_neither_dask_arrays_nor_the_processing_chain():
    # the start-up budget of `ndtmap info` (benchmarks/startup.py): xarray and h5netcdf, not dask.array (about half
    # a second), scipy, plotly or the gate kernels
    path = str(sample_path("plate_laminations.nc"))
    loaded = modules_after(f"from ndtmap.cli import main\nmain(['info', {path!r}, '--json'])")
    assert "xarray" in loaded and "ndtmap.grid.summary" in loaded
    assert not {m for m in loaded if m.split(".")[0] in ("scipy", "plotly", "numba", "zarr")}
    assert "dask.array" not in loaded
    assert not {m for m in loaded if m.startswith(("ndtmap.gates", "ndtmap.indications", "ndtmap.plot"))}
