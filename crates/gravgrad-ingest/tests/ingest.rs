//! Properties of the readers: no panic on arbitrary bytes; any table of finite numbers written as
//! CSV comes back bit for bit, whatever the piece boundaries; the column map converts units.

use gravgrad_core::Location;
use gravgrad_ingest::columns::{ColumnMap, ColumnSource, Expectation};
use gravgrad_ingest::csv::read_csv_from;
use proptest::prelude::*;

const HEAD: [&str; 15] = [
    "time", "lat", "lon", "height", "roll", "pitch", "heading", "wx", "wy", "wz", "fx", "fy", "fz",
    "p_a", "p_b",
];

fn read(
    bytes: &[u8],
) -> (
    Option<gravgrad_ingest::csv::RawColumns>,
    Vec<gravgrad_core::Problem>,
) {
    read_csv_from(
        bytes,
        bytes.len() as u64,
        &Location::file("prop.csv"),
        &Expectation::default(),
    )
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 2000, .. ProptestConfig::default() })]

    /// Arbitrary bytes: the reader returns (data or problems) and never panics.
    #[test]
    fn arbitrary_bytes_never_panic(bytes in proptest::collection::vec(any::<u8>(), 0..2048)) {
        let _ = read(&bytes);
    }

    /// Arbitrary bytes after a valid header: every problem has a row inside the file.
    #[test]
    fn garbage_rows_are_located_inside_the_file(body in proptest::collection::vec(any::<u8>(), 0..4096)) {
        let mut bytes = HEAD.join(",").into_bytes();
        bytes.push(b'\n');
        bytes.extend_from_slice(&body);
        let lines = bytes.split(|b| *b == b'\n').count() as u64;
        let (_, problems) = read(&bytes);
        for p in problems {
            if let Some(r) = p.location.row {
                prop_assert!(r >= 1 && r <= lines + 1, "row {} of {} lines: {}", r, lines, p);
            }
        }
    }

    /// Finite f64 values written with Rust's shortest round-trip formatting come back exactly.
    #[test]
    fn finite_values_round_trip(rows in proptest::collection::vec(proptest::collection::vec(-1e300f64..1e300, 15), 1..60),
                                crlf in any::<bool>(), bom in any::<bool>()) {
        let nl = if crlf { "\r\n" } else { "\n" };
        let mut text = String::new();
        if bom { text.push('\u{feff}'); }
        text.push_str(&HEAD.join(","));
        text.push_str(nl);
        for r in &rows {
            let cells: Vec<String> = r.iter().map(|v| format!("{v}")).collect();
            text.push_str(&cells.join(","));
            text.push_str(nl);
        }
        let (cols, _) = read(text.as_bytes());
        let cols = cols.expect("a table with a valid header is read");
        prop_assert_eq!(cols.n_rows(), rows.len());
        for (k, slot) in cols.plan.slots.iter().enumerate() {
            let j = HEAD.iter().position(|h| *h == slot.name).expect("slot is a header column");
            for (i, r) in rows.iter().enumerate() {
                prop_assert_eq!(cols.values[k][i].to_bits(), r[j].to_bits());
            }
        }
    }
}

#[test]
fn large_files_are_cut_into_pieces_without_losing_rows() {
    // 200k rows (~20 MB) span two read blocks and many parallel pieces; values are the row index.
    let n = 200_000;
    let mut text = HEAD.join(",");
    text.push('\n');
    for i in 0..n {
        let cells: Vec<String> = (0..15)
            .map(|j| {
                if j == 0 {
                    format!("{}", 1.4e9 + i as f64 * 0.02)
                } else {
                    format!("{}", i % 997)
                }
            })
            .collect();
        text.push_str(&cells.join(","));
        text.push('\n');
    }
    let (cols, problems) = read(text.as_bytes());
    assert!(problems.is_empty(), "{problems:?}");
    let cols = cols.unwrap();
    assert_eq!(cols.n_rows(), n);
    for (i, v) in cols.values[3].iter().enumerate() {
        assert_eq!(*v, (i % 997) as f64);
    }
}

