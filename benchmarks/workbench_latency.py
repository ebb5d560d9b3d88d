"""Latency of the workbench on a 500 x 500 x 1000 grid: gate edit -> map, figure update, click -> A-scan.

Run from the repository root::

    python benchmarks/workbench_latency.py [--repeat 7] [--size 500 500 1000]

The grid is built here from seeded random numbers (electronic noise) plus Gaussian-windowed tone
bursts: a back-wall echo everywhere except under two rectangular planar reflectors, which echo at
their own depth. The full simulator is too slow at this size. Printed (medians over the repeats,
each edit a new gate end so the gate cache never answers):

* gate edit -> map ready: ``state.set_gate(...)`` then ``state.map()``;
* figure update: the plan figure built from the map and copied into a plotly FigureWidget
  (serialised as for the kernel; no browser is attached, so the JSON/ZMQ hop and the drawing in
  the browser are not in this number);
* click -> A-scan and sections: ``state.select_point`` then the A-scan, B-scan and D-scan with
  their gate lines, figures built and copied into FigureWidgets;
* the baseline: ``np.abs(window).max(-1)`` over the same gate window of the same array, the least
  work any gate needs;
* for comparison: the gate on the cut record without the parallel slabs, and once on the whole
  record (what ``ndtmap.scans.maps.amplitude_map`` does).

The machine has 2 cores; other work on it shows in the numbers.
"""

from __future__ import annotations

import argparse
import cProfile
import io
import pstats
import statistics
import time

import numpy as np


def build_grid(n_scan: int, n_index: int, n_time: int, seed: int = 20411180):
    """A seeded RF grid: noise, a back wall at 20 mm and two planar reflectors at 8 and 12 mm."""
    from ndtmap import make_grid

    rng = np.random.default_rng(seed)
    dt = 0.02  # us, 50 MHz
    t = np.arange(n_time) * dt
    a = rng.standard_normal((n_scan, n_index, n_time), dtype=np.float32)
    a *= np.float32(0.8)  # %FSH of noise

    def burst(depth_mm: float, amp: float) -> np.ndarray:
        tc = 2 * depth_mm / 5.92
        x = t - tc
        return (amp * np.exp(-0.5 * (x / 0.15) ** 2) * np.cos(2 * np.pi * 5.0 * x)).astype(np.float32)

    s0, s1 = n_scan // 5, n_scan // 2
    i0, i1 = n_index // 4, n_index // 2
    u0, u1 = (3 * n_scan) // 5, (4 * n_scan) // 5
    v0, v1 = n_index // 2, (4 * n_index) // 5
    shadow = np.zeros((n_scan, n_index), dtype=bool)
    shadow[s0:s1, i0:i1] = True
    shadow[u0:u1, v0:v1] = True
    bw = burst(20.0, 80.0)
    for k in range(n_scan):  # row by row keeps the temporaries small
        row = a[k]
        row[~shadow[k]] += bw
    a[s0:s1, i0:i1] += burst(8.0, 70.0)
    a[u0:u1, v0:v1] += burst(12.0, 60.0)
    return make_grid(a, scan_mm=np.arange(n_scan) * 1.0, index_mm=np.arange(n_index) * 1.0, time_us=t,
                     velocity_m_s=5920.0, probe_frequency_mhz=5.0, probe_diameter_mm=10.0, signal="rf",
                     attrs={"part_id": "KFP-BENCH-500", "part_thickness_mm": 20.0})


