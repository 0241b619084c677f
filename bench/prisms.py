#!/usr/bin/env python3
"""Prism-tensor benchmark: gravgrad-forward against harmonica's prism computation, same prisms and
points, same run, on one and two threads. One evaluation = one prism at one point, all six tensor
components (harmonica computes one component per call, so its six calls are summed).

Usage (from the repository root, after `cargo build --release -p xtask`):
    python3 bench/prisms.py [--side 60] [--points 20] [--repeat 5]

Prints a Markdown table for docs/performance.md and writes bench-out/prisms.json.
"""
import argparse
import json
import os
import statistics
import subprocess
import time

import numpy as np

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
XTASK = os.path.join(ROOT, "target", "release", "xtask")
FIELDS = ["g_nn", "g_en", "g_nz", "g_ee", "g_ez", "g_zz"]


def geometry(n, k):
    """The same formulas as xtask/src/benchprisms.rs, in harmonica's (easting, northing, upward)."""
    prisms = []
    for i in range(n):
        for j in range(n):
            h = 50.0 + 30.0 * np.sin(i / 7.0) * np.cos(j / 5.0)
            x, y = i * 25.0, j * 25.0  # north, east
            prisms.append([y, y + 25.0, x, x + 25.0, 0.0, h])  # west, east, south, north, bottom, top
    span = n * 25.0
    north, east = [], []
    for a in range(k):
        for b in range(k):
            north.append((a + 0.5) * span / k)
            east.append((b + 0.37) * span / k)
    coords = (np.array(east), np.array(north), np.full(len(north), 250.0))
    return np.array(prisms), coords


def harmonica_time(prisms, coords, threads, repeat):
    import harmonica as hm
    import numba

    numba.set_num_threads(threads)
    dens = np.full(len(prisms), 2670.0)
    # Warm up the JIT on a small problem.
    for f in FIELDS:
        hm.prism_gravity(tuple(c[:2] for c in coords), prisms[:4], dens[:4], field=f)
    times = []
    for _ in range(repeat):
        t = time.perf_counter()
        out = {f: hm.prism_gravity(coords, prisms, dens, field=f) for f in FIELDS}
        times.append(time.perf_counter() - t)
    return statistics.median(times), out


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--side", type=int, default=60)
    ap.add_argument("--points", type=int, default=20)
    ap.add_argument("--repeat", type=int, default=5)
    a = ap.parse_args()
    import harmonica as hm

    prisms, coords = geometry(a.side, a.points)
    pairs = len(prisms) * len(coords[0])
    rows = []
    for threads in [1, 2]:
        h_s, h_out = harmonica_time(prisms, coords, threads, a.repeat)
        r = subprocess.run([XTASK, "bench-prisms", "--side", str(a.side), "--points", str(a.points),
                            "--threads", str(threads), "--repeat", str(a.repeat)], capture_output=True, text=True, check=True)
        g = json.loads(r.stdout)
        # Agreement on the first points' Gzz (Eötvös from harmonica, s⁻² from gravgrad).
        agree = max(abs(g["switched"]["first_gzz"][i] / 1e-9 - h_out["g_zz"][i]) / abs(h_out["g_zz"][i]) for i in range(3))
        rows.append({"threads": threads, "pairs": pairs, "harmonica_s": h_s, "harmonica_pairs_per_s": pairs / h_s,
                     "gravgrad_switched_s": g["switched"]["median_s"], "gravgrad_closed_s": g["closed"]["median_s"],
                     "gravgrad_pairs_per_s": pairs / g["switched"]["median_s"], "gravgrad_closed_pairs_per_s": pairs / g["closed"]["median_s"],
                     "speedup": h_s / g["switched"]["median_s"], "speedup_closed": h_s / g["closed"]["median_s"], "gzz_rel_diff": agree})
    os.makedirs(os.path.join(ROOT, "bench-out"), exist_ok=True)
    with open(os.path.join(ROOT, "bench-out", "prisms.json"), "w") as f:
        json.dump({"harmonica": hm.__version__, "rows": rows}, f, indent=2)
    print("| threads | prism·point pairs | harmonica (pairs/s) | gravgrad `tensor` (pairs/s) | speed-up | gravgrad closed form only (pairs/s) | speed-up | Gzz agreement |")
    print("|---|---|---|---|---|---|---|---|")
    for r in rows:
        print(f"| {r['threads']} | {r['pairs']:,} | {r['harmonica_pairs_per_s']:.3g} | {r['gravgrad_pairs_per_s']:.3g} | {r['speedup']:.1f}× | "
              f"{r['gravgrad_closed_pairs_per_s']:.3g} | {r['speedup_closed']:.1f}× | {r['gzz_rel_diff']:.1e} |")
    print(f"\nharmonica {hm.__version__}, six components per pair, medians of {a.repeat}")


if __name__ == "__main__":
    main()
