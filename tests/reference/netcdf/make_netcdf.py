#!/usr/bin/env python3
"""Writes small NetCDF terrain models with the Python netCDF4 library (and one each with scipy and
xarray), so the NetCDF DEM reader of crates/gravgrad-netcdf is tested on files from the writers
users have. Beside them, expected.json states, for each good file, the north-up raster the reader
must return — computed here from the same invented numbers, not by our code.

Good files cover the three classic formats (CDF-1, CDF-2, CDF-5) and NetCDF-4 (HDF5), packed
integers (scale_factor/add_offset), _FillValue and missing_value, y ascending and descending, x/y in
metres with a grid mapping, and longitude/latitude in degrees. One NetCDF-4 file declares 480
million cells (1.9 GB as stored) of which a small block is written, so that it is a few KB on disk;
a small copy of that block beside it is what a window of it must read as. Each bad file is broken
in one known place; crates/gravgrad-netcdf/tests/netcdf.rs asserts the place.

Two more writers: GDAL (through rasterio's netCDF driver) and GMT (`gmt grdmath`, when the `gmt`
command is installed; without it, the committed GMT files are copied to DIR unchanged).

The heights are invented: a tilted plane over a made-up block. Run from anywhere:
python3 make_netcdf.py [--out DIR] (needs numpy, netCDF4, scipy, xarray, rasterio). The outputs are
committed, so the Rust tests need no Python.
"""
import json
import os
import shutil
import subprocess
import sys
import tempfile

import netCDF4
import numpy as np
import rasterio
import rasterio.shutil
import scipy
import scipy.io
import xarray as xr
from rasterio.crs import CRS
from rasterio.transform import from_origin

HERE = os.path.dirname(os.path.abspath(__file__))
OUT = sys.argv[sys.argv.index("--out") + 1] if "--out" in sys.argv else HERE
GOOD = os.path.join(OUT, "good")
BAD = os.path.join(OUT, "bad")

# WKT1 of WGS 84 / UTM zone 53S as GDAL writes it (typed in here, EPSG registry values).
WKT_32753 = (
    'PROJCS["WGS 84 / UTM zone 53S",GEOGCS["WGS 84",DATUM["WGS_1984",SPHEROID["WGS 84",6378137,'
    '298.257223563,AUTHORITY["EPSG","7030"]],AUTHORITY["EPSG","6326"]],PRIMEM["Greenwich",0,'
    'AUTHORITY["EPSG","8901"]],UNIT["degree",0.0174532925199433,AUTHORITY["EPSG","9122"]],'
    'AUTHORITY["EPSG","4326"]],PROJECTION["Transverse_Mercator"],'
    'PARAMETER["latitude_of_origin",0],PARAMETER["central_meridian",135],'
    'PARAMETER["scale_factor",0.9996],PARAMETER["false_easting",500000],'
    'PARAMETER["false_northing",10000000],UNIT["metre",1,AUTHORITY["EPSG","9001"]],'
    'AXIS["Easting",EAST],AXIS["Northing",NORTH],AUTHORITY["EPSG","32753"]]'
)
# WKT2 of WGS 84 / UTM zone 54S, shortened to what a reader needs: the top-level ID comes last.
WKT2_32754 = (
    'PROJCRS["WGS 84 / UTM zone 54S",BASEGEOGCRS["WGS 84",DATUM["World Geodetic System 1984",'
    'ELLIPSOID["WGS 84",6378137,298.257223563,LENGTHUNIT["metre",1]]],'
    'PRIMEM["Greenwich",0,ANGLEUNIT["degree",0.0174532925199433]],ID["EPSG",4326]],'
    'CONVERSION["UTM zone 54S",METHOD["Transverse Mercator",ID["EPSG",9807]],'
    'PARAMETER["Latitude of natural origin",0,ANGLEUNIT["degree",0.0174532925199433]],'
    'PARAMETER["Longitude of natural origin",141,ANGLEUNIT["degree",0.0174532925199433]],'
    'PARAMETER["Scale factor at natural origin",0.9996,SCALEUNIT["unity",1]],'
    'PARAMETER["False easting",500000,LENGTHUNIT["metre",1]],'
    'PARAMETER["False northing",10000000,LENGTHUNIT["metre",1]]],'
    'CS[Cartesian,2],AXIS["easting",east,ORDER[1],LENGTHUNIT["metre",1]],'
    'AXIS["northing",north,ORDER[2],LENGTHUNIT["metre",1]],ID["EPSG",32754]]'
)

