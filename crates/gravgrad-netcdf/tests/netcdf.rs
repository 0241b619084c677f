//! NetCDF reading and writing checked against outside code.
//!
//! - Terrain models written by the Python netCDF4, scipy and xarray libraries, GDAL and GMT
//!   (`tests/reference/netcdf/make_netcdf.py`, committed under `tests/reference/netcdf/good`) read
//!   into the rasters that script states on its own in `expected.json`. With
//!   `GRAVGRAD_NETCDF_CORPUS=DIR` the files are taken from `DIR/good` and `DIR/bad` instead (CI
//!   regenerates them with the current libraries).
//! - Broken files (`bad/`) are refused for the reason each was broken for; every truncation and
//!   random bit flips of the good files give errors or rasters, never a panic.
//! - Our writer read back by our reader, and the same grids giving the same bytes. With
//!   `GRAVGRAD_NETCDF_OUT=DIR` the fixtures below are left in `DIR`, and
//!   `tests/reference/netcdf/check_written.py DIR` opens them with xarray, netCDF4, rasterio
//!   (GDAL), pyproj and — when installed — `gdalinfo` and `gmt grdinfo`, and checks them against
//!   the same invented numbers computed there on its own.

use gravgrad_core::Raster;
use gravgrad_netcdf::{
    AttrValue, CellBlock, Format, GridError, GridFile, GridProblem, NcFile, NcWriter, VarData,
    dem_header, read_dem, read_dem_block, read_grid, write_grids,
};
use proptest::prelude::*;
use std::path::{Path, PathBuf};

fn corpus() -> PathBuf {
    match std::env::var_os("GRAVGRAD_NETCDF_CORPUS") {
        Some(d) => PathBuf::from(d),
        None => Path::new(env!("CARGO_MANIFEST_DIR")).join("../../tests/reference/netcdf"),
    }
}

fn good(name: &str) -> PathBuf {
    corpus().join("good").join(name)
}

fn bad(name: &str) -> PathBuf {
    corpus().join("bad").join(name)
}

/// The folder for the written fixtures: `GRAVGRAD_NETCDF_OUT` when set (kept for the outside
/// check), else a temporary folder.
fn out_dir() -> (PathBuf, Option<tempfile::TempDir>) {
    match std::env::var_os("GRAVGRAD_NETCDF_OUT") {
        Some(d) => {
            let d = PathBuf::from(d);
            std::fs::create_dir_all(&d).unwrap();
            (d, None)
        }
        None => {
            let t = tempfile::tempdir().unwrap();
            (t.path().to_path_buf(), Some(t))
        }
    }
}

fn same_values(what: &str, a: &[f64], b: &[f64]) {
    assert_eq!(a.len(), b.len(), "{what}: lengths");
    for (i, (x, y)) in a.iter().zip(b).enumerate() {
        assert!(
            x == y || (x.is_nan() && y.is_nan()),
            "{what}: value {i}: {x} vs {y}"
        );
    }
}

// ---------------------------------------------------------------------------------------------
// Files written by Python.

#[test]
fn python_written_terrain_models_read_as_stated() {
    let text = std::fs::read_to_string(good("expected.json")).unwrap();
    let expected: serde_json::Value = serde_json::from_str(&text).unwrap();
    let files = expected.as_object().unwrap();
    let listed: Vec<&str> = files.keys().map(String::as_str).collect();
    for name in [
        "dem_classic_ydesc.nc",
        "dem_64bit_yasc_packed.nc",
        "dem_cdf5_record.nc",
        "dem_netcdf4.nc",
        "dem_lonlat_xarray.nc",
        "dem_scipy_transposed.nc",
        "dem_gdal.nc",
        "dem_gmt.nc",
    ] {
        assert!(listed.contains(&name), "{name} is not in expected.json");
    }
    for (name, e) in files.iter().filter(|(k, _)| !k.starts_with('_')) {
        let r = read_dem(&good(name), None).unwrap_or_else(|p| panic!("{name}: {p:?}"));
        let num = |k: &str| e[k].as_f64().unwrap();
        assert_eq!(r.nx as u64, e["nx"].as_u64().unwrap(), "{name}: nx");
        assert_eq!(r.ny as u64, e["ny"].as_u64().unwrap(), "{name}: ny");
        assert_eq!(r.x_min, num("x_min"), "{name}: x_min");
        assert_eq!(r.y_max, num("y_max"), "{name}: y_max");
        assert_eq!(r.dx, num("dx"), "{name}: dx");
        assert_eq!(r.dy, num("dy"), "{name}: dy");
        assert_eq!(r.epsg.map(u64::from), e["epsg"].as_u64(), "{name}: epsg");
        assert!(r.nodata.is_some_and(f64::is_nan), "{name}: nodata");
        let want: Vec<f64> = e["values"]
            .as_array()
            .unwrap()
            .iter()
            .map(|v| v.as_f64().unwrap_or(f64::NAN))
            .collect();
        same_values(name, &r.values, &want);
        assert!(
            r.values.iter().any(|v| v.is_nan()) == want.iter().any(|v| v.is_nan()),
            "{name}: missing cells"
        );
    }
}

