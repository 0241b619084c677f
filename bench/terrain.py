#!/usr/bin/env python3
"""Terrain-engine benchmark (issue 6): gravgrad's fast engine on a 1000 x 1000 DEM of 25 m cells
and 100,000 points against harmonica's prism layer, all six tensor components, same data, same run.

The DEM (invented rough terrain: hills up to 300 m, rough ground) and the points (80-120 m above
the ground) come from `xtask bench-terrain --mode generate`. gravgrad's fast engine runs on every
point; harmonica's `prism_layer(...).prism_layer.gravity` and gravgrad's all-exact prism sum run on
a random subset and are scaled linearly to all points. The fast engine's error is measured on the
subset against the all-exact sum. Every timed run is its own process, so that GNU time gives its
peak memory (maximum resident set).

Usage (from the repository root, after `cargo build --release -p xtask`):
    python3 bench/terrain.py [--size 1000] [--points 100000] [--subset 40] [--repeat 3]

Prints a Markdown table for docs/performance.md and writes bench-out/terrain.json.
"""
import argparse
import json
import os
import re
import statistics
import subprocess
import sys
import time

import numpy as np

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
TARGET = os.environ.get("CARGO_TARGET_DIR", os.path.join(ROOT, "target"))
XTASK = os.path.join(TARGET, "release", "xtask")
OUT = os.path.join(ROOT, "bench-out", "terrain")
# harmonica field -> our NED component (x north, y east, z down); the mixed vertical components map
# with + (proven in tests/reference/make_reference.py).
FIELDS = {"g_nn": 0, "g_en": 1, "g_nz": 2, "g_ee": 3, "g_ez": 4, "g_zz": 5}


def timed(cmd):
    """Runs cmd under GNU time; returns (stdout, wall s, peak resident MB)."""
    t = time.perf_counter()
    r = subprocess.run(["/usr/bin/time", "-v"] + cmd, capture_output=True, text=True, check=True)
    wall = time.perf_counter() - t
    peak = int(re.search(r"Maximum resident set size \(kbytes\): (\d+)", r.stderr).group(1)) / 1024
    return r.stdout, wall, peak


def xtask(mode, a, extra=()):
    cmd = [XTASK, "bench-terrain", "--mode", mode, "--size", str(a.size), "--points", str(a.points),
           "--subset", str(a.subset), "--threads", str(a.threads), "--accuracy", str(a.accuracy),
           "--seed", str(a.seed), "--out", OUT, *extra]
    out, wall, peak = timed(cmd)
    return json.loads(out), wall, peak


