//! `qc/report.html`: one self-contained page (inline CSS and SVG drawn here; no script, no font, no
//! image, nothing fetched) with the verdict of every line, the map of the lines coloured by verdict,
//! the crossover statistics before and after levelling, the calibration of every flight (mode,
//! warnings, held terms, the pairs' coefficients), the motion-correlation test per line and
//! component, the noise spectra and each line's Gzz profile at every stage. Same input, same bytes:
//! no time stamp, no path, numbers formatted at fixed precision, everything in the order of the lines.

use gravgrad_calibrate::file::PairEntry;
use gravgrad_core::units::EOTVOS;
use gravgrad_lines::QcSettings;
use gravgrad_lines::spectrum::welch;
use gravgrad_survey::calibration_report::{baseline_of, baselines, figures};
use gravgrad_survey::line_stages::{self, LineStages};
use gravgrad_survey::processed::Processed;
use gravgrad_survey::qc::{
    CalibrationHealth, LineQc, NAMES, health_counts, worst_motion, worst_noise,
};
use std::fmt::Write;

/// Colours of the verdicts (ours: a teal for pass, a brick red for fail).
const PASS: &str = "#1f7a6d";
const FAIL: &str = "#b5432a";
const INK: &str = "#222";
const GRID: &str = "#ddd";

