//! The processing recipe (`docs/formats.md`, layout `recipe/1`): one TOML file that drives a whole
//! run. Every key has a default documented in `docs/recipe.md`; an unknown key is an error naming
//! its path. Paths are relative to the recipe's folder.

use crate::columns::ColumnMap;
use crate::segment::LineRules;
use crate::tomlfile;
use gravgrad_core::ellipsoid::EllipsoidName;
use gravgrad_core::pairs::AlphaSource;
use gravgrad_core::{Location, Problem};
use serde::{Deserialize, Serialize};
use std::path::{Path, PathBuf};

pub const LAYOUT: &str = "recipe/1";

#[derive(Clone, Debug, Deserialize, Serialize)]
#[serde(deny_unknown_fields)]
pub struct Recipe {
    pub layout: String,
    #[serde(default)]
    pub survey: Survey,
    pub input: Input,
    pub instrument: InstrumentRef,
    #[serde(default)]
    pub calibration: Calibration,
    #[serde(default)]
    pub rotation: Rotation,
    #[serde(default)]
    pub normal: Normal,
    #[serde(default)]
    pub terrain: Option<Terrain>,
    #[serde(default)]
    pub filter: Filter,
    #[serde(default)]
    pub level: Level,
    #[serde(default)]
    pub grid: Grid,
    #[serde(default)]
    pub output: Output,
    #[serde(default)]
    pub qc: Qc,
    /// The recipe's folder, which relative paths start from (not a key of the file).
    #[serde(skip)]
    pub folder: PathBuf,
}

#[derive(Clone, Debug, Deserialize, Serialize)]
#[serde(deny_unknown_fields, default)]
pub struct Survey {
    pub name: String,
    /// `"utm"` (zone from the survey centre) or `"EPSG:<code>"`.
    pub projection: String,
    pub ellipsoid: EllipsoidName,
}

impl Default for Survey {
    fn default() -> Self {
        Self {
            name: "survey".into(),
            projection: "utm".into(),
            ellipsoid: EllipsoidName::Grs80,
        }
    }
}

#[derive(Clone, Debug, Deserialize, Serialize)]
#[serde(deny_unknown_fields)]
pub struct Input {
    /// Flight files or glob patterns.
    pub flights: Vec<String>,
    /// Optional navigation table merged onto the gradiometer's time base.
    #[serde(default)]
    pub navigation: Option<String>,
    /// Longest navigation gap interpolated across, s.
    #[serde(default = "default_nav_gap")]
    pub navigation_max_gap_s: f64,
    /// Allowed sample-interval deviation, relative to the nominal interval.
    #[serde(default = "default_jitter")]
    pub jitter_tolerance: f64,
    /// Layout name → logger's column and unit conversion.
    #[serde(default)]
    pub columns: ColumnMap,
    #[serde(default)]
    pub line_finder: LineRules,
}

fn default_nav_gap() -> f64 {
    1.0
}
fn default_jitter() -> f64 {
    0.01
}

#[derive(Clone, Debug, Deserialize, Serialize)]
#[serde(deny_unknown_fields)]
pub struct InstrumentRef {
    pub path: String,
}

#[derive(Clone, Copy, Debug, PartialEq, Eq, Deserialize, Serialize, Default)]
#[serde(rename_all = "lowercase")]
pub enum CalibrationMode {
    #[default]
    Estimate,
    File,
    /// No calibration: pair outputs are used as logged (error-free simulations, or data calibrated
    /// upstream).
    None,
}

