//! PNG maps of gridded products: the grid in a perceptually uniform colour ramp, a colour bar with
//! tick labels and units, a scale bar, a north arrow (grid north is up) and flight paths over it.
//!
//! Frame: the raster's projected map frame (eastings, northings in metres), north-up; flight paths
//! are given in the same frame. Values are drawn in the unit they are held in (E or mGal), which
//! the caller names for the colour bar.
//!
//! Colour ramps are our own, built in OKLab (Ottosson 2020, "A perceptual color space for image
//! processing", bottosson.github.io/posts/oklab): lightness L changes linearly with the value —
//! monotonic, so equal steps of value are roughly equal steps of perceived lightness — while hue
//! and chroma vary smoothly; each sample's chroma is reduced until the colour lies inside sRGB.
//!
//! - **Sequential** (any quantity): L from 0.27 to 0.95, hue from 285° (blue-violet) down through
//!   teal and green to 95° (yellow), chroma 0.04 + 0.10·sin(π·t).
//! - **Diverging** (signed quantities, symmetric range about zero): L from 0.42 at both ends up
//!   to 0.97 at zero; hue 255° (blue) below zero and 35° (red) above; chroma 0.15·|2t − 1|^0.8.
//!
//! Missing cells (NaN or the raster's nodata) are fully transparent; the rest of the image is
//! white. Text uses a 5 × 7 bitmap font defined here (digits, `. - +`, `E G N a g k l m x y z`);
//! any other character is drawn as an open box. The image is RGBA, 8 bits a channel, encoded with
//! zlib (`miniz_oxide`, level 6) in one IDAT chunk, no time or text chunks: same inputs, same bytes.

use gravgrad_core::Raster;
use std::fs;
use std::io::Write;
use std::path::{Path, PathBuf};
use thiserror::Error;

/// A colour ramp.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Ramp {
    Sequential,
    Diverging,
}

/// Entries of a ramp's table.
pub const RAMP_SIZE: usize = 256;

/// Choices for a map.
#[derive(Clone, Debug, PartialEq)]
pub struct MapOptions {
    /// Title above the map, e.g. `gzz`.
    pub title: String,
    /// Unit label over the colour bar, e.g. `E` or `mGal`.
    pub units: String,
    pub ramp: Ramp,
    /// Value range of the ramp; `None`: the 1st and 99th percentiles of the present cells
    /// (symmetric about zero, ± the larger magnitude, for the diverging ramp).
    pub range: Option<(f64, f64)>,
    /// Flight paths, each a polyline of (easting m, northing m).
    pub paths: Vec<Vec<(f64, f64)>>,
    /// Longest side of the map area in pixels, at most (the grid is drawn at a whole number of
    /// pixels per cell, or whole cells per pixel when larger).
    pub max_side: usize,
}

impl Default for MapOptions {
    fn default() -> Self {
        Self {
            title: String::new(),
            units: String::new(),
            ramp: Ramp::Sequential,
            range: None,
            paths: Vec::new(),
            max_side: 800,
        }
    }
}

/// Where things were drawn (pixels, origin top-left), for checks.
#[derive(Clone, Debug, PartialEq)]
pub struct Layout {
    pub width: usize,
    pub height: usize,
    /// Map area: left, top, width, height.
    pub map: (usize, usize, usize, usize),
    /// Colour bar: left, top, width, height (its top row is the ramp's high end).
    pub bar: (usize, usize, usize, usize),
    /// The value range drawn.
    pub range: (f64, f64),
}

/// A rendered map: RGBA pixels, row-major from the top.
#[derive(Clone, Debug, PartialEq)]
pub struct MapImage {
    pub layout: Layout,
    pub rgba: Vec<u8>,
}

