//! One flight from raw log to the reduced tensor along its samples, for `gravgrad run` and
//! `gravgrad calibrate`: positions in the survey's projection, the normal and terrain fields,
//! calibration, rotation-term removal and rotation to NED, then the reductions. The stages are the
//! library crates'; this module only feeds them and collects their results. It reads no file and
//! prints nothing.
//!
//! Frames and units: tensors in s⁻² here (Eötvös only in files), NED with true north unless a name
//! says grid; positions in degrees (geodetic) and projected metres.

use gravgrad_calibrate::channels::{self, ScreenLimits, Screened};
use gravgrad_calibrate::estimate::{self, PairCalibration, PairData};
use gravgrad_calibrate::file::CalibrationFile;
use gravgrad_calibrate::joint::{
    FlightData, KnownField, PairBlocks, PairSamples, estimate_from_blocks,
};
use gravgrad_core::ellipsoid::Ellipsoid;
use gravgrad_core::mat3::Mat3;
use gravgrad_core::pairs::{AlphaSource, PairGeometry, UNKNOWNS, observability};
use gravgrad_core::projection::{TransverseMercator, UTM_LATITUDES_DEG, utm_defined_at};
use gravgrad_core::units::EOTVOS;
use gravgrad_core::{Location, Problem, SymTensor};
use gravgrad_forward::normal::NormalField;
use gravgrad_ingest::check::LoadedFlight;
use gravgrad_ingest::instrument::Instrument;
use gravgrad_ingest::recipe::{AlphaChoice, Recipe};
use gravgrad_rotation::gyro::angular_acceleration3;
use gravgrad_rotation::solve::{Inputs, PairSeries, SolveSettings, SpanCorrection, solve};
use rayon::prelude::*;

/// The `tracing` target of progress events, the same as `gravgrad::run::PROGRESS`: fields `done`
/// and `total`; a stage's event names the stage in the field `stage` as well.
pub const PROGRESS: &str = "gravgrad::progress";

/// The per-flight stages of [`process_flight`], in order: each reports its start as progress
/// (`done` = its index, `total` = their count; the caller's span names the flight) and its
/// duration in [`FlightResult::timings`].
pub const FLIGHT_STAGES: [&str; 4] = [
    "positions and normal field",
    "terrain",
    "calibration",
    "solve and rotation",
];

/// Reports the start of the per-flight stage `k` of [`FLIGHT_STAGES`].
fn stage_started(k: usize) {
    let stage = FLIGHT_STAGES.get(k).copied().unwrap_or_default();
    tracing::info!(target: PROGRESS, done = k, total = FLIGHT_STAGES.len(), stage, "{stage}");
}

/// The survey's map projection: UTM, with its EPSG code.
#[derive(Clone, Copy, Debug)]
pub struct MapFrame {
    pub projection: TransverseMercator,
    pub epsg: u32,
}

/// The projection the recipe asks for: `"utm"` picks the zone of the survey's mean longitude (and
/// the southern variant when the mean latitude is south), `"EPSG:326zz"`/`"EPSG:327zz"` a given zone.
/// A sample outside UTM's latitudes (80°S–84°N) is an error at its row.
pub fn map_frame(
    recipe: &Recipe,
    recipe_path: &std::path::Path,
    flights: &[LoadedFlight],
) -> Result<MapFrame, Problem> {
    let ell = recipe.survey.ellipsoid.params();
    let key = || Location::file(recipe_path).with_key("survey.projection");
    let p = recipe.survey.projection.trim();
    let (zone, south) = if p.eq_ignore_ascii_case("utm") {
        let (mut lat, mut lon, mut n) = (0.0, 0.0, 0usize);
        for f in flights {
            if let (Some(la), Some(lo)) = (f.flight.table.get("lat"), f.flight.table.get("lon")) {
                lat += la.iter().sum::<f64>();
                lon += lo.iter().sum::<f64>();
                n += la.len();
            }
        }
        if n == 0 {
            return Err(Problem::error(
                key(),
                "no positions to choose a UTM zone from",
            ));
        }
        let (lat, lon) = (lat / n as f64, lon / n as f64);
        (TransverseMercator::utm_zone_of(lon), lat < 0.0)
    } else {
        let code = p
            .strip_prefix("EPSG:")
            .or_else(|| p.strip_prefix("epsg:"))
            .and_then(|c| c.parse::<u32>().ok())
            .ok_or_else(|| {
                Problem::error(key(), format!("`{p}`: expected \"utm\" or \"EPSG:<code>\""))
            })?;
        match code {
            32601..=32660 => (code - 32600, false),
            32701..=32760 => (code - 32700, true),
            _ => {
                return Err(Problem::error(
                    key(),
                    format!(
                        "EPSG:{code} is not a UTM zone; gravgrad projects to UTM (EPSG:326zz north, 327zz south)"
                    ),
                ));
            }
        }
    };
    // UTM is defined from 80°S to 84°N only: a sample beyond is refused at its row.
    for f in flights {
        let Some(lat) = f.flight.table.get("lat") else {
            continue;
        };
        if let Some(i) = lat
            .iter()
            .position(|la| la.is_finite() && !utm_defined_at(*la))
        {
            let [lo, hi] = UTM_LATITUDES_DEG;
            return Err(Problem::error(
                f.flight.row_location(i).with_column("lat"),
                format!(
                    "latitude {}° is outside the {}°S to {hi}°N where UTM (recipe                      `survey.projection` = \"{p}\") is defined; gravgrad has no polar projection",
                    lat[i], -lo
                ),
            )
            .with_hint("process polar surveys in a polar stereographic frame outside gravgrad"));
        }
    }
    let projection = TransverseMercator::utm(ell, zone, south)
        .map_err(|e| Problem::error(key(), e.to_string()))?;
    Ok(MapFrame {
        projection,
        epsg: if south { 32700 } else { 32600 } + zone,
    })
}