/// Every block read alone (`read_dem_block`) holds the same cells as the whole read of the file,
/// whatever the file's order (y up or down, transposed, a record variable, NetCDF-4); the header
/// (`dem_header`) is the whole read's grid.
#[test]
fn blocks_of_python_written_terrain_models_equal_the_whole_read() {
    let text = std::fs::read_to_string(good("expected.json")).unwrap();
    let expected: serde_json::Value = serde_json::from_str(&text).unwrap();
    for name in expected
        .as_object()
        .unwrap()
        .keys()
        .filter(|k| !k.starts_with('_'))
    {
        let path = good(name);
        let whole = read_dem(&path, None).unwrap();
        let h = dem_header(&path, None).unwrap();
        assert_eq!(
            (h.nx, h.ny, h.x_min, h.y_max, h.dx, h.dy, h.epsg),
            (
                whole.nx,
                whole.ny,
                whole.x_min,
                whole.y_max,
                whole.dx,
                whole.dy,
                whole.epsg
            ),
            "{name}: header"
        );
        let mut blocks = vec![h.whole()];
        for row0 in 0..h.ny {
            for col0 in 0..h.nx {
                blocks.push(CellBlock {
                    col0,
                    row0,
                    nx: (h.nx - col0).min(3),
                    ny: (h.ny - row0).min(2),
                });
                blocks.push(CellBlock {
                    col0,
                    row0,
                    nx: h.nx - col0,
                    ny: h.ny - row0,
                });
            }
        }
        for b in blocks {
            let r =
                read_dem_block(&path, None, b).unwrap_or_else(|p| panic!("{name} {b:?}: {p:?}"));
            assert_eq!((r.nx, r.ny), (b.nx, b.ny), "{name} {b:?}");
            assert_eq!(
                (r.x_min, r.y_max),
                (
                    h.x_min + b.col0 as f64 * h.dx,
                    h.y_max - b.row0 as f64 * h.dy
                ),
                "{name} {b:?}: corner"
            );
            let want: Vec<f64> = (b.row0..b.row0 + b.ny)
                .flat_map(|row| (b.col0..b.col0 + b.nx).map(move |col| (col, row)))
                .map(|(col, row)| whole.values[row * whole.nx + col])
                .collect();
            same_values(&format!("{name} {b:?}"), &r.values, &want);
        }
        // A block past the grid is refused, naming the grid's size.
        let past = CellBlock {
            col0: h.nx - 1,
            row0: 0,
            nx: 2,
            ny: 1,
        };
        let p = read_dem_block(&path, None, past).unwrap_err();
        assert!(
            p[0].to_string()
                .contains(&format!("{} × {} cells", h.nx, h.ny)),
            "{name}: {}",
            p[0]
        );
    }
}

#[test]
fn formats_are_told_apart() {
    for (name, format) in [
        ("dem_classic_ydesc.nc", Format::Classic),
        ("dem_64bit_yasc_packed.nc", Format::Offset64),
        ("dem_scipy_transposed.nc", Format::Offset64),
        ("dem_gdal.nc", Format::Classic),
        ("dem_gmt.nc", Format::Classic),
        ("dem_cdf5_record.nc", Format::Data64),
        ("dem_netcdf4.nc", Format::Netcdf4),
        ("dem_lonlat_xarray.nc", Format::Netcdf4),
    ] {
        let f = NcFile::open(&good(name)).unwrap();
        assert_eq!(f.format(), format, "{name}");
    }
}

#[test]
fn classic_header_details_from_netcdf4_python() {
    // The CDF-5 file: y is the record dimension with 3 records; `quality` (ubyte, a CDF-5 type)
    // and `height` interleave record by record (make_netcdf.py, cdf5_record).
    let f = NcFile::open(&good("dem_cdf5_record.nc")).unwrap();
    let y = &f.dimensions()[0];
    assert_eq!((y.name.as_str(), y.len, y.unlimited), ("y", 3, true));
    let q = f.read_f64("quality").unwrap();
    assert_eq!(q, (0..15).map(f64::from).collect::<Vec<_>>());
    let x = f.read_f64("x").unwrap();
    assert_eq!(x, vec![300050.0, 300150.0, 300250.0, 300350.0, 300450.0]);
    let h = f.variable("height").unwrap();
    assert_eq!(
        h.attr("missing_value"),
        Some(&AttrValue::Double(vec![-1.0e30]))
    );

    // The packed CDF-2 file: int16 with float32 scale and offset, as netCDF4 stores them.
    let f = NcFile::open(&good("dem_64bit_yasc_packed.nc")).unwrap();
    let z = f.variable("z").unwrap();
    assert_eq!(z.attr("scale_factor"), Some(&AttrValue::Float(vec![0.5])));
    assert_eq!(z.attr("add_offset"), Some(&AttrValue::Float(vec![100.0])));
    assert_eq!(z.attr("_FillValue"), Some(&AttrValue::Short(vec![-32768])));
    assert_eq!(f.attribute("Conventions"), Some(&AttrValue::from("CF-1.8")));
}