expected = {}


def plane(nx, ny, base, per_col, per_row):
    """Heights north-up: value(col, row) = base + per_col*col + per_row*row, row 0 northernmost."""
    col = np.arange(nx)[None, :]
    row = np.arange(ny)[:, None]
    return base + per_col * col + per_row * row


def expect(name, north_up, x_min, y_max, dx, dy, epsg):
    """What the reader must return for GOOD/name: north-up values (None = missing cell)."""
    values = [None if np.isnan(v) else float(v) for v in np.asarray(north_up, float).ravel()]
    expected[name] = {
        "nx": int(north_up.shape[1]), "ny": int(north_up.shape[0]),
        "x_min": x_min, "y_max": y_max, "dx": dx, "dy": dy, "epsg": epsg, "values": values,
    }


def xy_vars(ds, x, y, ctype="f8"):
    vx = ds.createVariable("x", ctype, ("x",))
    vx.standard_name = "projection_x_coordinate"
    vx.units = "m"
    vx.axis = "X"
    vx[:] = x
    vy = ds.createVariable("y", ctype, ("y",))
    vy.standard_name = "projection_y_coordinate"
    vy.units = "m"
    vy.axis = "Y"
    vy[:] = y


def classic_descending():
    """CDF-1, float32 heights, y descending (north first), _FillValue -9999, crs_wkt (EPSG:32753)."""
    name = "dem_classic_ydesc.nc"
    nx, ny, dx, dy, x0, ytop = 7, 5, 25.0, 50.0, 512000.0, 7120000.0
    h = plane(nx, ny, 140.25, 0.5, -0.25)
    h[2, 3] = np.nan
    with netCDF4.Dataset(os.path.join(GOOD, name), "w", format="NETCDF3_CLASSIC") as ds:
        ds.Conventions = "CF-1.8"
        ds.createDimension("y", ny)
        ds.createDimension("x", nx)
        xy_vars(ds, x0 + dx * (np.arange(nx) + 0.5), ytop - dy * (np.arange(ny) + 0.5))
        crs = ds.createVariable("crs", "i4")
        crs.crs_wkt = WKT_32753
        v = ds.createVariable("elevation", "f4", ("y", "x"), fill_value=-9999.0)
        v.units = "m"
        v.grid_mapping = "crs"
        v[:] = np.ma.masked_invalid(h)
    expect(name, h, x0, ytop, dx, dy, 32753)


def offset64_ascending_packed():
    """CDF-2, int16 heights packed by scale_factor/add_offset, y ascending (south first),
    _FillValue -32768, transverse Mercator grid mapping with UTM 33S parameters and no EPSG code."""
    name = "dem_64bit_yasc_packed.nc"
    nx, ny, dx, dy, x0, ytop = 6, 4, 30.0, 30.0, 402000.0, 8300120.0
    raw_north_up = plane(nx, ny, 40, 3, -7).astype(np.int16)  # raw integers
    raw_north_up[0, 5] = -32768
    h = 100.0 + 0.5 * raw_north_up.astype(float)
    h[0, 5] = np.nan
    with netCDF4.Dataset(os.path.join(GOOD, name), "w", format="NETCDF3_64BIT_OFFSET") as ds:
        ds.Conventions = "CF-1.8"
        ds.createDimension("x", nx)
        ds.createDimension("y", ny)
        yc = ytop - dy * (np.arange(ny) + 0.5)
        xy_vars(ds, x0 + dx * (np.arange(nx) + 0.5), yc[::-1])
        tm = ds.createVariable("transverse_mercator", "c")
        tm.grid_mapping_name = "transverse_mercator"
        tm.scale_factor_at_central_meridian = 0.9996
        tm.longitude_of_central_meridian = 15.0
        tm.latitude_of_projection_origin = 0.0
        tm.false_easting = 500000.0
        tm.false_northing = 10000000.0
        tm.semi_major_axis = 6378137.0
        tm.inverse_flattening = 298.257223563
        v = ds.createVariable("z", "i2", ("y", "x"), fill_value=np.int16(-32768))
        v.set_auto_maskandscale(False)
        v.scale_factor = np.float32(0.5)
        v.add_offset = np.float32(100.0)
        v.units = "metres"
        v.standard_name = "surface_altitude"
        v.grid_mapping = "transverse_mercator"
        v[:] = raw_north_up[::-1, :]
    expect(name, h, x0, ytop, dx, dy, 32733)


