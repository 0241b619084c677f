//! A general writer of the NetCDF 64-bit offset format (CDF-2), the classic format every NetCDF
//! reader of the last twenty years opens (netCDF-C 3.6 and later, GDAL, GMT, scipy, xarray).
//!
//! Layout written (NetCDF Classic Format Specification): `CDF\x02`, a record count of 0 (no
//! unlimited dimension is written), the dimension list, the global attributes, the variable list
//! with each variable's attributes, type, size and 8-byte `begin` offset; then each variable's
//! values whole, big-endian, in the order the variables were added, each padded with zero bytes
//! to a multiple of 4. Variables are laid out row-major: the last dimension varies fastest.
//!
//! The same writer contents give the same bytes (nothing of the clock or the machine is
//! written). [`NcWriter::write`] goes through a temporary file in the destination folder
//! (`.<name>.<pid>.partial`), renamed onto the final name when complete.

use crate::model::{AttrValue, Attribute};
use std::fs::{self, OpenOptions};
use std::io::{BufWriter, Write};
use std::path::{Path, PathBuf};
use thiserror::Error;

/// Largest dimension length of the format (a signed 32-bit count).
const MAX_DIM_LEN: u64 = i32::MAX as u64;
/// Largest padded size of one variable in CDF-2 (`vsize` is 32-bit; 2³² − 1 marks larger).
const MAX_VAR_BYTES: u64 = (1 << 32) - 4;

/// The values of a variable, row-major (the last dimension varies fastest).
#[derive(Clone, Debug, PartialEq)]
pub enum VarData {
    /// `NC_FLOAT`.
    F32(Vec<f32>),
    /// `NC_DOUBLE`.
    F64(Vec<f64>),
    /// `NC_INT`.
    I32(Vec<i32>),
    /// `NC_SHORT`.
    I16(Vec<i16>),
    /// `NC_BYTE`.
    I8(Vec<i8>),
    /// `NC_CHAR`: one byte per character.
    Char(Vec<u8>),
}

impl VarData {
    fn len(&self) -> usize {
        match self {
            Self::F32(v) => v.len(),
            Self::F64(v) => v.len(),
            Self::I32(v) => v.len(),
            Self::I16(v) => v.len(),
            Self::I8(v) => v.len(),
            Self::Char(v) => v.len(),
        }
    }
    fn type_code(&self) -> u32 {
        match self {
            Self::I8(_) => 1,
            Self::Char(_) => 2,
            Self::I16(_) => 3,
            Self::I32(_) => 4,
            Self::F32(_) => 5,
            Self::F64(_) => 6,
        }
    }
    fn size(&self) -> u64 {
        match self {
            Self::I8(_) | Self::Char(_) => 1,
            Self::I16(_) => 2,
            Self::I32(_) | Self::F32(_) => 4,
            Self::F64(_) => 8,
        }
    }
    fn type_name(&self) -> &'static str {
        match self {
            Self::I8(_) => "byte",
            Self::Char(_) => "char",
            Self::I16(_) => "short",
            Self::I32(_) => "int",
            Self::F32(_) => "float",
            Self::F64(_) => "double",
        }
    }
    fn put(&self, out: &mut Vec<u8>) {
        match self {
            Self::F32(v) => v.iter().for_each(|x| out.extend(x.to_be_bytes())),
            Self::F64(v) => v.iter().for_each(|x| out.extend(x.to_be_bytes())),
            Self::I32(v) => v.iter().for_each(|x| out.extend(x.to_be_bytes())),
            Self::I16(v) => v.iter().for_each(|x| out.extend(x.to_be_bytes())),
            Self::I8(v) => v.iter().for_each(|x| out.extend(x.to_be_bytes())),
            Self::Char(v) => out.extend_from_slice(v),
        }
    }
}

/// A dimension added to an [`NcWriter`].
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct DimId(usize);

/// A variable added to an [`NcWriter`].
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct VarId(usize);