#[derive(Clone, Debug, Deserialize, Serialize)]
#[serde(deny_unknown_fields, default)]
pub struct Calibration {
    pub mode: CalibrationMode,
    pub file: Option<String>,
    /// Band where aircraft motion dominates, Hz.
    pub band_hz: [f64; 2],
    /// Polynomial order of the drift in time.
    pub drift_order: u32,
    /// Also estimate the accelerometers' quadratic and cross-axis terms (products of the specific
    /// force's components), where the data resolve them.
    pub quadratic: bool,
    /// A coefficient is applied only when its estimate exceeds this many standard errors; below,
    /// it is held at its prior (the calibration file's value, else zero).
    pub min_significance: f64,
    /// Also estimate, flight by flight, what the gyros' bias leaves in the centrifugal correction
    /// (terms linear in the angular rate), where the data resolve it.
    pub gyro_bias: bool,
    /// Also estimate each pair's axis error against the gyros' frame (the pair's coupling to the
    /// angular acceleration and the centripetal terms), where the data resolve it.
    pub axis_errors: bool,
    /// Shortest wavelength of the geology, m: the band's low edge is raised, flight by flight, to
    /// the median line speed over this wavelength, so that the fit does not take geology for
    /// motion coupling. Absent: 4 × the median clearance over the lines when the log has a
    /// `clearance` column, else 400 m.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub geology_wavelength_m: Option<f64>,
}

impl Default for Calibration {
    fn default() -> Self {
        Self {
            mode: CalibrationMode::Estimate,
            file: None,
            band_hz: [0.05, 1.0],
            drift_order: 1,
            quadratic: true,
            min_significance: 4.0,
            gyro_bias: true,
            axis_errors: true,
            geology_wavelength_m: None,
        }
    }
}

#[derive(Clone, Copy, Debug, PartialEq, Eq, Deserialize, Serialize, Default)]
#[serde(rename_all = "lowercase")]
pub enum AlphaChoice {
    /// From the pairs where they observe it, else from the gyros.
    #[default]
    Auto,
    Pairs,
    Gyros,
}

#[derive(Clone, Debug, Deserialize, Serialize)]
#[serde(deny_unknown_fields, default)]
pub struct Rotation {
    pub angular_acceleration: AlphaChoice,
    pub trace_constraint: bool,
    /// Components the run must deliver.
    pub components: Vec<String>,
    /// Low-pass applied to gyro rates before differentiation, Hz.
    pub gyro_lowpass_hz: f64,
}

impl Default for Rotation {
    fn default() -> Self {
        Self {
            angular_acceleration: AlphaChoice::Auto,
            trace_constraint: false,
            components: ["Gxx", "Gxy", "Gxz", "Gyy", "Gyz", "Gzz"]
                .map(String::from)
                .to_vec(),
            gyro_lowpass_hz: 2.0,
        }
    }
}

impl Rotation {
    pub fn alpha_source(&self) -> Option<AlphaSource> {
        match self.angular_acceleration {
            AlphaChoice::Auto => None,
            AlphaChoice::Pairs => Some(AlphaSource::Pairs),
            AlphaChoice::Gyros => Some(AlphaSource::Gyros),
        }
    }
}

#[derive(Clone, Debug, Deserialize, Serialize, Default)]
#[serde(deny_unknown_fields, default)]
pub struct Normal {
    /// Defaults to the survey's ellipsoid.
    pub ellipsoid: Option<EllipsoidName>,
}

#[derive(Clone, Debug, Deserialize, Serialize)]
#[serde(deny_unknown_fields)]
pub struct Terrain {
    pub dem: String,
    #[serde(default = "default_density")]
    pub density_kg_m3: f64,
    #[serde(default)]
    pub water_density_kg_m3: Option<f64>,
    #[serde(default = "default_margin")]
    pub margin_m: f64,
    /// Target accuracy of the fast terrain engine, E.
    #[serde(default = "default_terrain_accuracy")]
    pub accuracy_e: f64,
    /// Level (m above the ellipsoid) from which the terrain mass is counted: above it with +density,
    /// below it with −density. Absent: the DEM's mean elevation.
    #[serde(default)]
    pub reference_m: Option<f64>,
}

fn default_density() -> f64 {
    2670.0
}
fn default_margin() -> f64 {
    5000.0
}
fn default_terrain_accuracy() -> f64 {
    0.1
}

#[derive(Clone, Debug, Deserialize, Serialize)]
#[serde(deny_unknown_fields, default)]
pub struct Filter {
    pub cutoff_wavelength_m: f64,
}

impl Default for Filter {
    fn default() -> Self {
        Self {
            cutoff_wavelength_m: 400.0,
        }
    }
}