def cdf5_record():
    """CDF-5 (64-bit data), y as the unlimited (record) dimension with two record variables so that
    their rows interleave, float64 heights with missing_value, int64 x coordinates, epsg_code."""
    name = "dem_cdf5_record.nc"
    nx, ny, dx, dy, x0, ytop = 5, 3, 100.0, 100.0, 300000.0, 6000300.0
    h = plane(nx, ny, 12.5, 1.25, -2.5)
    h[1, 1] = np.nan
    with netCDF4.Dataset(os.path.join(GOOD, name), "w", format="NETCDF3_64BIT_DATA") as ds:
        ds.createDimension("y", None)
        ds.createDimension("x", nx)
        vx = ds.createVariable("x", "i8", ("x",))
        vx.units = "m"
        vx.standard_name = "projection_x_coordinate"
        vx[:] = (x0 + dx * (np.arange(nx) + 0.5)).astype(np.int64)
        vy = ds.createVariable("y", "f8", ("y",))
        vy.units = "m"
        vy.standard_name = "projection_y_coordinate"
        crs = ds.createVariable("crs", "i4")
        crs.epsg_code = "EPSG:32631"
        quality = ds.createVariable("quality", "u1", ("y", "x"))
        quality.long_name = "invented quality flag"
        v = ds.createVariable("height", "f8", ("y", "x"))
        v.missing_value = -1.0e30
        v.units = "m"
        v.standard_name = "height_above_reference_ellipsoid"
        v.grid_mapping = "crs"
        v.set_auto_mask(False)
        vy[:] = ytop - dy * (np.arange(ny) + 0.5)
        v[:, :] = np.where(np.isnan(h), -1.0e30, h)
        quality[:, :] = np.arange(nx * ny).reshape(ny, nx).astype(np.uint8)
    expect(name, h, x0, ytop, dx, dy, 32631)


def netcdf4_two_variables():
    """NetCDF-4 (HDF5), deflate, chunked; two 2-D variables (the DEM picked by standard_name),
    y descending, float32 coordinates, spatial_ref with a WKT2 ID (EPSG:32754)."""
    name = "dem_netcdf4.nc"
    nx, ny, dx, dy, x0, ytop = 8, 6, 20.0, 20.0, 640000.0, 7500000.0
    h = plane(nx, ny, 220.5, -1.5, 0.75)
    h[5, 0] = np.nan
    with netCDF4.Dataset(os.path.join(GOOD, name), "w", format="NETCDF4") as ds:
        ds.Conventions = "CF-1.8"
        ds.createDimension("y", ny)
        ds.createDimension("x", nx)
        xy_vars(ds, x0 + dx * (np.arange(nx) + 0.5), ytop - dy * (np.arange(ny) + 0.5), "f4")
        crs = ds.createVariable("spatial_ref", "i4")
        crs.spatial_ref = WKT2_32754
        other = ds.createVariable("slope", "f4", ("y", "x"), zlib=True)
        other.units = "degree"
        other.grid_mapping = "spatial_ref"
        other[:] = np.ones((ny, nx), np.float32)
        v = ds.createVariable("topo", "f4", ("y", "x"), zlib=True, complevel=4,
                              chunksizes=(3, 4), fill_value=np.float32(np.nan))
        v.units = "m"
        v.standard_name = "surface_altitude"
        v.grid_mapping = "spatial_ref"
        v[:] = h
    expect(name, h, x0, ytop, dx, dy, 32754)