def median_ms(samples: list[float]) -> str:
    return f"{1e3 * statistics.median(samples):8.1f} ms (min {1e3 * min(samples):.1f}, max {1e3 * max(samples):.1f})"


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--repeat", type=int, default=7)
    parser.add_argument("--size", type=int, nargs=3, default=(500, 500, 1000), metavar=("SCAN", "INDEX", "TIME"))
    parser.add_argument("--no-whole", action="store_true", help="skip the gate on the whole record")
    args = parser.parse_args()

    import plotly.graph_objects as go

    from ndtmap.gates import Gate, evaluate_gate, gate_window_us
    from ndtmap.procedure import Procedure
    from ndtmap.workbench import _compute
    from ndtmap.workbench import view_figures as vf
    from ndtmap.workbench._sync import figure_widget, sync_traces
    from ndtmap.workbench.state import WorkbenchState

    t0 = time.perf_counter()
    grid = build_grid(*args.size)
    n = grid["ascan"].size
    print(f"grid {dict(grid.sizes)} = {n / 1e6:.0f} M samples float32, built in {time.perf_counter() - t0:.1f} s")

    flaw = Gate("flaw", 2.0, 17.0, threshold_fsh=20.0)
    backwall = Gate("backwall", 17.0, 23.0, threshold_fsh=20.0)
    proc = Procedure("benchmark", (flaw, backwall), "flaw", backwall_gate="backwall")
    state = WorkbenchState(grid, procedure=proc)
    t0 = time.perf_counter()
    state.map()
    print(f"first map (with the missing-A-scan mask of the whole grid): {time.perf_counter() - t0:.2f} s")

    # gate edit -> map ready
    ends = [16.0 + 0.1 * k for k in range(args.repeat)]
    edit = []
    for e in ends:
        t0 = time.perf_counter()
        state.set_gate("flaw", end=e)
        m = state.map()
        edit.append(time.perf_counter() - t0)
    print(f"gate edit -> map ready        {median_ms(edit)}")

    # baseline on the same window
    lo, hi = gate_window_us(grid, state.gate("flaw"))
    tt = grid["time"].values
    k0, k1 = int(np.ceil((lo - tt[0]) / 0.02 - 1e-6)), int(np.floor((hi - tt[0]) / 0.02 + 1e-6))
    raw = grid["ascan"].values
    base = []
    for _ in range(args.repeat):
        t0 = time.perf_counter()
        np.abs(raw[:, :, k0:k1 + 1]).max(-1)
        base.append(time.perf_counter() - t0)
    print(f"baseline |window|.max(-1)     {median_ms(base)}   ({k1 - k0 + 1} samples per A-scan)")

    # the same gate on the cut record without slabs (one thread), and where its time goes
    limit = _compute.PARALLEL_MIN_SAMPLES
    _compute.PARALLEL_MIN_SAMPLES = 10**18
    try:
        serial = []
        for e in ends[:3]:
            state.set_gate("flaw", end=e + 0.05)
            t0 = time.perf_counter()
            state.map()
            serial.append(time.perf_counter() - t0)
        print(f"same, cut record, one thread  {median_ms(serial)}")
        state.set_gate("flaw", end=15.55)
        prof = cProfile.Profile()
        prof.enable()
        state.map()
        prof.disable()
    finally:
        _compute.PARALLEL_MIN_SAMPLES = limit
    out = io.StringIO()
    pstats.Stats(prof, stream=out).sort_stats("tottime").print_stats(10)
    lines = [ln for ln in out.getvalue().splitlines() if ln.strip()]
    start = next(i for i, ln in enumerate(lines) if ln.lstrip().startswith("ncalls"))
    print("one edit on one thread, functions by own time (cProfile):")
    for ln in lines[start:start + 11]:
        print("   ", ln[:150])
    if not args.no_whole:
        t0 = time.perf_counter()
        evaluate_gate(grid, state.gate("flaw"))
        print(f"same, whole record (as ndtmap.scans.maps): {time.perf_counter() - t0:8.2f} s")

    # figure update: build the plan figure, copy it into a FigureWidget
    plan = figure_widget(vf.plan_view(state, state.map()))
    fig_t = []
    for e in ends[:5]:
        state.set_gate("flaw", end=e)  # from the cache: the map itself is ready
        m = state.map()
        t0 = time.perf_counter()
        fig = vf.plan_view(state, m)
        sync_traces(plan, fig, parts=("title",))
        fig_t.append(time.perf_counter() - t0)
    z = plan.data[0].z
    print(f"figure update (plan, thinned to {len(z)} x {len(z[0])} cells) {median_ms(fig_t)}")

    # click -> A-scan and sections
    figs = {k: go.FigureWidget() for k in ("ascan", "bscan", "dscan")}
    click = []
    rng = np.random.default_rng(3)
    for _ in range(args.repeat):
        s, i = rng.uniform(0, args.size[0] - 1), rng.uniform(0, args.size[1] - 1)
        t0 = time.perf_counter()
        state.select_point(s, i)
        fa = vf.ascan_view(state, state.ascan())
        fb = vf.section_view(state, "scan", state.b_scan(), state.section_gates("scan"))
        fd = vf.section_view(state, "index", state.d_scan(), state.section_gates("index"))
        for key, f in (("ascan", fa), ("bscan", fb), ("dscan", fd)):
            sync_traces(figs[key], f, parts=("title", "shapes", "annotations"))
        click.append(time.perf_counter() - t0)
    print(f"click -> A-scan + B/D-scans   {median_ms(click)}")
    print(f"goal for gate edit -> map: 150 ms; measured median {1e3 * statistics.median(edit):.0f} ms "
          f"({statistics.median(edit) / 0.150:.1f} x the goal)")


if __name__ == "__main__":
    main()
