//! Opening a NetCDF file of any of the four formats and reading its variables.
//!
//! The format is told by the first bytes: `CDF` and a version byte (1, 2 or 5) for the classic
//! formats, the HDF5 signature `\x89HDF\r\n\x1a\n` for NetCDF-4. Values come back as f64 in the
//! stored units, row-major (C order: the last dimension varies fastest), with no unpacking: the
//! caller applies `scale_factor`, `add_offset` and fill values (see [`crate::dem`]).

use crate::classic::{self, Header, HeaderError, VarPlace};
use crate::model::{Attribute, Dimension, Format, Variable, find_attr};
use crate::nc4::{self, Nc4};
use gravgrad_core::limits::{MAX_GRID_CELLS, SMALL_FILE_ALLOWANCE, decoded_bound, decoded_fits};
use std::fs::File;
use std::io::{Read, Seek, SeekFrom};
use std::path::{Path, PathBuf};
use thiserror::Error;

/// The HDF5 format signature, at the start of a NetCDF-4 file.
const HDF5_SIGNATURE: [u8; 8] = [0x89, b'H', b'D', b'F', b'\r', b'\n', 0x1a, b'\n'];

/// Largest number of values read from one variable: [`MAX_GRID_CELLS`] (512 MiB as f64).
pub const MAX_VALUES: u64 = MAX_GRID_CELLS;

/// Decoded bytes a NetCDF-4 variable may give per byte of the file: deflate's largest ratio
/// (about 1032, RFC 1951: a 258-byte match in about 2 bits), the only compression NetCDF-4
/// writers use by default. A classic file stores its values uncompressed: they must lie inside it.
pub const MAX_NC4_EXPANSION: u64 = 1032;

/// Values of the whole-row bands in which a block of a NetCDF-4 variable is decoded: 1 Mi (8 MiB
/// as f64, beside the stored values they are converted from), so a band costs little beside the
/// block whatever the variable's width; a row wider than this is a band of its own.
pub const BAND_VALUES: u64 = 1 << 20;

/// Widest row of a NetCDF-4 variable read by block: 4 Mi values (32 MiB as f64).
pub const MAX_NC4_ROW_VALUES: u64 = 1 << 22;

/// Most values decoded for one block of a NetCDF-4 variable: the block's rows at the variable's
/// full width (`hdf5-pure` reads whole rows), 2²⁹ (one band of [`BAND_VALUES`] at a time, so this
/// bounds the time, not the memory).
pub const MAX_NC4_BLOCK_ROW_VALUES: u64 = 1 << 29;

/// Why a NetCDF file or one of its variables could not be read: the file and what was expected.
#[derive(Clone, Debug, PartialEq, Eq, Error)]
#[error("{}: {message}", .path.display())]
pub struct ReadError {
    pub path: PathBuf,
    /// What was wrong, without the file name.
    pub message: String,
}

enum Backend {
    Classic {
        places: Vec<VarPlace>,
        recsize: u64,
        numrecs: u64,
        file_len: u64,
    },
    /// The open file and its length in bytes.
    Nc4(Box<hdf5_pure::File>, u64),
}

/// An open NetCDF file: its dimensions, global attributes and variables, and the means to read
/// any numeric variable's values.
pub struct NcFile {
    path: PathBuf,
    format: Format,
    dims: Vec<Dimension>,
    attributes: Vec<Attribute>,
    variables: Vec<Variable>,
    backend: Backend,
}

impl std::fmt::Debug for NcFile {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("NcFile")
            .field("path", &self.path)
            .field("format", &self.format)
            .field("dims", &self.dims)
            .field("variables", &self.variables.len())
            .finish()
    }
}

