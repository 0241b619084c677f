//! Reader for raw flight logs in CSV (`docs/formats.md`, layout 1).
//!
//! Comma-separated only; `#` comment lines before the header; UTF-8 byte-order mark and CRLF line
//! endings accepted. Rows are numbered as the layout says: the header is row 1, the first data row
//! row 2, comment lines not counted.
//!
//! The file is read in blocks of a few megabytes; each block is cut at line ends into pieces that
//! are parsed in parallel and appended in order, so that memory stays near the size of the parsed
//! table and the result does not depend on the number of threads.

use crate::columns::{self, Expectation, ReadPlan};
use crate::sink::Sink;
use gravgrad_core::limits::{MAX_FLIGHT_ROWS, MAX_FLIGHT_VALUES};
use gravgrad_core::{Location, Problem};
use rayon::prelude::*;
use std::io::Read;
use std::path::Path;

/// Bytes read per block.
const BLOCK: usize = 16 << 20;
/// Smallest piece worth a parallel task.
const MIN_PIECE: usize = 256 << 10;

/// Columns parsed from a file, in the order of the plan's slots, in the file's own units.
#[derive(Debug, Default)]
pub struct RawColumns {
    pub plan: ReadPlan,
    pub values: Vec<Vec<f64>>,
    /// Row number of the first data row in the file's numbering.
    pub first_row: u64,
}

impl RawColumns {
    pub fn n_rows(&self) -> usize {
        self.values.first().map_or(0, Vec::len)
    }
}

/// Reads a CSV flight log into raw columns. Problems in single cells do not stop the read (they are
/// all reported, the cell becomes NaN); a file that cannot be read at all returns only errors.
pub fn read_csv(path: &Path, expect: &Expectation<'_>) -> (Option<RawColumns>, Vec<Problem>) {
    let loc = Location::file(path);
    let input = match crate::input_file::open_regular(path) {
        Ok(f) => f,
        Err(p) => return (None, vec![p]),
    };
    // Read no further than the size taken before reading: a file that grows meanwhile is read as
    // it was when opened.
    let size = input.len;
    read_csv_from(input.file.take(size), size, &loc, expect)
}