#[test]
fn the_column_map_renames_and_converts_units() {
    // A logger writing specific force in g (standard gravity 9.80665 m/s², CGPM 1901) and
    // temperature in kelvin.
    let mut head: Vec<String> = HEAD.iter().map(|s| s.to_string()).collect();
    head[12] = "acc_z_g".into();
    head.push("temp_k".into());
    let mut text = head.join(",");
    text.push('\n');
    text.push_str("1.4e9,0,0,0,0,0,0,0,0,0,0,0,-1.0,0,0,300.15\n");
    let mut map = ColumnMap::new();
    map.insert(
        "fz".into(),
        ColumnSource {
            from: "acc_z_g".into(),
            scale: 9.80665,
            offset: 0.0,
        },
    );
    map.insert(
        "temp".into(),
        ColumnSource {
            from: "temp_k".into(),
            scale: 1.0,
            offset: -273.15,
        },
    );
    let expect = Expectation {
        map: Some(&map),
        ..Default::default()
    };
    let (cols, problems) = read_csv_from(text.as_bytes(), 0, &Location::file("m.csv"), &expect);
    assert!(problems.is_empty(), "{problems:?}");
    let cols = cols.unwrap();
    let (table, p) =
        gravgrad_ingest::read::to_table(cols.values, &cols.plan, &Location::file("m.csv"), 2);
    assert!(p.is_empty());
    assert_eq!(table.get("fz").unwrap(), &[-9.80665]);
    assert!((table.get("temp").unwrap()[0] - 27.0).abs() < 1e-12);
}

// ---------------------------------------------------------------------------------------------
// GeoTIFF rasters written by rasterio (GDAL): tests/corpus/make_rasters.py writes them with
// invented values; the numbers below are that script's, not our writer's. CI regenerates the files
// with the current rasterio and points GRAVGRAD_RASTER_CORPUS at them.

mod geotiff {
    use gravgrad_ingest::geotiff_reader::read_geotiff;
    use std::path::PathBuf;

    fn corpus(rel: &str) -> PathBuf {
        let root = std::env::var_os("GRAVGRAD_RASTER_CORPUS")
            .map(PathBuf::from)
            .unwrap_or_else(|| {
                PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("../../tests/corpus")
            });
        root.join(rel)
    }

    /// Float32, deflate, 16 × 16 tiles, EPSG:32753, 25 m cells from (512000 E, 7120000 N),
    /// value = 140 + 0.5 col − 0.25 row, nodata −9999 at (col 0, row 0) and (col 33, row 17).
    #[test]
    fn rasterio_float32_tiled_deflate() {
        let r = read_geotiff(&corpus("good/dem_rasterio.tif")).unwrap();
        assert_eq!((r.nx, r.ny), (40, 30));
        assert_eq!(
            (r.x_min, r.y_max, r.dx, r.dy),
            (512_000.0, 7_120_000.0, 25.0, 25.0)
        );
        assert_eq!(r.epsg, Some(32753));
        assert_eq!(r.nodata, Some(-9999.0));
        for row in 0..30 {
            for col in 0..40 {
                let v = r.get(col, row).unwrap();
                if (col, row) == (0, 0) || (col, row) == (33, 17) {
                    assert!(r.is_missing(v), "({col}, {row}) = {v}");
                } else {
                    assert_eq!(
                        v,
                        140.0 + 0.5 * col as f64 - 0.25 * row as f64,
                        "({col}, {row})"
                    );
                }
            }
        }
    }