impl NcFile {
    /// Opens `path` (classic CDF-1/2/5 or NetCDF-4) and reads its description; no values are
    /// read yet.
    pub fn open(path: &Path) -> Result<Self, ReadError> {
        let err = |message: String| ReadError {
            path: path.to_path_buf(),
            message,
        };
        let mut f = File::open(path).map_err(|e| err(format!("cannot open: {e}")))?;
        let meta = f
            .metadata()
            .map_err(|e| err(format!("cannot read the file's size: {e}")))?;
        if !meta.is_file() {
            return Err(err(
                "not a regular file (a device, pipe or folder), expected a regular file whose \
                 size is known before it is read"
                    .into(),
            ));
        }
        let file_len = meta.len();
        let mut magic = Vec::with_capacity(8);
        (&mut f)
            .take(8)
            .read_to_end(&mut magic)
            .map_err(|e| err(format!("cannot read: {e}")))?;
        if magic == HDF5_SIGNATURE {
            let Nc4 {
                file,
                dims,
                attributes,
                variables,
            } = nc4::open(f).map_err(err)?;
            return Ok(Self {
                path: path.to_path_buf(),
                format: Format::Netcdf4,
                dims,
                attributes,
                variables,
                backend: Backend::Nc4(Box::new(file), file_len),
            });
        }
        if magic.len() < 4 {
            return Err(err(format!(
                "not a NetCDF file: only {} bytes long",
                magic.len()
            )));
        }
        classic::classic_format(&magic).map_err(err)?;
        let header = read_header(&mut f, file_len).map_err(err)?;
        let Header {
            format,
            dims,
            attributes,
            variables,
            places,
            recsize,
            numrecs,
        } = header;
        Ok(Self {
            path: path.to_path_buf(),
            format,
            dims,
            attributes,
            variables,
            backend: Backend::Classic {
                places,
                recsize,
                numrecs,
                file_len,
            },
        })
    }

    /// The file's path, as given to [`NcFile::open`].
    pub fn path(&self) -> &Path {
        &self.path
    }
    /// The file's physical format.
    pub fn format(&self) -> Format {
        self.format
    }
    /// The dimensions, in the file's order (their index is what [`Variable::dims`] holds).
    pub fn dimensions(&self) -> &[Dimension] {
        &self.dims
    }
    /// The global attributes.
    pub fn attributes(&self) -> &[Attribute] {
        &self.attributes
    }
    /// The global attribute called `name`.
    pub fn attribute(&self, name: &str) -> Option<&crate::AttrValue> {
        find_attr(&self.attributes, name)
    }
    /// The variables, in the file's order (by name for NetCDF-4).
    pub fn variables(&self) -> &[Variable] {
        &self.variables
    }
    /// The variable called `name`.
    pub fn variable(&self, name: &str) -> Option<&Variable> {
        self.variables.iter().find(|v| v.name == name)
    }
    /// The lengths of a variable's dimensions, slowest-varying first.
    pub fn shape(&self, var: &Variable) -> Vec<u64> {
        var.dims.iter().map(|&d| self.dims[d].len).collect()
    }

    fn err(&self, message: String) -> ReadError {
        ReadError {
            path: self.path.clone(),
            message,
        }
    }

    /// The numeric variable `name` and its index; errors name it and say what was expected.
    fn numeric_variable(&self, name: &str) -> Result<(usize, &Variable), ReadError> {
        let Some(index) = self.variables.iter().position(|v| v.name == name) else {
            return Err(self.err(format!("no variable `{name}`")));
        };
        let var = &self.variables[index];
        if !var.nc_type.is_numeric() {
            return Err(self.err(format!(
                "variable `{name}` holds {} values, expected numbers",
                var.nc_type.name()
            )));
        }
        Ok((index, var))
    }