/// Why a map could not be made or written.
#[derive(Debug, Error)]
pub enum MapError {
    #[error("the raster is not valid: {0}")]
    Raster(#[from] gravgrad_core::raster::RasterError),
    #[error("every cell is missing: nothing to map")]
    Empty,
    #[error("value range ({0}, {1}) is not finite and increasing")]
    Range(f64, f64),
    #[error("{}: the destination has no file name", .0.display())]
    NoFileName(PathBuf),
    #[error("{}: writing failed: {source}", .path.display())]
    Io {
        path: PathBuf,
        source: std::io::Error,
    },
}

const WHITE: [u8; 4] = [255, 255, 255, 255];
const INK: [u8; 4] = [20, 20, 20, 255];
const PATH_INK: [u8; 4] = [0, 0, 0, 255];

/// The colour of a ramp at t in [0, 1] (clamped), sRGB.
pub fn ramp_colour(ramp: Ramp, t: f64) -> [u8; 3] {
    let t = if t.is_nan() { 0.0 } else { t.clamp(0.0, 1.0) };
    let pi = std::f64::consts::PI;
    let (l, chroma, hue_deg) = match ramp {
        Ramp::Sequential => (
            0.27 + 0.68 * t,
            0.04 + 0.10 * (pi * t).sin(),
            285.0 - 190.0 * t,
        ),
        Ramp::Diverging => {
            let s = 2.0 * t - 1.0;
            (
                0.97 - 0.55 * s.abs(),
                0.15 * s.abs().powf(0.8),
                if s < 0.0 { 255.0 } else { 35.0 },
            )
        }
    };
    let h = hue_deg.to_radians();
    // Largest chroma up to the wanted one that stays inside sRGB (bisection, fixed steps).
    let inside = |c: f64| {
        let rgb = oklab_to_linear_srgb(l, c * h.cos(), c * h.sin());
        rgb.iter().all(|v| (-1e-9..=1.0 + 1e-9).contains(v))
    };
    let c = if inside(chroma) {
        chroma
    } else {
        let (mut lo, mut hi) = (0.0, chroma);
        for _ in 0..40 {
            let mid = 0.5 * (lo + hi);
            if inside(mid) {
                lo = mid;
            } else {
                hi = mid;
            }
        }
        lo
    };
    let rgb = oklab_to_linear_srgb(l, c * h.cos(), c * h.sin());
    rgb.map(|v| (255.0 * srgb_gamma(v.clamp(0.0, 1.0))).round() as u8)
}

/// OKLab to linear sRGB (Ottosson 2020).
fn oklab_to_linear_srgb(l: f64, a: f64, b: f64) -> [f64; 3] {
    let l_ = l + 0.396_337_777_4 * a + 0.215_803_757_3 * b;
    let m_ = l - 0.105_561_345_8 * a - 0.063_854_172_8 * b;
    let s_ = l - 0.089_484_177_5 * a - 1.291_485_548_0 * b;
    let (l3, m3, s3) = (l_ * l_ * l_, m_ * m_ * m_, s_ * s_ * s_);
    [
        4.076_741_662_1 * l3 - 3.307_711_591_3 * m3 + 0.230_969_929_2 * s3,
        -1.268_438_004_6 * l3 + 2.609_757_401_1 * m3 - 0.341_319_396_5 * s3,
        -0.004_196_086_3 * l3 - 0.703_418_614_7 * m3 + 1.707_614_701_0 * s3,
    ]
}

/// Linear to gamma-encoded sRGB (IEC 61966-2-1).
fn srgb_gamma(v: f64) -> f64 {
    if v <= 0.003_130_8 {
        12.92 * v
    } else {
        1.055 * v.powf(1.0 / 2.4) - 0.055
    }
}

/// The ramp's table of [`RAMP_SIZE`] colours, low end first.
pub fn ramp_table(ramp: Ramp) -> Vec<[u8; 3]> {
    (0..RAMP_SIZE)
        .map(|i| ramp_colour(ramp, i as f64 / (RAMP_SIZE - 1) as f64))
        .collect()
}

/// Renders the map (see the module documentation).
pub fn render_map(raster: &Raster, opts: &MapOptions) -> Result<MapImage, MapError> {
    raster.check()?;
    let present: Vec<f64> = raster
        .values
        .iter()
        .copied()
        .filter(|v| v.is_finite() && !raster.is_missing(*v))
        .collect();
    if present.is_empty() {
        return Err(MapError::Empty);
    }
    let (lo, hi) = match opts.range {
        Some(r) => r,
        None => auto_range(present, opts.ramp),
    };
    if !(lo.is_finite() && hi.is_finite() && hi > lo) {
        return Err(MapError::Range(lo, hi));
    }
    let table = ramp_table(opts.ramp);

    // Pixels per cell (up) or cells per pixel (down).
    let side = opts.max_side.max(64);
    let longest = raster.nx.max(raster.ny);
    let (up, down) = if longest <= side {
        ((side / longest).clamp(1, 16), 1)
    } else {
        (1, longest.div_ceil(side))
    };
    let mw = raster.nx * up / down;
    let mh = raster.ny * up / down;
    let (mw, mh) = (mw.max(1), mh.max(1));
    let margin = 12;
    let title_h = 2 * 7 + 10;
    let bar_w = 18;
    let label_w = 8 * 6 * 2;
    let left = margin;
    let top = margin + title_h + 16;
    let bottom_h = 40;
    let width = left + mw + 24 + bar_w + 6 + label_w + margin;
    let height = top + mh.max(140) + bottom_h + margin;
    let mut img = Canvas::new(width, height);

    // The grid.
    for py in 0..mh {
        let row = (py * down / up).min(raster.ny - 1);
        for px in 0..mw {
            let col = (px * down / up).min(raster.nx - 1);
            let v = raster.values[row * raster.nx + col];
            let c = if !v.is_finite() || raster.is_missing(v) {
                [0, 0, 0, 0]
            } else {
                let t = (v - lo) / (hi - lo);
                let k = (t * (RAMP_SIZE - 1) as f64).round().clamp(0.0, 255.0) as usize;
                let [r, g, b] = table[k];
                [r, g, b, 255]
            };
            img.set(left + px, top + py, c);
        }
    }
    img.frame(left, top, mw, mh, INK);

    // Flight paths: metres to map pixels.
    let ppm_x = mw as f64 / (raster.nx as f64 * raster.dx);
    let ppm_y = mh as f64 / (raster.ny as f64 * raster.dy);
    let to_px = |(e, n): (f64, f64)| {
        (
            left as f64 + (e - raster.x_min) * ppm_x,
            top as f64 + (raster.y_max - n) * ppm_y,
        )
    };
    let clip = (left, top, mw, mh);
    for path in &opts.paths {
        for seg in path.windows(2) {
            img.line(to_px(seg[0]), to_px(seg[1]), PATH_INK, clip);
        }
    }

    // Title.
    img.text(left, margin, &opts.title, 2, INK);

    // Colour bar: top row = high end.
    let bar_left = left + mw + 24;
    let bar_h = mh.max(140);
    for y in 0..bar_h {
        let t = 1.0 - y as f64 / (bar_h - 1).max(1) as f64;
        let k = (t * (RAMP_SIZE - 1) as f64).round() as usize;
        let [r, g, b] = table[k];
        for x in 0..bar_w {
            img.set(bar_left + x, top + y, [r, g, b, 255]);
        }
    }
    img.frame(bar_left, top, bar_w, bar_h, INK);
    img.text(bar_left, top - 12, &opts.units, 1, INK);
    for v in nice_ticks(lo, hi, 6) {
        let t = (v - lo) / (hi - lo);
        let y = top + ((1.0 - t) * (bar_h - 1) as f64).round() as usize;
        for x in 0..4 {
            img.set(bar_left + bar_w + x, y, INK);
        }
        img.text(
            bar_left + bar_w + 6,
            y.saturating_sub(3),
            &format_tick(v, hi - lo),
            1,
            INK,
        );
    }

    // North arrow (grid north = up), right of the title.
    let ax = bar_left + bar_w / 2;
    let ay = margin;
    img.text(ax - 2, ay, "N", 1, INK);
    for d in 0..14 {
        img.set(ax, ay + 9 + d, INK);
    }
    for d in 0..5 {
        for x in (ax - d)..=(ax + d) {
            img.set(x, ay + 9 + d, INK);
        }
    }

    // Scale bar: about a quarter of the map width, a 1-2-5 length.
    let width_m = raster.nx as f64 * raster.dx;
    let len_m = nice_length(width_m / 4.0);
    let len_px = (len_m * ppm_x).round() as usize;
    let sy = top + mh.max(140) + 14;
    for x in 0..=len_px {
        img.set(left + x, sy, INK);
        img.set(left + x, sy + 1, INK);
    }
    for d in 0..6 {
        img.set(left, sy - d, INK);
        img.set(left + len_px, sy - d, INK);
    }
    // 1-2-5 lengths print exactly with the shortest representation (0.5, 2, 100).
    let label = if len_m >= 1000.0 {
        format!("{} km", len_m / 1000.0)
    } else {
        format!("{len_m} m")
    };
    img.text(left, sy + 6, &label, 1, INK);

    Ok(MapImage {
        layout: Layout {
            width,
            height,
            map: (left, top, mw, mh),
            bar: (bar_left, top, bar_w, bar_h),
            range: (lo, hi),
        },
        rgba: img.px,
    })
}

/// Writes the map as a PNG, through a temporary name in the destination folder renamed when
/// complete.
pub fn write_map(path: &Path, raster: &Raster, opts: &MapOptions) -> Result<(), MapError> {
    let map = render_map(raster, opts)?;
    let bytes = encode_png(map.layout.width, map.layout.height, &map.rgba);
    write_via_temporary(path, &bytes)
}

pub(crate) fn write_via_temporary(path: &Path, bytes: &[u8]) -> Result<(), MapError> {
    let name = path
        .file_name()
        .ok_or_else(|| MapError::NoFileName(path.to_path_buf()))?;
    let tmp = path.with_file_name(format!(
        ".{}.{}.partial",
        name.to_string_lossy(),
        std::process::id()
    ));
    let io = |source| MapError::Io {
        path: path.to_path_buf(),
        source,
    };
    let result = (|| {
        let mut f = fs::File::create(&tmp)?;
        f.write_all(bytes)?;
        f.sync_all()?;
        fs::rename(&tmp, path)
    })();
    if let Err(e) = result {
        let _ = fs::remove_file(&tmp);
        return Err(io(e));
    }
    Ok(())
}

/// 1st and 99th percentiles (nearest rank) of the values; symmetric for the diverging ramp; a
/// constant grid gets ±1 around its value (±1 for zero).
fn auto_range(mut v: Vec<f64>, ramp: Ramp) -> (f64, f64) {
    v.sort_by(f64::total_cmp);
    let at = |p: f64| v[((v.len() - 1) as f64 * p).round() as usize];
    let (mut lo, mut hi) = (at(0.01), at(0.99));
    if ramp == Ramp::Diverging {
        let m = lo.abs().max(hi.abs());
        (lo, hi) = (-m, m);
    }
    if hi <= lo {
        let w = if lo == 0.0 { 1.0 } else { lo.abs() * 0.01 };
        (lo, hi) = (lo - w, hi + w);
    }
    (lo, hi)
}

/// Round tick values (1-2-5 steps) inside [lo, hi], about `n` of them.
fn nice_ticks(lo: f64, hi: f64, n: usize) -> Vec<f64> {
    let step = nice_length((hi - lo) / n as f64);
    let first = (lo / step).ceil() as i64;
    let last = (hi / step).floor() as i64;
    (first..=last).map(|k| k as f64 * step).collect()
}

/// The 1-2-5 value nearest above `x` (positive).
fn nice_length(x: f64) -> f64 {
    let p = 10f64.powf(x.log10().floor());
    let m = x / p;
    let f = if m <= 1.0 {
        1.0
    } else if m <= 2.0 {
        2.0
    } else if m <= 5.0 {
        5.0
    } else {
        10.0
    };
    f * p
}

/// A tick label with as many decimals as the span needs.
fn format_tick(v: f64, span: f64) -> String {
    let decimals = if span >= 10.0 {
        0
    } else {
        (1.0 - span.log10().floor()).clamp(0.0, 6.0) as usize
    };
    let s = format!("{v:.decimals$}");
    if s.starts_with('-') && s[1..].chars().all(|c| c == '0' || c == '.') {
        s[1..].to_string()
    } else {
        s
    }
}

/// An RGBA canvas, white.
struct Canvas {
    w: usize,
    h: usize,
    px: Vec<u8>,
}

impl Canvas {
    fn new(w: usize, h: usize) -> Self {
        Self {
            w,
            h,
            px: WHITE.repeat(w * h),
        }
    }