    /// Int16, LZW, strips of 4 rows, EPSG:4326, 0.00125° cells from (134.5 E, 24 S),
    /// value = 300 + col − 3 row, nodata −32768 at (col 11, row 9).
    #[test]
    fn rasterio_int16_geographic_lzw() {
        let r = read_geotiff(&corpus("good/dem_rasterio_int16.tif")).unwrap();
        assert_eq!((r.nx, r.ny), (12, 10));
        assert_eq!(
            (r.x_min, r.y_max, r.dx, r.dy),
            (134.5, -24.0, 0.00125, 0.00125)
        );
        assert_eq!(r.epsg, Some(4326));
        assert_eq!(r.nodata, Some(-32768.0));
        assert_eq!(r.get(0, 0), Some(300.0));
        assert_eq!(r.get(5, 7), Some(284.0));
        assert_eq!(r.get(11, 9), Some(-32768.0));
        assert_eq!(r.get(10, 9), Some(283.0));
    }

    /// AREA_OR_POINT=Point: GDAL stores the first cell's centre (512012.5, 7119975) as the tie
    /// point with PixelIsPoint; the outer corner is still (512000, 7120000), 25 m × 50 m cells.
    #[test]
    fn rasterio_pixel_is_point() {
        let path = corpus("good/dem_rasterio_point.tif");
        let mut dec = tiff::decoder::Decoder::new(std::fs::File::open(&path).unwrap()).unwrap();
        let tie = dec
            .get_tag_f64_vec(tiff::tags::Tag::ModelTiepointTag)
            .unwrap();
        assert_eq!(&tie[3..5], &[512_012.5, 7_119_975.0]);
        let r = read_geotiff(&path).unwrap();
        assert_eq!(
            (r.x_min, r.y_max, r.dx, r.dy),
            (512_000.0, 7_120_000.0, 25.0, 50.0)
        );
        assert_eq!(r.epsg, Some(32753));
        assert_eq!(r.nodata, None);
        assert_eq!(r.get(2, 3), Some(15.0)); // 10 + col + row
    }

    /// Each bad file is refused with one error, located at the file, naming the tag at fault.
    #[test]
    fn rasterio_bad_files_are_refused() {
        for (file, tag) in [
            ("bad/dem_rotated.tif", "ModelTransformationTag (34264)"),
            ("bad/dem_two_bands.tif", "SamplesPerPixel tag 277"),
            ("bad/dem_no_georef.tif", "ModelPixelScaleTag (33550)"),
        ] {
            let path = corpus(file);
            let problems = read_geotiff(&path).unwrap_err();
            assert_eq!(problems.len(), 1, "{file}: {problems:?}");
            let p = &problems[0];
            assert!(p.is_error());
            assert_eq!(p.location.file.as_deref(), Some(path.as_path()), "{file}");
            assert!(p.message.contains(tag), "{file}: {}", p.message);
        }
    }

    proptest::proptest! {
        #![proptest_config(proptest::prelude::ProptestConfig { cases: 500, .. Default::default() })]

        /// A rasterio file with bytes overwritten anywhere (tags, offsets, compressed data): the
        /// reader returns a raster or problems and never panics.
        #[test]
        fn damaged_files_never_panic(
            hits in proptest::collection::vec((0usize..4096, proptest::prelude::any::<u8>()), 1..8),
            which in 0usize..3,
        ) {
            let name = ["good/dem_rasterio.tif", "good/dem_rasterio_int16.tif", "good/dem_rasterio_point.tif"][which];
            let mut bytes = std::fs::read(corpus(name)).unwrap();
            for (at, b) in hits {
                let n = bytes.len();
                bytes[at % n] = b;
            }
            let dir = tempfile::tempdir().unwrap();
            let path = dir.path().join("damaged.tif");
            std::fs::write(&path, &bytes).unwrap();
            let _ = read_geotiff(&path);
        }
    }

    /// Not a TIFF at all, and a missing file: one located error each, no panic.
    #[test]
    fn not_a_tiff() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("dem.tif");
        std::fs::write(&path, b"height\n1\n").unwrap();
        let p = read_geotiff(&path).unwrap_err();
        assert_eq!(p.len(), 1);
        assert_eq!(p[0].location.file.as_deref(), Some(path.as_path()));
        let p = read_geotiff(&dir.path().join("none.tif")).unwrap_err();
        assert!(p[0].message.contains("cannot open"), "{}", p[0].message);
    }
}