    /// Every value of the numeric variable `name` as f64, row-major, as stored (no scale, offset
    /// or fill handling; 64-bit integers beyond 2⁵³ are rounded). Errors name the variable and
    /// say what was expected: a numeric type, at most [`MAX_VALUES`] values, bytes the file holds.
    pub fn read_f64(&self, name: &str) -> Result<Vec<f64>, ReadError> {
        let (index, var) = self.numeric_variable(name)?;
        let mut count: u64 = 1;
        for n in self.shape(var) {
            count = count.saturating_mul(n);
        }
        if count > MAX_VALUES {
            return Err(self.err(format!(
                "variable `{name}` holds {count} values, more than the {MAX_VALUES} read at once"
            )));
        }
        match &self.backend {
            Backend::Classic {
                places,
                recsize,
                numrecs,
                file_len,
            } => self.read_classic(
                var,
                &places[index],
                (*recsize, *numrecs, *file_len),
                count as usize,
            ),
            Backend::Nc4(file, file_len) => {
                let ds = file
                    .dataset(name)
                    .map_err(|e| self.err(format!("cannot open variable `{name}`: {e}")))?;
                self.check_nc4_sizes(var, &ds, count, *file_len)?;
                let v = ds
                    .read_f64()
                    .map_err(|e| self.err(format!("cannot read variable `{name}`: {e}")))?;
                if v.len() as u64 != count {
                    return Err(self.err(format!(
                        "variable `{name}`: {} values read, its shape holds {count}",
                        v.len()
                    )));
                }
                Ok(v)
            }
        }
    }

    /// The block `start[0]..start[0] + count[0]` × `start[1]..start[1] + count[1]` of the 2-D
    /// numeric variable `name` as f64, row-major within the block (the second dimension varying
    /// fastest), as stored (no scale, offset or fill handling).
    ///
    /// Only the block is decoded and held: a classic file's values are read row by row from
    /// their place in the file; a NetCDF-4 variable is decoded a band of whole rows at a time
    /// (the chunks meeting the block's rows), of which the block's columns are kept. The limit
    /// [`MAX_VALUES`] applies to the block, not to the variable; the variable's declared size
    /// must still be one the file can hold. Errors name the variable and say what was expected.
    pub fn read_f64_block(
        &self,
        name: &str,
        start: [u64; 2],
        count: [u64; 2],
    ) -> Result<Vec<f64>, ReadError> {
        let (index, var) = self.numeric_variable(name)?;
        let shape = self.shape(var);
        if shape.len() != 2 {
            return Err(self.err(format!(
                "variable `{name}` has {} dimensions, a block is read from 2",
                shape.len()
            )));
        }
        for k in 0..2 {
            let end = start[k].checked_add(count[k]);
            if count[k] == 0 || end.is_none_or(|e| e > shape[k]) {
                return Err(self.err(format!(
                    "variable `{name}`: the block's {} {} to {} is not inside its {} along \
                     dimension `{}`",
                    count[k],
                    start[k],
                    start[k].saturating_add(count[k]),
                    shape[k],
                    self.dims[var.dims[k]].name
                )));
            }
        }
        let cells = count[0].saturating_mul(count[1]);
        if cells > MAX_VALUES {
            return Err(self.err(format!(
                "variable `{name}`: the block of {} × {} = {cells} values is more than the \
                 {MAX_VALUES} read at once",
                count[0], count[1]
            )));
        }
        match &self.backend {
            Backend::Classic {
                places,
                recsize,
                file_len,
                ..
            } => self.read_classic_block(var, &places[index], (*recsize, *file_len), start, count),
            Backend::Nc4(file, file_len) => {
                let ds = file
                    .dataset(name)
                    .map_err(|e| self.err(format!("cannot open variable `{name}`: {e}")))?;
                let shape = [shape[0], shape[1]];
                self.check_nc4_block(var, &ds, shape, count, *file_len)?;
                self.read_nc4_block(var, &ds, shape, start, count)
            }
        }
    }

