//! Stated limits on what an input file may declare, checked by every reader before it allocates.
//!
//! A binary file states its own sizes (rows, row groups, dimensions, image width and height), and a
//! damaged or hostile file can state anything. The rule every reader follows (`docs/reliability.md`):
//! before memory is reserved for what a file declares, the declared size is checked
//!
//! 1. against the file's size on disk: decoded bytes may exceed the stored bytes only by the
//!    largest expansion the file's encoding can give ([`decoded_fits`]), and
//! 2. against the limit stated here for that kind of data,
//!
//! and a violation is an error naming the file, what it declares and what it can hold. The limits
//! are in values (8 bytes each once read as f64) or bytes, as each constant says.

/// Largest number of rows one flight log may hold (at 50 Hz, about 186 hours).
pub const MAX_FLIGHT_ROWS: u64 = 1 << 25;

/// Largest number of values (rows × columns read) one flight log may hold: 1 GiB as f64.
pub const MAX_FLIGHT_VALUES: u64 = 1 << 27;

/// Largest number of cells of one raster read whole (a terrain model, a grid): 8192 × 8192,
/// 512 MiB as f64.
pub const MAX_GRID_CELLS: u64 = 1 << 26;

/// Decoded bytes a flight log may give per byte stored on disk (Parquet, HDF5). Logged
/// measurements are noise in their low bits and compress by a factor of a few at most; a file that
/// declares more than this expansion declares data it does not hold.
pub const MAX_LOG_EXPANSION: u64 = 64;

/// Decoded bytes any file may declare whatever its size, so that small files of constant columns
/// (tests, short calibration logs) are never refused by the expansion bound: 4 MiB.
pub const SMALL_FILE_ALLOWANCE: u64 = 4 << 20;

/// Largest file read whole into memory before it is parsed (HDF5 logs): 1 GiB.
pub const MAX_WHOLE_FILE_BYTES: u64 = 1 << 30;

/// Largest Parquet footer (the file's metadata) decoded: 64 MiB. A footer takes a few times its
/// stored size once decoded; 20,000 row groups of 18 columns written by pyarrow have a 39 MB footer.
pub const MAX_PARQUET_FOOTER_BYTES: u64 = 64 << 20;

/// Largest Parquet page a flight log may declare, decompressed: 288 MiB (9 × [`MAX_FLIGHT_ROWS`]
/// bytes). The largest page a log inside the limits can need holds a whole column of
/// [`MAX_FLIGHT_ROWS`] 8-byte values in one page (writers cut pages at about 1 MiB; a writer that
/// does not cut them writes one page per column chunk), plus its definition levels at less than a
/// byte per value. The `parquet` crate reserves a page's declared size before decompressing it; a
/// page header may declare up to 2 GiB.
pub const MAX_PARQUET_PAGE_BYTES: u64 = 9 * MAX_FLIGHT_ROWS;

/// Largest TOML file read (recipes, instrument files, calibration files): 16 MiB.
pub const MAX_TEXT_FILE_BYTES: u64 = 16 << 20;

/// Whether `decoded_bytes` can come from a file of `file_len` bytes whose encoding expands its
/// data at most `expansion` times: `decoded ≤ expansion · file_len + SMALL_FILE_ALLOWANCE`.
pub fn decoded_fits(decoded_bytes: u64, file_len: u64, expansion: u64) -> bool {
    decoded_bytes
        <= expansion
            .saturating_mul(file_len)
            .saturating_add(SMALL_FILE_ALLOWANCE)
}

/// The most decoded bytes a file of `file_len` bytes may declare at `expansion`.
pub fn decoded_bound(file_len: u64, expansion: u64) -> u64 {
    expansion
        .saturating_mul(file_len)
        .saturating_add(SMALL_FILE_ALLOWANCE)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn expansion_bound_and_allowance() {
        // 17 KB declaring 2e8 f64 rows (the tester's HDF5 case, issue 16): 1.6 GB > 64·17 KB + 4 MiB.
        assert!(!decoded_fits(200_000_000 * 8, 17_000, MAX_LOG_EXPANSION));
        // Any file may declare up to the allowance.
        assert!(decoded_fits(SMALL_FILE_ALLOWANCE, 0, MAX_LOG_EXPANSION));
        assert!(!decoded_fits(
            SMALL_FILE_ALLOWANCE + 1,
            0,
            MAX_LOG_EXPANSION
        ));
        // Saturates instead of overflowing.
        assert!(decoded_fits(u64::MAX, u64::MAX, u64::MAX));
        assert_eq!(decoded_bound(1000, 2), 2000 + SMALL_FILE_ALLOWANCE);
    }
}
