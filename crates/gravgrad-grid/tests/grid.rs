//! The GeoTIFF writer: round trip through our reader, same bytes every time, no file left under
//! the final name or a temporary name on failure.
//!
//! The two fixtures below are also checked by an outside reader: with `GRAVGRAD_GEOTIFF_OUT=DIR`
//! the round-trip tests leave `DIR/projected.tif` and `DIR/geographic.tif`, and
//! `tests/reference/check_geotiff.py DIR` opens them with rasterio (GDAL) and asserts the frame,
//! the transform, nodata and pixel values, which it computes from the same invented formulas on its
//! own. CI runs both (`.ci/run`).

use gravgrad_core::Raster;
use gravgrad_grid::geotiff::{GeoTiffError, Packing, SampleType, WriteOptions, write_geotiff};
use gravgrad_ingest::geotiff_reader::read_geotiff;
use std::path::{Path, PathBuf};

/// Projected fixture (same numbers in check_geotiff.py): 7 × 5 cells of 25 m east by 50 m north,
/// north-west corner (512 000 E, 7 120 000 N) in WGS 84 / UTM 53S (EPSG:32753), nodata −9999 at
/// (column 3, row 2); value(c, r) = 100 + 10 r + c + 0.25, exact in float32.
fn projected() -> Raster {
    let (nx, ny) = (7, 5);
    let mut v: Vec<f64> = (0..nx * ny)
        .map(|i| 100.0 + 10.0 * (i / nx) as f64 + (i % nx) as f64 + 0.25)
        .collect();
    v[2 * nx + 3] = -9999.0;
    Raster::new(nx, ny, (512_000.0, 7_120_000.0), (25.0, 50.0), v)
        .unwrap()
        .with_epsg(32753)
        .with_nodata(-9999.0)
}

/// Geographic fixture (same numbers in check_geotiff.py): 6 × 4 cells of 0.00125° by 0.0025°,
/// north-west corner (134.5° E, 24.0° S) in WGS 84 (EPSG:4326), nodata NaN at (column 0, row 3);
/// value(c, r) = c / 3 + r · 0.1 as float64 (not exact in float32, so it shows float64 survives).
fn geographic() -> Raster {
    let (nx, ny) = (6, 4);
    let mut v: Vec<f64> = (0..nx * ny)
        .map(|i| (i % nx) as f64 / 3.0 + (i / nx) as f64 * 0.1)
        .collect();
    v[3 * nx] = f64::NAN;
    Raster::new(nx, ny, (134.5, -24.0), (0.00125, 0.0025), v)
        .unwrap()
        .with_epsg(4326)
        .with_nodata(f64::NAN)
}

/// The folder for the fixtures: `GRAVGRAD_GEOTIFF_OUT` when set (kept for the outside check),
/// else a temporary folder.
fn out_dir() -> (PathBuf, Option<tempfile::TempDir>) {
    match std::env::var_os("GRAVGRAD_GEOTIFF_OUT") {
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

fn same_values(a: &[f64], b: &[f64]) {
    assert_eq!(a.len(), b.len());
    for (i, (x, y)) in a.iter().zip(b).enumerate() {
        assert!(
            x == y || (x.is_nan() && y.is_nan()),
            "value {i}: {x} vs {y}"
        );
    }
}

#[test]
fn projected_float32_round_trip() {
    let (dir, _keep) = out_dir();
    let path = dir.join("projected.tif");
    let r = projected();
    write_geotiff(&r, &path, &WriteOptions::default()).unwrap();
    let back = read_geotiff(&path).unwrap();
    assert_eq!((back.nx, back.ny), (7, 5));
    assert_eq!((back.x_min, back.y_max), (512_000.0, 7_120_000.0));
    assert_eq!((back.dx, back.dy), (25.0, 50.0));
    assert_eq!(back.epsg, Some(32753));
    assert_eq!(back.nodata, Some(-9999.0));
    same_values(&back.values, &r.values);
    assert_eq!(back.get(4, 1), Some(114.25));
    assert!(back.is_missing(back.get(3, 2).unwrap()));
}

#[test]
fn geographic_float64_deflate_round_trip() {
    let (dir, _keep) = out_dir();
    let path = dir.join("geographic.tif");
    let r = geographic();
    let opts = WriteOptions {
        sample: SampleType::Float64,
        packing: Packing::Deflate,
        frame: None,
    };
    write_geotiff(&r, &path, &opts).unwrap();
    let back = read_geotiff(&path).unwrap();
    assert_eq!((back.nx, back.ny), (6, 4));
    assert_eq!((back.x_min, back.y_max), (134.5, -24.0));
    assert_eq!((back.dx, back.dy), (0.00125, 0.0025));
    assert_eq!(back.epsg, Some(4326));
    assert!(back.nodata.unwrap().is_nan());
    same_values(&back.values, &r.values);
}

#[test]
fn same_raster_same_bytes() {
    let dir = tempfile::tempdir().unwrap();
    for opts in [
        WriteOptions::default(),
        WriteOptions {
            sample: SampleType::Float64,
            packing: Packing::Deflate,
            frame: None,
        },
    ] {
        let a = dir.path().join("a.tif");
        let b = dir.path().join("b.tif");
        write_geotiff(&projected(), &a, &opts).unwrap();
        write_geotiff(&projected(), &b, &opts).unwrap();
        assert_eq!(std::fs::read(&a).unwrap(), std::fs::read(&b).unwrap());
    }
}

fn names_in(dir: &Path) -> Vec<String> {
    let mut n: Vec<String> = std::fs::read_dir(dir)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    n.sort();
    n
}

#[test]
fn only_the_final_file_is_left() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("dem.tif");
    std::fs::write(&path, b"an older file").unwrap();
    write_geotiff(&projected(), &path, &WriteOptions::default()).unwrap();
    assert_eq!(names_in(dir.path()), vec!["dem.tif".to_string()]);
    assert!(read_geotiff(&path).is_ok());
}

#[test]
fn refused_raster_leaves_nothing() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("big.tif");
    let mut r = projected();
    // 1e39 is beyond float32's largest finite value, about 3.4e38 (IEEE 754).
    r.values[8] = 1e39;
    let err = write_geotiff(&r, &path, &WriteOptions::default()).unwrap_err();
    assert!(matches!(
        err,
        GeoTiffError::OutOfFloat32 { col: 1, row: 1, .. }
    ));
    assert!(err.to_string().contains("big.tif"), "{err}");
    assert!(names_in(dir.path()).is_empty());
    // Float64 holds it.
    let opts = WriteOptions {
        sample: SampleType::Float64,
        ..WriteOptions::default()
    };
    write_geotiff(&r, &path, &opts).unwrap();
    assert_eq!(read_geotiff(&path).unwrap().values[8], 1e39);
}

#[test]
fn errors_name_the_path() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("missing-folder").join("dem.tif");
    let err = write_geotiff(&projected(), &path, &WriteOptions::default()).unwrap_err();
    assert!(matches!(err, GeoTiffError::Create { .. }));
    assert!(
        err.to_string().contains(&path.display().to_string()),
        "{err}"
    );
    let mut bad = projected();
    bad.values.pop();
    let err = write_geotiff(&bad, &dir.path().join("x.tif"), &WriteOptions::default()).unwrap_err();
    assert!(matches!(err, GeoTiffError::Raster { .. }), "{err}");
}
