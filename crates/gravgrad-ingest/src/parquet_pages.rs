//! A walk of a Parquet column chunk's page headers before the `parquet` crate reads the chunk.
//!
//! A column chunk is a run of pages, each a Thrift `PageHeader` (compact protocol; Apache Thrift,
//! "Thrift Compact Protocol" specification; Parquet's `parquet.thrift`) followed by
//! `compressed_page_size` bytes. The `parquet` crate trusts what a header declares: it reserves
//! `uncompressed_page_size` bytes (up to 2 GiB) before decompressing, and its decoders index the
//! page by its declared `num_values` and encoding. Two damaged headers make it panic (found by
//! `xtask mutate`, `docs/reliability.md`): a dictionary-encoded data page with no dictionary page
//! before it (`Decoder for dict should have been set`), and a BYTE_STREAM_SPLIT page holding fewer
//! bytes than its values need (its decoder indexes past the page).
//!
//! This walk reads every page header of a chunk, from its first page (the dictionary page offset
//! if the footer gives one, else the data page offset) through its `total_compressed_size`, with
//! bounded reads of the header bytes only, and checks, for each page:
//!
//! - the header and its `compressed_page_size` bytes lie inside the chunk;
//! - `uncompressed_page_size` is at most the codec's largest expansion ([`max_expansion`]) times
//!   `compressed_page_size` (equal to it for an uncompressed page) and at most
//!   [`MAX_PARQUET_PAGE_BYTES`];
//! - a dictionary-encoded data page follows a dictionary page of the same chunk;
//! - the values of a data page fit its bytes, where the header alone tells how many bytes the
//!   values have (a required column, or a version 2 page): PLAIN and BYTE_STREAM_SPLIT need
//!   `width` bytes per non-null value, the dictionary encodings at least one byte;
//!
//! and, over the chunk, that the data pages' `num_values` add up to the chunk's. A version 1 page
//! of an optional column holds its definition levels inside the compressed bytes: its
//! BYTE_STREAM_SPLIT values are checked when the page is decompressed
//! ([`crate::parquet_page_guard`]).

use crate::parquet_footer::{BINARY, BOOL_FALSE, BOOL_TRUE, BYTE, DOUBLE, I16, I32, I64, STOP};
use crate::parquet_footer::{LIST, MAP, SET, STRUCT};
use gravgrad_core::limits::MAX_PARQUET_PAGE_BYTES;
use parquet::basic::{Compression, Type as PhysicalType};
use parquet::file::metadata::{ColumnChunkMetaData, ParquetMetaData};
use std::fmt;
use std::fs::File;
use std::os::unix::fs::FileExt;

/// Longest page header read, bytes. A numeric column's header (sizes, counts, encodings and
/// min/max statistics) takes tens of bytes; a header running longer than this is damaged.
const MAX_HEADER_BYTES: u64 = 64 << 10;

/// First read of a header, bytes (grown four times over up to [`MAX_HEADER_BYTES`] when the header
/// is longer).
const FIRST_READ_BYTES: u64 = 256;

/// Deepest nesting of structs, lists and maps skipped inside a page header (statistics nest 1 deep).
const MAX_DEPTH: usize = 16;

/// Page types (`parquet.thrift`, `PageType`).
const DATA_PAGE: i64 = 0;
const INDEX_PAGE: i64 = 1;
const DICTIONARY_PAGE: i64 = 2;
const DATA_PAGE_V2: i64 = 3;

/// Encodings (`parquet.thrift`, `Encoding`).
const PLAIN: i64 = 0;
const PLAIN_DICTIONARY: i64 = 2;
const RLE_DICTIONARY: i64 = 8;
/// BYTE_STREAM_SPLIT.
const BYTE_STREAM_SPLIT: i64 = 9;

/// What is wrong with a chunk's pages, and where: row group and page counted from 0 (page 0 is the
/// chunk's first page, its dictionary page when it has one), `at` the header's byte in the file.
#[derive(Debug)]
pub struct PageFault {
    pub row_group: usize,
    pub page: usize,
    pub at: u64,
    pub what: String,
}

impl fmt::Display for PageFault {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(
            f,
            "row group {}, page {} (header at byte {}): {}",
            self.row_group, self.page, self.at, self.what
        )
    }
}

