#!/usr/bin/env python3
"""Minimum-curvature gridding (issue 8): gravgrad's gridder against GMT `surface` on the same
points, grid and tension, compared and timed in the same run.

Data (invented): Gzz in Eotvos of four buried point masses (spheres) and a regional slope, sampled
along east-west survey lines 200 m apart (the lines wander by +-15 m), every 10 m along line, with
Gaussian noise (0.1 E by default, --noise); a few tie lines north-south every 2 km. Grid: cell-centred ("pixel
registration", GMT -r), square cells; the region's edges are the outer cell edges.

Block means: gravgrad replaces the data in each cell by their block mean before gridding (on by
default). `xtask bench-grid --block-means-out` writes those block means, and GMT `surface` is given
them, so both grid the same points, one per cell (GMT's own nearest-datum selection then has
nothing to drop). gravgrad reads the raw points (its block means are the ones written); GMT reads
the block means: `gmt surface ... -r -T<t> -C<limit> -N<sweeps>`, then `gmt grd2xyz -ZTLd` dumps
GMT's grid as raw float64, north row first (the order xtask writes). The convergence limit is the
same absolute value for both. The timed part of GMT is the `surface` call alone on the block means
(`gmt blockmean` on the raw points is timed apart); of gravgrad, the whole xtask process (reading
the raw CSV and the block means included).

Usage (from the repository root, after `cargo build --release -p xtask`):
    python3 bench/grid.py [--size 20000] [--cell 50] [--tension 0.25] [--repeat 5]
    python3 bench/grid.py --reference tests/reference/grid     # the small committed case

--reference writes the small case (noise-free and with 0.5 E of noise): the raw points, GMT
`blockmean`'s means of them and GMT `surface`'s grids of gravgrad's block means (tension 0 and
0.25) as text for the Rust test (crates/gravgrad-grid/tests/mincurv.rs), which then needs no GMT;
with --check it instead compares a fresh GMT run with the committed files and gravgrad's grid (CI;
needs `cargo build --release -p xtask` and GMT).
"""
import argparse
import json
import os
import statistics
import subprocess
import sys
import tempfile
import time

import numpy as np

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
TARGET = os.environ.get("CARGO_TARGET_DIR", os.path.join(ROOT, "target"))
XTASK = os.path.join(TARGET, "release", "xtask")
G = 6.67430e-11


def field(x, y, size):
    """Gzz (E) at 80 m above ground of four point masses (x east, y north, m) plus a gentle slope."""
    bodies = [  # (east, north, depth below ground m, mass kg), positions as fractions of the size
        (0.30, 0.35, 400.0, 4.0e11),
        (0.62, 0.58, 700.0, 1.2e12),
        (0.45, 0.80, 300.0, -1.5e11),
        (0.80, 0.25, 550.0, 6.0e11),
    ]
    h = 80.0
    g = 2.0 + 1.5e-4 * x - 0.8e-4 * y
    for fe, fn, d, m in bodies:
        dx, dy, dz = x - fe * size, y - fn * size, d + h
        r2 = dx * dx + dy * dy + dz * dz
        g = g + G * m * (3 * dz * dz - r2) / r2 ** 2.5 * 1e9
    return g


def survey(size, seed, noise=0.1):
    """Points along lines: (x, y, value), with `noise` E of Gaussian noise."""
    rng = np.random.default_rng(seed)
    xs, ys = [], []
    step, spacing = 10.0, 200.0
    for k, y0 in enumerate(np.arange(spacing / 2, size, spacing)):
        x = np.arange(-200.0, size + 200.0, step) + rng.uniform(0, step)
        y = y0 + 15.0 * np.sin(x / 900.0 + k) + rng.normal(0, 2.0, x.size)
        xs.append(x)
        ys.append(y)
    for x0 in np.arange(1000.0, size, 2000.0):
        y = np.arange(-200.0, size + 200.0, step) + rng.uniform(0, step)
        xs.append(x0 + 10.0 * np.sin(y / 700.0))
        ys.append(y)
    x, y = np.concatenate(xs), np.concatenate(ys)
    v = field(x, y, size) + rng.normal(0, noise, x.size)
    return np.column_stack([x, y, v])


def write_points(path, pts):
    np.savetxt(path, pts, fmt="%.3f,%.3f,%.6f")


def run_ours(pts_csv, size, cell, tension, limit, sweeps, threads, out_bin, means_csv=None):
    n = int(round(size / cell))
    cmd = [XTASK, "bench-grid", "--points", pts_csv, "--west", "0", "--north", str(size),
           "--nx", str(n), "--ny", str(n), "--cell", str(cell), "--tension", str(tension),
           "--convergence", repr(limit), "--max-sweeps", str(sweeps), "--threads", str(threads),
           "--out", out_bin]
    if means_csv:
        cmd += ["--block-means-out", means_csv]
    t = time.perf_counter()
    r = subprocess.run(cmd, capture_output=True, text=True, check=True)
    wall = time.perf_counter() - t
    return np.fromfile(out_bin, "<f8").reshape(n, n), wall, json.loads(r.stdout)


