//! Reader for single-band GeoTIFF rasters (terrain models and grids, `docs/formats.md`, section
//! "GeoTIFF rasters").
//!
//! Frame: the file's map frame by EPSG code — projected (metres) or geographic (degrees); the
//! result is a north-up [`Raster`] whose `x_min`, `y_max` are the outer north-west corner of the
//! grid, with positive cell sizes in the same units. Samples (float32/64, signed and unsigned
//! integers up to 32 bits) come back as f64 in whatever unit the file holds. Strips or tiles,
//! uncompressed, deflate, LZW or PackBits, as the `tiff` crate decodes them. Only the first image of
//! the file is read; further images (overviews, masks) are ignored.
//!
//! Before the `tiff` crate reads the file, every entry of the first image directory is checked
//! against the file's size (`check_tag_sizes`). Before any cell is decoded, the image's declared
//! bytes (ImageWidth × ImageLength × bytes per sample) are checked against the file's size at the
//! largest expansion of its Compression tag (`max_expansion`; `docs/reliability.md`).
//!
//! Two ways to read: [`read_geotiff`] decodes the whole image, which may hold at most
//! [`MAX_GRID_CELLS`] cells; [`read_geotiff_header`] then [`read_geotiff_block`] read where the
//! grid lies first and then decode only the strips or tiles that meet a block of cells (a terrain
//! model's window over the survey), so the limit applies to the block and to each strip or tile,
//! not to the file.
//!
//! Refused, each with the file and the tag at fault: more than one band; no georeferencing (no
//! pixel scale and tie point, no transformation matrix); a rotated or sheared grid; a south-up or
//! otherwise flipped grid; a CRS not given by an EPSG code; units other than metres or degrees.

use crate::input_file::open_regular;
use gravgrad_core::limits::{MAX_GRID_CELLS, SMALL_FILE_ALLOWANCE, decoded_bound, decoded_fits};
use gravgrad_core::{Location, Problem, Raster};
pub use gravgrad_netcdf::{CellBlock, GridHeader};
use std::io::BufReader;
use std::path::Path;
use tiff::decoder::{ChunkType, Decoder, DecodingResult, Limits};
use tiff::tags::Tag;

use gravgrad_core::raster::geokey as key;

/// Largest decoded image buffer, in bytes: [`MAX_GRID_CELLS`] samples of 8 bytes.
const MAX_IMAGE_BYTES: u64 = MAX_GRID_CELLS * 8;

/// Largest buffer for one compressed strip or tile, in bytes.
const MAX_SEGMENT_BYTES: usize = 64 << 20;

/// The largest factor by which a TIFF compression scheme can expand its stored bytes, by the
/// Compression tag (259): none 1; PackBits 64 (2 bytes give at most 128); deflate 1032 (its
/// maximum ratio, RFC 1951: a 258-byte match in about 2 bits); LZW 2731 (a 12-bit code gives at
/// most 4096 bytes, TIFF 6.0 section 13); any other scheme 4096.
fn max_expansion(compression: u16) -> u64 {
    match compression {
        1 => 1,
        32773 => 64,
        8 | 32946 => 1032,
        5 => 2731,
        _ => 4096,
    }
}

/// An open GeoTIFF whose header has been read and checked, before any cell is decoded.
struct Opened {
    dec: Decoder<BufReader<std::fs::File>>,
    header: GridHeader,
    loc: Location,
    /// The Compression tag (259).
    compression: u16,
    /// Bytes of one sample.
    sample_bytes: u64,
}