/// The DEM window a run uses (`dem::prepare_window`): coverage, size, holes and implausible cells.
mod dem_window {
    use gravgrad_core::Location;
    use gravgrad_core::raster::Raster;
    use gravgrad_ingest::dem::{MAX_DEM_WINDOW_CELLS, prepare_window};
    use std::path::Path;

    /// A 40 × 30 plane z = 200 + 0.01·x − 0.02·y (m) of 100 m cells from (0, 3000).
    fn plane() -> Raster {
        let (nx, ny) = (40, 30);
        let mut r = Raster::new(nx, ny, (0.0, 3000.0), (100.0, 100.0), vec![0.0; nx * ny])
            .unwrap()
            .with_epsg(32653);
        for row in 0..ny {
            for col in 0..nx {
                let (x, y) = r.cell_centre(col, row);
                r.values[row * nx + col] = 200.0 + 0.01 * x - 0.02 * y;
            }
        }
        r
    }

    fn key() -> Location {
        Location::file("recipe.toml").with_key("terrain.dem")
    }

    const ALL: [f64; 4] = [0.0, 4000.0, 0.0, 3000.0];

    #[test]
    fn holes_under_the_survey_are_filled_and_named() {
        let mut r = plane();
        let truth = r.values[12 * 40 + 7];
        r.values[12 * 40 + 7] = f64::NAN;
        r.values[20 * 40 + 30] = -5.0;
        r = r.with_nodata(-5.0);
        let w = prepare_window(&r, ALL, Path::new("dem.tif"), &key()).unwrap();
        assert_eq!(w.filled, 2);
        // On a plane, opposite neighbours at equal distances average to the plane itself.
        assert!((w.raster.values[12 * 40 + 7] - truth).abs() < 1e-9);
        assert_eq!(w.raster.nodata, None);
        let text = w.warnings[0].to_string();
        assert!(text.contains("2 cells"), "{text}");
        assert!(
            text.contains("row 12, column 7 (centre 750.0, 1750.0)"),
            "{text}"
        );
        assert!(text.contains("row 20, column 30"), "{text}");
    }

    #[test]
    fn undeclared_sentinels_are_holes_with_a_warning() {
        let mut r = plane();
        r.values[5 * 40 + 5] = -9999.0;
        r.values[6 * 40 + 9] = -32768.0;
        let w = prepare_window(&r, ALL, Path::new("dem.tif"), &key()).unwrap();
        assert_eq!(w.filled, 2);
        let all: Vec<String> = w.warnings.iter().map(|p| p.to_string()).collect();
        assert!(
            all.iter()
                .any(|t| t.contains("-9999 or -32768") && t.contains("row 5, column 5")),
            "{all:?}"
        );
        assert!(w.raster.values.iter().all(|v| (100.0..300.0).contains(v)));
    }

    #[test]
    fn an_implausible_elevation_is_refused_with_its_cell() {
        let mut r = plane();
        r.values[3 * 40 + 4] = 1e30;
        let e = prepare_window(&r, ALL, Path::new("dem.tif"), &key()).unwrap_err();
        let text = e[0].to_string();
        assert!(
            text.contains("dem.tif") && text.contains("1e30") && text.contains("row 3, column 4"),
            "{text}"
        );
    }

    #[test]
    fn a_dem_that_misses_the_survey_is_refused_naming_both_extents() {
        // The survey 100 km east of the DEM.
        let need = [100_000.0, 104_000.0, 0.0, 3000.0];
        let e = prepare_window(&plane(), need, Path::new("far.tif"), &key()).unwrap_err();
        let text = e[0].to_string();
        assert!(
            text.contains("far.tif") && text.contains("terrain.dem"),
            "{text}"
        );
        assert!(text.contains("spans x 0 to 4000, y 0 to 3000"), "{text}");
        assert!(text.contains("needs x 100000 to 104000"), "{text}");
    }

