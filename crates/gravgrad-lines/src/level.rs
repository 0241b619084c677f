//! Least-squares levelling from crossovers.
//!
//! Each line l gets a correction c_l(t) = a_l + β_l·(t − t_l), an offset and, optionally, a linear
//! trend in time about t_l, the middle of the times at which the line is crossed. Levelled values are
//! value − c_l(t). At a crossover d = survey − tie the levelled difference is
//! d − c_s(t_s) + c_t(t_t), and the corrections minimise the sum of its squares over all crossovers
//! (common practice in airborne surveys; e.g. Yarger, Robertson & Wentland 1978, "Diurnal drift
//! removal from aeromagnetic data using least squares", Geophysics 43:1148–1156).
//!
//! Modes (recipe `level.tie_lines`):
//! - reference: tie lines are held fixed (c = 0) and only survey lines are solved; each survey line
//!   then gets the mean (or straight-line fit in time) of its own crossovers.
//! - zero-mean: every line is solved. The differences only see differences of corrections, so a
//!   constant added to every connected line changes nothing; the constraint that the offsets of each
//!   connected group of lines sum to zero removes that freedom (it is added to the normal equations
//!   as the penalty (Σa)², which leaves the least-squares fit unchanged and makes the system
//!   positive definite).
//!
//! A trend is fitted only for a line with at least `min_crossings_for_trend` crossings at more than
//! one time; other lines get an offset only. Lines without crossings keep a zero correction and are
//! listed. The normal equations are solved by conjugate gradients with a diagonal preconditioner,
//! applied directly from the list of crossovers (each touches at most four unknowns), so memory and
//! time grow with the number of crossovers.

use crate::crossover::Crossover;
use crate::error::LinesError;
use crate::solve::conjugate_gradient;

/// Which lines are solved.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum LevelMode {
    /// Tie lines fixed, survey lines solved.
    Reference,
    /// Every line solved; offsets of each connected group sum to zero.
    ZeroMean,
}

/// How to level.
#[derive(Clone, Debug, PartialEq)]
pub struct LevelSettings {
    pub mode: LevelMode,
    /// Also fit a linear trend in time per line.
    pub trend: bool,
    /// Fewest crossings for a line's trend to be fitted (at least 2; default 3).
    pub min_crossings_for_trend: usize,
}

impl Default for LevelSettings {
    /// The recipe's defaults: tie lines as reference, no trend.
    fn default() -> Self {
        Self {
            mode: LevelMode::Reference,
            trend: false,
            min_crossings_for_trend: 3,
        }
    }
}

/// One line's correction, in the unit of the crossover values.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct LineCorrection {
    /// Offset a at the reference time.
    pub offset: f64,
    /// Trend β per second (0 when not fitted).
    pub trend_per_s: f64,
    /// Reference time t_l, s: the middle of the times the line is crossed (0 without crossings).
    pub reference_time_s: f64,
    /// Number of crossovers on this line.
    pub crossings: usize,
    /// Whether the line was solved (false for held tie lines and lines without crossings).
    pub solved: bool,
    /// Whether a trend was fitted.
    pub trend_fitted: bool,
}

impl LineCorrection {
    /// The correction at `time_s`.
    pub fn at(&self, time_s: f64) -> f64 {
        self.offset + self.trend_per_s * (time_s - self.reference_time_s)
    }

    /// Levelled values: value − correction(time), sample by sample.
    pub fn apply(&self, time_s: &[f64], values: &[f64]) -> Vec<f64> {
        time_s
            .iter()
            .zip(values)
            .map(|(t, v)| v - self.at(*t))
            .collect()
    }
}

/// Statistics of a set of crossover differences, in their unit.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct CrossoverStats {
    pub count: usize,
    pub mean: f64,
    /// Root mean square about zero.
    pub rms: f64,
    /// Largest absolute difference.
    pub max_abs: f64,
}

impl CrossoverStats {
    /// Statistics of `d` (zeros for an empty set).
    pub fn of(d: &[f64]) -> Self {
        if d.is_empty() {
            return Self::default();
        }
        let n = d.len() as f64;
        Self {
            count: d.len(),
            mean: d.iter().sum::<f64>() / n,
            rms: (d.iter().map(|v| v * v).sum::<f64>() / n).sqrt(),
            max_abs: d.iter().fold(0.0, |m: f64, v| m.max(v.abs())),
        }
    }
}

/// The result of levelling.
#[derive(Clone, Debug, PartialEq)]
pub struct Levelling {
    /// One correction per survey line, in input order.
    pub survey: Vec<LineCorrection>,
    /// One correction per tie line (all zero in reference mode).
    pub ties: Vec<LineCorrection>,
    /// Crossover statistics before and after levelling.
    pub before: CrossoverStats,
    pub after: CrossoverStats,
    /// Levelled difference at each crossover, in input order.
    pub residuals: Vec<f64>,
    /// Lines without any crossover (their correction is zero).
    pub survey_without_crossings: Vec<usize>,
    pub ties_without_crossings: Vec<usize>,
    /// Conjugate-gradient iterations used.
    pub iterations: usize,
}