/// Opens the GeoTIFF at `path` and reads its header: the tag sizes against the file's, one band,
/// the declared size against the file's at its compression's largest expansion (and, when
/// `whole`, against [`MAX_GRID_CELLS`] first), the georeferencing, the frame and the no-data value.
fn open(path: &Path, whole: bool) -> Result<Opened, Vec<Problem>> {
    let loc = Location::file(path);
    let fail = |msg: String| vec![Problem::error(loc.clone(), msg)];
    let input = open_regular(path).map_err(|p| vec![p])?;
    let file_len = input.len;
    check_tag_sizes(&input.file, file_len).map_err(|m| vec![Problem::error(loc.clone(), m)])?;
    let mut limits = Limits::default();
    limits.decoding_buffer_size = MAX_IMAGE_BYTES as usize;
    // A compressed strip or tile lies inside the file: its declared byte count cannot exceed it.
    limits.intermediate_buffer_size = MAX_SEGMENT_BYTES.min(usize::try_from(file_len).unwrap_or(0));
    let mut dec = Decoder::new(BufReader::new(input.file))
        .map_err(|e| fail(format!("not a readable TIFF file: {e}")))?
        .with_limits(limits);

    let samples: u16 = dec
        .find_tag_unsigned(Tag::SamplesPerPixel)
        .map_err(|e| fail(format!("unreadable SamplesPerPixel tag (277): {e}")))?
        .unwrap_or(1);
    if samples != 1 {
        return Err(vec![
            Problem::error(
                loc.clone(),
                format!("{samples} bands (SamplesPerPixel tag 277); a raster here has one band"),
            )
            .with_hint("write each band to its own file"),
        ]);
    }
    let (width, height) = dec.dimensions().map_err(|e| {
        fail(format!(
            "unreadable ImageWidth/ImageLength tags (256, 257): {e}"
        ))
    })?;
    let (compression, bits) =
        check_declared_size(&mut dec, (width, height), file_len, whole, &loc)?;

    let (x_min, y_max, dx, dy) = read_geometry(&mut dec, &loc)?;
    let epsg = read_crs(&mut dec, &loc)?;
    let nodata = match dec.find_tag(Tag::GdalNodata) {
        Ok(None) => None,
        Ok(Some(v)) => {
            let text = v
                .into_string()
                .map_err(|e| fail(format!("GDAL_NODATA tag (42113) is not text: {e}")))?;
            Some(parse_nodata(&text).ok_or_else(|| {
                fail(format!(
                    "GDAL_NODATA tag (42113) holds {text:?}, which is not a number"
                ))
            })?)
        }
        Err(e) => return Err(fail(format!("unreadable GDAL_NODATA tag (42113): {e}"))),
    };
    Ok(Opened {
        dec,
        header: GridHeader {
            nx: width as usize,
            ny: height as usize,
            x_min,
            y_max,
            dx,
            dy,
            epsg,
            nodata,
        },
        loc,
        compression,
        sample_bytes: u64::from(bits).div_ceil(8),
    })
}

/// Reads a single-band GeoTIFF into a north-up raster (frame and units in the module
/// documentation). Every problem carries the file's location and names the tag at fault.
pub fn read_geotiff(path: &Path) -> Result<Raster, Vec<Problem>> {
    let Opened {
        mut dec,
        header,
        loc,
        ..
    } = open(path, true)?;
    let fail = |msg: String| vec![Problem::error(loc.clone(), msg)];
    let image = dec
        .read_image()
        .map_err(|e| fail(format!("cannot decode the image data: {e}")))?;
    let values = samples_as_f64(image).map_err(fail)?;
    let mut raster = Raster::new(
        header.nx,
        header.ny,
        (header.x_min, header.y_max),
        (header.dx, header.dy),
        values,
    )
    .map_err(|e| fail(format!("the image does not form a raster: {e}")))?;
    raster.epsg = header.epsg;
    raster.nodata = header.nodata;
    Ok(raster)
}

/// Reads a GeoTIFF's header: where its grid lies, its frame and no-data value, with every check
/// [`read_geotiff`] makes before it decodes a cell but the limit on the cells of a whole image.
pub fn read_geotiff_header(path: &Path) -> Result<GridHeader, Vec<Problem>> {
    open(path, false).map(|o| o.header)
}

