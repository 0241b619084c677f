//! Messages to the user on stderr: plain lines, JSON lines for servers (`--json`), nothing with
//! `--quiet`; on a terminal, progress as bars redrawn in place (`indicatif`), cleared before any
//! other message is printed.

use indicatif::{MultiProgress, ProgressBar, ProgressStyle};
use std::io::IsTerminal;
use std::sync::Mutex;
use std::time::Duration;

#[derive(Clone, Copy, Debug)]
pub struct Log {
    pub quiet: bool,
    pub json: bool,
    tty: bool,
}

/// One progress event as the layer received it (or a command reported it).
#[derive(Clone, Copy, Debug)]
struct Step<'a> {
    done: usize,
    total: usize,
    what: &'a str,
    /// The stage's name, for an event that starts a stage.
    stage: Option<&'a str>,
    /// The flight whose stage it is, for a per-flight stage.
    flight: Option<&'a str>,
}

impl Step<'_> {
    /// What the step says: a per-flight stage prefixed by its flight.
    fn text(&self) -> String {
        match self.flight {
            Some(f) => format!("{f}: {}", self.what),
            None => self.what.to_string(),
        }
    }
}

/// The bars on a terminal: the current counter (flights, files, or the survey-wide stages) and,
/// under it, the stage of the current flight.
struct Bars {
    multi: MultiProgress,
    counter: Option<ProgressBar>,
    stage: Option<ProgressBar>,
}

/// The bars being drawn, if any: shared by every copy of [`Log`] and the `tracing` layer.
static BARS: Mutex<Option<Bars>> = Mutex::new(None);

/// How often the bars are redrawn when nothing happens (elapsed time and estimate move on).
const TICK: Duration = Duration::from_millis(200);

/// A style from `template`; the default style if the template is refused (it is a constant).
fn style(template: &str) -> ProgressStyle {
    ProgressStyle::with_template(template)
        .map(|s| s.progress_chars("#>-").tick_chars("|/-\\ "))
        .unwrap_or_else(|_| ProgressStyle::default_bar())
}

/// The counter's look: with an estimate of the time left once one item is done (not for stages,
/// whose lengths differ too much for one).
fn counter_style(done: usize, stages: bool) -> ProgressStyle {
    if stages || done == 0 {
        style("[{bar:24}] {pos}/{len} {elapsed:>4}  {wide_msg}")
    } else {
        style("[{bar:24}] {pos}/{len} {elapsed:>4}, about {eta} left  {wide_msg}")
    }
}

impl Bars {
    fn new() -> Self {
        Self {
            multi: MultiProgress::new(),
            counter: None,
            stage: None,
        }
    }

    /// The counter at `step` (a new counter when its total changes or it goes back).
    fn count(&mut self, step: &Step<'_>) {
        self.end_stage();
        let (done, total) = (step.done as u64, step.total as u64);
        let look = counter_style(step.done, step.stage.is_some());
        if let Some(c) = &self.counter {
            if c.length() != Some(total) || c.position() > done {
                c.reset();
                c.set_length(total);
            }
            c.set_style(look);
            c.set_position(done);
            c.set_message(step.text());
        } else {
            let c = ProgressBar::new(total)
                .with_style(look)
                .with_position(done)
                .with_message(step.text());
            let c = self.multi.insert(0, c);
            c.enable_steady_tick(TICK);
            self.counter = Some(c);
        }
    }

    /// The line under the counter at the per-flight `step`.
    fn stage(&mut self, step: &Step<'_>) {
        let (done, total) = (step.done as u64, step.total as u64);
        if let Some(line) = &self.stage {
            line.set_length(total);
            line.set_position(done);
            line.set_message(step.text());
            line.reset_elapsed();
        } else {
            let line = ProgressBar::new(total)
                .with_style(style("  {spinner} [{pos}/{len}] {elapsed:>4}  {wide_msg}"))
                .with_position(done)
                .with_message(step.text());
            let line = self.multi.add(line);
            line.enable_steady_tick(TICK);
            self.stage = Some(line);
        }
    }

    fn end_stage(&mut self) {
        if let Some(b) = self.stage.take() {
            b.finish_and_clear();
            self.multi.remove(&b);
        }
    }

    fn clear(mut self) {
        self.end_stage();
        if let Some(c) = self.counter.take() {
            c.finish_and_clear();
        }
        let _ = self.multi.clear();
    }
}

/// The bars, also after a panic elsewhere while they were held.
fn bars() -> std::sync::MutexGuard<'static, Option<Bars>> {
    BARS.lock().unwrap_or_else(|e| e.into_inner())
}

impl Log {
    pub fn new(quiet: bool, json: bool) -> Self {
        Self {
            quiet,
            json,
            tty: std::io::stderr().is_terminal(),
        }
    }

    /// Prints `line` on stderr, the bars (if drawn) taken away meanwhile and drawn again below.
    fn line(&self, line: &str) {
        match bars().as_ref() {
            Some(b) => b.multi.suspend(|| eprintln!("{line}")),
            None => eprintln!("{line}"),
        }
    }

    /// An informative message.
    pub fn info(&self, msg: &str) {
        if self.quiet {
            return;
        }
        if self.json {
            let v = serde_json::json!({ "level": "info", "message": msg });
            self.line(&v.to_string());
        } else {
            self.line(msg);
        }
    }

