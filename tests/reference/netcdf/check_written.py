#!/usr/bin/env python3
"""Opens the NetCDF files our writer left in DIR with the readers users have and checks them against
the invented fixtures, computed here on their own: xarray (both its netCDF4 and scipy engines),
netCDF4, rasterio (GDAL's netCDF driver), pyproj for every frame's WKT and, when installed, the
command-line `gdalinfo` and `gmt grdinfo`.

Usage: GRAVGRAD_NETCDF_OUT=DIR cargo test -p gravgrad-netcdf --test netcdf
       python3 tests/reference/netcdf/check_written.py DIR
The fixtures are described in crates/gravgrad-netcdf/tests/netcdf.rs (`gzz`, `gz`,
`stated_fill_value_and_other_frames`). Needs numpy, xarray, scipy, netCDF4, rasterio, pyproj.
"""
import json
import math
import os
import shutil
import subprocess
import sys

import netCDF4
import numpy as np
import pyproj
import rasterio
import xarray as xr

NX, NY = 7, 5
X0, YTOP, DX, DY = 512000.0, 7120000.0, 25.0, 50.0
EPSG = 32753


def check(cond, what):
    if not cond:
        sys.exit(f"check_written: FAILED: {what}")


def gzz_north_up():
    """value(c, r) = 100 + 10 r + c + 0.25, row 0 northernmost; missing at (column 3, row 2)."""
    a = np.fromfunction(lambda r, c: 100.0 + 10.0 * r + c + 0.25, (NY, NX))
    a[2, 3] = np.nan
    return a


def gz_north_up():
    """value(c, r) = -2.5 + 0.125 (c - r); missing at (column 0, row 4)."""
    a = np.fromfunction(lambda r, c: -2.5 + 0.125 * (c - r), (NY, NX))
    a[4, 0] = np.nan
    return a


def same(a, b):
    a = np.asarray(a, dtype=np.float64)
    b = np.asarray(b, dtype=np.float64)
    return a.shape == b.shape and np.array_equal(np.isnan(a), np.isnan(b)) and \
        np.array_equal(a[~np.isnan(a)], b[~np.isnan(b)])


def centres():
    x = X0 + DX * (np.arange(NX) + 0.5)
    y = (YTOP - DY * (np.arange(NY) + 0.5))[::-1]  # ascending: the file's first row is southern
    return x, y


def with_xarray(path):
    x, y = centres()
    for engine in ("netcdf4", "scipy"):
        with xr.open_dataset(path, engine=engine) as ds:
            where = f"{path} (xarray, {engine})"
            check(dict(ds.sizes) == {"y": NY, "x": NX}, f"{where}: sizes {dict(ds.sizes)}")
            check("x" in ds.coords and "y" in ds.coords, f"{where}: coordinates {list(ds.coords)}")
            check(np.array_equal(ds["x"].values, x), f"{where}: x {ds['x'].values}")
            check(np.array_equal(ds["y"].values, y), f"{where}: y {ds['y'].values}")
            for c, std in (("x", "projection_x_coordinate"), ("y", "projection_y_coordinate")):
                a = ds[c].attrs
                check(a.get("units") == "m" and a.get("standard_name") == std,
                      f"{where}: {c} attributes {a}")
            check(ds.attrs.get("Conventions") == "CF-1.8", f"{where}: {ds.attrs}")
            check(ds.attrs.get("gravgrad_layout") == "grids/1", f"{where}: {ds.attrs}")
            check("history" not in ds.attrs, f"{where}: a history attribute")
            for name, units, want in (("gzz", "E", gzz_north_up()), ("gz", "mGal", gz_north_up())):
                v = ds[name]
                check(v.dims == ("y", "x"), f"{where}: {name} dims {v.dims}")
                check(v.attrs.get("units") == units, f"{where}: {name} units {v.attrs}")
                check(v.dtype == np.float32, f"{where}: {name} dtype {v.dtype}")
                check(same(v.values, want[::-1, :]), f"{where}: {name} values\n{v.values}")
                # Selecting by coordinates: the centre of (column 4, row 1) from the north.
                got = float(v.sel(x=X0 + 4.5 * DX, y=YTOP - 1.5 * DY))
                check(got == want[1, 4], f"{where}: {name} at (col 4, row 1) {got}")
            crs = ds["crs"].attrs
            check(crs.get("grid_mapping_name") == "transverse_mercator", f"{where}: crs {crs}")
            check(crs.get("longitude_of_central_meridian") == 135.0
                  and crs.get("false_northing") == 1.0e7
                  and crs.get("scale_factor_at_central_meridian") == 0.9996,
                  f"{where}: crs {crs}")