    /// Refuses, before anything of a NetCDF-4 variable of `shape` is decoded, a block whose rows
    /// (`count[0]` from `start[0]`, each of the variable's full width `shape[1]`) cannot be read
    /// within the stated limits, or a variable whose storage the file of `file_len` bytes cannot
    /// hold: a row wider than [`MAX_NC4_ROW_VALUES`], rows of more than [`MAX_NC4_BLOCK_ROW_VALUES`]
    /// values in all, chunks as [`NcFile::check_nc4_chunks`] says, and contiguous values running
    /// past the file. The variable as a whole is not held to the deflate bound: chunks it never
    /// wrote read as its fill value and cost nothing until a block meets them.
    fn check_nc4_block(
        &self,
        var: &Variable,
        ds: &hdf5_pure::Dataset,
        shape: [u64; 2],
        count: [u64; 2],
        file_len: u64,
    ) -> Result<(), ReadError> {
        let name = &var.name;
        let width = shape[1];
        if width > MAX_NC4_ROW_VALUES {
            return Err(self.err(format!(
                "variable `{name}` has rows of {width} values; a NetCDF-4 variable is read in \
                 whole rows of at most {MAX_NC4_ROW_VALUES} values"
            )));
        }
        let decoded = count[0].saturating_mul(width);
        if decoded > MAX_NC4_BLOCK_ROW_VALUES {
            return Err(self.err(format!(
                "variable `{name}`: the block's {} rows of {width} values ({decoded} values; a \
                 NetCDF-4 variable is decoded in whole rows) are more than the \
                 {MAX_NC4_BLOCK_ROW_VALUES} decoded for one block",
                count[0]
            )));
        }
        self.check_nc4_chunks(var, ds, file_len)?;
        if let Ok(hdf5_pure::Layout::Contiguous { size, .. }) = ds.layout() {
            let values = shape[0].saturating_mul(width);
            let bytes = values.saturating_mul(var.nc_type.size());
            if bytes > file_len || size > file_len {
                return Err(self.err(format!(
                    "variable `{name}` declares {values} values stored uncompressed ({} bytes), \
                     more than the file's {file_len} bytes",
                    bytes.max(size)
                )));
            }
        }
        Ok(())
    }

    /// The block of a NetCDF-4 variable checked by [`NcFile::check_nc4_block`]: decoded a band of
    /// whole rows at a time (at most [`BAND_VALUES`] values or one row, a whole number of chunk
    /// rows when that fits; only the chunks meeting the band's rows are decoded, and those kept between
    /// bands up to [`crate::nc4::CHUNK_CACHE_BYTES`]), of which the block's columns are kept.
    fn read_nc4_block(
        &self,
        var: &Variable,
        ds: &hdf5_pure::Dataset,
        shape: [u64; 2],
        start: [u64; 2],
        count: [u64; 2],
    ) -> Result<Vec<f64>, ReadError> {
        let name = &var.name;
        let width = shape[1].max(1);
        let mut band = (BAND_VALUES / width).max(1);
        if let Ok(Some(chunk)) = ds.chunk_shape()
            && let Some(&rows) = chunk.first()
            && rows > 0
            && band > rows
        {
            band -= band % rows;
        }
        let (c0, nc) = (start[1] as usize, count[1] as usize);
        let mut out = Vec::new();
        out.try_reserve_exact((count[0] * count[1]) as usize)
            .map_err(|_| self.err(format!("no memory for a block of `{name}`")))?;
        let mut row = start[0];
        let end = start[0] + count[0];
        while row < end {
            // Bands start on a multiple of their height, so they meet whole chunk rows.
            let n = (band - row % band).min(end - row);
            let v = ds.read_f64_rows(row, n).map_err(|e| {
                self.err(format!(
                    "cannot read rows {row} to {} of variable `{name}`: {e}",
                    row + n
                ))
            })?;
            let width = width as usize;
            if v.len() != n as usize * width {
                return Err(self.err(format!(
                    "variable `{name}`: {} values read for {n} rows of {width}",
                    v.len()
                )));
            }
            for r in v.chunks_exact(width) {
                out.extend_from_slice(&r[c0..c0 + nc]);
            }
            row += n;
        }
        Ok(out)
    }

    /// Refuses a NetCDF-4 variable of `count` values, or chunks of it, that the file of
    /// `file_len` bytes cannot hold at deflate's largest expansion ([`MAX_NC4_EXPANSION`]).
    fn check_nc4_sizes(
        &self,
        var: &Variable,
        ds: &hdf5_pure::Dataset,
        count: u64,
        file_len: u64,
    ) -> Result<(), ReadError> {
        let name = &var.name;
        let stored = count.saturating_mul(var.nc_type.size());
        if !decoded_fits(stored, file_len, MAX_NC4_EXPANSION) {
            return Err(self.err(format!(
                "variable `{name}` declares {count} values ({stored} bytes), more than a \
                 file of {file_len} bytes can hold (at most {} bytes, {MAX_NC4_EXPANSION} \
                 times its size plus {SMALL_FILE_ALLOWANCE})",
                decoded_bound(file_len, MAX_NC4_EXPANSION)
            )));
        }
        self.check_nc4_chunks(var, ds, file_len)
    }