/// Why a NetCDF file could not be built or written.
#[derive(Debug, Error)]
pub enum WriteError {
    #[error(
        "{name:?} is not a NetCDF name here: it must start with a letter or `_` and hold only \
         ASCII letters, digits and `_.@+-`"
    )]
    BadName { name: String },
    #[error("{what} `{name}` is defined twice")]
    Duplicate { what: &'static str, name: String },
    #[error("dimension `{name}` has length {len}; a fixed dimension holds 1 to 2147483647")]
    DimLength { name: String, len: u64 },
    #[error("variable `{name}` holds {got} values, its dimensions make {expected}")]
    Shape {
        name: String,
        expected: u64,
        got: usize,
    },
    #[error(
        "`{name}` takes {bytes} bytes; the 64-bit offset format holds at most 4294967292 per \
         variable and 2147483647 values per attribute"
    )]
    TooLarge { name: String, bytes: u64 },
    #[error(
        "attribute `{name}` is of type {ty}, which the 64-bit offset format does not have (it \
         knows text, byte, short, int, float, double)"
    )]
    AttrType { name: String, ty: &'static str },
    #[error("variable `{var}`: _FillValue is of type {got}, the variable of type {want}")]
    FillType {
        var: String,
        got: &'static str,
        want: &'static str,
    },
    #[error("{}: the destination has no file name", .path.display())]
    NoFileName { path: PathBuf },
    #[error("{}: cannot create the temporary file {}: {source}", .path.display(), .tmp.display())]
    Create {
        path: PathBuf,
        tmp: PathBuf,
        source: std::io::Error,
    },
    #[error("{}: writing the temporary file {} failed: {source}", .path.display(), .tmp.display())]
    Write {
        path: PathBuf,
        tmp: PathBuf,
        source: std::io::Error,
    },
    #[error("{}: cannot rename {} to the final name: {source}", .path.display(), .tmp.display())]
    Rename {
        path: PathBuf,
        tmp: PathBuf,
        source: std::io::Error,
    },
}

struct WVar {
    name: String,
    dims: Vec<usize>,
    attrs: Vec<Attribute>,
    data: VarData,
}

/// A NetCDF file being built in memory: dimensions, global attributes, variables with their
/// attributes and values. Written in the 64-bit offset format by [`NcWriter::to_bytes`] and
/// [`NcWriter::write`].
#[derive(Default)]
pub struct NcWriter {
    dims: Vec<(String, u64)>,
    attrs: Vec<Attribute>,
    vars: Vec<WVar>,
}

/// NetCDF names as written here: ASCII, starting with a letter or `_`, then letters, digits and
/// `_.@+-` (a subset of what the format allows, safe for every reader).
fn check_name(name: &str) -> Result<(), WriteError> {
    let mut chars = name.chars();
    let first_ok = chars
        .next()
        .is_some_and(|c| c.is_ascii_alphabetic() || c == '_');
    let rest_ok = chars.all(|c| c.is_ascii_alphanumeric() || "_.@+-".contains(c));
    if first_ok && rest_ok {
        Ok(())
    } else {
        Err(WriteError::BadName {
            name: name.to_string(),
        })
    }
}

fn check_attr(name: &str, value: &AttrValue, existing: &[Attribute]) -> Result<(), WriteError> {
    check_name(name)?;
    if existing.iter().any(|a| a.name == name) {
        return Err(WriteError::Duplicate {
            what: "attribute",
            name: name.to_string(),
        });
    }
    if value.len() as u64 > MAX_DIM_LEN {
        return Err(WriteError::TooLarge {
            name: name.to_string(),
            bytes: value.len() as u64,
        });
    }
    match value {
        AttrValue::Text(_)
        | AttrValue::Byte(_)
        | AttrValue::Short(_)
        | AttrValue::Int(_)
        | AttrValue::Float(_)
        | AttrValue::Double(_) => Ok(()),
        other => Err(WriteError::AttrType {
            name: name.to_string(),
            ty: other.nc_type().name(),
        }),
    }
}

impl NcWriter {
    /// An empty file.
    pub fn new() -> Self {
        Self::default()
    }

    /// Adds a fixed dimension of `len` (1 to 2³¹ − 1) entries.
    pub fn add_dimension(&mut self, name: &str, len: usize) -> Result<DimId, WriteError> {
        check_name(name)?;
        if self.dims.iter().any(|d| d.0 == name) {
            return Err(WriteError::Duplicate {
                what: "dimension",
                name: name.to_string(),
            });
        }
        let len = len as u64;
        if len == 0 || len > MAX_DIM_LEN {
            return Err(WriteError::DimLength {
                name: name.to_string(),
                len,
            });
        }
        self.dims.push((name.to_string(), len));
        Ok(DimId(self.dims.len() - 1))
    }

