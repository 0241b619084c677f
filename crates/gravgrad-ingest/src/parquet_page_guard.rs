//! A check of each decompressed Parquet data page between the `parquet` crate's page reader and
//! its decoders, for what a page header alone cannot tell ([`crate::parquet_pages`] checks the rest
//! before the chunk is read).
//!
//! A version 1 data page of a column with levels starts with its repetition and definition levels
//! (`parquet.thrift`, `DataPageHeader`; Parquet "Encodings": RLE levels after a 4-byte little-endian
//! length, BIT_PACKED levels in ⌈values × bit width / 8⌉ bytes), inside the compressed bytes. The
//! crate
//!
//! - slices BIT_PACKED levels without checking the page holds them (a panic on a short page), and
//! - hands its BYTE_STREAM_SPLIT decoder the bytes after the levels and then asks it for one value
//!   per definition level equal to the column's largest; the decoder splits the bytes into `width`
//!   streams of ⌊bytes / width⌋ and indexes past them when asked for more values than that (a
//!   panic, seen with a page whose encoding byte was flipped to BYTE_STREAM_SPLIT).
//!
//! [`GuardedPages`] wraps the crate's page reader and refuses such a page with an error naming the
//! row group and the page, before the decoders see it.

use parquet::basic::Encoding;
use parquet::column::page::{Page, PageMetadata, PageReader};
use parquet::errors::{ParquetError, Result};

/// A column's page reader whose data pages are checked before they are handed on.
pub struct GuardedPages {
    inner: Box<dyn PageReader>,
    /// Bytes of one value.
    width: usize,
    max_def: i16,
    max_rep: i16,
    row_group: usize,
    /// Pages handed on so far (page 0 is the chunk's first, its dictionary page when it has one).
    page: usize,
}

impl GuardedPages {
    /// Guards `inner`, the page reader of a column of `width`-byte values with the given largest
    /// levels, in row group `row_group`.
    pub fn new(
        inner: Box<dyn PageReader>,
        width: usize,
        max_def: i16,
        max_rep: i16,
        row_group: usize,
    ) -> Self {
        GuardedPages {
            inner,
            width,
            max_def,
            max_rep,
            row_group,
            page: 0,
        }
    }

    /// Checks a version 1 data page's levels and, for BYTE_STREAM_SPLIT, its values.
    fn check_v1(
        &self,
        buf: &[u8],
        n: u32,
        encoding: Encoding,
        def: Encoding,
        rep: Encoding,
    ) -> Result<()> {
        let fail = |what: String| {
            ParquetError::General(format!(
                "row group {}, page {}: {what}",
                self.row_group, self.page
            ))
        };
        let mut offset = 0;
        if self.max_rep > 0 {
            offset += level_bytes(&buf[offset..], n, self.max_rep, rep).map_err(fail)?;
        }
        let mut non_null = n as usize;
        if self.max_def > 0 {
            let len = level_bytes(&buf[offset..], n, self.max_def, def).map_err(fail)?;
            if encoding == Encoding::BYTE_STREAM_SPLIT {
                let data = level_data(&buf[offset..offset + len], def);
                non_null = count_level(data, n as usize, self.max_def, def);
            }
            offset += len;
        }
        if encoding == Encoding::BYTE_STREAM_SPLIT {
            let bytes = buf.len() - offset;
            let need = non_null.saturating_mul(self.width);
            if need > bytes {
                return Err(fail(format!(
                    "{non_null} non-null values of encoding BYTE_STREAM_SPLIT need {need} bytes \
                     ({} each); the page holds {bytes} after its levels",
                    self.width
                )));
            }
        }
        Ok(())
    }
}

/// Bits of a level whose largest value is `max` (0 for `max` 0).
fn bit_width(max: i16) -> u32 {
    16 - (max.max(0) as u16).leading_zeros()
}

/// The bytes the levels of `n` values take at the start of `buf`, in the crate's reading: an RLE
/// section's 4-byte length and data, or BIT_PACKED's ⌈n × width / 8⌉; an error when `buf` is
/// shorter.
#[allow(deprecated)] // BIT_PACKED is deprecated for new files but still read
fn level_bytes(
    buf: &[u8],
    n: u32,
    max: i16,
    encoding: Encoding,
) -> std::result::Result<usize, String> {
    let need = match encoding {
        Encoding::RLE => match buf.get(..4) {
            Some(b) => 4 + u32::from_le_bytes([b[0], b[1], b[2], b[3]]) as usize,
            None => 4,
        },
        Encoding::BIT_PACKED => (n as usize * bit_width(max) as usize).div_ceil(8),
        _ => return Ok(0), // the crate refuses other level encodings itself
    };
    if need > buf.len() {
        return Err(format!(
            "its {encoding} levels of {n} values need {need} bytes; the page holds {}",
            buf.len()
        ));
    }
    Ok(need)
}

/// The level values of a section `levels_bytes` long (without an RLE section's length prefix).
#[allow(deprecated)]
fn level_data(section: &[u8], encoding: Encoding) -> &[u8] {
    match encoding {
        Encoding::RLE => &section[4.min(section.len())..],
        _ => section,
    }
}