/// Where every sample is: geodetic, projected, and the convergence.
#[derive(Clone, Debug, Default)]
pub struct Positions {
    pub lat_deg: Vec<f64>,
    pub lon_deg: Vec<f64>,
    pub height_m: Vec<f64>,
    pub easting_m: Vec<f64>,
    pub northing_m: Vec<f64>,
    /// Meridian convergence γ, rad: grid azimuth = true azimuth − γ.
    pub convergence_rad: Vec<f64>,
}

/// Projects a flight's positions.
pub fn positions(frame: &MapFrame, lat: &[f64], lon: &[f64], height: &[f64]) -> Positions {
    let proj: Vec<(f64, f64, f64)> = lat
        .par_iter()
        .zip(lon)
        .map(|(la, lo)| {
            let (e, n, g, _) = frame.projection.forward(la.to_radians(), lo.to_radians());
            (e, n, g)
        })
        .collect();
    Positions {
        lat_deg: lat.to_vec(),
        lon_deg: lon.to_vec(),
        height_m: height.to_vec(),
        easting_m: proj.iter().map(|p| p.0).collect(),
        northing_m: proj.iter().map(|p| p.1).collect(),
        convergence_rad: proj.iter().map(|p| p.2).collect(),
    }
}

/// Rotation about the down axis by `a` (rad): turns a tensor from grid-north axes to true-north axes
/// when `a` is the convergence γ.
pub fn rz(a: f64) -> Mat3 {
    let (s, c) = a.sin_cos();
    [[c, -s, 0.0], [s, c, 0.0], [0.0, 0.0, 1.0]]
}

/// The normal (ellipsoidal) gravitational tensor at every sample, NED, s⁻². Gravitational, not
/// gravity: the solve removes the whole inertial rotation (Earth rate included) through ΩΩ.
pub fn normal_tensor(ell: &Ellipsoid, p: &Positions) -> Vec<SymTensor> {
    let nf = NormalField::new(ell);
    p.lat_deg
        .par_iter()
        .zip(&p.height_m)
        .map(|(la, h)| nf.gravitational_tensor_ned(la.to_radians(), *h))
        .collect()
}

/// How the calibration is obtained.
pub enum CalibrationSource<'a> {
    Estimate,
    File(&'a CalibrationFile),
    None,
}

/// How the one note summing up the held calibration terms begins: "calibration terms held at
/// \<prior\> (…): \<series\> \[\<term\>, …\]; …" (QC tells it from the other notes by this).
pub const HELD_SUMMARY: &str = "calibration terms held at";

/// Standard errors of the difference beyond which a coefficient the instrument should keep (κ,
/// temperature, quadratic) counts as changed from the calibration file. With about a hundred
/// coefficients compared per flight, 3 would be passed by chance on about one flight in four.
pub const FILE_CHANGE_LIMIT: f64 = 4.0;

