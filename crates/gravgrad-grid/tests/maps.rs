//! PNG maps and the product writers: the PNG decoded back by a decoder written here from the PNG
//! specification (ISO/IEC 15948), the ramps' lightness measured with Ottosson's forward OKLab
//! transform, `grids.nc` and the GeoTIFFs read back by our readers. With `GRAVGRAD_MAP_OUT=DIR`
//! the products test leaves its files in DIR for `tests/reference/grid/check_products.py` (PIL,
//! xarray, rasterio/GDAL, `gmt grdinfo`).

use approx::assert_abs_diff_eq;
use gravgrad_core::Raster;
use gravgrad_grid::png_map::{
    MapOptions, Ramp, encode_png, ramp_colour, ramp_table, render_map, write_map,
};
use gravgrad_grid::products::{Product, Products, write_products};
use std::path::{Path, PathBuf};

/// Decodes an 8-bit RGBA, non-interlaced PNG: (width, height, pixels). Checks every chunk's CRC.
fn decode_png(bytes: &[u8]) -> (usize, usize, Vec<u8>) {
    assert_eq!(
        &bytes[..8],
        &[0x89, b'P', b'N', b'G', 0x0D, 0x0A, 0x1A, 0x0A]
    );
    let mut pos = 8;
    let (mut w, mut h) = (0, 0);
    let mut z = Vec::new();
    let mut kinds = Vec::new();
    while pos < bytes.len() {
        let len = u32::from_be_bytes(bytes[pos..pos + 4].try_into().unwrap()) as usize;
        let kind = &bytes[pos + 4..pos + 8];
        let data = &bytes[pos + 8..pos + 8 + len];
        let crc = u32::from_be_bytes(bytes[pos + 8 + len..pos + 12 + len].try_into().unwrap());
        assert_eq!(
            crc,
            crc32_table(&bytes[pos + 4..pos + 8 + len]),
            "CRC of {kind:?}"
        );
        kinds.push(String::from_utf8(kind.to_vec()).unwrap());
        match kind {
            b"IHDR" => {
                w = u32::from_be_bytes(data[0..4].try_into().unwrap()) as usize;
                h = u32::from_be_bytes(data[4..8].try_into().unwrap()) as usize;
                assert_eq!(&data[8..13], &[8, 6, 0, 0, 0], "8-bit RGBA, no interlace");
            }
            b"IDAT" => z.extend_from_slice(data),
            _ => {}
        }
        pos += 12 + len;
    }
    assert_eq!(kinds.first().map(String::as_str), Some("IHDR"));
    assert_eq!(kinds.last().map(String::as_str), Some("IEND"));
    let raw = miniz_oxide::inflate::decompress_to_vec_zlib(&z).unwrap();
    let stride = 4 * w;
    assert_eq!(raw.len(), h * (stride + 1));
    let mut px = vec![0u8; h * stride];
    for y in 0..h {
        let f = raw[y * (stride + 1)];
        let line = &raw[y * (stride + 1) + 1..(y + 1) * (stride + 1)];
        for x in 0..stride {
            let a = if x >= 4 { px[y * stride + x - 4] } else { 0 };
            let b = if y > 0 { px[(y - 1) * stride + x] } else { 0 };
            let c = if x >= 4 && y > 0 {
                px[(y - 1) * stride + x - 4]
            } else {
                0
            };
            let pred = match f {
                0 => 0,
                1 => a,
                2 => b,
                3 => ((a as u16 + b as u16) / 2) as u8,
                4 => {
                    let p = a as i16 + b as i16 - c as i16;
                    let (pa, pb, pc) = (
                        (p - a as i16).abs(),
                        (p - b as i16).abs(),
                        (p - c as i16).abs(),
                    );
                    if pa <= pb && pa <= pc {
                        a
                    } else if pb <= pc {
                        b
                    } else {
                        c
                    }
                }
                _ => panic!("filter {f}"),
            };
            px[y * stride + x] = line[x].wrapping_add(pred);
        }
    }
    (w, h, px)
}

/// CRC-32 by the table method of the PNG specification's sample code (independent of the
/// bitwise loop in the encoder).
fn crc32_table(bytes: &[u8]) -> u32 {
    let table: Vec<u32> = (0..256u32)
        .map(|n| {
            (0..8).fold(n, |c, _| {
                if c & 1 != 0 {
                    0xEDB8_8320 ^ (c >> 1)
                } else {
                    c >> 1
                }
            })
        })
        .collect();
    !bytes.iter().fold(0xFFFF_FFFFu32, |c, &b| {
        table[((c ^ b as u32) & 0xFF) as usize] ^ (c >> 8)
    })
}