#[derive(Clone, Copy, Debug, PartialEq, Eq, Deserialize, Serialize, Default)]
#[serde(rename_all = "kebab-case")]
pub enum TieHandling {
    /// Tie lines are the reference; survey lines move to them.
    #[default]
    Reference,
    /// All lines adjust, with zero mean adjustment.
    ZeroMean,
}

#[derive(Clone, Debug, Deserialize, Serialize)]
#[serde(deny_unknown_fields, default)]
pub struct Level {
    pub tie_lines: TieHandling,
    /// Line numbers from this one up are tie lines.
    pub first_tie_line: i64,
    /// Also fit a linear trend in time per line.
    pub trend: bool,
}

impl Default for Level {
    fn default() -> Self {
        Self {
            tie_lines: TieHandling::Reference,
            first_tie_line: 9000,
            trend: false,
        }
    }
}

#[derive(Clone, Debug, Deserialize, Serialize)]
#[serde(deny_unknown_fields, default)]
pub struct Grid {
    /// Cell size, m. Absent: a quarter of the survey's line spacing, rounded down to 1, 2, 2.5 or
    /// 5 times a power of ten (50 m when the spacing cannot be found; `gravgrad_grid::spacing`).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub cell_m: Option<f64>,
    /// Tension of minimum-curvature gridding, 0 (pure minimum curvature) to 1.
    pub tension: f64,
    /// Cells farther than this from data are left empty, m. Absent: 0.6 × the line spacing, at
    /// least 250 m (250 m when the spacing cannot be found).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub blanking_m: Option<f64>,
    /// Upward continuation of the derived full tensor and gz, m (0: the flight surface).
    pub upward_continuation_m: f64,
    /// Most nodes the grid lattice may have before the run is refused. Absent: the default limit
    /// (500,000, about 0.5 GB and under a minute of gridding); a large survey may raise it
    /// deliberately, up to [`MAX_GRID_NODES_ALLOWED`].
    #[serde(skip_serializing_if = "Option::is_none")]
    pub max_nodes: Option<u64>,
}

/// The most `grid.max_nodes` may allow: about 2 GB resident at about 1 kB a node.
pub const MAX_GRID_NODES_ALLOWED: u64 = 2_000_000;

impl Default for Grid {
    fn default() -> Self {
        Self {
            cell_m: None,
            tension: 0.25,
            blanking_m: None,
            upward_continuation_m: 0.0,
            max_nodes: None,
        }
    }
}

#[derive(Clone, Debug, Deserialize, Serialize)]
#[serde(deny_unknown_fields, default)]
pub struct Output {
    pub folder: String,
    pub lines_csv: bool,
    pub formats: Vec<String>,
}

impl Default for Output {
    fn default() -> Self {
        Self {
            folder: "products".into(),
            lines_csv: false,
            formats: ["parquet", "netcdf", "geotiff", "hdf5", "png"]
                .map(String::from)
                .to_vec(),
        }
    }
}

#[derive(Clone, Debug, Deserialize, Serialize)]
#[serde(deny_unknown_fields, default)]
pub struct Qc {
    /// Largest cross-track deviation from the planned line, m.
    pub max_line_deviation_m: f64,
    /// Largest departure of clearance from the drape plan, m.
    pub clearance_tolerance_m: f64,
    /// Largest RMS vertical acceleration, m/s².
    pub max_turbulence_m_s2: f64,
    /// Largest noise after filtering, E RMS.
    pub max_noise_e: f64,
    /// Longest gap inside a line, s.
    pub max_gap_s: f64,
    /// Largest RMS of a component's motion part in the motion band (the part the aircraft's
    /// specific force, its products, angular rate and acceleration explain, when the fit is
    /// significant at 0.1 %), E.
    pub max_motion_e: f64,
    /// Band of the motion-correlation test, Hz (the upper edge is clipped below the Nyquist
    /// frequency).
    pub motion_band_hz: [f64; 2],
    /// Clearance of the drape plan, m (absent: clearance is not judged).
    pub planned_clearance_m: Option<f64>,
    /// CSV of planned lines (docs/formats.md); absent: a line's deviation is measured from its own
    /// straight chord.
    pub plan: Option<String>,
}