def run_gmt(pts_csv, size, cell, tension, limit, sweeps, out_nc):
    n = int(round(size / cell))
    # Run in the output's folder: GMT may leave a gmt.history file in its working folder.
    pts_csv, out_nc = os.path.abspath(pts_csv), os.path.abspath(out_nc)
    cwd = os.path.dirname(out_nc)
    cmd = ["gmt", "surface", "--GMT_HISTORY=false", pts_csv, f"-R0/{size:g}/0/{size:g}", f"-I{cell:g}", "-r",
           f"-T{tension:g}", f"-C{limit!r}", f"-N{sweeps}", f"-G{out_nc}"]
    t = time.perf_counter()
    subprocess.run(cmd, capture_output=True, text=True, check=True, cwd=cwd)
    wall = time.perf_counter() - t
    raw = subprocess.run(["gmt", "grd2xyz", "--GMT_HISTORY=false", out_nc, "-ZTLd"],
                         capture_output=True, check=True, cwd=cwd).stdout
    return np.frombuffer(raw, "<f8").reshape(n, n), wall, " ".join(cmd)


def run_blockmean(pts_csv, size, cell):
    """GMT's block means of the raw points on the same cells; returns (array x y z, wall s)."""
    pts_csv = os.path.abspath(pts_csv)
    cmd = ["gmt", "blockmean", "--GMT_HISTORY=false", "--FORMAT_FLOAT_OUT=%.17g", pts_csv,
           f"-R0/{size:g}/0/{size:g}", f"-I{cell:g}", "-r"]
    with tempfile.TemporaryDirectory() as cwd:  # GMT may leave a gmt.history in its folder
        t = time.perf_counter()
        out = subprocess.run(cmd, capture_output=True, text=True, check=True, cwd=cwd).stdout
        wall = time.perf_counter() - t
    return np.loadtxt(out.splitlines()), wall, " ".join(cmd)


def limit_of(pts):
    """1e-4 of the data's RMS about their least-squares plane (gravgrad's default)."""
    a = np.column_stack([np.ones(len(pts)), pts[:, 0], pts[:, 1]])
    coef, *_ = np.linalg.lstsq(a, pts[:, 2], rcond=None)
    return 1e-4 * float(np.sqrt(np.mean((pts[:, 2] - a @ coef) ** 2)))


def compare(ours, gmt, pts):
    d = ours - gmt
    rms_data = float(np.sqrt(np.mean(pts[:, 2] ** 2)))
    rms_diff = float(np.sqrt(np.mean(d ** 2)))
    return {"rms_diff": rms_diff, "rms_data": rms_data, "ratio": rms_diff / rms_data,
            "max_abs_diff": float(np.abs(d).max())}


def reference(args):
    """The small committed case: 4 km square, 50 m cells (80 x 80), noise-free and with 0.5 E of
    noise, tension 0 and 0.25."""
    size, cell = 4000.0, 50.0
    os.makedirs(args.reference, exist_ok=True)
    worst = 0.0
    for noise in (0.0, 0.5):
        tag = f"n{int(round(noise * 10)):02d}"
        pts_csv = os.path.join(args.reference, f"points_{tag}.csv")
        if not args.check:
            write_points(pts_csv, survey(size, seed=8, noise=noise))
        pts = np.loadtxt(pts_csv, delimiter=",")
        limit = 1e-6 * float(np.sqrt(np.mean(pts[:, 2] ** 2)))
        with tempfile.TemporaryDirectory() as tmp:
            means_csv = os.path.join(tmp, "block_means.csv")
            run_ours(pts_csv, size, cell, 0.0, limit, 20000, 1, os.path.join(tmp, "o.bin"),
                     means_csv)
            bm, _, bm_cmd = run_blockmean(pts_csv, size, cell)
            bm_name = os.path.join(args.reference, f"gmt_blockmean_{tag}.txt")
            if args.check:
                committed = np.loadtxt(bm_name)
                if committed.shape != bm.shape or np.abs(committed - bm).max() > 1e-6:
                    sys.exit(f"{bm_name}: installed GMT blockmean differs from the committed one")
            else:
                with open(bm_name, "w") as f:
                    f.write(f"# {bm_cmd.replace(os.path.abspath(pts_csv), os.path.basename(pts_csv))}\n"
                            f"# GMT {gmt_version()}; mean easting, northing (m), value (E) per cell\n")
                    np.savetxt(f, bm, fmt="%.10f")
                print("wrote", bm_name)
            for t in (0.0, 0.25):
                gmt, _, cmd = run_gmt(means_csv, size, cell, t, limit, 20000,
                                      os.path.join(tmp, "g.nc"))
                cmd = cmd.replace(means_csv, f"<gravgrad block means of points_{tag}.csv>")
                name = os.path.join(args.reference, f"gmt_surface_{tag}_t{int(t * 100):02d}.txt")
                if args.check:
                    committed = np.loadtxt(name)
                    ours, _, _ = run_ours(pts_csv, size, cell, t, limit, 20000, 1,
                                          os.path.join(tmp, "o.bin"))
                    c_old = compare(committed, gmt, pts)
                    c_ours = compare(ours, gmt, pts)
                    worst = max(worst, c_ours["ratio"])
                    print(f"noise {noise} T={t}: committed vs installed GMT {c_old}; "
                          f"gravgrad vs installed GMT {c_ours}")
                    if c_old["ratio"] > 1e-3 or c_ours["ratio"] > 0.01:
                        sys.exit(f"noise {noise}, tension {t}: disagreement beyond the limits")
                else:
                    with open(name, "w") as f:
                        f.write(f"# {cmd}\n# GMT {gmt_version()}; rows north to south, columns "
                                f"west to east; {gmt.shape[0]} x {gmt.shape[1]} cells of {cell:g} m, "
                                f"region 0/{size:g}/0/{size:g} m, convergence {limit!r}\n")
                        np.savetxt(f, gmt, fmt="%.6f")
                    print("wrote", name)
    if args.check:
        print(f"ok: largest RMS difference {100 * worst:.3f}% of the data's RMS (limit 1%)")