def netcdf4_sparse_big():
    """NetCDF-4 terrain model of 20000 x 24000 float32 cells (1.9 GB as stored, past every
    whole-read limit) of which only a block of 12 x 16 cells is written: deflate and shuffle in
    chunks of 256 x 256, the block straddling four chunks, every other chunk never written (it
    reads as the NaN fill value), so the file is some 30 KB. y ascending, float64 coordinates
    deflated. Beside it, the same cells and a ring of 4 unwritten cells around them as a small
    contiguous NetCDF-4 file: the window of the big file over them must equal it."""
    big, small = "dem_netcdf4_sparse.nc", "dem_netcdf4_sparse_copy.nc"
    nx, ny, dx, dy, x0, ybottom = 20000, 24000, 25.0, 25.0, 500000.0, 7000000.0
    # The written block, in the file's order (y ascending): rows 8698..8710, columns 12280..12296.
    iy0, ix0, wy, wx = 8698, 12280, 12, 16
    block = plane(wx, wy, 312.0, 0.75, -1.25)[::-1, :]  # south first, as stored
    block[3, 5] = np.nan
    x = x0 + dx * (np.arange(nx) + 0.5)
    y = ybottom + dy * (np.arange(ny) + 0.5)
    with netCDF4.Dataset(os.path.join(GOOD, big), "w", format="NETCDF4") as ds:
        ds.Conventions = "CF-1.8"
        ds.createDimension("y", ny)
        ds.createDimension("x", nx)
        for name, values, axis in (("x", x, "X"), ("y", y, "Y")):
            v = ds.createVariable(name, "f8", (name,), zlib=True, shuffle=True)
            v.standard_name = "projection_%s_coordinate" % name
            v.units = "m"
            v.axis = axis
            v[:] = values
        v = ds.createVariable("z", "f4", ("y", "x"), zlib=True, shuffle=True,
                              chunksizes=(256, 256), fill_value=np.float32(np.nan))
        v.units = "m"
        v.standard_name = "surface_altitude"
        v[iy0:iy0 + wy, ix0:ix0 + wx] = block
    ring = 4
    sy0, sx0, sy, sx = iy0 - ring, ix0 - ring, wy + 2 * ring, wx + 2 * ring
    copy = np.full((sy, sx), np.nan)
    copy[ring:ring + wy, ring:ring + wx] = block
    with netCDF4.Dataset(os.path.join(GOOD, small), "w", format="NETCDF4") as ds:
        ds.Conventions = "CF-1.8"
        ds.createDimension("y", sy)
        ds.createDimension("x", sx)
        xy_vars(ds, x[sx0:sx0 + sx], y[sy0:sy0 + sy])
        v = ds.createVariable("z", "f4", ("y", "x"), contiguous=True,
                              fill_value=np.float32(np.nan))
        v.units = "m"
        v.standard_name = "surface_altitude"
        v[:] = copy
    expect(small, copy[::-1, :], x0 + dx * sx0, ybottom + dy * (sy0 + sy), dx, dy, None)


def netcdf4_lonlat_xarray():
    """NetCDF-4 written by xarray: longitude/latitude in degrees, latitude ascending, float64,
    NaN fill, a latitude_longitude grid mapping on WGS 84 (EPSG:4326)."""
    name = "dem_lonlat_xarray.nc"
    nx, ny, d, lon0, lattop = 6, 4, 0.25, 134.5, -23.0
    h = plane(nx, ny, 300.0, 1.0, -3.0)
    h[3, 5] = np.nan
    lat = (lattop - d * (np.arange(ny) + 0.5))[::-1]
    lon = lon0 + d * (np.arange(nx) + 0.5)
    ds = xr.Dataset(
        {"elev": (("lat", "lon"), h[::-1, :], {"units": "m", "grid_mapping": "crs"}),
         "crs": ((), np.int32(0), {"grid_mapping_name": "latitude_longitude",
                                   "semi_major_axis": 6378137.0,
                                   "inverse_flattening": 298.257223563})},
        coords={"lat": ("lat", lat, {"units": "degrees_north", "standard_name": "latitude"}),
                "lon": ("lon", lon, {"units": "degrees_east", "standard_name": "longitude"})},
        attrs={"Conventions": "CF-1.8"},
    )
    ds.to_netcdf(os.path.join(GOOD, name), format="NETCDF4", engine="netcdf4")
    expect(name, h, lon0, lattop, d, d, 4326)


