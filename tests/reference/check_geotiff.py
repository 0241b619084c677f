#!/usr/bin/env python3
"""Opens the GeoTIFFs our writer left in DIR with rasterio (GDAL) and checks them against the
invented fixtures, computed here on their own: frame (EPSG), transform (corner and cell sizes),
nodata, sample type and every pixel value.

Usage: GRAVGRAD_GEOTIFF_OUT=DIR cargo test -p gravgrad-grid --test grid
       python3 tests/reference/check_geotiff.py DIR
The fixtures are described in crates/gravgrad-grid/tests/grid.rs (`projected`, `geographic`).
"""
import math
import os
import sys

import numpy as np
import rasterio


def check(cond, what):
    if not cond:
        sys.exit(f"check_geotiff: FAILED: {what}")


def projected(path):
    # 7 × 5 cells, 25 m east by 50 m north, corner (512000 E, 7120000 N), EPSG:32753,
    # value = 100 + 10 row + col + 0.25, nodata -9999 at (col 3, row 2), float32.
    with rasterio.open(path) as d:
        check(d.count == 1, f"{path}: {d.count} bands")
        check((d.width, d.height) == (7, 5), f"{path}: size {d.width} x {d.height}")
        check(d.crs is not None and d.crs.to_epsg() == 32753, f"{path}: crs {d.crs}")
        check(d.crs.is_projected, f"{path}: crs not projected")
        t = d.transform
        check((t.a, t.b, t.c, t.d, t.e, t.f) == (25.0, 0.0, 512000.0, 0.0, -50.0, 7120000.0),
              f"{path}: transform {t}")
        check(d.tags().get("AREA_OR_POINT") == "Area", f"{path}: tags {d.tags()}")
        check(d.nodata == -9999.0, f"{path}: nodata {d.nodata}")
        check(d.dtypes[0] == "float32", f"{path}: dtype {d.dtypes[0]}")
        a = d.read(1)
        mask = d.read_masks(1)
        # A cell centre, by GDAL's own transform: (col 4, row 1) at (512112.5, 7119925).
        row, col = d.index(512112.5, 7119925.0)
    check((row, col) == (1, 4), f"{path}: index of a cell centre {(row, col)}")
    expect = np.fromfunction(lambda r, c: 100.0 + 10.0 * r + c + 0.25, (5, 7))
    expect[2, 3] = -9999.0
    check(np.array_equal(a.astype(np.float64), expect), f"{path}: values\n{a}")
    check(a[1, 4] == 114.25, f"{path}: value at (col 4, row 1) {a[1, 4]}")
    check(mask[2, 3] == 0 and int((mask == 0).sum()) == 1, f"{path}: nodata mask\n{mask}")


def geographic(path):
    # 6 × 4 cells, 0.00125° by 0.0025°, corner (134.5 E, 24.0 S), EPSG:4326,
    # value = col / 3 + row * 0.1 as float64, nodata NaN at (col 0, row 3).
    with rasterio.open(path) as d:
        check(d.count == 1, f"{path}: {d.count} bands")
        check((d.width, d.height) == (6, 4), f"{path}: size {d.width} x {d.height}")
        check(d.crs is not None and d.crs.to_epsg() == 4326, f"{path}: crs {d.crs}")
        check(d.crs.is_geographic, f"{path}: crs not geographic")
        t = d.transform
        check((t.a, t.b, t.c, t.d, t.e, t.f) == (0.00125, 0.0, 134.5, 0.0, -0.0025, -24.0),
              f"{path}: transform {t}")
        check(d.nodata is not None and math.isnan(d.nodata), f"{path}: nodata {d.nodata}")
        check(d.dtypes[0] == "float64", f"{path}: dtype {d.dtypes[0]}")
        check(d.compression is not None and d.compression.value == "DEFLATE",
              f"{path}: compression {d.compression}")
        a = d.read(1)
        mask = d.read_masks(1)
    expect = np.fromfunction(lambda r, c: c / 3.0 + r * 0.1, (4, 6))
    expect[3, 0] = np.nan
    check(np.array_equal(a, expect, equal_nan=True), f"{path}: values\n{a}")
    check(mask[3, 0] == 0 and int((mask == 0).sum()) == 1, f"{path}: nodata mask\n{mask}")


def main():
    if len(sys.argv) != 2:
        sys.exit(__doc__)
    folder = sys.argv[1]
    projected(os.path.join(folder, "projected.tif"))
    geographic(os.path.join(folder, "geographic.tif"))
    print(f"check_geotiff: ok (rasterio {rasterio.__version__}, GDAL {rasterio.__gdal_version__})")


if __name__ == "__main__":
    main()