    /// Refuses a NetCDF-4 variable whose chunks hold more than [`MAX_VALUES`] values, or more
    /// bytes than the file of `file_len` bytes can hold at deflate's largest expansion (each chunk
    /// read is decoded whole), or whose chunk index lists a chunk outside the file or stored in
    /// more bytes than its values and an eighth (plus 1 KiB) for the filters' overhead. The index
    /// is walked by `hdf5-pure`, which reads no more of the file than each node declares and the
    /// file holds; it also refuses a chunk whose data decompresses to more, or other, than its
    /// declared size.
    fn check_nc4_chunks(
        &self,
        var: &Variable,
        ds: &hdf5_pure::Dataset,
        file_len: u64,
    ) -> Result<(), ReadError> {
        let name = &var.name;
        let Ok(Some(chunk)) = ds.chunk_shape() else {
            return Ok(());
        };
        let cells = chunk.iter().fold(1u64, |a, &n| a.saturating_mul(n));
        let bytes = cells.saturating_mul(var.nc_type.size());
        if cells > MAX_VALUES || !decoded_fits(bytes, file_len, MAX_NC4_EXPANSION) {
            return Err(self.err(format!(
                "variable `{name}` declares chunks of {cells} values, more than a \
                 file of {file_len} bytes can hold (limit {MAX_VALUES} values)"
            )));
        }
        // Every chunk the index lists must lie inside the file and be stored in no more bytes
        // than its values plus the filters' overhead: `hdf5-pure` sizes its read buffers from
        // these entries (and zero-fills them) before it reads.
        let stored_max = bytes.saturating_add(bytes / 8).saturating_add(1024);
        let chunks = ds.chunks().map_err(|e| {
            self.err(format!(
                "variable `{name}`: cannot list its chunks (expected a chunk index of a \
                 version-1 B-tree, a fixed or an extensible array): {e}"
            ))
        })?;
        for c in &chunks {
            let end = c.address.checked_add(c.storage_size);
            if end.is_none_or(|e| e > file_len) || c.storage_size > stored_max {
                return Err(self.err(format!(
                    "variable `{name}`: its chunk at {:?} declares {} bytes at byte {}, \
                     expected at most {stored_max} bytes inside the file's {file_len}",
                    c.offset, c.storage_size, c.address
                )));
            }
        }
        Ok(())
    }

    /// The block of a classic file's 2-D variable, read row by row from its place in the file.
    fn read_classic_block(
        &self,
        var: &Variable,
        place: &VarPlace,
        (recsize, file_len): (u64, u64),
        start: [u64; 2],
        count: [u64; 2],
    ) -> Result<Vec<f64>, ReadError> {
        use std::os::unix::fs::FileExt;
        let name = &var.name;
        let size = var.nc_type.size();
        let n1 = self.dims[var.dims[1]].len;
        // Bytes from one row of the first dimension to the next.
        let stride = if place.record {
            recsize
        } else {
            n1.saturating_mul(size)
        };
        let row_bytes = count[1] * size;
        let last = (start[0] + count[0] - 1)
            .checked_mul(stride)
            .and_then(|o| o.checked_add(place.begin))
            .and_then(|o| o.checked_add((start[1] + count[1]) * size));
        match last {
            Some(end) if end <= file_len => {}
            _ => {
                return Err(self.err(format!(
                    "truncated: variable `{name}`: its rows {} to {} run past the end of the \
                     file ({file_len} bytes)",
                    start[0],
                    start[0] + count[0]
                )));
            }
        }
        let f = File::open(&self.path).map_err(|e| self.err(format!("cannot open: {e}")))?;
        let mut out = Vec::new();
        out.try_reserve_exact((count[0] * count[1]) as usize)
            .map_err(|_| self.err(format!("no memory for a block of `{name}`")))?;
        let mut buf = vec![0u8; row_bytes as usize];
        for i0 in start[0]..start[0] + count[0] {
            // Inside the file: checked above for the last row.
            let at = place.begin + i0 * stride + start[1] * size;
            f.read_exact_at(&mut buf, at).map_err(|e| {
                self.err(format!(
                    "cannot read row {i0} of variable `{name}` at byte {at}: {e}"
                ))
            })?;
            classic::decode_numbers(var.nc_type, &buf, &mut out);
        }
        Ok(out)
    }