impl Default for Qc {
    fn default() -> Self {
        Self {
            max_line_deviation_m: 50.0,
            clearance_tolerance_m: 30.0,
            max_turbulence_m_s2: 1.0,
            max_noise_e: 5.0,
            max_gap_s: 2.0,
            max_motion_e: 0.5,
            motion_band_hz: [0.1, 1.0],
            planned_clearance_m: None,
            plan: None,
        }
    }
}

const COMPONENTS: [&str; 6] = ["Gxx", "Gxy", "Gxz", "Gyy", "Gyz", "Gzz"];
const FORMATS: [&str; 6] = ["parquet", "csv", "netcdf", "geotiff", "hdf5", "png"];

/// Reads a recipe and checks every value that can be checked without reading the data.
pub fn read_recipe(path: &Path) -> Result<Recipe, Vec<Problem>> {
    let mut r: Recipe = tomlfile::read(path).map_err(|p| vec![p])?;
    r.folder = path.parent().map(Path::to_path_buf).unwrap_or_default();
    let flights_listed = !r.input.flights.is_empty();
    match (checked(r, path), flights_listed) {
        (Ok(r), true) => Ok(r),
        (res, listed) => {
            let mut p = res.err().unwrap_or_default();
            if !listed {
                p.push(Problem::error(
                    Location::file(path).with_key("input.flights"),
                    "no flight files listed",
                ));
            }
            Err(p)
        }
    }
}

/// A recipe from its TOML text, checked as [`read_recipe`] checks a file, except that it need
/// not list flight files (a survey in memory brings its flights as arrays); `name` names it in
/// messages, and relative paths in it start from `folder`.
///
/// ```
/// use gravgrad_ingest::recipe::parse_recipe;
/// use std::path::Path;
/// let text = "layout = \"recipe/1\"\n[input]\nflights = []\n[instrument]\npath = \"i.toml\"\n";
/// let r = parse_recipe(Path::new("recipe (in memory)"), text, Path::new(".")).unwrap();
/// assert_eq!(r.survey.projection, "utm");
/// ```
pub fn parse_recipe(name: &Path, text: &str, folder: &Path) -> Result<Recipe, Vec<Problem>> {
    let mut r: Recipe = tomlfile::parse(name, text).map_err(|p| vec![p])?;
    r.folder = folder.to_path_buf();
    checked(r, name)
}

/// Every key of `r` checked against its range and meaning (`path` names the recipe in messages).
fn checked(r: Recipe, path: &Path) -> Result<Recipe, Vec<Problem>> {
    let loc = |key: &str| Location::file(path).with_key(key);
    let mut p = Vec::new();
    for (key, v, range) in numeric_keys(&r) {
        if !range.contains(v) {
            p.push(Problem::error(
                loc(key),
                format!("{}: expected {}", show(v), range.describe()),
            ));
        }
    }
    for (key, [lo, hi]) in [
        ("qc.motion_band_hz", r.qc.motion_band_hz),
        ("calibration.band_hz", r.calibration.band_hz),
    ] {
        if !(lo.is_finite() && hi.is_finite() && lo > 0.0 && hi > lo && hi <= MAX_BAND_HZ) {
            p.push(Problem::error(
                loc(key),
                format!(
                    "[{}, {}] is not a band: expected 0 < low < high ≤ {MAX_BAND_HZ} (Hz)",
                    show(lo),
                    show(hi)
                ),
            ));
        }
    }
    if r.calibration.drift_order > 5 {
        p.push(Problem::error(
            loc("calibration.drift_order"),
            "drift polynomials above order 5 fit geology, not drift",
        ));
    }
    let up = r.grid.upward_continuation_m;
    if !(up.is_finite() && (0.0..=MAX_CONTINUATION_M).contains(&up)) {
        p.push(Problem::error(
            loc("grid.upward_continuation_m"),
            format!(
                "{}: expected a distance from 0 to {MAX_CONTINUATION_M} m (continuation downwards is not offered)",
                show(up)
            ),
        ));
    }
    if r.calibration.mode == CalibrationMode::File && r.calibration.file.is_none() {
        p.push(Problem::error(
            loc("calibration.file"),
            "mode = \"file\" needs `file = \"…\"`",
        ));
    }
    if r.layout != LAYOUT {
        p.push(Problem::error(
            loc("layout"),
            format!("layout is `{}`, expected `{LAYOUT}`", r.layout),
        ));
    }
    let proj = r.survey.projection.as_str();
    let epsg_ok = proj
        .strip_prefix("EPSG:")
        .is_some_and(|c| !c.is_empty() && c.chars().all(|d| d.is_ascii_digit()));
    if proj != "utm" && !epsg_ok {
        p.push(Problem::error(
            loc("survey.projection"),
            format!("`{proj}`: expected \"utm\" or \"EPSG:<code>\""),
        ));
    }
    for (i, c) in r.rotation.components.iter().enumerate() {
        if !COMPONENTS.contains(&c.as_str()) {
            p.push(Problem::error(
                loc(&format!("rotation.components[{i}]")),
                format!("`{c}`: expected one of {}", COMPONENTS.join(", ")),
            ));
        }
    }
    for (i, f) in r.output.formats.iter().enumerate() {
        if !FORMATS.contains(&f.as_str()) {
            p.push(Problem::error(
                loc(&format!("output.formats[{i}]")),
                format!("`{f}`: expected one of {}", FORMATS.join(", ")),
            ));
        }
    }
    for (name, src) in &r.input.columns {
        if !(src.scale.is_finite() && src.scale != 0.0 && src.offset.is_finite()) {
            p.push(Problem::error(
                loc(&format!("input.columns.{name}")),
                "scale must be finite and non-zero, offset finite",
            ));
        }
    }
    if p.is_empty() { Ok(r) } else { Err(p) }
}