/// Reads the cells `block` of a GeoTIFF (the north-up grid of [`read_geotiff_header`]) by decoding
/// only the strips or tiles that meet it, one at a time. [`MAX_GRID_CELLS`] applies to the block
/// and to each strip or tile; each one's decoded bytes must fit its stored bytes at its
/// compression's largest expansion (`max_expansion`). The raster's corner is the block's.
pub fn read_geotiff_block(path: &Path, block: CellBlock) -> Result<Raster, Vec<Problem>> {
    let Opened {
        mut dec,
        header: h,
        loc,
        compression,
        sample_bytes,
    } = open(path, false)?;
    let fail = |msg: String| vec![Problem::error(loc.clone(), msg)];
    if !block.inside(h.nx, h.ny) {
        return Err(fail(format!(
            "the block of columns {} to {} and rows {} to {} is not inside the image's {} × {} \
             cells (ImageWidth, ImageLength tags 256, 257)",
            block.col0,
            block.col0.saturating_add(block.nx),
            block.row0,
            block.row0.saturating_add(block.ny),
            h.nx,
            h.ny
        )));
    }
    if block.cells() > MAX_GRID_CELLS {
        return Err(vec![
            Problem::error(
                loc.clone(),
                format!(
                    "the block of {} × {} = {} cells is more than the {MAX_GRID_CELLS} read at once",
                    block.nx,
                    block.ny,
                    block.cells()
                ),
            )
            .with_hint("cut the raster to the survey area plus its margin"),
        ]);
    }
    let tiled = dec.get_chunk_type() == ChunkType::Tile;
    let (cw, ch) = dec.chunk_dimensions();
    let (cw, ch) = (cw as usize, ch as usize);
    let (what, counts_tag) = if tiled {
        ("tile", Tag::TileByteCounts)
    } else {
        ("strip", Tag::StripByteCounts)
    };
    if cw == 0 || ch == 0 {
        return Err(fail(format!("{what}s of {cw} × {ch} cells hold nothing")));
    }
    let counts: Vec<u64> = dec
        .find_tag_unsigned_vec(counts_tag)
        .map_err(|e| {
            fail(format!(
                "unreadable {what} byte counts (tag {}): {e}",
                counts_tag.to_u16()
            ))
        })?
        .unwrap_or_default();
    let across = h.nx.div_ceil(cw);
    let (cx0, cx1) = (block.col0 / cw, (block.col0 + block.nx - 1) / cw);
    let (cy0, cy1) = (block.row0 / ch, (block.row0 + block.ny - 1) / ch);
    let chunk_cells = (cw as u64).saturating_mul(ch as u64);
    if chunk_cells > MAX_GRID_CELLS {
        return Err(vec![
            Problem::error(
                loc.clone(),
                format!(
                    "{what}s of {cw} × {ch} = {chunk_cells} cells: one is more than the \
                     {MAX_GRID_CELLS} cells decoded at once"
                ),
            )
            .with_hint("write the raster in tiles (e.g. 256 × 256) or strips of fewer rows"),
        ]);
    }
    let mut values = vec![f64::NAN; block.nx * block.ny];
    for cy in cy0..=cy1 {
        for cx in cx0..=cx1 {
            let index = cy * across + cx;
            // The chunk's cells inside the image (the last row and column may be cut).
            let (x0, y0) = (cx * cw, cy * ch);
            let (w, hh) = ((h.nx - x0).min(cw), (h.ny - y0).min(ch));
            let stored = counts.get(index).copied().ok_or_else(|| {
                fail(format!(
                    "{what} {index} has no byte count (tag {}): it holds {} entries",
                    counts_tag.to_u16(),
                    counts.len()
                ))
            })?;
            let decoded = (w as u64 * hh as u64).saturating_mul(sample_bytes);
            let ratio = max_expansion(compression);
            if !decoded_fits(decoded, stored, ratio) {
                return Err(fail(format!(
                    "{what} {index} declares {w} × {hh} cells ({decoded} bytes) from {stored} \
                     stored bytes, more than Compression (tag 259) {compression} can give (at \
                     most {} bytes, {ratio} times its size plus {SMALL_FILE_ALLOWANCE})",
                    decoded_bound(stored, ratio)
                )));
            }
            let index32 = u32::try_from(index)
                .map_err(|_| fail(format!("{what} {index} is past the TIFF's count")))?;
            let chunk = dec
                .read_chunk(index32)
                .map_err(|e| fail(format!("cannot decode {what} {index}: {e}")))?;
            let chunk = samples_as_f64(chunk).map_err(fail)?;
            if chunk.len() != w * hh {
                return Err(fail(format!(
                    "{what} {index} decodes to {} cells, expected {w} × {hh}",
                    chunk.len()
                )));
            }
            // The rows and columns of the chunk inside the block.
            let c_lo = block.col0.max(x0);
            let c_hi = (block.col0 + block.nx).min(x0 + w);
            let r_lo = block.row0.max(y0);
            let r_hi = (block.row0 + block.ny).min(y0 + hh);
            for r in r_lo..r_hi {
                let from = (r - y0) * w + (c_lo - x0);
                let to = (r - block.row0) * block.nx + (c_lo - block.col0);
                values[to..to + (c_hi - c_lo)].copy_from_slice(&chunk[from..from + (c_hi - c_lo)]);
            }
        }
    }
    let mut raster = Raster::new(
        block.nx,
        block.ny,
        (
            h.x_min + block.col0 as f64 * h.dx,
            h.y_max - block.row0 as f64 * h.dy,
        ),
        (h.dx, h.dy),
        values,
    )
    .map_err(|e| fail(format!("the block does not form a raster: {e}")))?;
    raster.epsg = h.epsg;
    raster.nodata = h.nodata;
    Ok(raster)
}