/// OKLab lightness of an sRGB colour (Ottosson 2020, forward transform).
fn oklab_l(rgb: [u8; 3]) -> f64 {
    let lin = |u: u8| {
        let v = u as f64 / 255.0;
        if v <= 0.04045 {
            v / 12.92
        } else {
            ((v + 0.055) / 1.055).powf(2.4)
        }
    };
    let (r, g, b) = (lin(rgb[0]), lin(rgb[1]), lin(rgb[2]));
    let l = 0.4122214708 * r + 0.5363325363 * g + 0.0514459929 * b;
    let m = 0.2119034982 * r + 0.6806995451 * g + 0.1073969566 * b;
    let s = 0.0883024619 * r + 0.2817188376 * g + 0.6299787005 * b;
    0.2104542553 * l.cbrt() + 0.7936177850 * m.cbrt() - 0.0040720468 * s.cbrt()
}

/// 40 × 30 cells of 100 m; value = easting-driven ramp; a 5 × 4 block of NaN at columns 10–14,
/// rows 6–9.
fn sample() -> Raster {
    let (nx, ny) = (40, 30);
    let mut v: Vec<f64> = (0..nx * ny)
        .map(|k| ((k % nx) as f64 - 20.0) * 1.5 + ((k / nx) as f64 * 0.3).sin() * 4.0)
        .collect();
    for r in 6..10 {
        for c in 10..15 {
            v[r * nx + c] = f64::NAN;
        }
    }
    Raster::new(nx, ny, (400_000.0, 7_000_000.0), (100.0, 100.0), v)
        .unwrap()
        .with_epsg(32753)
        .with_nodata(f64::NAN)
}

#[test]
fn ramps_have_monotonic_lightness() {
    let seq: Vec<f64> = ramp_table(Ramp::Sequential)
        .into_iter()
        .map(oklab_l)
        .collect();
    eprintln!("sequential L {:.3} … {:.3}", seq[0], seq[255]);
    assert_abs_diff_eq!(seq[0], 0.27, epsilon = 0.01);
    assert_abs_diff_eq!(seq[255], 0.95, epsilon = 0.01);
    for w in seq.windows(2) {
        assert!(w[1] > w[0] - 0.002, "{w:?}");
    }
    // Over ten entries lightness rises by about 0.027; quantisation never undoes that.
    for k in 0..246 {
        assert!(seq[k + 10] > seq[k] + 0.015);
    }
    let div: Vec<f64> = ramp_table(Ramp::Diverging)
        .into_iter()
        .map(oklab_l)
        .collect();
    eprintln!(
        "diverging L {:.3} … {:.3} … {:.3}",
        div[0], div[128], div[255]
    );
    // Symmetric ends.
    assert_abs_diff_eq!(div[0], div[255], epsilon = 0.01);
    for k in 0..118 {
        assert!(div[k + 10] > div[k] + 0.015, "rising to the middle at {k}");
        assert!(
            div[255 - k - 10] > div[255 - k] + 0.015,
            "falling from the middle at {k}"
        );
    }
    // The diverging ends are a blue and a red.
    let (lo, hi) = (
        ramp_colour(Ramp::Diverging, 0.0),
        ramp_colour(Ramp::Diverging, 1.0),
    );
    assert!(lo[2] > lo[0] && hi[0] > hi[2], "{lo:?} {hi:?}");
}

#[test]
fn map_decodes_with_transparent_gaps_bar_ends_and_paths() {
    let r = sample();
    let path = vec![(400_050.0, 6_998_550.0), (403_950.0, 6_998_550.0)]; // row 14, west to east
    let opts = MapOptions {
        title: "gzz".into(),
        units: "E".into(),
        ramp: Ramp::Diverging,
        paths: vec![path],
        max_side: 400,
        ..MapOptions::default()
    };
    let map = render_map(&r, &opts).unwrap();
    let png = encode_png(map.layout.width, map.layout.height, &map.rgba);
    let (w, h, px) = decode_png(&png);
    assert_eq!((w, h), (map.layout.width, map.layout.height));
    assert_eq!(px, map.rgba);
    let at = |x: usize, y: usize| -> [u8; 4] {
        px[4 * (y * w + x)..4 * (y * w + x) + 4].try_into().unwrap()
    };
    let (ml, mt, mw, mh) = map.layout.map;
    let s = mw / r.nx; // pixels per cell
    assert_eq!(s, 10);
    assert_eq!(mh, r.ny * s);
    // Every pixel of the NaN block is fully transparent; its neighbours are opaque.
    for y in 6 * s..10 * s {
        for x in 10 * s..15 * s {
            assert_eq!(at(ml + x, mt + y)[3], 0);
        }
    }
    assert_eq!(at(ml + 9 * s, mt + 7 * s)[3], 255);
    let transparent = px.chunks(4).filter(|p| p[3] == 0).count();
    assert_eq!(transparent, 20 * s * s);
    // Colour bar: top row the ramp's high end, bottom row its low end.
    let table = ramp_table(Ramp::Diverging);
    let (bl, bt, bw, bh) = map.layout.bar;
    let mid = bl + bw / 2;
    assert_eq!(at(mid, bt)[..3], table[255]);
    assert_eq!(at(mid, bt + bh - 1)[..3], table[0]);
    // Symmetric range for the diverging ramp.
    assert_eq!(map.layout.range.0, -map.layout.range.1);
    // The path: black along row 14's centre line, inside the map.
    let py = mt + 14 * s + s / 2;
    for x in (ml + s)..(ml + mw - s) {
        assert_eq!(at(x, py), [0, 0, 0, 255], "x {x}");
    }
    // A cell away from the path, NaN and labels: its value's colour.
    let v = r.get(30, 25).unwrap();
    let (lo, hi) = map.layout.range;
    let k = (((v - lo) / (hi - lo)).clamp(0.0, 1.0) * 255.0).round() as usize;
    assert_eq!(at(ml + 30 * s + s / 2, mt + 25 * s + s / 2)[..3], table[k]);
}

