#!/usr/bin/env python3
"""Writes the input corpus used by the end-to-end tests: good files in every container, written by
the common Python writers (pyarrow, polars, h5py), and bad files each broken in one known place.

The expected location of each bad file's error is listed in ../end_to_end/corpus.rs, next to the
test that checks it. Run from this folder: python3 make_corpus.py (needs numpy, pyarrow, polars,
h5py). The outputs are committed, so the tests need no Python.
"""
import os
import sys

import h5py
import numpy as np
import polars as pl
import pyarrow as pa
import pyarrow.parquet as pq

HERE = os.path.dirname(os.path.abspath(__file__))
# `--out DIR` writes elsewhere (CI regenerates the corpus with the current writers and checks it).
OUT = sys.argv[sys.argv.index("--out") + 1] if "--out" in sys.argv else HERE
GOOD = os.path.join(OUT, "good")
BAD = os.path.join(OUT, "bad")

COLUMNS = ["time", "lat", "lon", "height", "roll", "pitch", "heading", "wx", "wy", "wz",
           "fx", "fy", "fz", "zz_a", "zz_b", "xx_a", "xx_b", "line"]
N = 40
RATE = 10.0


def base_table():
    """A short clean log at 10 Hz: 40 rows, one in-line pair along z and one along x."""
    t = 1.4e9 + np.arange(N) / RATE
    k = np.arange(N)
    cols = {
        "time": t,
        "lat": -27.35 + 1e-5 * k,
        "lon": 134.1 + 6e-4 * k,
        "height": 420.0 + 0.1 * np.sin(k / 5.0),
        "roll": 0.01 * np.cos(k),
        "pitch": -0.02 * np.sin(k),
        "heading": 91.5 + 0.01 * np.sin(k / 3.0),
        "wx": 2.1e-5 + 1e-6 * np.sin(k),
        "wy": -8.1e-5 + 1e-6 * np.cos(k),
        "wz": 5.1e-5 + 0.0 * k,
        "fx": 0.018 + 0.01 * np.sin(k / 2.0),
        "fy": -0.011 + 0.01 * np.cos(k / 2.0),
        "fz": -9.7742 + 0.3 * np.sin(k / 4.0),
    }
    cols["zz_a"] = cols["fz"] + 3.1e-7
    cols["zz_b"] = cols["fz"] - 3.1e-7
    cols["xx_a"] = cols["fx"] - 1.5e-7
    cols["xx_b"] = cols["fx"] + 1.5e-7
    cols["line"] = np.full(N, 101, dtype=np.int64)
    return cols


DECIMALS = {"time": 4, "lat": 9, "lon": 9, "height": 3, "roll": 5, "pitch": 5, "heading": 5,
            "wx": 10, "wy": 10, "wz": 10, "fx": 7, "fy": 7, "fz": 7, "line": 0}


def cell(name, v):
    if name == "line":
        return str(int(v))
    return f"{v:.{DECIMALS.get(name, 12)}f}"


def csv_lines(cols):
    lines = [",".join(COLUMNS)]
    for i in range(N):
        lines.append(",".join(cell(c, cols[c][i]) for c in COLUMNS))
    return lines


def write_text(path, lines, newline="\n", bom=False, trailing=True):
    text = newline.join(lines) + (newline if trailing else "")
    with open(path, "wb") as f:
        if bom:
            f.write(b"\xef\xbb\xbf")
        f.write(text.encode("utf-8"))


def set_cell(lines, row, column, text):
    """Replaces a cell; `row` is the layout's row number (header = 1)."""
    fields = lines[row - 1].split(",")
    fields[COLUMNS.index(column)] = text
    lines[row - 1] = ",".join(fields)