/// Unknowns of one solved line: column of its offset and, if fitted, of its trend, with the time
/// scale h (s) of the trend column τ = (t − t_l)/h.
#[derive(Clone, Copy)]
struct Columns {
    offset: usize,
    trend: Option<(usize, f64)>,
}

fn find(parent: &mut [usize], mut i: usize) -> usize {
    while parent[i] != i {
        parent[i] = parent[parent[i]];
        i = parent[i];
    }
    i
}

/// Levels `survey_lines` survey lines and `tie_lines` tie lines from `crossovers` (whose `survey` and
/// `tie` fields index them).
///
/// Errors: a crossover naming a line that does not exist, or with a non-finite time or value.
pub fn level(
    crossovers: &[Crossover],
    survey_lines: usize,
    tie_lines: usize,
    settings: &LevelSettings,
) -> Result<Levelling, LinesError> {
    check_crossovers(crossovers, survey_lines, tie_lines)?;
    if settings.trend && settings.min_crossings_for_trend < 2 {
        return Err(LinesError::Setting {
            name: "min_crossings_for_trend".into(),
            value: settings.min_crossings_for_trend as f64,
            why: "a trend needs at least 2 crossings".into(),
        });
    }
    let lines = LineUnknowns::of(crossovers, survey_lines, tie_lines, settings);
    let normal = NormalEquations {
        rows: lines.rows(crossovers),
        groups: if settings.mode == LevelMode::ZeroMean {
            lines.connected_offsets(crossovers)
        } else {
            Vec::new()
        },
    };
    let d: Vec<f64> = crossovers.iter().map(Crossover::difference).collect();
    let n_unknowns = lines.n_unknowns;
    let (rhs, diagonal) = normal.rhs_and_diagonal(&d, n_unknowns);
    let (x, iterations) = conjugate_gradient(
        |v, out| normal.apply(v, out),
        &diagonal,
        &rhs,
        1e-13,
        20 * n_unknowns + 100,
    );
    let nl = survey_lines + tie_lines;
    let survey: Vec<LineCorrection> = (0..survey_lines).map(|l| lines.correction(l, &x)).collect();
    let ties: Vec<LineCorrection> = (survey_lines..nl)
        .map(|l| lines.correction(l, &x))
        .collect();
    let residuals: Vec<f64> = crossovers
        .iter()
        .zip(&d)
        .map(|(c, di)| di - survey[c.survey].at(c.survey_time_s) + ties[c.tie].at(c.tie_time_s))
        .collect();
    Ok(Levelling {
        before: CrossoverStats::of(&d),
        after: CrossoverStats::of(&residuals),
        survey_without_crossings: (0..survey_lines)
            .filter(|&l| survey[l].crossings == 0)
            .collect(),
        ties_without_crossings: (0..tie_lines).filter(|&l| ties[l].crossings == 0).collect(),
        survey,
        ties,
        residuals,
        iterations,
    })
}

/// Checks that every crossover names an existing survey and tie line and has finite times (s) and
/// values.
fn check_crossovers(
    crossovers: &[Crossover],
    survey_lines: usize,
    tie_lines: usize,
) -> Result<(), LinesError> {
    for (i, c) in crossovers.iter().enumerate() {
        if c.survey >= survey_lines {
            return Err(LinesError::LineIndex {
                index: i,
                role: "survey",
                line: c.survey,
                count: survey_lines,
            });
        }
        if c.tie >= tie_lines {
            return Err(LinesError::LineIndex {
                index: i,
                role: "tie",
                line: c.tie,
                count: tie_lines,
            });
        }
        for (name, v) in [
            ("survey time", c.survey_time_s),
            ("tie time", c.tie_time_s),
            ("survey value", c.survey_value),
            ("tie value", c.tie_value),
        ] {
            if !v.is_finite() {
                return Err(LinesError::NotFinite {
                    name: format!("crossover {name}"),
                    index: i,
                });
            }
        }
    }
    Ok(())
}

/// The lines and their unknowns. Line l: survey lines 0..ns, tie lines ns..ns+nt.
struct LineUnknowns {
    /// Number of survey lines.
    survey_lines: usize,
    /// Per line, the times at which it is crossed, s.
    times: Vec<Vec<f64>>,
    /// Per line, its columns when solved.
    columns: Vec<Option<Columns>>,
    /// Per line, t_l: the middle of its crossing times, s (0 without crossings).
    reference: Vec<f64>,
    /// Number of unknowns.
    n_unknowns: usize,
}