/// Decoded samples as f64; 64-bit integers are refused.
fn samples_as_f64(image: DecodingResult) -> Result<Vec<f64>, String> {
    Ok(match image {
        DecodingResult::F32(v) => v.into_iter().map(f64::from).collect(),
        DecodingResult::F64(v) => v,
        DecodingResult::F16(v) => v.into_iter().map(|x| x.to_f64()).collect(),
        DecodingResult::I8(v) => v.into_iter().map(f64::from).collect(),
        DecodingResult::I16(v) => v.into_iter().map(f64::from).collect(),
        DecodingResult::I32(v) => v.into_iter().map(f64::from).collect(),
        DecodingResult::U8(v) => v.into_iter().map(f64::from).collect(),
        DecodingResult::U16(v) => v.into_iter().map(f64::from).collect(),
        DecodingResult::U32(v) => v.into_iter().map(f64::from).collect(),
        DecodingResult::I64(_) | DecodingResult::U64(_) => {
            return Err(
                "64-bit integer samples (BitsPerSample tag 258) are not read; store float64".into(),
            );
        }
    })
}

/// Bytes of one value of a TIFF field type (TIFF 6.0 section 2, BigTIFF): BYTE, ASCII, SBYTE,
/// UNDEFINED 1; SHORT, SSHORT 2; LONG, SLONG, FLOAT, IFD 4; RATIONAL, SRATIONAL, DOUBLE, LONG8,
/// SLONG8, IFD8 and unknown types 8.
fn type_size(t: u16) -> u64 {
    match t {
        1 | 2 | 6 | 7 => 1,
        3 | 8 => 2,
        4 | 9 | 11 | 13 => 4,
        _ => 8,
    }
}

/// Refuses a first image directory whose entries declare more bytes than the file holds, before
/// the `tiff` crate reads them: it reserves a tag's declared count × size before reading it
/// (a GDAL_NODATA tag declaring 64 MiB of text in a 1 KB file). The error names the tag.
fn check_tag_sizes(file: &std::fs::File, file_len: u64) -> Result<(), String> {
    use std::os::unix::fs::FileExt;
    let read = |at: u64, n: usize| -> Option<Vec<u8>> {
        let mut b = vec![0u8; n];
        file.read_exact_at(&mut b, at).ok().map(|_| b)
    };
    // Too short or not a TIFF: the tiff crate says what is wrong.
    let Some(head) = read(0, 16.min(file_len as usize)) else {
        return Ok(());
    };
    if head.len() < 8 {
        return Ok(());
    }
    let big_endian = match &head[..2] {
        b"II" => false,
        b"MM" => true,
        _ => return Ok(()),
    };
    let uint = |b: &[u8]| -> u64 {
        let it = b.iter().map(|&x| u64::from(x));
        if big_endian {
            it.fold(0, |a, x| (a << 8) | x)
        } else {
            it.rev().fold(0, |a, x| (a << 8) | x)
        }
    };
    let (bigtiff, ifd) = match uint(&head[2..4]) {
        42 => (false, uint(&head[4..8])),
        43 if head.len() >= 16 => (true, uint(&head[8..16])),
        _ => return Ok(()),
    };
    let (count_len, entry_len, inline) = if bigtiff { (8, 20, 8) } else { (2, 12, 4) };
    let Some(n) = read(ifd, count_len).map(|b| uint(&b)) else {
        return Ok(());
    };
    let entries_bytes = n.saturating_mul(entry_len);
    if entries_bytes > file_len {
        return Err(format!(
            "the image directory at byte {ifd} declares {n} entries ({entries_bytes} bytes), the \
             file holds {file_len}"
        ));
    }
    let Some(entries) = read(ifd + count_len as u64, entries_bytes as usize) else {
        return Ok(());
    };
    for e in entries.chunks_exact(entry_len as usize) {
        let tag = uint(&e[0..2]);
        let t = uint(&e[2..4]) as u16;
        let count = if bigtiff {
            uint(&e[4..12])
        } else {
            uint(&e[4..8])
        };
        let bytes = count.saturating_mul(type_size(t));
        if bytes > inline && bytes > file_len {
            return Err(format!(
                "tag {tag} declares {count} values of type {t} ({bytes} bytes), the file holds \
                 {file_len}"
            ));
        }
    }
    Ok(())
}

