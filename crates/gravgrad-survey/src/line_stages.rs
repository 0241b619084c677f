//! The line stages of `gravgrad run` and `gravgrad qc`: each line's reduced tensor (terrain removed
//! when the recipe has a DEM, else normal removed) is low-passed along track with the recipe's
//! `[filter] cutoff_wavelength_m`, each piece between gaps on its own (a gap splits the line), then levelled from the crossovers of survey lines with tie lines
//! (`[level]`), component by component. The stages are `gravgrad-lines`'; this module cuts the
//! flights into lines, feeds them and collects the results. It prints nothing.
//!
//! Units: Eötvös throughout (the filter and the levelling are linear, so they keep the unit they are
//! given); positions are the survey projection's easting and northing, m; time s.

use crate::line_table::{COMPONENTS, LinesTable};
use crate::pipeline::FlightResult;
use gravgrad_core::units::EOTVOS;
use gravgrad_core::{Location, Problem};
use gravgrad_ingest::recipe::{Recipe, TieHandling};
use gravgrad_lines::crossover::Crossover;
use gravgrad_lines::filter::low_pass_line;
use gravgrad_lines::level::{LevelMode, LevelSettings, Levelling};
use gravgrad_lines::{LinesError, LowPass, Track, find_crossovers, level};
use rayon::prelude::*;
use std::path::Path;

/// One flown line: a run of consecutive samples of one flight with the same line number.
#[derive(Clone, Debug, PartialEq)]
pub struct Segment {
    /// Index of the flight in the run.
    pub flight: usize,
    pub line: i64,
    /// Sample range in the flight.
    pub start: usize,
    pub end: usize,
    /// A tie line (`line ≥ level.first_tie_line`).
    pub tie: bool,
}

impl Segment {
    pub fn range(&self) -> std::ops::Range<usize> {
        self.start..self.end
    }
}

/// The levelling of one component.
pub struct ComponentLevelling {
    /// Crossovers; `survey` and `tie` index `survey_segments` and `tie_segments`.
    pub crossovers: Vec<Crossover>,
    pub result: Levelling,
    pub survey_segments: Vec<usize>,
    pub tie_segments: Vec<usize>,
}

impl ComponentLevelling {
    /// The correction (offset E, trend E/s, crossings) of segment `k`, if it took part.
    pub fn correction_of(&self, k: usize) -> Option<&gravgrad_lines::LineCorrection> {
        if let Some(i) = self.survey_segments.iter().position(|s| *s == k) {
            return self.result.survey.get(i);
        }
        let i = self.tie_segments.iter().position(|s| *s == k)?;
        self.result.ties.get(i)
    }
}

/// The filtered and levelled stages of every line.
pub struct LineStages {
    /// `terrain_removed` or `normal_removed`: the stage that was filtered.
    pub reduced_stage: &'static str,
    pub segments: Vec<Segment>,
    /// Per flight and component, E; NaN off lines and where the component is not observed.
    pub filtered: Vec<[Vec<f64>; 6]>,
    pub levelled: Vec<[Vec<f64>; 6]>,
    /// Per component; `None` when the component is not observed or there are no tie lines.
    pub levelling: [Option<ComponentLevelling>; 6],
    /// Which components are observed in every flight.
    pub observed: [bool; 6],
    /// Plain remarks for the log (lines not levelled, lines too short to filter).
    pub notes: Vec<String>,
}

/// The runs of equal positive line numbers in each flight.
pub fn segments(results: &[FlightResult], first_tie_line: i64) -> Vec<Segment> {
    let mut out = Vec::new();
    for (f, r) in results.iter().enumerate() {
        let mut i = 0;
        while i < r.line.len() {
            let l = r.line[i];
            let mut j = i + 1;
            while j < r.line.len() && r.line[j] == l {
                j += 1;
            }
            if l > 0 {
                out.push(Segment {
                    flight: f,
                    line: l,
                    start: i,
                    end: j,
                    tie: l >= first_tie_line,
                });
            }
            i = j;
        }
    }
    out
}

/// The reduced tensor's component `c` at sample `i`, E (NaN where not observed).
pub fn reduced(r: &FlightResult, c: usize, i: usize) -> f64 {
    if !r.observed[c] {
        return f64::NAN;
    }
    let mut g = r.rotated[i] - r.normal[i];
    if let Some(t) = &r.terrain {
        g = g - t[i];
    }
    g.to_array()[c] / EOTVOS
}