/// The note a flight calibrated against a file gets when its data put any of the instrument's
/// coefficients beyond [`FILE_CHANGE_LIMIT`] standard errors from the file (`None` otherwise):
/// pair, term and the change in standard errors, largest first.
pub fn file_change_note(
    change: &[(usize, String, f64)],
    instrument: &Instrument,
) -> Option<String> {
    let mut beyond: Vec<&(usize, String, f64)> = change
        .iter()
        .filter(|(_, _, z)| z.abs() > FILE_CHANGE_LIMIT)
        .collect();
    if beyond.is_empty() {
        return None;
    }
    beyond.sort_by(|a, b| b.2.abs().total_cmp(&a.2.abs()));
    let list: Vec<String> = beyond
        .iter()
        .map(|(p, term, z)| {
            let id = instrument.pairs.get(*p).map_or("?", |g| g.id.as_str());
            format!("pair {id} {term} {z:+.1} SE")
        })
        .collect();
    Some(format!(
        "the instrument's coefficients moved from the calibration file beyond {FILE_CHANGE_LIMIT} \
         standard errors ({} of {} compared): {}; the flight's estimate was combined with the \
         file, but a change this large means the instrument or its set-up changed: calibrate again",
        beyond.len(),
        change.len(),
        list.join(", ")
    ))
}

/// The result of processing one flight.
pub struct FlightResult {
    pub positions: Positions,
    pub time: Vec<f64>,
    /// Line number per sample (0 outside lines).
    pub line: Vec<i64>,
    pub clearance: Option<Vec<f64>>,
    /// What the pairs give after calibration: S = sym(G − ΩΩ), sensor frame.
    pub measured: Vec<SymTensor>,
    /// G in NED after ΩΩ removal and rotation.
    pub rotated: Vec<SymTensor>,
    pub normal: Vec<SymTensor>,
    pub terrain: Option<Vec<SymTensor>>,
    /// Trace of the unconstrained solve, s⁻² (NaN where not observed).
    pub trace: Vec<f64>,
    /// Pair-derived minus gyro-derived angular acceleration, rad/s², when the pairs see it.
    pub alpha_difference: Option<Vec<[f64; 3]>>,
    /// Which of Gxx … Gzz are given.
    pub observed: [bool; 6],
    pub heading_only: bool,
    pub alpha_source: AlphaSource,
    pub calibration: Vec<(String, PairCalibration)>,
    /// What the calibration held at its prior, dropped or bridged, one line each, for the log and
    /// QC (empty: every term the model has was determined and applied).
    pub calibration_notes: Vec<String>,
    /// Each term held at its prior, with the reason and the estimate (not kept by the flight
    /// store: empty for a reused flight).
    pub calibration_held: Vec<String>,
    /// Wall time of each stage, s.
    pub timings: Vec<(&'static str, f64)>,
}

/// A required column of the flight, or an error naming it.
fn column<'a>(f: &'a LoadedFlight, name: &str) -> Result<&'a [f64], Problem> {
    f.flight.table.get(name).ok_or_else(|| {
        Problem::error(
            f.flight.source.clone().with_column(name),
            "required column missing",
        )
    })
}

/// With the angular acceleration from the gyros and any pair that sees it (b × n ≠ 0), the note
/// that the gyro-to-sensor misalignment ε is not modelled: it leaves (b × n)·(ε × α) in those pairs
/// (docs/methods/calibration.md). `None` with α from the pairs, where ε reaches the tensor only
/// through ΩΩ (below 0.01 E at 1 mrad on a stabilised platform).
pub fn gyro_alignment_note(source: AlphaSource, pairs: &[PairGeometry]) -> Option<String> {
    if source != AlphaSource::Gyros {
        return None;
    }
    let cross: Vec<&str> = pairs
        .iter()
        .filter(|g| {
            let c = gravgrad_core::mat3::cross(&g.baseline, &g.axis);
            gravgrad_core::mat3::norm(&c) > 1e-9 * gravgrad_core::mat3::norm(&g.baseline)
        })
        .map(|g| g.id.as_str())
        .collect();
    (!cross.is_empty()).then(|| {
        format!(
            "angular acceleration from the gyros: the gyros' misalignment against the sensor is not \
             modelled, and pairs {} carry (b × n)·(ε × α) from it (about 100 E per mrad in \
             turbulence); the tensor is only as good as the gyros' mounting",
            cross.join(", ")
        )
    })
}

