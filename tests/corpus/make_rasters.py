#!/usr/bin/env python3
"""Writes the GeoTIFF part of the input corpus with rasterio (GDAL), so the raster reader is tested
on files from the writer users have. Good files are read back and checked value by value in
crates/gravgrad-ingest/tests/ingest.rs; each bad file is refused there for one known reason.

The rasters are invented: a tilted plane of heights over a made-up survey block. Run from this
folder: python3 make_rasters.py (needs numpy and rasterio). `--out DIR` writes elsewhere; CI
regenerates the files with the current rasterio and runs the Rust checks on them. The outputs are
committed, so the tests need no Python.
"""
import os
import sys
import warnings

import numpy as np
import rasterio
from rasterio.crs import CRS
from rasterio.errors import NotGeoreferencedWarning
from rasterio.transform import Affine, from_origin

HERE = os.path.dirname(os.path.abspath(__file__))
OUT = sys.argv[sys.argv.index("--out") + 1] if "--out" in sys.argv else HERE
GOOD = os.path.join(OUT, "good")
BAD = os.path.join(OUT, "bad")


def plane(nx, ny, base, per_col, per_row, dtype):
    """value(col, row) = base + per_col*col + per_row*row, row 0 northernmost; exact in dtype."""
    col = np.arange(nx)[None, :]
    row = np.arange(ny)[:, None]
    return (base + per_col * col + per_row * row).astype(dtype)


def write(path, data, **profile):
    bands = data if data.ndim == 3 else data[None, :, :]
    with rasterio.open(path, "w", driver="GTiff", width=bands.shape[2], height=bands.shape[1],
                       count=bands.shape[0], dtype=bands.dtype, **profile) as dst:
        dst.write(bands)


def main():
    os.makedirs(GOOD, exist_ok=True)
    os.makedirs(BAD, exist_ok=True)

    # Float32 terrain model, UTM zone 53S (EPSG:32753), 25 m cells, 16 × 16 tiles (the last row
    # and column of tiles partly outside the 40 × 30 grid), deflate. Two cells are nodata.
    dem = plane(40, 30, 140.0, 0.5, -0.25, np.float32)
    dem[0, 0] = -9999.0
    dem[17, 33] = -9999.0
    write(os.path.join(GOOD, "dem_rasterio.tif"), dem, crs=CRS.from_epsg(32753),
          transform=from_origin(512000.0, 7120000.0, 25.0, 25.0), nodata=-9999.0,
          tiled=True, blockxsize=16, blockysize=16, compress="deflate")

    # Int16 heights on WGS 84 longitude/latitude (EPSG:4326), 0.00125° cells, LZW strips of 4 rows.
    small = plane(12, 10, 300.0, 1.0, -3.0, np.int16)
    small[9, 11] = -32768
    write(os.path.join(GOOD, "dem_rasterio_int16.tif"), small, crs=CRS.from_epsg(4326),
          transform=from_origin(134.5, -24.0, 0.00125, 0.00125), nodata=-32768,
          compress="lzw", blockysize=4)

    # Cells as points (AREA_OR_POINT=Point): GDAL stores the first cell's centre as the tie point
    # and PixelIsPoint in the keys; the grid's outer corner is still (512000, 7120000).
    path = os.path.join(GOOD, "dem_rasterio_point.tif")
    with rasterio.open(path, "w", driver="GTiff", width=6, height=5, count=1, dtype="float32",
                       crs=CRS.from_epsg(32753),
                       transform=from_origin(512000.0, 7120000.0, 25.0, 50.0)) as dst:
        dst.update_tags(AREA_OR_POINT="Point")
        dst.write(plane(6, 5, 10.0, 1.0, 1.0, np.float32)[None, :, :])

    # Rotated grid: GDAL stores a transform with rotation terms as ModelTransformationTag.
    write(os.path.join(BAD, "dem_rotated.tif"), plane(6, 5, 10.0, 1.0, 1.0, np.float32),
          crs=CRS.from_epsg(32753), transform=Affine(25.0, 5.0, 512000.0, 5.0, -25.0, 7120000.0))

    # Two bands.
    two = np.stack([plane(6, 5, 10.0, 1.0, 1.0, np.float32)] * 2)
    write(os.path.join(BAD, "dem_two_bands.tif"), two, crs=CRS.from_epsg(32753),
          transform=from_origin(512000.0, 7120000.0, 25.0, 25.0))

    # No georeferencing at all.
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NotGeoreferencedWarning)
        write(os.path.join(BAD, "dem_no_georef.tif"), plane(6, 5, 10.0, 1.0, 1.0, np.float32))

    print(f"rasterio {rasterio.__version__} (GDAL {rasterio.__gdal_version__}) wrote {OUT}")


if __name__ == "__main__":
    main()