/// How many of the first `n` levels in `data` equal `max`: RLE/bit-packed hybrid for RLE
/// (Parquet "Encodings"), packed from the least significant bit for BIT_PACKED as the crate reads
/// it. Levels past the data's end are not counted (the crate cannot read them either).
#[allow(deprecated)]
fn count_level(data: &[u8], n: usize, max: i16, encoding: Encoding) -> usize {
    let width = bit_width(max) as usize;
    match encoding {
        Encoding::BIT_PACKED => count_packed(data, n, width, max),
        _ => count_hybrid(data, n, width, max),
    }
}

/// Counts values equal to `max` among the first `n` of `width` bits each, least significant bit
/// first.
fn count_packed(data: &[u8], n: usize, width: usize, max: i16) -> usize {
    if width == 0 {
        return n; // every level is 0 = max
    }
    let whole = (data.len() * 8 / width).min(n);
    (0..whole)
        .filter(|&i| {
            let v = (0..width).fold(0u16, |v, b| {
                let bit = i * width + b;
                v | (u16::from(data[bit / 8] >> (bit % 8) & 1) << b)
            });
            v == max as u16
        })
        .count()
}

/// Counts values equal to `max` among the first `n` of an RLE/bit-packed hybrid run list.
fn count_hybrid(data: &[u8], n: usize, width: usize, max: i16) -> usize {
    let mut pos = 0;
    let (mut seen, mut count) = (0usize, 0usize);
    while seen < n && pos < data.len() {
        let Some((header, len)) = varint(&data[pos..]) else {
            break;
        };
        pos += len;
        let run = (header >> 1) as usize;
        let values = if header & 1 == 1 {
            // Bit-packed: `run` groups of 8 values in `width` bytes each.
            let bytes = run.saturating_mul(width).min(data.len() - pos);
            let values = run.saturating_mul(8).min(n - seen);
            count += count_packed(&data[pos..pos + bytes], values, width, max);
            pos += bytes;
            values
        } else {
            // A run of `run` copies of one value in ⌈width / 8⌉ bytes, little endian.
            let vb = width.div_ceil(8);
            let Some(v) = data.get(pos..pos + vb) else {
                break;
            };
            let value = v.iter().rev().fold(0u64, |a, &b| (a << 8) | u64::from(b));
            pos += vb;
            let values = run.min(n - seen);
            if value == max as u64 {
                count += values;
            }
            values
        };
        seen += values;
    }
    count
}

/// A ULEB128 varint at the start of `b`: (value, length).
fn varint(b: &[u8]) -> Option<(u64, usize)> {
    let mut v: u64 = 0;
    for (k, &byte) in b.iter().take(10).enumerate() {
        v |= u64::from(byte & 0x7f) << (7 * k);
        if byte & 0x80 == 0 {
            return Some((v, k + 1));
        }
    }
    None
}

impl Iterator for GuardedPages {
    type Item = Result<Page>;

    fn next(&mut self) -> Option<Self::Item> {
        self.get_next_page().transpose()
    }
}

impl PageReader for GuardedPages {
    fn get_next_page(&mut self) -> Result<Option<Page>> {
        let page = self.inner.get_next_page()?;
        if let Some(Page::DataPage {
            buf,
            num_values,
            encoding,
            def_level_encoding,
            rep_level_encoding,
            ..
        }) = &page
        {
            self.check_v1(
                buf,
                *num_values,
                *encoding,
                *def_level_encoding,
                *rep_level_encoding,
            )?;
        }
        self.page += 1;
        Ok(page)
    }

    fn peek_next_page(&mut self) -> Result<Option<PageMetadata>> {
        self.inner.peek_next_page()
    }

    fn skip_next_page(&mut self) -> Result<()> {
        self.page += 1;
        self.inner.skip_next_page()
    }

    fn supports_deferred_dictionary(&self) -> bool {
        self.inner.supports_deferred_dictionary()
    }

    fn take_deferred_dictionary(&mut self) -> Result<Option<Page>> {
        self.inner.take_deferred_dictionary()
    }

    fn at_record_boundary(&mut self) -> Result<bool> {
        self.inner.at_record_boundary()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn hybrid_levels_are_counted() {
        // Width 1: an RLE run of 40 ones (header 40 << 1 = 80, value 1).
        assert_eq!(count_hybrid(&[80, 1], 40, 1, 1), 40);
        // Only the first 30 asked for.
        assert_eq!(count_hybrid(&[80, 1], 30, 1, 1), 30);
        // A bit-packed group of 8 (header 1 << 1 | 1 = 3): 0b1011_0101 holds five ones.
        assert_eq!(count_hybrid(&[3, 0b1011_0101], 8, 1, 1), 5);
        // Runs of zeros count nothing; a run cut short counts what is there.
        assert_eq!(count_hybrid(&[80, 0], 40, 1, 1), 0);
        assert_eq!(count_hybrid(&[5, 0xff], 16, 1, 1), 8);
    }

    #[test]
    #[allow(deprecated)]
    fn bit_packed_levels_must_fit_the_page() {
        // 40 levels of width 1 need 5 bytes.
        assert_eq!(level_bytes(&[0; 5], 40, 1, Encoding::BIT_PACKED), Ok(5));
        assert!(level_bytes(&[0; 4], 40, 1, Encoding::BIT_PACKED).is_err());
        // RLE: the 4-byte length says 2 bytes follow.
        assert_eq!(
            level_bytes(&[2, 0, 0, 0, 80, 1], 40, 1, Encoding::RLE),
            Ok(6)
        );
        assert!(level_bytes(&[9, 0, 0, 0, 80, 1], 40, 1, Encoding::RLE).is_err());
    }
}