/// Filters and levels every line of the run.
///
/// Errors: a cutoff wavelength too short for the sampling (named by its recipe key).
pub fn compute(
    results: &[FlightResult],
    recipe: &Recipe,
    recipe_path: &Path,
) -> Result<LineStages, Problem> {
    let segs = segments(results, recipe.level.first_tie_line);
    let lp = LowPass {
        cutoff_wavelength_m: recipe.filter.cutoff_wavelength_m,
        ..LowPass::default()
    };
    let observed: [bool; 6] =
        std::array::from_fn(|c| !results.is_empty() && results.iter().all(|r| r.observed[c]));
    let reduced_stage = if !results.is_empty() && results.iter().all(|r| r.terrain.is_some()) {
        "terrain_removed"
    } else {
        "normal_removed"
    };
    // Filter: every (line, component) on its own, collected in order.
    let jobs: Vec<(usize, usize)> = (0..segs.len())
        .flat_map(|k| (0..6).map(move |c| (k, c)))
        .filter(|(_, c)| observed[*c])
        .collect();
    let filtered_pieces: Vec<Result<Vec<f64>, LinesError>> = jobs
        .par_iter()
        .map(|&(k, c)| {
            let s = &segs[k];
            let r = &results[s.flight];
            let v: Vec<f64> = s.range().map(|i| reduced(r, c, i)).collect();
            low_pass_line(
                &r.time[s.range()],
                &r.positions.easting_m[s.range()],
                &r.positions.northing_m[s.range()],
                &v,
                &lp,
            )
            .map(|(f, _)| f)
        })
        .collect();
    let mut filtered: Vec<[Vec<f64>; 6]> = results
        .iter()
        .map(|r| std::array::from_fn(|_| vec![f64::NAN; r.time.len()]))
        .collect();
    for (&(k, c), piece) in jobs.iter().zip(filtered_pieces) {
        let piece = piece.map_err(|e| {
            Problem::error(
                Location::file(recipe_path).with_key("filter.cutoff_wavelength_m"),
                e.to_string(),
            )
        })?;
        let s = &segs[k];
        filtered[s.flight][c][s.range()].copy_from_slice(&piece);
    }
    let mut notes = Vec::new();
    for s in &segs {
        if (0..6)
            .filter(|c| observed[*c])
            .any(|c| filtered[s.flight][c][s.range()].iter().all(|v| v.is_nan()))
        {
            notes.push(format!(
                "line {} (flight {}): too short to filter; left out of the filtered and levelled stages",
                s.line,
                s.flight + 1
            ));
        }
    }

    // Level.
    let survey_idx: Vec<usize> = (0..segs.len()).filter(|k| !segs[*k].tie).collect();
    let tie_idx: Vec<usize> = (0..segs.len()).filter(|k| segs[*k].tie).collect();
    let settings = LevelSettings {
        mode: match recipe.level.tie_lines {
            TieHandling::Reference => LevelMode::Reference,
            TieHandling::ZeroMean => LevelMode::ZeroMean,
        },
        trend: recipe.level.trend,
        ..LevelSettings::default()
    };
    let mut levelled = filtered.clone();
    let mut levelling: [Option<ComponentLevelling>; 6] = std::array::from_fn(|_| None);
    if tie_idx.is_empty() || survey_idx.is_empty() {
        notes.push(format!(
            "no crossovers to level from: {} survey lines and {} tie lines (tie lines are numbered from level.first_tie_line = {}); levelled = filtered",
            survey_idx.len(),
            tie_idx.len(),
            recipe.level.first_tie_line
        ));
    } else {
        for c in (0..6).filter(|c| observed[*c]) {
            let track = |k: &usize| {
                let s = &segs[*k];
                let r = &results[s.flight];
                Track {
                    time_s: &r.time[s.range()],
                    x_m: &r.positions.easting_m[s.range()],
                    y_m: &r.positions.northing_m[s.range()],
                    value: &filtered[s.flight][c][s.range()],
                }
            };
            let survey: Vec<Track<'_>> = survey_idx.iter().map(track).collect();
            let ties: Vec<Track<'_>> = tie_idx.iter().map(track).collect();
            let internal = |e: LinesError| {
                Problem::error(
                    Location::file(recipe_path).with_key("level"),
                    format!("levelling {}: {e}", COMPONENTS[c]),
                )
            };
            let crossovers = find_crossovers(&survey, &ties).map_err(internal)?;
            let result =
                level(&crossovers, survey.len(), ties.len(), &settings).map_err(internal)?;
            for (list, corr) in [(&survey_idx, &result.survey), (&tie_idx, &result.ties)] {
                for (k, co) in list.iter().zip(corr) {
                    let s = &segs[*k];
                    let r = &results[s.flight];
                    let out = &mut levelled[s.flight][c];
                    for i in s.range() {
                        out[i] -= co.at(r.time[i]);
                    }
                }
            }
            if c == 5 {
                for &l in &result.survey_without_crossings {
                    let s = &segs[survey_idx[l]];
                    notes.push(format!(
                        "survey line {} (flight {}) crosses no tie line: not levelled",
                        s.line,
                        s.flight + 1
                    ));
                }
            }
            levelling[c] = Some(ComponentLevelling {
                crossovers,
                result,
                survey_segments: survey_idx.clone(),
                tie_segments: tie_idx.clone(),
            });
        }
    }
    Ok(LineStages {
        reduced_stage,
        segments: segs,
        filtered,
        levelled,
        levelling,
        observed,
        notes,
    })
}

impl LineStages {
    /// Adds `filtered_g??` and `levelled_g??` (E; NaN off lines) to the lines table, in flight order.
    pub fn append_to(&self, table: &mut LinesTable) {
        for (stage, data) in [("filtered", &self.filtered), ("levelled", &self.levelled)] {
            for (c, comp) in COMPONENTS.iter().enumerate() {
                table.names.push(format!("{stage}_{comp}"));
                table
                    .f64_columns
                    .push(data.iter().flat_map(|f| f[c].iter().copied()).collect());
            }
        }
    }
}
