#!/usr/bin/env python3
"""End-to-end benchmark: a five-hour flight at 50 Hz with nine pairs (900,000 samples) through
`gravgrad run` — read and check, calibration, solve and rotation, normal field, filter, levelling
and QC, grids and maps, line table, archive and provenance — with the wall time of every stage
(from the run's own log lines), the whole process's wall time and peak resident memory (GNU time),
and, as the peer in the same run, a plain polars read of the same Parquet log.

Usage (from the repository root, after `cargo build --release -p gravgrad-cli -p xtask`):
    python3 bench/five_hour.py [--repeat 3] [--threads 2] [--out bench-out/five-hour]

Prints a Markdown table for docs/performance.md and writes five_hour.json beside the log.
"""
import argparse
import json
import os
import re
import statistics
import subprocess
import sys
import time

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
GRAVGRAD = os.path.join(ROOT, "target", "release", "gravgrad")
XTASK = os.path.join(ROOT, "target", "release", "xtask")

# Stage name → pattern of the log line that reports its time (seconds in group 1).
STAGES = [
    ("read and check", r"read and checked in ([0-9.]+) s"),
    ("positions and normal field", r"positions and normal field ([0-9.]+) s"),
    ("terrain", r"terrain ([0-9.]+) s"),
    ("calibration", r"calibration ([0-9.]+) s"),
    ("solve and rotation", r"solve and rotation ([0-9.]+) s"),
    ("filter, levelling and QC", r"filter, levelling and QC of \d+ lines in ([0-9.]+) s"),
    ("line table (lines.parquet)", r"line table written in ([0-9.]+) s"),
    ("grids", r"tensor built in ([0-9.]+) s"),
    ("grid files and maps", r"grids and maps written in ([0-9.]+) s"),
    ("calibration files, survey.h5, provenance", r"archive and provenance.json written in ([0-9.]+) s"),
]


def run_once(recipe, out, threads):
    """One `gravgrad run`: (wall s, peak RSS MB, {stage: s})."""
    t0 = time.perf_counter()
    r = subprocess.run(
        ["/usr/bin/time", "-v", GRAVGRAD, "--threads", str(threads), "run", recipe, "--out", out],
        stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
    wall = time.perf_counter() - t0
    if r.returncode != 0:
        sys.exit(f"gravgrad run failed:\n{r.stderr}")
    rss = None
    stages = {}
    for line in r.stderr.splitlines():
        if "Maximum resident set size" in line:
            rss = int(line.split(":")[1]) / 1024
        for name, pat in STAGES:
            m = re.search(pat, line)
            if m and name not in stages:
                stages[name] = float(m.group(1))
    return wall, rss, stages


def polars_read(path):
    """In-process wall time of a plain polars read of the log (import excluded), fresh process."""
    code = ("import time, polars as pl\n"
            f"t = time.perf_counter(); df = pl.read_parquet({path!r}); "
            "print(time.perf_counter() - t, df.height)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    return float(out.stdout.split()[0])


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--threads", type=int, default=2)
    ap.add_argument("--out", default=os.path.join(ROOT, "bench-out", "five-hour"))
    a = ap.parse_args()
    os.makedirs(a.out, exist_ok=True)
    log = os.path.join(a.out, "flight.parquet")
    instrument = os.path.join(a.out, "instrument.toml")
    if not os.path.exists(log):
        subprocess.run([XTASK, "sample-log", "--out", log, "--rows", "900000", "--rate", "50",
                        "--pairs", "9", "--instrument", instrument], check=True)
    recipe = os.path.join(a.out, "recipe.toml")
    with open(recipe, "w") as f:
        f.write('layout = "recipe/1"\n[input]\nflights = ["flight.parquet"]\n'
                '[instrument]\npath = "instrument.toml"\n')
    runs, reads = [], []
    for _ in range(a.repeat):
        reads.append(polars_read(log))
        runs.append(run_once(recipe, os.path.join(a.out, "products"), a.threads))
    med = lambda xs: statistics.median(xs)
    wall = med([r[0] for r in runs])
    rss = max(r[1] for r in runs)
    read = med(reads)
    print(f"five-hour flight, 900,000 samples at 50 Hz, nine pairs; {a.threads} threads; "
          f"medians of {a.repeat}")
    print("| stage | time (s) | share of the run |\n|---|---|---|")
    result = {"runs": [{"wall_s": w, "peak_rss_mb": m, "stages_s": s} for w, m, s in runs],
              "polars_read_s": reads, "threads": a.threads}
    for name, _ in STAGES:
        vals = [r[2][name] for r in runs if name in r[2]]
        if vals:
            print(f"| {name} | {med(vals):.2f} | {100 * med(vals) / wall:.0f}% |")
    print(f"| whole process (wall) | {wall:.2f} | 100% |")
    print(f"\npeak resident memory {rss:.0f} MB (goal ≤ 4096 MB); plain polars read of the log "
          f"{read:.3f} s, whole run / read = {wall / read:.0f}×; runs {[round(r[0], 2) for r in runs]}")
    with open(os.path.join(a.out, "five_hour.json"), "w") as f:
        json.dump(result, f, indent=1)


if __name__ == "__main__":
    main()
