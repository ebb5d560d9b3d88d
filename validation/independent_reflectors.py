"""Size reflectors of known shape through `ndtmap indications` on grids written here by an independent model.

The A-scans are RF echoes (scipy.signal.gausspulse, 5 MHz, 50 % band) at the geometric times 2 z / c; the echo
amplitude over the plan is the reflectivity map convolved with a pulse-echo lateral response that is NOT
ndtmap's: the far-field piston directivity squared [2 J1(x)/x]^2 at the centre frequency (scipy.special.j1),
and for the near-field disc a band-averaged Rayleigh surface integral (tests/helpers/rayleigh.py).
The cases: a plateau lamination with a hot spot, an oblique strip, an ellipse whose echo rises along the scan,
two laminations side by side at different depths, a small disc in the near field, an echo above 100 %FSH on a
digitiser that clips at 200 %FSH, and two echoes judged against a DAC. Each prints the truth and the records.

Usage (from the project root): python validation/independent_reflectors.py [OUTDIR]
"""

from __future__ import annotations

import json
import math
import subprocess
import sys
import tempfile
from pathlib import Path

import numpy as np
from scipy import signal, special

ROOT = Path(__file__).resolve().parents[1]
OUT = Path(sys.argv[1] if len(sys.argv) > 1 else tempfile.mkdtemp(prefix="ndtmap-reflectors-"))
OUT.mkdir(parents=True, exist_ok=True)
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "tests"))

from ndtmap.grid import make_grid  # noqa: E402
from ndtmap.io import save_grid  # noqa: E402

C = 5920.0
F = 5.0
D = 10.0
LAM = C / 1e3 / F  # mm
N = D**2 * F / (4 * C / 1e3)
FINE = 0.1


def airy_psf(z_mm: float, half: float = 15.0) -> np.ndarray:
    x = np.arange(-half, half + FINE / 2, FINE)
    xx, yy = np.meshgrid(x, x, indexing="ij")
    r = np.hypot(xx, yy)
    s = np.sin(np.arctan2(r, z_mm))
    u = math.pi * D / LAM * s
    with np.errstate(invalid="ignore", divide="ignore"):
        d = np.where(u > 1e-9, 2 * special.j1(u) / u, 1.0)
    p = d**2  # pulse-echo: directivity squared
    return p / p.sum()


def convolve(refl: np.ndarray, psf: np.ndarray) -> np.ndarray:
    return signal.fftconvolve(refl, psf, mode="same")


def plan(xs, ys):
    return np.meshgrid(xs, ys, indexing="ij")


def sample(fine_map, fx, fy, sx, sy):
    ix = np.rint((sx - fx[0]) / FINE).astype(int)
    iy = np.rint((sy - fy[0]) / FINE).astype(int)
    return fine_map[np.ix_(ix, iy)]


def make(name, scan, index, echoes, *, backwall=None, t_end_mm=50.0, attrs=None):
    """echoes: list of (depth_mm (scalar or map), amplitude map %FSH)."""
    dt = 0.01
    t = np.arange(0, 2 * t_end_mm / (C / 1e3) + dt, dt)
    a = np.zeros((scan.size, index.size, t.size), dtype=np.float32)
    rng = np.random.default_rng(7)
    allechoes = list(echoes) + ([backwall] if backwall is not None else [])
    for depth, amp in allechoes:
        depth = np.broadcast_to(np.asarray(depth, dtype=float), amp.shape)
        for i in range(scan.size):
            t0 = 2 * depth[i] / (C / 1e3)
            pulse = signal.gausspulse(t[None, :] - t0[:, None], fc=F, bw=0.5)
            a[i] += (amp[i][:, None] * pulse).astype(np.float32)
    a += rng.normal(0, 0.5, a.shape).astype(np.float32)
    at = {"part_thickness_mm": 40.0, "probe_bandwidth": 0.5}
    at.update(attrs or {})
    g = make_grid(a, scan_mm=scan, index_mm=index, time_us=t, velocity_m_s=C, probe_frequency_mhz=F,
                  probe_diameter_mm=D, attrs=at)
    path = OUT / f"{name}.nc"
    if path.exists():
        path.unlink()
    save_grid(g, path)
    return path


