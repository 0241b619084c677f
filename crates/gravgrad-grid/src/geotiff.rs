//! GeoTIFF writer for single-band north-up rasters (terrain models and gridded products).
//!
//! Frame: the raster's map frame, by EPSG code — projected (eastings, northings and cell sizes in
//! metres) or geographic (longitude, latitude and cell sizes in degrees). Cells are areas
//! (`PixelIsArea`): the tie point puts the outer north-west corner of the first cell at
//! (`x_min`, `y_max`). Row 0 is the northernmost. Sample values are written as they are held,
//! in whatever unit the raster carries.
//!
//! The file is written under a temporary name in the destination folder and renamed when complete,
//! so an interrupted run never leaves a half-written file under the final name. The same raster and
//! options give the same bytes every time (no time stamps, no software tags). Layout in
//! `docs/formats.md`, section "GeoTIFF rasters".

use gravgrad_core::Raster;
use gravgrad_core::raster::{FrameKind, RasterError, frame_kind_of_epsg};
use std::fs::{self, File, OpenOptions};
use std::io::{BufWriter, Seek, Write};
use std::path::{Path, PathBuf};
use thiserror::Error;
use tiff::encoder::colortype::{ColorType, Gray32Float, Gray64Float};
use tiff::encoder::{Compression, DeflateLevel, TiffEncoder, TiffKind, TiffKindBig, TiffValue};
use tiff::tags::Tag;

use gravgrad_core::raster::geokey as key;

/// Sample type of the written band.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub enum SampleType {
    /// IEEE float32: about 7 significant digits, enough for terrain heights and gridded gradients.
    #[default]
    Float32,
    /// IEEE float64: every value exactly as held.
    Float64,
}

/// How the samples are stored.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub enum Packing {
    /// Plain strips, readable by every TIFF reader.
    #[default]
    Plain,
    /// Deflate-compressed strips (zlib level 6).
    Deflate,
}

/// Choices for [`write_geotiff`]; the default is float32, plain strips, frame kind from the EPSG
/// code.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct WriteOptions {
    pub sample: SampleType,
    pub packing: Packing,
    /// Whether the EPSG code names a projected (m) or geographic (deg) frame; `None` guesses from
    /// the code ([`frame_kind_of_epsg`]). Give it for geographic codes outside the guessed set.
    pub frame: Option<FrameKind>,
}

/// Why a GeoTIFF could not be written. Every variant names the destination path.
#[derive(Debug, Error)]
pub enum GeoTiffError {
    #[error("{}: the raster is not valid: {source}", .path.display())]
    Raster { path: PathBuf, source: RasterError },
    #[error(
        "{}: the raster is {nx} × {ny} cells; a TIFF holds at most 4 294 967 295 per side",
        .path.display()
    )]
    TooWide { path: PathBuf, nx: usize, ny: usize },
    #[error(
        "{}: cell (column {col}, row {row}) holds {value}, which float32 cannot hold; write float64",
        .path.display()
    )]
    OutOfFloat32 {
        path: PathBuf,
        col: usize,
        row: usize,
        value: f64,
    },
    #[error("{}: the nodata value {value} cannot be held as float32; write float64", .path.display())]
    NodataOutOfFloat32 { path: PathBuf, value: f64 },
    #[error(
        "{}: EPSG code {epsg} does not fit the GeoTIFF key (at most 65535)",
        .path.display()
    )]
    EpsgTooLarge { path: PathBuf, epsg: u32 },
    #[error("{}: the destination has no file name", .path.display())]
    NoFileName { path: PathBuf },
    #[error("{}: cannot create the temporary file {}: {source}", .path.display(), .tmp.display())]
    Create {
        path: PathBuf,
        tmp: PathBuf,
        source: std::io::Error,
    },
    #[error("{}: writing the temporary file {} failed: {source}", .path.display(), .tmp.display())]
    Encode {
        path: PathBuf,
        tmp: PathBuf,
        source: tiff::TiffError,
    },
    #[error("{}: cannot rename {} to the final name: {source}", .path.display(), .tmp.display())]
    Rename {
        path: PathBuf,
        tmp: PathBuf,
        source: std::io::Error,
    },
}

