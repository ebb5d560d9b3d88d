"""The same work on a Dask distributed cluster (LocalCluster on 127.0.0.1) as in this process.

Reference: the in-process result of the same functions; dask's documented promise is that the scheduler
(threads, processes, distributed) changes where tasks run, not what they compute (Dask documentation,
"Scheduling"). The kernels are deterministic, so the results must be identical.
"""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr
from helpers.burst_grids import STEEL_L, plate_grid

from ndtmap.cli import main
from ndtmap.cluster import check_scheduler_address, use_scheduler
from ndtmap.errors import ParameterError, ParameterTypeError
from ndtmap.gates import Gate, evaluate_gates
from ndtmap.grid import make_grid
from ndtmap.io import convert_to_zarr, export_raw, open_grid, write_zarr
from ndtmap.scans import amplitude_map, b_scan, backwall_loss_map, depth_map, thickness_map

distributed = pytest.importorskip("distributed")


@pytest.fixture(scope="module")
def cluster():
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                                  dashboard_address=None, memory_limit="2GiB") as c:
        yield c


def int16_plate(n_scan=12, n_index=6):
    base = plate_grid(12.3, scan_mm=np.arange(n_scan, dtype=float), index_mm=np.arange(n_index, dtype=float),
                      noise_fsh=1.0)
    counts = np.round(base["ascan"].values / 100.0 * 32767).astype(np.int16)
    return make_grid(counts, scan_mm=base.scan.values, index_mm=base["index"].values, time_us=base.time.values,
                     velocity_m_s=STEEL_L, probe_frequency_mhz=5.0, probe_diameter_mm=10.0,
                     fsh_per_count=100.0 / 32767, attrs={"part_thickness_mm": 12.3, "part_id": "KFP-PL-2041"})


def test_maps_and_sections_through_the_cluster_equal_the_in_process_ones(cluster, tmp_path):
    g = int16_plate()
    store = write_zarr(g, tmp_path / "KFP-PL-2041.zarr", chunk_scan=3)
    bw = Gate("bw", 10.0, 14.0, threshold_fsh=30.0)
    bw2 = Gate("bw2", 10.0, 14.0, follows="bw", mode="first-crossing")
    local = [amplitude_map(g, bw), depth_map(g, bw), backwall_loss_map(g, bw), thickness_map(g, bw),
             b_scan(g, 2.0, detect="envelope")]
    local_gates = evaluate_gates(g, [bw, bw2])
    lazy = open_grid(store, chunks={"scan": 3})
    with use_scheduler(cluster.scheduler_address) as client:
        assert client is not None and len(client.scheduler_info()["workers"]) == 2
        remote = [amplitude_map(lazy, bw).compute(), depth_map(lazy, bw).compute(),
                  backwall_loss_map(lazy, bw).compute(), thickness_map(lazy, bw).compute(),
                  b_scan(lazy, 2.0, detect="envelope").compute()]
        remote_gates = {k: v.compute() for k, v in evaluate_gates(lazy, [bw, bw2]).items()}
        assert distributed.default_client() is client
    with pytest.raises(ValueError):  # the client is closed and no longer the default after the block
        distributed.default_client()
    for a, b in zip(remote, local, strict=True):
        np.testing.assert_array_equal(a.values, b.values)
        assert a.attrs["units"] == b.attrs["units"]
    for name in local_gates:
        xr.testing.assert_equal(remote_gates[name], local_gates[name])


def test_convert_and_map_commands_with_a_scheduler(cluster, tmp_path, capsys):
    g = int16_plate(n_scan=10)
    raw = export_raw(g, tmp_path / "KFP-PL-2041.json")
    store = tmp_path / "KFP-PL-2041.zarr"
    assert main(["convert", str(raw), str(store), "--chunk-scan", "4", "-q",
                 "--scheduler", cluster.scheduler_address]) == 0
    back = open_grid(store, lazy=True)
    assert back.ascan.encoding["chunks"] == (4, 6, g.sizes["time"])
    np.testing.assert_array_equal(back.ascan.values, g.ascan.values)
    out = tmp_path / "amplitude.nc"
    assert main(["map", str(store), "--kind", "amplitude", "--gate-mm", "10", "14", "-o", str(out),
                 "--scheduler", cluster.scheduler_address]) == 0
    assert "wrote" in capsys.readouterr().out
    written = xr.open_dataset(out, engine="h5netcdf")
    np.testing.assert_array_equal(written["amplitude_fsh"].values,
                                  amplitude_map(g, Gate("gate", 10.0, 14.0)).values)
    written.close()
    convert_again = tmp_path / "again.zarr"
    with use_scheduler(cluster.scheduler_address):
        convert_to_zarr(raw, convert_again, chunk_scan=5)
    np.testing.assert_array_equal(open_grid(convert_again).ascan.values, g.ascan.values)


def test_scheduler_addresses_are_checked():
    assert check_scheduler_address(" tcp://127.0.0.1:8786 ") == "tcp://127.0.0.1:8786"
    for bad, match in (("127.0.0.1:8786", "address like"), ("http://host:8786", "schemes"),
                       ("tcp://host", "host and a port"), ("tcp://:8786", "host and a port")):
        with pytest.raises(ParameterError, match=match):
            check_scheduler_address(bad)
    with pytest.raises(ParameterTypeError):
        check_scheduler_address(8786)
    with use_scheduler("") as client:
        assert client is None


def test_an_unreachable_scheduler_is_one_clear_error():
    # a closed port on the loopback interface: nothing listens on port 9 (discard) in the test machine
    with pytest.raises(ParameterError, match=r"`scheduler` tcp://127.0.0.1:9 did not answer"):
        with use_scheduler("tcp://127.0.0.1:9", timeout_s=1.0):
            pass


def test_indications_command_with_a_scheduler(cluster, tmp_path, capsys):
    import json

    g = int16_plate(n_scan=10)
    store = write_zarr(g, tmp_path / "KFP-PL-2041.zarr", chunk_scan=5)
    args = [str(store), "--gate-mm", "10", "14", "--threshold-fsh", "30", "--format", "json"]
    assert main(["indications", *args]) == 0
    local = json.loads(capsys.readouterr().out)
    assert main(["indications", *args, "--scheduler", cluster.scheduler_address]) == 0
    remote = json.loads(capsys.readouterr().out)
    assert remote["indications"] == local["indications"]


def test_importing_the_module_does_not_import_dask():
    import os
    import subprocess
    import sys
    from pathlib import Path

    import ndtmap

    root = Path(ndtmap.__file__).resolve().parent.parent
    env = dict(os.environ, PYTHONPATH=os.pathsep.join(filter(None, (str(root), os.environ.get("PYTHONPATH")))))
    code = "import sys, ndtmap.cluster; print(sorted(m for m in sys.modules if m.split('.')[0] in ('dask', " \
           "'distributed')))"
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env, timeout=120,
                          check=True)
    assert proc.stdout.strip() == "[]"
