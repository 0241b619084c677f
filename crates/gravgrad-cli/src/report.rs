//! Plain-text rendering of check reports for a terminal or a log file.

use gravgrad_core::Severity;
use gravgrad_ingest::check::{FileKind, FileReport, FlightReport};
use std::fmt::Write;

/// Renders reports as text, one block per file, a summary line at the end.
pub fn render(reports: &[FileReport]) -> String {
    let mut s = String::new();
    for r in reports {
        let kind = match r.kind {
            FileKind::Flight => "flight log",
            FileKind::Navigation => "navigation table",
            FileKind::Instrument => "instrument",
            FileKind::Recipe => "recipe",
        };
        let _ = writeln!(s, "{} ({kind})", r.file.display());
        if let Some(o) = &r.observability {
            let seen: Vec<&str> = o
                .observed
                .iter()
                .filter(|(_, ok)| *ok)
                .map(|(n, _)| n.as_str())
                .collect();
            let _ = writeln!(
                s,
                "  observes     {} (rank {} of {})",
                if seen.is_empty() {
                    "nothing".to_string()
                } else {
                    seen.join(" ")
                },
                o.rank,
                o.unknowns
            );
        }
        for f in &r.flights {
            flight_block(&mut s, f);
        }
        let file_problems = &r.problems;
        if !file_problems.is_empty() {
            for p in file_problems {
                let _ = writeln!(s, "  {p}");
            }
        }
        let (e, w) = count(r.all_problems());
        let verdict = if e > 0 {
            format!("{e} error{}", plural(e))
        } else {
            "ok".to_string()
        };
        let warn = if w > 0 {
            format!(", {w} warning{}", plural(w))
        } else {
            String::new()
        };
        let _ = writeln!(s, "  verdict      {verdict}{warn}\n");
    }
    let bad = reports.iter().filter(|r| r.has_errors()).count();
    let _ = writeln!(
        s,
        "{} file{} checked, {} with errors",
        reports.len(),
        plural(reports.len()),
        bad
    );
    s
}

fn flight_block(s: &mut String, f: &FlightReport) {
    if let Some(part) = &f.source.part {
        let _ = writeln!(s, "  flight       {part}");
    }
    let _ = write!(s, "  rows         {}", f.rows);
    if let Some(tb) = &f.time_base {
        let _ = write!(
            s,
            ", {:.1} s at {:.3} Hz (estimated {:.3} Hz)",
            tb.duration_s(),
            tb.rate_hz,
            tb.estimated_rate_hz
        );
    }
    let _ = writeln!(s, ", {:.1} MB in memory", f.table_bytes as f64 / 1e6);
    let _ = writeln!(
        s,
        "  channels     {}: {}",
        f.channels.len(),
        f.channels.join(" ")
    );
    let _ = writeln!(s, "  pairs        {}: {}", f.pairs.len(), f.pairs.join(" "));
    let auto = f.lines.first().is_some_and(|l| l.found_automatically);
    let _ = writeln!(
        s,
        "  lines        {}{}",
        f.lines.len(),
        if auto {
            " (found from heading and straightness)"
        } else {
            ""
        }
    );
    for l in &f.lines {
        let _ = writeln!(
            s,
            "    line {:>6} part {}  rows {}–{}  {:7.1} s  {:6.2} km  track {:5.1}°  off-chord ≤ {:.0} m",
            l.line,
            l.part,
            l.start as u64 + f.first_row,
            l.end as u64 - 1 + f.first_row,
            l.end_s - l.start_s,
            l.length_m / 1000.0,
            l.track_deg,
            l.max_deviation_m
        );
    }
    let _ = writeln!(s, "  gaps         {}", f.gaps.len());
    for p in &f.problems {
        let _ = writeln!(s, "  {p}");
    }
}

fn count<'a>(ps: impl Iterator<Item = &'a gravgrad_core::Problem>) -> (usize, usize) {
    ps.fold((0, 0), |(e, w), p| match p.severity {
        Severity::Error => (e + 1, w),
        Severity::Warning => (e, w + 1),
    })
}

fn plural(n: usize) -> &'static str {
    if n == 1 { "" } else { "s" }
}