#[test]
fn netcdf4_attributes_and_dimensions() {
    let f = NcFile::open(&good("dem_netcdf4.nc")).unwrap();
    let topo = f.variable("topo").unwrap();
    let dims: Vec<&str> = topo
        .dims
        .iter()
        .map(|&d| f.dimensions()[d].name.as_str())
        .collect();
    assert_eq!(dims, ["y", "x"]);
    assert_eq!(f.shape(topo), vec![6, 8]);
    assert_eq!(topo.attr_text("standard_name"), Some("surface_altitude"));
    // HDF5 bookkeeping is not reported as attributes.
    assert!(topo.attr("_Netcdf4Coordinates").is_none());
    assert!(f.variable("x").unwrap().attr("CLASS").is_none());
}

#[test]
fn a_named_variable_is_read_and_a_missing_one_refused() {
    // `slope` is 2-D too, in degrees (make_netcdf.py): named as the terrain, it is refused with
    // its units named, since heights must be metres.
    let err = read_dem(&good("dem_netcdf4.nc"), Some("slope")).unwrap_err();
    assert!(err[0].message.contains("\"degree\""), "{}", err[0]);
    let r = read_dem(&good("dem_netcdf4.nc"), Some("topo")).unwrap();
    assert_eq!((r.nx, r.ny), (8, 6));
    let err = read_dem(&good("dem_netcdf4.nc"), Some("heights")).unwrap_err();
    assert!(
        err[0].message.contains("no variable `heights`") && err[0].message.contains("`topo`"),
        "{}",
        err[0]
    );
}

#[test]
fn broken_files_are_refused_for_their_reason() {
    // (file, words the one error must hold); make_netcdf.py (bad_files) breaks each in one place.
    let cases: [(&str, &[&str]); 7] = [
        ("truncated.nc", &["truncated", "elevation"]),
        ("bad_magic.nc", &["version byte 7"]),
        ("bad_type.nc", &["`elevation`", "type code 13"]),
        (
            "irregular_x.nc",
            &["`x` is not evenly spaced", "value 3 is 35", "puts 30"],
        ),
        ("text_heights.nc", &["no 2-D numeric variable"]),
        ("two_grids.nc", &["`a`, `b`", "cannot tell which"]),
        (
            "gmt_no_frame.nc",
            &["`y` states no units and the grid no frame"],
        ),
    ];
    for (name, words) in cases {
        let path = bad(name);
        let problems = read_dem(&path, None).expect_err(name);
        assert_eq!(problems.len(), 1, "{name}: {problems:?}");
        let p = &problems[0];
        assert!(p.is_error());
        assert_eq!(p.location.file.as_deref(), Some(path.as_path()), "{name}");
        for w in words {
            assert!(
                p.message.contains(w),
                "{name}: {w:?} not in {:?}",
                p.message
            );
        }
        assert!(
            p.to_string().contains(name),
            "{name}: the file is named: {p}"
        );
    }
    // Naming the text variable says what it holds.
    let p = read_dem(&bad("text_heights.nc"), Some("elevation")).unwrap_err();
    assert!(p[0].message.contains("holds char values"), "{}", p[0]);
}

#[test]
fn not_netcdf_at_all() {
    let dir = tempfile::tempdir().unwrap();
    for (name, bytes) in [
        ("empty.nc", &b""[..]),
        ("short.nc", &b"CD"[..]),
        ("text.nc", &b"x,y,z\n1,2,3\n"[..]),
        ("hdf5_head.nc", &b"\x89HDF\r\n\x1a\n\0\0\0\0"[..]),
    ] {
        let path = dir.path().join(name);
        std::fs::write(&path, bytes).unwrap();
        let p = read_dem(&path, None).expect_err(name);
        assert_eq!(p.len(), 1);
        assert!(p[0].to_string().contains(name), "{p:?}");
    }
    let p = read_dem(&dir.path().join("absent.nc"), None).unwrap_err();
    assert!(p[0].message.starts_with("cannot open"), "{p:?}");
}

// ---------------------------------------------------------------------------------------------
// Malformed input never panics.

fn classic_good_files() -> Vec<PathBuf> {
    [
        "dem_classic_ydesc.nc",
        "dem_64bit_yasc_packed.nc",
        "dem_cdf5_record.nc",
        "dem_scipy_transposed.nc",
    ]
    .iter()
    .map(|n| good(n))
    .collect()
}

#[test]
fn every_truncation_of_a_classic_file_is_an_error() {
    // Each file's terrain variable lies at the end of the file (make_netcdf.py writes it last or,
    // for the record file, in the last record), so every shorter prefix loses some of it.
    let dir = tempfile::tempdir().unwrap();
    for src in classic_good_files() {
        let bytes = std::fs::read(&src).unwrap();
        let path = dir.path().join("cut.nc");
        for n in 0..bytes.len() {
            std::fs::write(&path, &bytes[..n]).unwrap();
            let r = read_dem(&path, None);
            assert!(r.is_err(), "{} cut to {n} bytes was read", src.display());
        }
    }
}