/// Writes `raster` to `path` as a single-band GeoTIFF: north-up, cells as areas, the frame by EPSG
/// code, nodata in `GDAL_NODATA`. Geometry in the raster's frame units (m or degrees). Goes through
/// a temporary file in the same folder, renamed onto `path` only when complete; an existing file at
/// `path` is replaced.
pub fn write_geotiff(
    raster: &Raster,
    path: &Path,
    opts: &WriteOptions,
) -> Result<(), GeoTiffError> {
    let p = || path.to_path_buf();
    raster
        .check()
        .map_err(|source| GeoTiffError::Raster { path: p(), source })?;
    let (width, height) = match (u32::try_from(raster.nx), u32::try_from(raster.ny)) {
        (Ok(w), Ok(h)) => (w, h),
        _ => {
            return Err(GeoTiffError::TooWide {
                path: p(),
                nx: raster.nx,
                ny: raster.ny,
            });
        }
    };
    let keys =
        geokeys(raster, opts).map_err(|epsg| GeoTiffError::EpsgTooLarge { path: p(), epsg })?;
    let nodata = match raster.nodata {
        None => None,
        Some(v) => Some(match opts.sample {
            SampleType::Float64 => v,
            SampleType::Float32 => to_f32(v).ok_or(GeoTiffError::NodataOutOfFloat32 {
                path: p(),
                value: v,
            })? as f64,
        }),
    };
    let data = match opts.sample {
        SampleType::Float64 => Samples::F64(&raster.values),
        SampleType::Float32 => {
            let mut out = Vec::with_capacity(raster.values.len());
            for (i, &v) in raster.values.iter().enumerate() {
                let x = to_f32(v).ok_or(GeoTiffError::OutOfFloat32 {
                    path: p(),
                    col: i % raster.nx,
                    row: i / raster.nx,
                    value: v,
                })?;
                out.push(x);
            }
            Samples::F32(out)
        }
    };
    let geo = GeoTags {
        scale: [raster.dx, raster.dy, 0.0],
        tiepoint: [0.0, 0.0, 0.0, raster.x_min, raster.y_max, 0.0],
        keys,
        nodata: nodata.map(nodata_text),
    };

    let name = path
        .file_name()
        .ok_or(GeoTiffError::NoFileName { path: p() })?;
    let mut tmp_name = std::ffi::OsString::from(".");
    tmp_name.push(name);
    tmp_name.push(format!(".{}.partial", std::process::id()));
    let tmp = path.with_file_name(tmp_name);
    let file = OpenOptions::new()
        .write(true)
        .create_new(true)
        .open(&tmp)
        .map_err(|source| GeoTiffError::Create {
            path: p(),
            tmp: tmp.clone(),
            source,
        })?;
    let encoded = encode(file, width, height, &data, &geo, opts.packing);
    if let Err(source) = encoded {
        let _ = fs::remove_file(&tmp);
        return Err(GeoTiffError::Encode {
            path: p(),
            tmp,
            source,
        });
    }
    fs::rename(&tmp, path).map_err(|source| {
        let _ = fs::remove_file(&tmp);
        GeoTiffError::Rename {
            path: p(),
            tmp: tmp.clone(),
            source,
        }
    })
}

/// `v` as float32, or `None` when a finite `v` lies beyond float32's range (NaN and infinities
/// pass through).
fn to_f32(v: f64) -> Option<f32> {
    let x = v as f32;
    (x.is_finite() || !v.is_finite()).then_some(x)
}

/// The nodata value as GDAL writes and reads it in the `GDAL_NODATA` tag: a decimal number that
/// reads back to the same value, or `nan`, `inf`, `-inf`.
fn nodata_text(v: f64) -> String {
    if v.is_nan() {
        "nan".into()
    } else if v.is_infinite() {
        if v > 0.0 { "inf".into() } else { "-inf".into() }
    } else {
        format!("{v}")
    }
}

/// The GeoKeyDirectory: header, then one (id, location 0, count 1, value) entry per key, sorted by
/// id. Err(code) when the EPSG code does not fit a 16-bit key.
fn geokeys(raster: &Raster, opts: &WriteOptions) -> Result<Vec<u16>, u32> {
    let mut entries: Vec<(u16, u16)> = vec![(key::GT_RASTER_TYPE, key::RASTER_PIXEL_IS_AREA)];
    if let Some(code) = raster.epsg {
        let c = u16::try_from(code).map_err(|_| code)?;
        match opts.frame.unwrap_or_else(|| frame_kind_of_epsg(code)) {
            FrameKind::Projected => {
                entries.push((key::GT_MODEL_TYPE, key::MODEL_PROJECTED));
                entries.push((key::PROJECTED_CS_TYPE, c));
                entries.push((key::PROJ_LINEAR_UNITS, key::UNIT_METRE));
            }
            FrameKind::Geographic => {
                entries.push((key::GT_MODEL_TYPE, key::MODEL_GEOGRAPHIC));
                entries.push((key::GEOGRAPHIC_TYPE, c));
                entries.push((key::GEOG_ANGULAR_UNITS, key::UNIT_DEGREE));
            }
        }
    }
    entries.sort_unstable();
    // Version 1, revision 1.0, number of keys; `entries` has at most 4 keys.
    let mut dir = vec![1, 1, 0, entries.len() as u16];
    for (id, value) in entries {
        dir.extend_from_slice(&[id, 0, 1, value]);
    }
    Ok(dir)
}