def scipy_classic():
    """CDF-2 written by scipy: dimensions (x, y), the transpose of the usual order; int32 heights;
    no CRS at all (the reader returns no EPSG code)."""
    name = "dem_scipy_transposed.nc"
    nx, ny, dx, dy, x0, ytop = 4, 3, 10.0, 10.0, 1000.0, 2030.0
    h = plane(nx, ny, 50, 2, -5)
    f = scipy.io.netcdf_file(os.path.join(GOOD, name), "w", version=2)
    f.createDimension("x", nx)
    f.createDimension("y", ny)
    vx = f.createVariable("x", "f8", ("x",))
    vx[:] = x0 + dx * (np.arange(nx) + 0.5)
    vx.units = "m"
    vy = f.createVariable("y", "f8", ("y",))
    vy[:] = (ytop - dy * (np.arange(ny) + 0.5))[::-1]
    vy.units = "m"
    v = f.createVariable("dem", "i4", ("x", "y"))
    v[:] = h[::-1, :].T.astype(np.int32)
    v.units = "m"
    f.close()
    expect(name, h, x0, ytop, dx, dy, None)


def gdal_rasterio():
    """GDAL's netCDF driver through rasterio: float32, EPSG:32753 in its grid mapping, nodata
    -9999 as _FillValue; GDAL writes y ascending (bottom-up) by default. Its `history` attribute
    (a time stamp and the path) is then removed by netCDF4."""
    name = "dem_gdal.nc"
    nx, ny, dx, dy, x0, ytop = 6, 5, 25.0, 25.0, 514000.0, 7118000.0
    h = plane(nx, ny, 210.5, -0.5, 1.25)
    h[4, 2] = np.nan
    data = np.where(np.isnan(h), -9999.0, h).astype(np.float32)
    # GDAL's netCDF driver only copies (CreateCopy): write a GeoTIFF first, then copy it, inside
    # a temporary folder under a short relative name (GDAL records the name in `history`).
    with tempfile.TemporaryDirectory() as tmp:
        with rasterio.open(os.path.join(tmp, "dem.tif"), "w", driver="GTiff", width=nx,
                           height=ny, count=1, dtype="float32", crs=CRS.from_epsg(32753),
                           nodata=-9999.0, transform=from_origin(x0, ytop, dx, dy)) as dst:
            dst.write(data, 1)
        here = os.getcwd()
        os.chdir(tmp)
        try:
            rasterio.shutil.copy("dem.tif", "dem.nc", driver="netCDF")
        finally:
            os.chdir(here)
        # GDAL's history holds the time: removed, so the file regenerates the same.
        with netCDF4.Dataset(os.path.join(tmp, "dem.nc"), "a") as ds:
            ds.delncattr("history")
        shutil.copy(os.path.join(tmp, "dem.nc"), os.path.join(GOOD, name))
    expect(name, h, x0, ytop, dx, dy, 32753)


def gmt_grdmath():
    """GMT 6 `grdmath`, pixel registration: a classic file whose x and y carry no units and no
    frame. As written it is refused (bad/gmt_no_frame.nc); with a grid mapping added by netCDF4
    (epsg_code EPSG:32753) the units follow from the frame (good/dem_gmt.nc)."""
    good_name, bad_name = "dem_gmt.nc", "gmt_no_frame.nc"
    x0, ytop, dx, dy, nx, ny = 512000.0, 7120000.0, 25.0, 50.0, 8, 4
    # value = (x - 512000) / 4 + (y - 7119800) / 2 at the cell centres, exact in float32.
    col = np.arange(nx)[None, :]
    row = np.arange(ny)[:, None]
    h = (x0 + dx * (col + 0.5) - 512000.0) / 4.0 + (ytop - dy * (row + 0.5) - 7119800.0) / 2.0
    expect(good_name, h, x0, ytop, dx, dy, 32753)
    gmt = shutil.which("gmt")
    if gmt is None:
        if OUT != HERE:
            print("make_netcdf: gmt not installed; the committed GMT files are copied")
            shutil.copy(os.path.join(HERE, "good", good_name), os.path.join(GOOD, good_name))
            shutil.copy(os.path.join(HERE, "bad", bad_name), os.path.join(BAD, bad_name))
        else:
            print("make_netcdf: gmt not installed; the committed GMT files are kept")
        return
    # Run in a temporary folder with a relative name: GMT records its command line in `history`.
    with tempfile.TemporaryDirectory() as tmp:
        subprocess.run([gmt, "grdmath", "-R512000/512200/7119800/7120000", "-I25/50", "-r",
                        "X", "512000", "SUB", "4", "DIV", "Y", "7119800", "SUB", "2", "DIV",
                        "ADD", "=", "dem.nc"], check=True, cwd=tmp)
        shutil.copy(os.path.join(tmp, "dem.nc"), os.path.join(BAD, bad_name))
        with netCDF4.Dataset(os.path.join(tmp, "dem.nc"), "a") as ds:
            crs = ds.createVariable("crs", "i4")
            crs.epsg_code = "EPSG:32753"
            ds["z"].grid_mapping = "crs"
        shutil.copy(os.path.join(tmp, "dem.nc"), os.path.join(GOOD, good_name))


