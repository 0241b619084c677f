//! Parser for the NetCDF classic formats, after Unidata's "NetCDF Classic Format Specification":
//! CDF-1 (`CDF\x01`, classic), CDF-2 (`CDF\x02`, 64-bit offset) and CDF-5 (`CDF\x05`, 64-bit data).
//!
//! Layout facts used here: every number is big-endian. The header is `magic numrecs dim_list
//! gatt_list var_list`; a list is a 4-byte tag (`NC_DIMENSION` = 0x0A, `NC_VARIABLE` = 0x0B,
//! `NC_ATTRIBUTE` = 0x0C) and a count, or two zeros when absent. Counts, lengths, dimension ids and
//! variable sizes are 4 bytes in CDF-1/2 and 8 bytes in CDF-5; a variable's `begin` offset is 4
//! bytes in CDF-1 and 8 in CDF-2/5; names and attribute values are padded to 4 bytes. Variables
//! without the unlimited dimension lie whole at `begin`; record variables (first dimension
//! unlimited) are interleaved, one record of each after the other, records `recsize` bytes apart
//! (the sum of their padded per-record sizes, unpadded when there is a single record variable).
//!
//! Nothing here panics on a malformed file: every count is checked against the bytes present
//! before anything is allocated, and every problem is returned as a message saying what was
//! expected and where (byte offset).

use crate::model::{AttrValue, Attribute, Dimension, Format, NcType, Variable};

/// Tags of the header lists.
const NC_DIMENSION: u32 = 0x0A;
const NC_VARIABLE: u32 = 0x0B;
const NC_ATTRIBUTE: u32 = 0x0C;

/// Where a variable's values lie in a classic file.
#[derive(Clone, Debug, PartialEq, Eq)]
pub(crate) struct VarPlace {
    /// Byte offset of the first value (of the first record, for a record variable).
    pub begin: u64,
    /// Bytes of one record (record variables) or of the whole variable (the others), unpadded.
    pub bytes: u64,
    /// Whether the variable runs along the unlimited dimension.
    pub record: bool,
}

/// A parsed classic header.
#[derive(Clone, Debug)]
pub(crate) struct Header {
    pub format: Format,
    pub dims: Vec<Dimension>,
    pub attributes: Vec<Attribute>,
    pub variables: Vec<Variable>,
    pub places: Vec<VarPlace>,
    /// Bytes from one record to the next.
    pub recsize: u64,
    /// Number of records.
    pub numrecs: u64,
}

/// Why a header could not be parsed.
#[derive(Debug)]
pub(crate) enum HeaderError {
    /// The bytes ran out at this offset: read more of the file, or the file is truncated.
    OutOfBytes { offset: u64, what: &'static str },
    /// The header is malformed: the message says what was expected.
    Bad(String),
}

struct Cursor<'a> {
    buf: &'a [u8],
    pos: usize,
    /// 8-byte counts and sizes (CDF-5).
    wide: bool,
    /// 8-byte offsets (CDF-2 and CDF-5).
    wide_offsets: bool,
}

