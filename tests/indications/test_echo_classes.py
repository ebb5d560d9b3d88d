"""Back-wall (geometry) echo or reflector: the tolerance is the pulse, and an angle beam sees corners, not the wall.

The A-scans are written here with scipy.signal.gausspulse echoes at the
geometric pulse-echo times t = 2 s / c (s the sound path, s = z / cos(theta)
for an angle beam), not with ndtmap.simulate.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import signal

from ndtmap.gates import Gate
from ndtmap.grid import make_grid
from ndtmap.indications import EchoCheck, classify_echoes, detect_indications, size_indications
from ndtmap.scans import amplitude_map, depth_map

STEEL_L = 5920.0  # m/s, steel longitudinal; from memory (handbook tables)
STEEL_S = 3230.0  # m/s, steel shear; from memory
F_MHZ, BW = 5.0, 0.6


def _grid(echoes, *, velocity_m_s, thickness_mm, angle_deg=0.0, duration_us=80.0):
    """3 x 3 positions, the same A-scan everywhere: gausspulse echoes (depth_mm, amplitude_fsh)."""
    t = np.arange(0.0, duration_us, 0.01)  # us, 100 MHz sampling
    a = np.zeros_like(t)
    for z, amp in echoes:
        s = z / math.cos(math.radians(angle_deg))  # sound path of an echo from depth z (geometry)
        t0 = 2.0 * s / (velocity_m_s * 1e-3)  # pulse-echo time (geometry)
        a += amp * signal.gausspulse((t - t0) * 1e-6, fc=F_MHZ * 1e6, bw=BW)
    data = np.broadcast_to(a, (3, 3, t.size)).astype(np.float32)
    return make_grid(np.ascontiguousarray(data), scan_mm=[0.0, 1.0, 2.0], index_mm=[0.0, 1.0, 2.0], time_us=t,
                     velocity_m_s=velocity_m_s, probe_frequency_mhz=F_MHZ, probe_diameter_mm=10.0,
                     beam_angle_deg=angle_deg,
                     attrs={"part_thickness_mm": thickness_mm, "probe_bandwidth": BW})


def _indications(grid, start_mm, end_mm):
    gate = Gate("flaw", start_mm, end_mm, threshold_fsh=20.0)
    return detect_indications(amplitude_map(grid, gate), threshold_fsh=20.0, depth_map=depth_map(grid, gate))


def test_reflector_3_mm_above_the_back_wall_of_a_100_mm_part_is_not_a_backwall_echo():
    # a reflector at 97 mm and the back wall at 100 mm; a 5 MHz, 60 % bandwidth pulse is about 1.6 mm long in
    # steel down to -20 dB (gausspulse envelope), so the two echoes are 2 echo lengths apart
    grid = _grid([(97.0, 60.0), (100.0, 80.0)], velocity_m_s=STEEL_L, thickness_mm=100.0, duration_us=40.0)
    (ind,) = _indications(grid, 60.0, 98.5)
    assert abs(ind.depth_mm - 97.0) < 0.3
    found = classify_echoes(grid, [ind])
    assert ind.id not in found or "backwall_echo" not in found[ind.id].flags
    # the back wall itself, reached by a gate over it, is a geometry echo (positive control)
    (wall,) = _indications(grid, 98.6, 102.0)
    assert classify_echoes(grid, [wall])[wall.id].flags == ("backwall_echo",)


def test_angle_beam_echo_at_the_wall_depth_is_a_corner_reflection():
    # 45 deg shear wave, 20 mm wall: an echo from the far surface's depth comes from a corner (a crack at the far
    # surface), the wall itself sends nothing back (the beam reflects away): ISO 17640 / Krautkramer ch. on angle
    # beam testing, in general terms
    grid = _grid([(20.0, 70.0)], velocity_m_s=STEEL_S, thickness_mm=20.0, angle_deg=45.0, duration_us=30.0)
    (ind,) = _indications(grid, 10.0, 25.0)
    assert abs(ind.depth_mm - 20.0) < 0.3
    found = classify_echoes(grid, [ind])[ind.id]
    assert "backwall_echo" not in found.flags
    assert any("corner reflection" in n for n in found.notes)
    gate = Gate("flaw", 10.0, 25.0, threshold_fsh=20.0)
    (rec,) = size_indications(amplitude_map(grid, gate), depth_map=depth_map(grid, gate), echoes=EchoCheck(grid))
    assert "backwall_echo" not in rec.flags and any("corner reflection" in n for n in rec.notes)
    # the same echo with a straight beam is the back wall (positive control)
    straight = _grid([(20.0, 70.0)], velocity_m_s=STEEL_L, thickness_mm=20.0, duration_us=15.0)
    (ind,) = _indications(straight, 10.0, 25.0)
    assert classify_echoes(straight, [ind])[ind.id].flags == ("backwall_echo",)


def test_thinned_wall_is_the_back_wall_at_its_own_position():
    # corrosion has thinned a 12 mm wall to 9 mm: the flaw gate's echo at 9 mm is the back wall there, as the
    # back-wall gate's depth at the same position shows; against the nominal 12 mm alone it is not
    import xarray as xr

    grid = _grid([(9.0, 80.0)], velocity_m_s=STEEL_L, thickness_mm=12.0, duration_us=6.0)
    (ind,) = _indications(grid, 1.0, 11.0)
    assert classify_echoes(grid, [ind]).get(ind.id) is None
    local = xr.DataArray(np.full((3, 3), 9.02), dims=("scan", "index"),
                         coords={"scan": grid["scan"].values, "index": grid["index"].values})
    found = classify_echoes(grid, [ind], backwall_depth_map=local)
    assert found[ind.id].flags == ("backwall_echo",)
    # a reflector at 9 mm over an intact 12 mm wall is not (the back-wall gate reads 12 mm there)
    intact = local.copy(data=np.full((3, 3), 12.0))
    assert classify_echoes(grid, [ind], backwall_depth_map=intact).get(ind.id) is None