def with_netcdf4(path):
    with netCDF4.Dataset(path) as ds:
        check(ds.file_format == "NETCDF3_64BIT_OFFSET", f"{path}: format {ds.file_format}")
        check(list(ds.dimensions) == ["y", "x"], f"{path}: dimensions {list(ds.dimensions)}")
        for name, want in (("gzz", gzz_north_up()), ("gz", gz_north_up())):
            v = ds[name]
            check(v.grid_mapping == "crs", f"{path}: {name} grid_mapping")
            a = v[:]
            filled = np.ma.filled(a.astype(np.float64), np.nan)
            check(same(filled, want[::-1, :]), f"{path}: {name} (netCDF4) values\n{a}")
            lo, hi = np.nanmin(want), np.nanmax(want)
            check(list(v.actual_range) == [lo, hi], f"{path}: {name} actual_range {v.actual_range}")
        check(ds["crs"].epsg_code == f"EPSG:{EPSG}", f"{path}: epsg_code")


def with_stated_fill(path):
    with netCDF4.Dataset(path) as ds:
        v = ds["gzz"]
        check(v._FillValue == np.float32(-99999.0), f"{path}: _FillValue {v._FillValue}")
        a = v[:]
        check(np.ma.is_masked(a) and int(np.ma.count_masked(a)) == 1, f"{path}: mask {a}")
        check(bool(a.mask[NY - 1 - 2, 3]), f"{path}: the missing cell")
    with xr.open_dataset(path) as ds:
        check(same(ds["gzz"].values, gzz_north_up()[::-1, :]), f"{path}: xarray values")


def with_rasterio(path, name, want):
    with rasterio.open(f'NETCDF:"{path}":{name}') as d:
        where = f"{path}:{name} (rasterio {rasterio.__version__}, GDAL {rasterio.__gdal_version__})"
        check((d.width, d.height, d.count) == (NX, NY, 1), f"{where}: size")
        check(d.crs is not None and d.crs.to_epsg() == EPSG, f"{where}: crs {d.crs}")
        t = d.transform
        check((t.a, t.b, t.c, t.d, t.e, t.f) == (DX, 0.0, X0, 0.0, -DY, YTOP), f"{where}: {t}")
        check(d.nodata is not None and math.isnan(d.nodata), f"{where}: nodata {d.nodata}")
        check(same(d.read(1), want), f"{where}: values (north-up)\n{d.read(1)}")


def params(crs):
    """A projected frame's conversion parameters by name (EPSG names, as PROJ reports them)."""
    return {p.name: p.value for p in crs.coordinate_operation.params}


def frames(out):
    """Every frame file: our WKT is the EPSG frame for pyproj, and GDAL finds the code."""
    names = sorted(n for n in os.listdir(out) if n.startswith("frame_") and n.endswith(".nc"))
    check(len(names) == 8, f"frame files {names}")
    for n in names:
        code = int(n[len("frame_"):-len(".nc")])
        path = os.path.join(out, n)
        with netCDF4.Dataset(path) as ds:
            a = {k: ds["crs"].getncattr(k) for k in ds["crs"].ncattrs()}
        ref = pyproj.CRS.from_epsg(code)
        ours = pyproj.CRS.from_wkt(a["crs_wkt"])
        check(ours.equals(ref, ignore_axis_order=True),
              f"{n}: WKT is not EPSG:{code} for pyproj {pyproj.__version__}:\n{a['crs_wkt']}")
        check(ours.to_epsg() == code, f"{n}: pyproj finds {ours.to_epsg()}")
        # The CF grid-mapping attributes alone (without the WKT) describe the same frame.
        cf = {k: v for k, v in a.items() if k not in ("crs_wkt", "spatial_ref", "epsg_code")}
        from_cf = pyproj.CRS.from_cf(cf)
        check(from_cf.is_projected == ref.is_projected and
              from_cf.is_geographic == ref.is_geographic, f"{n}: CF kind {cf}")
        if ref.is_projected:
            check(params(from_cf) == params(ref), f"{n}: CF {params(from_cf)} {params(ref)}")
        e, f = from_cf.ellipsoid, ref.ellipsoid
        check((e.semi_major_metre, e.inverse_flattening) == (f.semi_major_metre,
                                                             f.inverse_flattening),
              f"{n}: ellipsoid {e} {f}")
        with rasterio.open(f'NETCDF:"{path}":h') as d:
            check(d.crs is not None and d.crs.to_epsg() == code, f"{n}: GDAL crs {d.crs}")
            check(same(d.read(1), np.arange(1.0, 7.0).reshape(2, 3)), f"{n}: GDAL values")