def run(path, *args):
    cmd = [sys.executable, "-m", "ndtmap", "indications", str(path), *map(str, args), "--format", "json"]
    p = subprocess.run(cmd, capture_output=True, text=True, cwd=ROOT, env={"PYTHONPATH": str(ROOT), "PATH": "/usr/bin"})
    if p.returncode not in (0, 1, 3, 4):
        return {"error": p.stderr.strip()[-400:], "rc": p.returncode}
    try:
        return json.loads(p.stdout)
    except json.JSONDecodeError:
        return {"error": (p.stdout + p.stderr)[-400:], "rc": p.returncode}


def fmt(rec, keys=("depth_mm", "peak_fsh", "peak_db", "length_scan_mm", "length_index_mm", "length_mm", "area_mm2",
                   "backwall_loss_db", "sizing_method")):
    out = []
    for k in keys:
        v = rec.get(k)
        if isinstance(v, float):
            out.append(f"{k}={v:.1f}")
        elif v is not None:
            out.append(f"{k}={v}")
    out.append("flags=" + ",".join(rec.get("flags", [])))
    return " ".join(out)


def report(title, res, truth):
    print(f"\n## {title}\ntruth: {truth}")
    if "error" in res:
        print("ERROR", res)
        return
    for rec in res.get("indications", []):
        print("  ", fmt(rec))