/// The column a chunk belongs to, as the checks need it.
#[derive(Clone, Copy, Debug)]
pub struct ColumnShape {
    /// Bytes of one value (DOUBLE and INT64 8, FLOAT and INT32 4); `None` for other types.
    pub width: Option<u64>,
    /// Whether the column has neither definition nor repetition levels (a required flat column):
    /// a version 1 data page then holds its values only.
    pub levels_free: bool,
}

impl ColumnShape {
    /// The shape of a column of `physical` type with the given largest levels.
    pub fn new(physical: PhysicalType, max_def: i16, max_rep: i16) -> Self {
        let width = match physical {
            PhysicalType::DOUBLE | PhysicalType::INT64 => Some(8),
            PhysicalType::FLOAT | PhysicalType::INT32 => Some(4),
            _ => None,
        };
        ColumnShape {
            width,
            levels_free: max_def == 0 && max_rep == 0,
        }
    }
}

/// Largest ratio of decompressed to compressed bytes the codec's format can give; `None` for a
/// codec the `parquet` crate does not read (it refuses the chunk itself).
///
/// - SNAPPY: a 3-byte copy emits at most 64 bytes (Snappy format description, "copy with 2-byte
///   offset"): 64/3, rounded up to 22.
/// - GZIP: deflate emits at most 258 bytes for a match coded in about 2 bits (RFC 1951): 1032.
/// - LZ4, LZ4_RAW: each extension byte of a match length adds at most 255 bytes (LZ4 block format
///   description): 255.
/// - ZSTD: a block of at least 4 bytes (3-byte header, 1 byte of RLE block) emits at most
///   128 KiB (RFC 8878, 3.1.1.2): 32768.
/// - BROTLI: a non-empty meta-block takes at least 19 bits and emits at most 2²⁴ bytes
///   (RFC 7932, 9.2): 2²³. Only [`MAX_PARQUET_PAGE_BYTES`] bounds such pages usefully.
pub fn max_expansion(codec: Compression) -> Option<u64> {
    match codec {
        Compression::UNCOMPRESSED => Some(1),
        Compression::SNAPPY => Some(22),
        Compression::GZIP(_) => Some(1032),
        Compression::LZ4 | Compression::LZ4_RAW => Some(255),
        Compression::ZSTD(_) => Some(32_768),
        Compression::BROTLI(_) => Some(1 << 23),
        Compression::LZO => None,
    }
}

/// Checks the pages of column `column` in every row group of `file` before the `parquet` crate
/// reads them. The chunks are known to lie inside the file (checked with the footer).
pub fn check_column(
    file: &File,
    meta: &ParquetMetaData,
    column: usize,
    shape: ColumnShape,
) -> Result<(), PageFault> {
    for (g, rg) in meta.row_groups().iter().enumerate() {
        if let Some(cc) = rg.columns().get(column) {
            check_chunk(file, cc, shape, g)?;
        }
    }
    Ok(())
}

/// A page header's fields that the checks read (`parquet.thrift`, `PageHeader` and the headers it
/// holds); other fields are skipped.
#[derive(Debug, Default)]
struct PageHeader {
    /// `PageHeader` 1.
    kind: Option<i64>,
    /// `PageHeader` 2, bytes.
    uncompressed: Option<i64>,
    /// `PageHeader` 3, bytes.
    compressed: Option<i64>,
    /// `DataPageHeader` 1, `DataPageHeaderV2` 1, `DictionaryPageHeader` 1.
    num_values: Option<i64>,
    /// `DataPageHeader` 2, `DataPageHeaderV2` 4, `DictionaryPageHeader` 2.
    encoding: Option<i64>,
    /// `DataPageHeaderV2` 2.
    num_nulls: Option<i64>,
    /// `DataPageHeaderV2` 5 and 6, bytes.
    def_bytes: Option<i64>,
    rep_bytes: Option<i64>,
    /// `DataPageHeaderV2` 7 (default true).
    v2_compressed: Option<bool>,
}

/// The chunk's state as its pages are walked.
struct ChunkWalk {
    row_group: usize,
    page: usize,
    at: u64,
    dictionary_seen: bool,
    values: i64,
}

impl ChunkWalk {
    fn fault(&self, what: String) -> PageFault {
        PageFault {
            row_group: self.row_group,
            page: self.page,
            at: self.at,
            what,
        }
    }
}