/// The angular-acceleration source: the recipe's, or for `auto` the pairs when they see α and every
/// requested component, else the gyros.
pub fn alpha_source(recipe: &Recipe, pairs: &[PairGeometry]) -> AlphaSource {
    match recipe.rotation.angular_acceleration {
        AlphaChoice::Pairs => AlphaSource::Pairs,
        AlphaChoice::Gyros => AlphaSource::Gyros,
        AlphaChoice::Auto => {
            let obs = observability(pairs, AlphaSource::Pairs, recipe.rotation.trace_constraint);
            let all = UNKNOWNS[6..].iter().all(|a| obs.sees(a))
                && recipe.rotation.components.iter().all(|c| obs.sees(c));
            if all {
                AlphaSource::Pairs
            } else {
                AlphaSource::Gyros
            }
        }
    }
}

/// Processes one flight: calibration, solve and rotation, normal field; the terrain tensor (NED,
/// true north) is supplied by the caller when the recipe has a DEM. Each stage's start is reported
/// as progress ([`FLIGHT_STAGES`]).
pub fn process_flight(
    recipe: &Recipe,
    instrument: &Instrument,
    flight: &LoadedFlight,
    frame: &MapFrame,
    calibration: CalibrationSource<'_>,
    terrain: impl FnOnce(&Positions) -> Result<Option<Vec<SymTensor>>, Problem>,
) -> Result<FlightResult, Problem> {
    let time = column(flight, "time")?;
    let n = time.len();
    let rate = flight
        .time_base
        .as_ref()
        .map(|t| t.rate_hz)
        .ok_or_else(|| {
            Problem::error(
                flight.flight.source.clone().with_column("time"),
                "no usable time base",
            )
        })?;
    let get3 = |names: [&str; 3]| -> Result<[&[f64]; 3], Problem> {
        Ok([
            column(flight, names[0])?,
            column(flight, names[1])?,
            column(flight, names[2])?,
        ])
    };
    let omega = get3(["wx", "wy", "wz"])?;
    let f = get3(["fx", "fy", "fz"])?;
    let [roll, pitch, heading] = get3(["roll", "pitch", "heading"])?;
    stage_started(0);
    let mut timings = Vec::new();
    let mut clock = std::time::Instant::now();
    let mut lap = |name: &'static str, t: &mut Vec<(&'static str, f64)>| {
        t.push((name, clock.elapsed().as_secs_f64()));
        clock = std::time::Instant::now();
    };
    let pos = positions(
        frame,
        column(flight, "lat")?,
        column(flight, "lon")?,
        column(flight, "height")?,
    );
    let ell = recipe
        .normal
        .ellipsoid
        .unwrap_or(recipe.survey.ellipsoid)
        .params();
    let normal = normal_tensor(ell, &pos);
    lap("positions and normal field", &mut timings);
    stage_started(1);
    let terrain = terrain(&pos)?;
    lap("terrain", &mut timings);
    stage_started(2);

    let mut line = vec![0i64; n];
    for s in &flight.lines {
        for l in &mut line[s.start..s.end.min(n)] {
            *l = s.line;
        }
    }
    let usable: Vec<bool> = line.iter().map(|l| *l > 0).collect();

    let pair_a: Vec<&[f64]> = instrument
        .pairs
        .iter()
        .map(|g| column(flight, &format!("{}_a", g.id)))
        .collect::<Result<_, _>>()?;
    let pair_b: Vec<&[f64]> = instrument
        .pairs
        .iter()
        .map(|g| column(flight, &format!("{}_b", g.id)))
        .collect::<Result<_, _>>()?;
    let mut notes: Vec<String> = Vec::new();
    let settings = calibration_settings(recipe, flight, &pos, &line, rate, &mut notes)?;
    let stored: Option<Vec<PairCalibration>> = match &calibration {
        CalibrationSource::File(file) => Some(
            instrument
                .pairs
                .iter()
                .map(|g| {
                    file.get(&g.id).ok_or_else(|| {
                        Problem::error(
                            Location::file(&instrument.path).with_key("pair"),
                            format!("the calibration file has no pair `{}`", g.id),
                        )
                    })
                })
                .collect::<Result<_, _>>()?,
        ),
        _ => None,
    };
    let samples = PairSamples {
        pairs: &instrument.pairs,
        a: pair_a.clone(),
        b: pair_b.clone(),
        // The fit forms the known field's part of each difference as it reads the samples.
        known: Some(KnownField {
            normal: &normal,
            terrain: terrain.as_deref(),
            attitude_deg: [roll, pitch, heading],
        }),
        omega,
    };
    let fitted = !matches!(calibration, CalibrationSource::None);
    // The gyros' angular acceleration (three recursions interleaved on one core) beside the
    // common-mode force and the block means of the pairs' samples (spans of samples, on the other
    // core and whatever the first leaves).
    let (alpha_gyro, (f_common, blocks)) = rayon::join(
        || angular_acceleration3(omega, rate, recipe.rotation.gyro_lowpass_hz),
        || {
            (
                common_mode_force(&instrument.pairs, &pair_a, &pair_b, f),
                fitted.then(|| PairBlocks::of(&samples, &settings)),
            )
        },
    );
    // Optional regressor channels screened: a constant channel, or one with empty or NaN cells
    // beyond short bridgeable runs, drops its term (with a note) instead of making NaN.
    let mut screened = |name: &str, limits: ScreenLimits| -> Option<std::borrow::Cow<'_, [f64]>> {
        let x = flight.flight.table.get(name)?;
        match channels::screen(name, x, Some(&usable), rate, limits) {
            Screened::Use(v, note) => {
                notes.extend(note);
                Some(v)
            }
            Screened::Drop(why) => {
                notes.push(why);
                None
            }
        }
    };
    let temperature_c = if fitted {
        screened("temp", ScreenLimits::TEMPERATURE)
    } else {
        None
    };
    let temperature: Option<&[f64]> = temperature_c.as_deref();
    let (ac_roll, ac_pitch) = if fitted {
        (
            screened("ac_roll", ScreenLimits::ATTITUDE),
            screened("ac_pitch", ScreenLimits::ATTITUDE),
        )
    } else {
        (None, None)
    };
    if fitted && (ac_roll.is_some() != ac_pitch.is_some()) {
        notes.push("the self-gradient term needs both `ac_roll` and `ac_pitch`: dropped".into());
    }
    if let Some(file) = &stored
        && temperature.is_none()
        && file.iter().any(|c| c.temperature.is_some())
        && flight.flight.table.get("temp").is_some()
    {
        notes.push(
            "the calibration file's temperature term is not applied (no usable `temp`)".into(),
        );
    }
    let relative: Option<[Vec<f64>; 2]> = match (ac_roll.as_deref(), ac_pitch.as_deref()) {
        (Some(ar), Some(ap)) => Some([
            ar.iter()
                .zip(roll)
                .map(|(a, s)| (a - s).to_radians())
                .collect(),
            ap.iter()
                .zip(pitch)
                .map(|(a, s)| (a - s).to_radians())
                .collect(),
        ]),
        _ => None,
    };
    let alpha_source = alpha_source(recipe, &instrument.pairs);
    if let Some(note) = gyro_alignment_note(alpha_source, &instrument.pairs) {
        notes.push(note);
    }
    let f: [&[f64]; 3] = [&f_common[0], &f_common[1], &f_common[2]];
    let crossings = if fitted {
        flight_crossings(flight, &pos, time, recipe.level.first_tie_line, rate)
    } else {
        Vec::new()
    };
    let data = FlightData {
        samples,
        f,
        alpha: [&alpha_gyro[0], &alpha_gyro[1], &alpha_gyro[2]],
        time,
        temperature,
        usable: Some(&usable),
        relative_attitude: relative.as_ref().map(|r| [&r[0][..], &r[1][..]]),
        alpha_from_pairs: alpha_source == AlphaSource::Pairs,
        crossings: Some(&crossings),
    };
    // Block means formed already: the pair outputs are not read again here.
    let fitted_cal = blocks.map(|b| estimate_from_blocks(&data, &b, &settings, stored.as_deref()));
    let mut held_lines = Vec::new();
    let cals: Option<Vec<PairCalibration>> = fitted_cal.map(|fc| {
        let prior = if stored.is_some() {
            "the file's value"
        } else {
            "zero"
        };
        // One line per fitted series for the log; one per term for the report.
        notes.extend(fc.health.notes.iter().cloned());
        let mut summary: Vec<(String, Vec<String>)> = Vec::new();
        for (series, h) in &fc.health.held {
            // One standard error's effect over the flight, in E: the tensor's unknowns are in
            // s⁻²; a pair's own residual in m/s², over its baseline.
            let to_e = |v: f64| -> Option<f64> {
                if UNKNOWNS[..6].contains(&series.as_str()) {
                    Some(v / EOTVOS)
                } else {
                    let id = series.strip_prefix("pair ")?;
                    let g = instrument.pairs.iter().find(|g| g.id == id)?;
                    Some(v / gravgrad_core::mat3::norm(&g.baseline) / EOTVOS)
                }
            };
            held_lines.push(format!(
                "{series}: {} held at {prior} — {}{}{}",
                h.term,
                h.reason,
                h.estimate.map_or(String::new(), |e| format!(
                    " (estimate {:.3e} ± {:.1e})",
                    e.value, e.std_error
                )),
                h.effect_rms
                    .and_then(to_e)
                    .map_or(String::new(), |e| format!(
                        "; one standard error is {e:.3} E RMS over the flight"
                    ))
            ));
            match summary.iter_mut().find(|(s, _)| s == series) {
                Some((_, terms)) => terms.push(h.term.clone()),
                None => summary.push((series.clone(), vec![h.term.clone()])),
            }
        }
        if !summary.is_empty() {
            notes.push(format!(
                "{HELD_SUMMARY} {prior} (not resolved, or below {} standard errors): {}",
                settings.min_significance,
                summary
                    .iter()
                    .map(|(s, t)| format!("{s} [{}]", t.join(", ")))
                    .collect::<Vec<_>>()
                    .join("; ")
            ));
        }
        if let Some(note) = file_change_note(&fc.health.file_change, instrument) {
            notes.push(note);
        }
        fc.pairs
    });
    // With a file, terms the file has but the flight cannot use (e.g. temperature) are not
    // applied: the correction below reads only what the flight has.
    lap("calibration", &mut timings);
    stage_started(3);
    // The calibration is applied as the solve reads each span of `a` (b as logged): no corrected
    // series is kept.
    drop(data);
    let alpha: [&[f64]; 3] = [&alpha_gyro[0], &alpha_gyro[1], &alpha_gyro[2]];
    let relative_attitude = relative.as_ref().map(|r| [&r[0][..], &r[1][..]]);
    let corrections: Vec<Box<SpanCorrection<'_>>> = match &cals {
        Some(c) => instrument
            .pairs
            .iter()
            .zip(c)
            .map(|(g, cal)| {
                let pd = PairData {
                    geometry: g,
                    // Not read by the correction.
                    difference: &[],
                    omega,
                    f,
                    alpha,
                    time,
                    temperature,
                    usable: None,
                    expected: None,
                    relative_attitude,
                };
                Box::new(move |first: usize, x: &[f64], out: &mut [f64]| {
                    cal.subtract_span(&pd, first, x, out)
                }) as Box<SpanCorrection<'_>>
            })
            .collect(),
        None => Vec::new(),
    };
    let series: Vec<PairSeries<'_>> = instrument
        .pairs
        .iter()
        .enumerate()
        .map(|(k, g)| PairSeries {
            geometry: g,
            a: pair_a[k],
            b: pair_b[k],
            correction: corrections.get(k).map(|c| &**c),
        })
        .collect();
    let inputs = Inputs {
        pairs: series,
        omega,
        roll_deg: roll,
        pitch_deg: pitch,
        heading_deg: heading,
        rate_hz: rate,
        alpha_gyro: Some([&alpha_gyro[0], &alpha_gyro[1], &alpha_gyro[2]]),
    };
    let solve_settings = SolveSettings {
        alpha: alpha_source,
        trace_constraint: recipe.rotation.trace_constraint,
        gyro_lowpass_hz: recipe.rotation.gyro_lowpass_hz,
        components: recipe.rotation.components.clone(),
    };
    let sol = solve(&inputs, &solve_settings).map_err(|e| {
        Problem::error(
            Location::file(&instrument.path).with_key("pair"),
            e.to_string(),
        )
    })?;
    lap("solve and rotation", &mut timings);
    // In place: the pairs' α less the gyros'.
    let alpha_difference = sol.alpha_pairs.map(|mut ap| {
        ap.par_iter_mut().enumerate().for_each(|(i, p)| {
            *p = [
                p[0] - alpha_gyro[0][i],
                p[1] - alpha_gyro[1][i],
                p[2] - alpha_gyro[2][i],
            ]
        });
        ap
    });
    drop(corrections);
    let calibration = match cals {
        Some(c) => instrument
            .pairs
            .iter()
            .map(|g| g.id.clone())
            .zip(c)
            .collect(),
        None => Vec::new(),
    };
    Ok(FlightResult {
        positions: pos,
        time: time.to_vec(),
        line,
        clearance: flight.flight.table.get("clearance").map(<[f64]>::to_vec),
        measured: sol.measured,
        rotated: sol.tensor_ned,
        normal,
        terrain,
        trace: sol.trace,
        alpha_difference,
        observed: sol.observed,
        heading_only: sol.heading_only,
        alpha_source,
        calibration,
        calibration_notes: notes,
        calibration_held: held_lines,
        timings,
    })
}