/// Refuses an image whose decoded bytes exceed what the file's size can hold at its
/// compression's largest expansion ([`max_expansion`]), and, when `whole` (the image is to be
/// decoded whole), first one whose declared cells exceed [`MAX_GRID_CELLS`]. Gives the
/// Compression tag and the bits per sample.
fn check_declared_size<R: std::io::Read + std::io::Seek>(
    dec: &mut Decoder<R>,
    (width, height): (u32, u32),
    file_len: u64,
    whole: bool,
    loc: &Location,
) -> Result<(u16, u16), Vec<Problem>> {
    let fail = |msg: String| vec![Problem::error(loc.clone(), msg)];
    let bits: u16 = dec
        .find_tag_unsigned(Tag::BitsPerSample)
        .map_err(|e| fail(format!("unreadable BitsPerSample tag (258): {e}")))?
        .unwrap_or(1);
    let compression: u16 = dec
        .find_tag_unsigned(Tag::Compression)
        .map_err(|e| fail(format!("unreadable Compression tag (259): {e}")))?
        .unwrap_or(1);
    let cells = u64::from(width) * u64::from(height);
    let bytes = cells.saturating_mul(u64::from(bits).div_ceil(8));
    if whole && cells > MAX_GRID_CELLS {
        return Err(vec![
            Problem::error(
                loc.clone(),
                format!(
                    "ImageWidth × ImageLength (tags 256, 257) declare {width} × {height} = {cells} \
                     cells; a raster read whole here has at most {MAX_GRID_CELLS}"
                ),
            )
            .with_hint("cut the raster to the survey area plus its margin"),
        ]);
    }
    let ratio = max_expansion(compression);
    if bytes > ratio.saturating_mul(file_len) {
        return Err(fail(format!(
            "ImageWidth × ImageLength (tags 256, 257) declare {width} × {height} cells of {bits} \
             bits ({bytes} bytes), more than a file of {file_len} bytes can hold with \
             Compression (tag 259) {compression} (at most {ratio} times its size)"
        )));
    }
    Ok((compression, bits))
}

/// GDAL_NODATA text to a number: decimal, or `nan`/`inf` in any case, surrounded by spaces.
fn parse_nodata(text: &str) -> Option<f64> {
    let t = text.trim_matches(|c: char| c.is_whitespace() || c == '\0');
    t.parse::<f64>().ok()
}

type Geometry = (f64, f64, f64, f64);