    /// Adds a global attribute (text, or numbers of type byte, short, int, float or double).
    pub fn add_global(
        &mut self,
        name: &str,
        value: impl Into<AttrValue>,
    ) -> Result<(), WriteError> {
        let value = value.into();
        check_attr(name, &value, &self.attrs)?;
        self.attrs.push(Attribute {
            name: name.to_string(),
            value,
        });
        Ok(())
    }

    /// Adds a variable over `dims` (slowest-varying first; none for a scalar) holding `data`,
    /// row-major; the number of values must be the product of the dimension lengths.
    pub fn add_variable(
        &mut self,
        name: &str,
        dims: &[DimId],
        data: VarData,
    ) -> Result<VarId, WriteError> {
        check_name(name)?;
        if self.vars.iter().any(|v| v.name == name) {
            return Err(WriteError::Duplicate {
                what: "variable",
                name: name.to_string(),
            });
        }
        let mut expected: u64 = 1;
        for d in dims {
            // A DimId only comes from this writer's add_dimension; one from another writer
            // beyond our list is treated as length 0 and fails the shape check.
            let len = self.dims.get(d.0).map_or(0, |x| x.1);
            expected = expected.saturating_mul(len);
        }
        if data.len() as u64 != expected || dims.iter().any(|d| d.0 >= self.dims.len()) {
            return Err(WriteError::Shape {
                name: name.to_string(),
                expected,
                got: data.len(),
            });
        }
        let bytes = expected.saturating_mul(data.size());
        if pad4(bytes) > MAX_VAR_BYTES {
            return Err(WriteError::TooLarge {
                name: name.to_string(),
                bytes,
            });
        }
        self.vars.push(WVar {
            name: name.to_string(),
            dims: dims.iter().map(|d| d.0).collect(),
            attrs: Vec::new(),
            data,
        });
        Ok(VarId(self.vars.len() - 1))
    }

    /// Adds an attribute to variable `var`. A `_FillValue` must have the variable's type.
    pub fn add_attribute(
        &mut self,
        var: VarId,
        name: &str,
        value: impl Into<AttrValue>,
    ) -> Result<(), WriteError> {
        let value = value.into();
        let Some(v) = self.vars.get_mut(var.0) else {
            return Err(WriteError::BadName {
                name: format!("variable #{}", var.0),
            });
        };
        check_attr(name, &value, &v.attrs)?;
        if name == "_FillValue" && value.nc_type().code() != v.data.type_code() {
            return Err(WriteError::FillType {
                var: v.name.clone(),
                got: value.nc_type().name(),
                want: v.data.type_name(),
            });
        }
        v.attrs.push(Attribute {
            name: name.to_string(),
            value,
        });
        Ok(())
    }

    /// The whole file in the 64-bit offset format (CDF-2).
    pub fn to_bytes(&self) -> Vec<u8> {
        // The header's length does not depend on the offsets (8 bytes each), so encode it once
        // to learn where the data starts, then again with the real offsets.
        let probe = self.header(&vec![0; self.vars.len()]);
        let mut begins = Vec::with_capacity(self.vars.len());
        let mut at = probe.len() as u64;
        for v in &self.vars {
            begins.push(at);
            at += pad4(v.data.len() as u64 * v.data.size());
        }
        let mut out = self.header(&begins);
        out.reserve(usize::try_from(at).unwrap_or(0).saturating_sub(out.len()));
        for v in &self.vars {
            let start = out.len();
            v.data.put(&mut out);
            let n = (out.len() - start) as u64;
            out.resize(out.len() + (pad4(n) - n) as usize, 0);
        }
        out
    }

