//! Properties of the readers: no panic on arbitrary bytes; any table of finite numbers written as
//! CSV comes back bit for bit, whatever the piece boundaries; the column map converts units.

use approx::assert_abs_diff_eq;
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
    assert_abs_diff_eq!(table.get("temp").unwrap()[0], 27.0, epsilon = 1e-12);
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

    /// The rasterio files read by block (`read_geotiff_block`: only the tiles or strips meeting
    /// it) hold the same cells as the whole read: the float32 file in 16 × 16 tiles (the last
    /// ones padded), the int16 file in strips of 4 rows, the pixel-is-point file.
    #[test]
    fn blocks_of_rasterio_tiled_and_striped_files_equal_the_whole_read() {
        use gravgrad_ingest::geotiff_reader::{CellBlock, read_geotiff_block, read_geotiff_header};
        for name in [
            "good/dem_rasterio.tif",
            "good/dem_rasterio_int16.tif",
            "good/dem_rasterio_point.tif",
        ] {
            let path = corpus(name);
            let whole = read_geotiff(&path).unwrap();
            let h = read_geotiff_header(&path).unwrap();
            assert_eq!(
                (h.nx, h.ny, h.x_min, h.y_max, h.epsg, h.nodata),
                (
                    whole.nx,
                    whole.ny,
                    whole.x_min,
                    whole.y_max,
                    whole.epsg,
                    whole.nodata
                ),
                "{name}"
            );
            let mut blocks = vec![h.whole()];
            for row0 in 0..h.ny {
                for col0 in 0..h.nx {
                    for (w, t) in [(1, 1), (5, 3), (17, 9), (h.nx, h.ny)] {
                        blocks.push(CellBlock {
                            col0,
                            row0,
                            nx: (h.nx - col0).min(w),
                            ny: (h.ny - row0).min(t),
                        });
                    }
                }
            }
            for b in blocks {
                let r = read_geotiff_block(&path, b).unwrap();
                assert_eq!((r.nx, r.ny), (b.nx, b.ny), "{name} {b:?}");
                assert_eq!(
                    (r.x_min, r.y_max, r.nodata),
                    (
                        h.x_min + b.col0 as f64 * h.dx,
                        h.y_max - b.row0 as f64 * h.dy,
                        h.nodata
                    ),
                    "{name} {b:?}"
                );
                for row in 0..b.ny {
                    for col in 0..b.nx {
                        assert_eq!(
                            r.values[row * b.nx + col],
                            whole.values[(b.row0 + row) * whole.nx + b.col0 + col],
                            "{name} {b:?}: ({col}, {row})"
                        );
                    }
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

/// Declared sizes are never trusted (issue 16): each test names the defect it guards.
mod declared_sizes {
    use gravgrad_core::Problem;
    use gravgrad_ingest::columns::Expectation;
    use gravgrad_ingest::geotiff_reader::read_geotiff;
    use gravgrad_ingest::mutate::{find_all, patch_parquet_footer_count};
    use gravgrad_ingest::read::read_flight_file;
    use parquet::file::reader::{FileReader, SerializedFileReader};
    use std::path::{Path, PathBuf};

    fn good(name: &str) -> PathBuf {
        PathBuf::from(env!("CARGO_MANIFEST_DIR"))
            .join("../../tests/corpus/good")
            .join(name)
    }

    /// Exactly one error, located at `path`, whose message holds every one of `words`.
    fn one_error_at(problems: &[Problem], path: &Path, words: &[&str]) {
        let errors: Vec<&Problem> = problems.iter().filter(|p| p.is_error()).collect();
        assert_eq!(errors.len(), 1, "{problems:?}");
        assert_eq!(errors[0].location.file.as_deref(), Some(path));
        for w in words {
            assert!(
                errors[0].message.contains(w),
                "{w:?} not in {}",
                errors[0].message
            );
        }
    }

    #[test]
    fn parquet_footer_claiming_5e9_rows_is_refused_before_allocating() {
        let bytes = std::fs::read(good("pyarrow.parquet")).unwrap();
        // The footer's first count of 40 is FileMetaData.num_rows (field 3, before the row groups).
        let patched = patch_parquet_footer_count(&bytes, 40, 5_000_000_000, 0).unwrap();
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("f.parquet");
        std::fs::write(&path, &patched).unwrap();
        let r = SerializedFileReader::new(std::fs::File::open(&path).unwrap()).unwrap();
        assert_eq!(r.metadata().file_metadata().num_rows(), 5_000_000_000);
        let out = read_flight_file(&path, &Expectation::default());
        assert!(out.flights.is_empty());
        one_error_at(&out.problems, &path, &["5000000000", "footer"]);
    }

    #[test]
    fn parquet_row_group_and_column_chunk_counts_patched_are_refused() {
        let bytes = std::fs::read(good("pyarrow.parquet")).unwrap();
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("f.parquet");
        // Every other count of 40 in the footer that the parquet crate then reads as a row
        // group's num_rows or a column chunk's num_values.
        let mut counts_patched = 0;
        for k in 1.. {
            let Some(patched) = patch_parquet_footer_count(&bytes, 40, 5_000_000_000, k) else {
                break;
            };
            std::fs::write(&path, &patched).unwrap();
            let Ok(r) = SerializedFileReader::new(std::fs::File::open(&path).unwrap()) else {
                continue;
            };
            let rg = r.metadata().row_group(0);
            let hit = rg.num_rows() == 5_000_000_000
                || rg.columns().iter().any(|c| c.num_values() == 5_000_000_000);
            if !hit {
                continue;
            }
            let out = read_flight_file(&path, &Expectation::default());
            assert!(out.flights.is_empty(), "count {k}");
            one_error_at(&out.problems, &path, &["5000000000"]);
            counts_patched += 1;
        }
        // 18 column chunks and the row group.
        assert_eq!(counts_patched, 19);
    }

    #[test]
    fn parquet_schema_declaring_100_million_children_is_refused_before_decoding() {
        // The root schema element's num_children (18 columns) is the footer's first 18: the
        // parquet crate would reserve 800 MB for the children before finding them missing.
        let bytes = std::fs::read(good("pyarrow.parquet")).unwrap();
        let patched = patch_parquet_footer_count(&bytes, 18, 100_000_000, 0).unwrap();
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("f.parquet");
        std::fs::write(&path, &patched).unwrap();
        let out = read_flight_file(&path, &Expectation::default());
        one_error_at(&out.problems, &path, &["100000000 children", "footer"]);
    }

    #[test]
    fn parquet_of_20000_row_groups_is_read_whole() {
        use parquet::data_type::DoubleType;
        use parquet::file::properties::WriterProperties;
        use parquet::file::writer::SerializedFileWriter;
        use parquet::schema::parser::parse_message_type;
        use std::sync::Arc;
        let schema = Arc::new(
            parse_message_type(
                "message f { required double time; required double fx; required double fy; \
                 required double fz; required double zz_a; required double zz_b; }",
            )
            .unwrap(),
        );
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("groups.parquet");
        let props = Arc::new(WriterProperties::builder().build());
        let mut w = SerializedFileWriter::new(std::fs::File::create(&path).unwrap(), schema, props)
            .unwrap();
        for g in 0..20_000 {
            let mut rg = w.next_row_group().unwrap();
            let mut c = 0;
            while let Some(mut col) = rg.next_column().unwrap() {
                let v = if c == 0 { g as f64 * 0.1 } else { 1.0 };
                col.typed::<DoubleType>()
                    .write_batch(&[v], None, None)
                    .unwrap();
                col.close().unwrap();
                c += 1;
            }
            rg.close().unwrap();
        }
        w.close().unwrap();
        let only = ["time", "fx", "fy", "fz"];
        let expect = Expectation {
            only: Some(&only),
            ..Expectation::default()
        };
        let out = read_flight_file(&path, &expect);
        assert!(
            out.problems.iter().all(|p| !p.is_error()),
            "{:?}",
            out.problems
        );
        let t = &out.flights[0].table;
        assert_eq!(t.n_rows(), 20_000);
        assert_eq!(t.get("time").unwrap()[19_999], 19_999.0 * 0.1);
    }

    #[test]
    fn hdf5_declaring_2e8_rows_is_refused_before_reading() {
        let bytes = std::fs::read(good("h5py.h5")).unwrap();
        // Every dataset has 40 rows: its dataspace message (version 1: 1, rank 1, flags, 5 zero
        // bytes; version 2: 2, rank 1, flags, type) holds 40 as a little-endian u64.
        let mut patched = bytes.clone();
        let hits: Vec<usize> = find_all(&bytes, &40u64.to_le_bytes())
            .into_iter()
            .filter(|&at| {
                at >= 8
                    && ((bytes[at - 8] == 1 && bytes[at - 7] == 1 && bytes[at - 4..at] == [0; 4])
                        || (bytes[at - 4] == 2 && bytes[at - 3] == 1))
            })
            .collect();
        assert!(!hits.is_empty());
        for at in hits {
            patched[at..at + 8].copy_from_slice(&200_000_000u64.to_le_bytes());
        }
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("f.h5");
        std::fs::write(&path, &patched).unwrap();
        let f = hdf5_pure::File::from_bytes(patched).unwrap();
        let g = f.group("flight_a").unwrap();
        assert_eq!(g.dataset("fx").unwrap().shape().unwrap(), vec![200_000_000]);
        let out = read_flight_file(&path, &Expectation::default());
        assert!(out.flights.is_empty());
        assert!(!out.problems.is_empty());
        for p in &out.problems {
            assert!(p.is_error());
            assert_eq!(p.location.file.as_deref(), Some(path.as_path()));
            assert!(p.message.contains("200000000"), "{}", p.message);
        }
    }

    #[test]
    fn inputs_symlinked_to_dev_zero_are_refused() {
        let dir = tempfile::tempdir().unwrap();
        for name in ["f.csv", "f.parquet", "f.h5"] {
            let path = dir.path().join(name);
            std::os::unix::fs::symlink("/dev/zero", &path).unwrap();
            let out = read_flight_file(&path, &Expectation::default());
            one_error_at(&out.problems, &path, &["a device", "regular file"]);
        }
        for name in ["dem.tif", "dem.nc"] {
            let path = dir.path().join(name);
            std::os::unix::fs::symlink("/dev/zero", &path).unwrap();
            let problems = gravgrad_ingest::dem::read_dem(&path, None).unwrap_err();
            one_error_at(&problems, &path, &["regular file"]);
        }
        let path = dir.path().join("recipe.toml");
        std::os::unix::fs::symlink("/dev/zero", &path).unwrap();
        let p = gravgrad_ingest::tomlfile::read::<toml::Table>(&path).unwrap_err();
        one_error_at(&[p], &path, &["a device"]);
        let folder = dir.path().join("folder.csv");
        std::fs::create_dir(&folder).unwrap();
        let out = read_flight_file(&folder, &Expectation::default());
        one_error_at(&out.problems, &folder, &["a folder"]);
    }

    /// A little-endian TIFF of `n` × `n` float32 cells of 100.0 in one strip.
    fn small_tiff(n: u32, compression: tiff::encoder::Compression) -> Vec<u8> {
        let mut out = std::io::Cursor::new(Vec::new());
        let mut enc = tiff::encoder::TiffEncoder::new(&mut out)
            .unwrap()
            .with_compression(compression);
        let mut img = enc
            .new_image::<tiff::encoder::colortype::Gray32Float>(n, n)
            .unwrap();
        img.rows_per_strip(n).unwrap();
        img.write_data(&vec![100.0f32; (n * n) as usize]).unwrap();
        out.into_inner()
    }

    /// The ImageWidth, ImageLength and RowsPerStrip entries of a little-endian classic TIFF set
    /// to `width`, `height` and `height`: one strip still holds the whole (declared) image.
    fn patch_tiff_size(bytes: &[u8], width: u32, height: u32) -> Vec<u8> {
        let mut out = bytes.to_vec();
        assert_eq!(&bytes[..2], b"II");
        let ifd = u32::from_le_bytes(bytes[4..8].try_into().unwrap()) as usize;
        let n = u16::from_le_bytes(bytes[ifd..ifd + 2].try_into().unwrap()) as usize;
        let mut patched = 0;
        for e in 0..n {
            let at = ifd + 2 + 12 * e;
            let tag = u16::from_le_bytes(bytes[at..at + 2].try_into().unwrap());
            let kind = u16::from_le_bytes(bytes[at + 2..at + 4].try_into().unwrap());
            let v = match tag {
                256 => width,
                257 | 278 => height,
                _ => continue,
            };
            out[at + 8..at + 12].fill(0);
            if kind == 3 {
                out[at + 8..at + 10].copy_from_slice(&(v as u16).to_le_bytes());
            } else {
                out[at + 8..at + 12].copy_from_slice(&v.to_le_bytes());
            }
            patched += 1;
        }
        assert_eq!(patched, 3);
        out
    }

    #[test]
    fn geotiff_declaring_16000_by_16000_cells_is_refused_before_decoding() {
        let bytes = small_tiff(8, tiff::encoder::Compression::Uncompressed);
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("dem.tif");
        std::fs::write(&path, patch_tiff_size(&bytes, 16_000, 16_000)).unwrap();
        let problems = read_geotiff(&path).unwrap_err();
        one_error_at(
            &problems,
            &path,
            &["16000 × 16000", "256, 257", "at most 67108864"],
        );
    }

    #[test]
    fn geotiff_declaring_more_than_its_compression_can_hold_is_refused() {
        // Deflate expands at most 1032 times: a file of a few hundred bytes cannot hold
        // 2000 × 2000 float32 cells (16 MB); uncompressed, it cannot hold 100 × 100 (40 kB).
        let cases = [
            (
                tiff::encoder::Compression::Deflate(tiff::encoder::DeflateLevel::Fast),
                2000,
                "Compression (tag 259) 8",
            ),
            (
                tiff::encoder::Compression::Uncompressed,
                100,
                "Compression (tag 259) 1",
            ),
        ];
        for (compression, n, words) in cases {
            let bytes = small_tiff(64, compression);
            assert!(bytes.len() < 4096 + 16384, "{} bytes", bytes.len());
            let dir = tempfile::tempdir().unwrap();
            let path = dir.path().join("dem.tif");
            std::fs::write(&path, patch_tiff_size(&bytes, n, n)).unwrap();
            let problems = read_geotiff(&path).unwrap_err();
            one_error_at(&problems, &path, &[&format!("{n} × {n}"), words]);
        }
    }

    #[test]
    fn geotiff_tag_declaring_more_bytes_than_the_file_is_refused_before_reading() {
        // The StripOffsets entry (tag 273) declaring a billion offsets: the tiff crate would
        // reserve 4 GB for them.
        let mut bytes = small_tiff(8, tiff::encoder::Compression::Uncompressed);
        let ifd = u32::from_le_bytes(bytes[4..8].try_into().unwrap()) as usize;
        let n = u16::from_le_bytes(bytes[ifd..ifd + 2].try_into().unwrap()) as usize;
        let at = (0..n)
            .map(|e| ifd + 2 + 12 * e)
            .find(|&at| bytes[at..at + 2] == 273u16.to_le_bytes())
            .unwrap();
        bytes[at + 4..at + 8].copy_from_slice(&1_000_000_000u32.to_le_bytes());
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("dem.tif");
        std::fs::write(&path, &bytes).unwrap();
        let problems = read_geotiff(&path).unwrap_err();
        one_error_at(&problems, &path, &["tag 273 declares 1000000000 values"]);
    }
}

/// The fixed-seed share of the mutation tests (the long run: `xtask mutate`,
/// docs/reliability.md): mutated copies of valid Parquet, HDF5, GeoTIFF and NetCDF files are read
/// in process; none may panic, and every problem must be located at the file.
/// The pages of a Parquet column chunk, checked before the `parquet` crate decodes them
/// (`gravgrad_ingest::parquet_pages`, docs/reliability.md): each damage below, made by patching a
/// page header of a file the crate's writer wrote, is refused with an error naming the file, the
/// column, the row group and the page; the ones that make the crate panic on its own are shown to.
mod parquet_pages {
    use gravgrad_core::Problem;
    use gravgrad_ingest::columns::Expectation;
    use gravgrad_ingest::mutate::patch_parquet_footer_count;
    use gravgrad_ingest::read::read_flight_file;
    use parquet::basic::{Compression, Encoding};
    use parquet::column::reader::ColumnReader;
    use parquet::data_type::DoubleType;
    use parquet::file::properties::WriterProperties;
    use parquet::file::reader::{FileReader, SerializedFileReader};
    use parquet::file::writer::SerializedFileWriter;
    use parquet::schema::parser::parse_message_type;
    use parquet::schema::types::ColumnPath;
    use std::sync::Arc;

    const ROWS: usize = 40;
    const ONLY: [&str; 4] = ["time", "fx", "fy", "fz"];

    /// A log of 40 rows, columns `time fx fy fz` (fz last), `optional` or `required`, written by
    /// the crate with `props`. fx and fy take four values, so that a dictionary encodes them.
    fn log(repetition: &str, props: WriterProperties) -> Vec<u8> {
        let schema = Arc::new(
            parse_message_type(&format!(
                "message f {{ {r} double time; {r} double fx; {r} double fy; {r} double fz; }}",
                r = repetition
            ))
            .unwrap(),
        );
        let mut out = Vec::new();
        let mut w = SerializedFileWriter::new(&mut out, schema, Arc::new(props)).unwrap();
        let mut rg = w.next_row_group().unwrap();
        let mut c = 0;
        while let Some(mut col) = rg.next_column().unwrap() {
            let v: Vec<f64> = (0..ROWS)
                .map(|i| match c {
                    0 => i as f64 * 0.1,
                    1 | 2 => (i % 4) as f64,
                    _ => 9.81 + i as f64 * 1e-3,
                })
                .collect();
            let defs = [1i16; ROWS];
            let defs = (repetition == "optional").then_some(&defs[..]);
            col.typed::<DoubleType>()
                .write_batch(&v, defs, None)
                .unwrap();
            col.close().unwrap();
            c += 1;
        }
        rg.close().unwrap();
        w.close().unwrap();
        out
    }

    /// The byte where `column`'s first page (`dictionary`) or first data page starts.
    fn page_at(bytes: &[u8], column: usize, dictionary: bool) -> usize {
        let r = SerializedFileReader::new(bytes::Bytes::from(bytes.to_vec())).unwrap();
        let cc = r.metadata().row_group(0).column(column);
        let at = if dictionary {
            cc.dictionary_page_offset().unwrap()
        } else {
            cc.data_page_offset()
        };
        at as usize
    }

    /// The i32 fields of the page header at `at`, in order, as (offset, length, value) of their
    /// zigzag varints: type, uncompressed_page_size, compressed_page_size, then the inner header's
    /// num_values and encoding (Thrift compact protocol: field header 0x15 is an i32 one id on,
    /// 0x?c a struct; the crate writes no crc).
    fn header_fields(b: &[u8], at: usize) -> Vec<(usize, usize, i64)> {
        let mut out = Vec::new();
        let mut p = at;
        while out.len() < 5 {
            let h = b[p];
            p += 1;
            match h & 0x0f {
                5 => {
                    let (mut v, mut n) = (0u64, 0);
                    while b[p + n] & 0x80 != 0 {
                        v |= u64::from(b[p + n] & 0x7f) << (7 * n);
                        n += 1;
                    }
                    v |= u64::from(b[p + n]) << (7 * n);
                    out.push((p, n + 1, (v >> 1) as i64 ^ -((v & 1) as i64)));
                    p += n + 1;
                }
                12 => {}
                t => panic!("unexpected Thrift type {t} at byte {p}"),
            }
        }
        out
    }

    fn zigzag_varint(v: i64) -> Vec<u8> {
        let mut z = ((v << 1) ^ (v >> 63)) as u64;
        let mut out = Vec::new();
        while z >= 0x80 {
            out.push((z as u8 & 0x7f) | 0x80);
            z >>= 7;
        }
        out.push(z as u8);
        out
    }

    /// `bytes` with header field `field` ([`header_fields`]) of the page at `at` set to `value`,
    /// the varint keeping its length.
    fn set_field(bytes: &[u8], at: usize, field: usize, value: i64) -> Vec<u8> {
        let (p, n, _) = header_fields(bytes, at)[field];
        let enc = zigzag_varint(value);
        assert_eq!(enc.len(), n, "{value} does not fit the field's {n} bytes");
        let mut out = bytes.to_vec();
        out[p..p + n].copy_from_slice(&enc);
        out
    }

    /// `bytes` with header field `field` of the last column's (fz) data page set to `value`, the
    /// varint longer than before: the chunk's total_compressed_size in the footer grows with it.
    fn grow_field_of_last_page(bytes: &[u8], field: usize, value: i64) -> Vec<u8> {
        let at = page_at(bytes, 3, false);
        let (p, n, _) = header_fields(bytes, at)[field];
        let enc = zigzag_varint(value);
        let grown = (enc.len() - n) as i64;
        let mut out = bytes.to_vec();
        out.splice(p..p + n, enc);
        let r = SerializedFileReader::new(bytes::Bytes::from(bytes.to_vec())).unwrap();
        let size = r.metadata().row_group(0).column(3).compressed_size();
        for k in 0.. {
            let patched = patch_parquet_footer_count(&out, size, size + grown, k)
                .expect("the chunk's size is in the footer");
            let r = SerializedFileReader::new(bytes::Bytes::from(patched.clone())).unwrap();
            if r.metadata().row_group(0).column(3).compressed_size() == size + grown {
                return patched;
            }
        }
        unreachable!()
    }

    /// Writes `bytes` and reads them as a flight log: exactly one error, at `column` of the file,
    /// whose message holds every one of `words`, and no contained panic.
    fn refused(bytes: &[u8], column: &str, words: &[&str]) {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("f.parquet");
        std::fs::write(&path, bytes).unwrap();
        let expect = Expectation {
            only: Some(&ONLY),
            ..Expectation::default()
        };
        let out = read_flight_file(&path, &expect);
        assert!(out.flights.is_empty());
        let errors: Vec<&Problem> = out.problems.iter().filter(|p| p.is_error()).collect();
        assert_eq!(errors.len(), 1, "{:?}", out.problems);
        let e = errors[0];
        assert_eq!(e.location.file.as_deref(), Some(path.as_path()));
        assert_eq!(e.location.column.as_deref(), Some(column));
        assert!(!e.message.contains("panicked"), "{}", e.message);
        for w in words {
            assert!(e.message.contains(w), "{w:?} not in {}", e.message);
        }
    }

    /// Whether the crate alone, reading column `column` of `bytes` the plain way, panics.
    fn crate_alone_panics(bytes: &[u8], column: usize) -> bool {
        let r = SerializedFileReader::new(bytes::Bytes::from(bytes.to_vec())).unwrap();
        std::panic::catch_unwind(std::panic::AssertUnwindSafe(|| {
            let rg = r.get_row_group(0).unwrap();
            let ColumnReader::DoubleColumnReader(mut c) = rg.get_column_reader(column).unwrap()
            else {
                unreachable!()
            };
            let (mut vals, mut defs) = (Vec::new(), Vec::new());
            let _ = c.read_records(ROWS, Some(&mut defs), None, &mut vals);
        }))
        .is_err()
    }

    fn dictionary_props() -> WriterProperties {
        WriterProperties::builder()
            .set_compression(Compression::UNCOMPRESSED)
            .build()
    }

    #[test]
    fn valid_logs_of_each_page_kind_are_read() {
        let v2 = parquet::file::properties::WriterVersion::PARQUET_2_0;
        let fx = ColumnPath::from("fx");
        for repetition in ["required", "optional"] {
            for props in [
                dictionary_props(),
                WriterProperties::builder()
                    .set_compression(Compression::SNAPPY)
                    .set_writer_version(v2)
                    .build(),
                WriterProperties::builder()
                    .set_compression(Compression::ZSTD(Default::default()))
                    .set_column_dictionary_enabled(fx.clone(), false)
                    .set_column_encoding(fx.clone(), Encoding::BYTE_STREAM_SPLIT)
                    .build(),
            ] {
                let bytes = log(repetition, props);
                let dir = tempfile::tempdir().unwrap();
                let path = dir.path().join("f.parquet");
                std::fs::write(&path, &bytes).unwrap();
                let expect = Expectation {
                    only: Some(&ONLY),
                    ..Expectation::default()
                };
                let out = read_flight_file(&path, &expect);
                assert!(out.problems.is_empty(), "{:?}", out.problems);
                let t = &out.flights[0].table;
                assert_eq!(t.get("fx").unwrap()[7], 3.0);
            }
        }
    }

    #[test]
    fn parquet_required_page_flipped_to_byte_stream_split_is_refused_before_decoding() {
        // fx's data page holds 40 dictionary indices in a few bytes; as BYTE_STREAM_SPLIT its 40
        // values need 320.
        let bytes = log("required", dictionary_props());
        let at = page_at(&bytes, 1, false);
        assert_eq!(header_fields(&bytes, at)[4].2, 8, "RLE_DICTIONARY");
        let bad = set_field(&bytes, at, 4, 9);
        assert!(crate_alone_panics(&bad, 1));
        refused(
            &bad,
            "fx",
            &[
                "row group 0, page 1",
                "40 values of encoding BYTE_STREAM_SPLIT need 320 bytes",
            ],
        );
    }

    #[test]
    fn parquet_optional_page_flipped_to_byte_stream_split_is_refused_as_it_is_decoded() {
        // The same with definition levels before the values: only the decoded page tells how many
        // values are not null (the case `xtask mutate` found in pyarrow's files).
        let bytes = log("optional", dictionary_props());
        let at = page_at(&bytes, 1, false);
        let bad = set_field(&bytes, at, 4, 9);
        assert!(crate_alone_panics(&bad, 1));
        refused(
            &bad,
            "fx",
            &[
                "row group 0, page 1",
                "40 non-null values of encoding BYTE_STREAM_SPLIT need 320 bytes",
            ],
        );
    }

    #[test]
    fn parquet_dictionary_encoded_page_without_its_dictionary_is_refused() {
        // fx's dictionary page retyped INDEX_PAGE (which readers skip): its data page is
        // dictionary-encoded with no dictionary before it.
        let bytes = log("required", dictionary_props());
        let at = page_at(&bytes, 1, true);
        assert_eq!(header_fields(&bytes, at)[0].2, 2, "DICTIONARY_PAGE");
        let bad = set_field(&bytes, at, 0, 1);
        assert!(crate_alone_panics(&bad, 1));
        refused(
            &bad,
            "fx",
            &[
                "row group 0, page 1",
                "RLE_DICTIONARY with no dictionary page before it",
            ],
        );
    }

    #[test]
    fn parquet_page_declaring_2_gib_is_refused_before_reserving_it() {
        let bytes = log("required", dictionary_props());
        let bad = grow_field_of_last_page(&bytes, 1, i32::MAX.into());
        refused(
            &bad,
            "fz",
            &[
                "row group 0, page 1",
                "uncompressed_page_size is 2147483647 bytes",
                "at most 301989888",
            ],
        );
    }

    #[test]
    fn parquet_page_declaring_more_than_its_codec_can_expand_is_refused() {
        // fz (no dictionary: 40 distinct values, PLAIN) compressed with SNAPPY: 64 MiB declared
        // for a page of a few hundred bytes, under the page limit but over 22 times the page.
        let props = WriterProperties::builder()
            .set_compression(Compression::SNAPPY)
            .set_column_dictionary_enabled(ColumnPath::from("fz"), false)
            .build();
        let bytes = log("required", props);
        let at = page_at(&bytes, 3, false);
        let compressed = header_fields(&bytes, at)[2].2;
        let bad = grow_field_of_last_page(&bytes, 1, 64 << 20);
        refused(
            &bad,
            "fz",
            &[
                "row group 0, page 0",
                "uncompressed_page_size is 67108864 bytes",
                &format!(
                    "SNAPPY expands the page's {compressed} bytes to at most {}",
                    22 * compressed
                ),
            ],
        );
    }

    #[test]
    fn parquet_page_running_past_its_chunk_is_refused() {
        let bytes = log("required", dictionary_props());
        let at = page_at(&bytes, 1, false);
        let [_, (_, _, unc), (_, n, comp), ..] = header_fields(&bytes, at)[..] else {
            unreachable!()
        };
        assert_eq!(unc, comp);
        // One more byte than the page: into the next chunk. Both sizes, so that the codec's
        // bound holds.
        let bad = set_field(&set_field(&bytes, at, 1, comp + 1), at, 2, comp + 1);
        assert_eq!(header_fields(&bad, at)[2].1, n);
        refused(
            &bad,
            "fx",
            &[
                "row group 0, page 1",
                &format!(
                    "compressed_page_size is {} bytes; expected 0 to {comp}",
                    comp + 1
                ),
            ],
        );
    }

    #[test]
    fn parquet_pages_holding_fewer_values_than_their_chunk_are_refused() {
        let bytes = log("required", dictionary_props());
        let at = page_at(&bytes, 1, false);
        assert_eq!(header_fields(&bytes, at)[3].2, 40);
        let bad = set_field(&bytes, at, 3, 39);
        refused(
            &bad,
            "fx",
            &["the chunk's data pages hold 39 values, its footer entry declares 40"],
        );
    }

    #[test]
    fn parquet_uncompressed_page_of_two_sizes_is_refused() {
        let bytes = log("required", dictionary_props());
        let at = page_at(&bytes, 1, false);
        let unc = header_fields(&bytes, at)[1].2;
        let bad = set_field(&bytes, at, 1, unc - 1);
        refused(
            &bad,
            "fx",
            &[&format!(
                "uncompressed_page_size is {} bytes, compressed_page_size {unc}",
                unc - 1
            )],
        );
    }
}

mod mutation {
    use gravgrad_ingest::mutate::{BinaryFormat, Rng, mutate, read_as};
    use std::path::PathBuf;

    const CASES: usize = 250;

    fn run(format: BinaryFormat, seed: u64) {
        let root = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("../..");
        let seeds: Vec<Vec<u8>> = format
            .seed_files()
            .iter()
            .map(|p| std::fs::read(root.join(p)).unwrap())
            .collect();
        let dir = tempfile::tempdir().unwrap();
        let mut rng = Rng::new(seed);
        let (mut read, mut refused) = (0, 0);
        for i in 0..CASES {
            let (bytes, damage) = mutate(format, &seeds[rng.below(seeds.len())], &mut rng);
            let path = dir.path().join(format!("case{i}.{}", format.extension()));
            std::fs::write(&path, &bytes).unwrap();
            let r = std::panic::catch_unwind(|| read_as(format, &path));
            let Ok(r) = r else {
                let keep = std::env::temp_dir().join(format!("mutant-{}-{i}", format.name()));
                std::fs::write(&keep, &bytes).unwrap();
                panic!(
                    "{} case {i} ({damage:?}) panicked; kept at {}",
                    format.name(),
                    keep.display()
                );
            };
            for p in &r.problems {
                assert_eq!(
                    p.location.file.as_deref(),
                    Some(path.as_path()),
                    "case {i}: {p}"
                );
                assert!(
                    !p.message.contains("panicked"),
                    "case {i} ({damage:?}): a contained panic: {p}"
                );
            }
            if r.problems.iter().any(|p| p.is_error()) {
                refused += 1;
            } else {
                assert!(r.items > 0, "case {i}: neither data nor an error");
                read += 1;
            }
        }
        // The share exercises both outcomes.
        assert!(
            read > 0 && refused > CASES / 2,
            "read {read}, refused {refused}"
        );
    }

    #[test]
    fn mutated_parquet_files() {
        run(BinaryFormat::Parquet, 11);
    }
    #[test]
    fn mutated_hdf5_files() {
        run(BinaryFormat::Hdf5, 12);
    }
    #[test]
    fn mutated_geotiff_files() {
        run(BinaryFormat::GeoTiff, 13);
    }
    #[test]
    fn mutated_netcdf_files() {
        run(BinaryFormat::NetCdf, 14);
    }
}

/// The DEM window a run uses (`dem::prepare_window`): coverage, size, holes and implausible cells.
mod dem_window {
    use approx::assert_abs_diff_eq;
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
        assert_abs_diff_eq!(w.raster.values[12 * 40 + 7], truth, epsilon = 1e-9);
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

/// DEMs larger than a whole read may hold (`MAX_GRID_CELLS`, 2^26 cells) read by the window a
/// survey needs: a GeoTIFF in deflated strips, one in deflated tiles and a classic NetCDF file
/// (sparse on disk: only the cells near the window are written), each 9000 × 8000 cells of
/// 30 m. The window's cells equal the same cells read whole from a small copy.
mod big_dem_windows {
    use gravgrad_core::Location;
    use gravgrad_core::limits::MAX_GRID_CELLS;
    use gravgrad_core::raster::Raster;
    use gravgrad_ingest::dem::{
        CellBlock, WindowKeys, read_dem, read_dem_block, read_dem_header, read_window,
    };
    use std::io::{BufWriter, Seek, Write};
    use std::path::Path;
    use tiff::encoder::compression::{CompressionAlgorithm, Deflate, DeflateLevel};
    use tiff::encoder::{DirectoryEncoder, TiffEncoder, TiffKindStandard};
    use tiff::tags::Tag;

    const W: usize = 9000;
    const H: usize = 8000;
    const CELL: f64 = 30.0;
    /// The grid's outer north-west corner, EPSG:32753 (m).
    const X0: f64 = 500_000.0;
    const Y0: f64 = 7_300_000.0;
    /// The block the small copy holds: columns 4100..4400, rows 3500..3700.
    const COPY: CellBlock = CellBlock {
        col0: 4100,
        row0: 3500,
        nx: 300,
        ny: 200,
    };

    /// The invented terrain at (`col`, `row`) of the big grid, m: a slope in steps of 128 cells
    /// with a ripple that changes from every cell to the next (so a window one cell off shows),
    /// repeating every 64 cells (so deflate packs it small).
    fn height(col: usize, row: usize) -> i16 {
        (100 + col / 128 + row / 128 + (col + 3 * row) % 64) as i16
    }

    /// The survey plus margin inside the small copy: its extent less 2 cells on every side.
    fn need() -> [f64; 4] {
        let x = |c: usize| X0 + c as f64 * CELL;
        let y = |r: usize| Y0 - r as f64 * CELL;
        [
            x(COPY.col0 + 2),
            x(COPY.col0 + COPY.nx - 2),
            y(COPY.row0 + COPY.ny - 2),
            y(COPY.row0 + 2),
        ]
    }

    fn keys() -> WindowKeys {
        WindowKeys::recipe(&Location::file("recipe.toml").with_key("terrain.dem"))
    }

    /// The georeferencing tags of a grid in EPSG:32753 with 30 m cells from (`x_min`, `y_max`).
    fn geo_tags<W: Write + Seek>(
        d: &mut DirectoryEncoder<'_, W, TiffKindStandard>,
        x_min: f64,
        y_max: f64,
    ) {
        d.write_tag(Tag::ModelPixelScaleTag, &[CELL, CELL, 0.0][..])
            .unwrap();
        d.write_tag(
            Tag::ModelTiepointTag,
            &[0.0, 0.0, 0.0, x_min, y_max, 0.0][..],
        )
        .unwrap();
        d.write_tag(
            Tag::GeoKeyDirectoryTag,
            &[1u16, 1, 0, 2, 1024, 0, 1, 1, 3072, 0, 1, 32753][..],
        )
        .unwrap();
    }

    /// The cells `b` of the big grid in a GeoTIFF of deflated strips of `rows` rows.
    fn striped(path: &Path, b: CellBlock, rows: usize) {
        chunked(path, b, (b.nx, rows), false);
    }

    /// The whole big grid in a GeoTIFF of deflated `t` × `t` tiles (padded with zeros at the
    /// right and bottom edges).
    fn tiled(path: &Path, t: usize) {
        let all = CellBlock {
            col0: 0,
            row0: 0,
            nx: W,
            ny: H,
        };
        chunked(path, all, (t, t), true);
    }

    /// The cells `b` of the big grid in a GeoTIFF of int16 in deflated chunks of `cw` × `ch`
    /// cells: tiles (padded with zeros) or strips (the last one shorter).
    fn chunked(path: &Path, b: CellBlock, (cw, ch): (usize, usize), tiles: bool) {
        let f = BufWriter::new(std::fs::File::create(path).unwrap());
        let mut enc = TiffEncoder::new(f).unwrap();
        let mut d = enc.image_directory().unwrap();
        let (mut offsets, mut counts) = (Vec::new(), Vec::new());
        for ty in 0..b.ny.div_ceil(ch) {
            for tx in 0..b.nx.div_ceil(cw) {
                let rows = if tiles {
                    ty * ch..(ty + 1) * ch
                } else {
                    ty * ch..((ty + 1) * ch).min(b.ny)
                };
                let mut raw = Vec::with_capacity(cw * ch * 2);
                for r in rows {
                    for c in tx * cw..(tx + 1) * cw {
                        let v = if r < b.ny && c < b.nx {
                            height(b.col0 + c, b.row0 + r)
                        } else {
                            0
                        };
                        raw.extend_from_slice(&v.to_ne_bytes());
                    }
                }
                let mut packed = Vec::new();
                Deflate::with_level(DeflateLevel::Fast)
                    .write_to(&mut packed, &raw)
                    .unwrap();
                offsets.push(d.write_data(&packed[..]).unwrap() as u32);
                counts.push(packed.len() as u32);
            }
        }
        d.write_tag(Tag::ImageWidth, b.nx as u32).unwrap();
        d.write_tag(Tag::ImageLength, b.ny as u32).unwrap();
        d.write_tag(Tag::BitsPerSample, 16u16).unwrap();
        d.write_tag(Tag::Compression, 8u16).unwrap();
        d.write_tag(Tag::PhotometricInterpretation, 1u16).unwrap();
        d.write_tag(Tag::SamplesPerPixel, 1u16).unwrap();
        d.write_tag(Tag::PlanarConfiguration, 1u16).unwrap();
        if tiles {
            d.write_tag(Tag::TileWidth, cw as u32).unwrap();
            d.write_tag(Tag::TileLength, ch as u32).unwrap();
            d.write_tag(Tag::TileOffsets, &offsets[..]).unwrap();
            d.write_tag(Tag::TileByteCounts, &counts[..]).unwrap();
        } else {
            d.write_tag(Tag::RowsPerStrip, ch as u32).unwrap();
            d.write_tag(Tag::StripOffsets, &offsets[..]).unwrap();
            d.write_tag(Tag::StripByteCounts, &counts[..]).unwrap();
        }
        d.write_tag(Tag::SampleFormat, 2u16).unwrap();
        geo_tags(&mut d, X0 + b.col0 as f64 * CELL, Y0 - b.row0 as f64 * CELL);
        d.finish().unwrap();
    }

    /// A classic (CDF-2) NetCDF file of the big grid as `elevation(y, x)`, int16, y running south
    /// to north, with `x`, `y` coordinates in metres and a `crs` variable giving EPSG:32753. The
    /// file has its full length, but only the cells of `written` (north-up) hold heights: the
    /// rest is a hole on disk, read as zeros.
    fn sparse_classic(path: &Path, written: CellBlock) {
        fn name(out: &mut Vec<u8>, n: &str) {
            out.extend((n.len() as u32).to_be_bytes());
            out.extend(n.as_bytes());
            out.resize(out.len().next_multiple_of(4), 0);
        }
        fn text_attrs(out: &mut Vec<u8>, attrs: &[(&str, &str)]) {
            if attrs.is_empty() {
                out.extend([0u8; 8]);
                return;
            }
            out.extend(12u32.to_be_bytes());
            out.extend((attrs.len() as u32).to_be_bytes());
            for (k, v) in attrs {
                name(out, k);
                out.extend(2u32.to_be_bytes()); // NC_CHAR
                name(out, v);
            }
        }
        // (name, dimension ids, attributes, type, bytes)
        type Var<'a> = (&'a str, &'a [u32], &'a [(&'a str, &'a str)], u32, u64);
        let vars: [Var; 4] = [
            ("crs", &[], &[("epsg_code", "EPSG:32753")], 4, 4),
            (
                "x",
                &[1],
                &[("units", "m"), ("standard_name", "projection_x_coordinate")],
                6,
                W as u64 * 8,
            ),
            (
                "y",
                &[0],
                &[("units", "m"), ("standard_name", "projection_y_coordinate")],
                6,
                H as u64 * 8,
            ),
            (
                "elevation",
                &[0, 1],
                &[("units", "m"), ("grid_mapping", "crs")],
                3,
                (W * H * 2) as u64,
            ),
        ];
        let header = |begins: &[u64]| {
            let mut h = b"CDF\x02".to_vec();
            h.extend(0u32.to_be_bytes());
            h.extend(10u32.to_be_bytes());
            h.extend(2u32.to_be_bytes());
            name(&mut h, "y");
            h.extend((H as u32).to_be_bytes());
            name(&mut h, "x");
            h.extend((W as u32).to_be_bytes());
            h.extend([0u8; 8]);
            h.extend(11u32.to_be_bytes());
            h.extend((vars.len() as u32).to_be_bytes());
            for (k, (n, dims, attrs, t, bytes)) in vars.iter().enumerate() {
                name(&mut h, n);
                h.extend((dims.len() as u32).to_be_bytes());
                for d in *dims {
                    h.extend(d.to_be_bytes());
                }
                text_attrs(&mut h, attrs);
                h.extend(t.to_be_bytes());
                h.extend((*bytes as u32).to_be_bytes());
                h.extend(begins[k].to_be_bytes());
            }
            h
        };
        let len = header(&[0; 4]).len() as u64;
        let mut begins = vec![len];
        for v in &vars[..3] {
            begins.push(begins.last().unwrap() + v.4);
        }
        let mut bytes = header(&begins);
        bytes.extend(0i32.to_be_bytes());
        for c in 0..W {
            bytes.extend((X0 + (c as f64 + 0.5) * CELL).to_be_bytes());
        }
        for j in 0..H {
            // South to north: file row j is north-up row H − 1 − j.
            bytes.extend((Y0 - H as f64 * CELL + (j as f64 + 0.5) * CELL).to_be_bytes());
        }
        assert_eq!(bytes.len() as u64, begins[3]);
        let f = std::fs::File::create(path).unwrap();
        f.set_len(begins[3] + vars[3].4).unwrap();
        use std::os::unix::fs::FileExt;
        f.write_all_at(&bytes, 0).unwrap();
        for r in written.row0..written.row0 + written.ny {
            let j = (H - 1 - r) as u64;
            let row: Vec<u8> = (written.col0..written.col0 + written.nx)
                .flat_map(|c| height(c, r).to_be_bytes())
                .collect();
            let at = begins[3] + (j * W as u64 + written.col0 as u64) * 2;
            f.write_all_at(&row, at).unwrap();
        }
    }

    /// The window read from the big file `big` (the survey plus margin of [`need`]) holds the
    /// cells of the small copy at the same places, and the copy's block read alone is the copy.
    fn window_equals_the_copy(big: &Path, copy: &Raster) {
        let h = read_dem_header(big, None).unwrap();
        assert_eq!((h.nx, h.ny, h.x_min, h.y_max), (W, H, X0, Y0));
        assert!((W * H) as u64 > MAX_GRID_CELLS);
        let w = read_window(big, None, &h, need(), &keys()).unwrap().raster;
        // The cells `need` touches plus one on each side: the copy less one cell on every side.
        assert_eq!(
            (w.nx, w.ny),
            (COPY.nx - 2, COPY.ny - 2),
            "{}",
            big.display()
        );
        assert_eq!(
            (w.x_min, w.y_max),
            (copy.x_min + CELL, copy.y_max - CELL),
            "{}",
            big.display()
        );
        for row in 0..w.ny {
            for col in 0..w.nx {
                assert_eq!(
                    w.values[row * w.nx + col],
                    copy.values[(row + 1) * copy.nx + col + 1],
                    "{}: window cell ({col}, {row})",
                    big.display()
                );
            }
        }
        let block = read_dem_block(big, None, COPY).unwrap();
        assert_eq!(block.values, copy.values, "{}", big.display());
    }

    #[test]
    fn big_geotiffs_in_strips_and_tiles_and_a_big_netcdf_are_read_by_window() {
        let dir = tempfile::tempdir().unwrap();
        let copy_path = dir.path().join("copy.tif");
        striped(&copy_path, COPY, 7);
        let copy = read_dem(&copy_path, None).unwrap();
        assert_eq!((copy.nx, copy.ny), (COPY.nx, COPY.ny));

        let strips = dir.path().join("strips.tif");
        striped(
            &strips,
            CellBlock {
                col0: 0,
                row0: 0,
                nx: W,
                ny: H,
            },
            16,
        );
        let tiles = dir.path().join("tiles.tif");
        tiled(&tiles, 256);
        let nc = dir.path().join("sparse.nc");
        sparse_classic(&nc, COPY);
        for (big, whole_refusal) in [
            (&strips, "at most 67108864"),
            (&tiles, "at most 67108864"),
            (&nc, "more than the 67108864 read at once"),
        ] {
            eprintln!(
                "{}: {} bytes",
                big.display(),
                std::fs::metadata(big).unwrap().len()
            );
            // Read whole, the file is refused: it is past the limit of a whole read.
            let e = read_dem(big, None).unwrap_err();
            assert!(e[0].to_string().contains(whole_refusal), "{}", e[0]);
            window_equals_the_copy(big, &copy);
        }
    }

    #[test]
    fn a_window_off_a_big_dem_is_the_coverage_error_naming_both_extents() {
        let dir = tempfile::tempdir().unwrap();
        let tiles = dir.path().join("tiles.tif");
        tiled(&tiles, 512);
        let h = read_dem_header(&tiles, None).unwrap();
        // 20 km east of the DEM's east edge (770 000 m).
        let need = [790_000.0, 800_000.0, 7_100_000.0, 7_110_000.0];
        let e = read_window(&tiles, None, &h, need, &keys()).unwrap_err();
        let text = e[0].to_string();
        assert!(
            text.contains("tiles.tif") && text.contains("key `terrain.dem`"),
            "{text}"
        );
        assert!(
            text.contains("spans x 500000 to 770000, y 7060000 to 7300000 m"),
            "{text}"
        );
        assert!(
            text.contains("needs x 790000 to 800000, y 7100000 to 7110000 m"),
            "{text}"
        );
        assert!(text.contains("short by 30000 m east"), "{text}");
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