fn flip_and_read(src: &Path, flips: &[(usize, u8)], dir: &Path) {
    let mut bytes = std::fs::read(src).unwrap();
    for &(at, mask) in flips {
        let i = at % bytes.len();
        bytes[i] ^= mask;
    }
    let path = dir.join("flipped.nc");
    std::fs::write(&path, &bytes).unwrap();
    // Either outcome is fine; a panic fails the test.
    if let Ok(r) = read_dem(&path, None) {
        assert_eq!(r.values.len(), r.nx * r.ny);
    }
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 256, ..ProptestConfig::default() })]

    #[test]
    fn bit_flips_in_classic_files_never_panic(
        file in 0usize..4,
        flips in proptest::collection::vec((0usize..1 << 20, 1u8..=255), 1..6),
    ) {
        let dir = tempfile::tempdir().unwrap();
        flip_and_read(&classic_good_files()[file], &flips, dir.path());
    }

    #[test]
    fn bit_flips_in_netcdf4_files_never_panic(
        file in 0usize..2,
        flips in proptest::collection::vec((0usize..1 << 20, 1u8..=255), 1..4),
    ) {
        let dir = tempfile::tempdir().unwrap();
        let src = good(["dem_netcdf4.nc", "dem_lonlat_xarray.nc"][file]);
        flip_and_read(&src, &flips, dir.path());
    }

    #[test]
    fn arbitrary_bytes_after_the_magic_never_panic(
        version in prop_oneof![Just(1u8), Just(2u8), Just(5u8)],
        body in proptest::collection::vec(any::<u8>(), 0..512),
    ) {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("noise.nc");
        let mut bytes = vec![b'C', b'D', b'F', version];
        bytes.extend(body);
        std::fs::write(&path, &bytes).unwrap();
        let _ = NcFile::open(&path).map(|f| {
            for v in f.variables() {
                let _ = f.read_f64(&v.name);
            }
        });
        let _ = read_dem(&path, None);
    }
}

// ---------------------------------------------------------------------------------------------
// Writing: fixtures shared with check_written.py.

/// `gzz` fixture (same numbers in check_written.py): 7 × 5 cells of 25 m east by 50 m north,
/// north-west corner (512 000 E, 7 120 000 N), WGS 84 / UTM 53S (EPSG:32753);
/// value(c, r) = 100 + 10 r + c + 0.25 (row 0 northernmost, exact in float32), missing (NaN) at
/// (column 3, row 2).
fn gzz() -> Raster {
    let (nx, ny) = (7, 5);
    let mut v: Vec<f64> = (0..nx * ny)
        .map(|i| 100.0 + 10.0 * (i / nx) as f64 + (i % nx) as f64 + 0.25)
        .collect();
    v[2 * nx + 3] = f64::NAN;
    Raster::new(nx, ny, (512_000.0, 7_120_000.0), (25.0, 50.0), v)
        .unwrap()
        .with_epsg(32753)
        .with_nodata(f64::NAN)
}

/// `gz` fixture on the same grid: value(c, r) = −2.5 + 0.125 (c − r), nodata −9999 at
/// (column 0, row 4), which the file stores as its fill value.
fn gz() -> Raster {
    let (nx, ny) = (7, 5);
    let mut v: Vec<f64> = (0..nx * ny)
        .map(|i| -2.5 + 0.125 * ((i % nx) as f64 - (i / nx) as f64))
        .collect();
    v[4 * nx] = -9999.0;
    Raster::new(nx, ny, (512_000.0, 7_120_000.0), (25.0, 50.0), v)
        .unwrap()
        .with_epsg(32753)
        .with_nodata(-9999.0)
}

fn fixture_file<'a>(gzz: &'a Raster, gz: &'a Raster) -> GridFile<'a> {
    GridFile::new("gravgrad test grids", "gravgrad-netcdf tests/netcdf.rs")
        .with_variable("gzz", "vertical gravity gradient", "E", gzz)
        .with_variable("gz", "gravity disturbance", "mGal", gz)
}

#[test]
fn grids_round_trip_through_our_reader() {
    let (dir, _keep) = out_dir();
    let path = dir.join("grids.nc");
    let (a, b) = (gzz(), gz());
    write_grids(&path, &fixture_file(&a, &b)).unwrap();

    for (name, src) in [("gzz", &a), ("gz", &b)] {
        let back = read_grid(&path, Some(name)).unwrap();
        assert_eq!((back.nx, back.ny), (7, 5), "{name}");
        assert_eq!((back.x_min, back.y_max), (512_000.0, 7_120_000.0), "{name}");
        assert_eq!((back.dx, back.dy), (25.0, 50.0), "{name}");
        assert_eq!(back.epsg, Some(32753), "{name}");
        let want: Vec<f64> = src
            .values
            .iter()
            .map(|&v| if src.is_missing(v) { f64::NAN } else { v })
            .collect();
        same_values(name, &back.values, &want);
    }

    let f = NcFile::open(&path).unwrap();
    assert_eq!(f.format(), Format::Offset64);
    assert_eq!(f.attribute("Conventions"), Some(&AttrValue::from("CF-1.8")));
    assert_eq!(
        f.attribute("gravgrad_layout"),
        Some(&AttrValue::from("grids/1"))
    );
    assert!(f.attribute("history").is_none());
    // y ascends: the first row of the file is the southernmost.
    let y = f.read_f64("y").unwrap();
    assert_eq!(
        y,
        vec![
            7_119_775.0,
            7_119_825.0,
            7_119_875.0,
            7_119_925.0,
            7_119_975.0
        ]
    );
    let x = f.read_f64("x").unwrap();
    assert_eq!(x[0], 512_012.5);
    let gzz_var = f.variable("gzz").unwrap();
    assert_eq!(gzz_var.attr_text("units"), Some("E"));
    assert_eq!(gzz_var.attr_text("grid_mapping"), Some("crs"));
    assert_eq!(gzz_var.nc_type, gravgrad_netcdf::NcType::Float);
    let crs = f.variable("crs").unwrap();
    assert_eq!(crs.attr_text("epsg_code"), Some("EPSG:32753"));
    assert_eq!(
        crs.attr("longitude_of_central_meridian"),
        Some(&AttrValue::Double(vec![135.0]))
    );
    assert_eq!(
        crs.attr("false_northing"),
        Some(&AttrValue::Double(vec![1e7]))
    );
    // The raw first row of gzz is the southern row r = 4: 140.25, 141.25, …
    let raw = f.read_f64("gzz").unwrap();
    assert_eq!(&raw[..3], &[140.25, 141.25, 142.25]);
    // No temporary file is left beside it.
    let names: Vec<String> = std::fs::read_dir(&dir)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    assert!(!names.iter().any(|n| n.ends_with(".partial")), "{names:?}");
}