def main():
    scan = np.arange(0.0, 81.0, 1.0)
    index = np.arange(0.0, 61.0, 1.0)
    fx = np.arange(-20.0, 101.0 + FINE / 2, FINE)
    fy = np.arange(-20.0, 81.0 + FINE / 2, FINE)
    X, Y = plan(fx, fy)
    bw_level = 80.0
    z = 30.0

    # 1. plateau with a hot spot
    refl = np.where((abs(X - 40) <= 20) & (abs(Y - 30) <= 15), 0.4, 0.0)
    refl = np.where(np.hypot(X - 45, Y - 32) <= 3, 0.9, refl)
    amp = sample(convolve(refl, airy_psf(z)), fx, fy, scan, index) * 100
    cover = sample(convolve((refl > 0).astype(float), airy_psf(40)), fx, fy, scan, index)
    p = make("hotspot", scan, index, [(z, amp)], backwall=(40.0, bw_level * (1 - cover)))
    report("40 x 30 lamination, 40 %FSH plateau, 6 mm hot spot at 90 %FSH (30 mm)",
           run(p, "--gate-mm", 5, 37, "--threshold-fsh", 10, "--backwall-gate-mm", 37, 45), "40 x 30 mm, 1200 mm2")

    # 2. 40 x 4 strip at 45 deg
    u = ((X - 40) + (Y - 30)) / math.sqrt(2)
    v = (-(X - 40) + (Y - 30)) / math.sqrt(2)
    refl = np.where((abs(u) <= 20) & (abs(v) <= 2), 0.8, 0.0)
    amp = sample(convolve(refl, airy_psf(z)), fx, fy, scan, index) * 100
    p = make("strip45", scan, index, [(z, amp)])
    report("40 x 4 strip at 45 deg (30 mm)", run(p, "--gate-mm", 5, 37, "--threshold-fsh", 10),
           "length 40 mm at 45 deg; extents 31.1 x 31.1 mm; area 160 mm2")

    # 3. ellipse with a rising echo
    ell = ((X - 40) / 12) ** 2 + ((Y - 30) / 8) ** 2 <= 1
    refl = np.where(ell, 0.3 + 0.6 * np.clip((X - 28) / 24, 0, 1), 0.0)
    amp = sample(convolve(refl, airy_psf(z)), fx, fy, scan, index) * 100
    p = make("ellipse", scan, index, [(z, amp)])
    report("24 x 16 ellipse, echo rising 30 -> 90 %FSH along scan (30 mm)",
           run(p, "--gate-mm", 5, 37, "--threshold-fsh", 10), "24 x 16 mm, 301.6 mm2")

    # 4. two laminations side by side in plan at 12 and 24 mm
    r1 = ((X >= 10) & (X <= 40) & (abs(Y - 30) <= 12)).astype(float)
    r2 = ((X > 40) & (X <= 70) & (abs(Y - 30) <= 12)).astype(float)
    a1 = sample(convolve(r1, airy_psf(12)), fx, fy, scan, index) * 60
    a2 = sample(convolve(r2, airy_psf(24)), fx, fy, scan, index) * 60
    sh = sample(convolve(r1, airy_psf(24)), fx, fy, scan, index)
    a2 = a2 * (1 - sh)
    cover = sample(convolve(np.clip(r1 + r2, 0, 1), airy_psf(40)), fx, fy, scan, index)
    p = make("two_depths", scan, index, [(12.0, a1), (24.0, a2)], backwall=(40.0, bw_level * (1 - cover)))
    report("two laminations side by side, 12 mm (scan 10-40) and 24 mm (scan 40-70), 24 mm wide",
           run(p, "--gate-mm", 5, 37, "--threshold-fsh", 20, "--backwall-gate-mm", 37, 45),
           "two indications: 30 x 24 mm at 12 mm and 30 x 24 mm at 24 mm")

    # 5. 1.5 mm disc at 0.6 N: band-averaged Rayleigh integral lateral response
    from helpers import rayleigh  # independent field computation (tests/helpers)

    zd = 0.6 * N
    fs, ws = rayleigh.spectrum(F, 0.5, n=31)
    rr = np.linspace(0, 12, 49)
    inten = np.array([rayleigh.band_averaged_intensity(r, zd, D / 2, fs, ws, C) for r in rr])
    inten = inten / inten[0]
    s2 = np.arange(20.0, 60.0 + 0.25, 0.5)
    i2 = np.arange(10.0, 50.0 + 0.25, 0.5)
    S, I = plan(s2, i2)
    amp = 70 * np.interp(np.hypot(S - 40, I - 30), rr, inten, right=0)
    half = np.interp(0.5, inten[::-1], rr[::-1])
    p = make("nearfield_disc", s2, i2, [(zd, amp)], t_end_mm=30)
    report(f"1.5 mm disc at 0.6 N = {zd:.1f} mm", run(p, "--gate-mm", 3, 25, "--threshold-fsh", 10),
           f"1.5 mm; a point reflector's 6 dB length here (Rayleigh, band-averaged) = {2 * half:.1f} mm: "
           "expect smaller_than_beam/near_field")

    # 6. 150 %FSH echo on a 200 %FSH digitiser
    refl = ((abs(X - 40) <= 10) & (abs(Y - 30) <= 10)).astype(float)
    amp = sample(convolve(refl, airy_psf(z)), fx, fy, scan, index) * 150
    p = make("clip200", scan, index, [(z, amp)], attrs={"digitiser_full_scale_fsh": 200.0})
    report("150 %FSH echo, digitiser full scale 200 %FSH", run(p, "--gate-mm", 5, 37, "--threshold-fsh", 20),
           "not saturated")

    # 7. DAC: shallow 50 %FSH echo at 10 mm and deep 30 %FSH echo at 40 mm at the same positions
    refl = ((abs(X - 40) <= 10) & (abs(Y - 30) <= 10)).astype(float)
    a_sh = sample(convolve(refl, airy_psf(10)), fx, fy, scan, index) * 50
    a_dp = sample(convolve(refl, airy_psf(40)), fx, fy, scan, index) * 30
    p = make("dac", scan, index, [(10.0, a_sh), (40.0, a_dp)], t_end_mm=50, attrs={"part_thickness_mm": 60.0})
    dac = OUT / "dac.csv"
    dac.write_text("depth_mm,amplitude_fsh\n10,80\n40,20\n")
    # by hand: at 10 mm 50/80 -> -4.08 dB; at 40 mm 30/20 -> +3.52 dB: the gate's value re DAC is +3.52 dB
    report("DAC (10 mm 80 %FSH, 40 mm 20 %FSH); echoes 50 %FSH at 10 mm and 30 %FSH at 40 mm",
           run(p, "--gate-mm", 5, 45, "--dac", dac, "--threshold-db", 0), "+3.52 dB re DAC at 40 mm")
    print(f"\nprobe {D} mm {F} MHz, N = {N:.1f} mm, lambda = {LAM:.3f} mm")


if __name__ == "__main__":
    main()