/// (x_min, y_max, dx, dy) of the grid's outer corner and cells, in the frame's units.
fn read_geometry<R: std::io::Read + std::io::Seek>(
    dec: &mut Decoder<R>,
    loc: &Location,
) -> Result<Geometry, Vec<Problem>> {
    let fail = |msg: String| vec![Problem::error(loc.clone(), msg)];
    let f64s = |dec: &mut Decoder<R>, tag: Tag, name: &str| -> Result<Option<Vec<f64>>, _> {
        match dec.find_tag(tag) {
            Ok(None) => Ok(None),
            Ok(Some(v)) => v
                .into_f64_vec()
                .map(Some)
                .map_err(|e| fail(format!("{name} holds no numbers: {e}"))),
            Err(e) => Err(fail(format!("unreadable {name}: {e}"))),
        }
    };
    let scale = f64s(dec, Tag::ModelPixelScaleTag, "ModelPixelScaleTag (33550)")?;
    let ties = f64s(dec, Tag::ModelTiepointTag, "ModelTiepointTag (33922)")?;
    let matrix = f64s(
        dec,
        Tag::ModelTransformationTag,
        "ModelTransformationTag (34264)",
    )?;
    let point = raster_is_point(dec, loc)?;

    let (mut x_min, mut y_max, dx, dy) = match (scale, ties, matrix) {
        (Some(s), Some(t), _) => {
            if s.len() < 2 {
                return Err(fail(format!(
                    "ModelPixelScaleTag (33550) holds {} values, needs at least 2",
                    s.len()
                )));
            }
            if t.len() != 6 {
                return Err(vec![
                    Problem::error(
                        loc.clone(),
                        format!(
                            "ModelTiepointTag (33922) holds {} values: a grid tied by several \
                             control points is not a regular raster",
                            t.len()
                        ),
                    )
                    .with_hint("resample it onto a regular north-up grid first"),
                ]);
            }
            let (dx, dy) = (s[0], s[1]);
            (t[3] - t[0] * dx, t[4] + t[1] * dy, dx, dy)
        }
        (_, _, Some(m)) => {
            if m.len() != 16 {
                return Err(fail(format!(
                    "ModelTransformationTag (34264) holds {} values, needs 16",
                    m.len()
                )));
            }
            if m[1] != 0.0 || m[4] != 0.0 {
                return Err(vec![
                    Problem::error(
                        loc.clone(),
                        "ModelTransformationTag (34264) rotates or shears the grid; only north-up \
                         rasters are read",
                    )
                    .with_hint("resample it onto a north-up grid first"),
                ]);
            }
            (m[3], m[7], m[0], -m[5])
        }
        (None, None, None) => {
            return Err(vec![
                Problem::error(
                    loc.clone(),
                    "no georeferencing: neither ModelPixelScaleTag (33550) with ModelTiepointTag \
                     (33922) nor ModelTransformationTag (34264)",
                )
                .with_hint("a plain image carries no position; write it as a GeoTIFF"),
            ]);
        }
        (Some(_), None, None) => {
            return Err(fail(
                "ModelPixelScaleTag (33550) without ModelTiepointTag (33922): the grid has no \
                 position"
                    .into(),
            ));
        }
        (None, Some(_), None) => {
            return Err(fail(
                "ModelTiepointTag (33922) without ModelPixelScaleTag (33550): the cell size is \
                 unknown"
                    .into(),
            ));
        }
    };
    if !(dx.is_finite() && dx > 0.0 && dy.is_finite() && dy > 0.0) {
        return Err(vec![
            Problem::error(
                loc.clone(),
                format!(
                    "cell size {dx} × {dy} from the georeferencing tags (33550/33922 or 34264): \
                     only north-up grids with positive cell sizes are read"
                ),
            )
            .with_hint("flip the grid to north-up first"),
        ]);
    }
    if point {
        // PixelIsPoint: the tie point is the first cell's centre; move it to the outer corner.
        x_min -= 0.5 * dx;
        y_max += 0.5 * dy;
    }
    if !(x_min.is_finite() && y_max.is_finite()) {
        return Err(fail(format!(
            "grid corner ({x_min}, {y_max}) from the georeferencing tags is not finite"
        )));
    }
    Ok((x_min, y_max, dx, dy))
}

/// The GeoKeyDirectory as (id, value) pairs of the keys stored inline (location 0); `None` when
/// the file has none.
fn geokeys<R: std::io::Read + std::io::Seek>(
    dec: &mut Decoder<R>,
    loc: &Location,
) -> Result<Option<Vec<(u16, u16)>>, Vec<Problem>> {
    let fail = |msg: String| vec![Problem::error(loc.clone(), msg)];
    let dir = match dec.find_tag(Tag::GeoKeyDirectoryTag) {
        Ok(None) => return Ok(None),
        Ok(Some(v)) => v
            .into_u16_vec()
            .map_err(|e| fail(format!("GeoKeyDirectoryTag (34735) holds no shorts: {e}")))?,
        Err(e) => return Err(fail(format!("unreadable GeoKeyDirectoryTag (34735): {e}"))),
    };
    let n = dir.get(3).copied().unwrap_or(0) as usize;
    if dir.len() < 4 || dir.len() < 4 + 4 * n {
        return Err(fail(format!(
            "GeoKeyDirectoryTag (34735) announces {n} keys but holds {} values",
            dir.len()
        )));
    }
    Ok(Some(
        dir[4..4 + 4 * n]
            .chunks_exact(4)
            .filter(|k| k[1] == 0)
            .map(|k| (k[0], k[3]))
            .collect(),
    ))
}

