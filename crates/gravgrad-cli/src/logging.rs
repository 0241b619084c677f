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

/// The `tracing` events of the library crates shown as this command shows its own messages:
/// progress (target `gravgrad::progress`) as the counter, located problems (`gravgrad::problem`)
/// as they show themselves, warnings as `warning: …`, everything else as a plain line; JSON lines
/// with `--json`; nothing but problems with `--quiet`.
struct LogLayer {
    log: Log,
}

/// The fields of one event that the layer shows.
#[derive(Default)]
struct Fields {
    message: String,
    done: Option<u64>,
    total: Option<u64>,
}

impl tracing::field::Visit for Fields {
    fn record_debug(&mut self, field: &tracing::field::Field, value: &dyn std::fmt::Debug) {
        if field.name() == "message" {
            self.message = format!("{value:?}");
        }
    }

    fn record_str(&mut self, field: &tracing::field::Field, value: &str) {
        if field.name() == "message" {
            self.message = value.to_string();
        }
    }

    fn record_u64(&mut self, field: &tracing::field::Field, value: u64) {
        match field.name() {
            "done" => self.done = Some(value),
            "total" => self.total = Some(value),
            _ => {}
        }
    }
}

impl<S: tracing::Subscriber> tracing_subscriber::Layer<S> for LogLayer {
    fn on_event(
        &self,
        event: &tracing::Event<'_>,
        _ctx: tracing_subscriber::layer::Context<'_, S>,
    ) {
        let mut f = Fields::default();
        event.record(&mut f);
        let meta = event.metadata();
        match meta.target() {
            gravgrad::run::PROGRESS => {
                let n = |v: Option<u64>| usize::try_from(v.unwrap_or(0)).unwrap_or(usize::MAX);
                self.log.progress(n(f.done), n(f.total), &f.message);
            }
            gravgrad::run::PROBLEM => {
                self.log.clear_progress();
                eprintln!("{}", f.message);
            }
            _ if *meta.level() <= tracing::Level::WARN => self.log.warn(&f.message),
            _ => self.log.info(&f.message),
        }
    }
}

/// Shows the library crates' messages through `log` from now on. `RUST_LOG` selects which (the
/// usual `target=level` list, e.g. `warn` or `gravgrad=debug`); default: `info` and above.
pub fn install(log: Log) {
    use tracing_subscriber::layer::SubscriberExt;
    let default: tracing_subscriber::filter::Targets = "info".parse().unwrap_or_default();
    let filter = match std::env::var("RUST_LOG") {
        Ok(spec) if !spec.trim().is_empty() => spec.parse().unwrap_or_else(|e| {
            log.warn(&format!(
                "RUST_LOG=`{spec}` is not a list of `target=level` ({e}); showing `info`"
            ));
            default.clone()
        }),
        _ => default,
    };
    let subscriber = tracing_subscriber::registry()
        .with(filter)
        .with(LogLayer { log });
    // A second call (the demo runs several commands) keeps the first subscriber.
    let _ = tracing::subscriber::set_global_default(subscriber);
}
