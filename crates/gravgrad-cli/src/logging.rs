//! Messages to the user on stderr: plain lines, JSON lines for servers (`--json`), nothing with
//! `--quiet`; an in-place counter when stderr is a terminal.

use std::io::{IsTerminal, Write};

#[derive(Clone, Copy, Debug)]
pub struct Log {
    pub quiet: bool,
    pub json: bool,
    tty: bool,
}

impl Log {
    pub fn new(quiet: bool, json: bool) -> Self {
        Self {
            quiet,
            json,
            tty: std::io::stderr().is_terminal(),
        }
    }

    /// An informative message.
    pub fn info(&self, msg: &str) {
        if self.quiet {
            return;
        }
        self.clear_progress();
        if self.json {
            let v = serde_json::json!({ "level": "info", "message": msg });
            eprintln!("{v}");
        } else {
            eprintln!("{msg}");
        }
    }

    /// A warning: the run goes on, but the user should know (what was dropped, held or bridged).
    /// Printed unless `--quiet`.
    pub fn warn(&self, msg: &str) {
        if self.quiet {
            return;
        }
        self.clear_progress();
        if self.json {
            let v = serde_json::json!({ "level": "warning", "message": msg });
            eprintln!("{v}");
        } else {
            eprintln!("warning: {msg}");
        }
    }

    /// Progress through `total` items: a counter redrawn in place on a terminal, plain lines
    /// (or JSON lines) otherwise.
    pub fn progress(&self, done: usize, total: usize, what: &str) {
        if self.quiet {
            return;
        }
        if self.json {
            let v = serde_json::json!({ "level": "progress", "done": done, "total": total, "item": what });
            eprintln!("{v}");
        } else if self.tty {
            let width = 24;
            let filled = (done * width)
                .checked_div(total)
                .unwrap_or(width)
                .min(width);
            let bar: String = "#".repeat(filled) + &"-".repeat(width - filled);
            eprint!("\r\x1b[2K[{bar}] {done}/{total} {what}");
            let _ = std::io::stderr().flush();
        } else {
            eprintln!("[{done}/{total}] {what}");
        }
    }

    /// Ends an in-place progress line.
    pub fn clear_progress(&self) {
        if self.tty && !self.json && !self.quiet {
            eprint!("\r\x1b[2K");
        }
    }
}