impl LineUnknowns {
    /// The crossing times of every line, and the columns of each line solved (every line in
    /// zero-mean mode, survey lines only in reference mode) that has crossings: an offset, and a
    /// trend when the settings ask for one, the line has enough crossings and they span time.
    fn of(
        crossovers: &[Crossover],
        survey_lines: usize,
        tie_lines: usize,
        settings: &LevelSettings,
    ) -> Self {
        let nl = survey_lines + tie_lines;
        let mut times: Vec<Vec<f64>> = vec![Vec::new(); nl];
        for c in crossovers {
            times[c.survey].push(c.survey_time_s);
            times[survey_lines + c.tie].push(c.tie_time_s);
        }
        let solve_line = |l: usize| l < survey_lines || settings.mode == LevelMode::ZeroMean;
        let mut columns: Vec<Option<Columns>> = vec![None; nl];
        let mut reference = vec![0.0; nl];
        let mut n_unknowns = 0usize;
        for l in 0..nl {
            let t = &times[l];
            if t.is_empty() {
                continue;
            }
            let lo = t.iter().copied().fold(f64::INFINITY, f64::min);
            let hi = t.iter().copied().fold(f64::NEG_INFINITY, f64::max);
            reference[l] = 0.5 * (lo + hi);
            if !solve_line(l) {
                continue;
            }
            let offset = n_unknowns;
            n_unknowns += 1;
            let half = 0.5 * (hi - lo);
            let trend = (settings.trend
                && t.len() >= settings.min_crossings_for_trend
                && half > 0.0)
                .then(|| {
                    n_unknowns += 1;
                    (offset + 1, half)
                });
            columns[l] = Some(Columns { offset, trend });
        }
        Self {
            survey_lines,
            times,
            columns,
            reference,
            n_unknowns,
        }
    }

    /// Each crossover's sparse row of the design: (column, coefficient) for the survey side (+)
    /// and the tie side (−), a trend's coefficient τ = (t − t_l)/h.
    fn rows(&self, crossovers: &[Crossover]) -> Vec<Vec<(usize, f64)>> {
        crossovers
            .iter()
            .map(|c| {
                let mut row = Vec::with_capacity(4);
                for (l, t, sign) in [
                    (c.survey, c.survey_time_s, 1.0),
                    (self.survey_lines + c.tie, c.tie_time_s, -1.0),
                ] {
                    if let Some(col) = self.columns[l] {
                        row.push((col.offset, sign));
                        if let Some((k, h)) = col.trend {
                            row.push((k, sign * (t - self.reference[l]) / h));
                        }
                    }
                }
                row
            })
            .collect()
    }

    /// The offset columns of each group of lines connected by crossovers, for the zero-mean
    /// constraint.
    fn connected_offsets(&self, crossovers: &[Crossover]) -> Vec<Vec<usize>> {
        let nl = self.columns.len();
        let mut parent: Vec<usize> = (0..nl).collect();
        for c in crossovers {
            let (a, b) = (
                find(&mut parent, c.survey),
                find(&mut parent, self.survey_lines + c.tie),
            );
            parent[a] = b;
        }
        let mut by_root: Vec<Vec<usize>> = vec![Vec::new(); nl];
        for (l, col) in self.columns.iter().enumerate() {
            if let Some(col) = col {
                let r = find(&mut parent, l);
                by_root[r].push(col.offset);
            }
        }
        by_root.into_iter().filter(|g| !g.is_empty()).collect()
    }

    /// Line `l`'s correction from the solution `x` (offset in the values' unit, trend per s); zero
    /// for a line not solved.
    fn correction(&self, l: usize, x: &[f64]) -> LineCorrection {
        let crossings = self.times[l].len();
        match self.columns[l] {
            None => LineCorrection {
                reference_time_s: self.reference[l],
                crossings,
                ..LineCorrection::default()
            },
            Some(col) => {
                let (trend_per_s, trend_fitted) = match col.trend {
                    Some((k, h)) => (x[k] / h, true),
                    None => (0.0, false),
                };
                LineCorrection {
                    offset: x[col.offset],
                    trend_per_s,
                    reference_time_s: self.reference[l],
                    crossings,
                    solved: true,
                    trend_fitted,
                }
            }
        }
    }
}

/// The normal equations AᵀA·x = Aᵀd of the crossovers' sparse rows, plus the zero-mean penalty
/// (Σ offsets)² of each connected group, applied from the rows without forming AᵀA.
struct NormalEquations {
    rows: Vec<Vec<(usize, f64)>>,
    groups: Vec<Vec<usize>>,
}

impl NormalEquations {
    /// Aᵀd for the crossover differences `d` and the diagonal of the system (the preconditioner),
    /// over `n` unknowns.
    fn rhs_and_diagonal(&self, d: &[f64], n: usize) -> (Vec<f64>, Vec<f64>) {
        let mut rhs = vec![0.0; n];
        let mut diagonal = vec![0.0; n];
        for (row, di) in self.rows.iter().zip(d) {
            for &(k, a) in row {
                rhs[k] += a * di;
                diagonal[k] += a * a;
            }
        }
        for g in &self.groups {
            for &k in g {
                diagonal[k] += 1.0;
            }
        }
        (rhs, diagonal)
    }

    /// out = (AᵀA + penalty)·v.
    fn apply(&self, v: &[f64], out: &mut [f64]) {
        out.iter_mut().for_each(|o| *o = 0.0);
        for row in &self.rows {
            let rv: f64 = row.iter().map(|&(k, a)| a * v[k]).sum();
            for &(k, a) in row {
                out[k] += a * rv;
            }
        }
        for g in &self.groups {
            let s: f64 = g.iter().map(|&k| v[k]).sum();
            for &k in g {
                out[k] += s;
            }
        }
    }
}