/// Where the flight's survey lines cross its tie lines (line number at least `first_tie`): the
/// nearest sample of each pass, survey first. Positions in the map frame, m. The tracks are
/// searched at about 2 samples per second (every `step`-th sample; lines are straight over half a
/// second), and the crossing's fractional position is turned back into the full rate's sample.
fn flight_crossings(
    flight: &LoadedFlight,
    pos: &Positions,
    time: &[f64],
    first_tie: i64,
    rate_hz: f64,
) -> Vec<(usize, usize)> {
    let step = ((rate_hz / 2.0).floor() as usize).max(1);
    let thin = |v: &[f64]| -> Vec<f64> { v.iter().step_by(step).copied().collect() };
    let (tt, xt, yt) = (thin(time), thin(&pos.easting_m), thin(&pos.northing_m));
    let zeros = vec![0.0; tt.len()];
    // A segment's samples on the thinned time base: those with index ≡ 0 (mod step).
    let range =
        |s: &gravgrad_ingest::segment::Segment| s.start.div_ceil(step)..s.end.div_ceil(step);
    let track = |s: &gravgrad_ingest::segment::Segment| {
        let r = range(s);
        gravgrad_lines::crossover::Track {
            time_s: &tt[r.clone()],
            x_m: &xt[r.clone()],
            y_m: &yt[r.clone()],
            value: &zeros[r],
        }
    };
    let (survey, ties): (Vec<_>, Vec<_>) = flight
        .lines
        .iter()
        .filter(|s| s.end <= time.len() && range(s).len() > 1)
        .partition(|s| s.line < first_tie);
    let st: Vec<_> = survey.iter().map(|s| track(s)).collect();
    let tt: Vec<_> = ties.iter().map(|s| track(s)).collect();
    let Ok(found) = gravgrad_lines::crossover::find_crossovers(&st, &tt) else {
        return Vec::new();
    };
    let sample = |s: &gravgrad_ingest::segment::Segment, position: f64| -> usize {
        let i = range(s).start * step + (position * step as f64).round() as usize;
        i.clamp(s.start, s.end - 1)
    };
    found
        .iter()
        .map(|c| {
            (
                sample(survey[c.survey], c.survey_position),
                sample(ties[c.tie], c.tie_position),
            )
        })
        .collect()
}