#[test]
fn stated_fill_value_and_other_frames() {
    let (dir, _keep) = out_dir();
    // gzz alone with a stated fill value.
    let a = gzz();
    let mut g = GridFile::new("gravgrad test grids, stated fill", "gravgrad-netcdf tests")
        .with_variable("gzz", "vertical gravity gradient", "E", &a);
    g.fill_value = -99999.0;
    let path = dir.join("grids_fill.nc");
    write_grids(&path, &g).unwrap();
    let f = NcFile::open(&path).unwrap();
    let v = f.variable("gzz").unwrap();
    assert_eq!(
        v.attr("_FillValue"),
        Some(&AttrValue::Float(vec![-99999.0]))
    );
    let raw = f.read_f64("gzz").unwrap();
    // (column 3, row 2) of 5 rows is file row 2 from the south too.
    assert_eq!(raw[2 * 7 + 3], -99999.0);
    let back = read_grid(&path, None).unwrap();
    assert!(back.values[2 * 7 + 3].is_nan());
    // The terrain reader refuses it: its values are not heights in metres.
    let p = read_dem(&path, None).unwrap_err();
    assert!(p[0].message.contains("units \"E\""), "{}", p[0]);

    // One small file per supported frame family, for check_written.py (pyproj, GDAL); ours reads
    // each back with its code.
    for code in [32601, 32660, 32753, 25832, 26910, 28355, 7855, 4326] {
        let (corner, cell) = if code == 4326 {
            ((134.5, -24.0), (0.25, 0.25))
        } else {
            ((500_000.0, 6_000_000.0), (100.0, 100.0))
        };
        let r = Raster::new(3, 2, corner, cell, vec![1.0, 2.0, 3.0, 4.0, 5.0, 6.0])
            .unwrap()
            .with_epsg(code);
        let g = GridFile::new("frame check", "gravgrad-netcdf tests").with_variable(
            "h",
            "invented heights",
            "m",
            &r,
        );
        let path = dir.join(format!("frame_{code}.nc"));
        write_grids(&path, &g).unwrap();
        let back = read_dem(&path, None).unwrap();
        assert_eq!(back.epsg, Some(code));
        assert_eq!(
            (back.x_min, back.y_max, back.dx),
            (corner.0, corner.1, cell.0)
        );
        same_values("frame", &back.values, &r.values);
    }
}

#[test]
fn same_grids_give_the_same_bytes() {
    let dir = tempfile::tempdir().unwrap();
    let (a, b) = (gzz(), gz());
    let p1 = dir.path().join("one.nc");
    let p2 = dir.path().join("two.nc");
    write_grids(&p1, &fixture_file(&a, &b)).unwrap();
    write_grids(&p2, &fixture_file(&a, &b)).unwrap();
    assert_eq!(std::fs::read(&p1).unwrap(), std::fs::read(&p2).unwrap());
    // Writing again over an existing file replaces it.
    write_grids(&p1, &fixture_file(&a, &b)).unwrap();
    assert_eq!(std::fs::read(&p1).unwrap(), std::fs::read(&p2).unwrap());
}