/// Walks one column chunk's pages.
fn check_chunk(
    file: &File,
    cc: &ColumnChunkMetaData,
    shape: ColumnShape,
    row_group: usize,
) -> Result<(), PageFault> {
    let start = cc.dictionary_page_offset().unwrap_or(cc.data_page_offset());
    let (Ok(start), Ok(len)) = (u64::try_from(start), u64::try_from(cc.compressed_size())) else {
        return Ok(()); // refused before, with the chunk's range
    };
    let end = start.saturating_add(len);
    let mut w = ChunkWalk {
        row_group,
        page: 0,
        at: start,
        dictionary_seen: false,
        values: 0,
    };
    while w.at < end {
        let (h, header_len) = read_header(file, w.at, end - w.at).map_err(|e| w.fault(e))?;
        let body = check_page(&h, header_len, end - w.at, cc.compression(), shape, &mut w)
            .map_err(|e| w.fault(e))?;
        w.at += header_len + body;
        w.page += 1;
    }
    if w.values != cc.num_values() {
        return Err(PageFault {
            row_group,
            page: w.page,
            at: end,
            what: format!(
                "the chunk's data pages hold {} values, its footer entry declares {}",
                w.values,
                cc.num_values()
            ),
        });
    }
    Ok(())
}

/// Checks one page whose header took `header_len` of the `left` bytes left in the chunk; returns
/// the page's body length.
fn check_page(
    h: &PageHeader,
    header_len: u64,
    left: u64,
    codec: Compression,
    shape: ColumnShape,
    w: &mut ChunkWalk,
) -> Result<u64, String> {
    let kind = required(h.kind, "its type")?;
    let compressed = required(h.compressed, "compressed_page_size")?;
    let uncompressed = required(h.uncompressed, "uncompressed_page_size")?;
    let room = left - header_len;
    let body = u64::try_from(compressed)
        .ok()
        .filter(|&c| c <= room)
        .ok_or_else(|| {
            format!(
                "compressed_page_size is {compressed} bytes; expected 0 to {room}, the bytes left \
                 in the column chunk after the header"
            )
        })?;
    if kind == INDEX_PAGE {
        return Ok(body); // skipped by the crate
    }
    let decompressed = match kind {
        DATA_PAGE_V2 => codec != Compression::UNCOMPRESSED && h.v2_compressed.unwrap_or(true),
        DATA_PAGE | DICTIONARY_PAGE => codec != Compression::UNCOMPRESSED,
        other => return Err(format!("page type {other}; expected 0, 1, 2 or 3")),
    };
    check_sizes(uncompressed, body, decompressed, codec)?;
    // The bytes the decoders see: decompressed pages are checked to be `uncompressed` long.
    let page_bytes = if decompressed {
        uncompressed as u64
    } else {
        body
    };
    match kind {
        DICTIONARY_PAGE => {
            w.dictionary_seen = true;
            let n = non_negative(required(h.num_values, "num_values")?, "num_values")?;
            let encoding = required(h.encoding, "the encoding")?;
            if matches!(encoding, PLAIN | PLAIN_DICTIONARY) {
                fits(n, shape.width, page_bytes, "the dictionary's", "PLAIN")?;
            }
        }
        DATA_PAGE => {
            let n = non_negative(required(h.num_values, "num_values")?, "num_values")?;
            let encoding = required(h.encoding, "the encoding")?;
            check_dictionary(encoding, w.dictionary_seen)?;
            if shape.levels_free {
                check_values(encoding, n, shape.width, page_bytes)?;
            }
            w.values = w.values.saturating_add(n as i64);
        }
        _ => {
            let n = non_negative(required(h.num_values, "num_values")?, "num_values")?;
            let encoding = required(h.encoding, "the encoding")?;
            check_dictionary(encoding, w.dictionary_seen)?;
            let values = check_v2_levels(h, n, body)?;
            let value_bytes = page_bytes.saturating_sub(values.1);
            check_values(encoding, values.0, shape.width, value_bytes)?;
            w.values = w.values.saturating_add(n as i64);
        }
    }
    Ok(body)
}

/// `uncompressed_page_size` against the codec's expansion and [`MAX_PARQUET_PAGE_BYTES`].
fn check_sizes(
    uncompressed: i64,
    body: u64,
    decompressed: bool,
    codec: Compression,
) -> Result<(), String> {
    let declared = u64::try_from(uncompressed)
        .map_err(|_| format!("uncompressed_page_size is {uncompressed} bytes"))?;
    if declared > MAX_PARQUET_PAGE_BYTES {
        return Err(format!(
            "uncompressed_page_size is {declared} bytes; a page of a flight log holds at most \
             {MAX_PARQUET_PAGE_BYTES}"
        ));
    }
    if !decompressed {
        if declared != body {
            return Err(format!(
                "uncompressed_page_size is {declared} bytes, compressed_page_size {body}; expected \
                 them equal on an uncompressed page"
            ));
        }
        return Ok(());
    }
    if let Some(x) = max_expansion(codec) {
        let most = x.saturating_mul(body);
        if declared > most {
            return Err(format!(
                "uncompressed_page_size is {declared} bytes; {codec} expands the page's {body} \
                 bytes to at most {most} ({x} times)"
            ));
        }
    }
    Ok(())
}