const CSS: &str = "body{font-family:sans-serif;margin:1.5em auto;max-width:980px;color:#222;line-height:1.4}
h1{font-size:1.5em;margin-bottom:0.2em}h2{font-size:1.15em;margin-top:1.6em;border-bottom:1px solid #ccc}
h3{font-size:1em;margin:1.2em 0 0.2em}
table{border-collapse:collapse;font-size:0.85em;margin:0.5em 0}
th,td{border:1px solid #ccc;padding:2px 6px;text-align:right;vertical-align:top}
th{background:#f3f3f3}td.l,th.l{text-align:left}
td.pass{color:#fff;background:#1f7a6d;text-align:center}td.fail{color:#fff;background:#b5432a;text-align:center}
svg{display:block;margin:0.4em 0}svg text{font-family:sans-serif}
.note{font-size:0.85em;color:#555}footer{margin-top:2em;padding-top:0.5em;border-top:1px solid #ccc;font-size:0.85em;color:#555}";

fn esc(s: &str) -> String {
    s.replace('&', "&amp;")
        .replace('<', "&lt;")
        .replace('>', "&gt;")
        .replace('"', "&quot;")
}

fn fmt_opt(v: Option<f64>, digits: usize) -> String {
    match v {
        Some(x) if x.is_finite() => format!("{x:.digits$}"),
        _ => "–".into(),
    }
}

/// About `n` round tick values covering [lo, hi].
fn ticks(lo: f64, hi: f64, n: usize) -> Vec<f64> {
    if !(lo.is_finite() && hi.is_finite()) || hi <= lo {
        return vec![lo];
    }
    let raw = (hi - lo) / n.max(1) as f64;
    let mag = 10f64.powf(raw.log10().floor());
    let step = [1.0, 2.0, 2.5, 5.0, 10.0]
        .iter()
        .map(|m| m * mag)
        .find(|s| *s >= raw)
        .unwrap_or(10.0 * mag);
    let (first, last) = ((lo / step).ceil(), (hi / step).floor());
    // A range far from zero against its width (values near 1e300 differing in their last digits)
    // leaves tick numbers beyond what an integer counts exactly: the ends alone then.
    if !(first.abs() < MAX_TICK_INDEX
        && last.abs() < MAX_TICK_INDEX
        && last - first <= 4.0 * n.max(1) as f64)
    {
        return vec![lo, hi];
    }
    (first as i64..=last as i64)
        .map(|k| k as f64 * step)
        .collect()
}

/// Largest tick number `ticks` counts (well inside the integers an f64 holds exactly).
const MAX_TICK_INDEX: f64 = 1e15;

fn tick_label(v: f64, step: f64) -> String {
    let digits = if step >= 1.0 {
        0
    } else {
        (-step.log10().floor()) as usize
    };
    let s = format!("{v:.digits$}");
    if s.starts_with('-') && s[1..].chars().all(|c| c == '0' || c == '.') {
        s[1..].to_string()
    } else {
        s
    }
}

/// Min–max decimation of (x, y) into at most `2·buckets` points, keeping spikes; NaN breaks lines.
fn decimate(x: &[f64], y: &[f64], buckets: usize) -> Vec<Vec<(f64, f64)>> {
    let n = x.len().min(y.len());
    let mut runs: Vec<Vec<(f64, f64)>> = Vec::new();
    let mut cur: Vec<(f64, f64)> = Vec::new();
    let per = n.div_ceil(buckets.max(1)).max(1);
    let mut i = 0;
    while i < n {
        let end = (i + per).min(n);
        let mut lo: Option<(f64, f64)> = None;
        let mut hi: Option<(f64, f64)> = None;
        let mut broken = false;
        for k in i..end {
            if !(x[k].is_finite() && y[k].is_finite()) {
                broken = true;
                continue;
            }
            if lo.is_none_or(|l| y[k] < l.1) {
                lo = Some((x[k], y[k]));
            }
            if hi.is_none_or(|h| y[k] > h.1) {
                hi = Some((x[k], y[k]));
            }
        }
        if broken && !cur.is_empty() && per == 1 {
            runs.push(std::mem::take(&mut cur));
        }
        match (lo, hi) {
            (Some(a), Some(b)) if a.0 <= b.0 => {
                cur.push(a);
                if b != a {
                    cur.push(b);
                }
            }
            (Some(a), Some(b)) => {
                cur.push(b);
                cur.push(a);
            }
            _ => {
                if !cur.is_empty() {
                    runs.push(std::mem::take(&mut cur));
                }
            }
        }
        i = end;
    }
    if !cur.is_empty() {
        runs.push(cur);
    }
    runs
}

/// A plotting frame: data ranges mapped to a pixel box.
struct Frame {
    left: f64,
    top: f64,
    width: f64,
    height: f64,
    x: (f64, f64),
    y: (f64, f64),
    log: bool,
}

impl Frame {
    fn px(&self, x: f64) -> f64 {
        let (a, b, v) = if self.log {
            (self.x.0.log10(), self.x.1.log10(), x.log10())
        } else {
            (self.x.0, self.x.1, x)
        };
        self.left + (v - a) / (b - a) * self.width
    }
    fn py(&self, y: f64) -> f64 {
        let (a, b, v) = if self.log {
            (self.y.0.log10(), self.y.1.log10(), y.log10())
        } else {
            (self.y.0, self.y.1, y)
        };
        self.top + self.height - (v - a) / (b - a) * self.height
    }
    fn polyline(&self, pts: &[(f64, f64)], colour: &str, width: f64) -> String {
        let mut d = String::new();
        for (k, (x, y)) in pts.iter().enumerate() {
            let _ = write!(
                d,
                "{}{:.1},{:.1}",
                if k == 0 { "" } else { " " },
                self.px(*x),
                self.py(*y)
            );
        }
        format!(
            "<polyline fill=\"none\" stroke=\"{colour}\" stroke-width=\"{width}\" points=\"{d}\"/>"
        )
    }
}

/// The range of finite values, widened a little (and made non-empty).
fn range_of<'a>(v: impl Iterator<Item = &'a f64>) -> Option<(f64, f64)> {
    let (lo, hi) = v
        .filter(|x| x.is_finite())
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), x| {
            (a.min(*x), b.max(*x))
        });
    if !lo.is_finite() {
        return None;
    }
    let pad = if hi > lo {
        (hi - lo) * 0.05
    } else {
        (1e-3 * lo.abs()).max(1.0)
    };
    Some((lo - pad, hi + pad))
}

fn summary(out: &mut String, p: &Processed, st: &LineStages, qcs: &[LineQc], level: f64) {
    let comps: Vec<usize> = (0..6).filter(|c| st.observed[*c]).collect();
    out.push_str("<table id=\"summary\"><thead><tr><th class=\"l\">line</th><th class=\"l\">flight</th><th class=\"l\">role</th><th>samples</th><th>noise after filter, E<br>(largest of ");
    out.push_str(
        &comps
            .iter()
            .map(|c| NAMES[*c])
            .collect::<Vec<_>>()
            .join(" "),
    );
    out.push_str(")</th><th>Gzz density, E/√Hz</th><th>turbulence, m/s²</th><th>clearance departure, m</th><th>deviation, m</th><th>longest gap, s</th><th>motion part, E<br>(largest significant)</th><th>Gzz offset, E</th><th>verdict</th><th class=\"l\">reasons</th></tr></thead><tbody>\n");
    let _ = p;
    for q in qcs {
        let s = &st.segments[q.segment];
        let m = q.metrics.as_ref();
        let gzz_density = m.and_then(|m| {
            m.components
                .iter()
                .find(|c| c.name == "Gzz")
                .and_then(|c| c.noise_density_e_rt_hz)
        });
        let offset = st.levelling[5]
            .as_ref()
            .and_then(|l| l.correction_of(q.segment))
            .filter(|c| c.solved)
            .map(|c| c.offset);
        let (class, word) = if q.verdict.pass {
            ("pass", "pass")
        } else {
            ("fail", "fail")
        };
        let _ = writeln!(
            out,
            "<tr><td class=\"l\">{}</td><td class=\"l\">{}</td><td class=\"l\">{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td class=\"{class}\">{word}</td><td class=\"l\">{}</td></tr>",
            s.line,
            esc(&q.flight_name),
            if s.tie { "tie" } else { "survey" },
            m.map_or(s.end - s.start, |m| m.samples),
            fmt_opt(m.and_then(worst_noise), 2),
            fmt_opt(gzz_density, 2),
            fmt_opt(m.and_then(|m| m.turbulence_m_s2), 2),
            fmt_opt(m.and_then(|m| m.clearance_departure_m), 1),
            fmt_opt(m.and_then(|m| m.line_deviation_m), 1),
            fmt_opt(m.map(|m| m.longest_gap_s), 2),
            fmt_opt(m.and_then(|m| worst_motion(m, level)), 2),
            fmt_opt(offset, 2),
            esc(&q.verdict.reasons.join("; "))
        );
    }
    out.push_str("</tbody></table>\n");
}

fn map(out: &mut String, p: &Processed, st: &LineStages, qcs: &[LineQc]) {
    let (w, h) = (900.0, 560.0);
    let mut xs = Vec::new();
    let mut ys = Vec::new();
    for s in &st.segments {
        let r = &p.results[s.flight];
        xs.extend_from_slice(&r.positions.easting_m[s.range()]);
        ys.extend_from_slice(&r.positions.northing_m[s.range()]);
    }
    let (Some(xr), Some(yr)) = (range_of(xs.iter()), range_of(ys.iter())) else {
        out.push_str("<p class=\"note\">No line has a position to map.</p>\n");
        return;
    };
    // Equal scale on both axes, centred.
    let (bw, bh) = (w - 140.0, h - 60.0);
    let scale = (bw / (xr.1 - xr.0)).min(bh / (yr.1 - yr.0));
    let (cx, cy) = ((xr.0 + xr.1) / 2.0, (yr.0 + yr.1) / 2.0);
    let half = (bw / scale / 2.0, bh / scale / 2.0);
    let f = Frame {
        left: 20.0,
        top: 20.0,
        width: bw,
        height: bh,
        x: (cx - half.0, cx + half.0),
        y: (cy - half.1, cy + half.1),
        log: false,
    };
    let _ = writeln!(
        out,
        "<svg id=\"map\" xmlns=\"http://www.w3.org/2000/svg\" width=\"{w}\" height=\"{h}\" viewBox=\"0 0 {w} {h}\" role=\"img\" aria-label=\"map of the lines coloured by verdict\">"
    );
    let _ = writeln!(
        out,
        "<rect x=\"{:.1}\" y=\"{:.1}\" width=\"{bw:.1}\" height=\"{bh:.1}\" fill=\"#fafafa\" stroke=\"{GRID}\"/>",
        f.left, f.top
    );
    for q in qcs {
        let s = &st.segments[q.segment];
        let r = &p.results[s.flight];
        let colour = if q.verdict.pass { PASS } else { FAIL };
        for run in decimate(
            &r.positions.easting_m[s.range()],
            &r.positions.northing_m[s.range()],
            300,
        ) {
            out.push_str(&f.polyline(&run, colour, 2.0));
            out.push('\n');
        }
        let i = (s.start..s.end).find(|i| {
            r.positions.easting_m[*i].is_finite() && r.positions.northing_m[*i].is_finite()
        });
        if let Some(i) = i {
            let _ = writeln!(
                out,
                "<text x=\"{:.1}\" y=\"{:.1}\" font-size=\"10\" fill=\"{INK}\">{}</text>",
                f.px(r.positions.easting_m[i]) + 3.0,
                f.py(r.positions.northing_m[i]) - 3.0,
                s.line
            );
        }
    }
    if let Some(l) = st.levelling[5]
        .as_ref()
        .or(st.levelling.iter().flatten().next())
    {
        for c in &l.crossovers {
            let _ = writeln!(
                out,
                "<circle cx=\"{:.1}\" cy=\"{:.1}\" r=\"2.5\" fill=\"none\" stroke=\"{INK}\" stroke-width=\"1\"/>",
                f.px(c.x_m),
                f.py(c.y_m)
            );
        }
    }
    // North arrow (grid north of the survey projection), legend, scale bar.
    let ax = w - 70.0;
    let _ = writeln!(
        out,
        "<g><polygon points=\"{ax:.1},30 {:.1},62 {ax:.1},54 {:.1},62\" fill=\"{INK}\"/><text x=\"{ax:.1}\" y=\"78\" font-size=\"12\" text-anchor=\"middle\">N</text><text x=\"{ax:.1}\" y=\"91\" font-size=\"9\" text-anchor=\"middle\">grid north</text></g>",
        ax - 9.0,
        ax + 9.0
    );
    let ly = 120.0;
    let lx = w - 112.0;
    let _ = writeln!(
        out,
        "<g font-size=\"11\"><line x1=\"{lx}\" y1=\"{ly}\" x2=\"{:.1}\" y2=\"{ly}\" stroke=\"{PASS}\" stroke-width=\"3\"/><text x=\"{:.1}\" y=\"{:.1}\">pass</text><line x1=\"{lx}\" y1=\"{:.1}\" x2=\"{:.1}\" y2=\"{:.1}\" stroke=\"{FAIL}\" stroke-width=\"3\"/><text x=\"{:.1}\" y=\"{:.1}\">fail</text><circle cx=\"{:.1}\" cy=\"{:.1}\" r=\"2.5\" fill=\"none\" stroke=\"{INK}\"/><text x=\"{:.1}\" y=\"{:.1}\">crossover</text></g>",
        lx + 22.0,
        lx + 28.0,
        ly + 4.0,
        ly + 18.0,
        lx + 22.0,
        ly + 18.0,
        lx + 28.0,
        ly + 22.0,
        lx + 11.0,
        ly + 36.0,
        lx + 28.0,
        ly + 40.0
    );
    let target = (bw / scale) / 5.0;
    let bar = ticks(0.0, target, 1)
        .into_iter()
        .rfind(|v| *v > 0.0)
        .unwrap_or(target);
    let bar_px = bar * scale;
    let label = if bar >= 1000.0 {
        format!("{} km", tick_label(bar / 1000.0, bar / 1000.0))
    } else {
        format!("{} m", tick_label(bar, bar))
    };
    let by = f.top + bh + 25.0;
    let _ = writeln!(
        out,
        "<g><line x1=\"{:.1}\" y1=\"{by:.1}\" x2=\"{:.1}\" y2=\"{by:.1}\" stroke=\"{INK}\" stroke-width=\"3\"/><text x=\"{:.1}\" y=\"{:.1}\" font-size=\"11\">{label}</text></g>",
        f.left,
        f.left + bar_px,
        f.left + bar_px + 6.0,
        by + 4.0
    );
    out.push_str("</svg>\n");
}

fn crossovers(out: &mut String, st: &LineStages) {
    if st.levelling.iter().all(Option::is_none) {
        out.push_str("<p class=\"note\">No crossovers: the survey has no survey line crossing a tie line, so the levelled stage equals the filtered one.</p>\n");
        return;
    }
    out.push_str("<table id=\"crossovers\"><thead><tr><th class=\"l\">component</th><th>crossovers</th><th>mean before, E</th><th>RMS before, E</th><th>largest before, E</th><th>mean after, E</th><th>RMS after, E</th><th>largest after, E</th></tr></thead><tbody>\n");
    for (c, l) in st.levelling.iter().enumerate() {
        if let Some(l) = l {
            let (b, a) = (&l.result.before, &l.result.after);
            let _ = writeln!(
                out,
                "<tr><td class=\"l\">{}</td><td>{}</td><td>{:.2}</td><td>{:.2}</td><td>{:.2}</td><td>{:.2}</td><td>{:.2}</td><td>{:.2}</td></tr>",
                NAMES[c], b.count, b.mean, b.rms, b.max_abs, a.mean, a.rms, a.max_abs
            );
        }
    }
    out.push_str("</tbody></table>\n");
}

/// One row per line, one cell per observed component: the motion part ± its standard error, the
/// p-value of the F test and the regressor that explains most; bold where it failed the line.
fn motion(out: &mut String, st: &LineStages, qcs: &[LineQc], s: &QcSettings) {
    let comps: Vec<usize> = (0..6).filter(|c| st.observed[*c]).collect();
    let tested = qcs.iter().any(|q| {
        q.metrics
            .as_ref()
            .is_some_and(|m| m.components.iter().any(|c| c.motion.is_some()))
    });
    if !tested {
        out.push_str("<p class=\"note\">No line was tested for motion correlation (no specific force, angular rate or time base in the logs, or every line too short for the band).</p>\n");
        return;
    }
    let t = &s.tolerances;
    out.push_str(
        "<table id=\"motion\"><thead><tr><th class=\"l\">line</th><th class=\"l\">role</th>",
    );
    for c in &comps {
        let _ = write!(
            out,
            "<th class=\"l\">{}: motion part, E · p · most from</th>",
            NAMES[*c]
        );
    }
    out.push_str("</tr></thead><tbody>\n");
    for q in qcs {
        let seg = &st.segments[q.segment];
        let _ = write!(
            out,
            "<tr><td class=\"l\">{}</td><td class=\"l\">{}</td>",
            seg.line,
            if seg.tie { "tie" } else { "survey" }
        );
        for c in &comps {
            let fit = q.metrics.as_ref().and_then(|m| {
                m.components
                    .iter()
                    .find(|x| x.name == NAMES[*c])
                    .and_then(|x| x.motion.as_ref())
            });
            match fit {
                Some(f) => {
                    let failed =
                        f.p_value < t.motion_significance && f.motion_rms_e > t.max_motion_e;
                    let text = format!(
                        "{:.2} ± {:.2} · {} · {}",
                        f.motion_rms_e,
                        f.motion_rms_se_e,
                        if f.p_value.is_finite() {
                            format!("{:.1e}", f.p_value)
                        } else {
                            "–".into()
                        },
                        esc(f.strongest().map_or("–", |r| r.name))
                    );
                    if failed {
                        let _ = write!(out, "<td class=\"l\"><strong>{text}</strong></td>");
                    } else {
                        let _ = write!(out, "<td class=\"l\">{text}</td>");
                    }
                }
                None => out.push_str("<td class=\"l\">–</td>"),
            }
        }
        out.push_str("</tr>\n");
    }
    out.push_str("</tbody></table>\n");
}

/// Escaped text with each `name` in back-quotes set as code.
fn inline(s: &str) -> String {
    let parts: Vec<String> = s.split('`').map(esc).collect();
    if parts.len().is_multiple_of(2) {
        // An unpaired back-quote: shown as it is.
        return esc(s);
    }
    let mut out = String::new();
    for (k, part) in parts.iter().enumerate() {
        if k % 2 == 1 {
            let _ = write!(out, "<code>{part}</code>");
        } else {
            out.push_str(part);
        }
    }
    out
}

/// One block per flight: the calibration mode, the notes, the held terms per fitted series (with
/// their reasons when the flight was computed in this run) and every pair's coefficients.
fn calibration(out: &mut String, p: &Processed, health: &[CalibrationHealth]) {
    let baselines = baselines(p);
    let recipe = p.survey.recipe.as_ref();
    let file = recipe
        .and_then(|r| r.calibration.file.as_deref())
        .unwrap_or("calibration.toml");
    out.push_str("<div id=\"calibration\">\n");
    for ((name, r), h) in p.names.iter().zip(&p.results).zip(health) {
        let _ = writeln!(
            out,
            "<h3>Flight {} — {}</h3>",
            esc(name),
            esc(&health_counts(h))
        );
        let _ = writeln!(
            out,
            "<p>Mode <strong>{}</strong>: {}</p>",
            h.mode,
            match h.mode {
                "estimate" => "every coefficient estimated from this flight's own data; a term the flight does not resolve is held at zero.".to_string(),
                "file" => format!(
                    "κ, temperature and self-gradient from the calibration file <code>{}</code>; bias and drift refitted to this flight, a term it does not resolve keeping the file's value.",
                    esc(file)
                ),
                _ => "no calibration: the pair outputs are used as logged.".to_string(),
            }
        );
        if h.warnings.is_empty() {
            out.push_str("<p class=\"note\">No warning.</p>\n");
        } else {
            out.push_str("<ul class=\"calibration-notes\">\n");
            for w in &h.warnings {
                let _ = writeln!(out, "<li>{}</li>", inline(w));
            }
            out.push_str("</ul>\n");
        }
        if !h.held.is_empty() {
            out.push_str("<table class=\"held\"><thead><tr><th class=\"l\">fitted series</th><th>held</th><th class=\"l\">terms held</th></tr></thead><tbody>\n");
            for (series, terms) in &h.held {
                let _ = writeln!(
                    out,
                    "<tr><td class=\"l\">{}</td><td>{}</td><td class=\"l\">{}</td></tr>",
                    esc(series),
                    terms.len(),
                    esc(&terms.join(", "))
                );
            }
            out.push_str("</tbody></table>\n");
            if h.held_reasons.is_empty() {
                out.push_str("<p class=\"note\">The flight was taken from the flight store, which keeps the held terms but not their reasons; run <code>gravgrad calibrate</code> or <code>gravgrad qc</code> for them.</p>\n");
            } else {
                let _ = writeln!(
                    out,
                    "<details><summary>Reason and estimate of each held term ({})</summary><ul class=\"note\">",
                    h.held_reasons.len()
                );
                for (series, _) in &h.held {
                    for reason in h.reasons_of(series) {
                        let _ = writeln!(out, "<li>{}: {}</li>", esc(series), esc(reason));
                    }
                }
                out.push_str("</ul></details>\n");
            }
        }
        if r.calibration.is_empty() {
            continue;
        }
        out.push_str("<table class=\"calibration-pairs\"><thead><tr><th class=\"l\">pair</th><th>κx ± SE</th><th>κy ± SE</th><th>κz ± SE</th><th>drift, E/h</th><th>temperature, E/°C</th><th>band residual, E</th></tr></thead><tbody>\n");
        for (id, c) in &r.calibration {
            let f = figures(
                &PairEntry::from_calibration(id, c),
                baseline_of(&baselines, id),
            );
            let k = |i: usize| format!("{:+.3e} ± {:.1e}", f.kappa[i].0, f.kappa[i].1);
            let signed = |v: Option<f64>| match v {
                Some(x) if x.is_finite() => format!("{x:+.3}"),
                _ => "–".into(),
            };
            let _ = writeln!(
                out,
                "<tr><td class=\"l\">{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td></tr>",
                esc(id),
                k(0),
                k(1),
                k(2),
                signed(f.drift_e_h),
                signed(f.temperature_e_c),
                fmt_opt(Some(f.band_residual_e), 3)
            );
        }
        out.push_str("</tbody></table>\n");
    }
    out.push_str("</div>\n");
}

/// Stretches of finite values cut at gaps longer than 1.5 median intervals; and the sample rate.
fn stretches(time: &[f64], v: &[f64]) -> (Vec<Vec<f64>>, f64) {
    let mut dts: Vec<f64> = time
        .windows(2)
        .map(|w| w[1] - w[0])
        .filter(|d| d.is_finite() && *d > 0.0)
        .collect();
    dts.sort_by(f64::total_cmp);
    let Some(&dt) = dts.get(dts.len() / 2) else {
        return (Vec::new(), 0.0);
    };
    let mut out: Vec<Vec<f64>> = Vec::new();
    let mut cur: Vec<f64> = Vec::new();
    for i in 0..v.len() {
        let ok = v[i].is_finite() && time[i].is_finite();
        let gap = i > 0 && time[i] - time[i - 1] > 1.5 * dt;
        if (!ok || gap) && !cur.is_empty() {
            out.push(std::mem::take(&mut cur));
        }
        if ok {
            cur.push(v[i]);
        }
    }
    if !cur.is_empty() {
        out.push(cur);
    }
    (out, 1.0 / dt)
}

fn spectra(out: &mut String, p: &Processed, st: &LineStages, qcs: &[LineQc], s: &QcSettings) {
    let Some(c) = [5usize, 0, 3, 1, 2, 4]
        .into_iter()
        .find(|c| st.observed[*c])
    else {
        return;
    };
    let mut curves: Vec<(bool, Vec<(f64, f64)>)> = Vec::new();
    for q in qcs {
        let seg = &st.segments[q.segment];
        let r = &p.results[seg.flight];
        let v: Vec<f64> = seg.range().map(|i| line_stages::reduced(r, c, i)).collect();
        let (pieces, rate) = stretches(&r.time[seg.range()], &v);
        if rate <= 0.0 {
            continue;
        }
        let views: Vec<&[f64]> = pieces.iter().map(Vec::as_slice).collect();
        let seg_len = (s.welch_segment_s * rate).round() as usize;
        let sp = welch(&views, rate, seg_len);
        if sp.segments == 0 {
            continue;
        }
        let pts: Vec<(f64, f64)> = sp
            .frequency_hz
            .iter()
            .zip(&sp.psd)
            .filter(|(f, p)| **f > 0.0 && **p > 0.0)
            .map(|(f, p)| (*f, p.sqrt()))
            .collect();
        curves.push((q.verdict.pass, pts));
    }
    if curves.is_empty() {
        out.push_str("<p class=\"note\">No line is long enough for a Welch segment.</p>\n");
        return;
    }
    let fx = curves
        .iter()
        .flat_map(|c| c.1.iter().map(|p| p.0))
        .fold((f64::INFINITY, 0.0f64), |(a, b), f| (a.min(f), b.max(f)));
    let fy = curves
        .iter()
        .flat_map(|c| c.1.iter().map(|p| p.1))
        .fold((f64::INFINITY, 0.0f64), |(a, b), v| (a.min(v), b.max(v)));
    let dec = |v: f64, up: bool| {
        if up {
            10f64.powf(v.log10().ceil())
        } else {
            10f64.powf(v.log10().floor())
        }
    };
    let f = Frame {
        left: 70.0,
        top: 15.0,
        width: 560.0,
        height: 300.0,
        x: (dec(fx.0, false), dec(fx.1, true)),
        y: (dec(fy.0, false), dec(fy.1, true)),
        log: true,
    };
    let (w, h) = (800.0, 370.0);
    let _ = writeln!(
        out,
        "<svg id=\"spectra\" xmlns=\"http://www.w3.org/2000/svg\" width=\"{w}\" height=\"{h}\" viewBox=\"0 0 {w} {h}\" role=\"img\" aria-label=\"noise spectra\">"
    );
    // Noise band.
    let [b0, b1] = s.noise_band_hz;
    if b1 > f.x.0 && b0 < f.x.1 {
        let (x0, x1) = (f.px(b0.max(f.x.0)), f.px(b1.min(f.x.1)));
        let _ = writeln!(
            out,
            "<rect x=\"{x0:.1}\" y=\"{:.1}\" width=\"{:.1}\" height=\"{:.1}\" fill=\"#eef3f7\"/>",
            f.top,
            x1 - x0,
            f.height
        );
    }
    for (axis_x, lo, hi) in [(true, f.x.0, f.x.1), (false, f.y.0, f.y.1)] {
        let mut d = lo;
        while d <= hi * 1.0001 {
            let label = if d >= 1.0 {
                format!("{d:.0}")
            } else {
                format!("{d}")
            };
            if axis_x {
                let x = f.px(d);
                let _ = writeln!(
                    out,
                    "<line x1=\"{x:.1}\" y1=\"{:.1}\" x2=\"{x:.1}\" y2=\"{:.1}\" stroke=\"{GRID}\"/><text x=\"{x:.1}\" y=\"{:.1}\" font-size=\"10\" text-anchor=\"middle\">{label}</text>",
                    f.top,
                    f.top + f.height,
                    f.top + f.height + 14.0
                );
            } else {
                let y = f.py(d);
                let _ = writeln!(
                    out,
                    "<line x1=\"{:.1}\" y1=\"{y:.1}\" x2=\"{:.1}\" y2=\"{y:.1}\" stroke=\"{GRID}\"/><text x=\"{:.1}\" y=\"{:.1}\" font-size=\"10\" text-anchor=\"end\">{label}</text>",
                    f.left,
                    f.left + f.width,
                    f.left - 4.0,
                    y + 3.0
                );
            }
            d *= 10.0;
        }
    }
    for (pass, pts) in &curves {
        out.push_str(&f.polyline(pts, if *pass { PASS } else { FAIL }, 1.0));
        out.push('\n');
    }
    let _ = writeln!(
        out,
        "<rect x=\"{:.1}\" y=\"{:.1}\" width=\"{:.1}\" height=\"{:.1}\" fill=\"none\" stroke=\"#999\"/>",
        f.left, f.top, f.width, f.height
    );
    let _ = writeln!(
        out,
        "<text x=\"{:.1}\" y=\"{:.1}\" font-size=\"11\" text-anchor=\"middle\">frequency, Hz</text>",
        f.left + f.width / 2.0,
        f.top + f.height + 32.0
    );
    let _ = writeln!(
        out,
        "<text transform=\"translate(16 {:.1}) rotate(-90)\" font-size=\"11\" text-anchor=\"middle\">{} amplitude density, E/√Hz</text>",
        f.top + f.height / 2.0,
        NAMES[c]
    );
    let lx = f.left + f.width + 20.0;
    let _ = writeln!(
        out,
        "<g font-size=\"11\"><line x1=\"{lx:.1}\" y1=\"30\" x2=\"{:.1}\" y2=\"30\" stroke=\"{PASS}\" stroke-width=\"2\"/><text x=\"{:.1}\" y=\"34\">line passed</text><line x1=\"{lx:.1}\" y1=\"48\" x2=\"{:.1}\" y2=\"48\" stroke=\"{FAIL}\" stroke-width=\"2\"/><text x=\"{:.1}\" y=\"52\">line failed</text><rect x=\"{lx:.1}\" y=\"60\" width=\"20\" height=\"10\" fill=\"#eef3f7\"/><text x=\"{:.1}\" y=\"69\">noise band</text></g>",
        lx + 20.0,
        lx + 26.0,
        lx + 20.0,
        lx + 26.0,
        lx + 26.0
    );
    out.push_str("</svg>\n");
}

/// Stacked panels of one line's Gzz at each stage against along-track distance.
fn profile(out: &mut String, p: &Processed, st: &LineStages, q: &LineQc) {
    let c = 5;
    let seg = &st.segments[q.segment];
    let r = &p.results[seg.flight];
    let range = seg.range();
    let x: Vec<f64> = gravgrad_lines::filter::along_track_distance(
        &r.positions.easting_m[range.clone()],
        &r.positions.northing_m[range.clone()],
    )
    .iter()
    .map(|d| d / 1000.0)
    .collect();
    let comp = |t: &gravgrad_core::SymTensor| t.to_array()[c] / EOTVOS;
    let mut panels: Vec<(&str, Vec<f64>)> = vec![
        (
            "rotated",
            range.clone().map(|i| comp(&r.rotated[i])).collect(),
        ),
        (
            "normal removed",
            range
                .clone()
                .map(|i| comp(&(r.rotated[i] - r.normal[i])))
                .collect(),
        ),
    ];
    if st.reduced_stage == "terrain_removed" {
        panels.push((
            "terrain removed",
            range
                .clone()
                .map(|i| line_stages::reduced(r, c, i))
                .collect(),
        ));
    }
    panels.push((
        "filtered",
        st.filtered[seg.flight][c][range.clone()].to_vec(),
    ));
    panels.push(("levelled", st.levelled[seg.flight][c][range].to_vec()));
    let (w, ph, gap) = (900.0, 90.0, 14.0);
    let h = 10.0 + panels.len() as f64 * (ph + gap) + 24.0;
    let xr = range_of(x.iter()).unwrap_or((0.0, 1.0));
    let _ = writeln!(
        out,
        "<svg class=\"profile\" xmlns=\"http://www.w3.org/2000/svg\" width=\"{w}\" height=\"{h:.0}\" viewBox=\"0 0 {w} {h:.0}\" role=\"img\" aria-label=\"line {} Gzz at each stage\">",
        seg.line
    );
    let colour = if q.verdict.pass { PASS } else { FAIL };
    for (k, (name, v)) in panels.iter().enumerate() {
        let top = 10.0 + k as f64 * (ph + gap);
        let yr = range_of(v.iter()).unwrap_or((-1.0, 1.0));
        let f = Frame {
            left: 80.0,
            top,
            width: 700.0,
            height: ph,
            x: xr,
            y: yr,
            log: false,
        };
        let ts = ticks(yr.0, yr.1, 3);
        let step = if ts.len() > 1 { ts[1] - ts[0] } else { 1.0 };
        for t in &ts {
            let y = f.py(*t);
            let _ = writeln!(
                out,
                "<line x1=\"{:.1}\" y1=\"{y:.1}\" x2=\"{:.1}\" y2=\"{y:.1}\" stroke=\"{GRID}\"/><text x=\"{:.1}\" y=\"{:.1}\" font-size=\"9\" text-anchor=\"end\">{}</text>",
                f.left,
                f.left + f.width,
                f.left - 4.0,
                y + 3.0,
                tick_label(*t, step)
            );
        }
        for run in decimate(&x, v, 400) {
            out.push_str(&f.polyline(&run, if *name == "levelled" { colour } else { INK }, 1.0));
            out.push('\n');
        }
        let _ = writeln!(
            out,
            "<rect x=\"{:.1}\" y=\"{top:.1}\" width=\"{:.1}\" height=\"{ph:.1}\" fill=\"none\" stroke=\"#999\"/><text x=\"{:.1}\" y=\"{:.1}\" font-size=\"11\">{name}</text>",
            f.left,
            f.width,
            f.left + f.width + 8.0,
            top + 14.0
        );
        if k + 1 == panels.len() {
            let xt = ticks(xr.0, xr.1, 8);
            let xs = if xt.len() > 1 { xt[1] - xt[0] } else { 1.0 };
            for t in &xt {
                let px = f.px(*t);
                let _ = writeln!(
                    out,
                    "<text x=\"{px:.1}\" y=\"{:.1}\" font-size=\"9\" text-anchor=\"middle\">{}</text>",
                    top + ph + 12.0,
                    tick_label(*t, xs)
                );
            }
            let _ = writeln!(
                out,
                "<text x=\"{:.1}\" y=\"{:.1}\" font-size=\"10\" text-anchor=\"middle\">along-track distance, km</text>",
                f.left + f.width / 2.0,
                top + ph + 24.0
            );
        }
    }
    let _ = writeln!(
        out,
        "<text transform=\"translate(14 {:.1}) rotate(-90)\" font-size=\"11\" text-anchor=\"middle\">Gzz, E</text>",
        h / 2.0
    );
    out.push_str("</svg>\n");
}

/// The whole page.
pub fn render(
    p: &Processed,
    st: &LineStages,
    qcs: &[LineQc],
    s: &QcSettings,
    health: &[CalibrationHealth],
) -> String {
    let name = p
        .survey
        .recipe
        .as_ref()
        .map_or("survey", |r| r.survey.name.as_str());
    let failed = qcs.iter().filter(|q| !q.verdict.pass).count();
    let t = &s.tolerances;
    let planned = p
        .survey
        .recipe
        .as_ref()
        .and_then(|r| r.qc.planned_clearance_m);
    let mut out = String::with_capacity(1 << 20);
    let _ = write!(
        out,
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n<title>Line QC: {}</title>\n<style>\n{CSS}\n</style>\n</head>\n<body>\n<h1>Line QC: {}</h1>\n",
        esc(name),
        esc(name)
    );
    let _ = writeln!(
        out,
        "<p>{} lines in {} flights: <strong>{} pass, {failed} fail</strong>. Noise, spikes and spectra are taken on the {} tensor; the filter's cutoff wavelength is {} m.</p>",
        qcs.len(),
        p.results.len(),
        qcs.len() - failed,
        st.reduced_stage.replace('_', " "),
        s.low_pass.cutoff_wavelength_m
    );
    let _ = writeln!(
        out,
        "<p class=\"note\">Tolerances: noise after filtering {} E RMS; turbulence {} m/s² RMS; clearance within {} m of {}; deviation from the line's straight chord {} m; longest gap {} s; motion part {} E where significant at {}.</p>",
        t.max_noise_e,
        t.max_turbulence_m_s2,
        t.clearance_tolerance_m,
        match planned {
            Some(c) => format!("the planned {c} m"),
            None => "the plan (no planned clearance in the recipe: not judged)".into(),
        },
        t.max_line_deviation_m,
        t.max_gap_s,
        t.max_motion_e,
        t.motion_significance
    );
    for n in &st.notes {
        let _ = writeln!(out, "<p class=\"note\">{}</p>", esc(n));
    }
    out.push_str("<h2>Verdict per line</h2>\n");
    summary(&mut out, p, st, qcs, t.motion_significance);
    out.push_str("<h2>Map of the lines</h2>\n");
    map(&mut out, p, st, qcs);
    out.push_str("<h2>Crossovers before and after levelling</h2>\n");
    crossovers(&mut out, st);
    out.push_str("<h2>Calibration</h2>\n<p class=\"note\">Per flight, what the calibration of the pairs could not determine. Warnings: a channel dropped or bridged (a constant or gappy <code>temp</code>, one of <code>ac_roll</code> <code>ac_pitch</code> without the other), the drift and temperature fitted against time for want of crossings, a calibration band narrowed by the geology. Held terms: coefficients the flight did not resolve, or resolved below the recipe's <code>calibration.min_significance</code> standard errors, left at their prior (zero, or the calibration file's value) instead of applied, grouped by the series they were fitted in (the tensor's unknowns <code>Gxx</code> … <code>αz</code>, or a pair's own residual). Held second-order terms (<code>fz²</code>, <code>fx·fy</code> …) are the rule over calm lines: the data did not ask for them. A held drift is left to levelling; a held κ leaves any coupling to the motion-correlation test below. Per pair: the coupling κ to the specific force with its standard error, then the drift in E/h, the temperature term in E/°C (– where the flight had no usable temperature log) and the RMS left in the fit's band in E, each divided by the pair's baseline.</p>\n");
    calibration(&mut out, p, health);
    let _ = writeln!(
        out,
        "<h2>Motion correlation</h2>\n<p class=\"note\">Each component regressed, in {}–{} Hz, on the aircraft's specific force, the products of its deviations from the line mean, angular rate and angular acceleration (sensor axes). Motion part: the RMS the regression explains, less its expected noise share, ± its standard error; p: the F test with the residual's effective sample size. A line fails when p &lt; {} and the motion part exceeds {} E (bold).</p>",
        s.motion.band_hz[0], s.motion.band_hz[1], t.motion_significance, t.max_motion_e
    );
    motion(&mut out, st, qcs, s);
    out.push_str("<h2>Noise spectra</h2>\n<p class=\"note\">Welch amplitude density of each line (segments of 10 s overlapping by half, Hann window, straight line removed per segment). The shaded band is where the noise density is read.</p>\n");
    spectra(&mut out, p, st, qcs, s);
    out.push_str("<h2>Profiles of Gzz at each stage</h2>\n");
    for q in qcs {
        let seg = &st.segments[q.segment];
        let _ = writeln!(
            out,
            "<h3>Line {} ({}, {}) — {}</h3>",
            seg.line,
            if seg.tie { "tie" } else { "survey" },
            esc(&q.flight_name),
            if q.verdict.pass { "pass" } else { "fail" }
        );
        profile(&mut out, p, st, q);
    }
    out.push_str("<footer>Made by gravgrad qc. These products are for geological interpretation only; they are not for navigation or flight safety, terrain clearance included.</footer>\n</body>\n</html>\n");
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Round ticks for an ordinary range (1, 2, 2.5, 5 × 10ⁿ steps: common practice), and a bounded
    /// answer for ranges whose tick numbers an integer cannot count: near 1e300 with a width in the
    /// last digits (the profile of a line reduced with a density of 1e300 kg/m³ looped here until
    /// memory ran out), and across the whole f64 range.
    #[test]
    fn ticks_end_for_every_range() {
        assert_eq!(ticks(0.0, 10.0, 5), vec![0.0, 2.0, 4.0, 6.0, 8.0, 10.0]);
        let far = ticks(1e300, 1e300 * (1.0 + 4e-16), 3);
        assert_eq!(far.len(), 2, "{far:?}");
        let wide = ticks(-1.7e308, 1.7e308, 8);
        assert!(wide.len() <= 32, "{wide:?}");
        assert_eq!(ticks(f64::NAN, 1.0, 3).len(), 1);
    }
}
