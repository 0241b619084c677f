#!/usr/bin/env python3
"""Ingest benchmark: `gravgrad check` (read + validate + lines) against a plain polars read of the
same file, in the same run, interleaved, medians of several repetitions.

Usage (from the repository root, after `cargo build --release -p gravgrad-cli -p xtask`):
    python3 bench/ingest.py [--rows 1000000] [--repeat 5] [--out bench-out]

Writes bench-out/ingest.json and prints a Markdown table for docs/performance.md.
The log has 30 columns: time, 12 navigation channels, 8 accelerometer pairs (16 columns) and line.
"""
import argparse
import json
import os
import platform
import statistics
import subprocess
import sys
import time

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
GRAVGRAD = os.path.join(ROOT, "target", "release", "gravgrad")
XTASK = os.path.join(ROOT, "target", "release", "xtask")

POLARS_READ = {
    "csv": "pl.read_csv(path, comment_prefix='#')",
    "parquet": "pl.read_parquet(path)",
}


def peak_rss_kb(cmd):
    """Peak resident memory of a command, from GNU time -v."""
    r = subprocess.run(["/usr/bin/time", "-v"] + cmd, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True, check=True)
    for line in r.stderr.splitlines():
        if "Maximum resident set size" in line:
            return int(line.split(":")[1])
    raise RuntimeError("no RSS in time -v output")


def polars_once(path, fmt):
    """In-process wall time of one plain polars read (import excluded), measured in a fresh process
    so that the page cache is the only state shared with the gravgrad runs."""
    code = (
        "import time, polars as pl\n"
        f"path = {path!r}\n"
        "t = time.perf_counter()\n"
        f"df = {POLARS_READ[fmt]}\n"
        "print(time.perf_counter() - t, df.height, df.width)\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout.split()
    return float(out[0]), int(out[1]), int(out[2])


def gravgrad_once(path):
    """Whole-process wall time of `gravgrad check` (start-up and report included)."""
    t = time.perf_counter()
    r = subprocess.run([GRAVGRAD, "check", "--quiet", "--json", path], capture_output=True, text=True)
    dt = time.perf_counter() - t
    if r.returncode != 0:
        raise RuntimeError(f"gravgrad check failed on {path}: {r.stdout[-2000:]} {r.stderr[-2000:]}")
    rep = json.loads(r.stdout)
    return dt, rep[0]["flights"][0]["rows"], len(rep[0]["flights"][0]["channels"]) + 1


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--rows", type=int, default=1_000_000)
    ap.add_argument("--repeat", type=int, default=5)
    ap.add_argument("--out", default=os.path.join(ROOT, "bench-out"))
    a = ap.parse_args()
    os.makedirs(a.out, exist_ok=True)
    import polars as pl

    results = {"rows": a.rows, "columns": 30, "repeat": a.repeat, "polars": pl.__version__,
               "machine": f"{platform.machine()}, {os.cpu_count()} cores", "formats": {}}
    table_mb = a.rows * 30 * 8 / 1e6
    for fmt in ["csv", "parquet"]:
        path = os.path.join(a.out, f"log{a.rows}.{fmt}")
        if not os.path.exists(path):
            subprocess.run([XTASK, "sample-log", "--out", path, "--rows", str(a.rows), "--pairs", "8", "--no-extras"], check=True)
        # Warm the page cache once for both readers.
        polars_once(path, fmt)
        g_times, p_times = [], []
        for _ in range(a.repeat):
            dt, rows, cols = gravgrad_once(path)
            assert rows == a.rows and cols == 30, (rows, cols)
            g_times.append(dt)
            pt, prow, pcol = polars_once(path, fmt)
            assert prow == a.rows and pcol == 30, (prow, pcol)
            p_times.append(pt)
        g_rss = peak_rss_kb([GRAVGRAD, "check", "--quiet", "--json", path])
        base_rss = peak_rss_kb([sys.executable, "-c", "import polars"])
        p_rss = peak_rss_kb([sys.executable, "-c", f"import polars as pl; path={path!r}; df={POLARS_READ[fmt]}"])
        g, p = statistics.median(g_times), statistics.median(p_times)
        results["formats"][fmt] = {
            "file_mb": os.path.getsize(path) / 1e6,
            "gravgrad_check_s": g_times, "polars_read_s": p_times,
            "median_gravgrad_s": g, "median_polars_s": p, "ratio": g / p,
            "gravgrad_peak_mb": g_rss / 1e3, "polars_peak_mb_above_import": (p_rss - base_rss) / 1e3,
            "table_mb": table_mb, "gravgrad_peak_over_table": g_rss / 1e3 / table_mb,
        }
    with open(os.path.join(a.out, "ingest.json"), "w") as f:
        json.dump(results, f, indent=2)
    print(f"| format | file (MB) | gravgrad check (s) | polars read (s) | ratio | gravgrad peak (MB) | peak / table | polars peak above import (MB) |")
    print("|---|---|---|---|---|---|---|---|")
    for fmt, r in results["formats"].items():
        print(f"| {fmt} | {r['file_mb']:.0f} | {r['median_gravgrad_s']:.3f} | {r['median_polars_s']:.3f} | {r['ratio']:.2f} | "
              f"{r['gravgrad_peak_mb']:.0f} | {r['gravgrad_peak_over_table']:.2f} | {r['polars_peak_mb_above_import']:.0f} |")
    print(f"\nrows {a.rows}, 30 columns, table {table_mb:.0f} MB in memory, polars {pl.__version__}, medians of {a.repeat}")


if __name__ == "__main__":
    main()