/// A dictionary-encoded data page needs a dictionary page before it in the chunk (the crate
/// panics without one).
fn check_dictionary(encoding: i64, dictionary_seen: bool) -> Result<(), String> {
    if matches!(encoding, PLAIN_DICTIONARY | RLE_DICTIONARY) && !dictionary_seen {
        return Err(format!(
            "a data page of encoding {} with no dictionary page before it; expected the column \
             chunk's dictionary page first",
            encoding_name(encoding)
        ));
    }
    Ok(())
}

/// A version 2 page's level lengths and null count: returns (non-null values, level bytes). The
/// levels are stored uncompressed at the page's start, inside its `body` bytes.
fn check_v2_levels(h: &PageHeader, n: u64, body: u64) -> Result<(u64, u64), String> {
    let nulls = required(h.num_nulls, "num_nulls")?;
    let nulls = u64::try_from(nulls)
        .ok()
        .filter(|&x| x <= n)
        .ok_or_else(|| format!("num_nulls is {nulls}; expected 0 to num_values, {n}"))?;
    let def = required(h.def_bytes, "definition_levels_byte_length")?;
    let rep = required(h.rep_bytes, "repetition_levels_byte_length")?;
    let levels = u64::try_from(def)
        .ok()
        .zip(u64::try_from(rep).ok())
        .map(|(d, r)| d + r)
        .filter(|&l| l <= body)
        .ok_or_else(|| {
            format!(
                "the levels declare {def} + {rep} bytes; expected at most the page's {body} bytes"
            )
        })?;
    Ok((n - nulls, levels))
}

/// The values of a data page against the bytes its encoding needs for them.
fn check_values(encoding: i64, n: u64, width: Option<u64>, bytes: u64) -> Result<(), String> {
    match encoding {
        PLAIN | BYTE_STREAM_SPLIT => fits(n, width, bytes, "its", encoding_name(encoding)),
        PLAIN_DICTIONARY | RLE_DICTIONARY if n > 0 && bytes == 0 => Err(format!(
            "{n} values of encoding {} in 0 bytes; expected at least 1 (the index width)",
            encoding_name(encoding)
        )),
        _ => Ok(()),
    }
}

/// `n` values of `width` bytes in `bytes`.
fn fits(n: u64, width: Option<u64>, bytes: u64, whose: &str, encoding: &str) -> Result<(), String> {
    let Some(width) = width else {
        return Ok(());
    };
    let need = n.saturating_mul(width);
    if need > bytes {
        return Err(format!(
            "{whose} {n} values of encoding {encoding} need {need} bytes ({width} each); the page \
             holds {bytes}"
        ));
    }
    Ok(())
}

/// The name of an encoding number, for messages.
fn encoding_name(encoding: i64) -> &'static str {
    match encoding {
        PLAIN => "PLAIN",
        PLAIN_DICTIONARY => "PLAIN_DICTIONARY",
        RLE_DICTIONARY => "RLE_DICTIONARY",
        BYTE_STREAM_SPLIT => "BYTE_STREAM_SPLIT",
        _ => "other",
    }
}

fn required(v: Option<i64>, what: &str) -> Result<i64, String> {
    v.ok_or_else(|| format!("the page header lacks {what}"))
}

fn non_negative(v: i64, what: &str) -> Result<u64, String> {
    u64::try_from(v).map_err(|_| format!("{what} is {v}; expected 0 or more"))
}