/// The calibration settings for one flight: the recipe's, with the band's low edge raised to the
/// median line speed over the shortest geology wavelength (so that the coupling fit stays above
/// the geology's band), and checked against the Nyquist frequency.
fn calibration_settings(
    recipe: &Recipe,
    flight: &LoadedFlight,
    pos: &Positions,
    line: &[i64],
    rate: f64,
    notes: &mut Vec<String>,
) -> Result<estimate::Settings, Problem> {
    let c = &recipe.calibration;
    let [lo, hi] = c.band_hz;
    if hi >= 0.5 * rate {
        // The recipe's file name is not kept with it: the flight it fails for is named, with the key.
        return Err(Problem::error(
            flight.flight.source.clone().with_key("calibration.band_hz"),
            format!(
                "the recipe's band top {hi} Hz is not below this flight's Nyquist frequency {} Hz \
                 (sampled at {rate} Hz)",
                0.5 * rate
            ),
        )
        .with_hint(format!(
            "set calibration.band_hz below {} Hz in the recipe",
            0.5 * rate
        )));
    }
    let on_line = |i: usize| line[i] > 0;
    let median_of = |v: Vec<f64>| -> Option<f64> {
        let mut v: Vec<f64> = v.into_iter().filter(|x| x.is_finite()).collect();
        gravgrad_core::stats::median(&mut v)
    };
    // Ground speed from consecutive projected positions on the lines, and the clearance, at about
    // 50,000 samples of the flight (their medians do not need more).
    let time = flight.flight.table.get("time").unwrap_or(&[]);
    let every = (line.len() / 50_000).max(1);
    let speed = median_of(
        (1..line.len().min(time.len()))
            .step_by(every)
            .filter(|&i| on_line(i) && line[i - 1] == line[i] && time[i] > time[i - 1])
            .map(|i| {
                (pos.easting_m[i] - pos.easting_m[i - 1])
                    .hypot(pos.northing_m[i] - pos.northing_m[i - 1])
                    / (time[i] - time[i - 1])
            })
            .collect(),
    );
    let clearance = flight.flight.table.get("clearance").and_then(|cl| {
        median_of(
            (0..line.len())
                .step_by(every)
                .filter(|&i| on_line(i))
                .map(|i| cl[i])
                .collect(),
        )
    });
    let wavelength = c
        .geology_wavelength_m
        .or(clearance.map(|h| 4.0 * h))
        .unwrap_or(400.0);
    let mut band = [lo, hi];
    if let Some(v) = speed {
        let edge = v / wavelength;
        if edge > lo {
            if edge >= 0.8 * hi {
                notes.push(format!(
                    "calibration band: geology reaches {edge:.2} Hz at {v:.0} m/s (wavelengths \
                     down to {wavelength:.0} m), too close to the band's top {hi} Hz; the low \
                     edge is kept at {:.2} Hz and geology may leak into the coupling",
                    0.8 * hi
                ));
                band[0] = 0.8 * hi;
            } else {
                band[0] = edge;
            }
        }
    }
    Ok(estimate::Settings {
        band_hz: band,
        drift_order: c.drift_order as usize,
        rate_hz: rate,
        quadratic: c.quadratic,
        min_significance: c.min_significance,
        gyro_rate: c.gyro_bias,
        rotation_coupling: c.axis_errors,
    })
}