    fn set(&mut self, x: usize, y: usize, c: [u8; 4]) {
        if x < self.w && y < self.h {
            let k = 4 * (y * self.w + x);
            self.px[k..k + 4].copy_from_slice(&c);
        }
    }

    /// A one-pixel frame just outside the rectangle.
    fn frame(&mut self, x: usize, y: usize, w: usize, h: usize, c: [u8; 4]) {
        let (x0, y0) = (x.saturating_sub(1), y.saturating_sub(1));
        for i in x0..=x + w {
            self.set(i, y0, c);
            self.set(i, y + h, c);
        }
        for j in y0..=y + h {
            self.set(x0, j, c);
            self.set(x + w, j, c);
        }
    }

    /// A line (sampled twice a pixel), drawn only inside `clip` = (left, top, width, height).
    fn line(
        &mut self,
        a: (f64, f64),
        b: (f64, f64),
        c: [u8; 4],
        clip: (usize, usize, usize, usize),
    ) {
        if !(a.0.is_finite() && a.1.is_finite() && b.0.is_finite() && b.1.is_finite()) {
            return;
        }
        // Two samples a pixel, so rounding never leaves a gap.
        let steps = (2.0 * (b.0 - a.0).abs().max((b.1 - a.1).abs()).ceil()) as usize;
        let steps = steps.clamp(1, 200_000);
        for s in 0..=steps {
            let t = s as f64 / steps as f64;
            let (x, y) = (a.0 + t * (b.0 - a.0), a.1 + t * (b.1 - a.1));
            let (xl, yt) = (clip.0 as f64, clip.1 as f64);
            if x >= xl && y >= yt && x < xl + clip.2 as f64 && y < yt + clip.3 as f64 {
                self.set(x as usize, y as usize, c);
            }
        }
    }