#[test]
fn same_bytes_every_time_and_thread_count() {
    let r = sample();
    let opts = MapOptions {
        title: "gz".into(),
        units: "mGal".into(),
        ..MapOptions::default()
    };
    let run = |n| {
        rayon::ThreadPoolBuilder::new()
            .num_threads(n)
            .build()
            .unwrap()
            .install(|| {
                let m = render_map(&r, &opts).unwrap();
                encode_png(m.layout.width, m.layout.height, &m.rgba)
            })
    };
    assert_eq!(run(1), run(2));
    let dir = tempfile::tempdir().unwrap();
    let p = dir.path().join("gz.png");
    write_map(&p, &r, &opts).unwrap();
    assert_eq!(std::fs::read(&p).unwrap(), run(1));
}

#[test]
fn refuses_all_missing_and_bad_range() {
    let mut r = sample();
    r.values.iter_mut().for_each(|v| *v = f64::NAN);
    assert!(render_map(&r, &MapOptions::default()).is_err());
    let opts = MapOptions {
        range: Some((3.0, 3.0)),
        ..MapOptions::default()
    };
    assert!(render_map(&sample(), &opts).is_err());
}

fn out_dir() -> (PathBuf, Option<tempfile::TempDir>) {
    match std::env::var_os("GRAVGRAD_MAP_OUT") {
        Some(d) => (PathBuf::from(d), None),
        None => {
            let t = tempfile::tempdir().unwrap();
            (t.path().to_path_buf(), Some(t))
        }
    }
}

fn leftovers(dir: &Path) -> Vec<String> {
    let mut out = Vec::new();
    for sub in ["", "grids", "maps"] {
        for e in std::fs::read_dir(dir.join(sub)).unwrap() {
            let n = e.unwrap().file_name().to_string_lossy().to_string();
            if n.ends_with(".partial") {
                out.push(n);
            }
        }
    }
    out
}

#[test]
fn products_written_and_read_back() {
    let gzz = sample();
    let mut gz = sample();
    gz.values.iter_mut().for_each(|v| *v = *v * 0.1 + 2.0);
    gz.nodata = None; // the writer supplies NaN
    let (dir, _keep) = out_dir();
    let products = Products {
        title: "test products",
        source: "gravgrad-grid tests",
        grids: vec![
            Product {
                name: "gzz",
                long_name: "vertical gravity gradient",
                units: "E",
                raster: &gzz,
                ramp: Ramp::Diverging,
            },
            Product {
                name: "gz",
                long_name: "vertical gravity, mean zero",
                units: "mGal",
                raster: &gz,
                ramp: Ramp::Sequential,
            },
        ],
        paths: vec![vec![(400_500.0, 6_999_000.0), (403_500.0, 6_997_500.0)]],
    };
    let written = write_products(&dir, &products).unwrap();
    assert!(leftovers(&dir).is_empty());
    for (i, src) in [&gzz, &gz].into_iter().enumerate() {
        let name = ["gzz", "gz"][i];
        let nc = gravgrad_netcdf::read_grid(&written.netcdf, Some(name)).unwrap();
        let tif = gravgrad_ingest::geotiff_reader::read_geotiff(&written.geotiffs[i]).unwrap();
        for back in [&nc, &tif] {
            assert_eq!(
                (back.nx, back.ny, back.x_min, back.y_max),
                (src.nx, src.ny, src.x_min, src.y_max)
            );
            assert_eq!(back.epsg, Some(32753));
            for (a, b) in back.values.iter().zip(&src.values) {
                if b.is_nan() {
                    assert!(a.is_nan());
                } else {
                    assert_eq!(*a, *b as f32 as f64);
                }
            }
        }
        let (w, h, px) = decode_png(&std::fs::read(&written.maps[i]).unwrap());
        assert!(w > src.nx && h > src.ny);
        assert_eq!(px.chunks(4).filter(|p| p[3] == 0).count() % 20, 0);
    }
    assert!(
        write_products(
            &dir,
            &Products {
                grids: vec![Product {
                    name: "../x",
                    ..products.grids[0]
                }],
                ..products.clone()
            }
        )
        .is_err()
    );
}