def main():
    os.makedirs(GOOD, exist_ok=True)
    os.makedirs(BAD, exist_ok=True)
    cols = base_table()
    lines = csv_lines(cols)

    # --- good files, one per container and writer -------------------------------------------
    write_text(os.path.join(GOOD, "clean.csv"), ["# layout: raw-flight/1"] + lines)
    write_text(os.path.join(GOOD, "bom_crlf.csv"), lines, newline="\r\n", bom=True, trailing=False)
    table = pa.table({c: pa.array(cols[c]) for c in COLUMNS})
    pq.write_table(table, os.path.join(GOOD, "pyarrow.parquet"), compression="snappy")
    pl.DataFrame({c: cols[c] for c in COLUMNS}).write_parquet(os.path.join(GOOD, "polars.parquet"))
    with h5py.File(os.path.join(GOOD, "h5py.h5"), "w") as f:
        for name in ["flight_a", "flight_b"]:
            g = f.create_group(name)
            g.attrs["layout"] = "raw-flight/1"
            for c in COLUMNS:
                g.create_dataset(c, data=cols[c], chunks=(16,), compression="gzip")

    # --- a gradiometer log without navigation, and a 2 Hz navigation table for it -------------
    nav_cols = ["lat", "lon", "height", "roll", "pitch", "heading"]
    grad_cols = [c for c in COLUMNS if c not in nav_cols]
    grad_lines = [",".join(grad_cols)] + [",".join(cell(c, cols[c][i]) for c in grad_cols) for i in range(N)]
    write_text(os.path.join(GOOD, "grad_only.csv"), grad_lines)
    tn = 1.4e9 - 0.5 + 0.5 * np.arange(11)  # 2 Hz, from 0.5 s before to 4.5 s after the log start
    nav = [",".join(["time"] + nav_cols)]
    for i, t in enumerate(tn):
        heading = (358.0 + 1.0 * i) % 360.0  # crosses north between rows
        nav.append(f"{t:.4f},{-27.35 + 1e-5 * i:.9f},{134.1 + 3e-3 * i:.9f},{420.0:.3f},{0.01:.5f},{-0.02:.5f},{heading:.5f}")
    write_text(os.path.join(GOOD, "nav_2hz.csv"), nav)
    write_text(os.path.join(BAD, "nav_ends_early.csv"), nav[:8])  # last nav time 1.4e9 + 2.5 s

    # --- bad CSV files ------------------------------------------------------------------------
    def bad(name, edit, **kw):
        ls = list(lines)
        edit(ls)
        write_text(os.path.join(BAD, name), ls, **kw)

    bad("missing_column.csv", lambda ls: ls.__setitem__(slice(None), [",".join(x.split(",")[:12] + x.split(",")[13:]) for x in ls]))
    bad("text_in_number.csv", lambda ls: set_cell(ls, 7, "fy", "0.0x12"))
    bad("nan_value.csv", lambda ls: set_cell(ls, 9, "wz", "NaN"))
    bad("empty_cell.csv", lambda ls: set_cell(ls, 4, "height", ""))
    def backwards(ls):
        ls[11], ls[12] = ls[12], ls[11]  # rows 12 and 13 swapped: time drops at row 13
    bad("time_backwards.csv", backwards)
    bad("time_repeated.csv", lambda ls: set_cell(ls, 15, "time", cell("time", cols["time"][12])))
    bad("jittered_interval.csv", lambda ls: set_cell(ls, 20, "time", f"{cols['time'][17] + 0.104:.4f}"))
    bad("latitude_95.csv", lambda ls: set_cell(ls, 6, "lat", "95.0"))
    bad("longitude_200.csv", lambda ls: set_cell(ls, 8, "lon", "200.0"))
    bad("huge_value.csv", lambda ls: set_cell(ls, 10, "fx", "1e308"))
    bad("rate_in_degrees.csv", lambda ls: set_cell(ls, 11, "wz", "45.0"))
    bad("infinite_value.csv", lambda ls: set_cell(ls, 5, "zz_a", "inf"))
    bad("line_not_integer.csv", lambda ls: set_cell(ls, 16, "line", "101.5"))
    def truncate(ls):
        ls[-1] = ",".join(ls[-1].split(",")[:9])
    bad("truncated_last_row.csv", truncate, trailing=False)
    bad("semicolons.csv", lambda ls: ls.__setitem__(slice(None), [x.replace(",", ";") for x in ls]))
    bad("blank_row_inside.csv", lambda ls: ls.insert(20, ""))
    bad("bom_with_error.csv", lambda ls: set_cell(ls, 5, "fz", "abc"), bom=True)
    bad("crlf_with_error.csv", lambda ls: set_cell(ls, 41, "line", "x"), newline="\r\n")
    write_text(os.path.join(BAD, "empty.csv"), [], trailing=False)
    write_text(os.path.join(BAD, "header_only.csv"), lines[:1])

    # --- bad binary files, written by the common writers ---------------------------------------
    t = {c: pa.array(cols[c]) for c in COLUMNS if c != "heading"}
    pq.write_table(pa.table(t), os.path.join(BAD, "missing_column.parquet"))
    t = {c: pa.array(cols[c]) for c in COLUMNS}
    t["pitch"] = pa.array([f"{v:.5f}" for v in cols["pitch"]])
    pq.write_table(pa.table(t), os.path.join(BAD, "text_column.parquet"))
    t = {c: pa.array(cols[c]) for c in COLUMNS}
    fy = [float(v) for v in cols["fy"]]
    t["fy"] = pa.array([None if i == 22 else v for i, v in enumerate(fy)], type=pa.float64())
    pq.write_table(pa.table(t), os.path.join(BAD, "null_value.parquet"))
    with open(os.path.join(BAD, "not_parquet.parquet"), "wb") as f:
        f.write(b"PAR1 this is not a parquet file")

    with h5py.File(os.path.join(BAD, "wrong_type.h5"), "w") as f:
        g = f.create_group("flight_1")
        g.attrs["layout"] = "raw-flight/1"
        for c in COLUMNS:
            if c == "roll":
                g.create_dataset(c, data=np.array([f"{v:.5f}" for v in cols[c]], dtype="S12"))
            else:
                g.create_dataset(c, data=cols[c])
    with h5py.File(os.path.join(BAD, "unequal_length.h5"), "w") as f:
        g = f.create_group("flight_1")
        g.attrs["layout"] = "raw-flight/1"
        for c in COLUMNS:
            g.create_dataset(c, data=cols[c][:-3] if c == "wy" else cols[c])
    with h5py.File(os.path.join(BAD, "no_layout.h5"), "w") as f:
        g = f.create_group("flight_1")
        for c in COLUMNS:
            g.create_dataset(c, data=cols[c])


if __name__ == "__main__":
    main()