    fn text(&mut self, x: usize, y: usize, s: &str, scale: usize, c: [u8; 4]) {
        let mut cx = x;
        for ch in s.chars() {
            let rows = glyph(ch);
            for (r, bits) in rows.iter().enumerate() {
                for col in 0..5 {
                    if bits & (0x10 >> col) != 0 {
                        for dy in 0..scale {
                            for dx in 0..scale {
                                self.set(cx + col * scale + dx, y + r * scale + dy, c);
                            }
                        }
                    }
                }
            }
            cx += 6 * scale;
        }
    }
}

/// Our 5 × 7 bitmap font: seven rows, the five low bits of each, leftmost pixel highest.
fn glyph(ch: char) -> [u8; 7] {
    match ch {
        '0' => [0x0E, 0x11, 0x13, 0x15, 0x19, 0x11, 0x0E],
        '1' => [0x04, 0x0C, 0x04, 0x04, 0x04, 0x04, 0x0E],
        '2' => [0x0E, 0x11, 0x01, 0x02, 0x04, 0x08, 0x1F],
        '3' => [0x1E, 0x01, 0x01, 0x0E, 0x01, 0x01, 0x1E],
        '4' => [0x02, 0x06, 0x0A, 0x12, 0x1F, 0x02, 0x02],
        '5' => [0x1F, 0x10, 0x1E, 0x01, 0x01, 0x11, 0x0E],
        '6' => [0x06, 0x08, 0x10, 0x1E, 0x11, 0x11, 0x0E],
        '7' => [0x1F, 0x01, 0x02, 0x04, 0x08, 0x08, 0x08],
        '8' => [0x0E, 0x11, 0x11, 0x0E, 0x11, 0x11, 0x0E],
        '9' => [0x0E, 0x11, 0x11, 0x0F, 0x01, 0x02, 0x0C],
        '.' => [0x00, 0x00, 0x00, 0x00, 0x00, 0x0C, 0x0C],
        '-' | '−' => [0x00, 0x00, 0x00, 0x0E, 0x00, 0x00, 0x00],
        '+' => [0x00, 0x04, 0x04, 0x1F, 0x04, 0x04, 0x00],
        'E' => [0x1F, 0x10, 0x10, 0x1E, 0x10, 0x10, 0x1F],
        'G' => [0x0E, 0x11, 0x10, 0x17, 0x11, 0x11, 0x0F],
        'N' => [0x11, 0x19, 0x15, 0x13, 0x11, 0x11, 0x11],
        'a' => [0x00, 0x00, 0x0E, 0x01, 0x0F, 0x11, 0x0F],
        'g' => [0x00, 0x0F, 0x11, 0x11, 0x0F, 0x01, 0x0E],
        'k' => [0x10, 0x10, 0x12, 0x14, 0x18, 0x14, 0x12],
        'l' => [0x0C, 0x04, 0x04, 0x04, 0x04, 0x04, 0x0E],
        'm' => [0x00, 0x00, 0x1A, 0x15, 0x15, 0x11, 0x11],
        'x' => [0x00, 0x00, 0x11, 0x0A, 0x04, 0x0A, 0x11],
        'y' => [0x00, 0x00, 0x11, 0x11, 0x0F, 0x01, 0x0E],
        'z' => [0x00, 0x00, 0x1F, 0x02, 0x04, 0x08, 0x1F],
        ' ' => [0; 7],
        _ => [0x1F, 0x11, 0x11, 0x11, 0x11, 0x11, 0x1F],
    }
}

/// Encodes 8-bit RGBA pixels (row-major from the top) as a PNG: IHDR, one zlib IDAT with filter
/// type 0 on every row, IEND (ISO/IEC 15948).
pub fn encode_png(width: usize, height: usize, rgba: &[u8]) -> Vec<u8> {
    let mut raw = Vec::with_capacity(height * (1 + 4 * width));
    for y in 0..height {
        raw.push(0);
        raw.extend_from_slice(&rgba[4 * y * width..4 * (y + 1) * width]);
    }
    let z = miniz_oxide::deflate::compress_to_vec_zlib(&raw, 6);
    let mut out = vec![0x89, b'P', b'N', b'G', 0x0D, 0x0A, 0x1A, 0x0A];
    let mut ihdr = Vec::with_capacity(13);
    ihdr.extend_from_slice(&(width as u32).to_be_bytes());
    ihdr.extend_from_slice(&(height as u32).to_be_bytes());
    ihdr.extend_from_slice(&[8, 6, 0, 0, 0]); // 8 bits, RGBA, deflate, filter set 0, no interlace
    chunk(&mut out, b"IHDR", &ihdr);
    chunk(&mut out, b"IDAT", &z);
    chunk(&mut out, b"IEND", &[]);
    out
}

fn chunk(out: &mut Vec<u8>, kind: &[u8; 4], data: &[u8]) {
    out.extend_from_slice(&(data.len() as u32).to_be_bytes());
    let start = out.len();
    out.extend_from_slice(kind);
    out.extend_from_slice(data);
    let crc = crc32(&out[start..]);
    out.extend_from_slice(&crc.to_be_bytes());
}

/// CRC-32 (ISO 3309, polynomial 0xEDB88320 reflected), as PNG requires.
fn crc32(bytes: &[u8]) -> u32 {
    let mut c = 0xFFFF_FFFFu32;
    for &b in bytes {
        c ^= b as u32;
        for _ in 0..8 {
            c = if c & 1 != 0 {
                0xEDB8_8320 ^ (c >> 1)
            } else {
                c >> 1
            };
        }
    }
    !c
}
