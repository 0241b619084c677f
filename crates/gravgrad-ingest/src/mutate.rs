//! Mutated copies of valid binary files, for the robustness tests of the readers
//! (`docs/reliability.md`): the fixed-seed share in `tests/ingest.rs` and `xtask mutate`.
//!
//! Three kinds of damage, each from a seeded generator so that a case is reproduced from its
//! seed and number:
//!
//! - **flip**: one to eight bytes anywhere set to random values or with one bit flipped;
//! - **truncate**: the file cut short, or a span cut out of its middle;
//! - **inflate**: one to three size fields patched to huge values. Size fields are found by their
//!   encoding, not by a full parser: integers of the format's widths and byte order (HDF5: little
//!   endian, 4 and 8 bytes; TIFF: by its header, 2 and 4 bytes; NetCDF classic: big endian, 4 and
//!   8 bytes) whose value is a plausible count, size or offset (1 to 2²⁴), and, in a Parquet
//!   footer, Thrift varints (row counts, value counts, sizes and offsets), the footer's length
//!   corrected after the patch.
//!
//! Nothing here writes files; [`read_as`] runs the reader of a format on a file.

use crate::columns::Expectation;
use crate::dem::{WindowKeys, read_dem, read_dem_header, read_window};
use crate::read::read_flight_file;
use gravgrad_core::{Location, Problem};
use std::path::Path;

/// The binary formats the readers take.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum BinaryFormat {
    Parquet,
    Hdf5,
    GeoTiff,
    NetCdf,
}

impl BinaryFormat {
    pub const ALL: [BinaryFormat; 4] = [
        BinaryFormat::Parquet,
        BinaryFormat::Hdf5,
        BinaryFormat::GeoTiff,
        BinaryFormat::NetCdf,
    ];

    /// The name used on the command line and in reports.
    pub fn name(self) -> &'static str {
        match self {
            BinaryFormat::Parquet => "parquet",
            BinaryFormat::Hdf5 => "hdf5",
            BinaryFormat::GeoTiff => "geotiff",
            BinaryFormat::NetCdf => "netcdf",
        }
    }

    /// The format called `name` ([`BinaryFormat::name`]).
    pub fn from_name(name: &str) -> Option<Self> {
        Self::ALL.into_iter().find(|f| f.name() == name)
    }

    /// The file extension its reader expects.
    pub fn extension(self) -> &'static str {
        match self {
            BinaryFormat::Parquet => "parquet",
            BinaryFormat::Hdf5 => "h5",
            BinaryFormat::GeoTiff => "tif",
            BinaryFormat::NetCdf => "nc",
        }
    }

    /// The valid files of the repository the mutants are made from, relative to its root.
    pub fn seed_files(self) -> &'static [&'static str] {
        match self {
            BinaryFormat::Parquet => &[
                "tests/corpus/good/polars.parquet",
                "tests/corpus/good/pyarrow.parquet",
            ],
            BinaryFormat::Hdf5 => &["tests/corpus/good/h5py.h5"],
            BinaryFormat::GeoTiff => &[
                "tests/corpus/good/dem_rasterio.tif",
                "tests/corpus/good/dem_rasterio_int16.tif",
                "tests/corpus/good/dem_rasterio_point.tif",
            ],
            BinaryFormat::NetCdf => &[
                "tests/reference/netcdf/good/dem_64bit_yasc_packed.nc",
                "tests/reference/netcdf/good/dem_cdf5_record.nc",
                "tests/reference/netcdf/good/dem_classic_ydesc.nc",
                "tests/reference/netcdf/good/dem_gdal.nc",
                "tests/reference/netcdf/good/dem_gmt.nc",
                "tests/reference/netcdf/good/dem_lonlat_xarray.nc",
                "tests/reference/netcdf/good/dem_netcdf4.nc",
                "tests/reference/netcdf/good/dem_netcdf4_sparse.nc",
                "tests/reference/netcdf/good/dem_netcdf4_sparse_copy.nc",
            ],
        }
    }
}

/// What the reader made of a file.
#[derive(Debug)]
pub struct ReadResult {
    /// Flights or rasters read.
    pub items: usize,
    /// Every problem reported.
    pub problems: Vec<Problem>,
}

/// Most cells on a side of the window the mutation tests read from a terrain model: 256.
pub const WINDOW_SIDE: usize = 256;

