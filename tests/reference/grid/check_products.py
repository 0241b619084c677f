#!/usr/bin/env python3
"""Opens the products written by `GRAVGRAD_MAP_OUT=DIR cargo test -p gravgrad-grid --test maps
products` with the clients users have: PIL for the PNG maps, xarray for grids.nc (coordinates,
units), rasterio (GDAL) for the GeoTIFFs (CRS, no-data), and `gmt grdinfo` for grids.nc when GMT is
installed. The expected values are those of the test's invented sample (40 x 30 cells of 100 m,
north-west corner 400000 E 7000000 N, EPSG:32753, a 5 x 4 block of NaN).

Usage: python3 tests/reference/grid/check_products.py DIR
"""
import os
import shutil
import subprocess
import sys

import numpy as np
import rasterio
import xarray as xr
from PIL import Image

d = sys.argv[1]
NX, NY, CELL, X0, Y1 = 40, 30, 100.0, 400000.0, 7000000.0

for name in ("gzz", "gz"):
    im = Image.open(os.path.join(d, "maps", f"{name}.png"))
    im.load()
    assert im.mode == "RGBA", im.mode
    a = np.asarray(im)
    transparent = int((a[:, :, 3] == 0).sum())
    assert transparent > 0 and transparent % 20 == 0, transparent
    print(f"PIL: maps/{name}.png {im.size[0]} x {im.size[1]} RGBA, {transparent} transparent pixels")

ds = xr.open_dataset(os.path.join(d, "grids.nc"))
assert ds["x"].attrs["units"] == "m" and ds["y"].attrs["units"] == "m"
assert np.allclose(ds["x"].values, X0 + CELL * (np.arange(NX) + 0.5))
assert np.allclose(np.sort(ds["y"].values), Y1 - CELL * NY + CELL * (np.arange(NY) + 0.5))
assert ds["gzz"].attrs["units"] == "E" and ds["gz"].attrs["units"] == "mGal"
assert int(np.isnan(ds["gzz"].values).sum()) == 20
print("xarray: grids.nc coordinates and units as written")

for name in ("gzz", "gz"):
    with rasterio.open(os.path.join(d, "grids", f"{name}.tif")) as r:
        assert r.crs.to_epsg() == 32753, r.crs
        assert np.isnan(r.nodata), r.nodata
        assert (r.width, r.height) == (NX, NY)
        assert r.transform.c == X0 and r.transform.f == Y1 and r.transform.a == CELL
        print(f"rasterio: grids/{name}.tif EPSG:{r.crs.to_epsg()}, nodata {r.nodata}")

if shutil.which("gdalinfo"):
    out = subprocess.run(["gdalinfo", os.path.join(d, "grids", "gzz.tif")], capture_output=True,
                         text=True, check=True).stdout
    assert "32753" in out and "NoData Value=nan" in out, out
    print("gdalinfo: CRS and no-data shown")
if shutil.which("gmt"):
    out = subprocess.run(["gmt", "grdinfo", "--GMT_HISTORY=false", os.path.join(d, "grids.nc") + "?gzz"],
                         capture_output=True, text=True, check=True, cwd=d).stdout
    assert "Pixel node registration" in out, out
    assert f"n_columns: {NX}" in out and f"n_rows: {NY}" in out, out
    assert f"x_inc: {CELL:g}" in out and "[E]" in out, out
    print("gmt grdinfo: grids.nc read")
print("products: ok")