enum Samples<'a> {
    F32(Vec<f32>),
    F64(&'a [f64]),
}

struct GeoTags {
    scale: [f64; 3],
    tiepoint: [f64; 6],
    keys: Vec<u16>,
    nodata: Option<String>,
}

/// Classic TIFF addresses 4 GiB; above about 3.5 GiB of samples the file is written as BigTIFF.
const BIG_TIFF_FROM_BYTES: u64 = 3_500_000_000;

fn encode(
    file: File,
    width: u32,
    height: u32,
    data: &Samples<'_>,
    geo: &GeoTags,
    packing: Packing,
) -> tiff::TiffResult<()> {
    let mut w = BufWriter::new(file);
    let bytes = match data {
        Samples::F32(v) => v.len() as u64 * 4,
        Samples::F64(v) => v.len() as u64 * 8,
    };
    let compression = match packing {
        Packing::Plain => Compression::Uncompressed,
        Packing::Deflate => Compression::Deflate(DeflateLevel::Balanced),
    };
    if bytes >= BIG_TIFF_FROM_BYTES {
        let enc = TiffEncoder::<_, TiffKindBig>::new_generic(&mut w)?.with_compression(compression);
        write_image(enc, width, height, data, geo)?;
    } else {
        let enc = TiffEncoder::new(&mut w)?.with_compression(compression);
        write_image(enc, width, height, data, geo)?;
    }
    w.flush()?;
    let file = w.into_inner().map_err(|e| e.into_error())?;
    file.sync_all()?;
    Ok(())
}

fn write_image<W: Write + Seek, K: TiffKind>(
    mut enc: TiffEncoder<W, K>,
    width: u32,
    height: u32,
    data: &Samples<'_>,
    geo: &GeoTags,
) -> tiff::TiffResult<()> {
    match data {
        Samples::F32(v) => write_band::<_, K, Gray32Float>(&mut enc, width, height, v, geo),
        Samples::F64(v) => write_band::<_, K, Gray64Float>(&mut enc, width, height, v, geo),
    }
}

fn write_band<W: Write + Seek, K: TiffKind, C: ColorType>(
    enc: &mut TiffEncoder<W, K>,
    width: u32,
    height: u32,
    values: &[C::Inner],
    geo: &GeoTags,
) -> tiff::TiffResult<()>
where
    [C::Inner]: TiffValue,
{
    let mut image = enc.new_image::<C>(width, height)?;
    let dir = image.encoder();
    dir.write_tag(Tag::ModelPixelScaleTag, &geo.scale[..])?;
    dir.write_tag(Tag::ModelTiepointTag, &geo.tiepoint[..])?;
    dir.write_tag(Tag::GeoKeyDirectoryTag, &geo.keys[..])?;
    if let Some(text) = &geo.nodata {
        dir.write_tag(Tag::GdalNodata, text.as_str())?;
    }
    image.write_data(values)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn nodata_text_reads_back() {
        // GDAL parses GDAL_NODATA with a C strtod, which accepts these spellings (from memory).
        assert_eq!(nodata_text(-9999.0), "-9999");
        assert_eq!(nodata_text(f64::NAN), "nan");
        assert_eq!(nodata_text(f64::NEG_INFINITY), "-inf");
        let v = -3.4028234663852886e38;
        assert_eq!(nodata_text(v).parse::<f64>().unwrap(), v);
    }

    #[test]
    fn float32_range() {
        assert_eq!(to_f32(1.5), Some(1.5));
        assert_eq!(to_f32(1e39), None);
        assert!(to_f32(f64::NAN).unwrap().is_nan());
    }

    #[test]
    fn geokey_directory_layout() {
        // OGC GeoTIFF 1.1, clause 7.1: header (1, 1, 0, n), then keys sorted by id.
        let r = Raster::new(1, 1, (0.0, 0.0), (1.0, 1.0), vec![0.0])
            .unwrap()
            .with_epsg(32753);
        assert_eq!(
            geokeys(&r, &WriteOptions::default()).unwrap(),
            vec![
                1, 1, 0, 4, 1024, 0, 1, 1, 1025, 0, 1, 1, 3072, 0, 1, 32753, 3076, 0, 1, 9001
            ]
        );
        let g = r.clone().with_epsg(4326);
        assert_eq!(
            geokeys(&g, &WriteOptions::default()).unwrap(),
            vec![
                1, 1, 0, 4, 1024, 0, 1, 2, 1025, 0, 1, 1, 2048, 0, 1, 4326, 2054, 0, 1, 9102
            ]
        );
        assert_eq!(
            geokeys(&r.with_epsg(70_000), &WriteOptions::default()),
            Err(70_000)
        );
    }
}