/// Runs the reader of `format` on the file at `path`: flight logs as `gravgrad check` reads them
/// (every pair the header holds); terrain models (variable found) read whole, and then as a run
/// reads them: the header, then the window over the middle of the grid (half its width and
/// height, at most [`WINDOW_SIDE`] cells a side) through [`read_window`], which decodes only the
/// strips, tiles or rows meeting it, screens its elevations and fills its holes. `items` counts
/// the reads that gave a raster.
pub fn read_as(format: BinaryFormat, path: &Path) -> ReadResult {
    match format {
        BinaryFormat::Parquet | BinaryFormat::Hdf5 => {
            let out = read_flight_file(path, &Expectation::default());
            ReadResult {
                items: out.flights.len(),
                problems: out.problems,
            }
        }
        BinaryFormat::GeoTiff | BinaryFormat::NetCdf => {
            let mut r = ReadResult {
                items: 0,
                problems: vec![],
            };
            for read in [read_dem(path, None).map(|_| ()), read_middle(path)] {
                match read {
                    Ok(()) => r.items += 1,
                    Err(p) => r.problems.extend(p),
                }
            }
            r
        }
    }
}

/// The window over the middle of the terrain model at `path`, as [`read_as`] says.
fn read_middle(path: &Path) -> Result<(), Vec<Problem>> {
    let h = read_dem_header(path, None)?;
    let [w, e, s, n] = h.extent();
    let half = WINDOW_SIDE as f64 / 2.0;
    let (hx, hy) = ((e - w) / 4.0, (n - s) / 4.0);
    let (hx, hy) = (hx.min(half * h.dx), hy.min(half * h.dy));
    let (cx, cy) = ((w + e) / 2.0, (s + n) / 2.0);
    let keys = WindowKeys {
        dem: Location::file(path),
        margin: Location::file(path),
        margin_name: "the window's size".into(),
    };
    read_window(path, None, &h, [cx - hx, cx + hx, cy - hy, cy + hy], &keys).map(|_| ())
}

/// The kind of damage done to a file.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Damage {
    Flip,
    Truncate,
    Inflate,
}

impl Damage {
    pub fn name(self) -> &'static str {
        match self {
            Damage::Flip => "flip",
            Damage::Truncate => "truncate",
            Damage::Inflate => "inflate",
        }
    }
}

/// A small seeded generator (SplitMix64, after Steele, Lea and Flood 2014, "Fast splittable
/// pseudorandom number generators"); the same seed gives the same cases on every machine.
#[derive(Clone, Debug)]
pub struct Rng(u64);

impl Rng {
    pub fn new(seed: u64) -> Self {
        Rng(seed)
    }
    pub fn next_u64(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9e37_79b9_7f4a_7c15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xbf58_476d_1ce4_e5b9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94d0_49bb_1331_11eb);
        z ^ (z >> 31)
    }
    /// Uniform in `0..n` (`n` > 0).
    pub fn below(&mut self, n: usize) -> usize {
        (self.next_u64() % n.max(1) as u64) as usize
    }
}

/// Values a size field is patched to: past every limit, past 32 bits, negative as signed, and
/// near the original times a large factor.
fn huge(rng: &mut Rng, old: u64, width: usize) -> u64 {
    let v = match rng.below(9) {
        0 => 5_000_000_000,
        1 => 200_000_000,
        2 => u64::from(u32::MAX),
        3 => i32::MAX as u64,
        4 => i64::MAX as u64,
        5 => u64::MAX,
        6 => old.saturating_mul(1 << 20),
        7 => old.saturating_mul(1000),
        _ => 1 << (20 + rng.below(44)),
    };
    match width {
        2 => v
            .min(u64::from(u16::MAX))
            .max(old.saturating_mul(64).min(0xffff)),
        4 => v.min(u64::from(u32::MAX)),
        _ => v,
    }
}

/// A mutated copy of `seed` (a valid file of `format`), and the damage done.
pub fn mutate(format: BinaryFormat, seed: &[u8], rng: &mut Rng) -> (Vec<u8>, Damage) {
    let mut bytes = seed.to_vec();
    if bytes.is_empty() {
        return (bytes, Damage::Truncate);
    }
    let damage = match rng.below(3) {
        0 => Damage::Flip,
        1 => Damage::Truncate,
        _ => Damage::Inflate,
    };
    match damage {
        Damage::Flip => flip(&mut bytes, rng),
        Damage::Truncate => truncate(&mut bytes, rng),
        Damage::Inflate => {
            let n = 1 + rng.below(3);
            let mut patched = false;
            for _ in 0..n {
                patched |= match format {
                    BinaryFormat::Parquet => {
                        if rng.below(4) == 0 {
                            inflate_fixed(&mut bytes, rng, &[4], Endian::Little)
                        } else {
                            inflate_parquet_footer(&mut bytes, rng)
                        }
                    }
                    BinaryFormat::Hdf5 => inflate_fixed(&mut bytes, rng, &[4, 8], Endian::Little),
                    BinaryFormat::GeoTiff => {
                        let e = if bytes.starts_with(b"MM") {
                            Endian::Big
                        } else {
                            Endian::Little
                        };
                        inflate_fixed(&mut bytes, rng, &[2, 4], e)
                    }
                    BinaryFormat::NetCdf => {
                        if bytes.starts_with(b"CDF") {
                            inflate_fixed(&mut bytes, rng, &[4, 8], Endian::Big)
                        } else {
                            inflate_fixed(&mut bytes, rng, &[4, 8], Endian::Little)
                        }
                    }
                };
            }
            if !patched {
                flip(&mut bytes, rng);
            }
        }
    }
    (bytes, damage)
}