/// The farthest upward continuation a recipe may ask for, m.
pub const MAX_CONTINUATION_M: f64 = 10_000.0;

/// The highest band edge a recipe may name, Hz: above every gradiometer's sampling.
pub const MAX_BAND_HZ: f64 = 1000.0;

/// The range a numeric recipe key must lie in (both ends finite; `open_low`: the low end itself is
/// excluded, as for a size that must be positive).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Range {
    pub low: f64,
    pub high: f64,
    pub open_low: bool,
    /// Unit as printed after the numbers ("m", "kg/m³", "" for plain numbers).
    pub unit: &'static str,
}

impl Range {
    const fn above(low: f64, high: f64, unit: &'static str) -> Self {
        Self {
            low,
            high,
            open_low: true,
            unit,
        }
    }
    const fn from(low: f64, high: f64, unit: &'static str) -> Self {
        Self {
            low,
            high,
            open_low: false,
            unit,
        }
    }

    /// Whether `v` is finite and inside the range.
    pub fn contains(&self, v: f64) -> bool {
        v.is_finite()
            && v <= self.high
            && if self.open_low {
                v > self.low
            } else {
                v >= self.low
            }
    }

    /// "more than 0 and at most 100000 m", "from 1 to 100".
    pub fn describe(&self) -> String {
        let u = if self.unit.is_empty() {
            String::new()
        } else {
            format!(" {}", self.unit)
        };
        if self.open_low {
            format!(
                "more than {} and at most {}{u}",
                show(self.low),
                show(self.high)
            )
        } else {
            format!("from {} to {}{u}", show(self.low), show(self.high))
        }
    }
}

/// A number as a user writes it: plain for ordinary magnitudes, exponent form otherwise.
fn show(v: f64) -> String {
    if v != 0.0 && v.is_finite() && !(1e-3..1e7).contains(&v.abs()) {
        format!("{v:e}")
    } else {
        format!("{v}")
    }
}