    fn header(&self, begins: &[u64]) -> Vec<u8> {
        let mut h = Vec::new();
        h.extend_from_slice(b"CDF\x02");
        put_u32(&mut h, 0); // numrecs: no record dimension
        if self.dims.is_empty() {
            put_u32(&mut h, 0);
            put_u32(&mut h, 0);
        } else {
            put_u32(&mut h, 0x0A);
            put_u32(&mut h, self.dims.len() as u32);
            for (name, len) in &self.dims {
                put_name(&mut h, name);
                put_u32(&mut h, *len as u32);
            }
        }
        put_attrs(&mut h, &self.attrs);
        if self.vars.is_empty() {
            put_u32(&mut h, 0);
            put_u32(&mut h, 0);
        } else {
            put_u32(&mut h, 0x0B);
            put_u32(&mut h, self.vars.len() as u32);
            for (v, &begin) in self.vars.iter().zip(begins) {
                put_name(&mut h, &v.name);
                put_u32(&mut h, v.dims.len() as u32);
                for &d in &v.dims {
                    put_u32(&mut h, d as u32);
                }
                put_attrs(&mut h, &v.attrs);
                put_u32(&mut h, v.data.type_code());
                put_u32(&mut h, pad4(v.data.len() as u64 * v.data.size()) as u32);
                h.extend_from_slice(&begin.to_be_bytes());
            }
        }
        h
    }

    /// Writes the file to `path` through a temporary file in the same folder
    /// (`.<name>.<pid>.partial`), renamed onto `path` when complete; an existing file at `path`
    /// is replaced.
    pub fn write(&self, path: &Path) -> Result<(), WriteError> {
        let p = || path.to_path_buf();
        let name = path
            .file_name()
            .ok_or(WriteError::NoFileName { path: p() })?;
        let mut tmp_name = std::ffi::OsString::from(".");
        tmp_name.push(name);
        tmp_name.push(format!(".{}.partial", std::process::id()));
        let tmp = path.with_file_name(tmp_name);
        let file = OpenOptions::new()
            .write(true)
            .create_new(true)
            .open(&tmp)
            .map_err(|source| WriteError::Create {
                path: p(),
                tmp: tmp.clone(),
                source,
            })?;
        let bytes = self.to_bytes();
        let mut w = BufWriter::new(file);
        let written = w
            .write_all(&bytes)
            .and_then(|()| w.flush())
            .and_then(|()| w.get_ref().sync_all());
        drop(w);
        if let Err(source) = written {
            let _ = fs::remove_file(&tmp);
            return Err(WriteError::Write {
                path: p(),
                tmp,
                source,
            });
        }
        fs::rename(&tmp, path).map_err(|source| {
            let _ = fs::remove_file(&tmp);
            WriteError::Rename {
                path: p(),
                tmp: tmp.clone(),
                source,
            }
        })
    }
}

fn pad4(n: u64) -> u64 {
    n.div_ceil(4) * 4
}

fn put_u32(h: &mut Vec<u8>, x: u32) {
    h.extend_from_slice(&x.to_be_bytes());
}

fn put_padded(h: &mut Vec<u8>, bytes: &[u8]) {
    h.extend_from_slice(bytes);
    let n = bytes.len() as u64;
    h.resize(h.len() + (pad4(n) - n) as usize, 0);
}

fn put_name(h: &mut Vec<u8>, name: &str) {
    put_u32(h, name.len() as u32);
    put_padded(h, name.as_bytes());
}

fn put_attrs(h: &mut Vec<u8>, attrs: &[Attribute]) {
    if attrs.is_empty() {
        put_u32(h, 0);
        put_u32(h, 0);
        return;
    }
    put_u32(h, 0x0C);
    put_u32(h, attrs.len() as u32);
    for a in attrs {
        put_name(h, &a.name);
        put_u32(h, a.value.nc_type().code());
        put_u32(h, a.value.len() as u32);
        let mut raw = Vec::new();
        match &a.value {
            AttrValue::Text(s) => raw.extend_from_slice(s.as_bytes()),
            AttrValue::Byte(v) => v.iter().for_each(|x| raw.extend(x.to_be_bytes())),
            AttrValue::Short(v) => v.iter().for_each(|x| raw.extend(x.to_be_bytes())),
            AttrValue::Int(v) => v.iter().for_each(|x| raw.extend(x.to_be_bytes())),
            AttrValue::Float(v) => v.iter().for_each(|x| raw.extend(x.to_be_bytes())),
            AttrValue::Double(v) => v.iter().for_each(|x| raw.extend(x.to_be_bytes())),
            // Refused when the attribute was added (check_attr).
            _ => {}
        }
        put_padded(h, &raw);
    }
}