fn flip(bytes: &mut [u8], rng: &mut Rng) {
    let n = 1 + rng.below(8);
    for _ in 0..n {
        let at = rng.below(bytes.len());
        if rng.below(2) == 0 {
            bytes[at] ^= 1 << rng.below(8);
        } else {
            bytes[at] = rng.next_u64() as u8;
        }
    }
}

fn truncate(bytes: &mut Vec<u8>, rng: &mut Rng) {
    let len = bytes.len();
    if rng.below(2) == 0 {
        bytes.truncate(rng.below(len));
    } else {
        let start = rng.below(len);
        let end = (start + 1 + rng.below(len - start)).min(len);
        bytes.drain(start..end);
    }
}

#[derive(Clone, Copy)]
enum Endian {
    Little,
    Big,
}

fn read_uint(b: &[u8], e: Endian) -> u64 {
    let it = b.iter().map(|&x| u64::from(x));
    match e {
        Endian::Big => it.fold(0, |a, x| (a << 8) | x),
        Endian::Little => it.rev().fold(0, |a, x| (a << 8) | x),
    }
}

fn write_uint(b: &mut [u8], v: u64, e: Endian) {
    let n = b.len();
    for (i, slot) in b.iter_mut().enumerate() {
        let shift = match e {
            Endian::Big => 8 * (n - 1 - i),
            Endian::Little => 8 * i,
        };
        *slot = (v >> shift) as u8;
    }
}

/// Patches one plausible size field (value 1 to 2²⁴ at an aligned offset) of one of `widths`.
fn inflate_fixed(bytes: &mut [u8], rng: &mut Rng, widths: &[usize], e: Endian) -> bool {
    let width = widths[rng.below(widths.len())];
    let candidates: Vec<usize> = (0..bytes.len().saturating_sub(width - 1))
        .step_by(2)
        .filter(|&p| {
            let v = read_uint(&bytes[p..p + width], e);
            (1..=1 << 24).contains(&v)
        })
        .collect();
    if candidates.is_empty() {
        return false;
    }
    let p = candidates[rng.below(candidates.len())];
    let old = read_uint(&bytes[p..p + width], e);
    let v = huge(rng, old, width);
    write_uint(&mut bytes[p..p + width], v, e);
    true
}

/// Reads a ULEB128 varint at `p`: (value, length).
fn varint_at(b: &[u8], p: usize) -> Option<(u64, usize)> {
    let mut v: u64 = 0;
    for k in 0..10 {
        let byte = *b.get(p + k)?;
        v |= u64::from(byte & 0x7f) << (7 * k);
        if byte & 0x80 == 0 {
            return Some((v, k + 1));
        }
    }
    None
}

fn varint(mut v: u64) -> Vec<u8> {
    let mut out = Vec::new();
    loop {
        let b = (v & 0x7f) as u8;
        v >>= 7;
        if v == 0 {
            out.push(b);
            return out;
        }
        out.push(b | 0x80);
    }
}

/// Patches one varint of a Parquet footer (Thrift compact encoding: signed fields zigzag-coded)
/// to a huge value, preferring values that occur several times (row and value counts), and
/// corrects the footer length. False when the file has no footer to patch.
fn inflate_parquet_footer(bytes: &mut Vec<u8>, rng: &mut Rng) -> bool {
    let len = bytes.len();
    if len < 12 || &bytes[len - 4..] != b"PAR1" {
        return false;
    }
    let footer_len = read_uint(&bytes[len - 8..len - 4], Endian::Little) as usize;
    let Some(start) = (len - 8).checked_sub(footer_len) else {
        return false;
    };
    let mut fields: Vec<(usize, u64, usize)> = Vec::new();
    let mut p = start;
    while p < len - 8 {
        match varint_at(&bytes[..len - 8], p) {
            Some((v, n)) if v >= 2 => {
                fields.push((p, v, n));
                p += n;
            }
            Some((_, n)) => p += n,
            None => break,
        }
    }
    if fields.is_empty() {
        return false;
    }
    let repeated: Vec<(usize, u64, usize)> = fields
        .iter()
        .copied()
        .filter(|f| fields.iter().filter(|g| g.1 == f.1).count() >= 3)
        .collect();
    let pool = if !repeated.is_empty() && rng.below(2) == 0 {
        &repeated
    } else {
        &fields
    };
    let (at, old, n) = pool[rng.below(pool.len())];
    // Zigzag: an even code is a non-negative value; keep it non-negative and huge.
    let new = huge(rng, old / 2, 8).min(i64::MAX as u64) * 2;
    let enc = varint(new);
    bytes.splice(at..at + n, enc.iter().copied());
    let new_footer = footer_len + enc.len() - n;
    let l = bytes.len();
    write_uint(&mut bytes[l - 8..l - 4], new_footer as u64, Endian::Little);
    true
}