    #[test]
    fn the_window_is_the_survey_plus_margin_not_the_whole_dem() {
        let w = prepare_window(
            &plane(),
            [1000.0, 2000.0, 1000.0, 1500.0],
            Path::new("dem.tif"),
            &key(),
        )
        .unwrap();
        // Cells 10..20 × rows 15..20, one more on each side.
        assert_eq!((w.raster.nx, w.raster.ny), (12, 7));
        assert_eq!((w.raster.x_min, w.raster.y_max), (900.0, 1600.0));
        assert_eq!(w.raster.values[0], plane().values[14 * 40 + 9]);
    }

    #[test]
    fn too_many_holes_are_refused() {
        let mut r = plane();
        for v in r.values.iter_mut().step_by(10) {
            *v = f64::NAN;
        }
        let e = prepare_window(&r, ALL, Path::new("dem.tif"), &key()).unwrap_err();
        let text = e[0].to_string();
        assert!(
            text.contains("120 of the 1200 cells") && text.contains("at most 5 %"),
            "{text}"
        );
    }

    #[test]
    fn a_window_past_its_limit_names_the_margin_and_the_size() {
        let n = 3200;
        assert!(n * n > MAX_DEM_WINDOW_CELLS);
        let r = Raster::new(n, n, (0.0, 32_000.0), (10.0, 10.0), vec![100.0; n * n]).unwrap();
        let e = prepare_window(
            &r,
            [0.0, 32_000.0, 0.0, 32_000.0],
            Path::new("dem.tif"),
            &key(),
        )
        .unwrap_err();
        let text = e[0].to_string();
        assert!(
            text.contains("terrain.margin_m") && text.contains("3200 × 3200 = 10240000 cells"),
            "{text}"
        );
    }
}

/// Every numeric recipe key is range-checked when the recipe is read, naming the key and range.
mod recipe_ranges {
    use gravgrad_ingest::recipe::read_recipe;

    fn errors_of(extra: &str) -> Vec<String> {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("recipe.toml");
        let text = format!(
            "layout = \"recipe/1\"\n[input]\nflights = [\"f.csv\"]\n[instrument]\npath = \"i.toml\"\n{extra}"
        );
        std::fs::write(&path, text).unwrap();
        match read_recipe(&path) {
            Ok(_) => vec![],
            Err(p) => p.iter().map(|p| p.to_string()).collect(),
        }
    }

    #[test]
    fn values_that_would_blow_up_late_are_refused_at_load_naming_the_key() {
        assert!(errors_of("").is_empty(), "{:?}", errors_of(""));
        for (extra, key, range) in [
            ("[grid]\ncell_m = 0.1", "grid.cell_m", "from 1 to 10000 m"),
            (
                "[grid]\nblanking_m = 1e300",
                "grid.blanking_m",
                "at most 100000 m",
            ),
            (
                "[filter]\ncutoff_wavelength_m = 1e12",
                "filter.cutoff_wavelength_m",
                "from 10 to 100000 m",
            ),
            (
                "[terrain]\ndem = \"d.tif\"\ndensity_kg_m3 = 1e300",
                "terrain.density_kg_m3",
                "from 500 to 5000 kg/m³",
            ),
            (
                "[terrain]\ndem = \"d.tif\"\nmargin_m = inf",
                "terrain.margin_m",
                "from 0 to 200000 m",
            ),
            ("[qc]\nmax_gap_s = nan", "qc.max_gap_s", "at most 3600 s"),
            (
                "[calibration]\nband_hz = [0.05, 1e9]",
                "calibration.band_hz",
                "≤ 1000 (Hz)",
            ),
        ] {
            let e = errors_of(extra);
            assert_eq!(e.len(), 1, "{extra}: {e:?}");
            assert!(
                e[0].contains(key) && e[0].contains(range),
                "{extra}: {}",
                e[0]
            );
        }
    }
}
