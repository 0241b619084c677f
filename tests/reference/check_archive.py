#!/usr/bin/env python3
"""Opens a run's survey.h5 with h5py and checks it against the run's other products: every
lines.parquet column (read by pyarrow) equal value for value, every grid equal to the same grid in
grids.nc (read by xarray), the layout attributes and the calibration text present.

    python3 tests/reference/check_archive.py RUN_DIR
"""
import sys

import h5py
import numpy as np
import pyarrow.parquet as pq
import xarray as xr


def main():
    run = sys.argv[1]
    f = h5py.File(f"{run}/survey.h5", "r")
    assert f.attrs["layout"] == b"survey/1", dict(f.attrs)
    assert f.attrs["crs"].startswith(b"EPSG:"), dict(f.attrs)
    table = pq.read_table(f"{run}/lines.parquet")
    assert set(table.column_names) == set(f["lines"].keys()), (
        set(table.column_names) ^ set(f["lines"].keys()))
    for name in table.column_names:
        a = f["lines"][name][:]
        b = table.column(name).to_numpy()
        assert np.array_equal(a, b, equal_nan=True), name
    ds = xr.open_dataset(f"{run}/grids.nc")
    grids = [k for k in f["grids"].keys() if k not in ("x", "y")]
    assert grids, "no grids"
    for name in grids:
        a = f["grids"][name][:]
        b = ds[name].values[::-1, :]  # grids.nc runs south to north, the archive north to south
        assert a.shape == b.shape, (name, a.shape, b.shape)
        assert np.allclose(a, b, rtol=1e-6, atol=1e-6, equal_nan=True), name
        assert f["grids"][name].attrs["units"].decode() == ds[name].attrs["units"], name
    assert len(f["calibration"].attrs) >= 1
    for text in f["calibration"].attrs.values():
        assert b'layout = "calibration/1"' in text
    assert b"sha256" not in f["inputs"].attrs["recipe"]
    print(f"check_archive: ok ({len(table.column_names)} line columns, {len(grids)} grids; "
          f"h5py {h5py.__version__}, xarray {xr.__version__})")


if __name__ == "__main__":
    main()