/// Reads CSV from any byte source (`size_hint` helps reserve memory; 0 if unknown).
pub fn read_csv_from(
    mut src: impl Read,
    size_hint: u64,
    loc: &Location,
    expect: &Expectation<'_>,
) -> (Option<RawColumns>, Vec<Problem>) {
    let hint = if size_hint > 0 {
        (size_hint as usize).min(BLOCK)
    } else {
        1 << 16
    };
    let mut buf: Vec<u8> = Vec::with_capacity(hint + 4096);
    let mut eof = false;
    // Header: skip BOM and comment lines.
    let header_end = loop {
        if let Some(end) = header_line_end(&buf) {
            break Some(end);
        }
        if eof {
            break None;
        }
        match fill(&mut src, &mut buf, BLOCK) {
            Ok(0) => eof = true,
            Ok(_) => {}
            Err(e) => {
                return (
                    None,
                    vec![Problem::error(loc.clone(), format!("cannot read: {e}"))],
                );
            }
        }
    };
    let (header_start, header_stop, body_start) = match header_end {
        Some(x) => x,
        None => {
            // Whole file consumed without a line end: the header may be the only line.
            let start = skip_preamble(&buf);
            if start >= buf.len() || buf[start..].iter().all(|b| b.is_ascii_whitespace()) {
                return (
                    None,
                    vec![Problem::error(
                        loc.clone().with_row(1),
                        "the file is empty: expected a header row and data rows",
                    )],
                );
            }
            (start, buf.len(), buf.len())
        }
    };
    let header_text =
        String::from_utf8_lossy(trim_cr(&buf[header_start..header_stop])).into_owned();
    let header: Vec<String> = header_text
        .split(',')
        .map(|f| unquote(f.trim()).to_string())
        .collect();
    let header_loc = loc.clone().with_row(1);
    if header.len() == 1 {
        for (d, name) in [(';', "semicolons"), ('\t', "tabs"), ('|', "vertical bars")] {
            if header_text.contains(d) {
                return (
                    None,
                    vec![
                        Problem::error(header_loc, format!("the header has one column; the file seems to be separated by {name}"))
                            .with_hint("raw flight logs are comma-separated; re-export with commas"),
                    ],
                );
            }
        }
    }
    let plan = match columns::plan(&header, expect, &header_loc) {
        Ok(p) => p,
        Err(problems) => {
            return (
                None,
                problems
                    .into_iter()
                    .map(|mut p| {
                        p.location.row = Some(1);
                        p
                    })
                    .collect(),
            );
        }
    };
    let n_fields = header.len();
    let mut target = vec![usize::MAX; n_fields];
    let mut required = vec![false; plan.slots.len()];
    for (k, s) in plan.slots.iter().enumerate() {
        target[s.index] = k;
        required[k] = s.required;
    }
    let names: Vec<&str> = plan.slots.iter().map(|s| s.name.as_str()).collect();
    let parser = RowParser {
        n_fields,
        target: &target,
        required: &required,
        names: &names,
    };

    let mut values: Vec<Vec<f64>> = vec![Vec::new(); plan.slots.len()];
    let mut sink = Sink::new();
    let mut blank_rows: Vec<u64> = Vec::new();
    let mut rows_done: u64 = 0;
    let mut reserved = false;
    buf.drain(..body_start);
    loop {
        if !eof {
            match fill(&mut src, &mut buf, BLOCK) {
                Ok(0) => eof = true,
                Ok(_) => {}
                Err(e) => {
                    return (
                        None,
                        vec![Problem::error(loc.clone(), format!("cannot read: {e}"))],
                    );
                }
            }
        }
        // The complete lines of the buffer; at the end of the file, everything.
        let cut = if eof {
            buf.len()
        } else {
            memchr::memrchr(b'\n', &buf).map_or(0, |i| i + 1)
        };
        if cut == 0 && !eof {
            continue;
        }
        let block = &buf[..cut];
        if !reserved && !block.is_empty() {
            let lines = memchr::memchr_iter(b'\n', block).count().max(1) as u64;
            let est = (size_hint as f64 / (block.len() as f64 / lines as f64) * 1.02) as usize + 16;
            // A row holds at least one byte per field (its separators and line end), whatever the
            // first block's lines suggest.
            let most = (size_hint / n_fields.max(1) as u64).min(MAX_FLIGHT_ROWS) as usize + 16;
            for v in values.iter_mut() {
                v.reserve(est.min(most));
            }
            reserved = true;
        }
        let pieces = split_pieces(block);
        let outs: Vec<PieceOut> = pieces.par_iter().map(|p| parser.parse(p)).collect();
        for out in outs {
            for (v, o) in values.iter_mut().zip(out.values) {
                v.extend_from_slice(&o);
            }
            blank_rows.extend(out.blank.iter().map(|r| r + rows_done));
            sink.merge_shifted(out.sink, rows_done);
            rows_done += out.rows;
        }
        let n_values = rows_done.saturating_mul(plan.slots.len() as u64);
        if rows_done > MAX_FLIGHT_ROWS || n_values > MAX_FLIGHT_VALUES {
            return (
                None,
                vec![
                    Problem::error(
                        loc.clone().with_row(rows_done + 1),
                        format!(
                            "more than {MAX_FLIGHT_ROWS} rows or {MAX_FLIGHT_VALUES} values \
                             ({} columns read): the limit of one flight log",
                            plan.slots.len()
                        ),
                    )
                    .with_hint("split the flight into several logs"),
                ],
            );
        }
        buf.drain(..cut);
        if eof {
            break;
        }
    }
    // Blank lines at the very end are harmless; anywhere else they are an error.
    let mut n = rows_done;
    while let Some(&last) = blank_rows.last() {
        if last + 1 == n {
            blank_rows.pop();
            n -= 1;
        } else {
            break;
        }
    }
    for v in values.iter_mut() {
        v.truncate(n as usize);
        v.shrink_to_fit();
    }
    for &r in &blank_rows {
        sink.add("blank", "", r, || {
            Problem::error(Location::default(), "empty row inside the data")
                .with_hint("remove the empty line")
        });
    }
    let mut problems = sink.into_problems(loc, 2);
    if n == 0 {
        problems.push(Problem::error(
            loc.clone().with_row(2),
            "the header has no data rows under it",
        ));
    }
    (
        Some(RawColumns {
            plan,
            values,
            first_row: 2,
        }),
        problems,
    )
}

