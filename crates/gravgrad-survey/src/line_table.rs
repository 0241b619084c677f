//! `lines.parquet` (layout `lines/1`): one row per sample of every flight, with the tensor at each
//! stage in Eötvös (docs/formats.md). Columns of a stage are `<stage>_<component>`, components
//! `gxx gxy gxz gyy gyz gzz`; stages in pipeline order: `measured` (sensor frame, calibrated,
//! S = G − ΩΩ), `rotated` (G in NED, true north), `normal_removed`, `terrain_removed`; the models
//! removed are `normal_model` and `terrain_model`; after them `trace` and `alpha_difference_?`, then
//! the line stages `filtered` and `levelled` (`line_stages.rs`; NaN off lines). Unobserved components
//! are NaN.

use crate::pipeline::FlightResult;
use gravgrad_core::SymTensor;
use gravgrad_core::units::EOTVOS;

/// The layout string written into the file's metadata.
pub const LAYOUT: &str = "lines/1";
pub const COMPONENTS: [&str; 6] = ["gxx", "gxy", "gxz", "gyy", "gyz", "gzz"];

/// Sample flags (bit mask in the `flags` column).
pub const FLAG_OFF_LINE: i64 = 1;

/// Every flight's results as the columns of `lines.parquet`.
pub struct LinesTable {
    pub names: Vec<String>,
    pub f64_columns: Vec<Vec<f64>>,
    pub i64_names: Vec<String>,
    pub i64_columns: Vec<Vec<i64>>,
}

fn stage(
    out: &mut Vec<(String, Vec<f64>)>,
    name: &str,
    t: &[&[SymTensor]],
    observed: &[[bool; 6]],
) {
    for (c, comp) in COMPONENTS.iter().enumerate() {
        let mut v = Vec::new();
        for (flight, obs) in t.iter().zip(observed) {
            v.extend(flight.iter().map(|x| {
                if obs[c] {
                    x.to_array()[c] / EOTVOS
                } else {
                    f64::NAN
                }
            }));
        }
        out.push((format!("{name}_{comp}"), v));
    }
}

/// Builds the table from the flights' results, in flight order.
pub fn build(results: &[FlightResult]) -> LinesTable {
    let cat = |f: &dyn Fn(&FlightResult) -> &[f64]| -> Vec<f64> {
        results.iter().flat_map(|r| f(r).iter().copied()).collect()
    };
    let mut cols: Vec<(String, Vec<f64>)> = vec![
        ("time".into(), cat(&|r| &r.time)),
        ("lat".into(), cat(&|r| &r.positions.lat_deg)),
        ("lon".into(), cat(&|r| &r.positions.lon_deg)),
        ("easting".into(), cat(&|r| &r.positions.easting_m)),
        ("northing".into(), cat(&|r| &r.positions.northing_m)),
        ("height".into(), cat(&|r| &r.positions.height_m)),
        (
            "clearance".into(),
            results
                .iter()
                .flat_map(|r| match &r.clearance {
                    Some(c) => c.clone(),
                    None => vec![f64::NAN; r.time.len()],
                })
                .collect(),
        ),
    ];
    let observed: Vec<[bool; 6]> = results.iter().map(|r| r.observed).collect();
    let all = vec![[true; 6]; results.len()];
    let measured: Vec<&[SymTensor]> = results.iter().map(|r| &r.measured[..]).collect();
    let rotated: Vec<&[SymTensor]> = results.iter().map(|r| &r.rotated[..]).collect();
    let normal: Vec<&[SymTensor]> = results.iter().map(|r| &r.normal[..]).collect();
    let free: Vec<Vec<SymTensor>> = results
        .iter()
        .map(|r| {
            r.rotated
                .iter()
                .zip(&r.normal)
                .map(|(g, n)| *g - *n)
                .collect()
        })
        .collect();
    stage(&mut cols, "measured", &measured, &observed);
    stage(&mut cols, "rotated", &rotated, &observed);
    stage(&mut cols, "normal_model", &normal, &all);
    stage(
        &mut cols,
        "normal_removed",
        &free.iter().map(|v| &v[..]).collect::<Vec<_>>(),
        &observed,
    );
    if results.iter().all(|r| r.terrain.is_some()) && !results.is_empty() {
        let terr: Vec<&[SymTensor]> = results
            .iter()
            .map(|r| r.terrain.as_deref().unwrap_or(&[]))
            .collect();
        let removed: Vec<Vec<SymTensor>> = free
            .iter()
            .zip(&terr)
            .map(|(f, t)| f.iter().zip(t.iter()).map(|(a, b)| *a - *b).collect())
            .collect();
        stage(&mut cols, "terrain_model", &terr, &all);
        stage(
            &mut cols,
            "terrain_removed",
            &removed.iter().map(|v| &v[..]).collect::<Vec<_>>(),
            &observed,
        );
    }
    cols.push((
        "trace".into(),
        results
            .iter()
            .flat_map(|r| r.trace.iter().map(|t| t / EOTVOS))
            .collect(),
    ));
    for (k, axis) in ["x", "y", "z"].iter().enumerate() {
        cols.push((
            format!("alpha_difference_{axis}"),
            results
                .iter()
                .flat_map(|r| match &r.alpha_difference {
                    Some(a) => a.iter().map(|v| v[k]).collect::<Vec<_>>(),
                    None => vec![f64::NAN; r.time.len()],
                })
                .collect(),
        ));
    }
    let flight: Vec<i64> = results
        .iter()
        .enumerate()
        .flat_map(|(k, r)| std::iter::repeat_n(k as i64 + 1, r.time.len()))
        .collect();
    let line: Vec<i64> = results.iter().flat_map(|r| r.line.clone()).collect();
    let flags: Vec<i64> = line
        .iter()
        .map(|l| if *l > 0 { 0 } else { FLAG_OFF_LINE })
        .collect();
    let (names, f64_columns) = cols.into_iter().unzip();
    LinesTable {
        names,
        f64_columns,
        i64_names: vec!["flight".into(), "line".into(), "flags".into()],
        i64_columns: vec![flight, line, flags],
    }
}

impl LinesTable {
    /// The column `name` (see the module doc) as an array, one value per sample of every flight;
    /// the integer columns (`flight`, `line`, `flags`) are not floats and are not given here.
    pub fn column(&self, name: &str) -> Option<ndarray::ArrayView1<'_, f64>> {
        let k = self.names.iter().position(|n| n == name)?;
        Some(ndarray::ArrayView1::from(&self.f64_columns[k][..]))
    }
}