#[test]
fn grids_that_cannot_be_written_are_refused() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("grids.nc");
    let a = gzz();
    let problem = |g: &GridFile<'_>| match write_grids(&path, g) {
        Err(GridError::Content { path: p, problem }) => {
            assert_eq!(p, path);
            problem
        }
        other => panic!("expected a content error, got {other:?}"),
    };
    // Another geometry.
    let mut shifted = gzz();
    shifted.x_min += 25.0;
    let g = fixture_file(&a, &shifted);
    assert!(matches!(problem(&g), GridProblem::Geometry { .. }));
    // A frame without a WKT we can build.
    let lambert = gzz().with_epsg(3112);
    let g = GridFile::new("t", "s").with_variable("gzz", "g", "E", &lambert);
    assert!(matches!(problem(&g), GridProblem::Frame { epsg: 3112 }));
    // No frame.
    let mut none = gzz();
    none.epsg = None;
    let g = GridFile::new("t", "s").with_variable("gzz", "g", "E", &none);
    assert!(matches!(problem(&g), GridProblem::NoFrame));
    // A value float32 cannot hold, and one equal to the stated fill value.
    let mut big = gzz();
    big.values[8] = 1e300;
    let g = GridFile::new("t", "s").with_variable("gzz", "g", "E", &big);
    assert!(matches!(
        problem(&g),
        GridProblem::OutOfFloat32 { col: 1, row: 1, .. }
    ));
    let mut g = GridFile::new("t", "s").with_variable("gzz", "g", "E", &a);
    g.fill_value = 100.25;
    assert!(matches!(
        problem(&g),
        GridProblem::HoldsFill { col: 0, row: 0, .. }
    ));
    // A bad variable name.
    let g = GridFile::new("t", "s").with_variable("g zz", "g", "E", &a);
    assert!(matches!(problem(&g), GridProblem::Build(_)));
    assert!(!path.exists());
    // A folder that does not exist: the error names the destination.
    let nowhere = dir.path().join("no/such/grids.nc");
    let err = write_grids(&nowhere, &fixture_file(&a, &gz())).unwrap_err();
    assert!(err.to_string().contains("no/such/grids.nc"), "{err}");
}

#[test]
fn general_writer_round_trip() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("general.nc");
    let mut w = NcWriter::new();
    w.add_global("comment", "types of the 64-bit offset format")
        .unwrap();
    w.add_global("numbers", AttrValue::Short(vec![-3, 7, 11]))
        .unwrap();
    let t = w.add_dimension("t", 3).unwrap();
    let s = w.add_dimension("len", 5).unwrap();
    let i8v = w
        .add_variable("b", &[t], VarData::I8(vec![-128, 0, 127]))
        .unwrap();
    w.add_attribute(i8v, "_FillValue", AttrValue::Byte(vec![-127]))
        .unwrap();
    let i16v = w
        .add_variable("s", &[t], VarData::I16(vec![-32768, 1, 32767]))
        .unwrap();
    w.add_attribute(i16v, "scale_factor", 0.5f32).unwrap();
    w.add_variable("i", &[t], VarData::I32(vec![i32::MIN, 0, i32::MAX]))
        .unwrap();
    w.add_variable("d", &[t], VarData::F64(vec![0.1, -1e300, 5e-324]))
        .unwrap();
    w.add_variable("names", &[t, s], VarData::Char(b"alphabeta gamma".to_vec()))
        .unwrap();
    w.add_variable("scalar", &[], VarData::F32(vec![2.5]))
        .unwrap();
    // Refusals: shape, duplicate names, _FillValue of another type, zero-length dimension.
    assert!(
        w.add_variable("bad", &[t, s], VarData::F32(vec![0.0; 14]))
            .is_err()
    );
    assert!(w.add_variable("b", &[t], VarData::I8(vec![0; 3])).is_err());
    assert!(w.add_attribute(i16v, "_FillValue", 1.0f64).is_err());
    assert!(w.add_dimension("none", 0).is_err());
    assert!(w.add_dimension("t", 2).is_err());
    w.write(&path).unwrap();

    let f = NcFile::open(&path).unwrap();
    assert_eq!(f.format(), Format::Offset64);
    assert_eq!(
        f.attribute("numbers"),
        Some(&AttrValue::Short(vec![-3, 7, 11]))
    );
    assert_eq!(f.read_f64("b").unwrap(), vec![-128.0, 0.0, 127.0]);
    assert_eq!(f.read_f64("s").unwrap(), vec![-32768.0, 1.0, 32767.0]);
    assert_eq!(
        f.read_f64("i").unwrap(),
        vec![f64::from(i32::MIN), 0.0, f64::from(i32::MAX)]
    );
    assert_eq!(f.read_f64("d").unwrap(), vec![0.1, -1e300, 5e-324]);
    assert_eq!(f.read_f64("scalar").unwrap(), vec![2.5]);
    let names = f.variable("names").unwrap();
    assert_eq!(f.shape(names), vec![3, 5]);
    assert!(f.read_f64("names").is_err());
    assert_eq!(
        f.variable("b").unwrap().attr("_FillValue"),
        Some(&AttrValue::Byte(vec![-127]))
    );
}

/// Declared sizes are never trusted (issue 16): a dimension declaring more values than the file
/// holds, or than the stated limit, is refused before anything is allocated for it.
mod declared_sizes {
    use super::good;
    use gravgrad_netcdf::{NcFile, read_dem};
    use std::path::Path;

    fn one_error_at(path: &Path, words: &[&str]) {
        let problems = read_dem(path, None).unwrap_err();
        assert_eq!(problems.len(), 1, "{problems:?}");
        assert_eq!(problems[0].location.file.as_deref(), Some(path));
        for w in words {
            assert!(
                problems[0].message.contains(w),
                "{w:?} not in {}",
                problems[0].message
            );
        }
    }