impl<'a> Cursor<'a> {
    fn take(&mut self, n: usize, what: &'static str) -> Result<&'a [u8], HeaderError> {
        let end = self.pos.checked_add(n).filter(|&e| e <= self.buf.len());
        match end {
            Some(e) => {
                let s = &self.buf[self.pos..e];
                self.pos = e;
                Ok(s)
            }
            None => Err(HeaderError::OutOfBytes {
                offset: self.pos as u64,
                what,
            }),
        }
    }
    fn u32(&mut self, what: &'static str) -> Result<u32, HeaderError> {
        let b = self.take(4, what)?;
        Ok(u32::from_be_bytes([b[0], b[1], b[2], b[3]]))
    }
    fn u64(&mut self, what: &'static str) -> Result<u64, HeaderError> {
        let b = self.take(8, what)?;
        let mut a = [0u8; 8];
        a.copy_from_slice(b);
        Ok(u64::from_be_bytes(a))
    }
    /// A NON_NEG count or size: 4 bytes (CDF-1/2, at most 2³¹ − 1) or 8 bytes (CDF-5).
    fn non_neg(&mut self, what: &'static str) -> Result<u64, HeaderError> {
        let at = self.pos;
        let v = if self.wide {
            self.u64(what)?
        } else {
            u64::from(self.u32(what)?)
        };
        let limit = if self.wide {
            i64::MAX as u64
        } else {
            i32::MAX as u64
        };
        if v > limit {
            return Err(HeaderError::Bad(format!(
                "{what} at byte {at} is {v}, beyond the format's largest count {limit}"
            )));
        }
        Ok(v)
    }
    fn offset(&mut self, what: &'static str) -> Result<u64, HeaderError> {
        if self.wide_offsets {
            self.u64(what)
        } else {
            Ok(u64::from(self.u32(what)?))
        }
    }
    fn remaining(&self) -> usize {
        self.buf.len() - self.pos
    }
    fn skip_padding(&mut self, n: u64, what: &'static str) -> Result<(), HeaderError> {
        let pad = (4 - n % 4) % 4;
        self.take(pad as usize, what).map(|_| ())
    }
    fn name(&mut self, what: &'static str) -> Result<String, HeaderError> {
        let at = self.pos;
        let n = self.non_neg(what)?;
        let n_usize = usize::try_from(n).ok().filter(|&n| n <= self.remaining());
        let Some(n_usize) = n_usize else {
            return Err(HeaderError::OutOfBytes {
                offset: at as u64,
                what,
            });
        };
        let bytes = self.take(n_usize, what)?;
        let name = String::from_utf8(bytes.to_vec()).map_err(|_| {
            HeaderError::Bad(format!(
                "{what} at byte {at} is not UTF-8 text: {:?}",
                String::from_utf8_lossy(bytes)
            ))
        })?;
        if name.is_empty() {
            return Err(HeaderError::Bad(format!("{what} at byte {at} is empty")));
        }
        self.skip_padding(n, what)?;
        Ok(name)
    }
    /// A list header: `(count)` after the expected tag, or 0 when ABSENT.
    fn list(&mut self, tag: u32, what: &'static str) -> Result<u64, HeaderError> {
        let at = self.pos;
        let t = self.u32(what)?;
        let n = self.non_neg(what)?;
        if t == 0 && n == 0 {
            return Ok(0);
        }
        if t != tag {
            return Err(HeaderError::Bad(format!(
                "{what} at byte {at}: tag {t:#x}, expected {tag:#x} or an absent list (0, 0)"
            )));
        }
        Ok(n)
    }
}

/// The format announced by the first four bytes, or a message saying what they are instead.
pub(crate) fn classic_format(magic: &[u8]) -> Result<Format, String> {
    if magic.len() < 4 || &magic[..3] != b"CDF" {
        return Err(format!(
            "not a NetCDF file: it starts with {:?}, not `CDF` (classic formats) or the HDF5 \
             signature (NetCDF-4)",
            String::from_utf8_lossy(&magic[..magic.len().min(8)])
        ));
    }
    match magic[3] {
        1 => Ok(Format::Classic),
        2 => Ok(Format::Offset64),
        5 => Ok(Format::Data64),
        v => Err(format!(
            "NetCDF classic header: version byte {v} after `CDF`, expected 1 (classic), 2 (64-bit \
             offset) or 5 (64-bit data)"
        )),
    }
}

/// Parses the header at the start of `buf`; `file_len` is the whole file's length (for a
/// streaming record count).
pub(crate) fn parse_header(buf: &[u8], file_len: u64) -> Result<Header, HeaderError> {
    let format = classic_format(buf).map_err(HeaderError::Bad)?;
    let wide = format == Format::Data64;
    let mut c = Cursor {
        buf,
        pos: 4,
        wide,
        wide_offsets: format != Format::Classic,
    };
    let raw_numrecs = if wide {
        c.u64("the record count")?
    } else {
        u64::from(c.u32("the record count")?)
    };
    let streaming = if wide {
        raw_numrecs == u64::MAX
    } else {
        raw_numrecs == u64::from(u32::MAX)
    };
    let limit = if wide {
        i64::MAX as u64
    } else {
        i32::MAX as u64
    };
    if !streaming && raw_numrecs > limit {
        return Err(HeaderError::Bad(format!(
            "the record count at byte 4 is {raw_numrecs}, beyond the format's largest {limit}"
        )));
    }

    // Dimensions.
    let n_dims = c.list(NC_DIMENSION, "the dimension list")?;
    let mut dims = Vec::new();
    for _ in 0..n_dims {
        let name = c.name("a dimension name")?;
        let at = c.pos;
        let len = c.non_neg("a dimension length")?;
        let unlimited = len == 0;
        if unlimited && dims.iter().any(|d: &Dimension| d.unlimited) {
            return Err(HeaderError::Bad(format!(
                "dimension `{name}` (byte {at}) is a second unlimited dimension; the classic \
                 formats allow one"
            )));
        }
        dims.push(Dimension {
            name,
            len,
            unlimited,
        });
    }

    let attributes = parse_attrs(&mut c, format, "the global attribute list")?;

    // Variables.
    let n_vars = c.list(NC_VARIABLE, "the variable list")?;
    let mut variables = Vec::new();
    let mut raw_places = Vec::new();
    for _ in 0..n_vars {
        let name = c.name("a variable name")?;
        let ndims = c.non_neg("a variable's number of dimensions")?;
        let mut var_dims = Vec::new();
        for k in 0..ndims {
            let at = c.pos;
            let id = c.non_neg("a variable's dimension id")?;
            let idx = usize::try_from(id).ok().filter(|&i| i < dims.len());
            let Some(idx) = idx else {
                return Err(HeaderError::Bad(format!(
                    "variable `{name}`: dimension id {id} (byte {at}) names no dimension; the \
                     file has {}",
                    dims.len()
                )));
            };
            if dims[idx].unlimited && k != 0 {
                return Err(HeaderError::Bad(format!(
                    "variable `{name}`: the unlimited dimension `{}` is not its first",
                    dims[idx].name
                )));
            }
            var_dims.push(idx);
        }
        let attrs = parse_attrs(&mut c, format, "a variable's attribute list")?;
        let at = c.pos;
        let code = c.u32("a variable's type")?;
        let nc_type = type_of(code, format).map_err(|e| {
            HeaderError::Bad(format!(
                "variable `{name}`: type code {code} (byte {at}): {e}"
            ))
        })?;
        // vsize: not used (sizes come from the dimensions); 2³² − 1 is legal for a large last
        // variable in CDF-2, so it is skipped unchecked.
        if wide {
            c.u64("a variable's size")?;
        } else {
            c.u32("a variable's size")?;
        }
        let begin = c.offset("a variable's data offset")?;
        raw_places.push(begin);
        variables.push(Variable {
            name,
            dims: var_dims,
            nc_type,
            attributes: attrs,
        });
    }

    // Sizes from the dimensions (the header's vsize is not trusted: it saturates for large
    // variables).
    let mut places = Vec::with_capacity(variables.len());
    for (v, &begin) in variables.iter().zip(&raw_places) {
        let record = v.dims.first().is_some_and(|&d| dims[d].unlimited);
        let mut n: u64 = 1;
        for &d in v.dims.iter().skip(usize::from(record)) {
            n = n.checked_mul(dims[d].len).ok_or_else(|| {
                HeaderError::Bad(format!("variable `{}`: its size overflows", v.name))
            })?;
        }
        let bytes = n.checked_mul(v.nc_type.size()).ok_or_else(|| {
            HeaderError::Bad(format!("variable `{}`: its size overflows", v.name))
        })?;
        places.push(VarPlace {
            begin,
            bytes,
            record,
        });
    }
    let record_vars: Vec<&VarPlace> = places.iter().filter(|p| p.record).collect();
    let recsize = if record_vars.len() == 1 {
        record_vars[0].bytes
    } else {
        let mut s: u64 = 0;
        for p in &record_vars {
            s = s
                .checked_add(pad4(p.bytes))
                .ok_or_else(|| HeaderError::Bad("the record size overflows".into()))?;
        }
        s
    };
    let numrecs = if streaming {
        // Streaming: the record count is what the file holds.
        let first = record_vars.iter().map(|p| p.begin).min();
        match first {
            Some(b) if recsize > 0 => file_len.saturating_sub(b) / recsize,
            _ => 0,
        }
    } else {
        raw_numrecs
    };
    for d in dims.iter_mut().filter(|d| d.unlimited) {
        d.len = numrecs;
    }
    Ok(Header {
        format,
        dims,
        attributes,
        variables,
        places,
        recsize,
        numrecs,
    })
}

fn pad4(n: u64) -> u64 {
    n.div_ceil(4).saturating_mul(4)
}

fn type_of(code: u32, format: Format) -> Result<NcType, String> {
    let t = NcType::from_code(code).ok_or_else(|| {
        "no such type; the classic formats know codes 1 (byte) to 6 (double), and 7 to 11 in \
         CDF-5"
            .to_string()
    })?;
    if code > 6 && format != Format::Data64 {
        return Err(format!(
            "type {} exists only in the 64-bit data format (CDF-5)",
            t.name()
        ));
    }
    Ok(t)
}

fn parse_attrs(
    c: &mut Cursor<'_>,
    format: Format,
    what: &'static str,
) -> Result<Vec<Attribute>, HeaderError> {
    let n = c.list(NC_ATTRIBUTE, what)?;
    let mut out = Vec::new();
    for _ in 0..n {
        let name = c.name("an attribute name")?;
        let at = c.pos;
        let code = c.u32("an attribute's type")?;
        let t = type_of(code, format).map_err(|e| {
            HeaderError::Bad(format!(
                "attribute `{name}`: type code {code} (byte {at}): {e}"
            ))
        })?;
        let vat = c.pos;
        let count = c.non_neg("an attribute's number of values")?;
        let bytes = count
            .checked_mul(t.size())
            .and_then(|b| usize::try_from(b).ok());
        let bytes = bytes
            .filter(|&b| b <= c.remaining())
            .ok_or(HeaderError::OutOfBytes {
                offset: vat as u64,
                what: "an attribute's values",
            })?;
        let raw = c.take(bytes, "an attribute's values")?;
        c.skip_padding(bytes as u64, "an attribute's padding")?;
        out.push(Attribute {
            name,
            value: decode_attr(t, raw),
        });
    }
    Ok(out)
}

/// Big-endian values of type `t` as an attribute value (text with trailing NULs removed).
fn decode_attr(t: NcType, raw: &[u8]) -> AttrValue {
    fn chunks<const N: usize>(raw: &[u8]) -> impl Iterator<Item = [u8; N]> + '_ {
        raw.chunks_exact(N).map(|c| {
            let mut a = [0u8; N];
            a.copy_from_slice(c);
            a
        })
    }
    match t {
        NcType::Char | NcType::Other => {
            let end = raw.iter().rposition(|&b| b != 0).map_or(0, |p| p + 1);
            AttrValue::Text(String::from_utf8_lossy(&raw[..end]).into_owned())
        }
        NcType::Byte => AttrValue::Byte(raw.iter().map(|&b| b as i8).collect()),
        NcType::UByte => AttrValue::UByte(raw.to_vec()),
        NcType::Short => AttrValue::Short(chunks::<2>(raw).map(i16::from_be_bytes).collect()),
        NcType::UShort => AttrValue::UShort(chunks::<2>(raw).map(u16::from_be_bytes).collect()),
        NcType::Int => AttrValue::Int(chunks::<4>(raw).map(i32::from_be_bytes).collect()),
        NcType::UInt => AttrValue::UInt(chunks::<4>(raw).map(u32::from_be_bytes).collect()),
        NcType::Float => AttrValue::Float(chunks::<4>(raw).map(f32::from_be_bytes).collect()),
        NcType::Double => AttrValue::Double(chunks::<8>(raw).map(f64::from_be_bytes).collect()),
        NcType::Int64 => AttrValue::Int64(chunks::<8>(raw).map(i64::from_be_bytes).collect()),
        NcType::UInt64 => AttrValue::UInt64(chunks::<8>(raw).map(u64::from_be_bytes).collect()),
    }
}