    /// A warning: the run goes on, but the user should know (what was dropped, held or bridged).
    /// Printed unless `--quiet`.
    pub fn warn(&self, msg: &str) {
        if self.quiet {
            return;
        }
        if self.json {
            let v = serde_json::json!({ "level": "warning", "message": msg });
            self.line(&v.to_string());
        } else {
            self.line(&format!("warning: {msg}"));
        }
    }

    /// A located problem, as it shows itself; printed even with `--quiet`.
    fn problem(&self, msg: &str) {
        self.line(msg);
    }

    /// Progress through `total` items: bars redrawn in place on a terminal, plain lines (or JSON
    /// lines) otherwise.
    pub fn progress(&self, done: usize, total: usize, what: &str) {
        self.step(&Step {
            done,
            total,
            what,
            stage: None,
            flight: None,
        });
    }

    /// Shows one progress step: on a terminal the counter (the flights, or the survey-wide stages)
    /// with the current flight's stage under it, all cleared when the counter is full; otherwise
    /// `[done/total] what`, or a JSON line with `--json`.
    fn step(&self, step: &Step<'_>) {
        if self.quiet {
            return;
        }
        if self.json {
            let mut v = serde_json::json!({
                "level": "progress",
                "done": step.done,
                "total": step.total,
                "item": step.text(),
            });
            if let Some(s) = step.stage {
                v["stage"] = s.into();
            }
            if let Some(f) = step.flight {
                v["flight"] = f.into();
            }
            eprintln!("{v}");
        } else if self.tty {
            let mut guard = bars();
            if step.flight.is_some() {
                guard.get_or_insert_with(Bars::new).stage(step);
            } else if step.done >= step.total {
                if let Some(b) = guard.take() {
                    b.clear();
                }
            } else {
                guard.get_or_insert_with(Bars::new).count(step);
            }
        } else {
            eprintln!("[{}/{}] {}", step.done, step.total, step.text());
        }
    }

    /// Takes the bars away (before printing something else directly, or at the end).
    pub fn clear_progress(&self) {
        if let Some(b) = bars().take() {
            b.clear();
        }
    }
}

/// The `tracing` events of the library crates shown as this command shows its own messages:
/// progress (target `gravgrad::progress`) as bars or `[k/n]` lines, a stage inside a flight's span
/// (field `flight`) under the flight's bar; located problems (`gravgrad::problem`) as they show
/// themselves, warnings as `warning: …`, everything else as a plain line; JSON lines with
/// `--json`; nothing but problems with `--quiet`.
struct LogLayer {
    log: Log,
}

/// The fields of one event or span that the layer shows.
#[derive(Default)]
struct Fields {
    message: String,
    done: Option<u64>,
    total: Option<u64>,
    stage: Option<String>,
    flight: Option<String>,
}

impl tracing::field::Visit for Fields {
    fn record_debug(&mut self, field: &tracing::field::Field, value: &dyn std::fmt::Debug) {
        match field.name() {
            "message" => self.message = format!("{value:?}"),
            "stage" => self.stage = Some(format!("{value:?}")),
            "flight" => self.flight = Some(format!("{value:?}")),
            _ => {}
        }
    }

    fn record_str(&mut self, field: &tracing::field::Field, value: &str) {
        match field.name() {
            "message" => self.message = value.to_string(),
            "stage" => self.stage = Some(value.to_string()),
            "flight" => self.flight = Some(value.to_string()),
            _ => {}
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

/// The flight a progress span is about (its field `flight`), kept with the span.
struct FlightName(String);

impl<S> tracing_subscriber::Layer<S> for LogLayer
where
    S: tracing::Subscriber + for<'a> tracing_subscriber::registry::LookupSpan<'a>,
{
    fn on_new_span(
        &self,
        attrs: &tracing::span::Attributes<'_>,
        id: &tracing::span::Id,
        ctx: tracing_subscriber::layer::Context<'_, S>,
    ) {
        if attrs.metadata().target() != gravgrad::run::PROGRESS {
            return;
        }
        let mut f = Fields::default();
        attrs.record(&mut f);
        if let (Some(name), Some(span)) = (f.flight, ctx.span(id)) {
            span.extensions_mut().insert(FlightName(name));
        }
    }

    fn on_event(&self, event: &tracing::Event<'_>, ctx: tracing_subscriber::layer::Context<'_, S>) {
        let mut f = Fields::default();
        event.record(&mut f);
        let meta = event.metadata();
        match meta.target() {
            gravgrad::run::PROGRESS => {
                let n = |v: Option<u64>| usize::try_from(v.unwrap_or(0)).unwrap_or(usize::MAX);
                let flight = ctx.event_scope(event).and_then(|scope| {
                    scope
                        .from_root()
                        .find_map(|s| s.extensions().get::<FlightName>().map(|f| f.0.clone()))
                });
                self.log.step(&Step {
                    done: n(f.done),
                    total: n(f.total),
                    what: &f.message,
                    stage: f.stage.as_deref(),
                    // Only a stage is shown as the flight's.
                    flight: flight.as_deref().filter(|_| f.stage.is_some()),
                });
            }
            gravgrad::run::PROBLEM => self.log.problem(&f.message),
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
