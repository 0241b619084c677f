#!/usr/bin/env python3
"""UTM reference values from pyproj (PROJ) for gravgrad-core's transverse Mercator: easting, northing,
meridian convergence and point scale on WGS84 (EPSG:326zz / 327zz), stored with the versions in
utm_reference.json. Run: python3 tests/reference/make_utm_reference.py [--out FILE]"""
import json
import os
import sys

import pyproj

HERE = os.path.dirname(os.path.abspath(__file__))


def main():
    rows = []
    points = [(-27.35, 134.10), (-27.30, 134.16), (0.0, 3.0), (0.5, -179.5), (45.0, 9.0), (45.0, 11.9),
              (-33.9, 151.2), (60.2, 24.9), (-45.0, 170.9), (71.0, 25.0), (-0.0001, 0.0001), (84.0, 2.5), (-80.0, -69.0)]
    for lat, lon in points:
        zone = int((lon + 180) // 6) % 60 + 1
        south = lat < 0
        epsg = (32700 if south else 32600) + zone
        crs = pyproj.CRS.from_epsg(epsg)
        tr = pyproj.Transformer.from_crs("EPSG:4326", crs, always_xy=True)
        e, n = tr.transform(lon, lat)
        f = pyproj.Proj(crs).get_factors(lon, lat)
        rows.append({"lat_deg": lat, "lon_deg": lon, "zone": zone, "south": south, "epsg": epsg, "easting_m": e, "northing_m": n,
                     "convergence_deg": f.meridian_convergence, "scale": f.meridional_scale})
    out = sys.argv[sys.argv.index("--out") + 1] if "--out" in sys.argv else os.path.join(HERE, "utm_reference.json")
    with open(out, "w") as fh:
        json.dump({"produced_by": "tests/reference/make_utm_reference.py", "libraries": {"pyproj": pyproj.__version__, "proj": pyproj.proj_version_str},
                   "ellipsoid": "WGS84", "points": rows}, fh, indent=1)
    print("wrote", out)


if __name__ == "__main__":
    main()