/// The specific force at the sensor, sensor axes, m/s², from the accelerometer pairs' common mode
/// (a + b)/2, averaged over the pairs whose axis lies along each sensor axis; the logged `fx fy fz`
/// where no pair does. The coupling κ multiplies the force the accelerometers feel: applying it to
/// the navigation system's noisier f (1e-3 m/s² of noise × κ of 1e-5 is 50 E over a 0.2 m
/// baseline) would add that noise to the tensor, while the pairs' own accelerometers are quieter by
/// orders of magnitude. The common mode carries the accelerometers' biases as a constant, which the
/// calibration's bias term takes up.
pub fn common_mode_force(
    pairs: &[PairGeometry],
    a: &[&[f64]],
    b: &[&[f64]],
    logged: [&[f64]; 3],
) -> [Vec<f64>; 3] {
    const SPAN: usize = 4096;
    std::array::from_fn(|k| {
        let along: Vec<(usize, f64)> = pairs
            .iter()
            .enumerate()
            .filter(|(_, g)| g.axis[k].abs() > 1.0 - 1e-9)
            .map(|(i, g)| (i, g.axis[k].signum()))
            .collect();
        if along.is_empty() {
            return logged[k].to_vec();
        }
        let w = 1.0 / along.len() as f64;
        // Span by span, pair by pair across the span (vectorised); a zeroed vector's pages are
        // first touched, and mapped, by the span that writes them, on every core.
        let mut out = vec![0.0; logged[k].len()];
        out.par_chunks_mut(SPAN).enumerate().for_each(|(q, o)| {
            let r = q * SPAN..q * SPAN + o.len();
            for (i, sign) in &along {
                let h = 0.5 * sign;
                for ((x, av), bv) in o.iter_mut().zip(&a[*i][r.clone()]).zip(&b[*i][r.clone()]) {
                    *x += h * (av + bv);
                }
            }
            for x in o.iter_mut() {
                *x *= w;
            }
        });
        out
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn gyro_alpha_names_the_pairs_a_gyro_misalignment_reaches() {
        let pairs: Vec<PairGeometry> = ["xx", "zz", "xy", "yz"]
            .iter()
            .filter_map(|id| gravgrad_sim::simulate::standard_pair(id, 0.2))
            .collect();
        assert_eq!(pairs.len(), 4);
        assert_eq!(gyro_alignment_note(AlphaSource::Pairs, &pairs), None);
        let note = gyro_alignment_note(AlphaSource::Gyros, &pairs).unwrap();
        // In-line pairs (b ∥ n) do not see α; the cross pairs do.
        assert!(note.contains("pairs xy, yz carry"), "{note}");
        let inline: Vec<PairGeometry> = pairs[..2].to_vec();
        assert_eq!(gyro_alignment_note(AlphaSource::Gyros, &inline), None);
    }
}
