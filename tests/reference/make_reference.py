#!/usr/bin/env python3
"""Reference values for gravgrad-forward from outside the project: prism potential, gravity and tensor
from harmonica (Nagy et al. kernels, via choclo), normal gravity from boule. Stored with the library
versions in forward_reference.json, which crates/gravgrad-forward/tests/forward.rs reads.

Axis mapping. gravgrad works in NED: x north, y east, z down. harmonica takes (easting, northing,
upward) and prisms as (west, east, south, north, bottom, top); it returns potential in J/kg, g in
mGal and the tensor in Eötvös. Its sign convention for the mixed vertical components is proven here
first, with an analytic point mass (docs/physics.md asks for this): the script stops if the mapping
below does not hold.

Run: python3 tests/reference/make_reference.py   (needs harmonica, boule, numpy)
"""
import json
import os
import sys

import boule
import harmonica as hm
import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))
G = 6.67430e-11
FIELDS = ["potential", "g_n", "g_e", "g_z", "g_nn", "g_en", "g_nz", "g_ee", "g_ez", "g_zz"]


def harmonica_coords(ned):
    """NED points (x north, y east, z down) → harmonica (easting, northing, upward)."""
    ned = np.asarray(ned, dtype=float)
    return (ned[:, 1], ned[:, 0], -ned[:, 2])


def to_ned(fields):
    """harmonica fields → gravgrad NED: potential (m²/s²), g (m/s²), tensor (s⁻²).

    g_z is downward in harmonica. The mixed vertical components map with + (proven below).
    """
    mgal, eotvos = 1e-5, 1e-9
    return {
        "potential": fields["potential"],
        "g": [fields["g_n"] * mgal, fields["g_e"] * mgal, fields["g_z"] * mgal],
        "tensor": [fields[k] * eotvos for k in ["g_nn", "g_en", "g_nz", "g_ee", "g_ez", "g_zz"]],
    }


def prove_point_mass_convention():
    """Analytic point mass vs harmonica.point_gravity in the NED mapping above."""
    mass = 1.0e12
    src = np.array([[120.0, -80.0, 300.0]])  # NED, below the observers
    obs = np.array([[0.0, 0.0, 0.0], [250.0, 40.0, -50.0], [-90.0, 310.0, 20.0]])
    got = {f: hm.point_gravity(harmonica_coords(obs), harmonica_coords(src), [mass], field=f) for f in FIELDS}
    ned = to_ned(got)
    worst = 0.0
    for k, o in enumerate(obs):
        r = o - src[0]
        rn = np.linalg.norm(r)
        gm = G * mass
        want_v = gm / rn
        want_g = -gm * r / rn**3
        want_t = [gm * (3 * r[i] * r[j] - (rn**2 if i == j else 0)) / rn**5 for i, j in [(0, 0), (0, 1), (0, 2), (1, 1), (1, 2), (2, 2)]]
        worst = max(worst, abs(ned["potential"][k] - want_v) / want_v)
        for i in range(3):
            worst = max(worst, abs(ned["g"][i][k] - want_g[i]) / np.linalg.norm(want_g))
        scale = max(abs(x) for x in want_t)
        for i in range(6):
            worst = max(worst, abs(ned["tensor"][i][k] - want_t[i]) / scale)
    assert worst < 1e-9, f"harmonica's axis mapping is not the one assumed: worst relative error {worst}"
    return {"source_ned": src[0].tolist(), "mass_kg": mass, "observers_ned": obs.tolist(), "worst_relative_error": worst,
            "mapping": "x=northing, y=easting, z=-upward; Gxx=g_nn, Gxy=g_en, Gxz=+g_nz, Gyy=g_ee, Gyz=+g_ez, Gzz=g_zz; g_down=g_z"}


def prisms_and_points():
    """Prisms (NED: [x1, x2, y1, y2, z1, z2], density) and observation points around them: above,
    beside, below, near edges and corners (outside), close and far."""
    cases = []
    prisms = [
        ([-50.0, 50.0, -30.0, 30.0, 100.0, 300.0], 2670.0),
        ([1000.0, 1025.0, -2000.0, -1975.0, 20.0, 37.5], 1000.0),
        ([-5.0, 5.0, -5.0, 5.0, -5.0, 5.0], -300.0),
        ([0.0, 2000.0, 0.0, 500.0, 400.0, 410.0], 2400.0),
    ]
    for p, rho in prisms:
        x1, x2, y1, y2, z1, z2 = p
        cx, cy, cz = (x1 + x2) / 2, (y1 + y2) / 2, (z1 + z2) / 2
        sx, sy, sz = x2 - x1, y2 - y1, z2 - z1
        pts = [
            [cx, cy, z1 - 80.0],                      # above the centre
            [cx + 0.3 * sx, cy - 0.2 * sy, z1 - 1.0],  # just above the top face
            [x2 + 1e-3, y2 + 1e-3, z1 - 1e-3],         # a millimetre off a corner
            [x2 + 0.5, cy, cz],                        # beside a face
            [cx, y1 - 3.0 * sy, z2 + 2.0 * sz],        # below and to the side
            [x1 - 7.0 * sx, y2 + 5.0 * sy, z1 - 9.0 * sz],  # farther away
            [cx + 9.0, cy + 12.0, z1 - 0.25],           # close above
        ]
        cases.append({"prism_ned": p, "density": rho, "points_ned": pts})
    return cases


def prism_reference():
    out = []
    for case in prisms_and_points():
        x1, x2, y1, y2, z1, z2 = case["prism_ned"]
        hprism = [[y1, y2, x1, x2, -z2, -z1]]  # west, east, south, north, bottom, top
        coords = harmonica_coords(case["points_ned"])
        fields = {f: hm.prism_gravity(coords, hprism, [case["density"]], field=f).tolist() for f in FIELDS}
        ned = to_ned({k: np.asarray(v) for k, v in fields.items()})
        case["potential"] = ned["potential"].tolist()
        case["g"] = [np.asarray(c).tolist() for c in ned["g"]]
        case["tensor"] = [np.asarray(c).tolist() for c in ned["tensor"]]
        out.append(case)
    return out


def normal_gravity_reference():
    rows = []
    for name, ell in [("GRS80", boule.GRS80), ("WGS84", boule.WGS84)]:
        for lat in [-90.0, -67.5, -45.0, -27.35, -10.0, 0.0, 15.0, 45.0, 60.0, 89.0]:
            for h in [0.0, 300.0, 1000.0, 5000.0]:
                g = float(ell.normal_gravity((0.0, lat, h), si_units=True))  # m/s²
                rows.append({"ellipsoid": name, "lat_deg": lat, "height_m": h, "gravity_m_s2": g})
    return rows


def main():
    ref = {
        "produced_by": "tests/reference/make_reference.py",
        "libraries": {"harmonica": hm.__version__, "boule": boule.__version__, "numpy": np.__version__},
        "units": "NED (x north, y east, z down); potential m²/s², g m/s², tensor s⁻², gravity m/s²",
        "point_mass_convention": prove_point_mass_convention(),
        "prisms": prism_reference(),
        "normal_gravity": normal_gravity_reference(),
    }
    # `--out FILE` writes elsewhere (CI regenerates the file and compares it with the stored one).
    out = sys.argv[sys.argv.index("--out") + 1] if "--out" in sys.argv else os.path.join(HERE, "forward_reference.json")
    with open(out, "w") as f:
        json.dump(ref, f, indent=1)
    print("wrote", out)


if __name__ == "__main__":
    main()