def with_gdalinfo(path):
    exe = shutil.which("gdalinfo")
    if exe is None:
        print("check_written: gdalinfo not installed, skipped")
        return
    out = subprocess.run([exe, "-json", f'NETCDF:"{path}":gzz'], check=True,
                         capture_output=True, text=True).stdout
    info = json.loads(out)
    check(info["size"] == [NX, NY], f"gdalinfo size {info['size']}")
    check(info["geoTransform"] == [X0, DX, 0.0, YTOP, 0.0, -DY], f"gdalinfo {info['geoTransform']}")
    wkt = info["coordinateSystem"]["wkt"]
    check(wkt.rstrip().endswith(f'ID["EPSG",{EPSG}]]'), f"gdalinfo crs {wkt}")
    nodata = info["bands"][0].get("noDataValue")
    check(isinstance(nodata, str) and nodata.lower() == "nan", f"gdalinfo nodata {nodata}")
    check(info["bands"][0].get("unit") == "E", f"gdalinfo unit {info['bands'][0]}")
    print("check_written: gdalinfo ok")


def with_gmt(path):
    exe = shutil.which("gmt")
    if exe is None:
        print("check_written: gmt not installed, skipped")
        return
    # GMT may leave a gmt.history in its working folder: run it in the fixtures' folder.
    cwd = os.path.dirname(os.path.abspath(path))
    for name, want in (("gzz", gzz_north_up()), ("gz", gz_north_up())):
        run = subprocess.run([exe, "grdinfo", "-C", f"{path}?{name}"], check=True,
                             capture_output=True, text=True, cwd=cwd).stdout.split("\t")
        w, e, s, n, z0, z1, dx, dy, nx, ny = (float(v) for v in run[1:11])
        check((w, e, s, n) == (X0, X0 + NX * DX, YTOP - NY * DY, YTOP), f"gmt {name} region {run}")
        check((dx, dy, nx, ny) == (DX, DY, NX, NY), f"gmt {name} cells {run}")
        check((z0, z1) == (np.nanmin(want), np.nanmax(want)), f"gmt {name} range {run}")
        text = subprocess.run([exe, "grdinfo", f"{path}?{name}"], check=True,
                              capture_output=True, text=True, cwd=cwd).stdout
        check("Pixel node registration used" in text, f"gmt {name} registration:\n{text}")
        # Values at cell centres, north row first, through GMT's own reading.
        xyz = subprocess.run([exe, "grd2xyz", f"{path}?{name}"], check=True,
                             capture_output=True, text=True, cwd=cwd).stdout.split()
        got = np.array([float(v) for v in xyz]).reshape(NY * NX, 3)
        check(got[0, 0] == X0 + 0.5 * DX and got[0, 1] == YTOP - 0.5 * DY, f"gmt {name} {got[0]}")
        check(same(got[:, 2].reshape(NY, NX), want), f"gmt {name} values\n{got[:, 2]}")
    print("check_written: gmt ok")


def main():
    if len(sys.argv) != 2:
        sys.exit(__doc__)
    out = sys.argv[1]
    grids = os.path.join(out, "grids.nc")
    with_xarray(grids)
    with_netcdf4(grids)
    with_stated_fill(os.path.join(out, "grids_fill.nc"))
    with_rasterio(grids, "gzz", gzz_north_up())
    with_rasterio(grids, "gz", gz_north_up())
    frames(out)
    with_gdalinfo(grids)
    with_gmt(grids)
    print(f"check_written: ok (xarray {xr.__version__}, netCDF4 {netCDF4.__version__}, "
          f"rasterio {rasterio.__version__}, pyproj {pyproj.__version__})")


if __name__ == "__main__":
    main()