/// Reads the page header at byte `at` of the file, at most `left` bytes long: grows its read from
/// [`FIRST_READ_BYTES`] to [`MAX_HEADER_BYTES`] while the header runs past it. Returns the header
/// and its length.
fn read_header(file: &File, at: u64, left: u64) -> Result<(PageHeader, u64), String> {
    let most = left.min(MAX_HEADER_BYTES);
    let mut want = FIRST_READ_BYTES.min(most);
    loop {
        let mut buf = vec![0u8; want as usize];
        file.read_exact_at(&mut buf, at)
            .map_err(|e| format!("cannot read the page header: {e}"))?;
        let mut c = Compact { b: &buf, pos: 0 };
        match c.page_header() {
            Ok(h) => return Ok((h, c.pos as u64)),
            Err(Short) if want < most => want = (want * 4).min(most),
            Err(Short) if most == left => {
                return Err(format!(
                    "the page header runs past the column chunk's end, {left} bytes on"
                ));
            }
            Err(Short) => {
                return Err(format!(
                    "the page header runs over {MAX_HEADER_BYTES} bytes; expected a few tens"
                ));
            }
            Err(Bad(what)) => {
                return Err(format!(
                    "the page header is damaged: {what}; expected a Thrift compact PageHeader"
                ));
            }
        }
    }
}

/// Why a header could not be read from the bytes at hand.
enum HeaderError {
    /// The bytes end inside the header.
    Short,
    /// The bytes are not a Thrift compact struct.
    Bad(String),
}
use HeaderError::{Bad, Short};

/// A Thrift compact-protocol reader over a header's bytes.
struct Compact<'a> {
    b: &'a [u8],
    pos: usize,
}