fn raster_is_point<R: std::io::Read + std::io::Seek>(
    dec: &mut Decoder<R>,
    loc: &Location,
) -> Result<bool, Vec<Problem>> {
    let keys = geokeys(dec, loc)?.unwrap_or_default();
    Ok(lookup(&keys, key::GT_RASTER_TYPE) == Some(key::RASTER_PIXEL_IS_POINT))
}

fn lookup(keys: &[(u16, u16)], id: u16) -> Option<u16> {
    keys.iter().find(|k| k.0 == id).map(|k| k.1)
}

/// The EPSG code of the file's frame; `None` when the file states no frame at all.
fn read_crs<R: std::io::Read + std::io::Seek>(
    dec: &mut Decoder<R>,
    loc: &Location,
) -> Result<Option<u32>, Vec<Problem>> {
    let refuse = |msg: String| {
        vec![
            Problem::error(loc.clone(), msg)
                .with_hint("reproject the raster into a frame with an EPSG code, in m or degrees"),
        ]
    };
    let Some(keys) = geokeys(dec, loc)? else {
        return Ok(None);
    };
    let model = lookup(&keys, key::GT_MODEL_TYPE);
    let projected = lookup(&keys, key::PROJECTED_CS_TYPE);
    let geographic = lookup(&keys, key::GEOGRAPHIC_TYPE);
    let code = match (model, projected, geographic) {
        (Some(key::MODEL_PROJECTED), Some(c), _) | (None, Some(c), _) => {
            if let Some(u) = lookup(&keys, key::PROJ_LINEAR_UNITS)
                && u != key::UNIT_METRE
            {
                return Err(refuse(format!(
                    "ProjLinearUnitsGeoKey (3076) is unit {u}, not metres (9001) \
                     (GeoKeyDirectoryTag 34735)"
                )));
            }
            ("ProjectedCSTypeGeoKey (3072)", c)
        }
        (Some(key::MODEL_GEOGRAPHIC), _, Some(c)) | (None, None, Some(c)) => {
            if let Some(u) = lookup(&keys, key::GEOG_ANGULAR_UNITS)
                && !key::UNIT_DEGREES_ACCEPTED.contains(&u)
            {
                return Err(refuse(format!(
                    "GeogAngularUnitsGeoKey (2054) is unit {u}, not degrees (9102) \
                     (GeoKeyDirectoryTag 34735)"
                )));
            }
            ("GeographicTypeGeoKey (2048)", c)
        }
        (None, None, None) => return Ok(None),
        (Some(m), _, _) => {
            return Err(refuse(format!(
                "GTModelTypeGeoKey (1024) is {m} with no EPSG code for that kind of frame \
                 (GeoKeyDirectoryTag 34735); only projected (1) and geographic (2) frames \
                 given by EPSG code are read"
            )));
        }
    };
    let (name, c) = code;
    if c == key::USER_DEFINED || c == 0 {
        return Err(refuse(format!(
            "{name} is {c}: the frame is not given by an EPSG code (GeoKeyDirectoryTag 34735)"
        )));
    }
    Ok(Some(u32::from(c)))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn nodata_spellings() {
        // Spellings GDAL writes into GDAL_NODATA (from memory): plain decimals, "nan", "-inf".
        assert_eq!(parse_nodata("-9999"), Some(-9999.0));
        assert_eq!(parse_nodata("-32768\0"), Some(-32768.0));
        assert!(parse_nodata("nan").unwrap().is_nan());
        assert_eq!(parse_nodata("-inf"), Some(f64::NEG_INFINITY));
        assert_eq!(parse_nodata("none"), None);
    }
}