    /// The classic header's entry for dimension `name` (length, name, padding, then its length
    /// as a big-endian u32) with the length set to `len`.
    fn patch_classic_dim(bytes: &[u8], name: &str, len: u32) -> Vec<u8> {
        let mut entry = (name.len() as u32).to_be_bytes().to_vec();
        entry.extend(name.as_bytes());
        while !entry.len().is_multiple_of(4) {
            entry.push(0);
        }
        let at = bytes
            .windows(entry.len())
            .position(|w| w == entry.as_slice())
            .expect("the dimension's entry")
            + entry.len();
        let mut out = bytes.to_vec();
        out[at..at + 4].copy_from_slice(&len.to_be_bytes());
        out
    }

    #[test]
    fn classic_dimension_declaring_more_than_the_file_is_refused() {
        let src = good("dem_classic_ydesc.nc");
        let bytes = std::fs::read(&src).unwrap();
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("dem.nc");
        // Within the limit but past the file: the variable's bytes are not there.
        std::fs::write(&path, patch_classic_dim(&bytes, "x", 1_000_000)).unwrap();
        let f = NcFile::open(&path).unwrap();
        assert!(f.dimensions().iter().any(|d| d.len == 1_000_000));
        one_error_at(&path, &["truncated", "the file has 1380"]);
        // Past the limit: refused by its count.
        std::fs::write(&path, patch_classic_dim(&bytes, "x", 200_000_000)).unwrap();
        one_error_at(&path, &["200000000 values", "67108864"]);
    }

    /// Every HDF5 dataspace message (version 1: 1, rank, flags, 5 zero bytes; version 2: 2, rank,
    /// flags, type 1) of rank 1 or 2 with a dimension of `old` gets `new` instead.
    fn patch_hdf5_dims(bytes: &[u8], old: u64, new: u64) -> (Vec<u8>, usize) {
        let mut out = bytes.to_vec();
        let mut n = 0;
        for p in 0..bytes.len().saturating_sub(24) {
            let (rank, dims_at) = match (bytes[p], bytes[p + 1]) {
                (1, r @ 1..=2) if bytes[p + 3..p + 8] == [0; 5] => (r as usize, p + 8),
                (2, r @ 1..=2) if bytes[p + 3] == 1 => (r as usize, p + 4),
                _ => continue,
            };
            for k in 0..rank {
                let at = dims_at + 8 * k;
                if bytes.len() >= at + 8 && bytes[at..at + 8] == old.to_le_bytes() {
                    out[at..at + 8].copy_from_slice(&new.to_le_bytes());
                    n += 1;
                }
            }
        }
        (out, n)
    }

    #[test]
    fn netcdf4_dimension_declaring_more_than_the_file_is_refused() {
        let src = good("dem_netcdf4.nc");
        let bytes = std::fs::read(&src).unwrap();
        // x has 8 cells: its coordinate variable and both 2-D variables declare 10 million.
        let (patched, n) = patch_hdf5_dims(&bytes, 8, 10_000_000);
        assert!(n >= 3, "{n} dimensions patched");
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("dem.nc");
        std::fs::write(&path, patched).unwrap();
        let f = NcFile::open(&path).unwrap();
        assert!(f.dimensions().iter().any(|d| d.len == 10_000_000));
        one_error_at(
            &path,
            &[
                "declares 10000000 values",
                "more than a file of 16794 bytes can hold",
            ],
        );
    }

    /// A chunk whose index entry declares 700 MB stored (the long mutation run's case): the crate
    /// sizes and zero-fills its read buffer from that entry before the read fails, 690 MB
    /// resident for a 16 KB file. Refused from the index, whole or by block, before any chunk
    /// is read.
    #[test]
    fn netcdf4_chunk_declaring_700_mb_is_refused_before_reading() {
        let src = good("dem_netcdf4.nc");
        let bytes = std::fs::read(&src).unwrap();
        let file = hdf5_pure::File::open(&src).unwrap();
        let chunks = file.dataset("topo").unwrap().chunks().unwrap();
        assert!(chunks.len() >= 4, "{chunks:?}");
        // The version-1 B-tree key of the first chunk: its stored size (u32), filter mask (u32),
        // then its offsets and the element offset 0 (u64 each), little endian.
        let c = &chunks[0];
        let mut key = (c.storage_size as u32).to_le_bytes().to_vec();
        key.extend(c.filter_mask.to_le_bytes());
        for o in c.offset.iter().chain(&[0]) {
            key.extend(o.to_le_bytes());
        }
        let at = bytes
            .windows(key.len())
            .position(|w| w == key.as_slice())
            .expect("the chunk's key");
        let mut patched = bytes.clone();
        patched[at..at + 4].copy_from_slice(&700_000_000u32.to_le_bytes());
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("dem.nc");
        std::fs::write(&path, patched).unwrap();
        let words = [
            "variable `topo`",
            "declares 700000000 bytes",
            "inside the file's 16794",
        ];
        one_error_at(&path, &words);
        let h = gravgrad_netcdf::dem_header(&path, None).unwrap();
        let p = gravgrad_netcdf::read_dem_block(&path, None, h.whole()).unwrap_err();
        assert_eq!(p.len(), 1, "{p:?}");
        for w in words {
            assert!(p[0].message.contains(w), "{w:?} not in {}", p[0].message);
        }
    }

    #[test]
    fn netcdf_symlinked_to_dev_zero_is_refused() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("dem.nc");
        std::os::unix::fs::symlink("/dev/zero", &path).unwrap();
        one_error_at(&path, &["not a regular file"]);
    }
}