/// Reads up to `want` more bytes onto the end of `buf`; returns the number read (0 at end of file).
fn fill(src: &mut impl Read, buf: &mut Vec<u8>, want: usize) -> std::io::Result<usize> {
    src.take(want as u64).read_to_end(buf)
}

/// Byte offset after the BOM and the `#` comment lines.
fn skip_preamble(buf: &[u8]) -> usize {
    let mut i = if buf.starts_with(&[0xEF, 0xBB, 0xBF]) {
        3
    } else {
        0
    };
    while i < buf.len() && buf[i] == b'#' {
        match memchr::memchr(b'\n', &buf[i..]) {
            Some(k) => i += k + 1,
            None => return buf.len(),
        }
    }
    i
}

/// (start, end, next) of the header line once it is complete in `buf`.
fn header_line_end(buf: &[u8]) -> Option<(usize, usize, usize)> {
    let start = skip_preamble(buf);
    if start >= buf.len() {
        return None;
    }
    memchr::memchr(b'\n', &buf[start..]).map(|k| (start, start + k, start + k + 1))
}

fn trim_cr(line: &[u8]) -> &[u8] {
    line.strip_suffix(b"\r").unwrap_or(line)
}

fn unquote(s: &str) -> &str {
    s.strip_prefix('"')
        .and_then(|t| t.strip_suffix('"'))
        .unwrap_or(s)
}

/// Cuts a block of complete lines into pieces at line ends, for parallel parsing.
fn split_pieces(block: &[u8]) -> Vec<&[u8]> {
    let n = rayon::current_num_threads().max(1) * 4;
    let target = (block.len() / n).max(MIN_PIECE);
    let mut pieces = Vec::new();
    let mut start = 0;
    while start < block.len() {
        let want = start + target;
        if want >= block.len() {
            pieces.push(&block[start..]);
            break;
        }
        let end = memchr::memchr(b'\n', &block[want..]).map_or(block.len(), |k| want + k + 1);
        pieces.push(&block[start..end]);
        start = end;
    }
    pieces
}

struct RowParser<'a> {
    n_fields: usize,
    /// Slot index per field of the file, `usize::MAX` for ignored fields.
    target: &'a [usize],
    required: &'a [bool],
    names: &'a [&'a str],
}

struct PieceOut {
    values: Vec<Vec<f64>>,
    rows: u64,
    blank: Vec<u64>,
    sink: Sink,
}