/// Every numeric key the recipe sets (or defaults), with its value and the physically sensible
/// range it must lie in (`docs/recipe.md`, "Limits"). Optional keys appear only when set.
pub fn numeric_keys(r: &Recipe) -> Vec<(&'static str, f64, Range)> {
    let lf = &r.input.line_finder;
    let mut v = vec![
        (
            "input.navigation_max_gap_s",
            r.input.navigation_max_gap_s,
            Range::above(0.0, 3600.0, "s"),
        ),
        (
            "input.jitter_tolerance",
            r.input.jitter_tolerance,
            Range::above(0.0, 0.5, "of the sample interval"),
        ),
        (
            "input.line_finder.min_duration_s",
            lf.min_duration_s,
            Range::above(0.0, 86_400.0, "s"),
        ),
        (
            "input.line_finder.max_turn_rate_deg_s",
            lf.max_turn_rate_deg_s,
            Range::above(0.0, 30.0, "°/s"),
        ),
        (
            "input.line_finder.window_s",
            lf.window_s,
            Range::above(0.0, 600.0, "s"),
        ),
        (
            "input.line_finder.max_deviation_m",
            lf.max_deviation_m,
            Range::above(0.0, 100_000.0, "m"),
        ),
        (
            "calibration.min_significance",
            r.calibration.min_significance,
            Range::from(1.0, 100.0, "standard errors"),
        ),
        (
            "rotation.gyro_lowpass_hz",
            r.rotation.gyro_lowpass_hz,
            Range::above(0.0, MAX_BAND_HZ, "Hz"),
        ),
        (
            "filter.cutoff_wavelength_m",
            r.filter.cutoff_wavelength_m,
            Range::from(10.0, 100_000.0, "m"),
        ),
        (
            "level.first_tie_line",
            r.level.first_tie_line as f64,
            Range::from(1.0, 1e9, ""),
        ),
        ("grid.tension", r.grid.tension, Range::from(0.0, 1.0, "")),
        (
            "qc.max_line_deviation_m",
            r.qc.max_line_deviation_m,
            Range::above(0.0, 10_000.0, "m"),
        ),
        (
            "qc.clearance_tolerance_m",
            r.qc.clearance_tolerance_m,
            Range::above(0.0, 10_000.0, "m"),
        ),
        (
            "qc.max_turbulence_m_s2",
            r.qc.max_turbulence_m_s2,
            Range::above(0.0, 100.0, "m/s²"),
        ),
        (
            "qc.max_noise_e",
            r.qc.max_noise_e,
            Range::above(0.0, 10_000.0, "E"),
        ),
        (
            "qc.max_gap_s",
            r.qc.max_gap_s,
            Range::above(0.0, 3600.0, "s"),
        ),
        (
            "qc.max_motion_e",
            r.qc.max_motion_e,
            Range::above(0.0, 10_000.0, "E"),
        ),
    ];
    let mut opt = |key: &'static str, value: Option<f64>, range: Range| {
        if let Some(x) = value {
            v.push((key, x, range));
        }
    };
    opt(
        "calibration.geology_wavelength_m",
        r.calibration.geology_wavelength_m,
        Range::from(1.0, 100_000.0, "m"),
    );
    opt(
        "grid.cell_m",
        r.grid.cell_m,
        Range::from(1.0, 10_000.0, "m"),
    );
    opt(
        "grid.blanking_m",
        r.grid.blanking_m,
        Range::above(0.0, 100_000.0, "m"),
    );
    opt(
        "grid.max_nodes",
        r.grid.max_nodes.map(|n| n as f64),
        Range::from(1000.0, MAX_GRID_NODES_ALLOWED as f64, "nodes"),
    );
    opt(
        "qc.planned_clearance_m",
        r.qc.planned_clearance_m,
        Range::above(0.0, 10_000.0, "m"),
    );
    if let Some(t) = &r.terrain {
        v.push((
            "terrain.density_kg_m3",
            t.density_kg_m3,
            Range::from(500.0, 5000.0, "kg/m³"),
        ));
        v.push((
            "terrain.margin_m",
            t.margin_m,
            Range::from(0.0, 200_000.0, "m"),
        ));
        v.push((
            "terrain.accuracy_e",
            t.accuracy_e,
            Range::from(0.001, 100.0, "E"),
        ));
        if let Some(w) = t.water_density_kg_m3 {
            v.push((
                "terrain.water_density_kg_m3",
                w,
                Range::from(900.0, 1100.0, "kg/m³"),
            ));
        }
        if let Some(h) = t.reference_m {
            v.push((
                "terrain.reference_m",
                h,
                Range::from(MIN_ELEVATION_M, MAX_ELEVATION_M, "m"),
            ));
        }
    }
    v
}