def harmonica_child(a):
    """Runs inside its own process: harmonica on the subset; prints JSON."""
    import harmonica as hm
    import numba

    numba.set_num_threads(a.threads)
    meta = json.load(open(os.path.join(OUT, "meta.json")))
    dem = np.load(os.path.join(OUT, "dem.npy"))  # rows from the north
    pts = np.load(os.path.join(OUT, "points.npy"))
    sub = np.load(os.path.join(OUT, "subset.npy")).astype(int)
    ny, nx, cell = dem.shape[0], dem.shape[1], meta["cell"]
    easting = meta["x_min"] + (np.arange(nx) + 0.5) * cell
    northing = meta["y_max"] - ny * cell + (np.arange(ny) + 0.5) * cell  # ascending
    surface = dem[::-1]  # rows from the south, as northing ascends
    ref = meta["reference_m"]
    density = np.where(surface >= ref, meta["density"], -meta["density"])
    p = pts[sub]
    coords = (p[:, 0], p[:, 1], p[:, 2])
    t0 = time.perf_counter()
    layer = hm.prism_layer((easting, northing), surface, reference=ref, properties={"density": density})
    build_s = time.perf_counter() - t0
    # JIT warm-up on one point.
    for f in FIELDS:
        layer.prism_layer.gravity(tuple(c[:1] for c in coords), field=f)
    out = np.zeros((len(sub), 6))
    t0 = time.perf_counter()
    for f, k in FIELDS.items():
        out[:, k] = layer.prism_layer.gravity(coords, field=f)
    seconds = time.perf_counter() - t0
    np.save(os.path.join(OUT, "harmonica_subset.npy"), out * 1e-9)  # E -> s^-2
    print(json.dumps({"build_s": build_s, "seconds": seconds, "points": len(sub), "version": hm.__version__}))


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--size", type=int, default=1000)
    ap.add_argument("--points", type=int, default=100_000)
    ap.add_argument("--subset", type=int, default=40)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--threads", type=int, default=2)
    ap.add_argument("--accuracy", type=float, default=0.1)
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--harmonica-child", action="store_true", help=argparse.SUPPRESS)
    a = ap.parse_args()
    if a.harmonica_child:
        harmonica_child(a)
        return

    os.makedirs(OUT, exist_ok=True)
    gen, _, _ = xtask("generate", a)
    fast_runs = []
    for _ in range(a.repeat):
        j, wall, peak = xtask("fast", a)
        fast_runs.append((j["fast_s"], j["build_s"], wall, peak, j))
    gen["reference_m"] = fast_runs[0][4]["reference_m"]
    json.dump(gen, open(os.path.join(OUT, "meta.json"), "w"))
    exact, exact_wall, exact_peak = xtask("exact", a)
    h_out, h_wall, h_peak = timed([sys.executable, __file__, "--harmonica-child", "--threads", str(a.threads)])
    h = json.loads(h_out)

    fast = np.load(os.path.join(OUT, "fast_subset.npy"))
    ex = np.load(os.path.join(OUT, "exact_subset.npy"))
    hm_t = np.load(os.path.join(OUT, "harmonica_subset.npy"))
    err = (fast - ex) / 1e-9
    max_e = np.abs(err).max(axis=0)
    rms_e = np.sqrt((err ** 2).mean(axis=0))
    scale = np.abs(ex).max()
    hm_agree = np.abs(hm_t - ex).max() / scale

    fast_s = statistics.median(r[0] for r in fast_runs)
    build_s = statistics.median(r[1] for r in fast_runs)
    fast_wall = statistics.median(r[2] for r in fast_runs)
    fast_peak = max(r[3] for r in fast_runs)
    per_point_h = h["seconds"] / h["points"]
    per_point_x = exact["exact_s"] / exact["points"]
    h_full = per_point_h * a.points
    x_full = per_point_x * a.points
    result = {
        "size": a.size, "points": a.points, "subset": a.subset, "threads": a.threads, "accuracy_e": a.accuracy,
        "harmonica": h["version"], "fast_s": fast_s, "fast_build_s": build_s, "fast_process_s": fast_wall,
        "fast_peak_mb": fast_peak, "fast_runs_s": [r[0] for r in fast_runs],
        "exact_subset_s": exact["exact_s"], "exact_scaled_s": x_full, "exact_peak_mb": exact_peak,
        "harmonica_subset_s": h["seconds"], "harmonica_layer_build_s": h["build_s"], "harmonica_scaled_s": h_full,
        "harmonica_peak_mb": h_peak, "speedup_vs_harmonica": h_full / fast_wall,
        "speedup_vs_exact": x_full / fast_wall, "max_error_e": max_e.tolist(), "rms_error_e": rms_e.tolist(),
        "harmonica_vs_exact_rel": hm_agree, "largest_component_e": scale / 1e-9,
        "max_bound_e": fast_runs[0][4]["max_bound_e"],
    }
    os.makedirs(os.path.join(ROOT, "bench-out"), exist_ok=True)
    with open(os.path.join(ROOT, "bench-out", "terrain.json"), "w") as f:
        json.dump(result, f, indent=2)

    print(f"| | time for {a.points:,} points (s) | ratio to the fast engine | peak memory (MB) |")
    print("|---|---|---|---|")
    print(f"| gravgrad fast engine (whole process: DEM generation, build, all points) | {fast_wall:.1f} | 1 | {fast_peak:.0f} |")
    print(f"| gravgrad all-exact sum ({exact['points']} points, scaled) | {x_full:,.0f} | {x_full / fast_wall:,.0f}× | {exact_peak:.0f} |")
    print(f"| harmonica prism layer ({h['points']} points, scaled) | {h_full:,.0f} | {h_full / fast_wall:,.0f}× | {h_peak:.0f} |")
    print()
    print(f"Fast engine alone: {fast_s:.1f} s (runs {', '.join(f'{r[0]:.1f}' for r in fast_runs)}), "
          f"pyramid build {build_s:.2f} s; {a.threads} threads; harmonica {h['version']}.")
    comps = ["xx", "xy", "xz", "yy", "yz", "zz"]
    print()
    print("| component | " + " | ".join(comps) + " |")
    print("|---|" + "---|" * 6)
    print("| max error (E) | " + " | ".join(f"{v:.4f}" for v in max_e) + " |")
    print("| RMS error (E) | " + " | ".join(f"{v:.4f}" for v in rms_e) + " |")
    print()
    print(f"Largest component on the subset: {scale / 1e-9:.0f} E; harmonica against the all-exact sum: "
          f"{hm_agree:.1e} of it.")


if __name__ == "__main__":
    main()
