//! Opening an input file so that its size is known before anything is read.
//!
//! Every reader opens its file here: the path (symlinks followed) must name a regular file, whose
//! size is taken from the open handle before the first byte is read. A device (`/dev/zero`), a
//! named pipe, a socket or a folder has no size to check declared counts against, and reading one
//! may never end; it is refused with the file named (`docs/reliability.md`).

use gravgrad_core::{Location, Problem};
use std::fs::File;
use std::path::Path;

/// An open regular file and its size in bytes.
#[derive(Debug)]
pub struct InputFile {
    pub file: File,
    pub len: u64,
}

/// Opens `path` for reading if it is a regular file; the error names the file and what it is.
pub fn open_regular(path: &Path) -> Result<InputFile, Problem> {
    let loc = Location::file(path);
    let file =
        File::open(path).map_err(|e| Problem::error(loc.clone(), format!("cannot open: {e}")))?;
    let meta = file
        .metadata()
        .map_err(|e| Problem::error(loc.clone(), format!("cannot read the file's size: {e}")))?;
    if !meta.is_file() {
        return Err(not_regular(loc, &meta));
    }
    Ok(InputFile {
        file,
        len: meta.len(),
    })
}

/// Reads a regular text file of at most `max_len` bytes whole; the error names the file and its
/// size.
pub fn read_text(path: &Path, max_len: u64) -> Result<String, Problem> {
    use std::io::Read;
    let loc = Location::file(path);
    let input = open_regular(path)?;
    if input.len > max_len {
        return Err(Problem::error(
            loc,
            format!(
                "the file is {} bytes long; a text file read here is at most {max_len} bytes",
                input.len
            ),
        ));
    }
    let mut bytes = Vec::new();
    input
        .file
        .take(max_len + 1)
        .read_to_end(&mut bytes)
        .map_err(|e| Problem::error(loc.clone(), format!("cannot read: {e}")))?;
    if bytes.len() as u64 > max_len {
        return Err(Problem::error(
            loc,
            format!("the file grew past {max_len} bytes while being read"),
        ));
    }
    String::from_utf8(bytes).map_err(|e| {
        Problem::error(
            loc,
            format!(
                "not UTF-8 text: invalid byte at offset {}",
                e.utf8_error().valid_up_to()
            ),
        )
    })
}

fn not_regular(loc: Location, meta: &std::fs::Metadata) -> Problem {
    use std::os::unix::fs::FileTypeExt;
    let t = meta.file_type();
    let what = if t.is_dir() {
        "a folder"
    } else if t.is_char_device() || t.is_block_device() {
        "a device"
    } else if t.is_fifo() {
        "a named pipe"
    } else if t.is_socket() {
        "a socket"
    } else {
        "not a regular file"
    };
    Problem::error(
        loc,
        format!("{what}, expected a regular file whose size is known before it is read"),
    )
    .with_hint("copy the data into a file and name that file")
}