def bad_files():
    """Each file is broken in one known place (the Rust test asserts the message names it)."""
    with open(os.path.join(GOOD, "dem_classic_ydesc.nc"), "rb") as f:
        good = f.read()
    with open(os.path.join(BAD, "truncated.nc"), "wb") as f:
        f.write(good[: len(good) - 40])  # the last row of heights is cut
    with open(os.path.join(BAD, "bad_magic.nc"), "wb") as f:
        f.write(b"CDF\x07" + good[4:])  # version byte 7 does not exist
    # The type of the variable `elevation` (NC_FLOAT = 5, followed by its size 7 * 5 * 4 = 140
    # bytes) replaced by 13, a code with no type.
    i = good.index(b"elevation")
    pos = good.index(b"\x00\x00\x00\x05\x00\x00\x00\x8c", i)
    broken = bytearray(good)
    broken[pos:pos + 4] = b"\x00\x00\x00\x0d"
    with open(os.path.join(BAD, "bad_type.nc"), "wb") as f:
        f.write(bytes(broken))
    # x coordinates that are not evenly spaced.
    with netCDF4.Dataset(os.path.join(BAD, "irregular_x.nc"), "w", format="NETCDF3_CLASSIC") as ds:
        ds.createDimension("y", 3)
        ds.createDimension("x", 4)
        xy_vars(ds, [0.0, 10.0, 20.0, 35.0], [25.0, 15.0, 5.0])
        v = ds.createVariable("elevation", "f4", ("y", "x"))
        v.units = "m"
        v[:] = np.zeros((3, 4), np.float32)
    # Heights stored as text.
    with netCDF4.Dataset(os.path.join(BAD, "text_heights.nc"), "w", format="NETCDF3_CLASSIC") as ds:
        ds.createDimension("y", 2)
        ds.createDimension("x", 3)
        xy_vars(ds, [5.0, 15.0, 25.0], [15.0, 5.0])
        v = ds.createVariable("elevation", "S1", ("y", "x"))
        v[:] = np.array([[b"a", b"b", b"c"], [b"d", b"e", b"f"]])
    # Two 2-D variables and no standard_name to tell the terrain: the reader asks for a name.
    with netCDF4.Dataset(os.path.join(BAD, "two_grids.nc"), "w", format="NETCDF3_CLASSIC") as ds:
        ds.createDimension("y", 2)
        ds.createDimension("x", 3)
        xy_vars(ds, [5.0, 15.0, 25.0], [15.0, 5.0])
        for n in ("a", "b"):
            v = ds.createVariable(n, "f4", ("y", "x"))
            v[:] = np.zeros((2, 3), np.float32)


def main():
    os.makedirs(GOOD, exist_ok=True)
    os.makedirs(BAD, exist_ok=True)
    classic_descending()
    offset64_ascending_packed()
    cdf5_record()
    netcdf4_two_variables()
    netcdf4_lonlat_xarray()
    netcdf4_sparse_big()
    scipy_classic()
    gdal_rasterio()
    gmt_grdmath()
    bad_files()
    expected["_writers"] = {"netCDF4": netCDF4.__version__, "libnetcdf":
                            netCDF4.__netcdf4libversion__, "scipy": scipy.__version__,
                            "xarray": xr.__version__, "numpy": np.__version__,
                            "rasterio": rasterio.__version__, "gdal": rasterio.__gdal_version__}
    with open(os.path.join(GOOD, "expected.json"), "w") as f:
        json.dump(expected, f, indent=1, sort_keys=True)
        f.write("\n")


if __name__ == "__main__":
    main()