impl Compact<'_> {
    fn byte(&mut self) -> Result<u8, HeaderError> {
        let x = *self.b.get(self.pos).ok_or(Short)?;
        self.pos += 1;
        Ok(x)
    }
    fn varint(&mut self) -> Result<u64, HeaderError> {
        let mut v: u64 = 0;
        for k in 0..10 {
            let x = self.byte()?;
            v |= u64::from(x & 0x7f) << (7 * k);
            if x & 0x80 == 0 {
                return Ok(v);
            }
        }
        Err(Bad("a variable-length integer runs over 10 bytes".into()))
    }
    fn zigzag(&mut self) -> Result<i64, HeaderError> {
        let v = self.varint()?;
        Ok((v >> 1) as i64 ^ -((v & 1) as i64))
    }
    fn skip_bytes(&mut self, n: u64) -> Result<(), HeaderError> {
        let left = (self.b.len() - self.pos) as u64;
        if n > left {
            return Err(Short);
        }
        self.pos += n as usize;
        Ok(())
    }

    /// The next field header of a struct: `None` at its STOP, else (field id, type).
    fn field(&mut self, last: &mut i64) -> Result<Option<(i64, u8)>, HeaderError> {
        let h = self.byte()?;
        let t = h & 0x0f;
        if t == STOP {
            return Ok(None);
        }
        *last = match h >> 4 {
            0 => self.zigzag()?,
            d => *last + i64::from(d),
        };
        Ok(Some((*last, t)))
    }

    /// An integer field's value; other types are refused.
    fn int(&mut self, t: u8) -> Result<i64, HeaderError> {
        match t {
            BYTE => self.byte().map(|b| i64::from(b as i8)),
            I16 | I32 | I64 => self.zigzag(),
            _ => Err(Bad(format!("an integer field of Thrift type {t}"))),
        }
    }

    /// Skips a value of type `t`.
    fn skip(&mut self, t: u8, depth: usize) -> Result<(), HeaderError> {
        if depth > MAX_DEPTH {
            return Err(Bad(format!("nesting deeper than {MAX_DEPTH}")));
        }
        match t {
            BOOL_TRUE | BOOL_FALSE => Ok(()),
            BYTE => self.byte().map(|_| ()),
            I16 | I32 | I64 => self.varint().map(|_| ()),
            DOUBLE => self.skip_bytes(8),
            BINARY => {
                let n = self.varint()?;
                self.skip_bytes(n)
            }
            LIST | SET => {
                let h = self.byte()?;
                let n = match h >> 4 {
                    15 => self.varint()?,
                    n => u64::from(n),
                };
                let et = h & 0x0f;
                // Every element takes at least one byte, booleans included.
                if n > (self.b.len() - self.pos) as u64 {
                    return Err(Short);
                }
                for _ in 0..n {
                    if et == BOOL_TRUE || et == BOOL_FALSE {
                        self.byte()?;
                    } else {
                        self.skip(et, depth + 1)?;
                    }
                }
                Ok(())
            }
            MAP => {
                let n = self.varint()?;
                if n.saturating_mul(2) > (self.b.len() - self.pos) as u64 {
                    return Err(Short);
                }
                if n > 0 {
                    let kv = self.byte()?;
                    for _ in 0..n {
                        self.skip(kv >> 4, depth + 1)?;
                        self.skip(kv & 0x0f, depth + 1)?;
                    }
                }
                Ok(())
            }
            STRUCT => {
                let mut last = 0;
                while let Some((_, t)) = self.field(&mut last)? {
                    self.skip(t, depth + 1)?;
                }
                Ok(())
            }
            _ => Err(Bad(format!("unknown Thrift type {t}"))),
        }
    }

    /// A boolean field's value (compact protocol: in the field header's type).
    fn boolean(t: u8) -> Result<bool, HeaderError> {
        match t {
            BOOL_TRUE => Ok(true),
            BOOL_FALSE => Ok(false),
            _ => Err(Bad(format!("a boolean field of Thrift type {t}"))),
        }
    }

    /// A `PageHeader` struct.
    fn page_header(&mut self) -> Result<PageHeader, HeaderError> {
        let mut h = PageHeader::default();
        let mut last = 0;
        while let Some((id, t)) = self.field(&mut last)? {
            match (id, t) {
                (1, _) => h.kind = Some(self.int(t)?),
                (2, _) => h.uncompressed = Some(self.int(t)?),
                (3, _) => h.compressed = Some(self.int(t)?),
                (5 | 7 | 8, STRUCT) => self.inner_header(id, &mut h)?,
                _ => self.skip(t, 1)?,
            }
        }
        Ok(h)
    }

    /// The data (`id` 5), dictionary (7) or version 2 data (8) page header inside a `PageHeader`.
    fn inner_header(&mut self, id: i64, h: &mut PageHeader) -> Result<(), HeaderError> {
        let mut last = 0;
        while let Some((f, t)) = self.field(&mut last)? {
            match (id, f) {
                (_, 1) => h.num_values = Some(self.int(t)?),
                (5 | 7, 2) | (8, 4) => h.encoding = Some(self.int(t)?),
                (8, 2) => h.num_nulls = Some(self.int(t)?),
                (8, 5) => h.def_bytes = Some(self.int(t)?),
                (8, 6) => h.rep_bytes = Some(self.int(t)?),
                (8, 7) => h.v2_compressed = Some(Self::boolean(t)?),
                _ => self.skip(t, 2)?,
            }
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    // Hand-made compact-protocol bytes (Thrift compact protocol spec): field header = delta << 4 |
    // type (5 = i32, 12 = struct); zigzag varints.

    #[test]
    fn a_data_page_header_is_read_and_its_length_found() {
        // PageHeader { 1: DATA_PAGE, 2: 320, 3: 100, 5: { 1: 40, 2: PLAIN_DICTIONARY, 3: RLE,
        // 4: RLE } } followed by page bytes.
        let b = [
            0x15, 0x00, 0x15, 0x80, 0x05, 0x15, 0xc8, 0x01, 0x2c, 0x15, 0x50, 0x15, 0x04, 0x15,
            0x06, 0x15, 0x06, 0x00, 0x00, 0xaa, 0xbb,
        ];
        let mut c = Compact { b: &b, pos: 0 };
        let Ok(h) = c.page_header() else {
            panic!("not read")
        };
        assert_eq!(c.pos, 19);
        assert_eq!(
            (
                h.kind,
                h.uncompressed,
                h.compressed,
                h.num_values,
                h.encoding
            ),
            (Some(0), Some(320), Some(100), Some(40), Some(2))
        );
        // Cut inside the header: more bytes are asked for, not an error.
        let mut c = Compact {
            b: &b[..10],
            pos: 0,
        };
        assert!(matches!(c.page_header(), Err(Short)));
    }

    #[test]
    fn expansion_of_each_codec() {
        assert_eq!(max_expansion(Compression::UNCOMPRESSED), Some(1));
        assert_eq!(max_expansion(Compression::SNAPPY), Some(22));
        assert_eq!(max_expansion(Compression::LZO), None);
        // 2 GiB from a 300-byte SNAPPY page is refused; 6600 bytes (22 × 300) pass.
        assert!(check_sizes(i32::MAX.into(), 300, true, Compression::SNAPPY).is_err());
        assert!(check_sizes(6600, 300, true, Compression::SNAPPY).is_ok());
        assert!(check_sizes(6601, 300, true, Compression::SNAPPY).is_err());
        assert!(check_sizes(301, 300, false, Compression::UNCOMPRESSED).is_err());
    }
}