/// NetCDF-4 terrain models larger than any whole read are read by window (issue 16): only the
/// chunks or rows of the window's rows are fetched from the file, which is never read whole.
mod netcdf4_windows {
    use super::{good, same_values};
    use gravgrad_core::limits::{MAX_GRID_CELLS, MAX_WHOLE_FILE_BYTES};
    use gravgrad_netcdf::{CellBlock, GridHeader, dem_header, read_dem, read_dem_block};

    /// The block of the grid `big` over the raster `small` (same cell size, corners on its cells).
    fn block_over(big: &GridHeader, small: &gravgrad_core::Raster) -> CellBlock {
        let col0 = (small.x_min - big.x_min) / big.dx;
        let row0 = (big.y_max - small.y_max) / big.dy;
        assert!(col0.fract() == 0.0 && row0.fract() == 0.0, "{col0} {row0}");
        CellBlock {
            col0: col0 as usize,
            row0: row0 as usize,
            nx: small.nx,
            ny: small.ny,
        }
    }

    /// netCDF4-python's 20000 × 24000 float32 cells, deflated and shuffled in 256 × 256 chunks,
    /// most never written: 1.9 GB as stored (past the whole-file limit), 22 KB on disk. The
    /// window over the written block equals the small contiguous copy read whole, NaN for NaN.
    #[test]
    fn window_of_a_sparse_netcdf4_dem_past_every_whole_read_limit_equals_its_small_copy() {
        let big = good("dem_netcdf4_sparse.nc");
        let h = dem_header(&big, None).unwrap();
        assert_eq!((h.nx, h.ny), (20_000, 24_000));
        let stored_bytes = (h.nx * h.ny * 4) as u64;
        assert!(stored_bytes > MAX_WHOLE_FILE_BYTES, "{stored_bytes}");
        assert!(std::fs::metadata(&big).unwrap().len() < 1 << 20);
        // Read whole it is refused by its count, before anything is decoded.
        let whole = read_dem(&big, None).unwrap_err();
        assert!(
            whole[0].message.contains(&MAX_GRID_CELLS.to_string()),
            "{}",
            whole[0].message
        );

        let copy = read_dem(&good("dem_netcdf4_sparse_copy.nc"), None).unwrap();
        assert!(copy.values.iter().any(|v| v.is_nan()));
        assert!(copy.values.iter().any(|v| v.is_finite()));
        let b = block_over(&h, &copy);
        let w = read_dem_block(&big, None, b).unwrap();
        assert_eq!(
            (w.nx, w.ny, w.x_min, w.y_max),
            (copy.nx, copy.ny, copy.x_min, copy.y_max)
        );
        assert_eq!((w.dx, w.dy), (copy.dx, copy.dy));
        same_values("window over the written block", &w.values, &copy.values);

        // A window of 600 × 500 cells around it: the copy's cells where they lie, NaN (never
        // written) everywhere else.
        let wide = CellBlock {
            col0: b.col0 - 300,
            row0: b.row0 - 200,
            nx: 600,
            ny: 500,
        };
        let r = read_dem_block(&big, None, wide).unwrap();
        for row in 0..wide.ny {
            for col in 0..wide.nx {
                let v = r.values[row * wide.nx + col];
                let (c, k) = (col + wide.col0, row + wide.row0);
                let inside =
                    (b.col0..b.col0 + b.nx).contains(&c) && (b.row0..b.row0 + b.ny).contains(&k);
                let want = if inside {
                    copy.values[(k - b.row0) * copy.nx + (c - b.col0)]
                } else {
                    f64::NAN
                };
                assert!(
                    v == want || (v.is_nan() && want.is_nan()),
                    "row {row}, column {col}: {v} vs {want}"
                );
            }
        }
    }

    /// A NetCDF-4 file longer than the whole-file limit (the small contiguous copy, its length
    /// set past 1 GiB, sparse on disk) is opened and read, by window and whole: nothing reads the
    /// file whole.
    #[test]
    fn netcdf4_file_longer_than_the_whole_file_limit_is_read() {
        let src = good("dem_netcdf4_sparse_copy.nc");
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("long.nc");
        std::fs::copy(&src, &path).unwrap();
        let f = std::fs::OpenOptions::new().write(true).open(&path).unwrap();
        f.set_len(MAX_WHOLE_FILE_BYTES + (1 << 20)).unwrap();
        drop(f);
        assert!(std::fs::metadata(&path).unwrap().len() > MAX_WHOLE_FILE_BYTES);
        let copy = read_dem(&src, None).unwrap();
        let whole = read_dem(&path, None).unwrap();
        same_values("whole", &whole.values, &copy.values);
        let b = CellBlock {
            col0: 3,
            row0: 2,
            nx: 10,
            ny: 7,
        };
        let w = read_dem_block(&path, None, b).unwrap();
        let want: Vec<f64> = (b.row0..b.row0 + b.ny)
            .flat_map(|r| (b.col0..b.col0 + b.nx).map(move |c| (c, r)))
            .map(|(c, r)| copy.values[r * copy.nx + c])
            .collect();
        same_values("block", &w.values, &want);
    }
}
