//! NetCDF-4 files (HDF5 underneath) through the pure-Rust `hdf5-pure` crate, mapped onto the same
//! model as the classic files.
//!
//! The file is never read whole: `hdf5-pure`'s streaming reader fetches the metadata and then only
//! the chunks (or, for contiguous storage, the bytes) of the rows a read asks for, every fetch
//! checked against the file's length before a buffer is made for it, and every chunk refused when
//! it decompresses to more, or other, than its declared size. How large a read may be is
//! `crate::read`'s business.
//!
//! Layout facts (NetCDF-4 conventions on HDF5): each variable of the root group is an HDF5
//! dataset of the same name; each dimension is a dataset marked as a dimension scale
//! (`CLASS = "DIMENSION_SCALE"`), whose `_Netcdf4Dimid` attribute gives the dimension's id; a
//! dimension with no coordinate variable is a scale whose `NAME` begins "This is a netCDF
//! dimension but not a netCDF variable". A variable lists its dimension ids in
//! `_Netcdf4Coordinates` (written by recent netCDF-C libraries); when that attribute is missing,
//! each axis is matched to the one dimension scale of its length. Only the root group is read.
//! The HDF5 bookkeeping attributes (`CLASS`, `NAME`, `DIMENSION_LIST`, `REFERENCE_LIST`,
//! `_Netcdf4*`, `_NCProperties`) are not reported as attributes.

use crate::model::{AttrValue, Attribute, Dimension, NcType, Variable};
use hdf5_pure::{
    AttrValue as H, ChunkCacheConfig, DType, File, FileAccessProperties, MetadataCacheConfig,
    ReadSeekSource, WriteMarkPolicy,
};
use std::collections::HashMap;

/// The marker netCDF-C puts in `NAME` for a dimension without a coordinate variable.
const PURE_DIMENSION: &str = "This is a netCDF dimension but not a netCDF variable";

/// A NetCDF-4 file's root group in the common model.
pub(crate) struct Nc4 {
    pub file: File,
    pub dims: Vec<Dimension>,
    pub attributes: Vec<Attribute>,
    pub variables: Vec<Variable>,
}

fn is_bookkeeping(name: &str) -> bool {
    matches!(
        name,
        "CLASS" | "NAME" | "DIMENSION_LIST" | "REFERENCE_LIST" | "_NCProperties" | "_nc3_strict"
    ) || name.starts_with("_Netcdf4")
}

fn convert_attr(v: &H) -> Option<AttrValue> {
    if let Some(s) = v.as_str() {
        return Some(AttrValue::Text(s.to_string()));
    }
    if let Some(list) = v.as_strings() {
        return Some(AttrValue::Text(list.join("\n")));
    }
    Some(match v {
        H::F32(x) => AttrValue::Float(vec![*x]),
        H::F32Array(x) => AttrValue::Float(x.clone()),
        H::F64(x) => AttrValue::Double(vec![*x]),
        H::F64Array(x) => AttrValue::Double(x.clone()),
        H::I8(x) => AttrValue::Byte(vec![*x]),
        H::I8Array(x) => AttrValue::Byte(x.clone()),
        H::I16(x) => AttrValue::Short(vec![*x]),
        H::I16Array(x) => AttrValue::Short(x.clone()),
        H::I32(x) => AttrValue::Int(vec![*x]),
        H::I32Array(x) => AttrValue::Int(x.clone()),
        H::I64(x) => AttrValue::Int64(vec![*x]),
        H::I64Array(x) => AttrValue::Int64(x.clone()),
        H::U8(x) => AttrValue::UByte(vec![*x]),
        H::U8Array(x) => AttrValue::UByte(x.clone()),
        H::U16(x) => AttrValue::UShort(vec![*x]),
        H::U16Array(x) => AttrValue::UShort(x.clone()),
        H::U32(x) => AttrValue::UInt(vec![*x]),
        H::U32Array(x) => AttrValue::UInt(x.clone()),
        H::U64(x) => AttrValue::UInt64(vec![*x]),
        H::U64Array(x) => AttrValue::UInt64(x.clone()),
        _ => return None,
    })
}

fn convert_attrs(map: &HashMap<String, H>) -> Vec<Attribute> {
    let mut out: Vec<Attribute> = map
        .iter()
        .filter(|(k, _)| !is_bookkeeping(k))
        .filter_map(|(k, v)| {
            convert_attr(v).map(|value| Attribute {
                name: k.clone(),
                value,
            })
        })
        .collect();
    out.sort_by(|a, b| a.name.cmp(&b.name));
    out
}

fn nc_type(d: &DType) -> NcType {
    match d {
        DType::F32 => NcType::Float,
        DType::F64 => NcType::Double,
        DType::I8 => NcType::Byte,
        DType::I16 => NcType::Short,
        DType::I32 => NcType::Int,
        DType::I64 => NcType::Int64,
        DType::U8 => NcType::UByte,
        DType::U16 => NcType::UShort,
        DType::U32 => NcType::UInt,
        DType::U64 => NcType::UInt64,
        DType::String => NcType::Char,
        _ => NcType::Other,
    }
}

struct RawVar {
    name: String,
    shape: Vec<u64>,
    dtype: NcType,
    attrs: HashMap<String, H>,
}

/// Bytes of decompressed chunks a NetCDF-4 file keeps between the row bands of one read: 32 MiB,
/// so that a band of rows narrower than a row of chunks does not decode those chunks again.
pub(crate) const CHUNK_CACHE_BYTES: usize = 32 << 20;