/// Offsets of every occurrence of `pattern` in `bytes`.
pub fn find_all(bytes: &[u8], pattern: &[u8]) -> Vec<usize> {
    if pattern.is_empty() || bytes.len() < pattern.len() {
        return vec![];
    }
    (0..=bytes.len() - pattern.len())
        .filter(|&p| &bytes[p..p + pattern.len()] == pattern)
        .collect()
}

/// A copy of the Parquet file `bytes` whose footer has the `occurrence`-th Thrift varint of the
/// signed value `old` (zigzag-coded, as the footer's row and value counts are) replaced by `new`,
/// the footer's length corrected; `None` when there is no such occurrence.
pub fn patch_parquet_footer_count(
    bytes: &[u8],
    old: i64,
    new: i64,
    occurrence: usize,
) -> Option<Vec<u8>> {
    let len = bytes.len();
    if len < 12 || &bytes[len - 4..] != b"PAR1" {
        return None;
    }
    let footer_len = read_uint(&bytes[len - 8..len - 4], Endian::Little) as usize;
    let start = (len - 8).checked_sub(footer_len)?;
    let zigzag = |v: i64| ((v << 1) ^ (v >> 63)) as u64;
    let pattern = varint(zigzag(old));
    let at = start + *find_all(&bytes[start..len - 8], &pattern).get(occurrence)?;
    let enc = varint(zigzag(new));
    let mut out = bytes.to_vec();
    out.splice(at..at + pattern.len(), enc.iter().copied());
    let l = out.len();
    write_uint(
        &mut out[l - 8..l - 4],
        (footer_len + enc.len() - pattern.len()) as u64,
        Endian::Little,
    );
    Some(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn varints_round_trip() {
        // ULEB128 (Thrift compact protocol spec): 300 = 0xAC 0x02.
        assert_eq!(varint(300), vec![0xac, 0x02]);
        assert_eq!(varint_at(&[0xac, 0x02], 0), Some((300, 2)));
        assert_eq!(varint_at(&varint(u64::MAX), 0), Some((u64::MAX, 10)));
    }

    #[test]
    fn fixed_width_fields_by_byte_order() {
        let mut b = [0u8; 4];
        write_uint(&mut b, 0x0102_0304, Endian::Big);
        assert_eq!(b, [1, 2, 3, 4]);
        assert_eq!(read_uint(&b, Endian::Little), 0x0403_0201);
    }

    #[test]
    fn same_seed_same_mutants() {
        let seed: Vec<u8> = (0..200u8).collect();
        let a: Vec<_> = (0..20)
            .scan(Rng::new(7), |r, _| {
                Some(mutate(BinaryFormat::Hdf5, &seed, r))
            })
            .collect();
        let b: Vec<_> = (0..20)
            .scan(Rng::new(7), |r, _| {
                Some(mutate(BinaryFormat::Hdf5, &seed, r))
            })
            .collect();
        assert_eq!(a, b);
        assert!(a.iter().any(|(m, _)| m != &seed));
    }

    #[test]
    fn parquet_footer_patch_keeps_the_footer_length_right() {
        // A fake footer of varints 1000 (three times, zigzag 2000) ending in its length and PAR1.
        let mut f = b"PAR1".to_vec();
        let body: Vec<u8> = [2000u64, 2000, 2000]
            .iter()
            .flat_map(|&v| varint(v))
            .collect();
        f.extend(&body);
        f.extend((body.len() as u32).to_le_bytes());
        f.extend(b"PAR1");
        let mut rng = Rng::new(3);
        assert!(inflate_parquet_footer(&mut f, &mut rng));
        let l = f.len();
        let footer = read_uint(&f[l - 8..l - 4], Endian::Little) as usize;
        assert_eq!(footer, l - 8 - 4);
        assert!(f.len() > 4 + body.len() + 8, "the patched varint is longer");
    }
}