/// Big-endian values of numeric type `t` as f64 (64-bit integers beyond 2⁵³ are rounded).
pub(crate) fn decode_numbers(t: NcType, raw: &[u8], out: &mut Vec<f64>) {
    fn each<const N: usize>(raw: &[u8], out: &mut Vec<f64>, f: impl Fn([u8; N]) -> f64) {
        out.extend(raw.chunks_exact(N).map(|c| {
            let mut a = [0u8; N];
            a.copy_from_slice(c);
            f(a)
        }));
    }
    match t {
        NcType::Byte => out.extend(raw.iter().map(|&b| f64::from(b as i8))),
        NcType::UByte => out.extend(raw.iter().map(|&b| f64::from(b))),
        NcType::Short => each::<2>(raw, out, |a| f64::from(i16::from_be_bytes(a))),
        NcType::UShort => each::<2>(raw, out, |a| f64::from(u16::from_be_bytes(a))),
        NcType::Int => each::<4>(raw, out, |a| f64::from(i32::from_be_bytes(a))),
        NcType::UInt => each::<4>(raw, out, |a| f64::from(u32::from_be_bytes(a))),
        NcType::Float => each::<4>(raw, out, |a| f64::from(f32::from_be_bytes(a))),
        NcType::Double => each::<8>(raw, out, f64::from_be_bytes),
        NcType::Int64 => each::<8>(raw, out, |a| i64::from_be_bytes(a) as f64),
        NcType::UInt64 => each::<8>(raw, out, |a| u64::from_be_bytes(a) as f64),
        NcType::Char | NcType::Other => {}
    }
}