impl RowParser<'_> {
    /// Parses a piece of complete lines; rows in the result are relative to the piece.
    fn parse(&self, piece: &[u8]) -> PieceOut {
        let n_slots = self.required.len();
        let est_rows = memchr::memchr_iter(b'\n', piece).count() + 1;
        let mut values: Vec<Vec<f64>> =
            (0..n_slots).map(|_| Vec::with_capacity(est_rows)).collect();
        let mut sink = Sink::new();
        let mut blank = Vec::new();
        let mut row: u64 = 0;
        let mut start = 0;
        let mut seen = vec![false; n_slots];
        while start < piece.len() {
            let end = memchr::memchr(b'\n', &piece[start..]).map_or(piece.len(), |k| start + k);
            let line = trim_cr(&piece[start..end]);
            start = end + 1;
            if line.iter().all(|b| *b == b' ' || *b == b'\t') {
                blank.push(row);
                for v in values.iter_mut() {
                    v.push(f64::NAN);
                }
                row += 1;
                continue;
            }
            seen.iter_mut().for_each(|s| *s = false);
            let mut field = 0usize;
            let mut fstart = 0usize;
            loop {
                let fend = memchr::memchr(b',', &line[fstart..]).map_or(line.len(), |k| fstart + k);
                if field < self.n_fields {
                    let slot = self.target[field];
                    if slot != usize::MAX {
                        let cell = &line[fstart..fend];
                        values[slot].push(self.cell(cell, slot, row, &mut sink));
                        seen[slot] = true;
                    }
                }
                field += 1;
                if fend >= line.len() {
                    break;
                }
                fstart = fend + 1;
            }
            if field != self.n_fields {
                let (got, want) = (field, self.n_fields);
                sink.add("fields", "", row, || {
                    let what = if got < want {
                        "a truncated or short row"
                    } else {
                        "a row with extra cells"
                    };
                    Problem::error(
                        Location::default(),
                        format!("{what}: {got} cells where the header has {want}"),
                    )
                    .with_hint("every row needs one value per header column, separated by commas")
                });
                for (k, s) in seen.iter().enumerate() {
                    if !s {
                        values[k].push(f64::NAN);
                    }
                }
            }
            row += 1;
        }
        PieceOut {
            values,
            rows: row,
            blank,
            sink,
        }
    }

    fn cell(&self, cell: &[u8], slot: usize, row: u64, sink: &mut Sink) -> f64 {
        let mut c = cell;
        while let [b' ' | b'\t', rest @ ..] = c {
            c = rest;
        }
        while let [rest @ .., b' ' | b'\t'] = c {
            c = rest;
        }
        if let [b'"', inner @ .., b'"'] = c {
            c = inner;
        }
        if c.is_empty() {
            if self.required[slot] {
                sink.add("empty", self.names[slot], row, || {
                    Problem::error(
                        Location::default().with_column(self.names[slot]),
                        "empty cell in a required column",
                    )
                });
            }
            return f64::NAN;
        }
        match fast_float2::parse::<f64, _>(c) {
            Ok(v) => v,
            Err(_) => {
                sink.add("number", self.names[slot], row, || {
                    let shown: String = String::from_utf8_lossy(c).chars().take(40).collect();
                    Problem::error(
                        Location::default().with_column(self.names[slot]),
                        format!("expected a number, found `{shown}`"),
                    )
                });
                f64::NAN
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    const HEAD: &str = "time,lat,lon,height,roll,pitch,heading,wx,wy,wz,fx,fy,fz";

    fn row(t: f64) -> String {
        format!("{t},-31.5,140.2,350,0.1,-0.2,90,0,0,0,0.01,0.02,-9.79")
    }

    fn read(text: &str) -> (Option<RawColumns>, Vec<Problem>) {
        read_csv_from(
            text.as_bytes(),
            text.len() as u64,
            &Location::file("t.csv"),
            &Expectation::default(),
        )
    }

    #[test]
    fn reads_values_and_numbers_rows_from_the_header() {
        let text = format!("# comment\n{HEAD}\n{}\n{}\n", row(1.0), row(1.02));
        let (cols, problems) = read(&text);
        assert!(problems.is_empty(), "{problems:?}");
        let cols = cols.unwrap();
        assert_eq!(cols.values[0], vec![1.0, 1.02]);
        assert_eq!(cols.values[12], vec![-9.79, -9.79]);
    }

    #[test]
    fn bom_and_crlf_are_accepted() {
        let text = format!("\u{feff}{HEAD}\r\n{}\r\n{}", row(1.0), row(1.02));
        let (cols, problems) = read(&text);
        assert!(problems.is_empty(), "{problems:?}");
        assert_eq!(cols.unwrap().values[0], vec![1.0, 1.02]);
    }

    #[test]
    fn text_in_a_number_is_located() {
        let text = format!(
            "{HEAD}\n{}\n{}\n",
            row(1.0),
            row(1.02).replace("-9.79", "abc")
        );
        let (_, problems) = read(&text);
        assert_eq!(problems.len(), 1);
        assert_eq!(problems[0].location.row, Some(3));
        assert_eq!(problems[0].location.column.as_deref(), Some("fz"));
    }

    #[test]
    fn pieces_cover_the_block_exactly() {
        let text: String = (0..50_000)
            .map(|i| format!("{}\n", row(i as f64)))
            .collect();
        let pieces = split_pieces(text.as_bytes());
        assert_eq!(pieces.iter().map(|p| p.len()).sum::<usize>(), text.len());
        assert!(pieces.iter().all(|p| p.ends_with(b"\n")));
    }
}