/// Bytes of the file's metadata (object headers, B-tree nodes, heaps) kept once read: 8 MiB.
const METADATA_CACHE_BYTES: usize = 8 << 20;

/// Opens the NetCDF-4 file `f` for reads on demand and describes its root group. Nothing is read
/// whole: metadata and then the chunks or rows a read needs are fetched from the file as they are
/// wanted, each read checked against the file's length before its buffer is made (`hdf5-pure`'s
/// streaming reader). Errors are messages without the file name.
pub(crate) fn open(f: std::fs::File) -> Result<Nc4, String> {
    let source =
        ReadSeekSource::new(f).map_err(|e| format!("cannot read the file's length: {e}"))?;
    let access = FileAccessProperties::new()
        .with_metadata_cache(
            MetadataCacheConfig::new(METADATA_CACHE_BYTES).with_max_entry_bytes(1 << 20),
        )
        .with_chunk_cache(ChunkCacheConfig::from_h5p_cache(4099, CHUNK_CACHE_BYTES))
        // A file whose writer left only its write mark (not a live SWMR writer) is read as it
        // stands, as a whole-file read did.
        .with_write_mark_policy(WriteMarkPolicy::AllowSnapshot);
    let file = File::from_source_with_options(source, access)
        .map_err(|e| format!("not a readable NetCDF-4/HDF5 file: {e}"))?;
    let root = file.root();
    let global = root
        .attrs()
        .map_err(|e| format!("cannot read the global attributes: {e}"))?;
    let mut names = root
        .datasets()
        .map_err(|e| format!("cannot list the variables of the root group: {e}"))?;
    names.sort();
    let mut raw = Vec::with_capacity(names.len());
    for name in names {
        let ds = file
            .dataset(&name)
            .map_err(|e| format!("cannot open variable `{name}`: {e}"))?;
        let shape = ds
            .shape()
            .map_err(|e| format!("variable `{name}`: cannot read its shape: {e}"))?;
        let dtype = ds
            .dtype()
            .map(|d| nc_type(&d))
            .map_err(|e| format!("variable `{name}`: cannot read its type: {e}"))?;
        let attrs = ds
            .attrs()
            .map_err(|e| format!("variable `{name}`: cannot read its attributes: {e}"))?;
        raw.push(RawVar {
            name,
            shape,
            dtype,
            attrs,
        });
    }

    // Dimensions: the dimension scales, by `_Netcdf4Dimid` when given, else by name.
    let text = |v: Option<&H>| v.and_then(H::as_str).map(str::to_string);
    let mut scales: Vec<(i64, usize)> = Vec::new(); // (dimid, index into raw)
    for (i, r) in raw.iter().enumerate() {
        if text(r.attrs.get("CLASS")).as_deref() == Some("DIMENSION_SCALE") && r.shape.len() == 1 {
            let id = r.attrs.get("_Netcdf4Dimid").and_then(H::as_i64);
            scales.push((id.unwrap_or(i64::MAX), i));
        }
    }
    scales.sort();
    let mut dims: Vec<Dimension> = scales
        .iter()
        .map(|&(_, i)| Dimension {
            name: raw[i].name.clone(),
            len: raw[i].shape[0],
            unlimited: false,
        })
        .collect();
    let dimid_index: HashMap<i64, usize> = scales
        .iter()
        .enumerate()
        .filter(|(_, (id, _))| *id != i64::MAX)
        .map(|(k, (id, _))| (*id, k))
        .collect();

    let mut variables = Vec::new();
    for r in &raw {
        let pure_dim = text(r.attrs.get("NAME")).is_some_and(|n| n.starts_with(PURE_DIMENSION));
        if pure_dim {
            continue;
        }
        let by_ids = r
            .attrs
            .get("_Netcdf4Coordinates")
            .and_then(H::to_i64s)
            .and_then(|ids| {
                let idx: Option<Vec<usize>> =
                    ids.iter().map(|id| dimid_index.get(id).copied()).collect();
                idx.filter(|v| {
                    v.len() == r.shape.len()
                        && v.iter().zip(&r.shape).all(|(&k, &n)| dims[k].len == n)
                })
            });
        let var_dims = match by_ids {
            Some(v) => v,
            None => {
                let mut v = Vec::with_capacity(r.shape.len());
                for (axis, &n) in r.shape.iter().enumerate() {
                    let matching: Vec<usize> =
                        (0..dims.len()).filter(|&k| dims[k].len == n).collect();
                    match matching.as_slice() {
                        [k] => v.push(*k),
                        [] => {
                            // A plain HDF5 dataset: give the axis a dimension of its own.
                            dims.push(Dimension {
                                name: format!("{}_dim{axis}", r.name),
                                len: n,
                                unlimited: false,
                            });
                            v.push(dims.len() - 1);
                        }
                        several => {
                            let names: Vec<&str> =
                                several.iter().map(|&k| dims[k].name.as_str()).collect();
                            return Err(format!(
                                "variable `{}`: axis {axis} of length {n} could be any of the \
                                 dimensions {names:?}, and the file does not say which \
                                 (no `_Netcdf4Coordinates` attribute)",
                                r.name
                            ));
                        }
                    }
                }
                v
            }
        };
        variables.push(Variable {
            name: r.name.clone(),
            dims: var_dims,
            nc_type: r.dtype,
            attributes: convert_attrs(&r.attrs),
        });
    }
    Ok(Nc4 {
        attributes: convert_attrs(&global),
        file,
        dims,
        variables,
    })
}