    fn read_classic(
        &self,
        var: &Variable,
        place: &VarPlace,
        (recsize, numrecs, file_len): (u64, u64, u64),
        count: usize,
    ) -> Result<Vec<f64>, ReadError> {
        let name = &var.name;
        let (records, stride) = if place.record {
            (numrecs, recsize)
        } else {
            (1, 0)
        };
        if records == 0 || place.bytes == 0 {
            return Ok(Vec::new());
        }
        // The span from the first value to the end of the last record's values.
        let span = (records - 1)
            .checked_mul(stride)
            .and_then(|s| s.checked_add(place.bytes));
        let end = span.and_then(|s| s.checked_add(place.begin));
        let (Some(span), Some(end)) = (span, end) else {
            return Err(self.err(format!("variable `{name}`: its extent overflows")));
        };
        if end > file_len {
            return Err(self.err(format!(
                "truncated: variable `{name}` needs bytes {} to {end}, the file has {file_len}",
                place.begin
            )));
        }
        let span_len = usize::try_from(span)
            .map_err(|_| self.err(format!("variable `{name}` is too large to read")))?;
        let mut f = File::open(&self.path).map_err(|e| self.err(format!("cannot open: {e}")))?;
        f.seek(SeekFrom::Start(place.begin))
            .map_err(|e| self.err(format!("cannot seek to variable `{name}`: {e}")))?;
        let mut buf = Vec::new();
        buf.try_reserve_exact(span_len)
            .map_err(|_| self.err(format!("no memory for variable `{name}`")))?;
        (&mut f)
            .take(span)
            .read_to_end(&mut buf)
            .map_err(|e| self.err(format!("cannot read variable `{name}`: {e}")))?;
        if buf.len() != span_len {
            return Err(self.err(format!(
                "truncated: variable `{name}` needs {span} bytes from byte {}, the file holds {}",
                place.begin,
                buf.len()
            )));
        }
        // Both fit: one record's bytes and the record starts lie inside the span just read.
        let per = place.bytes as usize;
        let stride = stride as usize;
        let mut out = Vec::with_capacity(count);
        for r in 0..records as usize {
            let start = r * stride;
            classic::decode_numbers(var.nc_type, &buf[start..start + per], &mut out);
        }
        Ok(out)
    }
}

/// Reads and parses the classic header, reading more of the file while the parser runs out.
fn read_header(f: &mut File, file_len: u64) -> Result<Header, String> {
    let mut want: u64 = 1 << 16;
    loop {
        let n = want.min(file_len);
        f.seek(SeekFrom::Start(0))
            .map_err(|e| format!("cannot read: {e}"))?;
        let mut buf = Vec::new();
        f.take(n)
            .read_to_end(&mut buf)
            .map_err(|e| format!("cannot read: {e}"))?;
        match classic::parse_header(&buf, file_len) {
            Ok(h) => return Ok(h),
            Err(HeaderError::OutOfBytes { offset, what }) => {
                if n >= file_len {
                    return Err(format!(
                        "truncated NetCDF header: {what} at byte {offset} runs past the end of \
                         the file ({file_len} bytes)"
                    ));
                }
                want = want.saturating_mul(4);
            }
            Err(HeaderError::Bad(m)) => return Err(format!("malformed NetCDF header: {m}")),
        }
    }
}