/// Plausible elevations of the Earth's surface, m above the ellipsoid: below the deepest ocean
/// trench (about −11,000 m) and above the highest summit (about 8,850 m) with room for the geoid.
pub const MIN_ELEVATION_M: f64 = -11_000.0;
/// See [`MIN_ELEVATION_M`].
pub const MAX_ELEVATION_M: f64 = 9_000.0;

impl Recipe {
    /// A path from the recipe, resolved against the recipe's folder.
    pub fn resolve(&self, rel: &str) -> PathBuf {
        let p = Path::new(rel);
        if p.is_absolute() {
            p.to_path_buf()
        } else {
            self.folder.join(p)
        }
    }

    /// The flight files, globs expanded, in sorted order; a pattern that matches nothing is an error.
    /// A flight is named by its file's stem, so two files with one stem are an error naming both
    /// and their keys: the same file listed twice, the same log in two formats (`x.csv` beside
    /// `x.parquet`), or two logs of one name in two folders.
    pub fn flight_files(&self, recipe_path: &Path) -> Result<Vec<PathBuf>, Vec<Problem>> {
        let mut out = Vec::new();
        let mut keys = Vec::new();
        let mut problems = Vec::new();
        for (i, pat) in self.input.flights.iter().enumerate() {
            let full = self.resolve(pat);
            let key = format!("input.flights[{i}]");
            let Some(text) = full.to_str() else {
                problems.push(Problem::error(
                    Location::file(recipe_path).with_key(key),
                    "path is not valid UTF-8",
                ));
                continue;
            };
            match glob::glob(text) {
                Ok(paths) => {
                    let mut found: Vec<PathBuf> = paths.filter_map(Result::ok).collect();
                    found.sort();
                    if found.is_empty() {
                        problems.push(
                            Problem::error(
                                Location::file(recipe_path).with_key(key),
                                format!("`{pat}` matches no file"),
                            )
                            .with_hint("paths are relative to the recipe's folder"),
                        );
                    }
                    keys.extend(std::iter::repeat_n(i, found.len()));
                    out.extend(found);
                }
                Err(e) => problems.push(Problem::error(
                    Location::file(recipe_path).with_key(key),
                    format!("bad pattern `{pat}`: {e}"),
                )),
            }
        }
        problems.extend(same_names(recipe_path, &out, &keys));
        if problems.is_empty() {
            Ok(out)
        } else {
            Err(problems)
        }
    }
}

/// The errors of flight files that share a name (file stem): `files[k]` came from
/// `input.flights[keys[k]]`.
fn same_names(recipe_path: &Path, files: &[PathBuf], keys: &[usize]) -> Vec<Problem> {
    let stem = |p: &Path| p.file_stem().map(|s| s.to_string_lossy().into_owned());
    let canon = |p: &Path| p.canonicalize().unwrap_or_else(|_| p.to_path_buf());
    let mut seen: Vec<(String, usize)> = Vec::new();
    let mut problems = Vec::new();
    for (k, f) in files.iter().enumerate() {
        let Some(name) = stem(f) else { continue };
        let Some(&(_, first)) = seen.iter().find(|(n, _)| *n == name) else {
            seen.push((name, k));
            continue;
        };
        let (a, b) = (&files[first], f);
        let what = if canon(a) == canon(b) {
            format!("`{}` is listed twice", b.display())
        } else if canon(a).parent() == canon(b).parent() {
            format!(
                "`{}` and `{}` are the same log in two formats; list one",
                a.display(),
                b.display()
            )
        } else {
            format!(
                "`{}` and `{}` would both be the flight `{name}` (one calibration file, one \
                 stored result); rename one",
                a.display(),
                b.display()
            )
        };
        problems.push(
            Problem::error(
                Location::file(recipe_path).with_key(format!("input.flights[{}]", keys[k])),
                format!(
                    "{what} (input.flights[{}] and input.flights[{}])",
                    keys[first], keys[k]
                ),
            )
            .with_hint("a flight is named by its file name without extension"),
        );
    }
    problems
}