def gmt_version():
    return subprocess.run(["gmt", "--version"], capture_output=True, text=True).stdout.strip()


def main():
    p = argparse.ArgumentParser()
    p.add_argument("--size", type=float, default=20000.0)
    p.add_argument("--cell", type=float, default=50.0)
    p.add_argument("--tension", type=float, nargs="+", default=[0.0, 0.25])
    p.add_argument("--repeat", type=int, default=5)
    p.add_argument("--threads", type=int, default=2)
    p.add_argument("--sweeps", type=int, default=2000)
    p.add_argument("--noise", type=float, default=0.1)
    p.add_argument("--reference")
    p.add_argument("--check", action="store_true")
    args = p.parse_args()
    if args.reference:
        return reference(args)
    pts = survey(args.size, seed=1, noise=args.noise)
    limit = limit_of(pts)
    print(f"{len(pts)} points (noise {args.noise:g} E), grid {int(args.size / args.cell)}^2 cells of {args.cell:g} m, "
          f"convergence limit {limit:.3g} E, GMT {gmt_version()}, {args.threads} threads for gravgrad")
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        csv = os.path.join(tmp, "points.csv")
        means = os.path.join(tmp, "block_means.csv")
        write_points(csv, pts)
        # The block means once (untimed); each timed gravgrad run computes them again itself.
        run_ours(csv, args.size, args.cell, 0.0, limit, args.sweeps, args.threads,
                 os.path.join(tmp, "o.bin"), means)
        n_means = len(np.loadtxt(means, delimiter=","))
        ts_b = [run_blockmean(csv, args.size, args.cell)[1] for _ in range(args.repeat)]
        print(f"{n_means} block means; gmt blockmean on the raw points: "
              f"{statistics.median(ts_b):.3f} s (median of {args.repeat})")
        for t in args.tension:
            ts_o, ts_g = [], []
            for _ in range(args.repeat):  # interleaved
                ours, w_o, rep = run_ours(csv, args.size, args.cell, t, limit, args.sweeps,
                                          args.threads, os.path.join(tmp, "o.bin"))
                gmt, w_g, cmd = run_gmt(means, args.size, args.cell, t, limit, args.sweeps,
                                        os.path.join(tmp, "g.nc"))
                ts_o.append(w_o)
                ts_g.append(w_g)
            c = compare(ours, gmt, pts)
            mo, mg = statistics.median(ts_o), statistics.median(ts_g)
            rows.append((t, c, mo, mg))
            print(f"  T={t}: {cmd}")
            print(f"  gravgrad sweeps per level {[l['sweeps'] for l in rep['levels']]}, "
                  f"converged {rep['converged']}, read {rep['read_s']:.3f} s, "
                  f"grid {rep['grid_s']:.3f} s")
    print("\n| tension | RMS difference (E) | data RMS (E) | difference / data RMS | max abs difference (E) "
          "| gravgrad (s) | GMT surface (s) | ratio |")
    print("|---|---|---|---|---|---|---|---|")
    for t, c, mo, mg in rows:
        print(f"| {t:g} | {c['rms_diff']:.4f} | {c['rms_data']:.3f} | {100 * c['ratio']:.3f}% | "
              f"{c['max_abs_diff']:.3f} | {mo:.3f} | {mg:.3f} | {mo / mg:.2f} |")


if __name__ == "__main__":
    main()
